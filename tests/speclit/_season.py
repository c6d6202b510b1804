"""One season: scenes placed in time, triggered and recorded; candidates per batch.

Cataloguing practices:

- ``every``: every pulse whose own field peak at the station reaches the trigger
  level is a candidate (its trigger sample is the first at ``trigger_fraction``
  of that peak; its neighbours are inside its record); at most
  ``max_per_flash`` of one class per flash are kept, at random.
- ``records``: the digitizer takes ONE record per trigger and is then dead for
  the rest of the record plus ``dead_time_s``: later pulses are inside the record
  or lost. The event's label is the class of the pulse that triggered.

Pulses of classes that were not requested still happen (they are in the
records as neighbours); under ``records`` they also trigger and use up dead
time, but their records are not catalogued.

The requested mix is met exactly: each class's quota is split between the
flash types that make it (table ``SHARES``, our choice), scenes are drawn for
the stratum furthest behind its quota, strata running ahead keep their new
candidates with a probability (``Season._acceptance``) that spreads them over
the whole season, and the surplus of each stratum is left out of the catalog
at random at the end. Left-out pulses stay in the records as uncatalogued
neighbours, as an analyst's selection would leave them.

Cost: every pulse gets a cheap look (8 elements, 32 times) for its window and
static field; exact waveforms are computed only for candidates and for the
pulses inside their records; earlier pulses enter as held static steps.
"""

from __future__ import annotations

import numpy as np

from features import InputError

from ._classes import CLASSES, KIND, KINDS
from ._compose import Composer, segments, take, truth
from ._flashes import FTYPES, PULSE_FIELDS, cg_scene, ic_scene, nbe_scene
from ._instrument import Windows, coarse, field_windows, merge_spans

__all__ = ["SHARES", "quotas", "Season"]

#: class -> {flash type: share of the class's quota} (our choice).
SHARES = {"narrow_bipolar": {"nbe": 1.0},
          "stepped_leader": {"cg": 0.6, "ic": 0.4},
          "recoil": {"ic": 0.6, "cg": 0.4},
          "energetic_in_cloud": {"ic_eip": 1.0},
          "return_stroke": {"cg": 1.0},
          "initial_breakdown": {"cg": 0.7, "ic": 0.3}}
SCENES = ("nbe", "ic", "ic_eip", "cg")
_PRIOR_YIELD = 3.0
_BATCH_SCENES = 300


def quotas(n_events, classes, mix):
    """Events per (class, scene type), summing to ``n_events`` (largest remainders)."""
    share = {c: (1.0 if mix is None else float(mix.get(c, 0.0))) for c in classes}
    tot = sum(share.values())
    want = {(c, t): n_events * share[c] / tot * f
            for c in classes for t, f in SHARES[c].items() if share[c] > 0}
    base = {k: int(np.floor(v)) for k, v in want.items()}
    left = n_events - sum(base.values())
    for k in sorted(want, key=lambda k: (-(want[k] - base[k]), k))[:left]:
        base[k] += 1
    return {k: v for k, v in base.items() if v > 0}


class Season(Composer):
    """Generates candidate events batch by batch (see :meth:`run`)."""

    def __init__(self, settings, n_events, seed):
        self.s = settings
        self.rng = np.random.default_rng(seed)
        self.quota = quotas(n_events, settings["classes"], settings["mix"])
        self.made = dict.fromkeys(self.quota, 0)
        self.raw = dict.fromkeys(self.quota, 0.0)      # made / acceptance: unthinned yield
        self.yields = {t: {} for t in SCENES}
        self.n_scenes = dict.fromkeys(SCENES, 0)
        self.fs = settings["field_rate_hz"]
        self.n_rec = int(round(settings["field_record_s"] * self.fs))
        self.n_pre = int(round(settings["field_pretrigger_s"] * self.fs))
        self.oversample = settings["field_oversample"] or max(1, int(np.ceil(50e6 / self.fs)))
        if settings["vhf_kind"]:
            self.fv = settings["vhf_rate_hz"]
            self.nv_rec = int(round(settings["vhf_record_s"] * self.fv))
        self.t_ns = int(np.datetime64(settings["start_utc"], "ns").astype(np.int64))
        self.storm_left = 0
        self.scene_index = 0
        self.n_batches = 0

    # -- scene choice -------------------------------------------------------------
    def _expected(self, scene, key):
        """Candidates of stratum ``key`` per scene of type ``scene`` (unthinned)."""
        y = self.yields[scene].get(key, 0.0)
        n = self.n_scenes[scene]
        prior = _PRIOR_YIELD if key[1] == scene else 0.0
        return (y + prior) / (n + 1)

    def _plan(self):
        left = {k: self.quota[k] - self.made[k] for k in self.quota}
        if all(v <= 0 for v in left.values()):
            return []
        plan = []
        est = dict(left)
        size = min(_BATCH_SCENES, 40 * 2 ** self.n_batches)
        self.n_batches += 1
        while len(plan) < size and any(v > 0 for v in est.values()):
            key = max(est, key=lambda k: (est[k] / self.quota[k], k))
            scene = key[1]
            plan.append(scene)
            for k in est:
                est[k] -= self._expected(scene, k)
            if len(plan) > 5 * sum(max(v, 0) for v in left.values()) + 20:
                break
        return plan

    # -- scenes ---------------------------------------------------------------------
    def _next_storm(self):
        lo, hi = self.s["storm_distance_m"]
        d = np.exp(self.rng.uniform(np.log(lo), np.log(hi)))
        a = self.rng.uniform(0, 2 * np.pi)
        self.storm_xy = np.array([d * np.sin(a), d * np.cos(a)])
        lo_n, hi_n = self.s["scenes_per_storm"]
        self.storm_left = int(self.rng.integers(int(lo_n), int(hi_n) + 1))
        self.t_ns += int(self.rng.uniform(0.5, 3.0) * 86400e9)

    def _build(self, scene):
        if self.storm_left <= 0:
            self._next_storm()
        self.storm_left -= 1
        rng = self.rng
        if scene == "nbe":
            p = nbe_scene(rng, self.storm_xy)
        elif scene == "cg":
            p = cg_scene(rng, self.storm_xy)
        else:
            p = ic_scene(rng, self.storm_xy, eip=(scene == "ic_eip" or rng.random() < 0.1))
        self.t_ns += int(rng.exponential(self.s["scene_gap_s"]) * 1e9) + int(1e9)
        t0 = self.t_ns
        self.t_ns += int((p["t0_s"].max() + 0.01) * 1e9)
        self.scene_index += 1
        return p, t0, self.scene_index

    # -- one batch ------------------------------------------------------------------
    def run(self):
        """Yield batches of candidate events (dicts of arrays; see ``_compose``)."""
        while True:
            plan = self._plan()
            if not plan:
                return
            dead = [k for k in self.quota if self.made[k] == 0 and self.n_scenes[k[1]] >= 100]
            if dead or sum(self.n_scenes.values()) > 40 * sum(self.quota.values()) + 2000:
                short = {f"{c} ({t})": self.quota[(c, t)] - self.made[(c, t)]
                         for c, t in self.quota if self.made[(c, t)] < self.quota[(c, t)]}
                raise InputError(f"could not reach the requested mix: still short of {short} "
                                 "pulses over the trigger level; lower 'trigger_v_per_m' or "
                                 "change 'storm_distance_m'")
            built = [(scene, *self._build(scene)) for scene in plan]
            batch = self._batch(built, self._acceptance(plan))
            for scene in plan:
                self.n_scenes[scene] += 1
            if batch is None:
                continue
            for scene, lab, ft, acc in zip(batch["scene"], batch["label"], batch["ftype"],
                                           batch["accept"]):
                key = (str(lab), str(ft))
                self.yields[scene][key] = self.yields[scene].get(key, 0) + 1.0 / acc
                if key in self.made:
                    self.made[key] += 1
                    self.raw[key] += 1.0 / acc
            yield batch

    def _acceptance(self, plan):
        """Keep-probability of each stratum's new candidates in this batch.

        ``expected[k]`` is what the planned scenes would make of stratum ``k``
        (yields per scene type so far); the generation will run about ``left``
        such batches, ``left`` set by the stratum furthest behind. A stratum
        keeps a candidate with probability ``1.3 * need / (expected * left)``
        (at least 0.02, so that late scenes still contribute; our rule: it
        spreads every class over the whole season, and the final trim makes
        the counts exact).
        """
        expected = {k: sum(self._expected(t, k) for t in plan) for k in self.quota}
        need = {k: max(self.quota[k] - self.made[k], 0) for k in self.quota}
        left = max([need[k] / expected[k] for k in self.quota if expected[k] > 0] + [1.0])
        return {k: 1.0 if expected[k] <= 0 else
                float(np.clip(1.3 * need[k] / (expected[k] * left), 0.02, 1.0))
                for k in self.quota}

    def _batch(self, built, acc):
        s, fs = self.s, self.fs
        sizes = [b[1]["kind"].size for b in built]
        bounds = np.concatenate([[0], np.cumsum(sizes)])
        allp = {k: np.concatenate([b[1][k] for b in built]) for k in PULSE_FIELDS}
        live = allp["current_a"] > 0
        self._kind = allp["kind"]
        ftype = np.array(FTYPES)[allp["ftype"]]
        ftype = np.where(allp["kind"] == KIND["energetic_in_cloud"], "ic_eip", ftype)
        names = np.array(KINDS)[allp["kind"]]
        self._accept = np.array([acc.get((c, f), 1.0) for c, f in zip(names, ftype)])
        self._ftype = ftype
        capable = live & np.isin(allp["kind"], [KIND[c] for c in CLASSES])
        wanted = np.isin(allp["kind"], [KIND[c] for c in s["classes"]])
        if s["practice"] == "every":        # the acceptance draw comes first: look at fewer
            self._drawn = self.rng.random(live.size) < self._accept
            look = capable & wanted & self._drawn
        else:
            look = capable
        lv = np.flatnonzero(live)
        cz = coarse(segments(allp, lv), fs, look=look[lv])
        n_all = live.size
        peak = np.zeros(n_all)
        first = np.zeros(n_all, np.int64)
        last = np.zeros(n_all, np.int64)
        final = np.zeros(n_all)
        peak[lv], first[lv], last[lv], final[lv] = cz["peak"], cz["first"], cz["last"], \
            cz["final"]
        # 1: candidates from the estimates, then their exact waveforms
        cands = [self._candidates(np.arange(bounds[i], bounds[i + 1]), capable, wanted, peak,
                                  first) for i in range(len(built))]
        ids1 = np.concatenate(cands) if cands else np.zeros(0, int)
        w1 = field_windows(segments(allp, ids1), fs, self.oversample)
        exact = dict(zip(ids1.tolist(), range(ids1.size)))
        pk1, tr1 = w1.peak_abs(), w1.first_above(s["trigger_fraction"] * w1.peak_abs())
        # 2: exact triggers, records, and the other pulses inside the records
        picks, needs, stops = [], [], []
        for i, c in enumerate(cands):
            j = np.array([exact[k] for k in c.tolist()], int)
            pick = self._pick(c, pk1[j], tr1[j])
            picks.append(pick)
            if pick[0].size == 0:
                needs.append(np.zeros(0, int))
                stops.append(0)
                continue
            rs = pick[1] - self.n_pre
            stop = int(rs.max()) + self.n_rec
            span_lo, span_hi, _ = merge_spans(rs, rs + self.n_rec, gap=0)
            idx = np.flatnonzero(live[bounds[i]:bounds[i + 1]]) + bounds[i]
            k = np.searchsorted(span_hi, first[idx], side="right")
            overlap = (k < span_lo.size) & (span_lo[np.minimum(k, span_lo.size - 1)] < last[idx])
            needs.append(idx[overlap & (first[idx] < stop)])
            stops.append(stop)
        fresh = [np.setdiff1d(nd, ids1) for nd in needs]
        ids2 = np.concatenate(fresh) if fresh else np.zeros(0, int)
        stop2 = np.concatenate([np.full(f.size, st, np.int64) for f, st in zip(fresh, stops)])
        w2 = field_windows(segments(allp, ids2), fs, self.oversample, stop=stop2)
        exact2 = dict(zip(ids2.tolist(), range(ids2.size)))
        # 3: sferics and truth of the whole batch at once, then each scene's records
        rows = [i for i in range(len(built)) if picks[i][0].size]
        if not rows:
            return None
        sf_tabs = [self._sferic_pulses(picks[i][1] - self.n_pre) for i in rows]
        sf_n = [0 if t is None else t["kind"].size for t in sf_tabs]
        sf_tabs = [t for t in sf_tabs if t is not None]
        sf_all = {k: np.concatenate([t[k] for t in sf_tabs] + [np.zeros(0)])
                  for k in PULSE_FIELDS}
        sf_stop = np.repeat([stops[i] for i in rows], sf_n).astype(np.int64)
        wsf = field_windows(segments(sf_all), fs, self.oversample, stop=sf_stop)
        scale = np.minimum(1.0, 0.7 * s["trigger_v_per_m"] / np.maximum(wsf.peak_abs(), 1e-30))
        wsf.values = wsf.values * np.repeat(scale, wsf.length)
        wsf.final = wsf.final * scale
        sf_off = np.concatenate([[0], np.cumsum(sf_n)])
        all_picks = np.concatenate([picks[i][0] for i in rows])
        facts = truth(take(allp, all_picks))
        items = []
        for r, i in enumerate(rows):
            scene, p, t0_ns, flash = built[i]
            pick_ids, pick_trig = picks[i]
            lo = bounds[i]
            need = needs[i]
            in1 = np.array([exact[k] for k in need.tolist() if k in exact], int)
            in2 = np.array([exact2[k] for k in need.tolist() if k not in exact], int)
            idx = np.flatnonzero(live[lo:bounds[i + 1]]) + lo
            step = idx[~np.isin(idx, need) & (first[idx] < stops[i])]
            wins = Windows.join([w1.subset(in1).truncate(np.full(in1.size, stops[i])),
                                 w2.subset(in2), Windows.steps(first[step], final[step]),
                                 wsf.subset(np.arange(sf_off[r], sf_off[r + 1]))])
            items.append({"scene": scene, "p": p, "gi": pick_ids - lo, "base": lo,
                          "trig": pick_trig, "wins": wins, "t0_ns": t0_ns, "flash": flash})
        out, size, group = [], 0, []
        for it in items:                       # bound the shared stream to ~4e6 samples
            group.append(it)
            size += int(it["wins"].length.sum()) + it["trig"].size * self.n_rec
            if size > 4_000_000:
                out.append(self._compose(group))
                group, size = [], 0
        if group:
            out.append(self._compose(group))
        out = _concat_batch(out)
        out.update(facts)
        out["range_m"] = out["horizontal_distance_m"] * (
            1 + self.rng.normal(0, s["range_noise_fraction"], all_picks.size))
        return out

    def _candidates(self, idx, capable, wanted, peak, first):
        """Pulses of one scene to look at exactly (global indices)."""
        s, rng = self.s, self.rng
        thr = s["trigger_v_per_m"]
        if s["practice"] == "every":
            c = idx[capable[idx] & wanted[idx] & self._drawn[idx] & (peak[idx] >= 0.8 * thr)]
            keep = []
            for k in np.unique(self._kind[c]):
                grp = c[self._kind[c] == k]
                keep.append(rng.permutation(grp)[: 2 * s["max_per_flash"]])
            return np.sort(np.concatenate(keep)) if keep else np.zeros(0, int)
        c = idx[capable[idx] & (peak[idx] >= thr)]
        c = c[np.argsort(first[c], kind="stable")]
        pick, next_ok = [], -np.inf
        post = self.n_rec - self.n_pre + int(round(s["dead_time_s"] * self.fs))
        for k in c:
            if first[k] >= next_ok:
                next_ok = first[k] + post
                if wanted[k] and rng.random() < self._accept[k]:
                    pick.append(k)
        return np.array(pick, int)

    def _pick(self, cand, peak, trig):
        """Catalogued pulses of one scene from their exact peaks: (ids, trigger samples)."""
        s = self.s
        ok = (peak >= s["trigger_v_per_m"]) & (trig >= 0)
        cand, trig = cand[ok], trig[ok]
        if cand.size == 0:
            return cand, trig
        if s["practice"] == "every":
            kinds = self._kind[cand]
            keep = np.concatenate([np.flatnonzero(kinds == k)[: s["max_per_flash"]]
                                   for k in np.unique(kinds)])
            cand, trig = cand[keep], trig[keep]
            order = np.argsort(trig, kind="stable")
            cand, trig = cand[order], trig[order]
            uniq = np.r_[True, np.diff(trig) > 0]
            return cand[uniq], trig[uniq]
        order = np.argsort(trig, kind="stable")
        post = self.n_rec - self.n_pre + int(round(s["dead_time_s"] * self.fs))
        keep, next_ok = [], -np.inf
        for j in order:
            if trig[j] >= next_ok:
                keep.append(j)
                next_ok = trig[j] + post
        keep = np.array(keep, int)
        return cand[keep], trig[keep]


def _concat_batch(items):
    if not items:
        return None
    out = {}
    for k in items[0]:
        if k == "src":
            out[k] = [x for it in items for x in it[k]]
        else:
            out[k] = np.concatenate([it[k] for it in items])
    return out

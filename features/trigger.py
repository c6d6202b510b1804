"""Pulse detection in continuous records: a noise-adaptive trigger with hysteresis.

The record (a 1-D array, or anything sliceable like one: a memory-mapped ``.npy``
file, an HDF5 dataset) is read block by block, so memory stays flat in record
length. For the fast-antenna field change the detection statistic is

1. the field with the antenna's RC decay undone (``x + (1/tau) * integral x dt``,
   a running sum carried across blocks), when the decay constant is known, so a
   large pulse's slow return to zero does not look like a new pulse;
2. minus its own mean over a trailing ``baseline_s`` window that ends ``guard_s``
   before the sample (a running mean from a cumulative sum), which removes slow
   field changes and any offset;
3. divided by the noise level ``sigma``: ``1.4826 x`` the median absolute
   deviation of the statistic over each ``noise_window_s`` of the record (robust:
   pulses that fill a small part of the window do not raise it; 1.4826 makes the
   MAD of Gaussian noise its standard deviation, a textbook constant).

A pulse *fires* where ``|statistic| >= threshold_sigma`` (k, default 6). Hysteresis:
once the statistic is above ``rearm_sigma`` (default 3) a pulse stays *active*
until it has stayed below that level for ``quiet_s``; one active run gives at
most one trigger, at its first sample at or above k. Hold-off: no trigger within
``holdoff_s`` after the previous one. Dead time (optional): when set, no trigger
before the previous trigger's window has ended plus ``dead_time_s`` (a triggered
digitizer's behaviour; by default windows may overlap).

For Gaussian noise of standard deviation sigma a sample exceeds 6 sigma with
probability about 2e-9 (normal tail, textbook), so at 20 MS/s the default trigger
fires by chance about 0.04 times a second.

The VHF channel can trigger too (``channel="vhf"`` or ``"both"``): its statistic is
the power (a ``"voltage"`` record squared) averaged over ``vhf_smooth_s``, above its
median per noise window, positive excursions only.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ._checks import InputError, is_real_number

__all__ = ["Detection", "TriggerSettings", "detect_pulses", "merge_trigger_times"]

MAD_TO_SIGMA = 1.4826  # 1 / Phi^-1(3/4) for a Gaussian; textbook constant


@dataclass(frozen=True)
class TriggerSettings:
    """Settings of the noise-adaptive trigger (all times in seconds).

    Attributes
    ----------
    threshold_sigma : float, default=6.0
        k: a pulse fires at ``|statistic| >= k * sigma`` (common practice, no source).
    rearm_sigma : float, default=3.0
        The hysteresis level: an active pulse ends after ``quiet_s`` below it.
    quiet_s : float, default=5e-6
        Time below ``rearm_sigma`` that ends an active pulse, s.
    holdoff_s : float, default=10e-6
        Minimum time between triggers, s (stepped-leader pulses are 10-30 us apart,
        Rakov & Uman 2003, ch. 4, from memory; so a shorter hold-off keeps them apart).
    dead_time_s : float or None, default=None
        When set, no trigger before the previous window's end plus this time, s.
    noise_window_s : float, default=1e-3
        Length over which one robust noise level is estimated, s.
    baseline_s : float, default=40e-6
        Trailing window whose mean is subtracted, s.
    guard_s : float, default=10e-6
        Gap between that window and the sample, s (longer than a pulse's rise).
    channel : {"field", "vhf", "both"}, default="field"
        Which channel triggers.
    vhf_smooth_s : float, default=1e-6
        Averaging time of the VHF power (or squared voltage), s.
    """

    threshold_sigma: float = 6.0
    rearm_sigma: float = 3.0
    quiet_s: float = 5e-6
    holdoff_s: float = 10e-6
    dead_time_s: float | None = None
    noise_window_s: float = 1e-3
    baseline_s: float = 40e-6
    guard_s: float = 10e-6
    channel: str = "field"
    vhf_smooth_s: float = 1e-6

    @classmethod
    def from_dict(cls, d: dict, where: str) -> TriggerSettings:
        """Build from a station description's ``[detect]`` table; InputError names keys."""
        known = set(cls.__dataclass_fields__)
        problems = [f"{where}: unknown key '{k}' (known: {', '.join(sorted(known))})"
                    for k in d if k not in known]
        kw = {}
        for k, v in d.items():
            if k not in known:
                continue
            if k == "channel":
                if v not in ("field", "vhf", "both"):
                    problems.append(f"{where}: 'channel' must be \"field\", \"vhf\" or "
                                    f"\"both\", got {v!r}")
            elif k == "dead_time_s" and v is None:
                pass
            elif not is_real_number(v) or v < 0 or (v == 0 and k != "dead_time_s"):
                problems.append(f"{where}: '{k}' must be a number > 0, got {v!r}")
            kw[k] = v
        if not problems:
            s = cls(**kw)
            if s.rearm_sigma >= s.threshold_sigma:
                problems.append(f"{where}: 'rearm_sigma' ({s.rearm_sigma}) must be below "
                                f"'threshold_sigma' ({s.threshold_sigma})")
        if problems:
            raise InputError(problems)
        return s

    def to_manifest(self) -> dict:
        """The settings as a JSON-ready dict (for the catalog's manifest)."""
        d = asdict(self)
        d["noise_estimate"] = "1.4826 x median absolute deviation per noise window"
        return d


@dataclass
class Detection:
    """Triggers found in one record.

    Attributes
    ----------
    trigger_index : ndarray of int64
        Sample index of every trigger (the first sample at or above k).
    noise_sigma : ndarray of float64
        Noise level of every noise window, in the record's units.
    n_suppressed : int
        Candidate triggers dropped by the hold-off or dead time.
    """

    trigger_index: np.ndarray
    noise_sigma: np.ndarray
    n_suppressed: int

    @property
    def noise_level(self) -> float:
        """Median noise level over the record, in the record's units (NaN if none)."""
        return float(np.median(self.noise_sigma)) if self.noise_sigma.size else float("nan")


def _moving_sum(x: np.ndarray, n: int) -> np.ndarray:
    """Sum of the ``n`` samples ending at each index (first ``n-1`` use what exists)."""
    c = np.cumsum(x, dtype=np.float64)
    out = c.copy()
    out[n:] -= c[:-n]
    return out


def _robust_level(y: np.ndarray, w: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Median and 1.4826 x MAD over consecutive windows of about ``w`` samples.

    Returns ``(center, sigma, edges)``: one value per window and the window edges.
    """
    n = y.size
    k = max(1, n // w)
    edges = np.linspace(0, n, k + 1).astype(np.int64)
    if n == k * w:  # whole windows: one vectorised median per block
        seg = y.reshape(k, w)
        center = np.median(seg, axis=1)
        sigma = MAD_TO_SIGMA * np.median(np.abs(seg - center[:, None]), axis=1)
    else:
        center, sigma = np.empty(k), np.empty(k)
        for i in range(k):  # at most a few windows per block
            seg = y[edges[i]:edges[i + 1]]
            center[i] = np.median(seg)
            sigma[i] = MAD_TO_SIGMA * np.median(np.abs(seg - center[i]))
    return center, sigma, edges


class _Stream:
    """State carried from block to block of one record."""

    def __init__(self):
        self.integral = 0.0               # running sum of the record (decay compensation)
        self.tail_x = np.empty(0)         # last samples of the (compensated) record
        self.tail_z = np.empty(0)         # last values of the normalised statistic
        self.tail_mask = np.empty(0, bool)  # last samples kept out of the baseline
        self.last_base = np.nan           # the last baseline value (held through pulses)
        self.in_run = False               # the previous block ended inside an active run
        self.run_fired = False            # and that run has already triggered


def _statistic(x: np.ndarray, rate: float, s: TriggerSettings, kind: str,
               decay_time_s: float | None, state: _Stream, ctx: int, b0: int) -> np.ndarray:
    """Detection statistic of a block (before noise scaling), using the carried context."""
    if kind == "field" and decay_time_s is not None:
        cs = np.cumsum(x) + state.integral
        state.integral = float(cs[-1])
        x = x + cs / (decay_time_s * rate)
    ext = np.concatenate([state.tail_x, x])
    state.tail_x = ext[-ctx:]
    own = slice(ext.size - x.size, None)
    if kind == "field":
        n_base = max(1, round(s.baseline_s * rate))
        gap = max(1, round(s.guard_s * rate))
        first = b0 - (ext.size - x.size)  # record index of ext[0]
        no_base = max(0, n_base + gap - 1 - first)  # samples without a full baseline yet
        # pass 1: trailing mean; its active samples are then kept out of the baseline of
        # pass 2, so a large pulse leaves no echo when it enters or leaves the window
        y1 = np.full_like(ext, np.nan)
        y1[gap:] = ext[gap:] - (_moving_sum(ext, n_base) / n_base)[:-gap]
        y1[:no_base] = np.nan
        part = y1[own][np.isfinite(y1[own])]
        if part.size:
            med = np.median(part)
            sig1 = MAD_TO_SIGMA * np.median(np.abs(part - med))
            with np.errstate(invalid="ignore"):
                hot = (np.abs(y1[own] - med) >= s.rearm_sigma * sig1).astype(np.float64)
            q = max(1, round(s.quiet_s * rate))
            grown = (_moving_sum(hot, q) > 0.5) | (_moving_sum(hot[::-1], q)[::-1] > 0.5)
        else:
            grown = np.zeros(x.size, dtype=bool)
        mask = np.concatenate([state.tail_mask, grown])
        state.tail_mask = mask[-ctx:]
        keep = (~mask).astype(np.float64)
        count = _moving_sum(keep, n_base)
        with np.errstate(invalid="ignore", divide="ignore"):
            base = _moving_sum(ext * keep, n_base) / count
        # where (nearly) all the window is a pulse, hold the last baseline seen before it
        good = count >= min(16, n_base)
        good[:no_base] = False
        last = np.maximum.accumulate(np.where(good, np.arange(ext.size), -1))
        held = np.where(last >= 0, base[np.maximum(last, 0)], state.last_base)
        base = np.where(good, base, held)
        state.last_base = float(base[-1]) if np.isfinite(base[-1]) else state.last_base
        y = np.full_like(ext, np.nan)
        y[gap:] = ext[gap:] - base[:-gap]
        y[:no_base] = np.nan
        return y[own]
    m = max(1, round(s.vhf_smooth_s * rate))
    power = ext * ext if kind == "voltage" else ext
    return (_moving_sum(power, m) / m)[own]


def detect_pulses(record, sample_rate_hz: float, settings: TriggerSettings | None = None, *,
                  kind: str = "field", decay_time_s: float | None = None,
                  post_trigger_s: float = 0.0, block_samples: int = 1 << 20) -> Detection:
    """Find pulses in one continuous record.

    Parameters
    ----------
    record : 1-D array_like
        The samples (ndarray, ``numpy.memmap`` or ``h5py.Dataset``: anything that
        slices like a 1-D array); read ``block_samples`` at a time. NaN counts as 0.
    sample_rate_hz : float
        Samples per second, Hz.
    settings : TriggerSettings, optional
    kind : {"field", "power", "voltage"}, default="field"
        What the record holds: the fast-antenna field change (any units and sign),
        or a VHF power envelope or antenna voltage.
    decay_time_s : float or None
        The fast antenna's RC decay constant, s (field only; None: none to undo).
    post_trigger_s : float, default=0
        Window length after the trigger, s (used by the dead time only).
    block_samples : int, default=2**20
        Samples read at a time (rounded to whole noise windows).

    Returns
    -------
    Detection
    """
    s = settings or TriggerSettings()
    rate = float(sample_rate_hz)
    n = int(record.shape[0])
    w = max(64, round(s.noise_window_s * rate))
    block = max(w, (int(block_samples) // w) * w)
    ctx = round((s.baseline_s + s.guard_s + s.vhf_smooth_s) * rate) + 2
    quiet = max(1, round(s.quiet_s * rate))
    state = _Stream()
    cand, sigmas = [], []
    b0 = 0
    while b0 < n:
        b1 = min(n, b0 + block)
        if n - b1 < w // 2:  # a short tail joins this block's last noise window
            b1 = n
        x = np.asarray(record[b0:b1], dtype=np.float64)
        x = np.where(np.isfinite(x), x, 0.0)
        y = _statistic(x, rate, s, kind, decay_time_s, state, ctx, b0)
        center, sig_w, edges = _robust_level(np.nan_to_num(y), w)
        sigmas.append(sig_w)
        reps = np.diff(edges)
        sig = np.repeat(np.where(sig_w > 0, sig_w, np.inf), reps)
        dev = y - np.repeat(center, reps)
        z = np.nan_to_num((np.abs(dev) if kind == "field" else dev) / sig, nan=0.0)
        z_ext = np.concatenate([state.tail_z, z])
        state.tail_z = z_ext[-quiet:]
        hot = (z_ext >= s.rearm_sigma).astype(np.float64)
        active = _moving_sum(hot, quiet)[z_ext.size - z.size:] > 0.5
        fire_idx = np.flatnonzero(z >= s.threshold_sigma)
        d = np.diff(active.astype(np.int8), prepend=np.int8(0), append=np.int8(0))
        starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1)
        pos = np.searchsorted(fire_idx, starts)
        firsts = fire_idx[np.minimum(pos, fire_idx.size - 1)] if fire_idx.size else \
            np.full(starts.size, -1)
        fired = (pos < fire_idx.size) & (firsts < ends)
        continued = starts.size > 0 and starts[0] == 0 and state.in_run
        if continued and state.run_fired:
            fired[0] = False  # this run began in the previous block and already fired
        cand.append(firsts[fired] + b0)
        if active.size and active[-1]:
            last_fired = bool(fired[-1]) or (starts.size == 1 and continued and state.run_fired)
            state.in_run, state.run_fired = True, last_fired
        else:
            state.in_run, state.run_fired = False, False
        b0 = b1
    cand_idx = np.concatenate(cand).astype(np.int64) if cand else np.empty(0, np.int64)
    gap_s = s.holdoff_s if s.dead_time_s is None else max(
        s.holdoff_s, post_trigger_s + s.dead_time_s)
    kept = _hold_off(cand_idx, round(gap_s * rate))
    sig_all = np.concatenate(sigmas) if sigmas else np.empty(0)
    return Detection(trigger_index=kept, noise_sigma=sig_all[sig_all > 0],
                     n_suppressed=int(cand_idx.size - kept.size))


def _hold_off(idx: np.ndarray, gap: int) -> np.ndarray:
    """Keep triggers at least ``gap`` samples after the last kept one (sorted input)."""
    if idx.size == 0 or gap <= 0:
        return idx
    close = np.diff(idx) < gap
    if not close.any():  # the common case, no loop at all
        return idx
    keep = np.ones(idx.size, dtype=bool)
    last = idx[0]
    for i in range(1, idx.size):  # a loop over candidate triggers, never over samples
        if idx[i] - last < gap:
            keep[i] = False
        else:
            last = idx[i]
    return idx[keep]


def merge_trigger_times(times_s: list[np.ndarray], holdoff_s: float) -> np.ndarray:
    """Merge trigger times of several channels (s from the record start), with hold-off.

    Times are put on a 1 ns grid, sorted, and a trigger closer than ``holdoff_s``
    after the previous kept one is dropped.
    """
    if not times_s:
        return np.empty(0)
    ns = np.sort(np.round(np.concatenate(times_s) * 1e9).astype(np.int64))
    return _hold_off(ns, round(holdoff_s * 1e9)) / 1e9

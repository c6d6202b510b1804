"""Write a season: the catalog folder, ``<folder>.labels.csv`` and ``<folder>.truth.csv``.

Everything is written into a temporary folder beside the target and renamed
into place at the end, so an interrupted run leaves nothing half-written (a
leftover ``.<name>.*.tmp`` folder at worst).
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError

from ._profiles import resolve
from ._season import Season

__all__ = ["write_season", "TRUTH_COLUMNS"]

log = logging.getLogger("pulsesort")

#: Columns of ``<folder>.truth.csv`` (units in the names; signs in the physics
#: convention: + up; ``peak_current_a`` > 0 for an upward-directed current).
TRUTH_COLUMNS = ("event_id", "label", "flash_id", "flash_type", "source_altitude_m",
                 "horizontal_distance_m", "azimuth_deg", "current_moment_peak_a_m",
                 "charge_moment_change_c_m", "peak_current_a", "velocity_east_m_per_s",
                 "velocity_north_m_per_s", "velocity_up_m_per_s")


def _check_args(folder, n_events, seed, overwrite):
    problems = []
    if isinstance(n_events, bool) or not isinstance(n_events, (int, np.integer)) \
            or n_events < 1:
        problems.append(f"n_events must be a whole number >= 1, got {n_events!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        problems.append(f"seed must be a whole number >= 0, got {seed!r}")
    folder = Path(folder)
    if not folder.parent.is_dir():
        problems.append(f"{folder.parent}: the folder to write the season into does not exist")
    elif folder.exists() and not overwrite:
        problems.append(f"{folder}: already exists (pass overwrite=True to replace it)")
    elif folder.exists() and not folder.is_dir():
        problems.append(f"{folder}: exists and is not a folder")
    if problems:
        raise InputError(problems)
    return folder


def write_season(folder, n_events=4000, seed=1, profile="shifted", overwrite=False,
                 **overrides):
    """Write a labelled catalog-v1 season of an invented world.

    Parameters
    ----------
    folder : path
        The catalog folder to create; ``<folder>.labels.csv`` and
        ``<folder>.truth.csv`` are written beside it.
    n_events : int
        Number of catalogued events (exact).
    seed : int
        Seed of the whole world; the same seed gives the same bytes.
    profile : str
        A key of :data:`PROFILES`.
    overwrite : bool
        Replace an existing folder (and its two CSV files).
    **overrides
        Any profile setting, e.g. ``classes=[...]``, ``mix={...}``,
        ``field_rate_hz=5e6``.

    Returns
    -------
    path : pathlib.Path
        The catalog folder.
    labels : pandas.DataFrame
        The labels file's content (``event_id, label, analyst, decided_at, note``).

    Raises
    ------
    features.InputError
        A bad argument or setting (every problem named), or a mix that cannot
        be reached with the settings.
    """
    folder = _check_args(folder, n_events, seed, overwrite)
    settings = resolve(profile, overrides)
    work = Path(tempfile.mkdtemp(prefix=f".{folder.name}.", suffix=".tmp", dir=folder.parent))
    try:
        cat = work / "catalog"
        cat.mkdir()
        season = Season(settings, int(n_events), int(seed))
        meta, sources, files = _generate(season, work)
        keep = _select(season, meta, np.random.default_rng([int(seed), 1]))
        labels, truth = _assemble(settings, profile, int(seed), meta, sources, files, keep,
                                  cat)
        labels_path, truth_path = _beside(folder, "labels"), _beside(folder, "truth")
        labels.to_csv(work / "labels.csv", index=False, lineterminator="\n")
        truth.to_csv(work / "truth.csv", index=False, lineterminator="\n", float_format="%.6g")
        for f in files:
            os.unlink(f)
        old = None
        if folder.exists():
            old = work / "old"
            os.replace(folder, old)
        try:
            os.replace(cat, folder)
        except BaseException:
            if old is not None:
                os.replace(old, folder)          # put the previous season back
            raise
        os.replace(work / "labels.csv", labels_path)
        os.replace(work / "truth.csv", truth_path)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    log.info("wrote %s: %d events", folder, len(labels))
    return folder, labels


def _beside(folder: Path, what: str) -> Path:
    return folder.with_name(f"{folder.name}.{what}.csv")


def _generate(season, work):
    meta, sources, files = [], [], []
    for k, batch in enumerate(season.run()):
        f = work / f"field-{k}.npy"
        np.save(f, batch.pop("field"))
        files.append(f)
        if "vhf" in batch:
            fv = work / f"vhf-{k}.npy"
            np.save(fv, batch.pop("vhf"))
            files.append(fv)
        sources.extend(batch.pop("src"))
        meta.append(batch)
    return {k: np.concatenate([m[k] for m in meta]) for k in meta[0]}, sources, files


def _select(season, meta, rng):
    """Exactly the quota of each stratum, chosen at random among its candidates."""
    keep = np.zeros(meta["label"].size, bool)
    for (cls, ftype), n in sorted(season.quota.items()):
        idx = np.flatnonzero((meta["label"] == cls) & (meta["ftype"] == ftype))
        if idx.size < n:                      # cannot happen: generation runs until met
            raise RuntimeError(f"stratum {cls}/{ftype}: {idx.size} candidates for {n}")
        keep[rng.choice(idx, n, replace=False)] = True
    return np.flatnonzero(keep)


def _assemble(s, profile, seed, meta, sources, files, keep, cat):
    n = keep.size
    season = s["season"]
    ids = np.array([f"hm{season}-{i:06d}" for i in range(1, n + 1)])
    _copy_rows(files, "field", keep, cat / "field.npy")
    if s["vhf_kind"]:
        _copy_rows(files, "vhf", keep, cat / "vhf.npy")
    times = np.datetime_as_string(meta["time_ns"][keep].astype("datetime64[ns]"), unit="ns")
    flash = np.array([f"f{season}-{f:06d}" for f in meta["flash"][keep]])
    events = {"event_id": ids, "time_utc": np.char.add(times, "Z")}
    if s["flash_ids"]:
        events["flash_id"] = flash
    if s["range_column"]:
        events["range_m"] = np.round(meta["range_m"][keep], 1)
    pd.DataFrame(events).to_csv(cat / "events.csv", index=False, lineterminator="\n")
    man = _manifest(s, profile, seed)
    if s["sources"]:
        _write_sources(s, [sources[i] for i in keep], ids, cat / "sources.csv")
        man["sources"] = {"file": "sources.csv"}
    (cat / "catalog.json").write_text(json.dumps(man, indent=2) + "\n")
    labels = pd.DataFrame({"event_id": ids, "label": meta["label"][keep],
                           "analyst": "truth", "decided_at": f"{season}-12-31T12:00:00Z",
                           "note": f"speclit world, profile {profile}, seed {seed}"})
    truth = pd.DataFrame({"event_id": ids, "label": meta["label"][keep], "flash_id": flash,
                          "flash_type": np.where(meta["ftype"][keep] == "ic_eip", "ic",
                                                 meta["ftype"][keep])})
    for col in TRUTH_COLUMNS[4:]:
        truth[col] = meta[col][keep]
    return labels, truth


def _copy_rows(files, name, keep, target):
    """Write the rows ``keep`` of the batch files ``<name>-*.npy`` to one .npy file."""
    parts = [f for f in files if f.name.startswith(name + "-")]
    shapes, dtype = [], None
    for f in parts:
        a = np.load(f, mmap_mode="r")
        shapes.append(a.shape)
        dtype = a.dtype
        del a
    header = {"descr": np.lib.format.dtype_to_descr(dtype), "fortran_order": False,
              "shape": (int(keep.size), int(shapes[0][1]))}
    base = 0
    with open(target, "wb") as fh:
        np.lib.format.write_array_header_1_0(fh, header)
        for f, shape in zip(parts, shapes):
            sel = keep[(keep >= base) & (keep < base + shape[0])] - base
            if sel.size:
                fh.write(np.ascontiguousarray(np.load(f)[sel]).tobytes())
            base += shape[0]


def _write_sources(s, parts, ids, path):
    rows = [(i, p) for i, p in enumerate(parts) if p is not None and p["t_s"].size]
    cols = ["event_id", "t_s", "azimuth_deg", "elevation_deg"]
    if s["sources_xyz"]:
        cols += ["x_m", "y_m", "z_m"]
    cols.append("power_db")
    if not rows:
        pd.DataFrame(columns=cols).to_csv(path, index=False, lineterminator="\n")
        return
    cat = {k: np.concatenate([p[k] for _, p in rows]) for k in rows[0][1]}
    owner = np.repeat([i for i, _ in rows], [p["t_s"].size for _, p in rows])
    df = pd.DataFrame({"event_id": ids[owner], "t_s": np.round(cat["t_s"], 9),
                       "azimuth_deg": np.round(cat["azimuth_deg"], 4) % 360.0,
                       "elevation_deg": np.round(cat["elevation_deg"], 4)})
    if s["sources_xyz"]:
        for k in ("x_m", "y_m", "z_m"):
            df[k] = np.round(cat[k], 1)
    df["power_db"] = np.round(cat["power_db"], 2)
    df.to_csv(path, index=False, lineterminator="\n")


def _manifest(s, profile, seed):
    field = {"file": "field.npy", "sample_rate_hz": s["field_rate_hz"],
             "pretrigger_s": s["field_pretrigger_s"], "units": s["field_units"],
             "scale": s["field_scale_v_per_m"] if s["field_units"] == "counts" else 1.0,
             "sign_convention": s["field_sign"], "decay_time_s": s["field_decay_s"],
             "delay_s": s["field_delay_s"]}
    fs = s["field_full_scale_v_per_m"]
    if fs is not None:
        field["full_scale"] = fs
    man = {"format": "pulse-catalog", "version": 1,
           "catalog_id": f"hollowmere-{s['season']}-{profile}-s{seed}",
           "station": "hollowmere", "season": s["season"], "events": "events.csv",
           "field": field}
    if s["vhf_kind"]:
        vhf = {"file": "vhf.npy", "sample_rate_hz": s["vhf_rate_hz"],
               "pretrigger_s": s["vhf_pretrigger_s"], "kind": s["vhf_kind"],
               "band_hz": list(s["vhf_band_hz"]), "delay_s": s["vhf_delay_s"]}
        if s["vhf_full_scale"] is not None:
            vhf["full_scale"] = s["vhf_full_scale"]
        man["vhf"] = vhf
    man["generator"] = {"name": "tests.speclit", "profile": profile, "seed": seed,
                        "classes": list(s["classes"]),
                        "note": "invented world for testing; not observations"}
    return man

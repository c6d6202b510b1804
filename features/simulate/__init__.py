"""Season simulator: a physical forward model that writes catalog v1 folders.

Each catalogued pulse is a Heidler current launched as a TL/MTLE wave on a short vertical
channel; its vertical field at the ground (electrostatic, induction and radiation terms,
ground image included; :mod:`.dipole`) passes through the fast antenna's RC
decay and a digitizer (noise, quantisation, clipping). Its VHF power is tied to the
breakdown (``|di/dt|``, plus a plateau while a fast front moves) and the mapped VHF
sources lie along the moving front, seen over a curved Earth (:mod:`._earth`), with
angular (and optionally 3-D) noise. Pulses come in flashes (:mod:`._season`,
:mod:`._cgflash`) and every record window holds the field of the neighbouring pulses of
its flash that fall in it, and of distant sferics (:mod:`._station`). A station either
catalogues pulses one by one or records one event per trigger (:mod:`._station`). Class
parameters and their sources: :mod:`._classes`; the stress family of stations:
:mod:`._stress`.

Public API: :func:`simulate_season` (write a catalog, or its noise-free truth twin),
:func:`draw_season` (the truth table of the same season, without waveforms),
:func:`pulse_fields` (one pulse's physical field and current moment), :data:`PRESETS`,
:func:`resolve_settings`, :func:`stress_settings`, :data:`CLASSES`,
:data:`ALL_CLASSES`, and the curved-Earth formulas :func:`apparent_elevation_deg`,
:func:`local_xyz_m`, :func:`slant_distance_m`.
"""

from __future__ import annotations

import logging
import shutil
from numbers import Integral
from pathlib import Path

import numpy as np
import pandas as pd

from .._checks import InputError
from ._classes import ALL_CLASSES, CLASSES, EXTRA_CLASSES, MARGIN, MARGIN_FRACTION, PARAMS
from ._earth import (
    EARTH_RADIUS_M,
    EFFECTIVE_EARTH_RADIUS_M,
    apparent_elevation_deg,
    local_xyz_m,
    slant_distance_m,
)
from ._settings import PRESETS, Settings, resolve_settings
from ._stress import stress_settings
from ._truth import charge_moment_change_c_m, current_moment_peak_a_m
from ._writer import event_order, event_table, iter_blocks, replace_atomically, write_season
from .dipole import HeidlerCurrent, current_moment_a_m, sampled_channel_field_terms

__all__ = ["ALL_CLASSES", "CLASSES", "EARTH_RADIUS_M", "EFFECTIVE_EARTH_RADIUS_M",
           "EXTRA_CLASSES", "MARGIN", "MARGIN_FRACTION", "PARAMS", "PRESETS", "Settings",
           "apparent_elevation_deg", "draw_season", "labels_path", "local_xyz_m",
           "pulse_fields", "resolve_settings", "simulate_season", "slant_distance_m",
           "stress_settings"]

logger = logging.getLogger("pulsesort")


def _check_counts(n_events, seed):
    if not isinstance(n_events, Integral) or isinstance(n_events, bool) or n_events < 1:
        raise InputError(f"n_events must be an integer >= 1, got {n_events!r}")
    if not isinstance(seed, Integral) or isinstance(seed, bool) or seed < 0:
        raise InputError(f"seed must be an integer >= 0, got {seed!r}")
    return int(n_events), int(seed)


def labels_path(out_dir) -> Path:
    """Path of the truth labels written next to a simulated catalog folder."""
    return Path(str(out_dir) + ".labels.csv")


def simulate_season(out_dir, n_events, seed, *, preset="reference", overwrite=False,
                    **settings) -> Path:
    """Simulate a season and write it as a catalog v1 folder plus its truth labels.

    Parameters
    ----------
    out_dir : str or Path
        Catalog folder to create. The labels go to ``str(out_dir) + ".labels.csv"``
        (columns ``event_id,label,analyst,decided_at,note``; analyst ``"truth"``).
    n_events : int
        Number of catalogued pulses (rows), >= 1.
    seed : int
        Random seed (>= 0); the same seed and settings give byte-identical files.
    preset : {"reference", "next", "hard", "overhead", "stress"}, default="reference"
        Defaults to start from (:data:`PRESETS`); explicit settings override it.
        ``"overhead"`` is the reference station with its flashes 1-20 km away (near-field
        pulse shapes the reference season's 10-150 km never holds), each class an equal
        share.
        ``"stress"`` takes the station :func:`stress_settings` draws for ``member``.
    overwrite : bool, default=False
        Replace an existing non-empty ``out_dir`` (otherwise ``FileExistsError``).
    **settings
        Any of (reference defaults in brackets):

        - ``station`` ["hollowmere"], ``season`` ["2031"], ``catalog_id``
          [``f"{station}-{season}"``];
        - ``field_rate_hz`` [20e6], ``field_samples`` [8000], ``pretrigger_s`` [1e-4];
        - ``vhf_kind`` ["power"; or "voltage": band-limited carrier], ``vhf_rate_hz``
          [25e6; 250e6 for "voltage", which needs > 2 x band top], ``vhf_samples``
          [10000; 25000 for "voltage"], ``vhf_pretrigger_s`` [``pretrigger_s``, at most
          half the VHF record], ``band_hz`` [(25e6, 85e6)];
        - ``units`` ["V/m" float32; or "counts" int16], ``scale`` [V/m per count,
          2**-7 for counts], ``field_bits`` [16: a "V/m" file is quantised to
          ``full_scale / 2**(field_bits - 1)``], ``sign_convention`` ["physics" or
          "atmospheric"];
        - ``decay_time_s`` [1e-3; None: DC-coupled], ``field_delay_s`` [0.0],
          ``vhf_delay_s`` [4e-7];
        - ``field_noise_v_per_m`` [0.01, rms], ``vhf_noise_floor`` [0.1, VHF file units],
          ``vhf_gain`` [1.0, instrument gain of the VHF power];
        - ``full_scale`` [250.0 V/m clip level] or ``clip_fraction`` [None: the clip
          level is set so about this fraction of rows clip];
        - ``with_vhf``, ``with_sources``, ``with_xyz``, ``with_range`` [all True];
        - ``class_mix`` [{"narrow_bipolar": 0.15, "stepped_leader": 0.45, "recoil":
          0.30, "energetic_in_cloud": 0.10}, normalised], ``range_km`` [(10, 150)];
        - ``missing_vhf_fraction`` [0.0, rows whose VHF is all NaN],
          ``sources_per_event`` [20.0, mean], ``angle_noise_deg`` [0.2],
          ``xyz_noise_m`` [10.0], ``chunk_size`` [1024, rows per write at most];
        - ``class_mix`` may also hold ``"return_stroke"`` and ``"initial_breakdown"``
          (:data:`ALL_CLASSES`); their pulses are in the records of every CG flash
          either way;
        - ``catalog_practice`` ["every_pulse": pulses catalogued one by one, the class
          mix exact; or "one_per_trigger": one record per trigger, the event its
          triggering pulse], ``dead_time_s`` [None: the post-trigger record, s],
          ``trigger_level_v_per_m`` [None: 5 x ``field_noise_v_per_m``, at least
          0.05 V/m];
        - ``sferic_rate_hz`` [0.0, distant strokes per second in the records],
          ``vhf_full_scale`` [None; the VHF clip level in file units, written as
          ``vhf.full_scale``], ``mapping_outage_fraction`` [0.0, events without
          sources], ``mapping_down_fraction`` [0.0, season time without mapping];
        - ``member`` [0; preset "stress" only: the member of the stress family];
        - ``truth_twin`` [False]: write the noise-free truth twin of the season
          instead: the same events, ids, times, labels and pulses (every random draw
          made as for the station), each record holding only its own catalogued pulse
          (no neighbours, sferics or return strokes of other pulses), DC-coupled
          (``decay_time_s`` null), float64 V/m in the physics sign with no noise,
          quantisation or clipping (the digitizer's one-sample average kept), VHF as
          noise-free power (``vhf_gain`` x received power) at the same rate, the same
          rates, pre-triggers and delays; sources without angle or position noise and
          without outages. Labels go next to the twin's folder as usual.

    Returns
    -------
    Path
        The catalog folder.

    Raises
    ------
    ValueError
        A bad setting (the message names it).
    FileExistsError
        ``out_dir`` exists, is not empty and ``overwrite`` is False.
    """
    s = resolve_settings(preset, **settings)
    n_events, seed = _check_counts(n_events, seed)
    out = Path(out_dir)
    labels = labels_path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"{out}: exists and is not a folder")
    if out.exists() and any(out.iterdir()) and not overwrite:
        raise InputError(f"{out}: folder exists and is not empty (pass overwrite=True, "
                              "or --overwrite on the command line, to replace it)")
    if labels.exists() and not overwrite:
        raise InputError(f"{labels}: labels file exists (pass overwrite=True, or "
                              "--overwrite on the command line, to replace it)")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.partial"
    labels_tmp = out.parent / f".{labels.name}.partial"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        summary = write_season(tmp, labels_tmp, s, n_events, seed)
        replace_atomically(tmp, out, labels_tmp, labels)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        labels_tmp.unlink(missing_ok=True)
        raise
    logger.info("simulate: wrote %d events in %d flashes to %s", n_events,
                summary["n_flashes"], out)
    return out


_TRUTH = {  # truth column -> pulse column
    "altitude_start_m": "z0_m", "channel_direction": "channel_direction",
    "channel_length_m": "length_m", "wave_speed_m_per_s": "speed_m_per_s",
    "decay_length_m": "decay_length_m", "peak_current_a": "peak_a", "rise_s": "rise_s",
    "decay_s": "decay_s", "vhf_peak_db": "vhf_peak_db",
    **{f"front_{k}": f"front_{k}" for k in ("speed_m_per_s", "x0_m", "y0_m", "z0_m", "ux",
                                            "uy", "uz")},
}


def draw_season(n_events, seed, *, preset="reference", **settings) -> pd.DataFrame:
    """The truth of the season :func:`simulate_season` writes, one row per event.

    Same arguments as :func:`simulate_season` (no files are written). Columns: the
    events.csv columns, ``label``, ``margin`` (drawn from the class margins), the
    channel and current parameters (``altitude_start_m``, ``channel_direction`` +1 up /
    -1 down, ``channel_length_m``, ``wave_speed_m_per_s``, ``decay_length_m`` (MTLE),
    ``peak_current_a`` (signed, positive upward-directed), ``rise_s``, ``decay_s``),
    ``vhf_peak_db`` (at 100 km, gain 1) and the sources' front: ``front_speed_m_per_s``,
    its position ``front_{x,y,z}0_m`` at ``front_t0_s`` and unit direction
    ``front_u{x,y,z}``, active over ``front_t0_s``..``front_t1_s`` (source times
    relative to the trigger), plus ``distance_m`` (horizontal, ground arc) and ``slant_m``
    (straight line, curved Earth); and the field channel's ``current_moment_peak_a_m``
    (signed extreme of ``M = integral i dz``, A m), ``charge_moment_change_c_m``
    (``integral M dt`` over the whole pulse, C m), ``source_altitude_m`` (the channel's
    mean height, m), ``front_vertical_speed_m_per_s`` (vertical velocity of the sources'
    front, + up) and ``current_direction`` (+1 upward-directed, -1 downward).
    ``truth_twin`` makes no difference here: a twin is the same season.
    """
    s = resolve_settings(preset, **settings)
    n_events, seed = _check_counts(n_events, seed)
    frames = []
    row0 = 0
    for blk in iter_blocks(s, n_events, seed, sferics=False):
        p = blk.pulses
        ev = event_order(p)
        df = event_table(s, p, ev, blk.flash_start_ns, blk.first_flash, row0, n_events)
        df["label"] = [ALL_CLASSES[c] for c in p["class_index"][ev]]
        df["margin"] = p["margin"][ev]
        for name, col in _TRUTH.items():
            df[name] = p[col][ev]
        df["front_t0_s"] = p["front_t0_s"][ev] - p["trigger_s"][ev]
        df["front_t1_s"] = p["front_t1_s"][ev] - p["trigger_s"][ev]
        df["distance_m"] = np.hypot(p["x_m"][ev], p["y_m"][ev])
        df["slant_m"] = p["slant_m"][ev]
        frames.append(df)
        row0 += ev.size
    df = pd.concat(frames, ignore_index=True)
    _add_channel_truth(df)
    return df


def _add_channel_truth(df):
    """Current and charge moments, source altitude, vertical front speed, direction."""
    args = [df[k].to_numpy() for k in ("peak_current_a", "rise_s", "decay_s",
                                       "channel_length_m", "wave_speed_m_per_s",
                                       "decay_length_m")]
    df["current_moment_peak_a_m"] = current_moment_peak_a_m(*args)
    df["charge_moment_change_c_m"] = charge_moment_change_c_m(*args[:4], args[5])
    df["source_altitude_m"] = (df["altitude_start_m"]
                               + 0.5 * df["channel_direction"] * df["channel_length_m"])
    df["front_vertical_speed_m_per_s"] = df["front_speed_m_per_s"] * df["front_uz"]
    df["current_direction"] = np.sign(df["peak_current_a"]).astype(int)


def pulse_fields(truth: pd.DataFrame, sample_rate_hz=100e6, n_samples=4000,
                 distance_m=None, with_moment=True):
    """Physical field terms and current moment of pulses from :func:`draw_season` rows.

    No instrument: no RC decay, filter, noise or neighbouring pulses.

    Parameters
    ----------
    truth : DataFrame
        Rows of :func:`draw_season`.
    sample_rate_hz : float, default=100e6
        Sample rate in Hz.
    n_samples : int, default=4000
        Samples per pulse.
    distance_m : float or None
        Horizontal distance to use instead of each pulse's own, in m.
    with_moment : bool, default=True
        Also integrate the current moment (slow for long records).

    Returns
    -------
    time_s : ndarray, shape (n_samples,)
        ``k / sample_rate_hz``: source time since the front started for the moment,
        observer time since the first field arrival for the terms.
    terms : FieldTerms
        Electrostatic, induction and radiation terms in V/m, shape (n, n_samples).
    moment_a_m : ndarray, shape (n, n_samples), or None
        Current moment ``integral i dz`` in A m (direct integration over the channel).
    """
    t = np.arange(int(n_samples)) / float(sample_rate_hz)
    peak = truth["peak_current_a"].to_numpy()
    rise, decay = truth["rise_s"].to_numpy(), truth["decay_s"].to_numpy()
    cur = HeidlerCurrent(peak[:, None], rise[:, None], decay[:, None])
    z0 = truth["altitude_start_m"].to_numpy()
    z1 = z0 + truth["channel_direction"].to_numpy() * truth["channel_length_m"].to_numpy()
    d = (truth["distance_m"].to_numpy() if distance_m is None
         else np.full(len(truth), float(distance_m)))
    v, lam = truth["wave_speed_m_per_s"].to_numpy(), truth["decay_length_m"].to_numpy()
    terms = sampled_channel_field_terms(*cur.current_and_derivative(t), sample_rate_hz, d,
                                        z0, z1, v, lam)
    if not with_moment:
        return t, terms, None
    moment = np.stack([
        current_moment_a_m(t, HeidlerCurrent(peak[k], rise[k], decay[k]), z0[k], z1[k],
                           v[k], lam[k]) for k in range(len(truth))])
    return t, terms, moment

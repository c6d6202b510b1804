"""Station variants of recorded pulses: the same pulses as another station would record them.

A classifier trained on one station learns that station's habits (its sample rate, its
noise, its digitizer, its clip levels) unless it is shown the same pulses recorded
otherwise. :class:`StationVariant` describes another station's field and VHF channels;
:func:`apply_field` and :func:`apply_vhf` turn rows recorded by the catalog's station
into rows as that station would have recorded them (from the physical field, which the
rows' own decay compensation recovers), and :func:`draw_variant` draws a station from the
ranges of :data:`VARIANT_RANGES`. :func:`features.extract.extract_features` computes the
features of such variants (``variants=...``); training uses them so the models (and
their calibration) hold on stations they never saw.

Transformations, in order (each optional):

1. **decay constant**: the record's own RC decay undone, another one applied (a first-
   order high-pass, ``scipy.signal.lfilter`` on its bilinear transform) or none
   (DC-coupled);
2. **sample rate**: resampled down with an anti-aliasing polyphase filter
   (:func:`scipy.signal.resample_poly`);
3. **pre-trigger and record length**: the record's start cut so that only so much
   remains before the trigger, and its end so that only so much remains after it (a
   shorter record holds fewer of a leader train's other steps);
4. **noise**: white Gaussian noise added, a multiple of the record's own noise;
5. **digitizer**: quantised to integer counts whose step is the noise divided by
   ``counts_per_noise`` (noise of a fraction of a count: far pulses a few counts tall),
   clipped at +-32767 counts;
6. **full scale**: clipped at a level that the chunk's strongest pulses reach (the peak
   becomes a lower bound, as at a station whose digitizer saturates on them);
7. **VHF**: the noise floor raised, and a full scale the strongest VHF emitters reach;
8. **nearer storms**: some strong, distant pulses seen from 1-15 km, the field rewritten
   from their inverted moments (:mod:`features._nearer`).

A station's mapper, too, locates only some of the pulses its fast antenna records (its
detection efficiency depends on the array, the range and the storm):
:func:`unmapped_view` is the catalog as a station that located none of some pulses.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from scipy import signal

from ._manifest import Channel
from .pulses import robust_sigma_diff
from .waveform import decay_compensate

__all__ = ["StationVariant", "VARIANT_RANGES", "draw_variant", "apply_field", "apply_vhf",
           "practice_context", "unmapped_view"]

#: Ranges stations are drawn from (common practice for fast antennas and VHF receivers,
#: no single source; they span the settings the catalog spec allows in use).
VARIANT_RANGES = {
    "field_rate_hz": (5e6, 20e6),          # resampled only downwards
    "pretrigger_s": (30e-6, 100e-6),
    "posttrigger_s": (20e-6, 200e-6),      # record after the trigger (log-uniform)
    "decay_time_s": (1e-4, 1e-3),          # or DC-coupled, half the time
    "extra_noise": (0.0, 3.0),             # x the record's own noise
    "counts_per_noise": (1.0, 1 / 0.3),    # noise of 0.3-1 count
    "field_clip_quantile": (0.85, 0.99),   # of the chunk's peaks
    "vhf_noise_gain": (1.0, 10.0),
    "vhf_clip_quantile": (0.5, 0.95),
    "near_share": (0.2, 0.6),              # of the strong, far pulses (features._nearer)
}


@dataclass(frozen=True)
class StationVariant:
    """Another station's field and VHF recording settings (see the module notes).

    Attributes
    ----------
    field_rate_hz : float or None
        Resample the field to this rate, Hz (None: keep; never upwards).
    pretrigger_s : float or None
        Keep at most this much record before the trigger, s.
    posttrigger_s : float or None
        Keep at most this much field record after the trigger, s (a shorter record:
        fewer of a train's other pulses in it; the VHF record is left as it is).
    decay_time_s : float, None or "keep"
        The station's RC decay constant, s (None: DC-coupled; "keep": as recorded).
    extra_noise : float
        Added noise sigma, as a multiple of the record's own.
    counts_per_noise : float or None
        Quantise to integer counts, the noise being this many counts (None: float).
    field_clip_quantile : float or None
        Full scale at this quantile of the chunk's largest |E| per row.
    vhf_noise_gain : float
        VHF noise floor multiplied by this (>= 1).
    vhf_clip_quantile : float or None
        VHF full scale at this quantile of the chunk's largest VHF sample per row.
    seed : int
        Random stream of the added noise.
    near_share : float or None
        Share of the strong pulses 20 km away or more seen from 1-15 km instead, at the
        same height (:mod:`features._nearer`: their field from the inverted moments,
        VHF x (R/R')^2, their mapped sources dropped).
    """

    field_rate_hz: float | None = None
    pretrigger_s: float | None = None
    posttrigger_s: float | None = None
    decay_time_s: float | None | str = "keep"
    extra_noise: float = 0.0
    counts_per_noise: float | None = None
    field_clip_quantile: float | None = None
    vhf_noise_gain: float = 1.0
    vhf_clip_quantile: float | None = None
    seed: int = 0
    near_share: float | None = None


#: Chance that a variant sees some of the pulses from nearer (``near_share``): a season
#: of distant storms holds no pulse whose field is the electrostatic and induction
#: terms of a source overhead (our choice, no source).
VARIANT_NEARER = 0.3


def draw_variant(rng: np.random.Generator) -> StationVariant:
    """A station drawn from :data:`VARIANT_RANGES` (each setting used or not at random)."""
    r = VARIANT_RANGES

    def u(key, log=False):
        lo, hi = r[key]
        return float(np.exp(rng.uniform(np.log(lo), np.log(hi))) if log
                     else rng.uniform(lo, hi))

    return StationVariant(
        field_rate_hz=u("field_rate_hz", log=True) if rng.random() < 0.7 else None,
        pretrigger_s=u("pretrigger_s") if rng.random() < 0.5 else None,
        decay_time_s=(None if rng.random() < 0.5 else u("decay_time_s", log=True))
        if rng.random() < 0.6 else "keep",
        extra_noise=u("extra_noise") if rng.random() < 0.7 else 0.0,
        counts_per_noise=u("counts_per_noise") if rng.random() < 0.5 else None,
        field_clip_quantile=u("field_clip_quantile") if rng.random() < 0.3 else None,
        vhf_noise_gain=u("vhf_noise_gain", log=True) if rng.random() < 0.6 else 1.0,
        vhf_clip_quantile=u("vhf_clip_quantile") if rng.random() < 0.5 else None,
        seed=int(rng.integers(0, 2**31 - 1)),
        posttrigger_s=u("posttrigger_s", log=True) if rng.random() < 0.3 else None,
        near_share=u("near_share") if rng.random() < VARIANT_NEARER else None,
    )


def _rc_highpass(e, fs, tau):
    """First-order RC high-pass s / (s + 1/tau) (bilinear transform), along each row."""
    b, a = signal.bilinear([1.0, 0.0], [1.0, 1.0 / tau], fs=fs)
    return signal.lfilter(b, a, e, axis=1)


def apply_field(x_v_per_m: np.ndarray, ch: Channel, v: StationVariant, rng=None):
    """Rows of the field as the variant station would record them.

    Parameters
    ----------
    x_v_per_m : ndarray, shape (n, m)
        Rows as recorded (V/m, physics convention; NaN where missing), starting at the
        channel's ``pretrigger_s`` before the trigger.
    ch : Channel
        The channel that recorded them (its rate, pre-trigger, decay constant).
    v : StationVariant
    rng : numpy.random.Generator, optional

    Returns
    -------
    x : ndarray, shape (n, m')
        The variant's rows, V/m.
    ch : Channel
        The variant channel (``sample_rate_hz``, ``pretrigger_s``, ``decay_time_s``,
        ``n_samples``, ``full_scale``; a quantised record has ``dtype`` int16 and
        ``scale`` one count in V/m).
    """
    rng = np.random.default_rng(v.seed) if rng is None else rng
    x = np.nan_to_num(np.asarray(x_v_per_m, dtype=np.float64))
    fs, pre, tau = ch.sample_rate_hz, ch.pretrigger_s, ch.decay_time_s
    if v.decay_time_s != "keep":
        x = decay_compensate(x, fs, tau)
        tau = v.decay_time_s
        if tau is not None:
            x = _rc_highpass(x, fs, tau)
    if v.field_rate_hz is not None and v.field_rate_hz < fs * 0.95:
        frac = Fraction(v.field_rate_hz / fs).limit_denominator(64)
        x = signal.resample_poly(x, frac.numerator, frac.denominator, axis=1)
        fs = fs * frac.numerator / frac.denominator
    if v.pretrigger_s is not None and v.pretrigger_s < pre:
        cut = int(np.floor((pre - v.pretrigger_s) * fs))
        cut = min(cut, max(x.shape[1] - 16, 0))
        x = x[:, cut:]
        pre = pre - cut / fs
    if v.posttrigger_s is not None:
        x = x[:, :max(int(np.ceil((pre + v.posttrigger_s) * fs)), 16)]
    n_pre = int(np.clip(pre * fs - 2e-6 * fs, 0, x.shape[1]))
    noise0 = (np.median(robust_sigma_diff(x[:, :n_pre])) if n_pre > 16
              else float(np.median(robust_sigma_diff(x))))
    noise0 = max(float(noise0), 1e-12)
    if v.extra_noise > 0:
        x = x + rng.normal(0.0, v.extra_noise * noise0, x.shape)
    scale, dtype, full = ch.scale, ch.dtype, ch.full_scale
    if v.counts_per_noise is not None:
        total = noise0 * np.sqrt(1.0 + v.extra_noise ** 2)
        scale = total / v.counts_per_noise
        x = np.clip(np.round(x / scale), -32767, 32767) * scale
        dtype = np.dtype(np.int16)
        full = 32767 * scale
    elif dtype == np.int16:          # the recorded quantum no longer holds after resampling
        dtype = np.dtype(np.float32)
        scale = 1.0
    if v.field_clip_quantile is not None and len(x):
        level = float(np.quantile(np.abs(x).max(axis=1), v.field_clip_quantile))
        if level > 0:
            x = np.clip(x, -level, level)
            full = level if full is None else min(full, level)
    ch2 = dataclasses.replace(ch, sample_rate_hz=fs, pretrigger_s=pre, decay_time_s=tau,
                              n_samples=x.shape[1], full_scale=full, scale=scale, dtype=dtype)
    return x, ch2


def apply_vhf(vhf: np.ndarray, ch: Channel, v: StationVariant, rng=None):
    """VHF rows as the variant station would record them (noise floor, full scale).

    Parameters
    ----------
    vhf : ndarray, shape (n, m)
        Rows as recorded (file units; voltage or power per ``ch.kind``).
    ch : Channel
    v : StationVariant
    rng : numpy.random.Generator, optional

    Returns
    -------
    vhf : ndarray, shape (n, m)
    ch : Channel
        With the variant's ``full_scale``.
    """
    rng = np.random.default_rng(v.seed + 1) if rng is None else rng
    x = np.nan_to_num(np.asarray(vhf, dtype=np.float64))
    if x.size == 0:
        return x, ch
    n_pre = int(np.clip((ch.pretrigger_s - 20e-6) * ch.sample_rate_hz, 16, x.shape[1]))
    full = ch.full_scale
    if v.vhf_noise_gain > 1.0:
        extra = v.vhf_noise_gain - 1.0
        if ch.kind == "power":
            floor = float(np.median(np.median(x[:, :n_pre], axis=1)))
            x = x + extra * floor * rng.standard_gamma(4.0, x.shape) / 4.0
        else:
            sd = float(np.median(np.std(x[:, :n_pre], axis=1)))
            x = x + rng.normal(0.0, np.sqrt(extra) * sd, x.shape)
    if v.vhf_clip_quantile is not None:
        level = float(np.quantile(np.abs(x).max(axis=1), v.vhf_clip_quantile))
        if level > 0:
            x = np.clip(x, 0.0 if ch.kind == "power" else -level, level)
            full = level if full is None else min(full, level)
    return x, dataclasses.replace(ch, full_scale=full)


def _stretch_flashes(t_ns, flash_id, scale):
    """Times with each pulse's time since its flash's first pulse multiplied by ``scale``.

    Pulses without flash id ("") are stretched about the catalog's first pulse.
    """
    code = np.full(len(t_ns), -1, dtype=np.int64)
    has = flash_id != ""
    if has.any():
        code[has] = np.unique(flash_id[has], return_inverse=True)[1]
    first = np.full(code.max() + 2, np.iinfo(np.int64).max, dtype=np.int64)
    np.minimum.at(first, code + 1, t_ns)
    first[0] = t_ns.min()
    t0 = first[code + 1]
    return t0 + np.round((t_ns - t0).astype(np.float64) * scale).astype(np.int64)


def practice_context(catalog, *, dead_time_s=None, drop_flash_ids=False, keep_fraction=1.0,
                     time_scale=1.0, rng=None):
    """The flash context of the pulses another cataloguing practice would have kept.

    A station that records one window per trigger and is then dead for ``dead_time_s``
    catalogues the first pulse of a train and none of the steps that follow within the
    dead time (they are inside its record instead); a station that gives no flash ids
    has its flashes grouped (:func:`features.flashes.group_flashes`); a station with a
    higher trigger level or a cap on the pulses kept per flash catalogues only some of
    them (``keep_fraction``, at random), so a flash's first catalogued pulse need not be
    its first pulse; and storms elsewhere have flashes whose stages last longer or
    shorter (``time_scale`` stretches each pulse's time since its flash began). The
    context features (:mod:`features.context`) of the kept pulses then differ from those
    of a station that catalogues every pulse of this storm, and a model must not depend
    on the practice or on one storm's time scale.

    Parameters
    ----------
    catalog : Catalog
    dead_time_s : float, optional
        Dead time after each kept trigger, s (None: every pulse kept).
    drop_flash_ids : bool, default=False
        Ignore the catalog's flash ids (group flashes instead).
    keep_fraction : float, default=1.0
        Chance that each pulse is catalogued at all (before the dead time), 0-1.
    time_scale : float or ndarray, shape (n_events,), default=1.0
        Time of each pulse since the first pulse of its flash (of the catalog, for
        pulses without flash id) multiplied by this (> 0; 1: as recorded); one value
        per pulse gives each flash its own time scale when the values of a flash agree.
    rng : numpy.random.Generator, optional
        Random stream of the thinning (needed when ``keep_fraction < 1``).

    Returns
    -------
    keep : ndarray of bool, shape (n_events,)
        The pulses that practice catalogues.
    context : dict of str -> ndarray, shape (n_events,)
        Their flash context (NaN for pulses not kept).
    """
    from .context import flash_context
    from .flashes import group_flashes, pulse_positions_m

    n = catalog.n_events
    scale = np.broadcast_to(np.asarray(time_scale, dtype=np.float64), (n,))
    if not 0.0 < keep_fraction <= 1.0 or not np.all(scale > 0.0):
        raise ValueError("keep_fraction must be in (0, 1] and time_scale > 0")
    t = np.asarray(catalog.time_ns, dtype=np.int64)
    if n and np.any(scale != 1.0):
        t = _stretch_flashes(t, catalog.events["flash_id"].astype(str).to_numpy(), scale)
    keep = np.ones(n, dtype=bool)
    if keep_fraction < 1.0 and n:
        rng = np.random.default_rng() if rng is None else rng
        keep = rng.random(n) < keep_fraction
    if dead_time_s is not None and n:
        candidate = keep.copy()
        keep[:] = False
        dead_ns = int(round(dead_time_s * 1e9))
        last = None
        for i in np.argsort(t, kind="stable"):
            if not candidate[i]:
                continue
            if last is None or t[i] >= last + dead_ns:
                keep[i] = True
                last = int(t[i])
    rows = np.flatnonzero(keep)
    events = catalog.events.iloc[rows].reset_index(drop=True)
    codes = None
    if drop_flash_ids or not (events["flash_id"].astype(str) != "").any():
        codes = group_flashes(t[rows], pulse_positions_m(catalog)[rows])
    sources = None if catalog.sources is None else catalog.sources.subset(rows)
    sub = flash_context(events, t[rows], sources, codes)
    context = {}
    for key, val in sub.items():
        full = np.full(n, np.nan)
        full[rows] = val
        context[key] = full
    return keep, context


def unmapped_view(catalog, drop, *, drop_range=False):
    """The catalog as a station whose mapper located none of the pulses ``drop``.

    Parameters
    ----------
    catalog : Catalog
    drop : ndarray of bool, shape (n_events,)
        Pulses without mapped sources in the view.
    drop_range : bool, default=False
        Their ``range_m`` unknown too (a station whose ranges come from its own mapper),
        else kept (ranges from another network).

    Returns
    -------
    Catalog
        A view: the same waveforms and events, the sources of ``drop`` left out; the
        catalog on disk is not touched.
    """
    drop = np.asarray(drop, dtype=bool)
    if drop.shape != (catalog.n_events,):
        raise ValueError(f"drop: expected shape ({catalog.n_events},), got {drop.shape}")
    sources = None if catalog.sources is None else catalog.sources.without_events(drop)
    events = catalog.events
    if drop_range and drop.any():
        events = events.copy()
        events["range_m"] = np.where(drop, np.nan, events["range_m"].to_numpy(np.float64))
    return dataclasses.replace(catalog, sources=sources, events=events)

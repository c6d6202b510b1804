"""The stress family: stations drawn from ranges (domain randomisation).

``preset="stress"`` with ``member=K`` (an integer >= 0) starts from the reference
settings and replaces them with the station :func:`stress_settings` draws for member
``K``, deterministically (its own random stream, independent of the season seed).
Explicit keywords still override the draws. The ranges (uniform unless marked log):

=========================  ===========================================================
setting                    drawn
=========================  ===========================================================
field_rate_hz              5-20 MS/s, in steps of 0.5 MS/s
field_samples              a record of 200-800 us
pretrigger_s               30-100 us
units, scale               int16 counts, 0.03-0.3 V/m per count (log): a pulse of a few
                           tenths of V/m (a far leader step) is a few counts tall
field_noise_v_per_m        0.3-1 count rms
full_scale                 the clip level of a 12- to 16-bit digitizer in the int16 file
sign_convention            physics or atmospheric
decay_time_s               DC-coupled (30 %) or RC 0.1-1 ms (log)
field_delay_s              0-1 us
vhf_kind, vhf_rate_hz      power or band-limited voltage, 180-250 MS/s (steps of 5 MS/s)
band_hz                    20-40 MHz to 60-88 MHz (below 0.45 x the VHF rate)
vhf_samples                a VHF record of 40-120 us (at most the field record)
vhf_delay_s                0.2-1 us
vhf_gain, vhf_noise_floor  gain 0.3-3 (log); floor 0.1-3 x gain (log): low VHF SNR
vhf_full_scale             power (or its square root for voltage) of a pulse 15-25 dB
                           at 100 km seen at the geometric mean of the ranges: narrow
                           bipolar events (25-40 dB) saturate
range_km                   nearest 5-30 km (log), farthest 60-200 km
catalog_practice           every_pulse or one_per_trigger (50 % each); for
                           one_per_trigger a dead time of the post-trigger record plus
                           0-300 us
trigger_level_v_per_m      4-8 x the field noise rms
class_mix                  Dirichlet(1.5) over the four classes, each at least 3 %;
                           return_stroke (50 % of members) and initial_breakdown (30 %)
                           added with 3-15 % each
sferic_rate_hz             none (20 %) or 20-500 Hz (log)
mapping_outage_fraction    0-30 % of pulses without sources
mapping_down_fraction      0-30 % of the season's time without mapping, in stretches
with_xyz, with_range       3-D positions in 50 % of members, ranges in 70 %
angle_noise_deg            0.1-1 degree
xyz_noise_m                5-100 m
sources_per_event          5-30
missing_vhf_fraction       0-10 %
=========================  ===========================================================

The ranges are our choice (common practice, no source): wide enough to hold the
stations the features must survive, each one still a plausible instrument.
"""

from __future__ import annotations

from numbers import Integral

import numpy as np

from .._checks import InputError

__all__ = ["STRESS_STREAM", "stress_settings"]

#: First word of every stress member's random stream ("stress" in hexspeak-ish digits).
STRESS_STREAM = 0x57E55


def _log(rng, lo, hi):
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


def _sig(x, digits=3):
    return float(f"{x:.{digits}g}")


def _class_mix(rng):
    base = rng.dirichlet(np.full(4, 1.5))
    base = np.maximum(base, 0.03)
    mix = dict(zip(("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud"),
                   (round(float(x), 3) for x in base / base.sum()), strict=True))
    if rng.random() < 0.5:
        mix["return_stroke"] = round(rng.uniform(0.03, 0.15), 3)
    if rng.random() < 0.3:
        mix["initial_breakdown"] = round(rng.uniform(0.03, 0.15), 3)
    return mix


def stress_settings(member) -> dict:
    """The station drawn for stress-family member ``member``.

    Parameters
    ----------
    member : int
        Member number, >= 0. The same member always gives the same station.

    Returns
    -------
    dict
        Simulator settings (keywords of ``simulate_season``), including ``member``; see
        the module notes for the ranges.

    Raises
    ------
    ValueError
        ``member`` is not an integer >= 0.

    Examples
    --------
    >>> s = stress_settings(3)
    >>> s == stress_settings(3) and s["units"] == "counts"
    True
    """
    if not isinstance(member, Integral) or isinstance(member, bool) or member < 0:
        raise InputError(f"setting 'member' must be an integer >= 0, got {member!r}")
    member = int(member)
    rng = np.random.default_rng([STRESS_STREAM, member])
    out: dict = {"member": member, "season": f"2040-m{member}"}
    rate = 0.5e6 * round(rng.uniform(5e6, 20e6) / 0.5e6)
    record_s = rng.uniform(200e-6, 800e-6)
    pre = round(rng.uniform(30e-6, 100e-6), 6)
    scale = _sig(_log(rng, 0.03, 0.3))
    bits = int(rng.integers(12, 17))
    out.update(field_rate_hz=rate, field_samples=int(round(record_s * rate)), pretrigger_s=pre,
               units="counts", scale=scale,
               field_noise_v_per_m=_sig(rng.uniform(0.3, 1.0) * scale),
               full_scale=round((2 ** (bits - 1) - 1) * scale, 6),
               sign_convention=str(rng.choice(["physics", "atmospheric"])),
               decay_time_s=None if rng.random() < 0.3 else _sig(_log(rng, 1e-4, 1e-3)),
               field_delay_s=round(rng.uniform(0.0, 1e-6), 9))
    kind = str(rng.choice(["power", "voltage"]))
    vrate = 5e6 * round(rng.uniform(180e6, 250e6) / 5e6)
    lo = 1e6 * round(rng.uniform(20, 40))
    hi = 1e6 * min(round(rng.uniform(60, 88)), int(0.45 * vrate / 1e6))
    vrecord = min(rng.uniform(40e-6, 120e-6), record_s)
    gain = _sig(_log(rng, 0.3, 3.0))
    near, far = round(_log(rng, 5.0, 30.0), 1), round(rng.uniform(60.0, 200.0), 1)
    clip_power = gain * 10 ** (rng.uniform(15.0, 25.0) / 10) * (100.0 ** 2 / (near * far))
    out.update(vhf_kind=kind, vhf_rate_hz=vrate, band_hz=(lo, hi),
               vhf_samples=int(round(vrecord * vrate)),
               vhf_pretrigger_s=round(min(pre, 0.4 * vrecord), 7),
               vhf_delay_s=round(rng.uniform(0.2e-6, 1e-6), 9), vhf_gain=gain,
               vhf_noise_floor=_sig(gain * _log(rng, 0.1, 3.0)),
               vhf_full_scale=_sig(clip_power if kind == "power" else np.sqrt(clip_power)),
               range_km=(near, far))
    practice = str(rng.choice(["every_pulse", "one_per_trigger"]))
    dead = rng.uniform(0.0, 300e-6)
    out.update(catalog_practice=practice,
               dead_time_s=(round(out["field_samples"] / rate - pre + dead, 7)
                            if practice == "one_per_trigger" else None),
               trigger_level_v_per_m=_sig(rng.uniform(4.0, 8.0) * out["field_noise_v_per_m"]),
               class_mix=_class_mix(rng))
    out["sferic_rate_hz"] = 0.0 if rng.random() < 0.2 else _sig(_log(rng, 20.0, 500.0))
    out.update(mapping_outage_fraction=round(rng.uniform(0.0, 0.3), 3),
               mapping_down_fraction=round(rng.uniform(0.0, 0.3), 3),
               with_xyz=bool(rng.random() < 0.5), with_range=bool(rng.random() < 0.7),
               angle_noise_deg=round(rng.uniform(0.1, 1.0), 2),
               xyz_noise_m=round(rng.uniform(5.0, 100.0), 1),
               sources_per_event=round(rng.uniform(5.0, 30.0), 1),
               missing_vhf_fraction=round(rng.uniform(0.0, 0.1), 3))
    return out

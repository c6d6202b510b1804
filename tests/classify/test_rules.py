"""The cold-start rules decide textbook pulses as the literature describes them.

Each pulse below is a row of features with the values a textbook gives for its class
(source beside it, from memory); the rules must give it its class, or "other" for the
pulses that belong to none of the four.
"""

import numpy as np
import pandas as pd
import pytest

from classify import rules

#: A season's 25th percentile of VHF SNR, dB (the rules' VHF reference).
REF = {"vhf_q25_db": 10.0}


def _row(**kw):
    base = {c: np.nan for c in rules._COLUMNS}
    base.update(field_ok=1.0, near_field=0.0)
    base.update(kw)
    return base


TEXTBOOK = {
    # Smith et al. (1999): NBEs bipolar, initial half-cycle ~2-8 us, total 10-30 us,
    # isolated, VHF 10-30 dB above other in-cloud pulses, 7-20 km; peak at 100 km ~5-20
    # V/m; fast positive breakdown 1e7-1e8 m/s (Rison et al. 2016)
    "narrow_bipolar": _row(initial_half_cycle_s=4e-6, width_s=15e-6, fwhm_s=2e-6,
                           bipolarity=0.4, neighbours_before=0, neighbours_after=0,
                           largest_neighbour_ratio=0, vhf_snr_db=38.0, peak_current_a=-5e4,
                           range_normalized_peak_v_per_m=10.0, altitude_m=12e3,
                           speed_m_per_s=5e7, speed_snr=5.0),
    # Rakov & Uman 2003 ch. 4: leader steps ~1 us wide, 10-30 us apart in trains, weak
    # VHF relative to NBEs, leader 1e5-1e6 m/s
    "stepped_leader": _row(initial_half_cycle_s=1e-6, width_s=2.5e-6, fwhm_s=0.5e-6,
                           bipolarity=0.3, neighbours_before=2, neighbours_after=3,
                           largest_neighbour_ratio=1.2, neighbour_interval_s=20e-6,
                           vhf_snr_db=12.0, peak_current_a=3e3,
                           range_normalized_peak_v_per_m=-0.5, speed_m_per_s=2.5e5,
                           speed_snr=4.0, altitude_m=4e3),
    # a step inside a train when the station catalogues one record per trigger: no
    # catalogued neighbour, the train in its own record (the rules never look at the
    # catalog's neighbours)
    "stepped_leader_in_record": _row(initial_half_cycle_s=1.2e-6, width_s=3e-6,
                                     fwhm_s=0.6e-6, bipolarity=0.2, neighbours_after=4,
                                     neighbours_before=0, largest_neighbour_ratio=0.9,
                                     neighbour_interval_s=15e-6, vhf_snr_db=11.0),
    # Rakov & Uman 2003 ch. 9: K-change (recoil) pulses a few us, late in the flash on
    # old channels; recoil leaders ~1e6-2e7 m/s
    "recoil": _row(initial_half_cycle_s=4e-6, width_s=12e-6, fwhm_s=1.6e-6, bipolarity=0.2,
                   neighbours_before=0, neighbours_after=0, largest_neighbour_ratio=0,
                   vhf_snr_db=20.0, peak_current_a=8e3, range_normalized_peak_v_per_m=-1.0,
                   speed_m_per_s=5e6, speed_snr=6.0, time_in_flash_s=0.15,
                   channel_reuse=0.8),
    # Lyu et al. (2016): EIPs 100-400 kA (TL), wider than NBEs (half-cycle 10-30 us),
    # weak VHF for their size, 8-13 km, early in IC flashes
    "energetic_in_cloud": _row(initial_half_cycle_s=20e-6, width_s=60e-6, fwhm_s=10e-6,
                               bipolarity=0.4, neighbours_before=0, neighbours_after=0,
                               largest_neighbour_ratio=0, vhf_snr_db=16.0,
                               peak_current_a=-2e5, range_normalized_peak_v_per_m=40.0,
                               altitude_m=10e3, time_in_flash_s=3e-3),
}

OTHER = {
    # Rakov & Uman 2003 ch. 4: a first return stroke at 50-200 km crosses zero after
    # tens of us, a small overshoot; its channel reaches the ground
    "return_stroke": _row(initial_half_cycle_s=40e-6, zero_crossing_s=35e-6, width_s=80e-6,
                          fwhm_s=8e-6, bipolarity=0.1, neighbours_before=1,
                          largest_neighbour_ratio=0.3, neighbour_interval_s=25e-6,
                          vhf_snr_db=12.0, peak_current_a=-3e4,
                          range_normalized_peak_v_per_m=-6.0, altitude_m=1e3,
                          time_in_flash_s=0.02),
    # Rakov & Uman 2003 ch. 4: preliminary (initial) breakdown pulses of CG flashes,
    # bipolar, 20-40 us in all, tens to hundreds of us apart, in the first milliseconds
    "initial_breakdown": _row(initial_half_cycle_s=10e-6, width_s=30e-6, fwhm_s=4e-6,
                              bipolarity=0.5, neighbours_before=2, neighbours_after=2,
                              largest_neighbour_ratio=1.0, neighbour_interval_s=100e-6,
                              vhf_snr_db=14.0, peak_current_a=-2e4,
                              range_normalized_peak_v_per_m=-4.0, time_in_flash_s=1e-3),
    # a noise trigger: nothing measurable
    "nothing": _row(),
}


@pytest.mark.parametrize("name", list(TEXTBOOK))
def test_textbook_pulses_get_their_class(name):
    """Each textbook pulse scores highest for its class and is not 'other'."""
    df = pd.DataFrame([TEXTBOOK[name]])
    scores = rules.rule_scores(df, REF)
    expected = name.replace("_in_record", "")
    assert scores.idxmax(axis=1).iloc[0] == expected, scores.round(3).to_dict("records")
    assert not rules.other_pulses(df, scores, REF)[0]
    proba = rules.rule_proba(df, REF, scores)
    assert rules.CLASSES[int(np.argmax(proba[0]))] == expected


@pytest.mark.parametrize("name", list(OTHER))
def test_pulses_of_no_class_are_other(name):
    """Return strokes, initial-breakdown pulses and noise triggers are not forced in."""
    df = pd.DataFrame([OTHER[name]])
    assert rules.other_pulses(df, reference=REF)[0]


def test_missing_quantities_are_left_out_not_counted_against():
    """Without range, VHF and sources, an NBE is still an NBE on its shape and isolation."""
    row = dict(TEXTBOOK["narrow_bipolar"])
    for c in ("vhf_snr_db", "peak_current_a", "range_normalized_peak_v_per_m", "altitude_m",
              "speed_m_per_s", "speed_snr"):
        row[c] = np.nan
    scores = rules.rule_scores(pd.DataFrame([row]), REF)
    assert scores.idxmax(axis=1).iloc[0] == "narrow_bipolar"


def test_near_field_shape_is_not_held_against_a_pulse():
    """Close to the source a bipolar EIP reads unipolar: no shape criterion there."""
    row = dict(TEXTBOOK["energetic_in_cloud"], bipolarity=0.0, initial_half_cycle_s=np.nan,
               near_field=1.0)
    scores = rules.rule_scores(pd.DataFrame([row]), REF)
    assert scores.idxmax(axis=1).iloc[0] == "energetic_in_cloud"


def test_vhf_is_judged_against_the_season():
    """The same NBE VHF 28 dB over the noise is strong in a season whose bulk sits at 10 dB
    and ordinary in one whose bulk sits at 30 dB (another receiver)."""
    row = pd.DataFrame([dict(TEXTBOOK["narrow_bipolar"], vhf_snr_db=38.0)])
    strong = rules.rule_scores(row, {"vhf_q25_db": 10.0})["narrow_bipolar"].iloc[0]
    weak = rules.rule_scores(row, {"vhf_q25_db": 30.0})["narrow_bipolar"].iloc[0]
    assert strong > weak
    season = pd.DataFrame({"vhf_snr_db": np.arange(100.0)})
    assert rules.season_reference(season)["vhf_q25_db"] == pytest.approx(24.75)


def test_close_under_the_source_the_size_is_the_current_moment():
    """Right under an EIP its peak cannot be scaled by the radiation geometry (TL current
    and range-normalised peak NaN) and its field is clipped (no shape): the current
    moment of the exact inversion still tells a 100-400 kA EIP (Lyu et al. 2016; over a
    channel of some hundreds of metres, ~1e8 A m; computed) from a leader step (a few kA
    over tens of metres, ~1e5 A m; Rakov & Uman 2003 ch. 4; computed), alike otherwise."""
    common = dict(near_field=1.0, neighbours_before=0, neighbours_after=1,
                  largest_neighbour_ratio=0.3, vhf_snr_db=16.0, altitude_m=9e3)
    eip = rules.rule_scores(pd.DataFrame([_row(current_moment_peak_a_m=-1.5e8, **common)]),
                            REF)
    step = rules.rule_scores(pd.DataFrame([_row(current_moment_peak_a_m=2e5, **common)]),
                             REF)
    assert eip.idxmax(axis=1).iloc[0] == "energetic_in_cloud", eip.round(3).to_dict("records")
    assert step["energetic_in_cloud"].iloc[0] < eip["energetic_in_cloud"].iloc[0]
    assert step["stepped_leader"].iloc[0] > eip["stepped_leader"].iloc[0]
    # far away the moment is not a second size criterion: the scaled peak decides
    far = dict(TEXTBOOK["recoil"], current_moment_peak_a_m=-1.5e8)
    assert rules.rule_scores(pd.DataFrame([far]), REF).equals(
        rules.rule_scores(pd.DataFrame([TEXTBOOK["recoil"]]), REF))

"""The drift report: the champion's calibration on B and the value formatting."""

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from sklearn.linear_model import LogisticRegression

from classify.drift_report import champion_calibration, format_value
from classify.stats import expected_calibration_error


def _model_and_table(rng, n=600):
    y = rng.choice(np.array(["recoil", "stepped_leader"]), size=n)
    feats = pd.DataFrame({"event_id": [f"e{i}" for i in range(n)],
                          "bipolarity": rng.normal(np.where(y == "recoil", 0.5, 0.2), 0.15),
                          "flash_id": ""})
    model = LogisticRegression().fit(feats[["bipolarity"]], y)
    return model, feats, y


def test_champion_calibration_matches_the_ece_of_the_labelled_rows():
    """Only labelled rows of known classes are scored; ECE as computed directly."""
    rng = np.random.default_rng(0)
    model, feats, y = _model_and_table(rng)
    labels = pd.DataFrame({"event_id": feats["event_id"][:300].tolist() + ["e9999", "e300"],
                           "label": list(y[:300]) + ["recoil", "narrow_bipolar"]})
    cal = champion_calibration(model, feats, labels, n_bins=10)
    assert (cal.n_pulses, cal.n_skipped) == (300, 1)
    proba = model.predict_proba(feats[["bipolarity"]].iloc[:300])
    assert_allclose(cal.ece, expected_calibration_error(proba, y[:300], 10,
                                                        classes=model.classes_), rtol=1e-12)
    assert cal.curve["count"].sum() == 300
    assert champion_calibration(model, feats, labels.iloc[300:301]) is None


def test_format_value_units():
    """Display units from the setting name; fractions of events as percentages; None as none."""
    assert format_value("field.sample_rate_hz", 2e7) == "20 MHz"
    assert format_value("field.pretrigger_s", 1e-4) == "100 µs"
    assert format_value("field.decay_time_s", None) == "none"
    assert format_value("vhf.band_hz", (2.5e7, 8.5e7)) == "25-85 MHz"
    assert format_value("field.scale", 0.5) == "0.5"
    assert format_value("events.range_m", 0.5) == "50 % of events"
    assert format_value("sources.xyz", True) == "yes"
    assert format_value("field.sign_convention", "physics") == "physics"


def test_display_units_table():
    """One table turns SI values into engineering units for people."""
    from classify.display import DISPLAY_UNITS, display_unit, display_value

    assert display_value(3.59e-07, "s") == "0.359 µs"      # the drift page's old '3.59e-07'
    assert display_value(1.2e5, "m/s") == "120 km/s"
    assert display_value(2.5e4, "A") == "25 kA"
    assert display_value(0.25, "1") == "0.25" and display_unit("bool") == ""
    assert display_value(float("nan"), "s") == "" and display_value(None, "m") == ""
    for unit, (shown, factor) in DISPLAY_UNITS.items():
        assert shown and factor > 0, unit

"""When a trained model's decisions are fitted to the season (``season_fit``).

The rule is the project's own (fit when the model would send more than 2.5 % of the
usable pulses to review for doubt; no source): these tests check it counts the doubtful pulses
as :func:`classify.decide.decide` would send them, and says what it did. The fit itself
is exercised end to end in ``test_shift.py``.
"""

import numpy as np
import pandas as pd
import pytest

from classify.seasonfit import (
    AUTO_DOUBT_SHARE,
    close_under_source,
    doubtful,
    fit_to_season,
    season_fit_mode,
)
from classify.triage import TriageSettings
from features import InputError


def _decisions(n=200, n_low=0, n_two=0, n_novel=0, n_unusable=0):
    """Decisions of ``n`` pulses, all confident one-class ones but the ones asked for."""
    proba = np.tile([0.97, 0.01, 0.01, 0.01], (n, 1))
    sets = np.zeros((n, 4), dtype=bool)
    sets[:, 0] = True
    i = 0
    proba[i:i + n_low] = [0.6, 0.3, 0.05, 0.05]
    i += n_low
    sets[i:i + n_two, 1] = True
    i += n_two
    novelty = np.zeros(n)
    novelty[i:i + n_novel] = 5.0
    i += n_novel
    usable = np.ones(n, dtype=bool)
    usable[i:i + n_unusable] = False
    sets[~usable] = False
    return {"classes": np.array(["a", "b", "c", "d"]), "proba": proba, "relaxed": proba,
            "sets": sets, "novelty": novelty, "novelty_threshold": 1.0, "usable": usable,
            "version": "m-1", "adaptation": "sets adapted to the season at 0.95"}


def test_doubtful_counts_what_review_would_take():
    d = _decisions(n_low=3, n_two=4, n_novel=2, n_unusable=5)
    doubt = doubtful(d, review_below=0.8)
    assert doubt.sum() == 3 + 4 + 2                  # unusable records are not counted
    # a usable pulse whose raw set is empty gets its top class (decide completes it)
    d["sets"][50] = False
    assert doubtful(d, review_below=0.8).sum() == 9


@pytest.mark.parametrize("mode", ["auto", "never"])
def test_a_season_the_model_is_sure_of_is_left_as_it_is(mode):
    n_doubt = int(AUTO_DOUBT_SHARE * 200)            # exactly at the limit: not fitted
    d = _decisions(n_low=n_doubt)
    out = fit_to_season(d, lambda: pytest.fail("the season must not be read"), None,
                        TriageSettings(model_dir=None), mode=mode)
    for key in ("proba", "sets", "novelty"):
        assert out[key] is d[key]
    if mode == "auto":
        assert out["adaptation"] == ("sets adapted to the season at 0.95; no season fit "
                                     "(the model doubts 2.5 % of 200 usable pulses, <= 2.5 %)")
    else:
        assert out["adaptation"] == d["adaptation"]


def test_modes():
    assert [season_fit_mode(v) for v in (True, False, np.True_, "auto", "always", "never")] \
        == ["always", "never", "always", "auto", "always", "never"]
    with pytest.raises(InputError, match="season_fit: expected one of auto, always, never"):
        season_fit_mode("sometimes")


def test_pulses_close_under_their_source_are_not_anchors():
    """A pulse whose range is known but whose peak the radiation geometry cannot scale
    (range-normalised peak NaN: features.moments.radiation_led) is close under its
    source; one without range, or with an unusable field record, is not judged."""
    table = pd.DataFrame({"range_m": [2e3, 60e3, np.nan, 2e3],
                          "range_normalized_peak_v_per_m": [np.nan, 12.0, np.nan, np.nan],
                          "field_ok": [1.0, 1.0, 1.0, 0.0]})
    assert close_under_source(table).tolist() == [True, False, False, False]
    assert not close_under_source(table.drop(columns="range_m")).any()

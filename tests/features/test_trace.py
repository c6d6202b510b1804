"""pulse_trace shows what the features measured (self-consistency on a simulated season)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from features import open_catalog
from features.extract import extract_features
from features.simulate import simulate_season
from features.trace import pulse_trace


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    out = tmp_path_factory.mktemp("trace") / "hollowmere-trace"
    simulate_season(out, 60, seed=11)
    return open_catalog(out)


def test_trace_agrees_with_the_feature_table(season):
    """Extent, peak and neighbours of the plot are the table's, for every pulse."""
    table = extract_features(season).reset_index(drop=True)
    for row in range(season.n_events):
        tr = pulse_trace(season, row)
        f = table.iloc[row]
        if not f["field_ok"]:
            continue
        assert_allclose(tr["extent_s"][0], f["pulse_start_s"], atol=1e-12)
        if np.isfinite(f["pulse_end_s"]):   # NaN where the overshoot's tail is unresolved
            assert_allclose(tr["extent_s"][1], f["pulse_end_s"], atol=1e-12)
        assert tr["extent_s"][1] >= tr["extent_s"][0]
        assert_allclose(tr["peak_field_v_per_m"], f["peak_field_v_per_m"], rtol=1e-12)
        counted = np.abs(tr["neighbour_peaks_v_per_m"]) >= max(
            5 * tr["noise_v_per_m"], 0.1 * abs(f["peak_field_v_per_m"]))
        assert counted.sum() >= f["neighbours_before"] + f["neighbours_after"]
        assert tr["field_v_per_m"].shape == tr["time_s"].shape
        if tr["vhf_envelope"] is not None and np.isfinite(f["vhf_field_lag_s"]):
            assert_allclose(tr["peak_time_s"] - tr["vhf_peak_time_s"], f["vhf_field_lag_s"],
                            atol=1e-12)


def test_row_outside_the_catalog(season):
    with pytest.raises(IndexError, match="outside the catalog"):
        pulse_trace(season, season.n_events)


def test_whole_record_agrees_with_the_span(season):
    """The whole record, processed the same way, equals the analysed span where they meet."""
    for row in range(0, season.n_events, 7):
        span = pulse_trace(season, row)
        whole = pulse_trace(season, row, whole_record=True)
        assert whole["time_s"].size == season.field.n_samples
        idx = np.searchsorted(whole["time_s"], span["time_s"])
        assert_allclose(whole["time_s"][idx], span["time_s"], atol=1e-12)
        scale = np.nanmax(np.abs(span["field_v_per_m"]))
        assert_allclose(whole["field_v_per_m"][idx], span["field_v_per_m"], atol=1e-9 * scale)
        assert whole["extent_s"] == span["extent_s"]

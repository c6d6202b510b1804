"""Tests of features/schema.py: every numeric column states a tolerance, and the rule."""

import numpy as np
import pytest

from classify.cli import main
from features import schema
from features.schema import TRUTHS, Tolerance

NOISE_KINDS = ("field", "field/peak", "vhf", "snr")


def test_every_numeric_column_has_a_tolerance():
    """Each column that holds numbers states how far it may lie from its truth."""
    numeric = schema.numeric_feature_names()
    assert "peak_field_v_per_m" in numeric and "n_sources" in numeric
    assert "event_id" not in numeric and "field_censored" not in numeric
    missing = [f.name for f in schema.FEATURES if f.numeric and f.tolerance is None]
    assert missing == []


def test_tolerances_name_real_columns_and_options():
    """rel_of, noise, bound and of name schema columns; truth and db are known values."""
    names = set(schema.feature_names())
    for f in schema.FEATURES:
        t = f.tolerance
        if t is None:
            continue
        assert t.truth in TRUTHS, f.name
        assert t.db in (None, 10, 20), f.name
        assert t.noise in NOISE_KINDS or schema.get(t.noise).unit == f.unit or t.of, f.name
        for ref in (t.rel_of, t.bound, t.of):
            assert ref is None or ref in names, (f.name, ref)
        if t.bound is not None:
            assert schema.get(t.bound).unit == "bool", f.name
        if t.db is not None:
            assert f.unit == "dB", f.name
        assert min(t.rel, t.sigma, t.samples, t.vhf_bins, t.value) >= 0, f.name


def test_within_adds_every_term():
    """|x - t| <= rel |t| + sigma noise + samples dt + bins 0.1 us + value, each term alone
    (invented numbers, self-consistency)."""
    t = 2e-6
    assert Tolerance(rel=0.1).within([2.19e-6, 2.21e-6], t).tolist() == [True, False]
    assert Tolerance(sigma=2).within([2.5e-6, 2.7e-6], t, noise=0.3e-6).tolist() == [
        True, False]
    assert Tolerance(samples=1).within([1.81e-6, 1.79e-6], t, sample_s=0.2e-6).tolist() == [
        True, False]
    assert Tolerance(vhf_bins=1).within([2.09e-6, 2.11e-6], t).tolist() == [True, False]
    assert Tolerance(value=1e-9).within([t + 0.9e-9, t + 1.1e-9], t).tolist() == [True, False]
    assert Tolerance().within([2, 3], 2).tolist() == [True, False]  # exact


def test_within_rel_of_another_truth():
    """rel_of: an instant gets 10 % of the true width, not of its own value."""
    tol = Tolerance(rel=0.1, rel_of="width_s")
    # onset 0.5 us before the trigger, true width 4 us: 0.4 us allowed
    assert tol.within([-0.15e-6, -0.05e-6], -0.5e-6, ref=4e-6).tolist() == [True, False]


def test_within_db_compares_linear_power():
    """A dB column is compared in linear units: 10 log10(2) = 3.0103 dB (closed form), so a
    doubled power is within rel 1.0 and not within rel 0.99."""
    x = 10 * np.log10(2.0)
    assert bool(Tolerance(rel=1.0, db=10).within(x, 0.0))
    assert not bool(Tolerance(rel=0.99, db=10).within(x, 0.0))
    # amplitude dB (db=20): 20 log10(1.1) = 0.828 dB is a 10 % amplitude error
    assert bool(Tolerance(rel=0.1001, db=20).within(20 * np.log10(1.1), 0.0))
    assert not bool(Tolerance(rel=0.0999, db=20).within(20 * np.log10(1.1), 0.0))


def test_within_lower_bound_and_nan():
    """A censored value below the truth is right; NaN on either side is never within."""
    tol = Tolerance(rel=0.1)
    x, t = np.array([-5.0, -12.0, -5.0]), np.array([-10.0, -10.0, -10.0])
    assert tol.within(x, t, lower_bound=[True, True, False]).tolist() == [True, False, False]
    assert tol.within([np.nan, 1.0], [1.0, np.nan]).tolist() == [False, False]


def test_describe_says_the_rule_in_words():
    """The --list text states terms with units (times in us/ns)."""
    assert schema.get("rise_time_s").tolerance.describe("s") == "10 % + 1 sample"
    assert schema.get("vhf_field_lag_s").tolerance.describe("s") == (
        "1 sample + 1 VHF bin + 0.1 us")
    assert schema.get("polarity").tolerance.describe("1") == "exact"
    assert "[instrument]" in schema.get("snr_db").tolerance.describe("dB")


def test_list_shows_the_tolerances(capsys):
    """`pulsesort features --list` prints a tolerance column; the Markdown table does not."""
    assert main(["features", "--list"]) == 0
    out = capsys.readouterr().out
    header = out.splitlines()[1]
    assert header.split()[:4] == ["column", "unit", "model", "tolerance"]
    assert "10 % + 2 sigma" in out
    assert "tolerance" not in schema.format_table(markdown=True)


@pytest.mark.parametrize("name", ["speed_se_m_per_s", "vertical_speed_se_m_per_s",
                                  "angular_rate_se_deg_per_s"])
def test_standard_errors_are_checked_through_their_estimate(name):
    """A standard error has no per-pulse truth: its tolerance compares the estimate it
    belongs to, with this SE as the noise."""
    tol = schema.get(name).tolerance
    assert tol.of == name.replace("_se_", "_") and tol.noise == name and tol.sigma > 0

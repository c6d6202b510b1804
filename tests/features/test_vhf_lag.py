"""The VHF-field lag and ratio of a pulse whose field record is clipped."""

import numpy as np
from numpy.testing import assert_allclose

from features import extract_features, open_catalog, write_catalog
from features.vhf import MIN_RATIO_FIELD_SNR_DB


def test_lag_and_ratio_nan_where_the_field_is_clipped(tmp_path):
    """Two invented pulses of the fictional station hollowmere: the same Gaussian field
    pulse (sigma 1 us, at the trigger) with a Gaussian VHF power burst (sigma 0.3 us) 1 us
    before it; the second pulse is 3 times larger and clipped at 2 V/m full scale: its
    field is flat over |t| < sigma sqrt(2 ln 1.5) = 0.9 us (closed form), so its peak
    time, and the lag to it, is not known, nor its SNR (a lower bound): lag and ratio NaN.
    The unclipped pulse's lag is the closed form +1 us (VHF leads; within 0.1 us). A third
    pulse, 0.05 V/m in 0.01 V/m noise (14 dB): its field peak is known within
    20 log10(1 +- 2 / 5) = +2.9 / -4.4 dB (2 sigma), too coarse for the ratio: NaN."""
    t = np.arange(4000) / 20e6 - 100e-6                      # s, 20 MS/s
    pulse = np.exp(-0.5 * (t / 1e-6) ** 2)
    field = np.vstack([1.5 * pulse, np.minimum(3 * pulse, 2.0), 0.05 * pulse]).astype(np.float32)
    field += np.random.default_rng(1).normal(0, 0.01, field.shape).astype(np.float32)
    tv = np.arange(4000) / 25e6 - 60e-6                      # s, 25 MS/s
    burst = 1e-3 + np.exp(-0.5 * ((tv + 1e-6) / 0.3e-6) ** 2)
    vhf = np.vstack([burst, burst, burst]).astype(np.float32)
    folder = write_catalog(
        tmp_path / "hollowmere-clip",
        {"event_id": ["a", "b", "c"], "time_utc": ["2031-07-14T21:03:55.000001Z",
                                                   "2031-07-14T21:03:55.250000Z",
                                                   "2031-07-14T21:03:55.500000Z"]},
        field, field_meta={"sample_rate_hz": 20e6, "pretrigger_s": 100e-6, "units": "V/m",
                           "sign_convention": "physics", "decay_time_s": None,
                           "full_scale": 2.0},
        vhf=vhf, vhf_meta={"sample_rate_hz": 25e6, "kind": "power", "pretrigger_s": 60e-6},
        catalog_id="hollowmere-clip", station="hollowmere")
    f = extract_features(open_catalog(folder))
    assert list(f["field_censored"]) == [False, True, False]
    assert_allclose(f["vhf_field_lag_s"].iloc[0], 1e-6, atol=0.1e-6)
    assert np.isfinite(f["vhf_field_ratio_db"].iloc[0])
    assert np.isnan(f[["vhf_field_lag_s", "vhf_lag_first_peak_s",
                       "vhf_field_ratio_db"]].iloc[1]).all()
    assert 10 < f["snr_db"].iloc[2] < MIN_RATIO_FIELD_SNR_DB
    assert np.isnan(f["vhf_field_ratio_db"].iloc[2])
    assert np.isfinite(f["vhf_field_lag_s"].iloc[2])

"""Row helpers of features._rowops against NumPy's own definitions."""

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from features._rowops import SORT_MEDIAN_MAX, median_rows, nanmedian_rows


@pytest.mark.parametrize("width", [1, 2, 7, 200, 201, SORT_MEDIAN_MAX, SORT_MEDIAN_MAX + 1, 900])
def test_median_rows_is_numpy_median(width):
    """median_rows gives numpy.median's values bit for bit (ties and quantised rows too)."""
    rng = np.random.default_rng(0)
    a = rng.normal(size=(40, width))
    a[::3] = np.round(a[::3] * 4) / 4           # quantised rows: many ties
    a[5] = 0.0
    assert_array_equal(median_rows(a).view(np.int64), np.median(a, axis=1).view(np.int64))


def test_nanmedian_rows_is_numpy_nanmedian():
    """Rows with and without NaN, and an all-NaN row, as numpy.nanmedian gives them."""
    rng = np.random.default_rng(1)
    a = rng.normal(size=(30, 200))
    a[rng.random(a.shape) < 0.1] = np.nan
    a[::4] = rng.normal(size=(8, 200))          # some rows without NaN
    a[3] = np.nan
    with pytest.warns(RuntimeWarning):
        expected = np.nanmedian(a, axis=1)
    assert_array_equal(nanmedian_rows(a), expected)

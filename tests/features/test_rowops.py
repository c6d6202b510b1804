"""Row helpers of features._rowops against NumPy's own definitions."""

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from features._rowops import (
    SORT_MEDIAN_MAX,
    crossing_after,
    crossing_before,
    median_rows,
    nanmedian_rows,
)


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


def _crossing_before_by_definition(u, stop, level, start):
    """The last j in [start, stop) with u[j] < level, interpolated to j + 1; row by row
    (a flat step, or a level off the two samples, gives the nearer sample)."""
    out = np.full(len(u), np.nan)
    w = u.shape[1]
    for i, row in enumerate(u):
        cols = [j for j in range(w) if j >= start[i] and j < stop[i] and row[j] < level[i]]
        if cols:
            j = cols[-1]
            u0, u1 = row[j], row[min(j + 1, w - 1)]
            with np.errstate(all="ignore"):
                a = np.clip(np.float64(level[i] - u0) / (u1 - u0), 0.0, 1.0)
            out[i] = j + (a if np.isfinite(a) else 0.0)
    return out


def _crossing_after_by_definition(u, start, level, stop):
    """The first j in (start, stop) with u[j] < level, interpolated from j - 1; row by row."""
    out = np.full(len(u), np.nan)
    w = u.shape[1]
    for i, row in enumerate(u):
        cols = [j for j in range(w) if j > start[i] and j < stop[i] and row[j] < level[i]]
        if cols:
            j = cols[0]
            j0 = max(j - 1, 0)
            u0, u1 = row[j0], row[j]
            with np.errstate(all="ignore"):
                a = np.clip(np.float64(u0 - level[i]) / (u0 - u1), 0.0, 1.0)
            out[i] = j0 + (a if np.isfinite(a) else 1.0)
    return out


def test_crossing_searches_follow_their_definition():
    """Invented rows (self-consistency): the masked searches find what a plain scan of
    every allowed column finds, with float and out-of-range bounds."""
    rng = np.random.default_rng(3)
    n, w = 60, 3000
    u = np.cumsum(rng.normal(size=(n, w)), axis=1)
    level = rng.normal(0, 20, n)
    level[7] = np.nan
    a = rng.integers(-50, w + 50, n).astype(float)
    b = rng.integers(-50, w + 50, n).astype(float)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    lo[::5] += 0.5                                # fractional bounds
    hi[::7] -= 0.25
    before = crossing_before(u, hi, level, start=lo)
    after = crossing_after(u, lo, level, stop=hi)
    assert_array_equal(before, _crossing_before_by_definition(u, hi, level, lo))
    assert_array_equal(after, _crossing_after_by_definition(u, lo, level, hi))
    assert np.isfinite(before).sum() > 20 and np.isfinite(after).sum() > 20
    ints = np.clip(np.nan_to_num(lo), 0, w - 1).astype(np.intp)
    assert_array_equal(crossing_after(u, ints, level),
                       _crossing_after_by_definition(u, ints, level, np.full(n, w)))
    assert_array_equal(crossing_before(u, ints, level),
                       _crossing_before_by_definition(u, ints, level, np.zeros(n)))


def test_crossing_before_finds_crossings_beyond_its_first_search_windows():
    """Invented rows (self-consistency): one sample below the level at a given distance
    before the stop (on either side of the widths the backward search looks at first,
    and in front of start), as a scan of every allowed column finds it."""
    from features._rowops import SEARCH_BACK_COLUMNS as first

    distances = [1, first - 1, first, first + 1, 4 * first, 5 * first + 1, 21 * first,
                 21 * first + 7, 2500, 2999, 3000]
    n, w = len(distances), 3000
    u = np.ones((n, w))
    stop = np.full(n, w)
    stop[::3] = w - 5                              # rows with their own stops
    for i, d in enumerate(distances):
        if stop[i] - d >= 0:
            u[i, stop[i] - d] = -1.0
    level = np.zeros(n)
    start = np.zeros(n)
    start[8] = 600                  # its sample (column 500) lies before start: none
    got = crossing_before(u, stop, level, start=start)
    assert_array_equal(got, _crossing_before_by_definition(u, stop, level, start))
    # every row finds its sample but row 8 and row 9 (2,999 before its stop of 2,995:
    # outside the record, so it has none)
    assert_array_equal(np.flatnonzero(np.isnan(got)), [8, 9])


@pytest.mark.parametrize("width", [1, 5, 40, 300])
def test_moving_average_rows_is_the_centred_mean(width):
    """Each row's centred moving average (shortened at the edges) is the plain mean of
    its window, for windows shorter and longer than the row (invented rows)."""
    from features._rowops import moving_average_rows

    rng = np.random.default_rng(width)
    y = rng.normal(size=(6, width))
    k = np.array([1, 2, 3, 4, 7, 500])
    out = moving_average_rows(y, k)
    for i, kk in enumerate(np.clip(k, 1, width)):
        lo = (kk - 1) // 2
        expected = [y[i, max(j - lo, 0):min(j - lo + kk, width)].mean() for j in range(width)]
        np.testing.assert_allclose(out[i], expected, rtol=1e-12, atol=1e-12)


def test_moving_average_rows_from_a_given_running_sum():
    """With its running sum passed in (cumsum_rows, which is numpy.cumsum after a 0
    column), the moving average is the same numbers bit for bit, and still the plain
    mean of each window (invented rows, every window length from 1 to past the row)."""
    from features._rowops import cumsum_rows, moving_average_rows

    rng = np.random.default_rng(3)
    y = rng.normal(size=(12, 40))
    y[::4] = np.round(y[::4] * 2) / 2                  # quantised rows
    c = cumsum_rows(y)
    assert_array_equal(c[:, 1:], np.cumsum(y, axis=1))
    assert_array_equal(c[:, 0], 0.0)
    k = np.array([1, 2, 3, 4, 5, 9, 10, 17, 39, 40, 41, 3])
    out = moving_average_rows(y, k, cumsum=c)
    assert out.tobytes() == moving_average_rows(y, k).tobytes()
    rows = np.array([7, 2, 9])                         # a subset with its sums' rows
    assert (moving_average_rows(y[rows], k[rows], cumsum=c[rows]).tobytes()
            == out[rows].tobytes())
    for i, kk in enumerate(np.clip(k, 1, 40)):
        lo = (kk - 1) // 2
        expected = [y[i, max(j - lo, 0):min(j - lo + kk, 40)].mean() for j in range(40)]
        np.testing.assert_allclose(out[i], expected, rtol=1e-12, atol=1e-12)


def test_median_rows_without_the_sign_of_zero_is_numpy_median():
    """signed_zero=False: numpy.median's values (a 0 of either sign), on quantised rows
    holding many 0.0 and -0.0 samples."""
    rng = np.random.default_rng(4)
    a = np.round(rng.normal(size=(60, 200)) * 0.6)    # -0.0 where a small value rounds
    assert (np.signbit(a) & (a == 0)).any()
    expected = np.median(a, axis=1)
    assert (expected == 0).sum() > 10
    assert_array_equal(median_rows(a, signed_zero=False), expected)
    assert_array_equal(nanmedian_rows(a, signed_zero=False), expected)
    b = a.copy()
    b[::5, ::7] = np.nan
    assert_array_equal(nanmedian_rows(b, signed_zero=False), np.nanmedian(b, axis=1))


def test_running_sum_is_numpy_cumsum():
    """running_sum packs rows in pairs (a complex running sum): numpy.cumsum's numbers
    bit for bit, signed zeros, infinities and NaN included, for even and odd row counts
    and rows too few or too short to pair (invented rows)."""
    from features._rowops import running_sum

    rng = np.random.default_rng(6)
    for n, w in ((9, 100), (10, 300), (3, 500), (40, 20), (0, 80), (12, 0)):
        y = rng.normal(size=(n, w)) * 10.0 ** rng.uniform(-6, 6, size=(n, 1))
        y[rng.random(y.shape) < 0.05] = -0.0
        y[rng.random(y.shape) < 0.01] = np.inf
        y[rng.random(y.shape) < 0.01] = np.nan
        out = np.empty((n, w))
        with np.errstate(invalid="ignore"):
            expected = np.cumsum(y, axis=1)
            got = running_sum(y, out)
        assert got is out
        assert out.tobytes() == expected.tobytes()

"""Vectorised row operations used by the waveform features.

Every function works on a 2-D batch ``(n_rows, n_samples)`` at once, with one
index or level per row; "not found" is reported as a boolean mask or NaN,
never by a Python loop over rows.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "first_true",
    "last_true",
    "crossing_after",
    "crossing_before",
    "interp_rows",
    "take_rows",
    "cumtrapz_rows",
    "parabolic_peak",
]


def first_true(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the first True in each row and whether there is one."""
    j = mask.argmax(axis=1)
    found = mask[np.arange(mask.shape[0]), j]
    return j, found


def last_true(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the last True in each row and whether there is one."""
    w = mask.shape[1]
    j = w - 1 - mask[:, ::-1].argmax(axis=1)
    found = mask[np.arange(mask.shape[0]), j]
    return j, found


def take_rows(values: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """``values[i, idx[i]]`` for every row (``idx`` clipped into range)."""
    idx = np.clip(idx, 0, values.shape[1] - 1).astype(np.intp)
    return values[np.arange(values.shape[0]), idx]


def interp_rows(values: np.ndarray, frac_idx: np.ndarray) -> np.ndarray:
    """Linear interpolation of each row at a fractional sample index (NaN stays NaN)."""
    ok = np.isfinite(frac_idx)
    f = np.where(ok, frac_idx, 0.0)
    f = np.clip(f, 0, values.shape[1] - 1)
    j0 = np.floor(f).astype(np.intp)
    j1 = np.minimum(j0 + 1, values.shape[1] - 1)
    r = np.arange(values.shape[0])
    a = f - j0
    out = values[r, j0] * (1 - a) + values[r, j1] * a
    return np.where(ok, out, np.nan)


def crossing_before(u: np.ndarray, stop: np.ndarray, level: np.ndarray,
                    start: np.ndarray | None = None) -> np.ndarray:
    """Fractional index where each row last rises through ``level`` before ``stop``.

    The crossing lies between the last sample ``j < stop`` with ``u[j] < level``
    and ``j + 1``; it is linearly interpolated. NaN where no sample in
    ``[start, stop)`` is below the level.
    """
    cols = np.arange(u.shape[1])
    mask = (u < level[:, None]) & (cols < stop[:, None])
    if start is not None:
        mask &= cols >= start[:, None]
    j, found = last_true(mask)
    r = np.arange(u.shape[0])
    j1 = np.minimum(j + 1, u.shape[1] - 1)
    u0, u1 = u[r, j], u[r, j1]
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.clip((level - u0) / (u1 - u0), 0.0, 1.0)
    a = np.where(np.isfinite(a), a, 0.0)
    return np.where(found, j + a, np.nan)


def crossing_after(u: np.ndarray, start: np.ndarray, level: np.ndarray,
                   stop: np.ndarray | None = None, *, inclusive: bool = False) -> np.ndarray:
    """Fractional index where each row first falls through ``level`` after ``start``.

    The crossing lies between the first sample ``j > start`` with ``u[j] < level``
    (``<=`` when ``inclusive``) and ``j - 1``; linearly interpolated. NaN where
    none is found in ``(start, stop)``.
    """
    cols = np.arange(u.shape[1])
    below = (u <= level[:, None]) if inclusive else (u < level[:, None])
    mask = below & (cols > start[:, None])
    if stop is not None:
        mask &= cols < stop[:, None]
    j, found = first_true(mask)
    r = np.arange(u.shape[0])
    j0 = np.maximum(j - 1, 0)
    u0, u1 = u[r, j0], u[r, j]
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.clip((u0 - level) / (u0 - u1), 0.0, 1.0)
    a = np.where(np.isfinite(a), a, 1.0)
    return np.where(found, j0 + a, np.nan)


def cumtrapz_rows(y: np.ndarray, dt: float) -> np.ndarray:
    """Cumulative trapezoidal integral along each row, starting at 0 (same shape)."""
    out = np.empty_like(y)
    out[:, 0] = 0.0
    np.cumsum((y[:, 1:] + y[:, :-1]) * (0.5 * dt), axis=1, out=out[:, 1:])
    return out


def parabolic_peak(u: np.ndarray, j: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sub-sample position and height of a peak at sample ``j`` of each row.

    Fits a parabola through samples ``j - 1, j, j + 1``. The offset is limited
    to half a sample and the height to the range the three samples allow.
    """
    r = np.arange(u.shape[0])
    jm = np.clip(j - 1, 0, u.shape[1] - 1)
    jp = np.clip(j + 1, 0, u.shape[1] - 1)
    y0, y1, y2 = u[r, jm], u[r, j], u[r, jp]
    denom = y0 - 2 * y1 + y2
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.where(denom < 0, 0.5 * (y0 - y2) / denom, 0.0)
    d = np.clip(np.nan_to_num(d), -0.5, 0.5)
    d = np.where((j > 0) & (j < u.shape[1] - 1), d, 0.0)
    h = y1 - 0.25 * (y0 - y2) * d
    h = np.where(np.isfinite(h), np.maximum(h, y1), y1)
    return j + d, h

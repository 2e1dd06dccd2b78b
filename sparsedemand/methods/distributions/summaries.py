"""Summaries of PMFs: CDF, quantiles (dense or ragged), mean, variance, shortage and on-hand."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numba import njit

from ...errors import InputError
from .params import _LEVEL_SLACK

def _as_pmf(pmf) -> np.ndarray:
    arr = np.asarray(pmf, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] == 0:
        raise InputError(f"pmf must be 2-D (items x grid), got shape {arr.shape}")
    return arr


def pmf_cdf(pmf) -> np.ndarray:
    """``P(D <= k)`` for every grid point (cumulative sum along the grid)."""
    return np.cumsum(_as_pmf(pmf), axis=1)


def pmf_quantiles(pmf, levels) -> np.ndarray:
    """Smallest ``k`` with ``P(D <= k) >= level``, for each item and level.

    A rounding slack of 1e-12 is allowed on the cumulative sum; a level the
    grid never reaches (only possible at the grid cap) gives the last cell.

    Returns
    -------
    ndarray of int64, shape (n_items, n_levels)

    Examples
    --------
    >>> pmf_quantiles(np.array([[0.5, 0.3, 0.2]]), [0.5, 0.8, 0.81]).tolist()
    [[0, 1, 2]]
    """
    cdf = pmf_cdf(pmf)
    lv = np.atleast_1d(np.asarray(levels, dtype=np.float64))
    if lv.ndim != 1 or ((lv < 0) | (lv > 1) | np.isnan(lv)).any():
        raise InputError(f"quantile levels must lie in [0, 1], got {levels!r}")
    out = np.empty((cdf.shape[0], lv.size), dtype=np.int64)
    for j, level in enumerate(lv):
        hit = cdf >= level - _LEVEL_SLACK
        out[:, j] = np.where(hit.any(axis=1), hit.argmax(axis=1), cdf.shape[1] - 1)
    return out


@njit(cache=True)
def _ragged_quantile_kernel(flat, indptr, levels, slack):
    """Smallest k with cumulative probability >= level - slack, for each PMF row and level."""
    n = indptr.shape[0] - 1
    out = np.empty((n, levels.shape[0]), dtype=np.int64)
    for i in range(n):
        lo = indptr[i]
        hi = indptr[i + 1]
        for j in range(levels.shape[0]):
            target = levels[j] - slack
            c = 0.0
            k = hi - lo - 1  # the last cell when the level is never reached
            for t in range(lo, hi):
                c += flat[t]
                if c >= target:
                    k = t - lo
                    break
            out[i, j] = k
    return out


def ragged_quantiles(rows: Sequence, levels) -> np.ndarray:
    """:func:`pmf_quantiles` of PMF rows of different lengths, without padding them to one width.

    Parameters
    ----------
    rows : sequence of 1-D arrays
        One PMF per item (as from ``demand_pmfs(..., ragged=True)``).
    levels : sequence of float

    Returns
    -------
    ndarray of int64, shape (n_items, n_levels)

    Examples
    --------
    >>> ragged_quantiles([np.array([0.5, 0.5]), np.array([0.1, 0.1, 0.8])], [0.5, 0.9]).tolist()
    [[0, 1], [2, 2]]
    """
    levels = np.asarray(levels, dtype=np.float64)
    lengths = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    indptr = np.zeros(len(rows) + 1, dtype=np.int64)
    np.cumsum(lengths, out=indptr[1:])
    flat = np.concatenate(rows) if len(rows) else np.zeros(0)
    # the same slack as pmf_quantiles, so both agree cell for cell
    return _ragged_quantile_kernel(np.ascontiguousarray(flat, dtype=np.float64), indptr, levels, _LEVEL_SLACK)


def pmf_mean(pmf) -> np.ndarray:
    """Mean of each row's distribution."""
    p = _as_pmf(pmf)
    return p @ np.arange(p.shape[1], dtype=np.float64)


def pmf_var(pmf) -> np.ndarray:
    """Variance of each row's distribution."""
    p = _as_pmf(pmf)
    k = np.arange(p.shape[1], dtype=np.float64)
    m = p @ k
    return np.maximum(p @ (k * k) - m * m, 0.0)


def shortage_curve(pmf) -> np.ndarray:
    """``E[(D - s)^+]`` for ``s = 0 .. K`` (one extra column, always 0).

    Uses ``E[(D - s)^+] = sum_{k >= s} P(D > k)`` with the survival function
    summed from the right, which keeps tail probabilities accurate.

    Examples
    --------
    >>> shortage_curve(np.array([[0.5, 0.0, 0.5]])).tolist()  # D in {0, 2}
    [[1.0, 0.5, 0.0, 0.0]]
    """
    p = _as_pmf(pmf)
    surv = np.cumsum(p[:, ::-1], axis=1)[:, ::-1]  # P(D >= k)
    above = np.concatenate([surv[:, 1:], np.zeros((p.shape[0], 1))], axis=1)  # P(D > k)
    curve = np.cumsum(above[:, ::-1], axis=1)[:, ::-1]
    return np.concatenate([curve, np.zeros((p.shape[0], 1))], axis=1)


def _interp_curve(curve: np.ndarray, mean: np.ndarray, level) -> np.ndarray:
    """Evaluate ``E[(D - s)^+]`` at real levels: linear between whole numbers, ``E[D] - s`` below 0."""
    n, width = curve.shape
    s = np.asarray(level, dtype=np.float64)
    if s.ndim == 0:
        s = np.full(n, float(s))
    if s.shape != (n,):
        raise InputError(f"level must be one value or one per item ({n}), got shape {s.shape}")
    if np.isnan(s).any():
        raise InputError("level contains NaN")
    lo = np.clip(np.floor(s), 0, width - 1).astype(np.int64)
    hi = np.minimum(lo + 1, width - 1)
    rows = np.arange(n)
    frac = np.clip(s - lo, 0.0, 1.0)
    val = curve[rows, lo] + frac * (curve[rows, hi] - curve[rows, lo])
    return np.where(s < 0, mean - s, val)


def expected_shortage(pmf, level) -> np.ndarray:
    """``E[(D - level)^+]``: expected demand beyond a stock level, per item.

    Exact at whole-number levels and linear between them (``D`` is whole).

    Examples
    --------
    >>> expected_shortage(np.array([[0.5, 0.0, 0.5]]), 1.0).tolist()
    [0.5]
    """
    p = _as_pmf(pmf)
    return _interp_curve(shortage_curve(p), pmf_mean(p), level)


def expected_on_hand(pmf, level) -> np.ndarray:
    """``E[(level - D)^+] = level - E[D] + E[(D - level)^+]``: expected stock left, per item.

    Examples
    --------
    >>> expected_on_hand(np.array([[0.5, 0.0, 0.5]]), 2.0).tolist()
    [1.0]
    """
    p = _as_pmf(pmf)
    s = np.asarray(level, dtype=np.float64)
    return np.maximum(s - pmf_mean(p) + expected_shortage(p, level), 0.0)

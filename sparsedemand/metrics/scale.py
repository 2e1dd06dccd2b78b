"""In-sample scales (MASE, RMSSE, PIS), trimmed to each item's first demand, and excluded periods."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from numba import njit

from ..errors import InputError
from .holdout import _as_2d, _flags, _holdout, _item_label


# In-sample arrays are used as given (NaN kept, flags separate) so that a
# 30,000 x 2,000 history is read once by the kernels, without masked copies.
@njit(cache=True)
def _usable(raw, flags, has_flags, i, t):
    v = raw[i, t]
    return v == v and (not has_flags or flags[i, t])


@njit(cache=True)
def _start_kernel(raw):
    """First positive recorded value per row (n_periods if none), and the first negative entry."""
    n, T = raw.shape
    start = np.full(n, T, dtype=np.int64)
    bad = np.full(2, -1, dtype=np.int64)
    for i in range(n):
        for t in range(T):
            v = raw[i, t]
            if v < 0:
                bad[0] = i
                bad[1] = t
                return start, bad
            if v > 0 and start[i] == T:
                start[i] = t
    return start, bad


@njit(cache=True)
def _scale_kernel(raw, flags, has_flags, start):
    """Mean |diff|, mean diff^2, mean level, difference count and excluded periods from each start."""
    n, T = raw.shape
    mean_abs = np.full(n, np.nan)
    mean_sq = np.full(n, np.nan)
    mean_level = np.full(n, np.nan)
    count = np.zeros(n, dtype=np.int64)
    excluded = np.zeros(n, dtype=np.int64)
    for i in range(n):
        s_abs = 0.0
        s_sq = 0.0
        s_lvl = 0.0
        n_lvl = 0
        c = 0
        s = start[i]
        prev_ok = False
        for t in range(s, T):
            ok = _usable(raw, flags, has_flags, i, t)
            if ok:
                s_lvl += raw[i, t]
                n_lvl += 1
                if prev_ok:
                    d = raw[i, t] - raw[i, t - 1]
                    s_abs += abs(d)
                    s_sq += d * d
                    c += 1
            else:
                excluded[i] += 1
            prev_ok = ok
        count[i] = c
        if c > 0:
            mean_abs[i] = s_abs / c
            mean_sq[i] = s_sq / c
        if n_lvl > 0:
            mean_level[i] = s_lvl / n_lvl
    return mean_abs, mean_sq, mean_level, count, excluded


@dataclass(frozen=True)
class ItemScale:
    """In-sample scale of each item, from its first demand on.

    Attributes
    ----------
    mean_abs : ndarray (n_items,)
        Mean absolute one-step naive difference (the MASE scale); NaN when no
        difference could be formed.
    mean_sq : ndarray (n_items,)
        Mean squared one-step naive difference (the RMSSE scale).
    mean_demand : ndarray (n_items,)
        Mean available in-sample demand from the first demand on (scales PIS).
    differences : ndarray of int64 (n_items,)
        Number of naive differences used (both periods available).
    excluded : ndarray of int64 (n_items,)
        In-sample periods from the first demand on left out as unavailable.
    start : ndarray of int64 (n_items,)
        Offset of the first demand (``n_periods`` if the item never sold).
    """

    mean_abs: np.ndarray
    mean_sq: np.ndarray
    mean_demand: np.ndarray
    differences: np.ndarray
    excluded: np.ndarray
    start: np.ndarray

    @property
    def n_items(self) -> int:
        return self.mean_abs.shape[0]


@dataclass(frozen=True)
class _History:
    raw: np.ndarray  # (n, T) as given, NaN = unavailable
    flags: np.ndarray  # (n, T) bool, or (1, 1) dummy when has_flags is False
    has_flags: bool
    start: np.ndarray  # (n,) first positive recorded value


def _history(insample, insample_available, *, allow_1d: bool) -> _History:
    raw, one_d = _as_2d("insample", insample, allow_1d=allow_1d)
    start, bad = _start_kernel(raw)
    if bad[0] >= 0:
        raise InputError(f"insample: negative demand at {_item_label(int(bad[0]), one_d)}, period {int(bad[1])}")
    if insample_available is None:
        return _History(raw, np.ones((1, 1), dtype=np.bool_), False, start)
    flags = _flags("insample_available", insample_available, raw.shape)
    return _History(raw, flags, True, start)


def naive_scale(insample: npt.ArrayLike, *, insample_available: npt.ArrayLike | None = None) -> ItemScale:
    """In-sample scales of MASE and RMSSE, trimmed to each item's first demand.

    The MASE scale is the in-sample mean absolute one-step naive difference
    (Hyndman & Koehler 2006, "Another look at measures of forecast accuracy",
    IJF 22:679-688); the RMSSE scale is the mean squared one-step naive
    difference, both taken from the item's first positive demand on, as in
    Makridakis, Spiliotis & Assimakopoulos (2022, IJF 38:1346-1364). A difference is used only when both of its periods are
    available; NaN in ``insample`` counts as unavailable. The first demand is
    the first positive recorded value, flagged or not (as
    :attr:`sparsedemand.panel.DemandPanel.start`).

    Parameters
    ----------
    insample : array_like, shape (periods,) or (items, periods)
    insample_available : array_like of bool, same shape, optional

    Returns
    -------
    ItemScale

    Examples
    --------
    >>> s = naive_scale([0, 2, 0, 1])   # differences from period 1: |0-2|, |1-0|
    >>> float(s.mean_abs[0]), float(s.mean_sq[0]), int(s.differences[0])
    (1.5, 2.5, 2)
    """
    hist = _history(insample, insample_available, allow_1d=True)
    mean_abs, mean_sq, mean_level, count, excluded = _scale_kernel(hist.raw, hist.flags, hist.has_flags, hist.start)
    return ItemScale(mean_abs, mean_sq, mean_level, count, excluded, hist.start)


def _scale_of(insample, insample_available, n_items: int) -> ItemScale:
    if isinstance(insample, ItemScale):
        if insample_available is not None:
            raise InputError("insample_available: not used when insample is an ItemScale (it already holds the mask)")
        scale = insample
    else:
        if insample is None:
            raise InputError("insample: this metric needs the in-sample history for its scale")
        scale = naive_scale(insample, insample_available=insample_available)
    if scale.n_items != n_items:
        raise InputError(f"insample: {scale.n_items} items, actual has {n_items}")
    return scale


def _per_scale(value: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """value / scale with NaN where the scale is 0 or undefined."""
    if value.ndim == 2:
        scale = scale[:, None]
    good = np.isfinite(scale) & (scale > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(good, value / np.where(good, scale, 1.0), np.nan)


def excluded_periods(actual: npt.ArrayLike, *, available: npt.ArrayLike | None = None) -> int | np.ndarray:
    """Number of evaluation periods left out of the scores (flagged unavailable or NaN).

    Examples
    --------
    >>> excluded_periods([3.0, 0.0, 1.0], available=[True, False, True])
    1
    """
    h = _holdout(actual, available)
    counts = (~h.mask).sum(axis=1).astype(np.int64)
    return int(counts[0]) if h.one_d else counts

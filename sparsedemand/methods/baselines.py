"""Naive baselines a planner compares every method against.

* ``zeros``: forecast 0 (a point distribution at zero);
* ``mean_all``: mean over every available period of the row, leading zeros
  included;
* ``mean_since_first``: mean of the trimmed, available history (from the
  first demand on);
* ``mean_recent``: mean of the last ``window`` available periods of the
  trimmed history (all of it when shorter);
* ``repeat_last``: the last ``window`` available periods (default: as many
  as the horizon) repeated in order over the horizon;
* ``seasonal_mean``: for each future period, the mean of the available
  periods exactly ``m * season_length`` periods earlier (``m = 1, 2, ...``)
  within the trimmed history; the season length is counted in calendar
  periods (364 days, 52 weeks or 12 months, so weekdays line up). A future
  period with no such earlier period gets ``mean_since_first``.

All but ``zeros`` use the empirical predictive distribution (resampling the
item's own trimmed, available history); none has an in-sample cost (NaN).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ..errors import InputError
from ._input import MethodFit, PanelArrays, check_count, constant_mean, run_public
from .events import run_in_threads
from .smoothing import window_mean

__all__ = ["zeros", "mean_all", "mean_since_first", "mean_recent", "repeat_last",
           "seasonal_mean"]


@njit(cache=True, nogil=True)
def _totals(indptr, size):
    out = np.zeros(indptr.shape[0] - 1)
    for i in range(out.shape[0]):
        s = 0.0
        for k in range(indptr[i], indptr[i + 1]):
            s += size[k]
        out[i] = s
    return out


@njit(cache=True, nogil=True)
def _recent_kernel(i0, i1, indptr, pos, size, length, window, out):
    for i in range(i0, i1):
        n = length[i]
        out[i] = 0.0 if n == 0 else window_mean(
            pos[indptr[i]:indptr[i + 1]], size[indptr[i]:indptr[i + 1]], n, window
        )


@njit(cache=True, nogil=True)
def _repeat_kernel(i0, i1, indptr, pos, size, length, window, out):
    horizon = out.shape[1]
    for i in range(i0, i1):
        n = length[i]
        out[i, :] = 0.0
        if n == 0:
            continue
        w = min(window, n)
        j = indptr[i + 1] - 1
        # the demands inside the last w periods, by their place in that window
        while j >= indptr[i] and pos[j] >= n - w:
            slot = pos[j] - (n - w)
            for h in range(slot, horizon, w):
                out[i, h] = size[j]
            j -= 1


@njit(cache=True, nogil=True)
def _seasonal_kernel(i0, i1, values, available, has_mask, first, season, fallback, out):
    n_periods = values.shape[1]
    horizon = out.shape[1]
    for i in range(i0, i1):
        f0 = first[i]
        for h in range(horizon):
            if f0 >= n_periods:
                out[i, h] = 0.0
                continue
            c = n_periods + h - season
            while c >= n_periods:
                c -= season
            s = 0.0
            cnt = 0
            while c >= f0:
                if not has_mask or available[i, c]:
                    s += values[i, c]
                    cnt += 1
                c -= season
            out[i, h] = s / cnt if cnt > 0 else fallback[i]


def _empirical(name: str, mean: np.ndarray) -> MethodFit:
    n_items = mean.shape[0]
    return MethodFit(
        name=name,
        mean=np.maximum(mean, 0.0),
        params={},
        cost=np.full(n_items, np.nan),
        distribution="empirical",
        dist_params={},
    )


def _mean_per_period(total: np.ndarray, periods: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(periods > 0, total / np.maximum(periods, 1), 0.0)


def fit_zeros(data: PanelArrays, horizon: int) -> MethodFit:
    """Forecast 0 for every item."""
    n_items = data.n_items
    return MethodFit("zeros", np.zeros((n_items, horizon)), {}, np.full(n_items, np.nan),
                     "point", {})


def fit_mean_all(data: PanelArrays, horizon: int) -> MethodFit:
    """Mean over every available period of each row."""
    ev = data.events
    mean = _mean_per_period(_totals(ev.indptr, ev.size), ev.n_available)
    return _empirical("mean_all", constant_mean(mean, horizon))


def fit_mean_since_first(data: PanelArrays, horizon: int) -> MethodFit:
    """Mean of each item's trimmed, available history."""
    ev = data.events
    mean = _mean_per_period(_totals(ev.indptr, ev.size), ev.length)
    return _empirical("mean_since_first", constant_mean(mean, horizon))


def fit_mean_recent(data: PanelArrays, horizon: int, *, window: int = 12) -> MethodFit:
    """Mean of the last ``window`` available periods of each trimmed history."""
    w = check_count("window", window)
    ev = data.events
    mean = np.empty(ev.n_items)
    run_in_threads(_recent_kernel, ev.n_items, ev.indptr, ev.pos, ev.size, ev.length, w, mean)
    return _empirical("mean_recent", constant_mean(mean, horizon))


def fit_repeat_last(data: PanelArrays, horizon: int, *, window: int | None = None) -> MethodFit:
    """The last ``window`` (default ``horizon``) available periods, repeated."""
    w = horizon if window is None else check_count("window", window)
    ev = data.events
    out = np.empty((ev.n_items, horizon))
    run_in_threads(_repeat_kernel, ev.n_items, ev.indptr, ev.pos, ev.size, ev.length, w, out)
    return _empirical("repeat_last", out)


_NO_MASK = np.ones((1, 1), dtype=np.bool_)


def fit_seasonal_mean(data: PanelArrays, horizon: int, *, season_length: int | None = None
                      ) -> MethodFit:
    """Mean of the same period in earlier seasons (see the module docstring)."""
    if season_length is None:
        raise InputError(
            "season_length is required for seasonal_mean (364 for days, 52 for weeks, 12 for months)"
        )
    season = check_count("season_length", season_length, minimum=2)
    ev = data.events
    fallback = _mean_per_period(_totals(ev.indptr, ev.size), ev.length)
    mask = data.available
    out = np.empty((ev.n_items, horizon))
    run_in_threads(
        _seasonal_kernel, ev.n_items, data.values, _NO_MASK if mask is None else mask,
        mask is not None, ev.first, season, fallback, out,
    )
    return _empirical("seasonal_mean", out)


# ------------------------------------------------------------ public names
def zeros(y, horizon: int = 1, *, available=None, return_params: bool = False):
    """Forecast zero demand.

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand (only its shape is used).
    horizon : int
        Steps ahead.
    available : array-like of bool, optional
        Accepted for a uniform interface; has no effect.
    return_params : bool
        Also return the (empty) parameters and the (NaN) cost.

    Examples
    --------
    >>> zeros([0, 1, 2], horizon=2)
    array([0., 0.])
    """
    return run_public(fit_zeros, y, horizon, available, return_params, {})


def mean_all(y, horizon: int = 1, *, available=None, return_params: bool = False):
    """Mean over every available period, leading zeros included.

    Parameters as :func:`zeros`; NaN in ``y`` or ``available=False`` drops a period.

    Examples
    --------
    >>> mean_all([0, 0, 3, 1])
    array([1.])
    """
    return run_public(fit_mean_all, y, horizon, available, return_params, {})


def mean_since_first(y, horizon: int = 1, *, available=None, return_params: bool = False):
    """Mean from the first demand on, over available periods.

    Examples
    --------
    >>> mean_since_first([0, 0, 3, 1])
    array([2.])
    """
    return run_public(fit_mean_since_first, y, horizon, available, return_params, {})


def mean_recent(y, horizon: int = 1, *, window: int = 12, available=None,
                return_params: bool = False):
    """Mean of the last ``window`` available periods of the trimmed history.

    Examples
    --------
    >>> mean_recent([0, 4, 0, 2, 0, 1], window=2)
    array([0.5])
    """
    return run_public(fit_mean_recent, y, horizon, available, return_params,
                      dict(window=window))


def repeat_last(y, horizon: int = 1, *, window: int | None = None, available=None,
                return_params: bool = False):
    """Repeat the last ``window`` available periods (default: ``horizon`` of them).

    Examples
    --------
    >>> repeat_last([0, 4, 0, 2, 5], horizon=4, window=2)
    array([2., 5., 2., 5.])
    """
    return run_public(fit_repeat_last, y, horizon, available, return_params,
                      dict(window=window))


def seasonal_mean(y, horizon: int = 1, *, season_length: int | None = None, available=None,
                  return_params: bool = False):
    """Mean of the same period in earlier seasons of the trimmed history.

    Parameters
    ----------
    season_length : int
        Periods per season, required: 364 for days, 52 for weeks, 12 for months.

    Examples
    --------
    >>> seasonal_mean([1, 0, 3, 2, 0, 5], horizon=3, season_length=3)
    array([1.5, 0. , 4. ])
    """
    return run_public(fit_seasonal_mean, y, horizon, available, return_params,
                      dict(season_length=season_length))

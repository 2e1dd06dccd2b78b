"""Simple exponential smoothing (SES) and the moving average.

SES recurrence (on the trimmed, available series ``y[0..n-1]``, ``y[0] > 0``):
``level = y[0]``; for ``t = 1 .. n-1``: ``level <- level + alpha (y[t] - level)``;
the forecast is the final level for every step. The in-sample forecast for
period ``t`` is the level before the update at ``t``.

Moving average of order ``w``: the forecast is the mean of the last
``min(w, n)`` available periods of the trimmed history; in sample, the
forecast for period ``t`` is the mean of the ``min(w, t)`` periods before it.

Both kernels walk demands only: over a run of zero periods the SES level
decays geometrically and the moving average is constant until a demand
enters or leaves its window, and each cost has a closed form over such runs.
Their predictive distribution is normal with ``sigma`` the root mean squared
one-step in-sample error (when an item has no in-sample error, a single
period of history, ``sigma`` falls back to the forecast itself, a cautious
coefficient of variation of 1).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._input import (
    MethodFit,
    PanelArrays,
    check_bounds,
    check_constant,
    check_cost,
    check_count,
    constant_mean,
    run_public,
)
from ._fitting import SES, SMOOTH_ROWS, fit_smoothing
from ._recurrences import ses_item
from .events import run_in_threads
from .optimize import MSE, finish_cost, point_error, run_constant

__all__ = ["ses", "moving_average", "ses_item", "ma_item", "window_mean"]


@njit(cache=True, nogil=True)
def window_mean(pos, size, n, w):
    """Mean of the last ``min(w, n)`` periods of one item's trimmed history."""
    ww = min(w, n)
    total = 0.0
    j = pos.shape[0] - 1
    while j >= 0 and pos[j] >= n - ww:
        total += size[j]
        j -= 1
    return total / ww


@njit(cache=True, nogil=True, inline="always")
def _ma_run(pos, size, n, w, cost_code):
    k = pos.shape[0]
    acc = 0.0
    cum = 0.0
    s = 0.0
    i_in = 0  # first demand not yet inside the window
    i_out = 0  # first demand not yet dropped from the window
    t = 1
    # partial windows: the forecast for t is the mean of the t periods before it
    t_full = min(w, n)
    while t < t_full:
        while i_in < k and pos[i_in] < t:
            s += size[i_in]
            i_in += 1
        f = s / t
        e = size[i_in] - f if (i_in < k and pos[i_in] == t) else -f
        acc, cum = point_error(cost_code, acc, cum, e)
        t += 1
    while i_in < k and pos[i_in] < t:
        s += size[i_in]
        i_in += 1
    # full windows: the forecast is constant until a demand enters or leaves the window.
    # Demands i_out .. i_in-1 are inside; before demand i_in is observed (at its own
    # period) the demands that leave first each close a run of zeros.
    inv_w = 1.0 / w
    while i_in < k:
        p_in = pos[i_in]
        while i_out < i_in and pos[i_out] + w < p_in:
            leave = pos[i_out] + w + 1
            acc, cum = run_constant(cost_code, acc, cum, max(s, 0.0) * inv_w, leave - t)
            s -= size[i_out]
            i_out += 1
            t = leave
        f = max(s, 0.0) * inv_w
        acc, cum = run_constant(cost_code, acc, cum, f, p_in - t)
        acc, cum = point_error(cost_code, acc, cum, size[i_in] - f)
        s += size[i_in]
        i_in += 1
        t = p_in + 1
        if i_out < i_in and pos[i_out] + w + 1 == t:
            s -= size[i_out]
            i_out += 1
    # no demand left to enter: the remaining ones leave, then zeros to the end
    while t < n:
        leave = pos[i_out] + w + 1 if i_out < i_in else n
        leave = min(leave, n)
        acc, cum = run_constant(cost_code, acc, cum, max(s, 0.0) * inv_w, leave - t)
        if i_out < i_in:
            s -= size[i_out]
            i_out += 1
        t = leave
    return window_mean(pos, size, n, w), finish_cost(acc, n - 1)


@njit("UniTuple(float64, 2)(int64[::1], float64[::1], int64, int64, int64)", cache=True, nogil=True)
def ma_item(pos, size, n, w, cost_code):
    """One item: (forecast, in-sample cost) of the moving average of order ``w``."""
    if cost_code == MSE:  # the default and the sigma: a copy with the cost folded in
        return _ma_run(pos, size, n, w, MSE)
    return _ma_run(pos, size, n, w, cost_code)


@njit(cache=True, nogil=True)
def _ma_panel(i0, i1, indptr, pos, size, length, window, max_window, cost_code, out):
    for i in range(i0, i1):
        n = length[i]
        if n == 0:
            out[0, i] = 0.0
            out[1:, i] = np.nan
            continue
        p = pos[indptr[i]:indptr[i + 1]]
        s = size[indptr[i]:indptr[i + 1]]
        w = window
        if w == 0:
            # exhaustive over the orders; ties keep the shorter window
            best = np.inf
            w = 1
            for cand in range(1, max_window + 1):
                c = ma_item(p, s, n, cand, cost_code)[1]
                if c < best:
                    best = c
                    w = cand
        f, c = ma_item(p, s, n, w, cost_code)
        out[0, i] = max(f, 0.0)
        out[1, i] = c
        out[2, i] = w
        out[3, i] = c if cost_code == MSE else ma_item(p, s, n, w, MSE)[1]


def normal_sigma(mse: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Root mean squared in-sample error; the forecast itself where undefined."""
    sigma = np.sqrt(np.maximum(mse, 0.0))
    return np.where(np.isnan(sigma), np.maximum(mean, 0.0), sigma)


def fit_ses(
    data: PanelArrays,
    horizon: int,
    *,
    alpha: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
) -> MethodFit:
    """Fit SES for every item (see the module docstring)."""
    a = check_constant("alpha", alpha)
    code = check_cost(cost)
    lo, hi = check_bounds(bounds)
    out = fit_smoothing(data.events, SES, a, a, True, code, lo, hi)
    r = SMOOTH_ROWS
    mean = out[r["mean"]]
    return MethodFit(
        name="ses",
        mean=constant_mean(mean, horizon),
        params={"alpha": out[r["alpha"]]},
        cost=out[r["cost"]],
        distribution="normal",
        dist_params={"sigma": normal_sigma(out[r["mse"]], mean)},
    )


def fit_moving_average(
    data: PanelArrays,
    horizon: int,
    *,
    window: int | None = 4,
    max_window: int = 26,
    cost: str = "mse",
) -> MethodFit:
    """Fit the moving average for every item (see the module docstring)."""
    w = check_count("window", window, allow_none=True)
    wmax = check_count("max_window", max_window)
    code = check_cost(cost)
    ev = data.events
    out = np.empty((4, ev.n_items))
    run_in_threads(_ma_panel, ev.n_items, ev.indptr, ev.pos, ev.size, ev.length, w, wmax, code, out)
    return MethodFit(
        name="moving_average",
        mean=constant_mean(out[0], horizon),
        params={"window": out[2]},
        cost=out[1],
        distribution="normal",
        dist_params={"sigma": normal_sigma(out[3], out[0])},
    )


def ses(
    y,
    horizon: int = 1,
    *,
    alpha: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """Simple exponential smoothing of the trimmed, available history.

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand; NaN marks an unavailable period. Leading zeros are trimmed.
    horizon : int
        Steps ahead; the forecast is flat.
    alpha : float in (0, 1] or None
        Smoothing constant; ``None`` optimises it per item.
    cost : {"mse", "mae", "mar", "msr"}
        In-sample cost minimised when optimising.
    bounds : (float, float)
        Search range of an optimised constant.
    available : array-like of bool, optional
        False where a period is unavailable.
    return_params : bool
        Also return the fitted parameters and the in-sample cost per item.

    Returns
    -------
    ndarray of shape (horizon,) or (n_items, horizon); with
    ``return_params=True`` a tuple ``(forecast, params, cost)``.

    Examples
    --------
    >>> ses([0, 4, 0, 2], alpha=0.5)
    array([2.])
    """
    return run_public(
        fit_ses, y, horizon, available, return_params,
        dict(alpha=alpha, cost=cost, bounds=bounds),
    )


def moving_average(
    y,
    horizon: int = 1,
    *,
    window: int | None = 4,
    max_window: int = 26,
    cost: str = "mse",
    available=None,
    return_params: bool = False,
):
    """Mean of the last ``window`` available periods of the trimmed history.

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand; NaN marks an unavailable period. Leading zeros are trimmed.
    horizon : int
        Steps ahead; the forecast is flat.
    window : int or None
        Order of the average; ``None`` picks, per item, the order in
        ``1 .. max_window`` with the lowest in-sample cost.
    max_window : int
        Largest order tried when ``window=None``.
    cost : {"mse", "mae", "mar", "msr"}
        In-sample cost used to pick the order.
    available : array-like of bool, optional
        False where a period is unavailable.
    return_params : bool
        Also return the fitted window and the in-sample cost per item.

    Returns
    -------
    ndarray of shape (horizon,) or (n_items, horizon); with
    ``return_params=True`` a tuple ``(forecast, params, cost)``.

    Examples
    --------
    >>> moving_average([0, 4, 0, 2, 0, 0], window=3)
    array([0.66666667])
    """
    return run_public(
        fit_moving_average, y, horizon, available, return_params,
        dict(window=window, max_window=max_window, cost=cost),
    )

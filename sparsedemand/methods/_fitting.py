"""One driver for every exponential-smoothing kernel (Croston, SBA, SBJ, TSB, SES).

The kernels differ only in their per-item recurrence; the search over their
smoothing constants and the loop over items are the same, so they live here
once. :func:`smooth_fit_item` is also what temporal aggregation calls on each
aggregated series.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._input import MethodFit, compound_params, constant_mean
from ._recurrences import bias_factor, croston_item, ses_item, tsb_item
from .events import Events, run_in_threads, size_moments
from .optimize import MSE, STATE_SIZE, WORK_SIZE, plan_ask, plan_best, plan_start, plan_tell

__all__ = ["CROSTON", "SBA", "SBJ", "TSB", "SES", "SMOOTH_ROWS", "smooth_item",
           "smooth_fit_item", "fit_smoothing", "fit_compound"]

CROSTON, SBA, SBJ, TSB, SES = 0, 1, 2, 3, 4
# rows of the array fit_smoothing returns
SMOOTH_ROWS = {"mean": 0, "cost": 1, "alpha": 2, "beta": 3, "p": 4, "z": 5, "mse": 6}
_NAN = np.nan


@njit("UniTuple(float64, 4)(int64, int64[::1], float64[::1], int64, float64, float64, int64, float64[::1])", cache=True, nogil=True)
def smooth_item(method, pos, size, n, a, b, cost_code, work):
    """(forecast, cost, p, z) of one item; p and z are NaN for SES; ``work``: scratch."""
    if method <= SBJ:
        f, c, z, x = croston_item(pos, size, n, a, b, method, cost_code)
        return f, c, bias_factor(method, b) / x, z
    if method == TSB:
        return tsb_item(pos, size, n, a, b, cost_code, work)
    f, c = ses_item(pos, size, n, a, cost_code, work)
    return f, c, _NAN, _NAN


@njit("UniTuple(float64, 7)(int64, int64[::1], float64[::1], int64, float64, float64, boolean, int64, float64, float64, float64[::1])", cache=True, nogil=True)
def smooth_fit_item(method, pos, size, n, alpha, beta, tie, cost_code, lo, hi, st):
    """Optimise the NaN constants of one item, then fit: (f, cost, a, b, p, z, mse).

    ``st`` holds ``WORK_SIZE`` floats: the search state, then scratch.
    """
    work = st[STATE_SIZE:]
    plan_start(st, alpha, beta, tie, lo, hi)
    while True:
        a, b = plan_ask(st)
        if a != a:
            break
        plan_tell(st, smooth_item(method, pos, size, n, a, b, cost_code, work)[1])
    a, b, _ = plan_best(st)
    f, c, p, z = smooth_item(method, pos, size, n, a, b, cost_code, work)
    mse = c if cost_code == MSE else smooth_item(method, pos, size, n, a, b, MSE, work)[1]
    return f, c, a, b, p, z, mse


@njit(cache=True, nogil=True)
def _smooth_panel(i0, i1, indptr, pos, size, length, method, alpha, beta, tie, cost_code, lo, hi,
                  out):
    st = np.empty(WORK_SIZE)
    for i in range(i0, i1):
        n = length[i]
        if n == 0:
            out[0, i] = 0.0
            out[1:, i] = _NAN
            out[4, i] = 0.0
            out[5, i] = 0.0
            continue
        lo_i = indptr[i]
        hi_i = indptr[i + 1]
        f, c, a, b, p, z, mse = smooth_fit_item(
            method, pos[lo_i:hi_i], size[lo_i:hi_i], n, alpha, beta, tie, cost_code, lo, hi, st
        )
        out[0, i] = max(f, 0.0)
        out[1, i] = c
        out[2, i] = a
        out[3, i] = _NAN if method == SES else b
        out[4, i] = p
        out[5, i] = z
        out[6, i] = mse


def fit_smoothing(events: Events, method: int, alpha: float, beta: float, tie: bool,
                  cost_code: int, lo: float, hi: float) -> np.ndarray:
    """Fit one smoothing method to every item; rows as in ``SMOOTH_ROWS``.

    ``alpha``/``beta`` NaN means optimise per item within ``[lo, hi]``;
    ``tie`` makes beta follow alpha. Items that never sold get forecast 0.
    """
    out = np.empty((len(SMOOTH_ROWS), events.n_items))
    run_in_threads(
        _smooth_panel, events.n_items, events.indptr, events.pos, events.size, events.length,
        method, float(alpha), float(beta), bool(tie), int(cost_code), float(lo), float(hi), out,
    )
    return out


def fit_compound(name: str, events: Events, horizon: int, method: int, alpha: float, beta: float,
                 tie: bool, cost_code: int, lo: float, hi: float) -> MethodFit:
    """Fit a Croston-family method or TSB and express it as a compound distribution.

    ``p`` is the (bias-corrected) demand probability and ``size_mean`` the
    smoothed size, so ``p * size_mean`` is the forecast.
    """
    out = fit_smoothing(events, method, alpha, beta, tie, cost_code, lo, hi)
    r = SMOOTH_ROWS
    _, size_var = size_moments(events)
    return MethodFit(
        name=name,
        mean=constant_mean(out[r["mean"]], horizon),
        params={"alpha": out[r["alpha"]], "beta": out[r["beta"]]},
        cost=out[r["cost"]],
        distribution="compound",
        dist_params=compound_params(out[r["p"]], out[r["z"]], size_var),
    )

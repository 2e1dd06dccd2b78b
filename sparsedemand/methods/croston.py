"""Croston's method and its bias-corrected variants SBA and SBJ.

Recurrence (on the trimmed, available series ``y[0..n-1]``, ``y[0] > 0``,
demands at ``t1 = 0 < t2 < ... < tk``):

* start: size ``z = y[t1]``; interval ``x = t2 - t1`` (``x = 1`` when there
  is only one demand);
* at every later demand ``j = 2 .. k``:
  ``z <- z + alpha (y[tj] - z)`` and ``x <- x + beta ((tj - t(j-1)) - x)``;
* forecast ``c * z / x`` for every step of the horizon, with ``c = 1`` for
  Croston (1972, Operational Research Quarterly 23:289-303),
  ``c = 1 - beta / 2`` for SBA (Syntetos & Boylan 2005, International Journal
  of Forecasting 21:303-314) and ``c = 1 - beta / (2 - beta)`` for SBJ
  (Shale, Boylan & Johnston 2006, Journal of the Operational Research Society
  57:588-592).

By default one constant serves both roles (``beta="same"``); separate
constants for size and interval (Kourentzes 2014, International Journal of
Production Economics 156:180-190) are set with ``beta=``. The in-sample
one-step forecast for period ``t`` is ``c * z / x`` from the state after the
demands before ``t``; costs are taken over ``t = 1 .. n-1``.
"""

from __future__ import annotations

from numba import njit

from ..errors import InputError
from ._input import (
    MethodFit,
    PanelArrays,
    check_bounds,
    check_constant,
    check_cost,
    run_public,
)
from .optimize import MAE, MSE, finish_cost, point_error, run_constant

__all__ = ["croston", "sba", "sbj", "croston_item", "bias_factor", "SAME"]

SAME = "same"
_FACTOR = {"croston": 0, "sba": 1, "sbj": 2}


@njit(cache=True, nogil=True)
def bias_factor(code, beta):
    """1 for Croston, ``1 - beta/2`` for SBA, ``1 - beta/(2 - beta)`` for SBJ."""
    if code == 1:
        return 1.0 - beta / 2.0
    if code == 2:
        return 1.0 - beta / (2.0 - beta)
    return 1.0


@njit(cache=True, nogil=True, fastmath={"contract"})
def croston_item(pos, size, n, alpha, beta, factor_code, cost_code):
    """One item: (forecast, in-sample cost, final size z, final interval x)."""
    # ``z + a (y - z)`` is computed as ``(1 - a) z + a y``: equal up to rounding, and the
    # running state then waits on one multiply-add per demand instead of three steps
    c = bias_factor(factor_code, beta)
    k = pos.shape[0]
    z = size[0]
    x = float(pos[1] - pos[0]) if k > 1 else 1.0
    ra = 1.0 - alpha
    rb = 1.0 - beta
    f = c * z / x
    acc = 0.0
    acc_runs = 0.0  # squared or absolute errors of the zero runs, summed apart
    cum = 0.0
    for j in range(1, k):
        gap = pos[j] - pos[j - 1]
        y = size[j]
        if cost_code == MSE:
            acc_runs += (gap - 1) * (f * f)
            acc += (y - f) * (y - f)
        elif cost_code == MAE:
            acc_runs += (gap - 1) * f
            acc += abs(y - f)
        else:
            acc, cum = run_constant(cost_code, acc, cum, f, gap - 1)
            acc, cum = point_error(cost_code, acc, cum, y - f)
        z = ra * z + alpha * y
        x = rb * x + beta * gap
        f = c * z / x
    acc, cum = run_constant(cost_code, acc + acc_runs, cum, f, n - 1 - pos[k - 1])
    return f, finish_cost(acc, n - 1), z, x


def fit_croston_family(
    data: PanelArrays,
    horizon: int,
    *,
    variant: str = "croston",
    alpha: float | None = 0.1,
    beta: float | None | str = SAME,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
) -> MethodFit:
    """Fit Croston, SBA or SBJ for every item (see the module docstring)."""
    from ._fitting import fit_compound  # the shared driver imports this module

    a = check_constant("alpha", alpha)
    tie = isinstance(beta, str) and beta == SAME
    if isinstance(beta, str) and not tie:
        raise InputError(f"beta must be a number in (0, 1], None or {SAME!r}, got {beta!r}")
    b = a if tie else check_constant("beta", beta)
    code = check_cost(cost)
    lo, hi = check_bounds(bounds)
    return fit_compound(variant, data.events, horizon, _FACTOR[variant], a, b, tie, code, lo, hi)


def croston(
    y,
    horizon: int = 1,
    *,
    alpha: float | None = 0.1,
    beta: float | None | str = SAME,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """Croston's forecast of the demand rate ``z / x``.

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand; NaN marks an unavailable period. Leading zeros are trimmed per
        row and unavailable periods are skipped.
    horizon : int
        Steps ahead; the forecast is flat.
    alpha : float in (0, 1] or None
        Smoothing constant of the demand size; ``None`` optimises it per item.
    beta : float in (0, 1], None or "same"
        Smoothing constant of the interval; ``"same"`` uses ``alpha``,
        ``None`` optimises it separately.
    cost : {"mse", "mae", "mar", "msr"}
        In-sample cost minimised when optimising (see
        :mod:`sparsedemand.methods.optimize` for the definitions).
    bounds : (float, float)
        Search range of optimised constants.
    available : array-like of bool, optional
        False where a period is unavailable (same shape as ``y``).
    return_params : bool
        Also return the fitted parameters and the in-sample cost per item.

    Returns
    -------
    ndarray of shape (horizon,) or (n_items, horizon); with
    ``return_params=True`` a tuple ``(forecast, params, cost)``.

    Examples
    --------
    >>> croston([0, 3, 0, 0, 2, 0], horizon=2, alpha=0.5)
    array([0.83333333, 0.83333333])
    """
    return run_public(
        fit_croston_family, y, horizon, available, return_params,
        dict(variant="croston", alpha=alpha, beta=beta, cost=cost, bounds=bounds),
    )


def sba(
    y,
    horizon: int = 1,
    *,
    alpha: float | None = 0.1,
    beta: float | None | str = SAME,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """Syntetos-Boylan approximation: Croston times ``1 - beta / 2``.

    Same parameters and returns as :func:`croston`.

    Examples
    --------
    >>> sba([0, 3, 0, 0, 2, 0], alpha=0.5)
    array([0.625])
    """
    return run_public(
        fit_croston_family, y, horizon, available, return_params,
        dict(variant="sba", alpha=alpha, beta=beta, cost=cost, bounds=bounds),
    )


def sbj(
    y,
    horizon: int = 1,
    *,
    alpha: float | None = 0.1,
    beta: float | None | str = SAME,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """Shale-Boylan-Johnston correction: Croston times ``1 - beta / (2 - beta)``.

    Same parameters and returns as :func:`croston`.

    Examples
    --------
    >>> sbj([0, 3, 0, 0, 2, 0], alpha=0.5)
    array([0.55555556])
    """
    return run_public(
        fit_croston_family, y, horizon, available, return_params,
        dict(variant="sbj", alpha=alpha, beta=beta, cost=cost, bounds=bounds),
    )

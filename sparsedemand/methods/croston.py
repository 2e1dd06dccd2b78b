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

from ..errors import InputError
from ._input import (
    MethodFit,
    PanelArrays,
    check_bounds,
    check_constant,
    check_cost,
    run_public,
)
from ._fitting import fit_compound
from ._recurrences import bias_factor, croston_item

__all__ = ["croston", "sba", "sbj", "croston_item", "bias_factor", "SAME"]

SAME = "same"
_FACTOR = {"croston": 0, "sba": 1, "sbj": 2}


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

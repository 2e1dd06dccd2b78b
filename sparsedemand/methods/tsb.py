"""TSB: Teunter, Syntetos & Babai (2011, European Journal of Operational Research 214:606-615).

Recurrence (on the trimmed, available series ``y[0..n-1]``, ``y[0] > 0``):

* start: size ``z = y[0]``; demand probability ``p = 1 / x`` with ``x`` the
  first inter-demand interval (``x = 1`` when there is only one demand);
* for every period ``t = 1 .. n-1``: ``p <- p + beta (1[y[t] > 0] - p)``, and
  when ``y[t] > 0`` also ``z <- z + alpha (y[t] - z)``;
* forecast ``p * z`` for every step.

Unlike Croston, the probability decays through every period without demand,
so an item that stopped selling has its forecast fade towards zero. The
in-sample forecast for period ``t`` is ``p * z`` before the update at ``t``.
The kernel walks demands only: over a run of ``m`` zero periods ``p`` is
multiplied by ``(1 - beta) ** m`` and the run's cost has a closed form.
"""

from __future__ import annotations

from ._input import (
    MethodFit,
    PanelArrays,
    check_bounds,
    check_constant,
    check_cost,
    run_public,
)
from ._fitting import TSB, fit_compound
from ._recurrences import tsb_item

__all__ = ["tsb", "tsb_item"]


def fit_tsb(
    data: PanelArrays,
    horizon: int,
    *,
    alpha: float | None = 0.1,
    beta: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
) -> MethodFit:
    """Fit TSB for every item (see the module docstring)."""
    a = check_constant("alpha", alpha)
    b = check_constant("beta", beta)
    code = check_cost(cost)
    lo, hi = check_bounds(bounds)
    return fit_compound("tsb", data.events, horizon, TSB, a, b, False, code, lo, hi)


def tsb(
    y,
    horizon: int = 1,
    *,
    alpha: float | None = 0.1,
    beta: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """TSB forecast ``p * z`` (demand probability times demand size).

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand; NaN marks an unavailable period. Leading zeros are trimmed.
    horizon : int
        Steps ahead; the forecast is flat.
    alpha : float in (0, 1] or None
        Smoothing constant of the size; ``None`` optimises it per item.
    beta : float in (0, 1] or None
        Smoothing constant of the probability; ``None`` optimises it.
    cost : {"mse", "mae", "mar", "msr"}
        In-sample cost minimised when optimising.
    bounds : (float, float)
        Search range of optimised constants.
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
    >>> tsb([0, 3, 0, 0, 2, 0], alpha=0.5, beta=0.5)
    array([0.67708333])
    """
    return run_public(
        fit_tsb, y, horizon, available, return_params,
        dict(alpha=alpha, beta=beta, cost=cost, bounds=bounds),
    )

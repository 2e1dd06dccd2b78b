"""Stock-flavoured point metrics: periods in stock (PIS) and the number of shortages."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .holdout import Score, _Holdout, _holdout, _point
from .scale import ItemScale, _per_scale, _scale_of


def _cumulative_stock(h: _Holdout, f: np.ndarray) -> np.ndarray:
    """Running sum of ``forecast - actual`` over the scored periods only."""
    return np.cumsum(np.where(h.mask, f - h.actual, 0.0), axis=1)


def pis(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
    scaled: bool = False,
) -> Score:
    """Periods in stock, PIS (Wallström & Segerstedt 2010, IJPE 128:625-636).

    Treats the forecast as the supply of each period and sums the running
    stock ``sum_{j<=t} (forecast_j - actual_j)`` over the periods: positive
    means units carried in stock (units x periods), negative means periods
    spent short. Unavailable periods are deleted from the series before the
    running sum. With ``scaled=True`` the result is divided by the item's
    mean in-sample demand from its first demand on (the scaled PIS of
    Kourentzes 2014, IJPE 156:180-190; from memory); otherwise ``insample``
    is unused.

    Examples
    --------
    >>> pis(None, [0, 3, 0], [1, 1, 1])   # running stock 1, -1, 0 -> 0
    0.0
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    value = np.where(h.mask, _cumulative_stock(h, f), 0.0).sum(axis=1)
    value = np.where(h.mask.any(axis=1), value, np.nan)
    if scaled:
        value = _per_scale(value, _scale_of(insample, insample_available, h.n_items).mean_demand)
    return h.out(value)


def shortages(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Number of shortages: scored periods whose running stock of PIS is negative.

    The running stock is that of :func:`pis` (Wallström & Segerstedt 2010,
    IJPE 128:625-636; the count as defined there is from memory). Returns
    float counts so that items with no scored period can be NaN.

    Examples
    --------
    >>> shortages(None, [0, 3, 0, 0], [1, 1, 1, 0])   # running stock 1, -1, 0, 0
    1.0
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    stock = _cumulative_stock(h, f)
    # Tolerance for rounding in the running sum of fractional forecasts.
    tol = 1e-9 * (1.0 + np.cumsum(np.where(h.mask, np.abs(f) + h.actual, 0.0), axis=1))
    count = (h.mask & (stock < -tol)).sum(axis=1).astype(np.float64)
    return h.out(np.where(h.mask.any(axis=1), count, np.nan))

"""Item weights by volume or value, and the weighted mean of per-item scores."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..errors import InputError
from .holdout import _as_2d, _availability


def item_weights(
    history: npt.ArrayLike,
    *,
    last: int,
    unit_price: npt.ArrayLike | None = None,
    available: npt.ArrayLike | None = None,
) -> np.ndarray:
    """Weights proportional to each item's volume (or value) over the last periods.

    Volume is the units sold over the last ``last`` periods of ``history``;
    with ``unit_price`` (one per item) it is the value, price x units, the
    weighting of Makridakis et al. (2022, IJF 38:1346-1364).
    Unavailable or NaN periods add nothing. The weights sum to 1.

    Examples
    --------
    >>> item_weights([[1, 1, 2], [0, 0, 2]], last=2).tolist()
    [0.6, 0.4]
    """
    values, _ = _as_2d("history", history, allow_1d=False)
    if not isinstance(last, (int, np.integer)) or isinstance(last, bool) or not 0 < last <= values.shape[1]:
        raise InputError(f"last: must be a whole number of periods between 1 and {values.shape[1]}, got {last!r}")
    ok = _availability("available", available, values)
    volume = np.where(ok, values, 0.0)[:, -last:].sum(axis=1)
    if unit_price is not None:
        price = np.asarray(unit_price, dtype=np.float64).ravel()
        if price.shape != volume.shape:
            raise InputError(f"unit_price: {price.size} prices for {volume.size} items")
        if not np.isfinite(price).all() or (price < 0).any():
            i = int(np.flatnonzero(~np.isfinite(price) | (price < 0))[0])
            raise InputError(f"unit_price: missing or negative price for item {i}")
        volume = volume * price
    total = volume.sum()
    if total <= 0:
        raise InputError(f"history: no sales in the last {last} periods, so volume or value weights are undefined")
    return volume / total


def weighted_mean(scores: npt.ArrayLike, weights: npt.ArrayLike | None = None) -> float:
    """Weighted mean of per-item scores, leaving out NaN scores and renormalising.

    Examples
    --------
    >>> weighted_mean([1.0, np.nan, 3.0], [0.5, 0.3, 0.2])   # (0.5 + 0.6) / 0.7
    1.5714285714285716
    """
    s = np.asarray(scores, dtype=np.float64).ravel()
    w = np.ones_like(s) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if w.shape != s.shape:
        raise InputError(f"weights: {w.size} weights for {s.size} scores")
    if not np.isfinite(w).all() or (w < 0).any():
        raise InputError("weights: must be finite and non-negative")
    keep = np.isfinite(s) & (w > 0)
    if not keep.any():
        return float("nan")
    return float(np.sum(w[keep] * s[keep]) / np.sum(w[keep]))

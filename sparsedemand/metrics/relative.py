"""Relative MAE against a baseline and its geometric mean over items (AvgRelMAE)."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..errors import InputError
from .holdout import Score, _holdout, _masked_mean, _point
from .scale import ItemScale, _per_scale


def relative_mae(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    baseline: npt.ArrayLike,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """MAE of the forecast divided by the MAE of a baseline forecast, per item.

    The item-level ratio of Davydenko & Fildes 2013 (IJF 29:510-522); combine
    items with :func:`avg_rel_mae`. NaN where the baseline's MAE is 0.

    Examples
    --------
    >>> relative_mae(None, [1, 0, 3], [1, 0, 2], baseline=[0, 0, 0])   # (1/3) / (4/3)
    0.25
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    b = _point("baseline", baseline, h)
    return h.out(_per_scale(_masked_mean(np.abs(h.actual - f), h.mask), _masked_mean(np.abs(h.actual - b), h.mask)))


def avg_rel_mae(relative: npt.ArrayLike, *, weights: npt.ArrayLike | None = None) -> float:
    """Geometric mean of relative MAEs across items, AvgRelMAE (Davydenko & Fildes 2013, IJF 29:510-522).

    ``exp(sum(w_i log r_i) / sum(w_i))``; Davydenko & Fildes weight item i by
    its number of evaluation periods (pass the scored-period counts as
    ``weights``); ``None`` weighs items equally. Items whose ratio is NaN, 0
    or infinite (a perfect forecast or a perfect baseline) have no finite
    logarithm and are left out. Below 1 means better than the baseline.

    Examples
    --------
    >>> avg_rel_mae([0.5, 2.0, 0.25])   # (0.5 * 2 * 0.25) ** (1/3)
    0.6299605249474366
    """
    r = np.asarray(relative, dtype=np.float64).ravel()
    w = np.ones_like(r) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if w.shape != r.shape:
        raise InputError(f"weights: {w.size} weights for {r.size} relative errors")
    if (w < 0).any() or not np.isfinite(w).all():
        raise InputError("weights: must be finite and non-negative")
    keep = np.isfinite(r) & (r > 0) & (w > 0)
    if not keep.any():
        return float("nan")
    return float(np.exp(np.sum(w[keep] * np.log(r[keep])) / np.sum(w[keep])))

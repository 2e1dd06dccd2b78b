"""Quantile metrics: pinball loss, scaled pinball loss, coverage, interval coverage, CRPS."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..errors import InputError
from .holdout import Score, _Holdout, _holdout, _item_label, _masked_mean, _point, _quantile_forecast
from .scale import ItemScale, _per_scale, _scale_of


def pinball_loss(actual: npt.ArrayLike, quantile: npt.ArrayLike, level: npt.ArrayLike) -> np.ndarray:
    """Elementwise pinball (check) loss of Koenker & Bassett 1978 (Econometrica 46:33-50).

    ``rho_tau(u) = u * (tau - 1{u < 0})`` with ``u = actual - quantile`` and
    ``tau = level``; broadcasts like numpy.

    Examples
    --------
    >>> float(pinball_loss(3.0, 1.0, 0.9)), float(pinball_loss(0.0, 1.0, 0.9))
    (1.8, 0.09999999999999998)
    """
    u = np.asarray(actual, dtype=np.float64) - np.asarray(quantile, dtype=np.float64)
    tau = np.asarray(level, dtype=np.float64)
    return np.maximum(tau * u, (tau - 1.0) * u)


def _mean_pinball(h: _Holdout, q: np.ndarray, lv: np.ndarray) -> np.ndarray:
    return _masked_mean(pinball_loss(h.actual[:, :, None], q, lv), h.mask)


def pinball(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    quantiles: npt.ArrayLike,
    *,
    levels: npt.ArrayLike,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Mean pinball loss per item and quantile level (Koenker & Bassett 1978, Econometrica 46:33-50).

    ``quantiles`` has shape ``actual.shape + (len(levels),)``; the result has
    one column per level (``insample`` unused).

    Examples
    --------
    >>> # level 0.5: (0.5*2 + 0.5*1) / 2; level 0.9: (0.9*1 + 0.1*2) / 2
    >>> pinball(None, [3, 0], [[1, 2], [1, 2]], levels=[0.5, 0.9]).round(3).tolist()
    [0.75, 0.55]
    """
    h = _holdout(actual, available)
    q, lv = _quantile_forecast(quantiles, levels, h)
    return h.out(_mean_pinball(h, q, lv))


def scaled_pinball(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    quantiles: npt.ArrayLike,
    *,
    levels: npt.ArrayLike,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Scaled pinball loss (SPL) per quantile level.

    Mean pinball loss (Koenker & Bassett 1978) divided by the in-sample mean
    absolute one-step naive difference from the first demand on (Makridakis,
    Spiliotis, Assimakopoulos, Chen, Gaba, Tsetlin & Winkler 2022, IJF
    38:1365-1385). NaN where the scale is 0 or undefined.

    Examples
    --------
    >>> # mean pinball [0.75, 0.55] divided by the scale 1.5
    >>> scaled_pinball([0, 2, 0, 1], [3, 0], [[1, 2], [1, 2]], levels=[0.5, 0.9]).round(3).tolist()
    [0.5, 0.367]
    """
    h = _holdout(actual, available)
    q, lv = _quantile_forecast(quantiles, levels, h)
    scale = _scale_of(insample, insample_available, h.n_items)
    return h.out(_per_scale(_mean_pinball(h, q, lv), scale.mean_abs))


def coverage(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    quantiles: npt.ArrayLike,
    *,
    levels: npt.ArrayLike,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Share of available periods with ``actual <= quantile``, per level.

    A calibrated quantile forecast of level tau covers a share close to tau
    (common practice); for integer demand with integer quantiles the share is
    at least tau in expectation. ``insample`` is unused.

    Examples
    --------
    >>> coverage(None, [0, 1, 5, 2], [[0, 2]] * 4, levels=[0.5, 0.9]).tolist()
    [0.25, 0.75]
    """
    h = _holdout(actual, available)
    q, lv = _quantile_forecast(quantiles, levels, h)
    return h.out(_masked_mean((h.actual[:, :, None] <= q).astype(np.float64), h.mask))


def interval_coverage(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    lower: npt.ArrayLike,
    upper: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Share of available periods with ``lower <= actual <= upper`` (``insample`` unused).

    Examples
    --------
    >>> interval_coverage(None, [0, 1, 5, 2], [0, 0, 0, 1], [2, 2, 2, 2])
    0.75
    """
    h = _holdout(actual, available)
    lo = _point("lower", lower, h)
    hi = _point("upper", upper, h)
    if (lo > hi).any():
        i, t = np.argwhere(lo > hi)[0]
        raise InputError(f"lower: above upper at {_item_label(i, h.one_d)}, period {t}")
    inside = ((lo <= h.actual) & (h.actual <= hi)).astype(np.float64)
    return h.out(_masked_mean(inside, h.mask))


def quantile_crps(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    quantiles: npt.ArrayLike,
    *,
    levels: npt.ArrayLike,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """CRPS approximated from quantile forecasts, averaged over the available periods.

    Uses ``CRPS(F, y) = 2 * integral_0^1 rho_tau(y - F^{-1}(tau)) dtau``
    (Gneiting & Raftery 2007, JASA 102:359-378; Laio & Tamea 2007, HESS
    11:1267-1277), the integral taken as a Riemann sum with each level
    weighted by the width of its cell (edges halfway between neighbouring
    levels, 0 and 1 at the ends). Accurate for a dense, evenly spread grid such
    as ``(k - 0.5) / K``. ``insample`` is unused.

    Examples
    --------
    >>> levels = (np.arange(200) + 0.5) / 200       # a point mass at 1: CRPS = |y - 1|
    >>> round(quantile_crps(None, [3.0], np.ones((1, 200)), levels=levels), 6)
    2.0
    """
    h = _holdout(actual, available)
    q, lv = _quantile_forecast(quantiles, levels, h)
    order = np.argsort(lv)
    srt = lv[order]
    edges = np.concatenate(([0.0], (srt[1:] + srt[:-1]) / 2.0, [1.0]))
    width = np.empty_like(lv)
    width[order] = np.diff(edges)
    loss = pinball_loss(h.actual[:, :, None], q, lv)
    return h.out(_masked_mean(2.0 * (loss * width).sum(axis=2), h.mask))

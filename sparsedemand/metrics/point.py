"""Point-forecast errors: MAE, MSE, MASE, RMSSE and the scaled bias."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .holdout import Score, _holdout, _masked_mean, _point
from .scale import ItemScale, _per_scale, _scale_of


def mae(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Mean absolute error over the available periods.

    ``insample`` is not used (pass ``None``); it keeps the signature uniform.
    Definition as in Hyndman & Koehler 2006, IJF 22:679-688.

    Examples
    --------
    >>> mae(None, [1, 0, 3], [2, 0, 0])   # (1 + 0 + 3) / 3
    1.3333333333333333
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    return h.out(_masked_mean(np.abs(h.actual - f), h.mask))


def mse(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Mean squared error over the available periods (``insample`` unused).

    Examples
    --------
    >>> mse(None, [1, 0, 3], [2, 0, 0])   # (1 + 0 + 9) / 3
    3.3333333333333335
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    return h.out(_masked_mean((h.actual - f) ** 2, h.mask))


def mase(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Mean absolute scaled error (Hyndman & Koehler 2006, IJF 22:679-688).

    MAE over the available evaluation periods divided by the in-sample mean
    absolute one-step naive difference, taken from the item's first demand on
    (see :func:`naive_scale`). NaN where the scale is 0 or undefined.

    Examples
    --------
    >>> mase([0, 2, 0, 1], [1, 0], [0.5, 0.5])   # MAE 0.5 / scale 1.5
    0.3333333333333333
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    scale = _scale_of(insample, insample_available, h.n_items)
    return h.out(_per_scale(_masked_mean(np.abs(h.actual - f), h.mask), scale.mean_abs))


def rmsse(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Root mean squared scaled error (Makridakis, Spiliotis & Assimakopoulos 2022, IJF 38:1346-1364).

    ``sqrt(MSE / mean squared in-sample one-step naive difference)``, the scale
    taken from the item's first demand on; the squared-error counterpart of
    MASE (Hyndman & Koehler 2006). NaN where the scale is 0 or undefined.

    Examples
    --------
    >>> rmsse([0, 2, 0, 1], [1, 0], [0, 0])   # sqrt((1 + 0) / 2 / 2.5)
    0.4472135954999579
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    scale = _scale_of(insample, insample_available, h.n_items)
    return h.out(np.sqrt(_per_scale(_masked_mean((h.actual - f) ** 2, h.mask), scale.mean_sq)))


def scaled_bias(
    insample: npt.ArrayLike | ItemScale | None,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    *,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> Score:
    """Mean error ``forecast - actual`` divided by the MASE scale of the item.

    Positive values mean over-forecasting. Scaling by the in-sample mean
    absolute naive difference follows Hyndman & Koehler 2006 (IJF
    22:679-688) so that biases compare across items.

    Examples
    --------
    >>> scaled_bias([0, 2, 0, 1], [1, 0], [2, 2])   # mean error (1 + 2) / 2 = 1.5, / 1.5
    1.0
    """
    h = _holdout(actual, available)
    f = _point("forecast", forecast, h)
    scale = _scale_of(insample, insample_available, h.n_items)
    return h.out(_per_scale(_masked_mean(f - h.actual, h.mask), scale.mean_abs))

"""Forecast accuracy metrics that compare fairly across items and ignore stock-outs.

Every per-item metric has the signature
``metric(insample, actual, forecast, *, available=None, insample_available=None)``
and works on one series or on an items x periods array:

- ``insample``: the history the forecast was made from, shape ``(periods,)`` or
  ``(items, periods)``; it only sets the item's scale (MASE, RMSSE, scaled
  pinball, scaled bias). It may also be an :class:`ItemScale` from
  :func:`naive_scale`, so a backtest computes the scale once per origin and
  reuses it for every method and metric. Metrics that need no scale (MAE, MSE)
  accept ``None``.
- ``actual``: what happened over the evaluation periods, shape ``(h,)`` or
  ``(items, h)``.
- ``forecast``: point forecasts of the same shape as ``actual``; quantile
  metrics take ``quantiles`` of shape ``actual.shape + (n_levels,)`` and a
  ``levels`` argument instead.

A 1-D input gives a scalar (or one value per quantile level), a 2-D input one
value per item.

Stock-out awareness
-------------------
A period flagged False in ``available`` (or holding NaN in ``actual``) is left
out of every error: the metric is exactly what it would be had the period been
deleted from the series. The same holds for the scale: an in-sample period
flagged False in ``insample_available`` (or NaN) is skipped, and a one-step
naive difference is used only when both of its periods are available.
:func:`excluded_periods` and ``ItemScale.differences`` give the counts so a
caller can report how much was dropped.

Undefined values
----------------
An item gets NaN when its score is undefined: no scored period left, an
in-sample scale of 0 (the history is flat from the first demand on) or no
usable naive difference (never sold in-sample, or a single available period
after the first demand). Aggregating helpers skip NaN items and say how many.

Sign convention
---------------
Signed measures (scaled bias, PIS) use ``forecast - actual``: positive means
the forecast ran above demand (stock would build up).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import pandas as pd
from numba import njit
from scipy import sparse

from .errors import InputError

Score = float | np.ndarray  # a scalar for one series, one value per item otherwise

__all__ = [
    "ItemScale",
    "naive_scale",
    "excluded_periods",
    "mae",
    "mse",
    "mase",
    "rmsse",
    "scaled_bias",
    "pinball_loss",
    "pinball",
    "scaled_pinball",
    "coverage",
    "interval_coverage",
    "quantile_crps",
    "pis",
    "shortages",
    "relative_mae",
    "avg_rel_mae",
    "item_weights",
    "weighted_mean",
    "bottom_up",
    "HierarchyScore",
    "hierarchical_rmsse",
]


# --------------------------------------------------------------------------- input handling
def _as_2d(name: str, x, *, allow_1d: bool = True) -> tuple[np.ndarray, bool]:
    """float64 C array of 2 dims and whether the input was a single series."""
    try:
        arr = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: not a numeric array ({exc})") from None
    if arr.ndim == 1 and allow_1d:
        return np.ascontiguousarray(arr[None, :]), True
    if arr.ndim != 2:
        raise InputError(f"{name}: expected a 1-D series or a 2-D items x periods array, got {arr.ndim}-D")
    return np.ascontiguousarray(arr), False


def _flags(name: str, available, shape: tuple[int, int]) -> np.ndarray:
    """The caller's availability flags as a C bool array of ``shape``."""
    flags = np.asarray(available)
    if flags.dtype != np.bool_:
        if not np.isin(flags, (0, 1)).all():
            raise InputError(f"{name}: availability flags must be boolean (or 0/1)")
        flags = flags.astype(np.bool_)
    if flags.ndim == 1 and shape[0] == 1:
        flags = flags[None, :]
    if flags.shape != shape:
        raise InputError(f"{name}: mask has shape {np.shape(available)}, values have {shape}")
    return np.ascontiguousarray(flags)


def _availability(name: str, available, values: np.ndarray) -> np.ndarray:
    """Scored-period mask: the caller's flags, and never a NaN value."""
    ok = np.isfinite(values)
    if available is None:
        return ok
    return ok & _flags(name, available, values.shape)


def _item_label(i: int, one_d: bool) -> str:
    return "the series" if one_d else f"item {i}"


@dataclass(frozen=True)
class _Holdout:
    actual: np.ndarray  # (n, h), 0 where not scored
    mask: np.ndarray  # (n, h) True where scored
    one_d: bool

    @property
    def n_items(self) -> int:
        return self.actual.shape[0]

    def out(self, values: np.ndarray):
        """Scalar (or per-level vector) for a single series, per item otherwise."""
        if self.one_d:
            v = values[0]
            return float(v) if np.ndim(v) == 0 else v
        return values


def _holdout(actual, available) -> _Holdout:
    y, one_d = _as_2d("actual", actual)
    mask = _availability("available", available, y)
    if (y[mask] < 0).any():
        i, t = np.argwhere(mask & (y < 0))[0]
        raise InputError(f"actual: negative demand at {_item_label(i, one_d)}, period {t}")
    return _Holdout(np.where(mask, y, 0.0), mask, one_d)


def _point(name: str, forecast, h: _Holdout) -> np.ndarray:
    f = np.asarray(forecast, dtype=np.float64)
    if h.one_d and f.ndim == 1:
        f = f[None, :]
    if f.shape != h.actual.shape:
        want = h.actual.shape[1:] if h.one_d else h.actual.shape
        raise InputError(f"{name}: shape {np.shape(forecast)} does not match actual {want}")
    _check_finite(name, f, h.mask, h.one_d)
    return np.where(h.mask, f, 0.0)


def _quantile_forecast(quantiles, levels, h: _Holdout) -> tuple[np.ndarray, np.ndarray]:
    lv = np.atleast_1d(np.asarray(levels, dtype=np.float64))
    if lv.ndim != 1 or lv.size == 0:
        raise InputError("levels: give a 1-D list of quantile levels")
    if not (np.isfinite(lv).all() and (lv > 0).all() and (lv < 1).all()):
        raise InputError(f"levels: every quantile level must lie strictly between 0 and 1, got {lv.tolist()}")
    q = np.asarray(quantiles, dtype=np.float64)
    if h.one_d and q.ndim == 2:
        q = q[None, :, :]
    want = h.actual.shape + (lv.size,)
    if q.shape != want:
        raise InputError(
            f"quantiles: shape {np.shape(quantiles)} does not match actual and levels "
            f"(expected {want[1:] if h.one_d else want})"
        )
    _check_finite("quantiles", q, h.mask[:, :, None], h.one_d)
    return np.where(h.mask[:, :, None], q, 0.0), lv


def _check_finite(name: str, f: np.ndarray, mask: np.ndarray, one_d: bool) -> None:
    bad = ~np.isfinite(f) & mask
    if bad.any():
        i, t = np.argwhere(bad)[0][:2]
        raise InputError(f"{name}: missing or infinite value at {_item_label(i, one_d)}, period {t} (an available period)")


def _masked_mean(x: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Mean over the period axis (axis 1) of the scored entries; NaN when none."""
    if x.ndim == 3:
        mask = mask[:, :, None]
    count = mask.sum(axis=1)
    total = np.where(mask, x, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


# --------------------------------------------------------------------------- the scale
# In-sample arrays are used as given (NaN kept, flags separate) so that a
# 30,000 x 2,000 history is read once by the kernels, without masked copies.
@njit(cache=True)
def _usable(raw, flags, has_flags, i, t):
    v = raw[i, t]
    return v == v and (not has_flags or flags[i, t])


@njit(cache=True)
def _start_kernel(raw):
    """First positive recorded value per row (n_periods if none), and the first negative entry."""
    n, T = raw.shape
    start = np.full(n, T, dtype=np.int64)
    bad = np.full(2, -1, dtype=np.int64)
    for i in range(n):
        for t in range(T):
            v = raw[i, t]
            if v < 0:
                bad[0] = i
                bad[1] = t
                return start, bad
            if v > 0 and start[i] == T:
                start[i] = t
    return start, bad


@njit(cache=True)
def _scale_kernel(raw, flags, has_flags, start):
    """Mean |diff|, mean diff^2, mean level, difference count and excluded periods from each start."""
    n, T = raw.shape
    mean_abs = np.full(n, np.nan)
    mean_sq = np.full(n, np.nan)
    mean_level = np.full(n, np.nan)
    count = np.zeros(n, dtype=np.int64)
    excluded = np.zeros(n, dtype=np.int64)
    for i in range(n):
        s_abs = 0.0
        s_sq = 0.0
        s_lvl = 0.0
        n_lvl = 0
        c = 0
        s = start[i]
        prev_ok = False
        for t in range(s, T):
            ok = _usable(raw, flags, has_flags, i, t)
            if ok:
                s_lvl += raw[i, t]
                n_lvl += 1
                if prev_ok:
                    d = raw[i, t] - raw[i, t - 1]
                    s_abs += abs(d)
                    s_sq += d * d
                    c += 1
            else:
                excluded[i] += 1
            prev_ok = ok
        count[i] = c
        if c > 0:
            mean_abs[i] = s_abs / c
            mean_sq[i] = s_sq / c
        if n_lvl > 0:
            mean_level[i] = s_lvl / n_lvl
    return mean_abs, mean_sq, mean_level, count, excluded


@dataclass(frozen=True)
class ItemScale:
    """In-sample scale of each item, from its first demand on.

    Attributes
    ----------
    mean_abs : ndarray (n_items,)
        Mean absolute one-step naive difference (the MASE scale); NaN when no
        difference could be formed.
    mean_sq : ndarray (n_items,)
        Mean squared one-step naive difference (the RMSSE scale).
    mean_demand : ndarray (n_items,)
        Mean available in-sample demand from the first demand on (scales PIS).
    differences : ndarray of int64 (n_items,)
        Number of naive differences used (both periods available).
    excluded : ndarray of int64 (n_items,)
        In-sample periods from the first demand on left out as unavailable.
    start : ndarray of int64 (n_items,)
        Offset of the first demand (``n_periods`` if the item never sold).
    """

    mean_abs: np.ndarray
    mean_sq: np.ndarray
    mean_demand: np.ndarray
    differences: np.ndarray
    excluded: np.ndarray
    start: np.ndarray

    @property
    def n_items(self) -> int:
        return self.mean_abs.shape[0]


@dataclass(frozen=True)
class _History:
    raw: np.ndarray  # (n, T) as given, NaN = unavailable
    flags: np.ndarray  # (n, T) bool, or (1, 1) dummy when has_flags is False
    has_flags: bool
    start: np.ndarray  # (n,) first positive recorded value


def _history(insample, insample_available, *, allow_1d: bool) -> _History:
    raw, one_d = _as_2d("insample", insample, allow_1d=allow_1d)
    start, bad = _start_kernel(raw)
    if bad[0] >= 0:
        raise InputError(f"insample: negative demand at {_item_label(int(bad[0]), one_d)}, period {int(bad[1])}")
    if insample_available is None:
        return _History(raw, np.ones((1, 1), dtype=np.bool_), False, start)
    flags = _flags("insample_available", insample_available, raw.shape)
    return _History(raw, flags, True, start)


def naive_scale(insample: npt.ArrayLike, *, insample_available: npt.ArrayLike | None = None) -> ItemScale:
    """In-sample scales of MASE and RMSSE, trimmed to each item's first demand.

    The MASE scale is the in-sample mean absolute one-step naive difference
    (Hyndman & Koehler 2006, "Another look at measures of forecast accuracy",
    IJF 22:679-688); the RMSSE scale is the mean squared one-step naive
    difference, both taken from the item's first positive demand on, as in
    Makridakis, Spiliotis & Assimakopoulos (2022, IJF 38:1346-1364). A difference is used only when both of its periods are
    available; NaN in ``insample`` counts as unavailable. The first demand is
    the first positive recorded value, flagged or not (as
    :attr:`sparsedemand.panel.DemandPanel.start`).

    Parameters
    ----------
    insample : array_like, shape (periods,) or (items, periods)
    insample_available : array_like of bool, same shape, optional

    Returns
    -------
    ItemScale

    Examples
    --------
    >>> s = naive_scale([0, 2, 0, 1])   # differences from period 1: |0-2|, |1-0|
    >>> float(s.mean_abs[0]), float(s.mean_sq[0]), int(s.differences[0])
    (1.5, 2.5, 2)
    """
    hist = _history(insample, insample_available, allow_1d=True)
    mean_abs, mean_sq, mean_level, count, excluded = _scale_kernel(hist.raw, hist.flags, hist.has_flags, hist.start)
    return ItemScale(mean_abs, mean_sq, mean_level, count, excluded, hist.start)


def _scale_of(insample, insample_available, n_items: int) -> ItemScale:
    if isinstance(insample, ItemScale):
        if insample_available is not None:
            raise InputError("insample_available: not used when insample is an ItemScale (it already holds the mask)")
        scale = insample
    else:
        if insample is None:
            raise InputError("insample: this metric needs the in-sample history for its scale")
        scale = naive_scale(insample, insample_available=insample_available)
    if scale.n_items != n_items:
        raise InputError(f"insample: {scale.n_items} items, actual has {n_items}")
    return scale


def _per_scale(value: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """value / scale with NaN where the scale is 0 or undefined."""
    if value.ndim == 2:
        scale = scale[:, None]
    good = np.isfinite(scale) & (scale > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(good, value / np.where(good, scale, 1.0), np.nan)


def excluded_periods(actual: npt.ArrayLike, *, available: npt.ArrayLike | None = None) -> int | np.ndarray:
    """Number of evaluation periods left out of the scores (flagged unavailable or NaN).

    Examples
    --------
    >>> excluded_periods([3.0, 0.0, 1.0], available=[True, False, True])
    1
    """
    h = _holdout(actual, available)
    counts = (~h.mask).sum(axis=1).astype(np.int64)
    return int(counts[0]) if h.one_d else counts


# --------------------------------------------------------------------------- point metrics
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


# --------------------------------------------------------------------------- stock-flavoured
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


# --------------------------------------------------------------------------- quantile metrics
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


# --------------------------------------------------------------------------- aggregation
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


def _membership(level: str, labels, n_items: int) -> tuple[sparse.csr_matrix, pd.Index, np.ndarray]:
    """Group x item 0/1 matrix for one level, the group labels and each item's group code."""
    if np.ndim(labels) == 0:
        labels = np.repeat(np.asarray([labels], dtype=object), n_items)
    labels = np.asarray(labels)
    if labels.shape != (n_items,):
        raise InputError(f"groups[{level!r}]: {labels.size} labels for {n_items} items")
    codes, uniques = pd.factorize(labels, sort=True)
    if (codes < 0).any():
        raise InputError(f"groups[{level!r}]: missing label for item {int(np.flatnonzero(codes < 0)[0])}")
    member = sparse.csr_matrix(
        (np.ones(n_items), (codes, np.arange(n_items))), shape=(len(uniques), n_items)
    )
    return member, pd.Index(uniques), codes


def bottom_up(
    values: npt.ArrayLike, labels, *, available: npt.ArrayLike | None = None
) -> tuple[np.ndarray, np.ndarray, pd.Index]:
    """Sum item series into groups, counting only each item's available periods.

    Parameters
    ----------
    values : array_like (items, periods)
    labels : array_like (items,) or a scalar
        Group label of each item; one scalar puts every item in one group.
    available : array_like of bool (items, periods), optional

    Returns
    -------
    sums : ndarray (groups, periods)
        Sum over the group's members available in that period.
    group_available : ndarray of bool (groups, periods)
        True where at least one member was available.
    groups : pandas.Index
        Sorted group labels, one per row.

    Examples
    --------
    >>> s, ok, g = bottom_up([[1, 2], [3, 4], [5, 6]], ["a", "b", "a"])
    >>> s.tolist(), g.tolist()
    ([[6.0, 8.0], [3.0, 4.0]], ['a', 'b'])
    """
    v, _ = _as_2d("values", values, allow_1d=False)
    ok = _availability("available", available, v)
    member, groups, _ = _membership("labels", labels, v.shape[0])
    sums = np.asarray(member @ np.where(ok, v, 0.0))
    group_ok = np.asarray(member @ ok.astype(np.float64)) > 0
    return sums, group_ok, groups


@njit(cache=True)
def _group_scale_kernel(raw, flags, has_flags, start, order, bounds):
    """RMSSE scale of each group's summed history (members listed by ``order``, cut at ``bounds``).

    A group's difference at t sums the differences of its members available
    at t and t-1 (a member not yet selling adds a true zero); it counts when
    at least one member is available in both, from the group's earliest first
    demand on. A one-item group gets the item's scale.
    """
    n_groups = bounds.size - 1
    T = raw.shape[1]
    mean_sq = np.full(n_groups, np.nan)
    d_sum = np.zeros(T)
    d_cnt = np.zeros(T, dtype=np.int64)
    for g in range(n_groups):
        d_sum[:] = 0.0
        d_cnt[:] = 0
        g_start = T
        for k in range(bounds[g], bounds[g + 1]):
            i = order[k]
            if start[i] < g_start:
                g_start = start[i]
            prev_ok = _usable(raw, flags, has_flags, i, 0)
            for t in range(1, T):
                ok = _usable(raw, flags, has_flags, i, t)
                if ok and prev_ok:
                    d_sum[t] += raw[i, t] - raw[i, t - 1]
                    d_cnt[t] += 1
                prev_ok = ok
        total = 0.0
        count = 0
        for t in range(g_start + 1, T):
            if d_cnt[t] > 0:
                total += d_sum[t] * d_sum[t]
                count += 1
        if count > 0:
            mean_sq[g] = total / count
    return mean_sq


@dataclass(frozen=True)
class HierarchyScore:
    """Weighted RMSSE over group levels.

    Attributes
    ----------
    value : float
        Mean over levels of each level's weighted RMSSE (levels with no defined
        group score are left out).
    levels : pandas.DataFrame
        One row per level: ``score``, ``groups``, ``undefined`` (groups with
        NaN RMSSE, left out and the level's weights renormalised).
    groups : pandas.DataFrame
        One row per group: ``level``, ``group``, ``weight`` (share of the
        level), ``rmsse``, ``scored_periods``.
    """

    value: float
    levels: pd.DataFrame
    groups: pd.DataFrame


def hierarchical_rmsse(
    insample: npt.ArrayLike,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    groups: dict,
    *,
    weights: npt.ArrayLike | None = None,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> HierarchyScore:
    """Weighted RMSSE over aggregation levels, aggregating bottom-up before scoring.

    For every level (for example ``{"item": ids, "location": loc,
    "category": cat, "total": "all"}``) the actuals, forecasts and in-sample
    histories of the members are summed per group, each group is scored with
    RMSSE on its own aggregated history, and the groups are averaged with
    weights equal to their members' share of ``weights``; the final score is the
    plain mean over levels. This is the weighted RMSSE of Makridakis,
    Spiliotis & Assimakopoulos (2022, IJF 38:1346-1364), with
    stock-outs handled as follows:

    - an evaluation period of a group sums the actual and the forecast of the
      members available in it (so like is compared with like), and is dropped
      when no member is available;
    - a naive difference of a group's in-sample series sums the differences of
      the members available in both periods, and is dropped when there is none;
    - the group's history starts at its earliest member's first demand.

    Without masks this is exactly the aggregate-then-score of that paper's rules.

    Parameters
    ----------
    insample, actual, forecast : array_like (items, periods)
    groups : dict of level name -> labels (items,) or a scalar (one group)
    weights : array_like (items,), optional
        Item weights such as :func:`item_weights`; ``None`` weighs items equally.

    Examples
    --------
    >>> ins = [[0, 1, 0, 2], [1, 1, 0, 0]]
    >>> res = hierarchical_rmsse(ins, [[1, 1], [0, 0]], [[1, 1], [0, 0]], {"item": [0, 1], "total": "all"})
    >>> float(res.value)
    0.0
    """
    y, _ = _as_2d("actual", actual, allow_1d=False)
    h = _holdout(y, available)
    f = _point("forecast", forecast, h)
    hist = _history(insample, insample_available, allow_1d=False)
    if hist.raw.shape[0] != h.n_items:
        raise InputError(f"insample: {hist.raw.shape[0]} items, actual has {h.n_items}")
    if not groups:
        raise InputError("groups: give at least one level, e.g. {'item': item_labels}")
    if weights is None:
        w = np.full(h.n_items, 1.0 / max(h.n_items, 1))
    else:
        w = np.asarray(weights, dtype=np.float64).ravel()
        if w.shape != (h.n_items,):
            raise InputError(f"weights: {w.size} weights for {h.n_items} items")
        if not np.isfinite(w).all() or (w < 0).any() or w.sum() <= 0:
            raise InputError("weights: must be finite, non-negative and not all zero")

    mask_f = h.mask.astype(np.float64)
    err = f - h.actual  # zero where not scored

    level_rows, group_rows = [], []
    for level, labels in groups.items():
        member, names, codes = _membership(str(level), labels, h.n_items)
        order = np.argsort(codes, kind="stable").astype(np.int64)
        bounds = np.searchsorted(codes[order], np.arange(len(names) + 1)).astype(np.int64)
        scale_sq = _group_scale_kernel(hist.raw, hist.flags, hist.has_flags, hist.start, order, bounds)
        g_mask = np.asarray(member @ mask_f) > 0
        g_err = np.asarray(member @ err)
        score = np.sqrt(_per_scale(_masked_mean(g_err**2, g_mask), scale_sq))
        g_w = np.asarray(member @ w) / w.sum()
        defined = np.isfinite(score)
        level_score = (
            float(np.sum(g_w[defined] * score[defined]) / np.sum(g_w[defined]))
            if defined.any() and g_w[defined].sum() > 0
            else float("nan")
        )
        level_rows.append({"level": str(level), "score": level_score, "groups": len(names), "undefined": int((~defined).sum())})
        group_rows.append(
            pd.DataFrame(
                {
                    "level": str(level),
                    "group": names.astype(object),
                    "weight": g_w,
                    "rmsse": score,
                    "scored_periods": g_mask.sum(axis=1),
                }
            )
        )
    levels_frame = pd.DataFrame(level_rows).set_index("level")
    scores = levels_frame["score"].to_numpy()
    value = float(np.nanmean(scores)) if np.isfinite(scores).any() else float("nan")
    return HierarchyScore(value, levels_frame, pd.concat(group_rows, ignore_index=True))


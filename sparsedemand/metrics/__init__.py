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

Modules
-------
``holdout`` (input arrays, masks, the scored holdout), ``scale`` (in-sample
scales, excluded periods), ``point`` (MAE, MSE, MASE, RMSSE, scaled bias),
``relative`` (relative MAE, AvgRelMAE), ``periods_in_stock`` (PIS,
shortages), ``quantile`` (pinball, scaled pinball, coverage, CRPS),
``weights`` (volume/value weights, weighted mean), ``hierarchy`` (bottom-up
sums, weighted RMSSE over group levels).
"""

from __future__ import annotations

from .hierarchy import HierarchyScore, bottom_up, hierarchical_rmsse
from .periods_in_stock import pis, shortages
from .point import mae, mase, mse, rmsse, scaled_bias
from .quantile import coverage, interval_coverage, pinball, pinball_loss, quantile_crps, scaled_pinball
from .relative import avg_rel_mae, relative_mae
from .scale import ItemScale, excluded_periods, naive_scale
from .weights import item_weights, weighted_mean

from .holdout import Score

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


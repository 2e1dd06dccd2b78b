"""Per-item scores of one forecast at one origin, and their running totals over origins."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..metrics import (
    coverage,
    mae,
    mase,
    pis,
    relative_mae,
    rmsse,
    scaled_bias,
    scaled_pinball,
    shortages,
)
from ..route import DEFAULT_LEVELS, quantile_column
from .forecasts import OriginForecast
from .options import LABELS
from .origins import Origin
from .simulate import simulate_order_up_to

_POINT = ("mase", "rmsse", "mae", "scaled_bias", "pis", "shortages")
_STOCK = ("fill_rate", "cycle_service_level", "avg_on_hand", "stockout_periods")
_WEIGHTED = ("mase", "rmsse")


def metric_names(levels: Sequence[float] = DEFAULT_LEVELS) -> list[str]:
    """Per-item metric names, in the column order of ``item_scores``.

    Examples
    --------
    >>> metric_names([0.5, 0.9])[:8]
    ['mase', 'rmsse', 'mae', 'scaled_bias', 'pis', 'shortages', 'spl_q50', 'spl_q90']
    """
    tags = [quantile_column(level) for level in levels]
    return [*_POINT, *(f"spl_{t}" for t in tags), *(f"coverage_{t}" for t in tags), *_STOCK,
            "excluded_periods"]


def item_metrics(fc: OriginForecast, ctx: Origin, baseline: OriginForecast | None) -> dict[str, np.ndarray]:
    """Every per-item metric of one forecast at one origin (NaN where undefined or the fit failed)."""
    ok = ctx.available & ~fc.failed[:, None]
    y, f = ctx.actual, fc.mean
    out = {
        "mase": mase(ctx.scale, y, f, available=ok),
        "rmsse": rmsse(ctx.scale, y, f, available=ok),
        "mae": mae(None, y, f, available=ok),
        "scaled_bias": scaled_bias(ctx.scale, y, f, available=ok),
        "pis": pis(ctx.scale, y, f, available=ok, scaled=True),
        "shortages": shortages(None, y, f, available=ok),
    }
    q = np.broadcast_to(fc.quantiles, (f.shape[0], ctx.horizon, ctx.levels.size))
    spl = scaled_pinball(ctx.scale, y, q, levels=ctx.levels, available=ok)
    cov = coverage(None, y, q, levels=ctx.levels, available=ok)
    for j, level in enumerate(ctx.levels):
        out[f"spl_{quantile_column(level)}"] = spl[:, j]
    for j, level in enumerate(ctx.levels):
        out[f"coverage_{quantile_column(level)}"] = cov[:, j]
    order_up_to = fc.order_up_to[:, 0] if fc.order_up_to.shape[1] == 1 else fc.order_up_to
    sim = simulate_order_up_to(y, order_up_to, review=ctx.review, lead_time=ctx.lead_time, available=ok,
                               unmet=ctx.unmet)
    out["fill_rate"] = sim.fill_rate
    out["cycle_service_level"] = sim.cycle_service
    out["avg_on_hand"] = sim.mean_on_hand
    out["stockout_periods"] = np.where(sim.scored_periods > 0, sim.stockout_periods, np.nan).astype(np.float64)
    out["excluded_periods"] = ctx.excluded.astype(np.float64)
    if baseline is not None:
        both = ok & ~baseline.failed[:, None]
        out["rel_mae"] = relative_mae(None, y, f, baseline=baseline.mean, available=both)
        out["rel_weight"] = both.sum(axis=1).astype(np.float64)
    return out


# --------------------------------------------------------------------------- accumulation
class Totals:
    """Running sums of one method's scores over origins, per item and per pattern."""

    def __init__(self, n_items: int, names: list[str], weight_kinds: Sequence[str]) -> None:
        k = len(names)
        self.names = names
        self.item_sum = np.zeros((n_items, k))
        self.item_count = np.zeros((n_items, k))
        self.item_scored = np.zeros(n_items, dtype=np.int64)
        self.item_log = np.zeros(n_items)  # sum of w * log(rel MAE)
        self.item_log_w = np.zeros(n_items)
        p = len(LABELS) + 1  # the last row is "all"
        self.pat_sum = np.zeros((p, k))
        self.pat_count = np.zeros((p, k))
        self.pat_log = np.zeros(p)
        self.pat_log_w = np.zeros(p)
        self.pat_log_n = np.zeros(p)
        self.weighted = {(kind, m): np.zeros((p, 3)) for kind in weight_kinds for m in _WEIGHTED}
        self.hierarchy: list[pd.Series] = []

    def add(self, scores: dict[str, np.ndarray], ctx: Origin) -> None:
        codes = ctx.codes
        p = self.pat_sum.shape[0]
        every = np.full(codes.size, p - 1)
        for j, name in enumerate(self.names):
            x = scores[name]
            ok = np.isfinite(x)
            val = np.where(ok, x, 0.0)
            self.item_sum[:, j] += val
            self.item_count[:, j] += ok
            for c in (codes, every):
                self.pat_sum[:, j] += np.bincount(c, weights=val, minlength=p)
                self.pat_count[:, j] += np.bincount(c, weights=ok, minlength=p)
        self.item_scored += (ctx.available.any(axis=1)).astype(np.int64)
        for (kind, metric), acc in self.weighted.items():
            x = scores[metric]
            w = ctx.weights[kind]
            ok = np.isfinite(x) & (w > 0)
            for c in (codes, every):
                acc[:, 0] += np.bincount(c, weights=np.where(ok, w * np.where(ok, x, 0.0), 0.0), minlength=p)
                acc[:, 1] += np.bincount(c, weights=np.where(ok, w, 0.0), minlength=p)
                acc[:, 2] += np.bincount(c, weights=ok, minlength=p)
        if "rel_mae" in scores:
            r, w = scores["rel_mae"], scores["rel_weight"]
            keep = np.isfinite(r) & (r > 0) & (w > 0)
            lw = np.where(keep, w * np.log(np.where(keep, r, 1.0)), 0.0)
            ww = np.where(keep, w, 0.0)
            self.item_log += lw
            self.item_log_w += ww
            for c in (codes, every):
                self.pat_log += np.bincount(c, weights=lw, minlength=p)
                self.pat_log_w += np.bincount(c, weights=ww, minlength=p)
                self.pat_log_n += np.bincount(c, weights=keep, minlength=p)


def ratio(num, den):
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)

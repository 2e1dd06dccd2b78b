"""Backtests: how each method and the router would have done on the planner's own history.

Design
------
The last ``holdout`` periods of the history are held back and forecast from
the periods before them; with ``origins=N`` this is repeated at N forecast
origins ``step`` periods apart, the last one leaving exactly the final
``holdout`` periods to score (rolling origin, expanding window). At every
origin *everything* is redone from the history before it only: the demand
pattern of each item, the router's choice, every method's fit and
predictive distribution, the in-sample scales and the item weights (common
practice; Tashman 2000, "Out-of-sample tests of forecasting accuracy", IJF
16:437-450).

Scores per origin, method and item (see :mod:`sparsedemand.metrics` for the
definitions and their sources): MASE, RMSSE, MAE, scaled bias, scaled PIS and
the number of shortages, the scaled pinball loss and the coverage of every
quantile level, the MAE relative to a baseline, and an inventory simulation
(:mod:`sparsedemand.simulate`): each period-review an order is placed up to
``S``, the ``service_level`` quantile of the method's predictive distribution
of demand over ``lead_time + review_period`` periods, and the fill rate,
cycle service level, average stock on hand and stock-out periods achieved on
the held-back demand are recorded. Periods flagged out of stock are left out
of every score and every scale and counted (``excluded_periods``).

Aggregates
----------
An (item, origin) pair belongs to the pattern the item had *at that origin*.
Each metric is averaged over the pairs of a pattern (and over all pairs,
pattern ``"all"``), leaving out pairs where it is undefined; the ``count``
column says how many pairs were used. ``excluded_periods`` is a total, not a
mean. Volume- or value-weighted MASE and RMSSE weigh each pair by the item's
share of the units (or units x ``unit_price``) sold over the last
``holdout`` periods before its origin. ``rel_mae_gmean`` is the geometric
mean of the item ratios MAE(method) / MAE(baseline), weighted by scored
periods (AvgRelMAE, Davydenko & Fildes 2013, IJF 29:510-522).
``weighted_rmsse`` is computed with actuals and forecasts summed bottom-up
to each group level (item, location, category, total: the levels whose
labels the panel carries), one score per level and origin, and under level
``"all"`` the mean over the levels (the WRMSSE of Makridakis, Spiliotis &
Assimakopoulos 2022, IJF 38:1346-1364); values are means over origins.

The router
----------
The method ``"router"`` is what :func:`sparsedemand.route.forecast` would
have produced at each origin: items are classified and given a method by the
routing policy (and overrides). Items routed to a method whose options match
a method already fitted at that origin take that fit's rows, which are the
same numbers a separate fit of those items gives (every fit is per item);
other rules are fitted on their items alone. An item whose routed fit failed
falls back to the mean since first demand, as the router does. Bootstrap
samples are seeded per item label, so an item's quantiles do not depend on
which other items it was fitted with.

Targets are decision support; follow the organisation's policies,
regulations and qualified staff, especially for safety-critical spares.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Mapping, Sequence
from contextlib import nullcontext
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import methods as _methods
from .classify import PATTERNS, STATUSES
from .classify import classify as _classify
from .errors import InputError
from .methods.distributions import demand_pmfs, ragged_quantiles
from .metrics import (
    coverage,
    mae,
    mase,
    naive_scale,
    pis,
    relative_mae,
    rmsse,
    scaled_bias,
    scaled_pinball,
    shortages,
    item_weights,
)
from .panel import DemandPanel, as_panel
from .route import (
    CHANGE_LEVEL,
    DEFAULT_LEVELS,
    Rule,
    _resolve_policy,
    _routed_options,
    assign_methods,
    load_overrides,
    quantile_column,
    rate_change,
)
from .simulate import simulate_order_up_to
from .methods.forecasts import label_seeds

__all__ = [
    "BASELINES",
    "ROUTER",
    "GROUP_LEVELS",
    "BacktestResult",
    "OriginForecast",
    "backtest",
    "origin_cuts",
    "metric_names",
]

ROUTER = "router"
#: The naive baselines every method is compared with (fitted with their default options).
BASELINES: tuple[str, ...] = (
    "zeros", "mean_all", "mean_since_first", "mean_recent", "repeat_last", "seasonal_mean",
)
GROUP_LEVELS: tuple[str, ...] = ("item", "location", "category", "total")
_LABELS = PATTERNS + STATUSES
_WEIGHTS = ("volume", "value")
_POINT = ("mase", "rmsse", "mae", "scaled_bias", "pis", "shortages")
_STOCK = ("fill_rate", "cycle_service_level", "avg_on_hand", "stockout_periods")
_WEIGHTED = ("mase", "rmsse")
_FALLBACK = "mean_since_first"
_MAIN = "rmsse"  # the metric the router is ranked on


# --------------------------------------------------------------------------- layout
def origin_cuts(n_periods: int, *, holdout: int, origins: int = 1, step: int | None = None) -> np.ndarray:
    """Training lengths of the forecast origins of a rolling-origin backtest.

    Origin ``k`` (0-based, oldest first) trains on periods ``0 .. cut_k - 1``
    and scores periods ``cut_k .. cut_k + holdout - 1``, with
    ``cut_k = n_periods - holdout - (origins - 1 - k) * step``: the last
    origin scores the final ``holdout`` periods, and every earlier origin is
    ``step`` periods before the next (expanding window).

    Examples
    --------
    >>> origin_cuts(100, holdout=10, origins=3, step=5).tolist()
    [80, 85, 90]
    """
    holdout = _whole("holdout", holdout, minimum=1)
    origins = _whole("origins", origins, minimum=1)
    step = holdout if step is None else _whole("step", step, minimum=1)
    cuts = n_periods - holdout - step * np.arange(origins - 1, -1, -1, dtype=np.int64)
    if cuts[0] < 2:
        raise InputError(
            f"holdout {holdout} with {origins} origins {step} periods apart needs more than "
            f"{holdout + (origins - 1) * step + 1} periods of history, the data has {n_periods}"
        )
    return cuts


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


def _whole(name: str, value, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{name} must be a whole number >= {minimum}, got {value!r}")
    return int(value)


# --------------------------------------------------------------------------- result
@dataclass
class BacktestResult:
    """Scores of a backtest.

    Attributes
    ----------
    scores : DataFrame
        Long table: ``method``, ``pattern`` (``"all"`` or a pattern name),
        ``level`` (``"item"``, a group level, or ``"all"`` for the mean of
        ``weighted_rmsse`` over levels), ``metric``, ``value``, and ``count``
        (the (item, origin) pairs, or origins for ``weighted_rmsse``, behind
        the value).
    item_scores : DataFrame
        One row per item and method: ``item``, ``method``, ``pattern`` (at
        the last origin), ``origins`` (origins with at least one scored
        period), the metrics of :func:`metric_names` averaged over origins
        (``excluded_periods`` summed) and ``rel_mae`` (geometric mean over
        origins of the item's relative MAE).
    origins : DataFrame
        One row per origin: training periods, first and last training and
        scored period labels.
    patterns : DataFrame
        The pattern of every item at every origin (items x origins).
    settings : dict
        The options the backtest ran with.
    forecasts : dict
        With ``keep_forecasts=True``: ``(origin, method)`` -> :class:`OriginForecast`
        (origins numbered from 1); empty otherwise.
    """

    scores: pd.DataFrame
    item_scores: pd.DataFrame
    origins: pd.DataFrame
    patterns: pd.DataFrame
    settings: dict = field(default_factory=dict)
    forecasts: dict = field(default_factory=dict, repr=False)

    def value(self, method: str, metric: str, *, pattern: str = "all", level: str = "item") -> float:
        """One aggregate score (NaN when absent).

        Examples
        --------
        >>> result.value("router", "rmsse")  # doctest: +SKIP
        0.83
        """
        s = self.scores
        hit = s[(s["method"] == method) & (s["metric"] == metric) & (s["pattern"] == pattern)
                & (s["level"] == level)]
        return float(hit["value"].iloc[0]) if len(hit) else float("nan")

    def summary(self) -> pd.DataFrame:
        """Methods as rows, the main metrics over all items as columns.

        Columns: ``mase``, ``rmsse``, ``scaled_bias``, ``spl`` (mean scaled
        pinball loss over the levels), ``coverage_qNN`` (the level nearest
        0.9), ``fill_rate``, ``avg_on_hand``, ``rel_mae_gmean``,
        ``weighted_rmsse`` (mean over group levels).
        """
        s = self.scores[self.scores["pattern"] == "all"]
        item = s[s["level"] == "item"].pivot_table(index="method", columns="metric", values="value",
                                                   aggfunc="first", dropna=False)
        order = list(dict.fromkeys(self.scores["method"]))
        out = pd.DataFrame(index=pd.Index(order, name="method"))
        for name in ("mase", "rmsse", "scaled_bias"):
            out[name] = item.get(name)
        spl = [c for c in item.columns if c.startswith("spl_")]
        out["spl"] = item[spl].mean(axis=1) if spl else np.nan
        cov = self._coverage_column()
        if cov is not None:
            out[cov] = item.get(cov)
        for name in ("fill_rate", "avg_on_hand", "rel_mae_gmean"):
            out[name] = item.get(name)
        overall = s[(s["metric"] == "weighted_rmsse") & (s["level"] == "all")].set_index("method")["value"]
        out["weighted_rmsse"] = overall
        return out

    def _coverage_column(self) -> str | None:
        levels = self.settings.get("levels", ())
        if not levels:
            return None
        nearest = min(levels, key=lambda q: (abs(q - 0.9), -q))
        return f"coverage_{quantile_column(nearest)}"

    def router_rank(self, metric: str = _MAIN) -> tuple[int, int]:
        """(rank, methods ranked) of the router on a lower-is-better metric over all items."""
        column = self.summary()[metric].dropna()
        if ROUTER not in column.index:
            return 0, len(column)
        return int((column < column[ROUTER]).sum()) + 1, len(column)

    def summary_text(self) -> str:
        """The summary as a printable table, the best value per column marked with ``*``.

        Lower is best for the errors, nearest 0 for the bias, nearest the
        level for the coverage, highest for the fill rate; the average stock
        on hand is not judged (less stock is only better at the same fill
        rate).
        """
        table = self.summary()
        cov = self._coverage_column()
        cov_target = float(cov[len("coverage_q"):]) / 100 if cov else None
        cells = pd.DataFrame(index=table.index)
        for col in table.columns:
            x = table[col].astype(float)
            if col in ("scaled_bias",):
                key = x.abs()
            elif col == cov:
                key = (x - cov_target).abs()
            elif col == "fill_rate":
                key = -x
            elif col == "avg_on_hand":
                key = None
            else:
                key = x
            best = key.min() if key is not None and key.notna().any() else None
            text = []
            for v, k in zip(x, x.index):
                if not np.isfinite(v):
                    text.append("-")
                    continue
                mark = "*" if best is not None and np.isclose(key[k], best, rtol=1e-12, atol=1e-15) else " "
                text.append(f"{v:.3f}{mark}")
            cells[col] = text
        lines = [cells.to_string()]
        rank, n = self.router_rank(_MAIN)
        if rank:
            lines.append(f"router ranks {rank} of {n} methods on RMSSE (lower is better); "
                         "* marks the best value in each column")
        else:
            lines.append("* marks the best value in each column (the router was not run)")
        excluded = self.scores[(self.scores["metric"] == "excluded_periods") & (self.scores["pattern"] == "all")]
        if len(excluded):
            left_out = float(excluded["value"].iloc[0])
            cells_scored = float(excluded["count"].iloc[0]) * self.settings.get("holdout", 0)
            share = left_out / cells_scored if cells_scored else 0.0
            lines.append(f"out-of-stock periods left out of every score: {left_out:,.0f} of "
                         f"{cells_scored:,.0f} item-periods ({share:.1%})")
        origins = self.settings.get("origins", 1)
        lines.append(f"{origins} origin{'s' if origins != 1 else ''}, holdout "
                     f"{self.settings.get('holdout')} periods, lead time {self.settings.get('lead_time')}, "
                     f"review period {self.settings.get('review_period')}, service level "
                     f"{self.settings.get('service_level')}")
        return "\n".join(lines)

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables written by the ``backtest`` command, by file stem."""
        return {"scores": self.scores, "item_scores": self.item_scores}


# --------------------------------------------------------------------------- one origin
@dataclass
class _Origin:
    """Everything a method is scored against at one origin (all from data before it, but the actuals)."""

    train: DemandPanel
    events: object
    scale: object
    actual: np.ndarray
    available: np.ndarray
    excluded: np.ndarray
    codes: np.ndarray
    classes: pd.DataFrame
    weights: dict
    groups: dict
    seeds: np.ndarray
    levels: np.ndarray
    service_level: float
    lead_time: int
    review: int
    unmet: str
    hierarchy: dict = field(default_factory=dict)  # group level -> _Level (empty: no weights at this origin)
    empirical: dict = field(default_factory=dict)  # cached bootstrap quantiles, shared by every empirical fit

    @property
    def horizon(self) -> int:
        return self.actual.shape[1]

    @property
    def n_reviews(self) -> int:
        return -(-self.horizon // self.review)


@dataclass
class OriginForecast:
    """One method's forecasts at one origin, as they were scored.

    Attributes
    ----------
    mean : ndarray (n_items, holdout)
        Point forecasts (0 where the fit failed).
    quantiles : ndarray (n_items, 1 or holdout, n_levels)
        Quantiles of one period's demand at each level; one step when they
        are the same for every step.
    order_up_to : ndarray (n_items, 1 or n_reviews)
        Simulated order-up-to level, per review when it changes.
    failed : ndarray of bool (n_items,)
        Items the method could not forecast (left out of its scores).
    """

    mean: np.ndarray
    quantiles: np.ndarray
    order_up_to: np.ndarray
    failed: np.ndarray

    def take(self, rows: np.ndarray) -> OriginForecast:
        return OriginForecast(self.mean[rows], self.quantiles[rows], self.order_up_to[rows], self.failed[rows])


def _failed_rows(fitted) -> np.ndarray:
    """Rows with a non-finite mean, or a NaN distribution parameter behind a positive mean."""
    mean = np.asarray(fitted.mean, dtype=np.float64)
    bad = ~np.isfinite(mean).all(axis=1)
    first = np.where(np.isfinite(mean[:, 0]), mean[:, 0], 0.0)
    for value in (fitted.dist_params or {}).values():
        bad |= ~np.isfinite(np.asarray(value, dtype=np.float64)) & (first > 0)
    return bad


def _pmf_levels(kind, params, mean, rows, ctx: _Origin, periods_pairs) -> list[np.ndarray]:
    """Quantiles of total demand for each (periods, levels) pair, one row per item in ``rows``."""
    train = ctx.train
    ragged = demand_pmfs(
        kind, params, mean, periods=[p for p, _ in periods_pairs], values=train.values, start=train.start,
        available=train.available, history_rows=rows, seed=ctx.seeds[rows], ragged=True,
    )
    return [ragged_quantiles(r, lv) for r, (_, lv) in zip(ragged, periods_pairs)]


def _predictive(fitted, rows: np.ndarray, ctx: _Origin) -> OriginForecast:
    """Quantiles and order-up-to levels of one fit covering the items ``rows`` of the origin."""
    m = len(rows)
    mean = np.asarray(fitted.mean, dtype=np.float64)
    bad = _failed_rows(fitted)
    good = np.flatnonzero(~bad)
    kind = fitted.distribution
    n_lv = ctx.levels.size
    cover = ctx.lead_time + ctx.review
    service = np.array([ctx.service_level])
    flat = mean.shape[1] == 1 or bool(np.all(mean[good] == mean[good, :1]))
    # Only the normal and point kinds read the per-step means; the others are i.i.d. per period.
    stepwise = kind in ("normal", "point") and not flat
    steps = ctx.horizon if stepwise else 1
    reviews = ctx.n_reviews if stepwise else 1
    q = np.zeros((m, steps, n_lv))
    s = np.zeros((m, reviews))
    if good.size:
        params = {k: np.asarray(v, dtype=np.float64)[good] for k, v in (fitted.dist_params or {}).items()}
        mean_g = np.where(np.isfinite(mean[good]), mean[good], 0.0)
        pairs = [(1, ctx.levels), (cover, service)]
        if kind == "empirical":
            q[good, 0], s[good, 0] = _empirical_levels(rows[good], ctx)
        elif not stepwise:
            q1, qs = _pmf_levels(kind, params, mean_g, rows[good], ctx, pairs)
            q[good, 0], s[good, 0] = q1, qs[:, 0]
        else:
            for t in range(steps):
                q[good, t] = _pmf_levels(kind, params, mean_g[:, t:], rows[good], ctx, pairs[:1])[0]
            for r in range(reviews):
                start = r * ctx.review
                s[good, r] = _pmf_levels(kind, params, mean_g[:, start:], rows[good], ctx, pairs[1:])[0][:, 0]
    return OriginForecast(np.where(bad[:, None], 0.0, mean[:, : ctx.horizon]), q, s, bad)


def _empirical_levels(rows: np.ndarray, ctx: _Origin) -> tuple[np.ndarray, np.ndarray]:
    """Bootstrap quantiles of ``rows``: one draw per origin for every method that resamples the history.

    The bootstrap depends only on the item's own history and seed, not on the
    method's point forecast, so it is computed once for all items and shared.
    """
    if "q" not in ctx.empirical:
        every = np.arange(ctx.train.n_items)
        zero = np.zeros((every.size, 1))
        # two draws, so that the one-period quantiles are exactly those the forecast command gives
        ctx.empirical["q"] = _pmf_levels("empirical", None, zero, every, ctx, [(1, ctx.levels)])[0]
        cover = [(ctx.lead_time + ctx.review, np.array([ctx.service_level]))]
        ctx.empirical["s"] = _pmf_levels("empirical", None, zero, every, ctx, cover)[0][:, 0]
    return ctx.empirical["q"][rows], ctx.empirical["s"][rows]


def _item_metrics(fc: OriginForecast, ctx: _Origin, baseline: OriginForecast | None) -> dict[str, np.ndarray]:
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
class _Totals:
    """Running sums of one method's scores over origins, per item and per pattern."""

    def __init__(self, n_items: int, names: list[str], weight_kinds: Sequence[str]) -> None:
        k = len(names)
        self.names = names
        self.item_sum = np.zeros((n_items, k))
        self.item_count = np.zeros((n_items, k))
        self.item_scored = np.zeros(n_items, dtype=np.int64)
        self.item_log = np.zeros(n_items)  # sum of w * log(rel MAE)
        self.item_log_w = np.zeros(n_items)
        p = len(_LABELS) + 1  # the last row is "all"
        self.pat_sum = np.zeros((p, k))
        self.pat_count = np.zeros((p, k))
        self.pat_log = np.zeros(p)
        self.pat_log_w = np.zeros(p)
        self.pat_log_n = np.zeros(p)
        self.weighted = {(kind, m): np.zeros((p, 3)) for kind in weight_kinds for m in _WEIGHTED}
        self.hierarchy: list[pd.Series] = []

    def add(self, scores: dict[str, np.ndarray], ctx: _Origin) -> None:
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


def _ratio(num, den):
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


# --------------------------------------------------------------------------- options
def _check_levels(levels) -> np.ndarray:
    try:
        lv = np.asarray(levels, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        raise InputError(f"levels must be numbers between 0 and 1, got {levels!r}") from None
    if lv.size == 0 or not np.all((lv > 0) & (lv < 1)):
        raise InputError(f"levels must lie strictly between 0 and 1, got {list(np.atleast_1d(levels))}")
    names = [quantile_column(q) for q in lv]
    if len(set(names)) != len(names):
        raise InputError(f"levels must not repeat, got {lv.tolist()}")
    return lv


def _check_fraction(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) \
            or not 0.0 < float(value) < 1.0:
        raise InputError(f"{name} must be a number strictly between 0 and 1, got {value!r}")
    return float(value)


def _check_weights(weights) -> tuple[str, ...]:
    kinds = (weights,) if isinstance(weights, str) else tuple(weights)
    bad = [k for k in kinds if k not in _WEIGHTS]
    if bad or not kinds:
        raise InputError(f"weights must be 'volume' or 'value' (or both), got {weights!r}")
    return tuple(dict.fromkeys(kinds))


def _rule_options(rule: Rule, cost: str, season_length: int) -> dict:
    """The options the router fits a rule with (fixed parameters kept, smoothing constants optimised)."""
    options = _routed_options(rule, cost)
    if "season_length" in _methods.method_options(rule.method) and options.get("season_length") is None:
        if not season_length:
            raise InputError(f"{rule.method} needs a day, week or month calendar (the season length)")
        options["season_length"] = season_length
    return options


def _method_plan(methods, options, baseline: str, panel: DemandPanel, cost: str) -> dict[str, dict]:
    """The methods to score, in report order, each with its options (the baseline and the fallback added)."""
    if methods is None:
        names = [m for m in _methods.METHODS if m != "seasonal_mean" or panel.season_length]
    else:
        names = [methods] if isinstance(methods, str) else list(methods)
        if not names:
            raise InputError("methods: give at least one method name")
    known = set(_methods.METHODS)
    for name in [*names, baseline, *(options or {})]:
        if name not in known:
            raise InputError(f"unknown method {name!r}; choose from {', '.join(_methods.METHODS)}")
    plan = {}
    for name in dict.fromkeys([*names, baseline, _FALLBACK]):
        if name in BASELINES:
            opts = {"season_length": panel.season_length} if name == "seasonal_mean" else {}
            if name == "seasonal_mean" and not panel.season_length:
                raise InputError("seasonal_mean needs a day, week or month calendar (the season length)")
        else:
            # the router's own options, so that routed items can take these rows
            opts = _rule_options(Rule(name), cost, panel.season_length)
        extra = (options or {}).get(name, {})
        if not isinstance(extra, Mapping):
            raise InputError(f"method_options[{name!r}] must be a mapping of option to value, got {extra!r}")
        plan[name] = {**opts, **extra}
    return plan


def _group_labels(panel: DemandPanel, levels: Sequence[str]) -> dict:
    """Labels per group level; levels the panel has no attribute for are left out."""
    out = {}
    for level in levels:
        if level == "item":
            out[level] = np.arange(panel.n_items)  # positions: labels are unique by construction
        elif level == "total":
            out[level] = "total"
        elif panel.attributes is not None and level in panel.attributes.columns:
            col = panel.attributes[level]
            out[level] = np.asarray(col.astype(object).where(col.notna(), "(none)").astype(str))
    return out


def _unit_price(panel: DemandPanel) -> np.ndarray:
    if panel.attributes is None or "unit_price" not in panel.attributes.columns:
        raise InputError("weights='value' needs a unit_price attribute for every item")
    price = pd.to_numeric(panel.attributes["unit_price"], errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(price) | (price < 0)
    if bad.any():
        item = panel.items[int(np.flatnonzero(bad)[0])]
        raise InputError(f"unit_price: missing or negative price for item {item!r} (needed for weights='value')")
    return price


def _origin_weights(train: DemandPanel, last: int, kinds, price) -> dict:
    out = {}
    for kind in kinds:
        try:
            out[kind] = item_weights(train.values, last=last, available=train.available,
                                     unit_price=price if kind == "value" else None)
        except InputError:
            # nothing sold in the window: no weighting is possible at this origin
            out[kind] = np.zeros(train.n_items)
    return out


# --------------------------------------------------------------------------- the router
def _router_forecast(ctx: _Origin, rules: list[Rule], kept: dict[str, tuple[dict, OriginForecast]], cost: str,
                     horizon: int) -> OriginForecast:
    """Assemble the routed forecast from the fits made at this origin (see the module docstring)."""
    n = ctx.train.n_items
    keys = [r.key() for r in rules]
    codes, uniques = pd.factorize(pd.Series(keys, dtype=object))
    first = np.unique(codes, return_index=True)[1]
    mean = np.zeros((n, ctx.horizon))
    bad = np.zeros(n, dtype=bool)
    parts = []
    for g, pos in enumerate(first):
        rows = np.flatnonzero(codes == g)
        rule = rules[pos]
        options = _rule_options(rule, cost, ctx.train.season_length)
        have = kept.get(rule.method)
        if have is not None and have[0] == options:
            part = have[1].take(rows)
        else:
            train = ctx.train
            fitted = _methods.fit(rule.method, train.values[rows], train.start[rows],
                                  None if train.available is None else train.available[rows],
                                  horizon=horizon, **options)
            part = _predictive(fitted, rows, ctx)
        parts.append((rows, part))
    steps = max(p.quantiles.shape[1] for _, p in parts)
    reviews = max(p.order_up_to.shape[1] for _, p in parts)
    q = np.zeros((n, steps, ctx.levels.size))
    s = np.zeros((n, reviews))
    for rows, part in parts:
        mean[rows] = part.mean
        q[rows] = part.quantiles  # broadcasts a single step over the horizon
        s[rows] = part.order_up_to
        bad[rows] = part.failed
    routed = OriginForecast(mean, q, s, bad)
    if bad.any():
        backup = kept[_FALLBACK][1]
        rows = np.flatnonzero(bad)
        routed.mean[rows] = backup.mean[rows]
        routed.quantiles[rows] = backup.quantiles[rows]
        routed.order_up_to[rows] = backup.order_up_to[rows]
        routed.failed[rows] = backup.failed[rows]
    return routed


# --------------------------------------------------------------------------- the backtest
def backtest(
    data,
    *,
    holdout: int,
    origins: int = 1,
    step: int | None = None,
    methods: Sequence[str] | None = None,
    method_options: Mapping[str, Mapping] | None = None,
    include_router: bool = True,
    policy: Mapping[str, Rule] | str | os.PathLike | None = None,
    overrides: Mapping[str, Rule] | str | os.PathLike | None = None,
    levels: Sequence[float] = DEFAULT_LEVELS,
    cost: str = "mse",
    baseline: str = "mean_since_first",
    lead_time: int = 1,
    review_period: int = 1,
    service_level: float = 0.95,
    unmet: str = "lost",
    seed: int = 0,
    classify_options: Mapping[str, object] | None = None,
    weights: str | Sequence[str] = "volume",
    group_levels: Sequence[str] = GROUP_LEVELS,
    change_level: float | None = CHANGE_LEVEL,
    progress: Callable | None = None,
    keep_forecasts: bool = False,
) -> BacktestResult:
    """Score every method and the router on held-back history, at one or several origins.

    Parameters
    ----------
    data : DemandPanel, DataFrame or 2-D array
        The demand history (see :func:`sparsedemand.panel.as_panel`).
    holdout : int
        Periods scored after each origin (H).
    origins : int, default 1
        Forecast origins (N); the last one scores the final ``holdout`` periods.
    step : int, optional
        Periods between origins (default ``holdout``: adjacent, non-overlapping windows).
    methods : sequence of str, optional
        Methods to compare (default every method of
        :data:`sparsedemand.methods.METHODS`, ``seasonal_mean`` only on a
        day, week or month calendar). The ``baseline`` is always added.
    method_options : mapping of method name to options, optional
        Options replacing a method's defaults. Methods with smoothing
        constants have them optimised per item (as the router does) unless
        fixed here; the baselines use their defaults.
    include_router : bool, default True
        Also score the routed forecast, as method ``"router"``.
    policy, overrides : optional
        Routing policy and per-item overrides, as for
        :func:`sparsedemand.route.forecast` (mappings or file paths).
    levels : sequence of float, default (0.5, 0.8, 0.9, 0.95)
        Quantile levels scored by the pinball loss and coverage.
    cost : {"mse", "mae", "mar", "msr"}, default "mse"
        In-sample cost minimised when smoothing constants are optimised.
    baseline : str, default "mean_since_first"
        Method whose MAE the relative MAE divides by.
    lead_time : int, default 1
        Replenishment lead time L of the simulated order-up-to policy.
    review_period : int, default 1
        Review period R of the simulated policy.
    service_level : float, default 0.95
        The order-up-to level is this quantile of demand over L + R periods.
    unmet : {"lost", "backorder"}, default "lost"
        What happens to demand the simulated stock cannot serve.
    seed : int, default 0
        Seed of the bootstrap distributions (results are deterministic).
    classify_options : mapping, optional
        Options of :func:`sparsedemand.classify.classify`.
    weights : {"volume", "value"} or both, default "volume"
        Weighting of the weighted MASE and RMSSE and of ``weighted_rmsse``
        (the first kind); ``"value"`` needs a ``unit_price`` attribute.
    group_levels : sequence of str, default ("item", "location", "category", "total")
        Levels of ``weighted_rmsse``; a level the panel has no attribute for
        is skipped.
    change_level : float or None, default :data:`sparsedemand.route.CHANGE_LEVEL`
        Significance level of the router's rate-change test at each origin,
        as for :func:`sparsedemand.route.forecast`; None turns it off.
    progress : callable, optional
        ``progress(iterable, label=...)`` returning a context manager that
        yields the iterable (a progress bar).
    keep_forecasts : bool, default False
        Keep every method's forecasts per origin in ``result.forecasts``
        (memory grows with items x holdout x methods x origins).

    Returns
    -------
    BacktestResult

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> y = rng.poisson(0.4, size=(20, 120)).astype(float)
    >>> res = backtest(y, holdout=14, origins=2, methods=["sba", "zeros"])
    >>> res.summary().index.tolist()
    ['sba', 'zeros', 'mean_since_first', 'router']
    >>> round(res.value("mean_since_first", "rel_mae_gmean"), 6)
    1.0
    """
    panel = as_panel(data)
    cuts = origin_cuts(panel.n_periods, holdout=holdout, origins=origins, step=step)
    horizon = int(holdout)
    lv = _check_levels(levels)
    service = _check_fraction("service_level", service_level)
    lead = _whole("lead_time", lead_time, minimum=0)
    review = _whole("review_period", review_period, minimum=1)
    if unmet not in ("lost", "backorder"):
        raise InputError(f"unmet must be lost or backorder, got {unmet!r}")
    if cost not in ("mse", "mae", "mar", "msr"):
        raise InputError(f"cost must be mse, mae, mar or msr, got {cost!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed must be a whole number >= 0, got {seed!r}")
    if baseline not in _methods.METHODS:
        raise InputError(f"baseline: unknown method {baseline!r}; choose from {', '.join(_methods.METHODS)}")
    kinds = _check_weights(weights)
    price = _unit_price(panel) if "value" in kinds else None
    unknown_levels = [g for g in group_levels if not isinstance(g, str)]
    if unknown_levels:
        raise InputError(f"group_levels must be level names, got {unknown_levels[0]!r}")
    plan = _method_plan(methods, method_options, baseline, panel, cost)
    policy = _resolve_policy(policy)  # the rows given replace default rows, the others stay
    if isinstance(overrides, (str, os.PathLike)):
        overrides = load_overrides(overrides)
    groups = _group_labels(panel, group_levels)
    seeds = label_seeds(panel.items, int(seed))  # per label: independent of row order and grouping
    names = metric_names(lv)
    scored = [*plan, *([ROUTER] if include_router else [])]
    totals = {m: _Totals(panel.n_items, names, kinds) for m in scored}
    mask = panel.mask()
    pattern_table = {}
    kept_forecasts: dict = {}

    # the baseline first: every other method's relative MAE divides by it
    fit_order = [baseline, *(m for m in scored if m != baseline)]
    work = [(k, name) for k in range(len(cuts)) for name in fit_order]
    bar = progress(work, label="backtest") if progress else nullcontext(work)
    current = -1
    with bar as steps:
        for k, name in steps:
            if k != current:
                current = k
                ctx, rules, kept = _start_origin(panel, int(cuts[k]), horizon, mask, lv, service, lead, review,
                                                 unmet, classify_options, kinds, price, groups, seeds,
                                                 policy, overrides, include_router, change_level)
                pattern_table[k + 1] = ctx.classes["pattern"].to_numpy()
                needed = {r.method for r in rules} | {_FALLBACK} if include_router else set()
                base = None
            if name == ROUTER:
                fc = _router_forecast(ctx, rules, kept, cost, horizon)
            else:
                train = ctx.train
                fitted = _methods.fit(name, train.values, train.start, train.available, horizon=horizon,
                                      events=ctx.events, **plan[name])
                fc = _predictive(fitted, np.arange(train.n_items), ctx)
                if name in needed:
                    kept[name] = (plan[name], fc)
            if name == baseline:
                base = fc
            if keep_forecasts:
                kept_forecasts[(k + 1, name)] = fc
            scores = _item_metrics(fc, ctx, base)
            totals[name].add(scores, ctx)
            if groups:
                totals[name].hierarchy.append(_hierarchy(ctx, fc))

    patterns = pd.DataFrame(pattern_table, index=panel.items)
    patterns.columns.name = "origin"
    settings = dict(holdout=horizon, origins=len(cuts), step=int(step if step is not None else holdout),
                    methods=list(plan), include_router=include_router, levels=tuple(float(x) for x in lv),
                    cost=cost, baseline=baseline, lead_time=lead, review_period=review,
                    service_level=service, unmet=unmet, seed=int(seed), weights=kinds,
                    group_levels=tuple(groups))
    return BacktestResult(
        scores=_score_table(totals, names, kinds),
        item_scores=_item_table(totals, names, panel, patterns),
        origins=_origin_table(panel, cuts, horizon),
        patterns=patterns,
        settings=settings,
        forecasts=kept_forecasts,
    )


def _start_origin(panel, cut, horizon, mask, lv, service, lead, review, unmet, classify_options, kinds, price,
                  groups, seeds, policy, overrides, include_router, change_level):
    """Cut the history at ``cut`` and prepare what every method is scored against."""
    train = panel.head(cut)
    classes = _classify(train, **dict(classify_options or {}))
    codes = pd.Categorical(classes["pattern"].to_numpy(), categories=_LABELS).codes.astype(np.int64)
    available = np.ascontiguousarray(mask[:, cut: cut + horizon])
    ctx = _Origin(
        train=train,
        events=_methods.extract_events(train.values, train.start, train.available),
        scale=naive_scale(train.values, insample_available=train.available),
        actual=np.ascontiguousarray(panel.values[:, cut: cut + horizon]),
        available=available,
        excluded=(~available).sum(axis=1),
        codes=codes,
        classes=classes,
        weights=_origin_weights(train, min(horizon, cut), kinds, price),
        groups=groups,
        seeds=seeds,
        levels=lv,
        service_level=service,
        lead_time=lead,
        review=review,
        unmet=unmet,
    )
    w = ctx.weights[kinds[0]]
    if groups and (w > 0).any():
        ctx.hierarchy = _hierarchy_levels(train, groups, w)
    rules = []
    if include_router:
        # the same routing as route.forecast at this origin, rate-change status included
        changed = None
        if change_level is not None:
            changed = rate_change(train, classes, level=change_level)["changed"].to_numpy()
        rules = assign_methods(classes, policy=policy, overrides=overrides, changed=changed)
    return ctx, rules, {}


@dataclass(frozen=True)
class _Level:
    """One group level at one origin: membership, RMSSE scale and weight of every group."""

    member: object  # sparse (groups x items) 0/1 matrix
    scale_sq: np.ndarray
    weight: np.ndarray


def _hierarchy_levels(train: DemandPanel, groups: dict, weights: np.ndarray) -> dict[str, _Level]:
    """The in-sample side of :func:`sparsedemand.metrics.hierarchical_rmsse`, made once per origin.

    The group scales come from the history before the origin alone, so every
    method scored at the origin shares them; this uses the metric module's own
    kernels, and the tests check the result against ``hierarchical_rmsse``.
    """
    from .metrics.hierarchy import _group_scale_kernel, _history, _membership  # the metric's own kernels

    hist = _history(train.values, train.available, allow_1d=False)
    total = weights.sum()
    out = {}
    for level, labels in groups.items():
        member, names, codes = _membership(str(level), labels, train.n_items)
        order = np.argsort(codes, kind="stable").astype(np.int64)
        bounds = np.searchsorted(codes[order], np.arange(len(names) + 1)).astype(np.int64)
        scale_sq = _group_scale_kernel(hist.raw, hist.flags, hist.has_flags, hist.start, order, bounds)
        out[str(level)] = _Level(member, scale_sq, np.asarray(member @ weights) / total)
    return out


def _hierarchy(ctx: _Origin, fc: OriginForecast) -> pd.Series:
    """Weighted RMSSE per group level at one origin, and their mean under ``"all"``.

    The same numbers as :func:`sparsedemand.metrics.hierarchical_rmsse` with
    the origin's scales reused (groups with an undefined score left out and
    the level's weights renormalised; levels with no defined group left out
    of the mean).
    """
    from .metrics.holdout import _masked_mean
    from .metrics.scale import _per_scale

    if not ctx.hierarchy:
        return pd.Series({level: np.nan for level in [*ctx.groups, "all"]})
    ok = ctx.available & ~fc.failed[:, None]
    err = np.where(ok, fc.mean - ctx.actual, 0.0)
    scored = ok.astype(np.float64)
    out = {}
    for level, lv in ctx.hierarchy.items():
        g_ok = np.asarray(lv.member @ scored) > 0
        g_err = np.asarray(lv.member @ err)
        score = np.sqrt(_per_scale(_masked_mean(g_err**2, g_ok), lv.scale_sq))
        defined = np.isfinite(score)
        w = lv.weight[defined]
        out[level] = float(np.sum(w * score[defined]) / w.sum()) if defined.any() and w.sum() > 0 else np.nan
    values = np.array(list(out.values()))
    out["all"] = float(np.nanmean(values)) if np.isfinite(values).any() else np.nan
    return pd.Series(out)


# --------------------------------------------------------------------------- output tables
def _score_table(totals: dict[str, _Totals], names: list[str], kinds) -> pd.DataFrame:
    labels = [*_LABELS, "all"]
    frames = []
    for method, t in totals.items():
        present = t.pat_count.max(axis=1) > 0
        value = _ratio(t.pat_sum, t.pat_count)
        # excluded_periods is a count of periods: report the total, not a mean
        j = names.index("excluded_periods")
        value[:, j] = t.pat_sum[:, j]
        for p in np.flatnonzero(present):
            frames.append(pd.DataFrame({"method": method, "pattern": labels[p], "level": "item",
                                        "metric": names, "value": value[p], "count": t.pat_count[p]}))
            rel = math.exp(t.pat_log[p] / t.pat_log_w[p]) if t.pat_log_w[p] > 0 else np.nan
            extra = [("rel_mae_gmean", rel, t.pat_log_n[p])]
            for (kind, metric), acc in t.weighted.items():
                v = acc[p, 0] / acc[p, 1] if acc[p, 1] > 0 else np.nan
                extra.append((f"{metric}_{kind}_weighted", v, acc[p, 2]))
            frames.append(pd.DataFrame({"method": method, "pattern": labels[p], "level": "item",
                                        "metric": [e[0] for e in extra], "value": [e[1] for e in extra],
                                        "count": [e[2] for e in extra]}))
        if t.hierarchy:
            h = pd.DataFrame(t.hierarchy)
            frames.append(pd.DataFrame({"method": method, "pattern": "all", "level": h.columns,
                                        "metric": "weighted_rmsse", "value": h.mean(axis=0).to_numpy(),
                                        "count": h.notna().sum(axis=0).to_numpy().astype(float)}))
    table = pd.concat(frames, ignore_index=True)
    return table


def _item_table(totals: dict[str, _Totals], names: list[str], panel: DemandPanel,
                patterns: pd.DataFrame) -> pd.DataFrame:
    last = patterns.iloc[:, -1].to_numpy()
    j = names.index("excluded_periods")
    frames = []
    for method, t in totals.items():
        value = _ratio(t.item_sum, t.item_count)
        value[:, j] = t.item_sum[:, j]
        frame = pd.DataFrame(value, columns=names)
        frame.insert(0, "item", panel.items.to_numpy())
        frame.insert(1, "method", method)
        frame.insert(2, "pattern", last)
        frame.insert(3, "origins", t.item_scored)
        with np.errstate(invalid="ignore", divide="ignore"):
            frame["rel_mae"] = np.where(t.item_log_w > 0, np.exp(t.item_log / np.where(t.item_log_w > 0,
                                                                                           t.item_log_w, 1.0)),
                                        np.nan)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def _origin_table(panel: DemandPanel, cuts: np.ndarray, horizon: int) -> pd.DataFrame:
    periods = panel.periods
    return pd.DataFrame({
        "origin": np.arange(1, len(cuts) + 1),
        "train_periods": cuts,
        "first_train": [periods[0]] * len(cuts),
        "last_train": [periods[c - 1] for c in cuts],
        "first_scored": [periods[c] for c in cuts],
        "last_scored": [periods[c + horizon - 1] for c in cuts],
    })

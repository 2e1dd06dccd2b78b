"""The rolling-origin backtest: check the options, then refit and score every method at every origin."""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping, Sequence
from contextlib import nullcontext

import numpy as np
import pandas as pd

from .. import methods as _methods
from ..io import as_panel
from ..panel import DemandPanel
from ..route import CHANGE_LEVEL, DEFAULT_LEVELS, Rule
from .forecasts import OriginForecast, predictive, router_forecast
from .hierarchy import hierarchy_scores
from .options import FALLBACK, GROUP_LEVELS, ROUTER, Options, check_options
from .origins import Origin, origin_cuts, start_origin
from .result import BacktestResult
from .scoring import Totals, item_metrics, metric_names
from .tables import item_table, origin_table, score_table


def backtest(
    data, *, holdout: int, origins: int = 1, step: int | None = None,
    methods: Sequence[str] | None = None, method_options: Mapping[str, Mapping] | None = None,
    include_router: bool = True, policy: Mapping[str, Rule] | str | os.PathLike | None = None,
    overrides: Mapping[str, Rule] | str | os.PathLike | None = None,
    levels: Sequence[float] = DEFAULT_LEVELS, cost: str = "mse", baseline: str = "mean_since_first",
    lead_time: int = 1, review_period: int = 1, service_level: float = 0.95, unmet: str = "lost",
    seed: int = 0, classify_options: Mapping[str, object] | None = None,
    weights: str | Sequence[str] = "volume", group_levels: Sequence[str] = GROUP_LEVELS,
    change_level: float | None = CHANGE_LEVEL, progress: Callable | None = None, keep_forecasts: bool = False,
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
    opts = check_options(
        panel, cuts, holdout=holdout, step=step, methods=methods, method_options=method_options,
        include_router=include_router, policy=policy, overrides=overrides, levels=levels, cost=cost,
        baseline=baseline, lead_time=lead_time, review_period=review_period, service_level=service_level,
        unmet=unmet, seed=seed, classify_options=classify_options, weights=weights,
        group_levels=group_levels, change_level=change_level,
    )
    return _run(panel, opts, progress=progress, keep_forecasts=keep_forecasts)


def _run(panel: DemandPanel, opts: Options, *, progress: Callable | None, keep_forecasts: bool) -> BacktestResult:
    """Every origin in turn: cut the history, fit and score every method and the router on it."""
    names = metric_names(opts.levels)
    scored = [*opts.plan, *([ROUTER] if opts.include_router else [])]
    totals = {m: Totals(panel.n_items, names, opts.weights) for m in scored}
    mask = panel.mask()
    pattern_table = {}
    kept_forecasts: dict = {}

    # the baseline first: every other method's relative MAE divides by it
    fit_order = [opts.baseline, *(m for m in scored if m != opts.baseline)]
    work = [(k, name) for k in range(len(opts.cuts)) for name in fit_order]
    bar = progress(work, label="backtest") if progress else nullcontext(work)
    current = -1
    with bar as steps:
        for k, name in steps:
            if k != current:
                current = k
                ctx, rules, kept = start_origin(panel, int(opts.cuts[k]), mask, opts)
                pattern_table[k + 1] = ctx.classes["pattern"].to_numpy()
                needed = {r.method for r in rules} | {FALLBACK} if opts.include_router else set()
                base = None
            fc = _forecast(name, ctx, rules, kept, needed, opts)
            if name == opts.baseline:
                base = fc
            if keep_forecasts:
                kept_forecasts[(k + 1, name)] = fc
            totals[name].add(item_metrics(fc, ctx, base), ctx)
            if opts.groups:
                totals[name].hierarchy.append(hierarchy_scores(ctx, fc))

    patterns = pd.DataFrame(pattern_table, index=panel.items)
    patterns.columns.name = "origin"
    return BacktestResult(
        scores=score_table(totals, names, opts.weights),
        item_scores=item_table(totals, names, panel, patterns),
        origins=origin_table(panel, opts.cuts, opts.horizon),
        patterns=patterns,
        settings=opts.settings(),
        forecasts=kept_forecasts,
    )


def _forecast(name: str, ctx: Origin, rules: list[Rule], kept: dict, needed: set, opts: Options) -> OriginForecast:
    """One method's (or the router's) forecast at the origin; fits the router may reuse are kept."""
    if name == ROUTER:
        return router_forecast(ctx, rules, kept, opts.cost, opts.horizon)
    train = ctx.train
    fitted = _methods.fit(name, train.values, train.start, train.available, horizon=opts.horizon,
                          events=ctx.events, **opts.plan[name])
    fc = predictive(fitted, np.arange(train.n_items), ctx)
    if name in needed:
        kept[name] = (opts.plan[name], fc)
    return fc

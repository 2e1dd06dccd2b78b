"""One method's forecasts at one origin: point forecasts, quantiles, order-up-to levels, and the router's.

Every fit is per item, so items routed to a method already fitted at the
origin with the same options take that fit's rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .. import methods as _methods
from ..methods.distributions import demand_pmfs, ragged_quantiles
from ..route import Rule
from .options import FALLBACK, rule_options
from .origins import Origin


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


def _pmf_levels(kind, params, mean, rows, ctx: Origin, periods_pairs) -> list[np.ndarray]:
    """Quantiles of total demand for each (periods, levels) pair, one row per item in ``rows``."""
    train = ctx.train
    ragged = demand_pmfs(
        kind, params, mean, periods=[p for p, _ in periods_pairs], values=train.values, start=train.start,
        available=train.available, history_rows=rows, seed=ctx.seeds[rows], ragged=True,
    )
    return [ragged_quantiles(r, lv) for r, (_, lv) in zip(ragged, periods_pairs)]


def predictive(fitted, rows: np.ndarray, ctx: Origin) -> OriginForecast:
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


def _empirical_levels(rows: np.ndarray, ctx: Origin) -> tuple[np.ndarray, np.ndarray]:
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


def router_forecast(ctx: Origin, rules: list[Rule], kept: dict[str, tuple[dict, OriginForecast]], cost: str,
                    horizon: int) -> OriginForecast:
    """Assemble the routed forecast from the fits made at this origin (see :mod:`sparsedemand.evaluate`)."""
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
        options = rule_options(rule, cost, ctx.train.season_length)
        have = kept.get(rule.method)
        if have is not None and have[0] == options:
            part = have[1].take(rows)
        else:
            train = ctx.train
            fitted = _methods.fit(rule.method, train.values[rows], train.start[rows],
                                  None if train.available is None else train.available[rows],
                                  horizon=horizon, **options)
            part = predictive(fitted, rows, ctx)
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
        backup = kept[FALLBACK][1]
        rows = np.flatnonzero(bad)
        routed.mean[rows] = backup.mean[rows]
        routed.quantiles[rows] = backup.quantiles[rows]
        routed.order_up_to[rows] = backup.order_up_to[rows]
        routed.failed[rows] = backup.failed[rows]
    return routed

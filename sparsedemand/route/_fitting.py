"""Fitting one group of items that share a rule: options, fallback and quantiles.

The router and holdout selection both fit through here, so a failed fit falls
back to the mean since first demand in the same way in both.
"""

from __future__ import annotations

import numpy as np

from .. import methods as _methods
from ..methods.distributions import demand_pmfs, ragged_quantiles
from ..methods.forecasts import label_seeds
from ..panel import DemandPanel
from .rules import _NARROW, INTERMITTENT_BOUNDS, Rule


_TUNED = ("alpha", "beta", "window")


def _routed_options(rule: Rule, cost: str, *, season_length: int = 0) -> dict:
    """The rule's fixed parameters; every other smoothing constant is optimised.

    Only methods that take an in-sample ``cost`` optimise anything; the
    Croston family and TSB search within :data:`INTERMITTENT_BOUNDS` unless
    the rule sets ``bounds``. ``season_length`` (the calendar's) fills in a
    seasonal method's season when the rule leaves it out.
    """
    allowed = _methods.method_options(rule.method)
    options = dict(rule.params)
    if "cost" in allowed:
        for name in _TUNED:
            # "same" ties the interval constant to the size constant: optimised together
            if name in allowed and name not in options and allowed[name] != "same":
                options[name] = None
        options.setdefault("cost", cost)
        if rule.method in _NARROW and "bounds" in allowed:
            options.setdefault("bounds", INTERMITTENT_BOUNDS)
    if "season_length" in allowed and options.get("season_length") is None and season_length:
        options["season_length"] = season_length
    return options


def _fit_group(panel: DemandPanel, rows: np.ndarray, rule: Rule, horizon: int, cost: str):
    options = _routed_options(rule, cost, season_length=panel.season_length)
    values = panel.values[rows]
    available = None if panel.available is None else panel.available[rows]
    return _methods.fit(rule.method, values, panel.start[rows], available, horizon=horizon, **options)


def _take(fitted, keep: np.ndarray):
    """The rows ``keep`` (a boolean mask) of a method fit."""
    return _methods.MethodFit(
        name=fitted.name,
        mean=fitted.mean[keep],
        params={k: v[keep] for k, v in fitted.params.items()},
        cost=fitted.cost[keep],
        distribution=fitted.distribution,
        dist_params={k: v[keep] for k, v in fitted.dist_params.items()},
    )


def _fit_with_fallback(panel: DemandPanel, rows: np.ndarray, rule: Rule, horizon: int, cost: str):
    """[(rows, fit, fell_back)]: the rule's fit, and the mean since first demand where it failed."""
    fitted = _fit_group(panel, rows, rule, horizon, cost)
    bad = ~np.isfinite(fitted.mean).all(axis=1)
    if not bad.any():
        return [(rows, fitted, False)]
    backup = _fit_group(panel, rows[bad], Rule("mean_since_first"), horizon, cost)
    parts = [(rows[bad], backup, True)]
    if not bad.all():
        parts.insert(0, (rows[~bad], _take(fitted, ~bad), False))
    return parts


def _quantiles_for(panel, rows, fitted, levels, seed) -> np.ndarray:
    """(n_rows, horizon, n_levels) quantiles of one-period demand per step."""
    horizon = fitted.mean.shape[1]
    out = np.empty((len(rows), horizon, len(levels)))
    # the bootstrap and a flat mean give the same distribution at every step
    flat = horizon == 1 or fitted.distribution == "empirical" or np.allclose(fitted.mean, fitted.mean[:, :1])
    steps = [0] if flat else range(horizon)
    seeds = label_seeds(panel.items[rows], seed)
    for step in steps:
        # ragged rows, each as long as its own item needs: one high-volume item no longer
        # pads every row of its group to its width
        pmf_rows = demand_pmfs(
            fitted.distribution,
            fitted.dist_params,
            fitted.mean[:, step],
            periods=[1],
            values=panel.values,
            start=panel.start,
            available=panel.available,
            history_rows=rows,
            seed=seeds,
            ragged=True,
        )[0]
        q = ragged_quantiles(pmf_rows, levels)
        if flat:
            out[:] = q[:, None, :]
        else:
            out[:, step, :] = q
    return out

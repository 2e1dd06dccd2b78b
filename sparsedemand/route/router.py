"""The router: classify every item, route it to a rule, fit each group of items that share one.

:func:`forecast` checks its options, routes the items (:func:`_route_items`),
fits the groups (:func:`_fit_routed`) and assembles the tables.
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import pandas as pd

from ..classify import classify as _classify
from ..io import as_panel
from ..panel import DemandPanel
from ._audit import _audit_table, _describe_params
from ._fitting import _fit_with_fallback, _quantiles_for
from ._holdout import _select_by_holdout
from ._options import _check_forecast_options
from .assign import assign_methods, routing_keys
from .frequency_change import rate_change
from .policy_files import _resolve_overrides, _resolve_policy
from .result import ForecastResult, _quantile_table
from .rules import CHANGE_LEVEL, DEFAULT_CANDIDATES, DEFAULT_LEVELS, Rule

__all__ = ["forecast"]


def forecast(
    data,
    horizon: int,
    *,
    policy: Mapping[str, Rule] | str | os.PathLike | None = None,
    overrides: Mapping[str, Rule] | str | os.PathLike | None = None,
    levels: tuple[float, ...] = DEFAULT_LEVELS,
    cost: str = "mse",
    selection: str = "policy",
    candidates: tuple[str, ...] = DEFAULT_CANDIDATES,
    holdout: int | None = None,
    seed: int = 0,
    classify_options: Mapping[str, object] | None = None,
    change_level: float | None = CHANGE_LEVEL,
    progress=None,
) -> ForecastResult:
    """Classify, route and forecast every item, with an audit trail.

    Parameters
    ----------
    data : DemandPanel, DataFrame (long or wide) or 2-D array
        The demand history.
    horizon : int
        Periods to forecast.
    policy : mapping or path, optional
        Routing rows (pattern -> :class:`Rule`) or a TOML policy file; either
        replaces rows of :data:`DEFAULT_POLICY`, the other rows stay.
    overrides : mapping or path, optional
        Per-item rules, or a CSV override file; they win over the policy.
    levels : tuple of float, default (0.5, 0.8, 0.9, 0.95)
        Quantile levels of the predictive distribution, each in (0, 1).
    cost : {"mse", "mae", "mar", "msr"}, default "mse"
        In-sample cost minimised when smoothing constants are optimised.
    selection : {"policy", "holdout"}, default "policy"
        ``holdout`` picks, per pattern, the candidate with the lowest mean
        RMSSE over the last ``holdout`` periods.
    candidates : tuple of str
        Methods compared by holdout selection.
    holdout : int, optional
        Holdout length for selection; defaults to ``horizon``.
    seed : int, default 0
        Seed for bootstrap distributions; results are deterministic for a seed.
    classify_options : mapping, optional
        Keyword options passed to :func:`sparsedemand.classify.classify`.
    change_level : float or None, default :data:`CHANGE_LEVEL`
        Level of the test for a change in demand frequency that sends
        erratic, intermittent and lumpy items to the ``rate-change`` row
        (see :func:`rate_change`); ``None`` turns the test off.
    progress : callable, optional
        ``progress(iterable, label=...)`` returning a context manager that
        yields the iterable (a progress bar).

    Returns
    -------
    ForecastResult

    Examples
    --------
    >>> import numpy as np
    >>> y = np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]])
    >>> result = forecast(y, 3)
    >>> result.point.shape, result.audit.loc[0, "method"]
    ((1, 3), 'sba')
    """
    panel = as_panel(data)
    levels = _check_forecast_options(horizon, levels, cost, selection, holdout, panel)
    routing = _route_items(
        panel, policy=policy, overrides=overrides, selection=selection, candidates=candidates,
        holdout=holdout or horizon, cost=cost, classify_options=classify_options, change_level=change_level,
    )
    fits = _fit_routed(panel, routing.rules, horizon=horizon, levels=levels, cost=cost, seed=seed,
                       progress=progress)
    periods = panel.future_periods(horizon)
    return ForecastResult(
        point=pd.DataFrame(fits.mean, index=panel.items, columns=periods),
        quantiles=_quantile_table(panel, periods, fits.quantiles, levels),
        audit=_audit_table(routing.classes, routing.keys, routing.changes, routing.rules, fits.method,
                           fits.parameters, fits.cost, fits.distribution, fits.fallback, cost),
        classes=routing.classes,
        panel=panel,
        levels=tuple(levels),
        groups=fits.groups,
        selection=routing.selection,
    )


@dataclass
class _Routing:
    """Where the items go: their classes, policy rows, rate-change test and rules."""

    classes: pd.DataFrame
    keys: np.ndarray
    changes: pd.DataFrame | None
    rules: list[Rule]
    selection: pd.DataFrame | None


def _route_items(panel: DemandPanel, *, policy, overrides, selection: str, candidates, holdout: int, cost: str,
                 classify_options, change_level) -> _Routing:
    """Classify, read the policy and overrides, test for rate changes and pick every item's rule."""
    classes = _classify(panel, **dict(classify_options or {}))
    policy = _resolve_policy(policy)
    overrides = _resolve_overrides(overrides)
    changes = None if change_level is None else rate_change(panel, classes, level=change_level)
    changed = None if changes is None else changes["changed"].to_numpy()
    keys = routing_keys(classes, changed)
    selection_table = None
    if selection == "holdout":
        policy, selection_table = _select_by_holdout(panel, keys, policy, candidates, holdout, cost)
    rules = assign_methods(classes, policy=policy, overrides=overrides, changed=changed)
    return _Routing(classes, keys, changes, rules, selection_table)


@dataclass
class _Fits:
    """Every item's forecast and fit; ``groups`` holds (rows, rule used, fit) as fitted."""

    mean: np.ndarray
    quantiles: np.ndarray
    method: np.ndarray
    parameters: np.ndarray
    cost: np.ndarray
    distribution: np.ndarray
    fallback: np.ndarray
    groups: list

    @classmethod
    def empty(cls, n: int, horizon: int, n_levels: int) -> _Fits:
        return cls(
            mean=np.zeros((n, horizon)),
            quantiles=np.zeros((n, horizon, n_levels)),
            method=np.empty(n, dtype=object),
            parameters=np.empty(n, dtype=object),
            cost=np.full(n, np.nan),
            distribution=np.empty(n, dtype=object),
            fallback=np.zeros(n, dtype=bool),
            groups=[],
        )


def _fit_routed(panel: DemandPanel, rules: list[Rule], *, horizon: int, levels: tuple[float, ...], cost: str,
                seed: int, progress) -> _Fits:
    """Fit each group of items that share a rule; a failed fit falls back to the mean since first demand."""
    groups: dict[tuple, list[int]] = {}
    for i, rule in enumerate(rules):
        groups.setdefault(rule.key(), []).append(i)
    fits = _Fits.empty(panel.n_items, horizon, len(levels))
    work = list(groups.values())
    iterator = progress(work, label="forecasting") if progress else contextlib.nullcontext(work)
    with iterator as bar:
        for members in bar:
            rows = np.asarray(members)
            rule = rules[rows[0]]
            for part, fitted, fell_back in _fit_with_fallback(panel, rows, rule, horizon, cost):
                used = Rule("mean_since_first") if fell_back else rule
                fits.fallback[part] = fell_back
                fits.mean[part] = np.maximum(fitted.mean, 0.0)
                fits.quantiles[part] = _quantiles_for(panel, part, fitted, levels, seed)
                fits.method[part] = used.method
                fits.parameters[part] = [_describe_params(fitted.params, j, used.params) for j in range(len(part))]
                fits.distribution[part] = fitted.distribution
                fits.cost[part] = fitted.cost
                fits.groups.append((part, used, fitted))
    return fits

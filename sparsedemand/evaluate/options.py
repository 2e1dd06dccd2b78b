"""The backtest's names and option checks: every option is checked once, before any fit."""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .. import methods as _methods
from ..classify import PATTERNS, STATUSES
from ..errors import InputError
from ..methods.forecasts import label_seeds
from ..panel import DemandPanel
from ..route import Rule, _resolve_policy, _routed_options, load_overrides, quantile_column

ROUTER = "router"
#: The naive baselines every method is compared with (fitted with their default options).
BASELINES: tuple[str, ...] = (
    "zeros", "mean_all", "mean_since_first", "mean_recent", "repeat_last", "seasonal_mean",
)
GROUP_LEVELS: tuple[str, ...] = ("item", "location", "category", "total")
LABELS = PATTERNS + STATUSES
_WEIGHTS = ("volume", "value")
FALLBACK = "mean_since_first"


def whole(name: str, value, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{name} must be a whole number >= {minimum}, got {value!r}")
    return int(value)


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


def rule_options(rule: Rule, cost: str, season_length: int) -> dict:
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
    for name in dict.fromkeys([*names, baseline, FALLBACK]):
        if name in BASELINES:
            opts = {"season_length": panel.season_length} if name == "seasonal_mean" else {}
            if name == "seasonal_mean" and not panel.season_length:
                raise InputError("seasonal_mean needs a day, week or month calendar (the season length)")
        else:
            # the router's own options, so that routed items can take these rows
            opts = rule_options(Rule(name), cost, panel.season_length)
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


@dataclass(frozen=True)
class Options:
    """The checked options of one backtest (see :func:`sparsedemand.evaluate.backtest`)."""

    cuts: np.ndarray  # training length of every origin
    horizon: int
    step: int
    levels: np.ndarray
    service_level: float
    lead_time: int
    review: int
    unmet: str
    cost: str
    seed: int
    baseline: str
    weights: tuple[str, ...]
    price: np.ndarray | None
    plan: dict  # method -> options, in report order
    include_router: bool
    policy: object
    overrides: object
    groups: dict  # group level -> labels
    seeds: np.ndarray  # bootstrap seed per item
    classify_options: Mapping | None
    change_level: float | None

    def settings(self) -> dict:
        """The options as recorded in :attr:`BacktestResult.settings`."""
        return dict(holdout=self.horizon, origins=len(self.cuts), step=self.step, methods=list(self.plan),
                    include_router=self.include_router, levels=tuple(float(x) for x in self.levels),
                    cost=self.cost, baseline=self.baseline, lead_time=self.lead_time,
                    review_period=self.review, service_level=self.service_level, unmet=self.unmet,
                    seed=self.seed, weights=self.weights, group_levels=tuple(self.groups))


def check_options(panel: DemandPanel, cuts: np.ndarray, *, holdout, step, methods, method_options,
                  include_router, policy, overrides, levels, cost, baseline, lead_time, review_period,
                  service_level, unmet, seed, classify_options, weights, group_levels,
                  change_level) -> Options:
    """Check every option of :func:`sparsedemand.evaluate.backtest` (one clear error for the first bad one)."""
    lv = _check_levels(levels)
    service = _check_fraction("service_level", service_level)
    lead = whole("lead_time", lead_time, minimum=0)
    review = whole("review_period", review_period, minimum=1)
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
    return Options(
        cuts=cuts, horizon=int(holdout), step=int(step if step is not None else holdout), levels=lv,
        service_level=service, lead_time=lead, review=review, unmet=unmet, cost=cost, seed=int(seed),
        baseline=baseline, weights=kinds, price=price, plan=plan, include_router=include_router,
        policy=policy, overrides=overrides, groups=_group_labels(panel, group_levels),
        # per label: independent of row order and grouping
        seeds=label_seeds(panel.items, int(seed)), classify_options=classify_options,
        change_level=change_level,
    )

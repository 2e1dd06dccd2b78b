"""Typed settings of the whole commands, checked once when they are built.

One frozen dataclass per command: :class:`ClassifySettings`,
:class:`ForecastSettings` (holds the classifier's settings),
:class:`BacktestSettings` and :class:`StockSettings` (each holds the forecast
settings they run on). The command line builds them from its options, the
Dask engine from its keywords; either way a bad value is refused before any
input is read, with a one-line message naming the command-line option.

Examples
--------
>>> s = ForecastSettings(horizon=7, levels=(0.5, 0.9))
>>> s.classify.adi_cutoff, s.seed
(1.32, 0)
>>> StockSettings(lead_time=3).service_level
0.95
"""

from __future__ import annotations

import dataclasses
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from numbers import Real
from pathlib import Path

import numpy as np

from ..classify import RULES
from ..errors import InputError
from ..route import CHANGE_LEVEL, DEFAULT_CANDIDATES, DEFAULT_LEVELS, Rule, load_policy

__all__ = ["ClassifySettings", "ForecastSettings", "BacktestSettings", "StockSettings", "whole_number"]


def whole_number(option: str, value, *, minimum: int) -> int:
    """``value`` as an int, or a one-line error naming ``option``."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{option} must be a whole number >= {minimum}, got {value!r}")
    return int(value)


def _finite(option: str, value, low: float, *, strict: bool = False) -> None:
    ok = isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value)
    if not ok or value < low or (strict and value == low):
        raise InputError(f"{option} must be a finite number {'>' if strict else '>='} {low:g}, got {value!r}")


def _fraction(option: str, value) -> None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{option} must be a number between 0 and 1 exclusive, got {value!r}") from None
    if not 0.0 < v < 1.0:
        raise InputError(f"{option} must be between 0 and 1 exclusive, got {value!r}")


@dataclass(frozen=True)
class ClassifySettings:
    """Options of the demand-pattern classifier (:func:`sparsedemand.classify.classify`).

    ``quiet_factor=None`` turns the gone-quiet check off (``--quiet-factor 0``).

    Examples
    --------
    >>> ClassifySettings(rule="kostenko-hyndman").options()["rule"]
    'kostenko-hyndman'
    """

    adi_cutoff: float = 1.32
    cv2_cutoff: float = 0.49
    rule: str = "cutoffs"
    min_demands: int = 2
    min_periods: int = 8
    quiet_factor: float | None = 4.0
    quiet_min: int = 8

    def __post_init__(self) -> None:
        if self.rule not in RULES:
            raise InputError(f"--rule must be one of {', '.join(RULES)}, got {self.rule!r}")
        _finite("--adi-cutoff", self.adi_cutoff, 1.0)  # ADI is never below 1
        _finite("--cv2-cutoff", self.cv2_cutoff, 0.0, strict=True)
        whole_number("--min-demands", self.min_demands, minimum=2)  # CV² needs two sizes
        whole_number("--min-periods", self.min_periods, minimum=1)
        if self.quiet_factor is not None:
            _finite("--quiet-factor", self.quiet_factor, 0.0, strict=True)
        whole_number("--quiet-min", self.quiet_min, minimum=1)

    @classmethod
    def from_mapping(cls, options: Mapping[str, object] | None) -> ClassifySettings:
        """From keywords of :func:`~sparsedemand.classify.classify` (unknown ones are refused)."""
        options = dict(options or {})
        unknown = sorted(set(options) - {f.name for f in dataclasses.fields(cls)})
        if unknown:
            raise InputError(f"classify_options: unknown option {unknown[0]!r}")
        return cls(**options)

    def options(self) -> dict:
        """Keywords of :func:`~sparsedemand.classify.classify`, in the order ``run.json`` lists them."""
        return {"adi_cutoff": self.adi_cutoff, "cv2_cutoff": self.cv2_cutoff, "rule": self.rule,
                "min_demands": self.min_demands, "min_periods": self.min_periods, "quiet_min": self.quiet_min,
                "quiet_factor": self.quiet_factor}


_OWN_FORECAST_KEYWORDS = frozenset({"data", "horizon", "levels", "policy", "overrides", "cost", "selection",
                                    "candidates", "holdout", "seed", "classify_options", "progress"})
_OWN_BACKTEST_KEYWORDS = frozenset({"data", "holdout", "origins", "step", "policy", "overrides", "levels", "cost",
                                    "seed", "classify_options", "progress"})


def _keywords(option: str, given: Mapping | None, own: frozenset) -> dict:
    """Further keywords passed through to a stage; those with their own setting are refused."""
    out = dict(given or {})
    clash = sorted(set(out) & own)
    if clash:
        raise InputError(f"{option}: give {clash[0]!r} as its own keyword")
    return out


@dataclass(frozen=True)
class ForecastSettings:
    """How the router forecasts (:func:`sparsedemand.route.forecast`).

    Parameters
    ----------
    horizon : int or None
        Periods to forecast; ``None`` where the command sets it (``stock``:
        the longest lead time plus the review period; ``backtest``: the
        holdout).
    levels, cost, selection, candidates, holdout, seed
        As for :func:`~sparsedemand.route.forecast`.
    policy : mapping or path, optional
        Routing rows, or a TOML policy file (read and checked here, before
        any input is read; its name is kept in ``policy_file``).
    overrides : mapping or path, optional
        Per-item rules, or an override CSV (read when the forecast runs).
    classify : ClassifySettings
    options : mapping
        Further keywords of :func:`~sparsedemand.route.forecast` (for example
        ``change_level``).

    Examples
    --------
    >>> ForecastSettings(horizon=0)
    Traceback (most recent call last):
    ...
    sparsedemand.errors.InputError: --horizon must be at least 1, got 0
    """

    horizon: int | None = None
    levels: tuple[float, ...] = DEFAULT_LEVELS
    policy: Mapping[str, Rule] | None = None
    overrides: Mapping[str, Rule] | Path | None = None
    cost: str = "mse"
    selection: str = "policy"
    seed: int = 0
    candidates: tuple[str, ...] = DEFAULT_CANDIDATES
    holdout: int | None = None
    classify: ClassifySettings = field(default_factory=ClassifySettings)
    options: Mapping[str, object] = field(default_factory=dict)
    policy_file: str | None = None

    def __post_init__(self) -> None:
        if self.horizon is not None:
            if isinstance(self.horizon, bool) or not isinstance(self.horizon, (int, np.integer)):
                raise InputError(f"--horizon must be a whole number >= 1, got {self.horizon!r}")
            if self.horizon < 1:
                raise InputError(f"--horizon must be at least 1, got {self.horizon}")
        if isinstance(self.policy, (str, os.PathLike)):
            object.__setattr__(self, "policy_file", str(self.policy))
            object.__setattr__(self, "policy", load_policy(self.policy))
        if isinstance(self.overrides, str):
            object.__setattr__(self, "overrides", Path(self.overrides))
        object.__setattr__(self, "levels", tuple(self.levels))
        object.__setattr__(self, "candidates", tuple(self.candidates))
        object.__setattr__(self, "options", _keywords("forecast_options", self.options, _OWN_FORECAST_KEYWORDS))

    @property
    def change_level(self) -> float | None:
        """The rate-change level the router uses."""
        return self.options.get("change_level", CHANGE_LEVEL)

    def manifest(self) -> dict:
        """``forecast_options`` of the command line's ``run.json``."""
        return {"levels": self.levels, "policy": self.policy, "overrides": self.overrides, "cost": self.cost,
                "selection": self.selection, "seed": self.seed}


@dataclass(frozen=True)
class BacktestSettings:
    """How the backtest runs (:func:`sparsedemand.evaluate.backtest`).

    The forecast settings give the router's levels, policy, overrides, cost,
    seed and classifier; the backtest scores the policy's router, so
    ``forecast.selection`` must be ``"policy"``. ``options`` holds further
    keywords of :func:`~sparsedemand.evaluate.backtest`.

    Examples
    --------
    >>> BacktestSettings(holdout=14, origins=2).step is None
    True
    """

    holdout: int
    origins: int = 1
    step: int | None = None
    methods: tuple[str, ...] | None = None
    baseline: str = "mean_since_first"
    lead_time: int = 1
    review_period: int = 1
    service_level: float = 0.95
    unmet: str = "lost"
    weights: str | tuple[str, ...] = "volume"
    forecast: ForecastSettings = field(default_factory=ForecastSettings)
    options: Mapping[str, object] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.holdout is None:
            raise InputError("--holdout is needed for a backtest")
        whole_number("--holdout", self.holdout, minimum=1)
        whole_number("--origins", self.origins, minimum=1)
        if self.step is not None:
            whole_number("--step", self.step, minimum=1)
        whole_number("--lead-time", self.lead_time, minimum=0)
        whole_number("--review-period", self.review_period, minimum=1)
        _fraction("--service-level", self.service_level)
        if self.unmet not in ("lost", "backorder"):
            raise InputError(f"--unmet must be lost or backorder, got {self.unmet!r}")
        if self.forecast.selection != "policy":
            raise InputError("--selection holdout is for forecast; the backtest scores the policy's router")
        if self.methods is not None:
            object.__setattr__(self, "methods", tuple(self.methods))
        if not isinstance(self.weights, str):
            object.__setattr__(self, "weights", tuple(self.weights))
        object.__setattr__(self, "options", _keywords("backtest_options", self.options, _OWN_BACKTEST_KEYWORDS))

    def manifest(self) -> dict:
        """``backtest_options`` of the command line's ``run.json``."""
        return {"holdout": self.holdout, "origins": self.origins, "step": self.step, "methods": self.methods,
                "baseline": self.baseline, "lead_time": self.lead_time, "review_period": self.review_period,
                "service_level": self.service_level, "unmet": self.unmet, "weights": self.weights}


@dataclass(frozen=True)
class StockSettings:
    """How stock targets are set (:func:`sparsedemand.stock.stock_targets`).

    Exactly one of ``lead_time`` (every item) and ``lead_time_column`` (an
    input column with each item's lead time); the target is a cycle
    ``service_level`` (0.95 when neither target is given) or a
    ``fill_rate``. ``on_hand_file`` is a CSV snapshot with ``item``,
    ``on_hand`` and optionally ``on_order``. ``seed`` seeds the bootstrap
    distributions; ``forecast`` is how the forecast behind the targets runs.

    Stock targets are decision support; follow the organisation's policies,
    regulations and qualified staff, especially for safety-critical spares.

    Examples
    --------
    >>> StockSettings(lead_time=2, fill_rate=0.9).service_level is None
    True
    """

    lead_time: int | None = None
    lead_time_column: str | None = None
    review_period: int = 1
    service_level: float | None = None
    fill_rate: float | None = None
    on_hand_file: Path | None = None
    seed: int = 0
    forecast: ForecastSettings = field(default_factory=ForecastSettings)

    def __post_init__(self) -> None:
        if (self.lead_time is None) == (self.lead_time_column is None):
            raise InputError("give exactly one of --lead-time and --lead-time-column")
        if self.lead_time is not None:
            object.__setattr__(self, "lead_time", whole_number("--lead-time", self.lead_time, minimum=0))
        object.__setattr__(self, "review_period", whole_number("--review-period", self.review_period, minimum=1))
        if self.service_level is None and self.fill_rate is None:
            object.__setattr__(self, "service_level", 0.95)
        if self.service_level is not None and self.fill_rate is not None:
            raise InputError("give exactly one of --service-level or --fill-rate")
        if self.fill_rate is None:
            _fraction("--service-level", self.service_level)
        else:
            _fraction("--fill-rate", self.fill_rate)

    def manifest(self) -> dict:
        """``stock_options`` of ``run.json``."""
        return {"lead_time": self.lead_time, "lead_time_column": self.lead_time_column,
                "review_period": self.review_period, "service_level": self.service_level,
                "fill_rate": self.fill_rate, "on_hand_file": self.on_hand_file, "seed": self.seed}

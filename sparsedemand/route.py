"""Routing: which method each item gets, and why.

Every item is classified (:mod:`sparsedemand.classify`), then sent to a method
by the *routing policy*: a table from pattern or status to a method and its
parameters. The default table follows the published comparisons:

=============  ===================  ==================================================
pattern        method               grounds
=============  ===================  ==================================================
smooth         SES                  Syntetos, Boylan & Croston (2005, JORS 56:495-503):
                                    outside the intermittent region, per-period
                                    smoothing is adequate and unbiased.
erratic        SBA                  Syntetos, Boylan & Croston (2005): SBA outperforms
intermittent   SBA                  Croston wherever ADI >= 1.32 or CV² >= 0.49;
lumpy          SBA                  Syntetos & Boylan (2005, IJF 21:303-314).
gone-quiet     TSB                  Teunter, Syntetos & Babai (2011, EJOR 214:606-615):
                                    the demand probability decays while demand is
                                    absent, so the forecast follows obsolescence.
too-short      mean since first     too few demands to fit smoothing constants.
never-sold     zero forecast        nothing to forecast.
=============  ===================  ==================================================

Smoothing constants are optimised per item (bounded 0.01 to 0.5) unless fixed,
as recommended by Kourentzes (2014, IJPE 156:180-190).

A *policy file* (TOML) replaces rows of the table::

    [patterns.lumpy]
    method = "tsb"
    alpha = 0.1        # fixed; leave out to optimise
    beta = 0.05

A *per-item override file* (CSV with columns ``item``, ``method`` and any
parameter columns, blank meaning "optimise") wins over the table.
With ``selection="holdout"`` the method for each pattern is instead the
candidate with the lowest mean RMSSE over the last ``holdout`` periods of that
pattern's items, refitted on the full history; the scores are kept.
"""

from __future__ import annotations

import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping

import numpy as np
import pandas as pd

from . import methods as _methods
from .classify import classify as _classify
from .errors import InputError
from .methods.distributions import demand_pmf, pmf_quantiles
from .panel import DemandPanel, as_panel

__all__ = [
    "DEFAULT_POLICY",
    "DEFAULT_LEVELS",
    "DEFAULT_CANDIDATES",
    "Rule",
    "ForecastResult",
    "load_policy",
    "load_overrides",
    "assign_methods",
    "forecast",
    "quantile_column",
]

DEFAULT_LEVELS = (0.5, 0.8, 0.9, 0.95)
DEFAULT_CANDIDATES = ("ses", "croston", "sba", "sbj", "tsb", "adida", "imapa", "mean_since_first")

_GROUNDS = {
    "ses": "SES suits steady demand (Syntetos, Boylan & Croston 2005)",
    "sba": "SBA corrects Croston's bias on intermittent demand (Syntetos & Boylan 2005)",
    "tsb": "TSB lets the demand probability decay when demand stops (Teunter, Syntetos & Babai 2011)",
    "mean_since_first": "too few demands to fit smoothing constants, so the mean since the first demand",
    "zeros": "no demand on record, so a zero forecast",
}


@dataclass(frozen=True)
class Rule:
    """One routing decision: a method and its fixed parameters.

    Parameters
    ----------
    method : str
        A name from :data:`sparsedemand.methods.METHODS`.
    params : mapping
        Fixed keyword options; a smoothing constant left out is optimised.
    source : str
        Where the rule came from, for the audit trail.
    """

    method: str
    params: Mapping[str, object] = field(default_factory=dict)
    source: str = "default policy"

    def key(self) -> tuple:
        return (self.method, tuple(sorted((k, repr(v)) for k, v in self.params.items())))


DEFAULT_POLICY: dict[str, Rule] = {
    "smooth": Rule("ses"),
    "erratic": Rule("sba"),
    "intermittent": Rule("sba"),
    "lumpy": Rule("sba"),
    "gone-quiet": Rule("tsb"),
    "too-short": Rule("mean_since_first"),
    "never-sold": Rule("zeros"),
}


def quantile_column(level: float) -> str:
    """Column name of a quantile level: 0.9 -> ``q90``, 0.975 -> ``q97.5``."""
    return "q" + f"{level * 100:.6g}"


# ------------------------------------------------------------ policy files


def _check_rule(rule: Rule, where: str) -> None:
    """Fail early, naming ``where``, if a method or its parameters are unknown."""
    if rule.method not in _methods.METHODS:
        known = ", ".join(_methods.METHODS)
        raise InputError(f"{where}: unknown method {rule.method!r} (known: {known})")
    probe = np.array([[0.0, 2.0, 0.0, 1.0, 0.0, 0.0, 3.0, 1.0]])
    try:
        _methods.fit(rule.method, probe, np.array([1]), None, horizon=1, **dict(rule.params))
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
    except TypeError as exc:
        raise InputError(f"{where}: bad parameters for {rule.method}: {exc}") from None


def _line_of(text: str, pattern: str) -> int:
    for number, line in enumerate(text.splitlines(), start=1):
        if re.search(pattern, line):
            return number
    return 1


def load_policy(path: str | os.PathLike, *, base: Mapping[str, Rule] | None = None) -> dict[str, Rule]:
    """Read a TOML policy file; its rows replace rows of ``base`` (the default table).

    Examples
    --------
    >>> policy = load_policy("policy.toml")  # doctest: +SKIP
    >>> policy["lumpy"].method  # doctest: +SKIP
    'tsb'
    """
    from .classify import PATTERNS, STATUSES

    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{name}: no such policy file") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{name}: not valid TOML ({exc})") from None
    policy = dict(base if base is not None else DEFAULT_POLICY)
    for key in data:
        if key != "patterns":
            line = _line_of(text, rf"^\s*\[?\s*{re.escape(key)}\b")
            raise InputError(f"{name}, line {line}: unknown section {key!r} (expected [patterns.NAME])")
    known = (*PATTERNS, *STATUSES)
    for pattern, row in data.get("patterns", {}).items():
        line = _line_of(text, rf"^\s*\[\s*patterns\.\"?{re.escape(pattern)}\"?\s*\]")
        where = f"{name}, line {line}"
        if pattern not in known:
            raise InputError(f"{where}: unknown pattern {pattern!r} (known: {', '.join(known)})")
        if not isinstance(row, dict) or "method" not in row:
            raise InputError(f"{where}: [patterns.{pattern}] needs a method = \"...\" entry")
        params = {k: v for k, v in row.items() if k != "method"}
        rule = Rule(str(row["method"]), params, source=f"policy file {Path(name).name}, line {line}")
        _check_rule(rule, where)
        policy[pattern] = rule
    return policy


def load_overrides(path: str | os.PathLike, *, item_column: str = "item") -> dict[str, Rule]:
    """Read a per-item override CSV: ``item``, ``method`` and parameter columns.

    A blank parameter cell means "optimise". Line numbers in messages count the
    header as line 1.
    """
    name = str(path)
    if not Path(path).exists():
        raise InputError(f"{name}: no such override file")
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
    except pd.errors.EmptyDataError:
        raise InputError(f"{name}: the file is empty") from None
    for column in (item_column, "method"):
        if column not in table.columns:
            found = ", ".join(table.columns)
            raise InputError(f"{name}: missing column {column!r} (columns found: {found})")
    params_cols = [c for c in table.columns if c not in (item_column, "method")]
    rules: dict[str, Rule] = {}
    for i, row in enumerate(table.itertuples(index=False)):
        line = i + 2
        rec = row._asdict() if hasattr(row, "_asdict") else dict(zip(table.columns, row))
        rec = dict(zip(table.columns, row))
        item = rec[item_column].strip()
        if not item:
            raise InputError(f"{name}, line {line}: empty {item_column}")
        if item in rules:
            raise InputError(f"{name}, line {line}: item {item!r} is overridden twice")
        params = {}
        for col in params_cols:
            cell = rec[col].strip()
            if cell:
                params[col] = _parse_value(cell, f"{name}, line {line}, column {col!r}")
        rule = Rule(rec["method"].strip(), params, source=f"override file {Path(name).name}, line {line}")
        _check_rule(rule, f"{name}, line {line}")
        rules[item] = rule
    return rules


def _parse_value(text: str, where: str):
    for cast in (int, float):
        try:
            return cast(text)
        except ValueError:
            pass
    low = text.lower()
    if low in ("true", "false"):
        return low == "true"
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_-]*", text):
        return text
    raise InputError(f"{where}: cannot read parameter value {text!r}")


# ---------------------------------------------------------------- routing


def assign_methods(
    classes: pd.DataFrame,
    *,
    policy: Mapping[str, Rule] | None = None,
    overrides: Mapping[str, Rule] | None = None,
) -> list[Rule]:
    """The rule for every item (overrides first, then the policy row of its pattern)."""
    policy = DEFAULT_POLICY if policy is None else policy
    overrides = overrides or {}
    unknown = [item for item in overrides if item not in classes.index]
    if unknown:
        raise InputError(f"override for unknown item {unknown[0]!r} (not in the input)")
    rules = []
    for item, pattern in zip(classes.index, classes["pattern"]):
        rule = overrides.get(item)
        if rule is None:
            rule = policy.get(pattern)
            if rule is None:
                raise InputError(f"the routing policy has no row for pattern {pattern!r}")
        rules.append(rule)
    return rules


@dataclass
class ForecastResult:
    """Routed forecasts with their audit trail.

    Attributes
    ----------
    point : DataFrame
        Mean forecasts, items as rows, future periods as columns.
    quantiles : DataFrame
        Long table ``item``, ``step``, ``period`` and one column per level.
    audit : DataFrame
        One row per item: pattern, statistics, method, parameters, in-sample
        cost, reason and warnings.
    selection : DataFrame or None
        Holdout scores behind each pattern's pick (holdout selection only).
    """

    point: pd.DataFrame
    quantiles: pd.DataFrame
    audit: pd.DataFrame
    classes: pd.DataFrame
    panel: DemandPanel
    levels: tuple[float, ...]
    groups: list = field(default_factory=list, repr=False)
    selection: pd.DataFrame | None = None

    def item_forecasts(self):
        """Means and predictive distributions of every item, for the stock stage."""
        from .stock import gather_forecasts

        return gather_forecasts([(rows, fitted) for rows, _, fitted in self.groups], self.panel.n_items)

    def table(self) -> pd.DataFrame:
        """The long forecast table written to ``forecasts.csv``."""
        long = self.quantiles.copy()
        means = self.point.to_numpy()
        long.insert(3, "forecast", means.reshape(-1))
        return long


_TUNED = ("alpha", "beta", "window")


def _routed_options(rule: Rule, cost: str) -> dict:
    """The rule's fixed parameters; every other smoothing constant is optimised."""
    allowed = _methods.method_options(rule.method)
    options = dict(rule.params)
    for name in _TUNED:
        # "same" ties the interval constant to the size constant: optimised together
        if name in allowed and name not in options and allowed[name] != "same":
            options[name] = None
    if "cost" in allowed and "cost" not in options:
        options["cost"] = cost
    return options


def _fit_group(panel: DemandPanel, rows: np.ndarray, rule: Rule, horizon: int, cost: str):
    options = _routed_options(rule, cost)
    values = panel.values[rows]
    available = None if panel.available is None else panel.available[rows]
    return _methods.fit(rule.method, values, panel.start[rows], available, horizon=horizon, **options)


def _quantiles_for(panel, rows, fitted, levels, seed) -> np.ndarray:
    """(n_rows, horizon, n_levels) quantiles of one-period demand per step."""
    horizon = fitted.mean.shape[1]
    out = np.empty((len(rows), horizon, len(levels)))
    flat = np.allclose(fitted.mean, fitted.mean[:, :1]) if horizon > 1 else True
    steps = [0] if flat else range(horizon)
    for step in steps:
        pmf = demand_pmf(
            fitted.distribution,
            fitted.dist_params,
            fitted.mean[:, step],
            periods=1,
            values=panel.values[rows],
            start=panel.start[rows],
            available=None if panel.available is None else panel.available[rows],
            seed=seed,
        )
        q = pmf_quantiles(pmf, levels)
        if flat:
            out[:] = q[:, None, :]
        else:
            out[:, step, :] = q
    return out


def _describe_params(params: Mapping[str, np.ndarray], i: int, fixed: Mapping) -> str:
    parts = []
    for key, arr in params.items():
        v = arr[i]
        if np.isfinite(v):
            tag = "" if key in fixed else " (optimised)"
            parts.append(f"{key}={v:.4g}{tag}")
    return ", ".join(parts)


def _method_reason(rule: Rule, pattern: str, cost: str) -> str:
    grounds = _GROUNDS.get(rule.method, f"method {rule.method}")
    if rule.source == "default policy":
        return f"default policy row '{pattern}' -> {rule.method}: {grounds}"
    return f"{rule.source} -> {rule.method}"


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
        Routing table (pattern -> :class:`Rule`) or a TOML policy file whose
        rows replace the default ones.
    overrides : mapping or path, optional
        Per-item rules, or a CSV override file; they win over the policy.
    levels : tuple of float, default (0.5, 0.8, 0.9, 0.95)
        Quantile levels of the predictive distribution.
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

    Returns
    -------
    ForecastResult

    Examples
    --------
    >>> import numpy as np
    >>> y = np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]])
    >>> result = forecast(y, 3)
    >>> result.point.shape
    (1, 3)
    """
    panel = as_panel(data)
    _check_forecast_options(horizon, levels, cost, selection, holdout, panel)
    classes = _classify(panel, **dict(classify_options or {}))
    if isinstance(policy, (str, os.PathLike)):
        policy = load_policy(policy)
    if isinstance(overrides, (str, os.PathLike)):
        overrides = load_overrides(overrides)
    selection_table = None
    if selection == "holdout":
        policy, selection_table = _select_by_holdout(
            panel, classes, policy or DEFAULT_POLICY, candidates, holdout or horizon, cost,
            classify_options or {},
        )
    rules = assign_methods(classes, policy=policy, overrides=overrides)

    groups: dict[tuple, list[int]] = {}
    for i, rule in enumerate(rules):
        groups.setdefault(rule.key(), []).append(i)
    n = panel.n_items
    mean = np.zeros((n, horizon))
    qs = np.zeros((n, horizon, len(levels)))
    method_col = np.empty(n, dtype=object)
    param_text = np.empty(n, dtype=object)
    cost_col = np.full(n, np.nan)
    dist_col = np.empty(n, dtype=object)
    fallback = np.zeros(n, dtype=bool)
    fitted_groups = []
    work = list(groups.values())
    iterator = progress(work, label="forecasting") if progress else _null_ctx(work)
    with iterator as bar:
        for members in bar:
            rows = np.asarray(members)
            rule = rules[rows[0]]
            fitted = _fit_group(panel, rows, rule, horizon, cost)
            bad = ~np.isfinite(fitted.mean).all(axis=1)
            if bad.any():
                # A fit that failed for some items: fall back to the mean since first demand.
                fallback[rows[bad]] = True
                backup = _methods.fit("mean_since_first", panel.values[rows[bad]], panel.start[rows[bad]],
                                      None if panel.available is None else panel.available[rows[bad]],
                                      horizon=horizon)
                fitted = _patch(fitted, bad, backup)
            mean[rows] = np.maximum(fitted.mean, 0.0)
            qs[rows] = _quantiles_for(panel, rows, fitted, levels, seed)
            for j, i in enumerate(rows):
                method_col[i] = rule.method
                param_text[i] = _describe_params(fitted.params, j, rule.params)
                dist_col[i] = fitted.distribution
            cost_col[rows] = fitted.cost
            fitted_groups.append((rows, rule, fitted))

    periods = panel.future_periods(horizon)
    point = pd.DataFrame(mean, index=panel.items, columns=periods)
    quantiles = _quantile_table(panel, periods, qs, levels)
    audit = _audit_table(classes, rules, method_col, param_text, cost_col, dist_col, fallback, cost, panel)
    return ForecastResult(
        point=point,
        quantiles=quantiles,
        audit=audit,
        classes=classes,
        panel=panel,
        levels=tuple(levels),
        groups=fitted_groups,
        selection=selection_table,
    )


class _null_ctx:
    def __init__(self, it) -> None:
        self.it = it

    def __enter__(self):
        return self.it

    def __exit__(self, *exc) -> None:
        return None


def _patch(fitted, bad: np.ndarray, backup):
    """Replace the failed rows of a fit by the backup fit's rows."""
    mean = fitted.mean.copy()
    mean[bad] = backup.mean
    cost = fitted.cost.copy()
    cost[bad] = backup.cost
    return _methods.MethodFit(
        name=fitted.name,
        mean=mean,
        params=fitted.params,
        cost=cost,
        distribution=fitted.distribution if not bad.all() else backup.distribution,
        dist_params=fitted.dist_params,
    )


def _check_forecast_options(horizon, levels, cost, selection, holdout, panel) -> None:
    if not isinstance(horizon, (int, np.integer)) or horizon < 1:
        raise InputError(f"--horizon must be a whole number of periods >= 1, got {horizon!r}")
    if not levels or any(not 0.0 < float(q) < 1.0 for q in levels):
        raise InputError(f"--quantiles must lie strictly between 0 and 1, got {list(levels)}")
    if cost not in ("mse", "mae", "mar", "msr"):
        raise InputError(f"--cost must be mse, mae, mar or msr, got {cost!r}")
    if selection not in ("policy", "holdout"):
        raise InputError(f"--selection must be policy or holdout, got {selection!r}")
    if holdout is not None and not 1 <= holdout < panel.n_periods:
        raise InputError(f"--holdout must be between 1 and {panel.n_periods - 1}, got {holdout}")
    if panel.n_periods < 2:
        raise InputError("the history needs at least 2 periods to forecast")


def _quantile_table(panel, periods, qs, levels) -> pd.DataFrame:
    n, horizon = qs.shape[:2]
    table = pd.DataFrame(
        {
            "item": np.repeat(panel.items.to_numpy(), horizon),
            "step": np.tile(np.arange(1, horizon + 1), n),
            "period": np.tile(np.asarray(periods), n),
        }
    )
    if isinstance(periods, pd.PeriodIndex):
        table["period"] = pd.PeriodIndex(table["period"], freq=periods.freq)
    for k, level in enumerate(levels):
        table[quantile_column(level)] = qs[:, :, k].reshape(-1)
    return table


def _audit_table(classes, rules, method_col, param_text, cost_col, dist_col, fallback, cost, panel):
    audit = pd.DataFrame(
        {
            "item": classes.index,
            "pattern": classes["pattern"].to_numpy(),
            "adi": classes["adi"].to_numpy(),
            "cv2": classes["cv2"].to_numpy(),
            "n_demands": classes["n_demands"].to_numpy(),
            "method": method_col,
            "parameters": param_text,
            "in_sample_cost": cost_col,
            "cost_measure": cost,
            "distribution": dist_col,
            "rule": [r.source for r in rules],
        }
    )
    reasons, warnings = [], []
    unavailable = classes["unavailable_periods"].to_numpy()
    patterns = classes["pattern"].to_numpy()
    class_reasons = classes["reason"].to_numpy()
    for i, rule in enumerate(rules):
        pattern = patterns[i]
        reasons.append(f"{class_reasons[i]}; {_method_reason(rule, pattern, cost)}")
        notes = []
        if unavailable[i] > 0:
            notes.append(f"{int(unavailable[i])} out-of-stock periods left out")
        if pattern == "too-short":
            notes.append("short history")
        if pattern == "gone-quiet":
            notes.append("no recent demand: check for obsolescence")
        if fallback[i]:
            notes.append(f"{rule.method} could not be fitted: fell back to mean since first demand")
        warnings.append("; ".join(notes))
    audit["reason"] = reasons
    audit["warnings"] = warnings
    return audit


# -------------------------------------------------------------- selection


def _select_by_holdout(panel, classes, policy, candidates, holdout, cost, classify_options):
    """Per pattern, the candidate with the lowest mean RMSSE on the last ``holdout`` periods."""
    from .classify import PATTERNS
    from .metrics import rmsse

    for name in candidates:
        if name not in _methods.METHODS:
            raise InputError(f"--candidates: unknown method {name!r}")
    cut = panel.n_periods - holdout
    if cut < 2:
        raise InputError(f"--holdout {holdout} leaves fewer than 2 periods to fit on")
    train = panel.head(cut)
    actual = panel.values[:, cut:]
    actual_ok = None if panel.available is None else panel.available[:, cut:]
    train_ok = None if train.available is None else train.available
    new_policy = dict(policy)
    records = []
    patterns = classes["pattern"].to_numpy()
    for pattern in PATTERNS:
        rows = np.flatnonzero(patterns == pattern)
        if rows.size == 0:
            continue
        scores = {}
        for name in candidates:
            options = _routed_options(Rule(name), cost)
            fitted = _methods.fit(name, train.values[rows], train.start[rows],
                                  None if train_ok is None else train_ok[rows], horizon=holdout, **options)
            s = rmsse(train.values[rows], actual[rows], fitted.mean,
                      available=None if actual_ok is None else actual_ok[rows],
                      insample_available=None if train_ok is None else train_ok[rows])
            s = np.asarray(s, dtype=float)
            scores[name] = float(np.nanmean(s)) if np.isfinite(s).any() else np.inf
        best = min(scores, key=scores.get)
        for name, score in scores.items():
            records.append({"pattern": pattern, "method": name, "mean_rmsse": score,
                            "items": int(rows.size), "chosen": name == best})
        new_policy[pattern] = Rule(best, {}, source=f"holdout selection ({holdout} periods, "
                                                    f"mean RMSSE {scores[best]:.3f})")
    return new_policy, pd.DataFrame(records)

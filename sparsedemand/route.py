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
rate-change    TSB                  Teunter, Syntetos & Babai (2011): TSB updates
                                    the demand probability every period, so it
                                    follows a change in how often demand comes;
                                    SBA only learns at the next demand.
gone-quiet     TSB, beta = 0.1      Teunter, Syntetos & Babai (2011, EJOR 214:606-615):
                                    the demand probability decays while demand is
                                    absent, so the forecast follows obsolescence.
                                    The probability constant is fixed: fitted to a
                                    history whose demand has since stopped, it comes
                                    out so small that the forecast hardly decays.
too-short      mean since first     too few demands to fit smoothing constants.
never-sold     zero forecast        nothing to forecast.
=============  ===================  ==================================================

``rate-change`` is a routing status of the router's own: an erratic,
intermittent or lumpy item whose demand frequency over the last third of its
history (at least 8 available periods) differs from the frequency before, by
Fisher's exact test of the two counts (two-sided, level
:data:`CHANGE_LEVEL`; see :func:`rate_change`). The methods that assume a
steady demand rate (SBA) are kept for the items that show none.

Smoothing constants are optimised per item unless fixed (Kourentzes 2014,
IJPE 156:180-190, compares the in-sample costs used). For Croston's method,
SBA, SBJ and TSB the search stays within 0.01 to 0.2
(:data:`INTERMITTENT_BOUNDS`), the range the intermittent-demand comparisons
above study (from memory: 0.05 to 0.2 in Syntetos & Boylan 2005); wider
constants fitted to a few noisy demands overreact to the last demand. Other
methods keep their own bounds.

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

Quantiles come from each method's predictive distribution; where a method has
none (the means), from the bootstrap of Willemain, Smart & Schwarz (2004),
seeded per item label so that an item's quantiles do not depend on the other
items it is fitted with.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
from io import StringIO
import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping

import numpy as np
import pandas as pd
from numba import njit

from . import methods as _methods
from .classify import classify as _classify
from .errors import InputError
from .io import _first_line
from .methods.distributions import demand_pmfs, ragged_quantiles
from .panel import DemandPanel, as_panel

__all__ = [
    "DEFAULT_POLICY",
    "INTERMITTENT_BOUNDS",
    "CHANGE_LEVEL",
    "ROUTING_STATUSES",
    "DEFAULT_LEVELS",
    "DEFAULT_CANDIDATES",
    "Rule",
    "ForecastResult",
    "load_policy",
    "load_overrides",
    "assign_methods",
    "forecast",
    "quantile_column",
    "rate_change",
]

DEFAULT_LEVELS = (0.5, 0.8, 0.9, 0.95)
DEFAULT_CANDIDATES = ("ses", "croston", "sba", "sbj", "tsb", "adida", "imapa", "mean_since_first")

#: Search range of optimised smoothing constants for the Croston family and TSB.
INTERMITTENT_BOUNDS = (0.01, 0.2)
_NARROW = frozenset({"croston", "sba", "sbj", "tsb"})

#: Significance level of the test for a change in demand frequency.
CHANGE_LEVEL = 0.01
#: Routing statuses of the router's own, beside the classifier's patterns and statuses.
ROUTING_STATUSES: tuple[str, ...] = ("rate-change",)
# patterns whose default method assumes a steady demand rate
_STEADY = ("erratic", "intermittent", "lumpy")

_GROUNDS = {
    "ses": "SES suits steady demand (Syntetos, Boylan & Croston 2005)",
    "sba": "SBA corrects Croston's bias on intermittent demand (Syntetos & Boylan 2005)",
    "tsb": "TSB updates the demand probability every period, so it follows demand that changes or stops "
           "(Teunter, Syntetos & Babai 2011)",
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
    "rate-change": Rule("tsb"),
    "gone-quiet": Rule("tsb", {"beta": 0.1}),
    "too-short": Rule("mean_since_first"),
    "never-sold": Rule("zeros"),
}


def quantile_column(level: float) -> str:
    """Column name of a quantile level: 0.9 -> ``q90``, 0.975 -> ``q97.5``."""
    return "q" + f"{level * 100:.6g}"


# ------------------------------------------------------------ policy files

_PROBE = np.array([[0.0, 2.0, 0.0, 1.0, 0.0, 0.0, 3.0, 1.0]])


def _probe_fit(method: str, params: Mapping) -> None:
    """Fit ``method`` with ``params`` to a tiny series: the method's own checks judge the values."""
    options = dict(params)
    if "season_length" in _methods.method_options(method) and options.get("season_length") is None:
        options["season_length"] = 4  # supplied by the calendar at fit time
    _methods.fit(method, _PROBE, np.array([1]), None, horizon=1, **options)


def _check_rule(rule: Rule, where: str, key_where=None, checked: set | None = None) -> None:
    """Fail early, naming ``where``, if a method or its parameters are unknown or bad.

    ``key_where(key)`` names the place of one parameter (its line or column);
    each parameter is checked on its own first so the message points at it.
    Rules whose key is in ``checked`` passed before and are not probed again
    (a long override file repeats a few rules); passing ones are added.
    """
    if checked is not None and isinstance(rule.method, str) and rule.key() in checked:
        return
    if not isinstance(rule.method, str) or rule.method not in _methods.METHODS:
        known = ", ".join(_methods.METHODS)
        raise InputError(f"{where}: unknown method {rule.method!r} (known: {known})")
    allowed = _methods.method_options(rule.method)
    checks = [(key, {key: value}) for key, value in rule.params.items()] + [(None, rule.params)]
    for key, params in checks:
        place = where if key is None or key_where is None else key_where(key)
        if key is not None and key not in allowed:
            choices = ", ".join(allowed) if allowed else "none"
            raise InputError(f"{place}: unknown parameter {key!r} for method {rule.method} (parameters: {choices})")
        try:
            _probe_fit(rule.method, params)
        except InputError as exc:
            raise InputError(f"{place}: {exc}") from None
        except (TypeError, ValueError) as exc:
            raise InputError(f"{place}: bad parameters for {rule.method}: {_first_line(exc)}") from None
    if checked is not None:
        checked.add(rule.key())


def _read_text(path, what: str) -> str:
    name = str(path)
    try:
        return Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{name}: no such {what}") from None
    except IsADirectoryError:
        raise InputError(f"{name}: is a folder, not a {what}") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{name}: not UTF-8 text (byte {exc.start})") from None
    except OSError as exc:
        raise InputError(f"{name}: cannot read the {what} ({exc.strerror or exc})") from None


_TOML_POSITION = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")
_TOML_KEY = re.compile(r'^\s*"?([A-Za-z0-9_-]+)"?\s*=')


def _toml_lines(lines: list[str], pattern: str) -> tuple[int, dict[str, int]]:
    """Line of ``pattern``'s row and of each of its keys (1-based), for messages."""
    name = rf'"?{re.escape(pattern)}"?'
    header = re.compile(rf"^\s*\[\s*patterns\s*\.\s*{name}\s*\]")
    for n, line in enumerate(lines):
        if header.match(line):
            keys: dict[str, int] = {}
            for m in range(n + 1, len(lines)):
                if lines[m].lstrip().startswith("["):
                    break
                found = _TOML_KEY.match(lines[m])
                if found:
                    keys.setdefault(found.group(1), m + 1)
            return n + 1, keys
    # inline table (lumpy = { ... }) or dotted keys (patterns.lumpy.method = ...)
    other = re.compile(rf"^\s*(?:patterns\s*\.\s*)?{name}\s*[.=]")
    first, keys = 0, {}
    for n, line in enumerate(lines):
        if other.match(line):
            first = first or n + 1
            rest = line.split(pattern, 1)[1]
            for key in re.findall(r'"?([A-Za-z0-9_-]+)"?\s*=', rest):
                keys.setdefault(key, n + 1)
    return first or 1, keys


def _row_names() -> tuple[str, ...]:
    """Every name a policy row may have: the patterns, the statuses and the router's own."""
    from .classify import PATTERNS, STATUSES

    return (*PATTERNS, *STATUSES, *ROUTING_STATUSES)


def _section_line(lines: list[str], key: str) -> int:
    found = re.compile(rf'^\s*\[?\s*"?{re.escape(key)}"?\s*[\].=]')
    return next((n + 1 for n, line in enumerate(lines) if found.match(line)), 1)


def load_policy(path: str | os.PathLike, *, base: Mapping[str, Rule] | None = None) -> dict[str, Rule]:
    """Read a TOML policy file; its rows replace rows of ``base`` (the default table).

    Each row is a table ``[patterns.NAME]`` (NAME a pattern or status) with a
    ``method`` and any fixed parameters; a smoothing constant left out is
    optimised. Every error names the file and the line at fault.

    Examples
    --------
    >>> policy = load_policy("policy.toml")  # doctest: +SKIP
    >>> policy["lumpy"].method  # doctest: +SKIP
    'tsb'
    """
    name = str(path)
    text = _read_text(path, "policy file")
    lines = text.splitlines()
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = _first_line(exc)
        at = _TOML_POSITION.search(message)
        if at:
            raise InputError(f"{name}, line {at.group(1)}: not valid TOML: "
                             f"{message[:at.start()]} (column {at.group(2)})") from None
        raise InputError(f"{name}: not valid TOML: {message}") from None
    policy = dict(base if base is not None else DEFAULT_POLICY)
    for key in data:
        if key != "patterns":
            line = _section_line(lines, key)
            raise InputError(f"{name}, line {line}: unknown section {key!r} (expected [patterns.NAME])")
    rows = data.get("patterns", {})
    if not isinstance(rows, dict):
        line = _section_line(lines, "patterns")
        raise InputError(f"{name}, line {line}: 'patterns' must hold tables [patterns.NAME]")
    known = _row_names()
    for pattern, row in rows.items():
        line, key_lines = _toml_lines(lines, pattern)
        where = f"{name}, line {line}"
        if pattern not in known:
            raise InputError(f"{where}: unknown pattern {pattern!r} (known: {', '.join(known)})")
        if not isinstance(row, dict) or "method" not in row:
            raise InputError(f"{where}: [patterns.{pattern}] needs a method = \"...\" entry")
        method = row["method"]
        if not isinstance(method, str):
            where_method = f"{name}, line {key_lines.get('method', line)}"
            raise InputError(f"{where_method}: method must be a name in quotes, got {method!r}")
        params = {k: v for k, v in row.items() if k != "method"}
        rule = Rule(method.strip(), params, source=f"policy file {name}, line {line}")
        _check_rule(rule, f"{name}, line {key_lines.get('method', line)}",
                    lambda key: f"{name}, line {key_lines.get(key, line)}")
        policy[pattern] = rule
    return policy


def load_overrides(path: str | os.PathLike, *, item_column: str = "item") -> dict[str, Rule]:
    """Read a per-item override CSV: ``item``, ``method`` and parameter columns.

    A blank parameter cell means "optimise"; blank lines are skipped. Line
    numbers in messages are those of the file (the header is line 1). Whether
    every item exists is checked against the input by :func:`assign_methods`.

    Examples
    --------
    >>> rules = load_overrides("overrides.csv")  # doctest: +SKIP
    >>> rules["NOR-BLT0001"].method  # doctest: +SKIP
    'tsb'
    """
    name = str(path)
    records = _csv_records(_read_text(path, "override file"), name)
    if not records:
        raise InputError(f"{name}: the file is empty")
    _, header = records[0]
    header = [cell.strip() for cell in header]
    seen = set()
    for column in header:
        if column in seen:
            raise InputError(f"{name}, line {records[0][0]}: column {column!r} appears twice")
        seen.add(column)
    for column in (item_column, "method"):
        if column not in header:
            found = ", ".join(header)
            raise InputError(f"{name}: missing column {column!r} (columns found: {found})")
    params_cols = [c for c in header if c not in (item_column, "method")]
    rules: dict[str, Rule] = {}
    lines: dict[str, int] = {}
    checked: set = set()
    for line, cells in records[1:]:
        where = f"{name}, line {line}"
        if len(cells) != len(header):
            raise InputError(f"{where}: {len(cells)} cells where the header has {len(header)}")
        rec = {column: cell.strip() for column, cell in zip(header, cells)}
        item = rec[item_column]
        if not item:
            raise InputError(f"{where}: empty {item_column}")
        if item in rules:
            raise InputError(f"{where}: item {item!r} is overridden twice (first on line {lines[item]})")
        params = {}
        for col in params_cols:
            if rec[col]:
                params[col] = _parse_value(rec[col], f"{where}, column {col!r}")
        rule = Rule(rec["method"], params, source=f"override file {name}, line {line}")
        _check_rule(rule, f"{where}, column 'method'", lambda key: f"{where}, column {key!r}", checked)
        rules[item] = rule
        lines[item] = line
    return rules


def _csv_records(text: str, name: str) -> list[tuple[int, list[str]]]:
    """Non-blank CSV records with the file line each starts on."""
    reader = csv.reader(StringIO(text, newline=""), strict=True)
    records = []
    line = 1
    try:
        for cells in reader:
            if any(cell.strip() for cell in cells):
                records.append((line, cells))
            line = reader.line_num + 1
    except csv.Error as exc:
        raise InputError(f"{name}, line {reader.line_num}: cannot read the CSV ({_first_line(exc)})") from None
    return records


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


def _caller_rules(rules: Mapping, what: str, label) -> dict:
    """Check rules given from Python; name their origin in the audit trail."""
    out = {}
    checked: set = set()
    for key, rule in rules.items():
        where = f"{what} {label(key)}"
        if not isinstance(rule, Rule):
            raise InputError(f"{where}: expected a Rule(method, params), got {type(rule).__name__}")
        _check_rule(rule, where, checked=checked)
        if rule.source == "default policy" and not (what == "policy row" and DEFAULT_POLICY.get(key) == rule):
            rule = dataclasses.replace(rule, source=f"{where} given by the caller")
        out[key] = rule
    return out


def _resolve_policy(policy) -> dict[str, Rule]:
    """The full routing table: the defaults with the given rows (a mapping or a TOML file) over them."""
    if policy is None:
        return dict(DEFAULT_POLICY)
    if isinstance(policy, (str, os.PathLike)):
        return load_policy(policy)
    if not isinstance(policy, Mapping):
        raise InputError(f"policy must be a mapping of pattern to Rule or a TOML file, got {type(policy).__name__}")
    known = _row_names()
    for pattern in policy:
        if pattern not in known:
            raise InputError(f"policy: unknown pattern {pattern!r} (known: {', '.join(known)})")
    return {**DEFAULT_POLICY, **_caller_rules(policy, "policy row", repr)}


def _resolve_overrides(overrides) -> dict:
    if overrides is None:
        return {}
    if isinstance(overrides, (str, os.PathLike)):
        return load_overrides(overrides)
    if not isinstance(overrides, Mapping):
        raise InputError(f"overrides must be a mapping of item to Rule or a CSV file, got {type(overrides).__name__}")
    return _caller_rules(overrides, "override for item", repr)


# ---------------------------------------------------------------- routing


def assign_methods(
    classes: pd.DataFrame,
    *,
    policy: Mapping[str, Rule] | None = None,
    overrides: Mapping[str, Rule] | None = None,
    changed: np.ndarray | None = None,
) -> list[Rule]:
    """The rule for every item (overrides first, then the policy row of its pattern).

    Override keys match item labels, or their text (an override file reads
    every label as text). An override for an item not in ``classes`` is an
    error naming where the override came from. ``changed`` (one flag per
    item, see :func:`rate_change`) sends flagged erratic, intermittent and
    lumpy items to the ``rate-change`` row.

    Examples
    --------
    >>> from sparsedemand.classify import classify
    >>> table = classify(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]]))
    >>> [r.method for r in assign_methods(table, overrides={"0": Rule("zeros")})]
    ['zeros']
    """
    policy = DEFAULT_POLICY if policy is None else policy
    index = classes.index
    text_pos: dict[str, int] = {}
    for pos, label in enumerate(index):
        text_pos.setdefault(str(label), pos)
    by_pos: dict[int, Rule] = {}
    for key, rule in (overrides or {}).items():
        pos = index.get_loc(key) if _hashable_in(key, index) else text_pos.get(str(key), -1)
        if not isinstance(pos, (int, np.integer)) or pos < 0:
            origin = rule.source if rule.source.startswith("override file") else "overrides"
            raise InputError(f"{origin}: unknown item {key!r} (not in the input)")
        if int(pos) in by_pos:
            raise InputError(f"overrides: item {index[pos]!r} is overridden twice")
        by_pos[int(pos)] = rule
    rules = []
    keys = routing_keys(classes, changed)
    for pos, (key, pattern) in enumerate(zip(keys, classes["pattern"])):
        rule = by_pos.get(pos)
        if rule is None:
            # a table without a rate-change row keeps such items on their pattern's row
            rule = policy.get(key) or policy.get(pattern)
            if rule is None:
                raise InputError(f"the routing policy has no row for pattern {pattern!r}")
        rules.append(rule)
    return rules


def routing_keys(classes: pd.DataFrame, changed: np.ndarray | None = None) -> np.ndarray:
    """The policy row of every item: its pattern, or ``rate-change`` where flagged."""
    keys = classes["pattern"].to_numpy(dtype=object).copy()
    if changed is not None:
        changed = np.asarray(changed, dtype=bool)
        if changed.shape != keys.shape:
            raise InputError(f"changed: one flag per item expected ({keys.size}), got shape {changed.shape}")
        keys[changed & np.isin(keys, _STEADY)] = "rate-change"
    return keys


def rate_change(panel, classes: pd.DataFrame, *, level: float = CHANGE_LEVEL) -> pd.DataFrame:
    """Test each item for a change in demand frequency between its recent and earlier history.

    The recent window is the last third of the item's trimmed, available
    history (at least 8 available periods, leaving at least 8 before it).
    Given the item's demands, the number falling in the window is
    hypergeometric if the frequency did not change; the two-sided p-value of
    Fisher's exact test (Fisher 1935, The Design of Experiments) is twice the
    smaller tail, capped at 1. Items too short to split get NaN and no flag.

    Parameters
    ----------
    panel : DemandPanel
        The history ``classes`` was computed from.
    classes : DataFrame
        :func:`sparsedemand.classify.classify` of ``panel``.
    level : float, default :data:`CHANGE_LEVEL`
        Flag items with a p-value below this.

    Returns
    -------
    pandas.DataFrame
        Indexed like ``classes``: ``recent_periods``, ``recent_demands``,
        ``earlier_periods``, ``earlier_demands``, ``p_value``, ``changed``.

    Examples
    --------
    >>> from sparsedemand.classify import classify
    >>> y = np.array([[2.0] * 24 + [0, 0, 0, 1, 0, 0, 0, 0, 0, 1, 0, 0],   # demand every period, then rarely
    ...               [2.0, 0] * 18])                                       # every other period throughout
    >>> table = rate_change(y, classify(y))
    >>> table[["recent_demands", "recent_periods", "changed"]].values.tolist()
    [[2, 12, True], [6, 12, False]]
    """
    if not (isinstance(level, (int, float)) and 0.0 < level < 1.0):
        raise InputError(f"change level must lie strictly between 0 and 1, got {level!r}")
    panel = as_panel(panel)
    total = classes["n_periods"].to_numpy(dtype=np.int64)
    demands = classes["n_demands"].to_numpy(dtype=np.int64)
    window = np.maximum(total // 3, _MIN_SPLIT)
    testable = total - window >= _MIN_SPLIT
    has_mask = panel.available is not None
    mask = panel.available if has_mask else np.ones((1, 1), dtype=np.bool_)
    n_recent, d_recent = _recent_counts(panel.values, mask, has_mask,
                                        np.ascontiguousarray(panel.start, dtype=np.int64),
                                        np.where(testable, window, 0).astype(np.int64))
    low, high = _hypergeom_tails(d_recent.astype(np.int64), total, demands, n_recent.astype(np.int64),
                                 testable)
    p = np.where(testable, np.minimum(1.0, 2.0 * np.minimum(low, high)), np.nan)
    return pd.DataFrame(
        {
            "recent_periods": np.where(testable, n_recent, 0),
            "recent_demands": np.where(testable, d_recent, 0),
            "earlier_periods": np.where(testable, total - n_recent, 0),
            "earlier_demands": np.where(testable, demands - d_recent, 0),
            "p_value": p,
            "changed": testable & (p < level),
        },
        index=classes.index,
    )


_MIN_SPLIT = 8


@njit(cache=True)
def _hypergeom_tails(x, population, successes, draws, use):
    """P(X <= x) and P(X >= x) for X ~ Hypergeometric(population, successes, draws), per item.

    Exact sums over the support: the terms are built outward from the mode by
    the ratio of neighbouring probabilities (so none underflows before it is
    negligible) and normalised by their total. Items with ``use`` False get NaN.
    """
    n_items = x.shape[0]
    low = np.full(n_items, np.nan)
    high = np.full(n_items, np.nan)
    for i in range(n_items):
        if not use[i]:
            continue
        big_n, k, n, xi = population[i], successes[i], draws[i], x[i]
        lo = max(0, n + k - big_n)
        hi = min(n, k)
        mode = min(hi, max(lo, ((n + 1) * (k + 1)) // (big_n + 2)))
        total = 1.0  # the mode's term, relative
        le = 1.0 if mode <= xi else 0.0
        ge = 1.0 if mode >= xi else 0.0
        term = 1.0
        for j in range(mode, lo, -1):  # term(j - 1) from term(j)
            term *= j * (big_n - k - n + j) / ((k - j + 1) * (n - j + 1))
            total += term
            if j - 1 <= xi:
                le += term
            if j - 1 >= xi:
                ge += term
        term = 1.0
        for j in range(mode, hi):  # term(j + 1) from term(j)
            term *= (k - j) * (n - j) / ((j + 1) * (big_n - k - n + j + 1))
            total += term
            if j + 1 <= xi:
                le += term
            if j + 1 >= xi:
                ge += term
        low[i] = min(1.0, le / total)
        high[i] = min(1.0, ge / total)
    return low, high


@njit(cache=True)
def _recent_counts(values, available, has_mask, start, window):
    """Available periods and demands among the last ``window[i]`` available periods of each item."""
    n_items, n_periods = values.shape
    n_recent = np.zeros(n_items, np.int64)
    d_recent = np.zeros(n_items, np.int64)
    for i in range(n_items):
        j = n_periods - 1
        while j >= start[i] and n_recent[i] < window[i]:
            if not has_mask or available[i, j]:
                n_recent[i] += 1
                if values[i, j] > 0.0:
                    d_recent[i] += 1
            j -= 1
    return n_recent, d_recent


def _hashable_in(key, index: pd.Index) -> bool:
    try:
        return key in index
    except (TypeError, ValueError):
        return False


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
        from .methods.forecasts import gather_forecasts

        return gather_forecasts([(rows, fitted) for rows, _, fitted in self.groups], self.panel.n_items)

    def table(self) -> pd.DataFrame:
        """The long forecast table written to ``forecasts.csv``."""
        long = self.quantiles.copy()
        means = self.point.to_numpy()
        long.insert(3, "forecast", means.reshape(-1))
        return long


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
    from .methods.forecasts import label_seeds

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


def _describe_params(params: Mapping[str, np.ndarray], i: int, fixed: Mapping) -> str:
    parts = []
    for key, arr in params.items():
        v = arr[i]
        if np.isfinite(v):
            tag = "" if key in fixed else " (optimised)" if key in _TUNED else " (fitted)"
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
    classes = _classify(panel, **dict(classify_options or {}))
    policy = _resolve_policy(policy)
    overrides = _resolve_overrides(overrides)
    changes = None if change_level is None else rate_change(panel, classes, level=change_level)
    changed = None if changes is None else changes["changed"].to_numpy()
    keys = routing_keys(classes, changed)
    selection_table = None
    if selection == "holdout":
        policy, selection_table = _select_by_holdout(
            panel, keys, policy, candidates, holdout or horizon, cost,
        )
    rules = assign_methods(classes, policy=policy, overrides=overrides, changed=changed)

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
    iterator = progress(work, label="forecasting") if progress else contextlib.nullcontext(work)
    with iterator as bar:
        for members in bar:
            rows = np.asarray(members)
            rule = rules[rows[0]]
            for part, fitted, fell_back in _fit_with_fallback(panel, rows, rule, horizon, cost):
                used = Rule("mean_since_first") if fell_back else rule
                fallback[part] = fell_back
                mean[part] = np.maximum(fitted.mean, 0.0)
                qs[part] = _quantiles_for(panel, part, fitted, levels, seed)
                method_col[part] = used.method
                param_text[part] = [_describe_params(fitted.params, j, used.params) for j in range(len(part))]
                dist_col[part] = fitted.distribution
                cost_col[part] = fitted.cost
                fitted_groups.append((part, used, fitted))

    periods = panel.future_periods(horizon)
    point = pd.DataFrame(mean, index=panel.items, columns=periods)
    quantiles = _quantile_table(panel, periods, qs, levels)
    audit = _audit_table(classes, keys, changes, rules, method_col, param_text, cost_col, dist_col, fallback,
                         cost)
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


def _check_forecast_options(horizon, levels, cost, selection, holdout, panel) -> tuple[float, ...]:
    """Validate the options; return the quantile levels as floats."""
    if isinstance(horizon, bool) or not isinstance(horizon, (int, np.integer)) or horizon < 1:
        raise InputError(f"--horizon must be a whole number of periods >= 1, got {horizon!r}")
    try:
        lv = tuple(float(q) for q in levels)
    except (TypeError, ValueError):
        raise InputError(f"--quantiles must be numbers strictly between 0 and 1, got {levels!r}") from None
    if not lv or any(not 0.0 < q < 1.0 for q in lv):
        raise InputError(f"--quantiles must lie strictly between 0 and 1, got {list(levels)}")
    names = [quantile_column(q) for q in lv]
    twice = [q for q, name in zip(lv, names) if names.count(name) > 1]
    if twice:
        raise InputError(f"--quantiles lists the level {twice[0]:g} twice")
    if cost not in ("mse", "mae", "mar", "msr"):
        raise InputError(f"--cost must be mse, mae, mar or msr, got {cost!r}")
    if selection not in ("policy", "holdout"):
        raise InputError(f"--selection must be policy or holdout, got {selection!r}")
    if holdout is not None and (isinstance(holdout, bool) or not isinstance(holdout, (int, np.integer))
                                or not 1 <= holdout < panel.n_periods):
        raise InputError(f"--holdout must be a whole number between 1 and {panel.n_periods - 1}, got {holdout!r}")
    if panel.n_periods < 2:
        raise InputError("the history needs at least 2 periods to forecast")
    return lv


def _quantile_table(panel, periods, qs, levels) -> pd.DataFrame:
    n, horizon = qs.shape[:2]
    table = pd.DataFrame(
        {
            "item": panel.items.repeat(horizon),  # keeps the labels' dtype: no object per row
            "step": np.tile(np.arange(1, horizon + 1), n),
            # positions, not Period objects: taking from the index keeps its dtype without
            # parsing one object per row
            "period": periods[np.tile(np.arange(horizon), n)],
        }
    )
    for k, level in enumerate(levels):
        table[quantile_column(level)] = qs[:, :, k].reshape(-1)
    return table


def _audit_table(classes, keys, changes, rules, method_col, param_text, cost_col, dist_col, fallback, cost):
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
            "rate_change_p": np.nan if changes is None else changes["p_value"].to_numpy(),
        }
    )
    reasons, warnings = [], []
    unavailable = classes["unavailable_periods"].to_numpy()
    patterns = classes["pattern"].to_numpy()
    class_reasons = classes["reason"].to_numpy()
    for i, rule in enumerate(rules):
        pattern = patterns[i]
        why = class_reasons[i]
        if keys[i] == "rate-change":
            c = changes.iloc[i]
            why += (f"; demand in {c.recent_demands} of the last {c.recent_periods} available periods against "
                    f"{c.earlier_demands} of {c.earlier_periods} before (Fisher's exact test p = "
                    f"{c.p_value:.2g}): rate-change")
        reasons.append(f"{why}; {_method_reason(rule, keys[i], cost)}")
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


def _select_by_holdout(panel, keys, policy, candidates, holdout, cost):
    """Per pattern (and ``rate-change``), the candidate with the lowest mean RMSSE on the last ``holdout`` periods.

    Every candidate is fitted to the history before the holdout (its
    smoothing constants optimised as the router does); a failed fit falls
    back to the mean since first demand, as the router's does. Items whose
    RMSSE is undefined (no demand before the holdout, or a zero scale) are
    left out of the mean; ``scored_items`` counts the rest.
    """
    from .classify import PATTERNS
    from .metrics import rmsse

    candidates = tuple(candidates)
    if not candidates:
        raise InputError("--candidates: give at least one method")
    for name in candidates:
        if name not in _methods.METHODS:
            raise InputError(f"--candidates: unknown method {name!r} (known: {', '.join(_methods.METHODS)})")
    cut = panel.n_periods - holdout
    if cut < 2:
        raise InputError(f"--holdout {holdout} leaves fewer than 2 periods to fit on "
                         f"(the history has {panel.n_periods})")
    train = panel.head(cut)
    actual = panel.values[:, cut:]
    actual_ok = None if panel.available is None else panel.available[:, cut:]
    new_policy = dict(policy)
    records = []
    for pattern in (*PATTERNS, *ROUTING_STATUSES):
        rows = np.flatnonzero(keys == pattern)
        if rows.size == 0:
            continue
        scores = {}
        for name in candidates:
            mean = np.zeros((rows.size, holdout))
            for part, fitted, _ in _fit_with_fallback(train, rows, Rule(name), holdout, cost):
                mean[np.searchsorted(rows, part)] = np.maximum(fitted.mean, 0.0)
            s = np.asarray(rmsse(train.values[rows], actual[rows], mean,
                                 available=None if actual_ok is None else actual_ok[rows],
                                 insample_available=None if train.available is None else train.available[rows]),
                           dtype=float)
            ok = np.isfinite(s)
            scores[name] = (float(s[ok].mean()) if ok.any() else np.inf, int(ok.sum()))
        best = min(scores, key=lambda name: scores[name][0])
        for name, (score, scored) in scores.items():
            records.append({"pattern": pattern, "method": name, "mean_rmsse": score, "items": int(rows.size),
                            "scored_items": scored, "chosen": name == best})
        new_policy[pattern] = Rule(best, {}, source=f"holdout selection ({holdout} periods, "
                                                    f"mean RMSSE {scores[best][0]:.3f})")
    columns = ["pattern", "method", "mean_rmsse", "items", "scored_items", "chosen"]
    return new_policy, pd.DataFrame(records, columns=columns)

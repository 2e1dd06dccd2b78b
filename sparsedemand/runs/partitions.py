"""The steps of a run split by item that need more than one partition's items.

A partitioned run (the Dask engine) calls the whole commands of
:mod:`sparsedemand.runs.commands` on each partition; what mixes items is
done here from the partitions' small results: the holdout selection's sums
and counts, the routing counts, the stock totals and the backtest scores
that are means or totals over items.

Examples
--------
>>> a = pd.DataFrame({"method": ["sba"], "pattern": ["all"], "level": ["item"], "metric": ["mase"],
...                   "value": [1.0], "count": [1.0]})
>>> combine_backtest_scores([a, a.assign(value=[4.0], count=[2.0])])[0]["value"].tolist()
[3.0]
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ..classify import PATTERNS, STATUSES, classify
from ..evaluate import metric_names
from ..panel import DemandPanel
from ..route import (DEFAULT_LEVELS, ROUTING_STATUSES, Rule, _check_forecast_options, _resolve_policy,
                     _select_by_holdout, rate_change, routing_keys)
from .settings import ForecastSettings

__all__ = ["SELECTION_COLUMNS", "check_forecast", "base_policy", "holdout_scores", "choose_by_holdout",
           "routing_counts", "add_routing_counts", "add_stock_totals", "combine_backtest_scores"]

SELECTION_COLUMNS = ["pattern", "method", "mean_rmsse", "items", "scored_items", "chosen"]


def check_forecast(settings: ForecastSettings, horizon: int, calendar: DemandPanel) -> None:
    """The router's own checks of the options, against the calendar every partition shares."""
    _check_forecast_options(horizon, settings.levels, settings.cost, settings.selection, settings.holdout,
                            calendar)


def base_policy(settings: ForecastSettings) -> dict:
    """The routing table the router starts from (the policy's rows over the default table)."""
    return _resolve_policy(settings.policy)


def holdout_scores(panel: DemandPanel | None, settings: ForecastSettings, policy: Mapping[str, Rule],
                   holdout: int) -> pd.DataFrame:
    """The router's holdout scores on one partition's items (one row per policy row and candidate).

    The items' policy rows are found as the router finds them; ``mean_rmsse``
    times ``scored_items`` is the partition's sum, which
    :func:`choose_by_holdout` adds up before any method is chosen.
    """
    if panel is None or panel.n_items == 0:
        return pd.DataFrame(columns=SELECTION_COLUMNS)
    classes = classify(panel, **settings.classify.options())
    change = settings.change_level
    changes = None if change is None else rate_change(panel, classes, level=change)
    keys = routing_keys(classes, None if changes is None else changes["changed"].to_numpy())
    return _select_by_holdout(panel, keys, policy, settings.candidates, holdout, settings.cost)[1]


def choose_by_holdout(parts: list[pd.DataFrame], policy: Mapping[str, Rule], candidates: tuple, holdout: int):
    """Per pattern, the candidate with the lowest mean RMSSE over every partition's items (first on ties).

    The same choice, audit text and score table as the router's holdout
    selection on one panel; the means differ from it by float round-off only.
    Returns the new policy and the score table.
    """
    table = pd.concat([p for p in parts if len(p)], ignore_index=True)
    scored = table["scored_items"].to_numpy(dtype=np.float64)
    table["sum"] = np.where(scored > 0, table["mean_rmsse"].to_numpy(dtype=np.float64) * scored, 0.0)
    totals = table.groupby(["pattern", "method"], sort=False)[["sum", "scored_items", "items"]].sum()
    new_policy = dict(policy)
    records = []
    for pattern in (*PATTERNS, *ROUTING_STATUSES):
        if pattern not in totals.index.get_level_values(0):
            continue
        scores = {}
        for name in candidates:
            row = totals.loc[(pattern, name)]
            n = int(row["scored_items"])
            scores[name] = (float(row["sum"] / n) if n > 0 else np.inf, n)
        items = int(totals.loc[(pattern, candidates[0]), "items"])
        best = min(scores, key=lambda name: scores[name][0])
        for name, (score, n) in scores.items():
            records.append({"pattern": pattern, "method": name, "mean_rmsse": score, "items": items,
                            "scored_items": n, "chosen": name == best})
        new_policy[pattern] = Rule(best, {}, source=f"holdout selection ({holdout} periods, "
                                                    f"mean RMSSE {scores[best][0]:.3f})")
    return new_policy, pd.DataFrame(records, columns=SELECTION_COLUMNS)


def routing_counts(audit: pd.DataFrame) -> pd.DataFrame:
    """Items per pattern and method and how many carry warnings, in one partition."""
    counts = pd.DataFrame({"pattern": audit["pattern"], "method": audit["method"], "items": 1,
                           "with_warnings": audit["warnings"].astype(bool).astype(np.int64)})
    return counts.groupby(["pattern", "method"], sort=False, as_index=False).sum()


def add_routing_counts(parts: list[pd.DataFrame]) -> pd.DataFrame:
    """:func:`routing_counts` of partitions added up."""
    return pd.concat(parts, ignore_index=True).groupby(["pattern", "method"], as_index=False).sum()


def add_stock_totals(parts: list[pd.DataFrame]) -> pd.DataFrame:
    """Stock totals of partitions added up (values only over priced items, as in stock_totals)."""
    total = parts[0].copy()
    for p in parts[1:]:
        total = total.add(p, fill_value=0.0)
    priced = sum(p.attrs.get("priced_items", 0) for p in parts)
    if not priced:
        total.loc["value"] = np.nan
    total.attrs.update({"items": sum(p.attrs.get("items", 0) for p in parts), "priced_items": priced})
    return total


def combine_backtest_scores(parts: Sequence[pd.DataFrame], *, levels: Sequence[float] = DEFAULT_LEVELS):
    """Backtest score tables of disjoint sets of items combined into the table of all items.

    Every per-item metric of :func:`sparsedemand.evaluate.metric_names` is a
    mean over (item, origin) pairs with a ``count``: its combined value is
    ``sum(value * count) / sum(count)`` (``excluded_periods``, a total, is
    summed). Metrics that mix items in other ways cannot be rebuilt from the
    partitions' tables and are left out: ``rel_mae_gmean`` (its weights, the
    scored periods, are not in the table), the volume- or value-weighted
    MASE/RMSSE (each partition normalises its own weights) and
    ``weighted_rmsse`` (it scores sums of items over locations and
    categories).

    Parameters
    ----------
    parts : sequence of DataFrame
        ``BacktestResult.scores`` of each partition.
    levels : sequence of float
        The quantile levels of the backtest (to name the metrics).

    Returns
    -------
    scores : DataFrame
        Columns ``method, pattern, level, metric, value, count``.
    left_out : tuple of str
        The metrics that were not combined.

    Examples
    --------
    >>> a = pd.DataFrame({"method": ["sba"], "pattern": ["all"], "level": ["item"], "metric": ["mase"],
    ...                   "value": [1.0], "count": [1.0]})
    >>> b = a.assign(value=[4.0], count=[2.0])
    >>> combine_backtest_scores([a, b])[0]["value"].tolist()
    [3.0]
    """
    names = metric_names(levels)
    table = pd.concat(list(parts), ignore_index=True)
    additive = table["metric"].isin(names) & (table["level"] == "item")
    left_out = tuple(dict.fromkeys(table.loc[~additive, "metric"]))
    table = table[additive].copy()
    total = table["metric"] == "excluded_periods"
    table["weighted"] = np.where(total, table["value"], table["value"] * table["count"])
    table.loc[table["count"] == 0, "weighted"] = 0.0
    keys = ["method", "pattern", "level", "metric"]
    out = table.groupby(keys, sort=False, as_index=False)[["weighted", "count"]].sum()
    mean = out["weighted"] / out["count"].where(out["count"] > 0)
    out["value"] = np.where(out["metric"] == "excluded_periods", out["weighted"], mean)
    out = out[["method", "pattern", "level", "metric", "value", "count"]]
    order = {m: i for i, m in enumerate(dict.fromkeys(table["method"]))}
    pattern_order = {p: i for i, p in enumerate([*PATTERNS, *STATUSES, "all"])}
    metric_order = {m: i for i, m in enumerate(names)}
    out = out.sort_values(["method", "pattern", "metric"], key=lambda s: s.map(
        {"method": order, "pattern": pattern_order, "metric": metric_order}[s.name]), kind="stable")
    return out.reset_index(drop=True), left_out

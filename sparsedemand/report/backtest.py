"""The backtest section: the router against the baselines, metrics per method and pattern.

Examples
--------
>>> html = _backtest_section(ctx)  # doctest: +SKIP
"""

from __future__ import annotations

import re
from html import escape

import numpy as np
import pandas as pd

from ..evaluate import BASELINES, ROUTER
from .charts import (_QUANTILE_METRIC, _embed, _figure, _grouped_bars, _method_colours, _method_order,
                     _metric_charts, _quantile_chart, _router_chart, _service_chart, _style)
from .context import _Context
from .tables import _missing, _note, _table

# direction of a metric when judging the router against the baselines
_LOWER_BETTER = {"mase", "rmsse", "mae", "mse", "rmse", "rel_mae_gmean", "weighted_rmsse",
                 "stockout_periods", "crps"}
_HIGHER_BETTER = {"fill_rate", "cycle_service_level"}
_NEAR_ZERO_BETTER = {"scaled_bias", "pis"}
_HEADLINE = ("rmsse", "mase", "mae", "rel_mae_gmean", "weighted_rmsse", "scaled_bias")
_LEVEL_ORDER = ("item", "location", "category", "total")


_MAX_METRIC_CHARTS = 16


def _metric_level(scores: pd.DataFrame, metric: str) -> str:
    levels = list(dict.fromkeys(scores.loc[scores["metric"] == metric, "level"]))
    if "all" in levels:  # the score combined over levels (weighted RMSSE) is the headline
        return "all"
    for level in _LEVEL_ORDER:
        if level in levels:
            return level
    return levels[0]


def _backtest_section(ctx: _Context) -> str:
    out = ['<section id="backtest"><h2>Backtest</h2>']
    scores = ctx.run.get("scores")
    if scores is None or scores.empty:
        out.append(_missing("scores") + "</section>")
        return "".join(out)
    s = scores.copy()
    s["pattern"] = s["pattern"].astype(str) if "pattern" in s else "all"
    s["level"] = s["level"].astype(str) if "level" in s else "item"
    s["method"] = s["method"].astype(str)
    s["metric"] = s["metric"].astype(str)
    s["value"] = pd.to_numeric(s["value"], errors="coerce")
    s = s.drop_duplicates(["method", "pattern", "level", "metric"])
    colours = _method_colours(_method_order(s["method"]))
    # each metric at its finest level
    chosen = pd.Series({m: _metric_level(s, m) for m in dict.fromkeys(s["metric"])})
    at_level = s[s["level"].to_numpy() == chosen.reindex(s["metric"]).to_numpy()]
    overall = at_level[at_level["pattern"] == "all"]
    if overall.empty:
        overall = at_level
    out.append(_note(
        "Each method forecast the same held-back history it had not seen. Scaled errors (MASE, RMSSE) "
        "divide by the item's own naive one-step error from its first demand on, so items of any size "
        "compare; out-of-stock periods are left out of every score. <b>router</b> is the method chosen "
        "per item by the routing policy."))
    out.append(_router_section(overall, colours))

    family = s["metric"].str.extract(_QUANTILE_METRIC)["family"]
    plain = [m for m in dict.fromkeys(at_level["metric"]) if not isinstance(family[s["metric"] == m].iloc[0], str)]
    families = [f for f in dict.fromkeys(family.dropna())]
    for fam in families:
        part = at_level[at_level["metric"].str.match(rf"^{re.escape(fam)}_q\d")]
        title = {"coverage": "Coverage of each quantile level",
                 "spl": "Scaled pinball loss per quantile level"}.get(fam, f"{fam} per quantile level")
        out.append(f"<h3>{escape(title)}</h3>")
        if fam == "coverage":
            out.append(_note("Share of held-back periods whose demand was at or below the forecast quantile; "
                             "a calibrated forecast of level 90% covers about 90% (the dashed line)."))
        out.append(_quantile_chart(part, fam, colours))

    service = overall[overall["metric"].isin(["fill_rate", "avg_on_hand"])].dropna(subset=["value"])
    if service.groupby("method")["metric"].nunique().eq(2).any():
        out.append("<h3>Inventory simulation: fill rate against stock on hand</h3>")
        out.append(_note("Each method's quantile forecasts drove the same order-up-to policy over the held-back "
                         "periods; up and to the left is better (more demand served from less stock)."))
        out.append(_service_chart(overall, colours))

    out.append("<h3>Each metric per method and pattern</h3>")
    if plain:
        out.append(_metric_charts(at_level, plain[:_MAX_METRIC_CHARTS], chosen, colours))
    if len(plain) > _MAX_METRIC_CHARTS:
        out.append(_note(f"{len(plain) - _MAX_METRIC_CHARTS} further metrics are in the table below."))
    out.append(_levels_chart(s, colours))
    wide = s[s["pattern"] == "all"].pivot_table(index=["metric", "level"], columns="method", values="value",
                                                aggfunc="first")
    wide = wide.reindex(columns=_method_order(wide.columns)).reset_index()
    out.append("<details><summary>All scores over all patterns (table)</summary>" + _table(wide) + "</details>")
    out.append("</section>")
    return "".join(out)


def _levels_chart(s: pd.DataFrame, colours) -> str:
    """The headline metric at every aggregation level, when there are several."""
    for metric in _HEADLINE:
        part = s[(s["metric"] == metric) & (s["pattern"] == "all")]
        if part["level"].nunique() > 1:
            table = part.pivot_table(index="level", columns="method", values="value", aggfunc="first")
            order = [lv for lv in _LEVEL_ORDER if lv in table.index] + [lv for lv in table.index
                                                                         if lv not in _LEVEL_ORDER]
            table = table.reindex(index=order, columns=_method_order(table.columns))
            fig = _figure(9.5, 2.9, right=1.9, bottom=0.4)
            ax = fig.add_subplot()
            _grouped_bars(ax, table, colours)
            ax.set_title(f"{metric} with demand added up to each level", fontsize=10, loc="left")
            ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.02))
            _style(ax)
            return "<h3>Across aggregation levels</h3>" + _embed(fig, f"Backtest {metric} per level")
    return ""


def _router_section(overall: pd.DataFrame, colours) -> str:
    out = ["<h3>The router against the baselines</h3>"]
    methods = set(overall["method"])
    baselines = [b for b in BASELINES if b in methods]
    if ROUTER not in methods or not baselines:
        what = "router" if ROUTER not in methods else "naive baseline"
        return out[0] + _note(f"The backtest scores have no {what} rows, so there is nothing to compare.")
    rows = []
    for metric in dict.fromkeys(overall["metric"]):
        vals = overall[overall["metric"] == metric].set_index("method")["value"]
        if ROUTER not in vals or not np.isfinite(vals[ROUTER]):
            continue
        base = vals.reindex(baselines).dropna()
        if base.empty:
            continue
        if metric in _LOWER_BETTER or metric.startswith("spl_"):
            best, judge = base.idxmin(), "lower is better"
            wins = vals[ROUTER] < base.min()
        elif metric in _HIGHER_BETTER:
            best, judge = base.idxmax(), "higher is better"
            wins = vals[ROUTER] > base.max()
        elif _QUANTILE_METRIC.match(metric) and metric.startswith("coverage_"):
            target = float(_QUANTILE_METRIC.match(metric)["level"]) / 100
            best, judge = (base - target).abs().idxmin(), f"nearer {target:.0%} is better"
            wins = abs(vals[ROUTER] - target) < abs(base[best] - target)
        elif metric in _NEAR_ZERO_BETTER:
            best, judge = base.abs().idxmin(), "nearer 0 is better"
            wins = abs(vals[ROUTER]) < abs(base[best])
        else:
            rows.append((metric, vals[ROUTER], "", np.nan, "not judged", ""))
            continue
        rows.append((metric, vals[ROUTER], best, base[best], judge, "yes" if wins else "no"))
    table = pd.DataFrame(rows, columns=["metric", "router", "best baseline", "its value", "direction",
                                        "router better"])
    judged = table[table["router better"] != ""]
    if len(judged):
        out.append(_note(f"Over all items the router beats the best naive baseline on "
                         f"<b>{int((judged['router better'] == 'yes').sum())} of {len(judged)}</b> judged metrics."))
    headline = [m for m in _HEADLINE if m in set(table["metric"]) and m != "scaled_bias"][:4]
    if headline:
        part = overall[overall["metric"].isin(headline) & overall["method"].isin([ROUTER, *baselines])]
        out.append(_router_chart(part, headline, colours))
    out.append(_table(table))
    return "".join(out)

"""The item pages (facts, history and forecast chart, scores) and the audit table.

Examples
--------
>>> html = _items_section(ctx)  # doctest: +SKIP
"""

from __future__ import annotations

import re
from html import escape

import numpy as np
import pandas as pd
from matplotlib.ticker import FuncFormatter

from .charts import _embed, _method_order
from .context import _Context, _attributes, _indexed
from .level import _fitted_level
from .tables import _missing, _note, _num, _share, _table, _warning_mask

_QUANTILE_COLUMN = re.compile(r"^q(?P<level>\d+(?:\.\d+)?)$")


def _choose_pages(ctx: _Context) -> tuple[list[str], list[str], str]:
    """Items that get a page, flagged items left without one, and what 'value' means."""
    run = ctx.run
    audit = run.get("audit")
    if ctx.volume is not None:
        value = ctx.volume
        meaning = "units sold"
        if ctx.price is not None and ctx.price.notna().any():
            value = ctx.volume * ctx.price.reindex(ctx.volume.index)
            meaning = "demand value (units sold x unit price)"
    else:
        candidates = audit if audit is not None else run.get("forecasts")
        value = pd.Series(0.0, index=pd.Index(candidates["item"].unique()) if candidates is not None else [])
        meaning = "no volume known"
    value = value.fillna(0.0)
    top = value[value > 0].sort_values(ascending=False, kind="stable").index[: ctx.top_items].tolist()
    flagged = []
    if audit is not None:
        flagged_items = audit.loc[_warning_mask(audit), "item"].drop_duplicates()
        order = value.reindex(flagged_items.to_numpy()).fillna(0.0).to_numpy()
        flagged = flagged_items.to_numpy()[np.argsort(-order, kind="stable")].tolist()
    pages = list(dict.fromkeys(top + flagged))
    shown, rest = pages[: ctx.max_item_pages], pages[ctx.max_item_pages:]
    return shown, [i for i in rest if i in set(flagged)], meaning


def _item_chart(ctx: _Context, item: str, audit_row, forecast: pd.DataFrame | None) -> str:
    h = ctx.run.history
    row = ctx.rows.get(item)
    n = h.n_periods if row is not None else 0
    labels = list(ctx.period_labels) if n else []
    q_cols, steps = [], 0
    if forecast is not None and len(forecast):
        forecast = forecast.sort_values("step")
        steps = len(forecast)
        q_cols = sorted((c for c in forecast.columns if _QUANTILE_COLUMN.match(str(c))),
                        key=lambda c: float(_QUANTILE_COLUMN.match(c)["level"]))
        if "period" in forecast.columns:
            labels += forecast["period"].astype(str).tolist()
        else:
            labels += [f"+{s}" for s in forecast["step"]]
    if n == 0 and steps == 0:
        return _note("No history or forecast for this item.")
    panels = 2 if n > 4 * max(steps, 13) else 1
    fig, axes = ctx.canvas.get(panels)
    if n:
        y = h.values[row]
        ok = h.available[row] if h.available is not None else np.ones(n, dtype=bool)
        start = int(h.start[row])
        method = audit_row.get("method") if audit_row is not None else None
        params = audit_row.get("parameters") if audit_row is not None else None
        lx, level, legend_text = _fitted_level(y, ok, start, method, params, ctx.level_points,
                                               h.season_length)
    if steps:
        fx = n + forecast["step"].to_numpy(int) - 1
        mean = forecast["forecast"].to_numpy(float)
        band = (forecast[q_cols[0]].to_numpy(float), forecast[q_cols[-1]].to_numpy(float)) if q_cols else None
    for k, ax in enumerate(axes):
        lo = 0 if (k == 0 or not n) else max(0, n - 3 * max(steps, 13))
        top = 0.0
        if n:
            xs = np.arange(lo, n)
            dem = xs[y[lo:] > 0]
            ax.vlines(dem, 0, y[dem], color="#4c72b0", linewidth=1.0 if k else 0.7)
            if not ok[lo:].all():
                ax.fill_between(xs, 0, 1, where=~ok[lo:], transform=ax.get_xaxis_transform(),
                                color="#f4a582", alpha=0.45, linewidth=0, step="mid")
            sel = lx >= lo
            ax.plot(lx[sel], level[sel], color="#2ca02c", linewidth=1.3,
                    drawstyle="steps-post" if len(lx) < n else "default")
            top = max(top, float(y[lo:].max(initial=0.0)), float(np.nanmax(level[sel], initial=0.0)))
        if steps:
            if band is not None:
                ax.fill_between(fx, band[0], band[1], step="mid", color="#d62728", alpha=0.25, linewidth=0)
                top = max(top, float(np.nanmax(band[1], initial=0.0)))
            ax.step(fx, mean, where="mid", color="#d62728", linewidth=1.6)
            top = max(top, float(np.nanmax(mean, initial=0.0)))
            if n:
                ax.axvline(n - 0.5, color="#777777", linewidth=0.8, linestyle="--")
        ax.set_xlim(lo - 0.5, n + max(steps, 1) - 0.5)
        ax.set_ylim(0, top * 1.08 if top > 0 else 1.0)
        ax.xaxis.set_major_formatter(FuncFormatter(
            lambda v, _, labels=labels: labels[int(v)] if 0 <= int(v) < len(labels) else ""))
        ax.set_title("whole history" if (k == 0 and panels == 2) else
                     ("recent periods and the forecast" if panels == 2 else ""), fontsize=9, loc="left")
    # The legend is HTML under the image: drawing its text in matplotlib costs a quarter of the chart.
    keys = [("bar", "#4c72b0", "demand per period")] if n else []
    if n and not ok.all():
        keys.append(("box", "#f4a582", "out of stock (left out of the fit and the scores)"))
    if n:
        keys.append(("line", "#2ca02c", legend_text))
    if steps:
        if band is not None:
            keys.append(("box", "#f3c5c5", f"forecast band {q_cols[0]} to {q_cols[-1]}"))
        keys.append(("line", "#d62728", "forecast mean"))
    legend = "".join(f'<li><span class="key {kind}" style="--c:{colour}"></span>{escape(text)}</li>'
                     for kind, colour, text in keys)
    image = _embed(fig, f"Demand history and forecast of item {item}")
    return image.replace("</figure>", f'<ul class="legend">{legend}</ul></figure>')


def _items_section(ctx: _Context) -> str:
    run = ctx.run
    out = ['<section id="items"><h2>Item pages</h2>']
    if run.get("audit") is None and run.history is None and run.get("forecasts") is None:
        out.append(_missing("audit", "forecasts") + "</section>")
        return "".join(out)
    shown, rest, meaning = _choose_pages(ctx)
    out.append(_note(
        f"The {min(ctx.top_items, len(shown))} items with the largest {meaning}, then every item whose audit "
        f"row carries a warning, up to {ctx.max_item_pages} pages. Shaded: periods out of stock (left out of "
        f"the fit and the scores). The green line is the level the method saw at each point; the red band "
        f"spans the lowest to the highest forecast quantile."))
    if rest:
        listed = ", ".join(escape(i) for i in rest[:200]) + (" ..." if len(rest) > 200 else "")
        out.append(_note(f"{len(rest):,} more items with a warning have no page (filter the audit table for "
                         f"them): {listed}"))
    audit = _indexed(run.get("audit"))
    stock = _indexed(run.get("stock"))
    classes = _indexed(run.get("patterns"))
    forecasts = run.get("forecasts")
    by_item = {}
    if forecasts is not None:
        part = forecasts[forecasts["item"].isin(shown)]
        by_item = {k: g for k, g in part.groupby("item", sort=False)}
    item_scores = run.get("item_scores")
    scores_by_item = {}
    if item_scores is not None:
        part = item_scores[item_scores["item"].isin(shown)]
        scores_by_item = {k: g for k, g in part.groupby("item", sort=False)}
    attrs = _attributes(run.history)
    out.append('<nav class="item-index">' + " ".join(
        f'<a href="#{ctx.pages[i]}">{escape(i)}</a>' for i in shown) + "</nav>")
    for item in shown:
        a = audit.get(item)
        out.append(f'<article class="item" id="{ctx.pages[item]}"><h3>{escape(item)}</h3>')
        facts = _item_facts(item, attrs, a, classes.get(item) or {}, stock.get(item))
        out.append('<dl class="facts">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in facts) + "</dl>")
        out.append(_item_chart(ctx, item, a, by_item.get(item)))
        if item in scores_by_item:
            sc = scores_by_item[item].drop(columns=[c for c in ("item", "pattern") if c in item_scores.columns])
            sc = sc.set_index("method").reindex(_method_order(sc["method"])).reset_index()
            out.append("<details><summary>Backtest scores of this item</summary>" + _table(sc) + "</details>")
        out.append("</article>")
    out.append("</section>")
    return "".join(out)


def _item_facts(item: str, attrs: pd.DataFrame | None, a: dict | None, classified: dict,
                s: dict | None) -> list[tuple[str, str]]:
    """(label, HTML) pairs for an item page: attributes, pattern, method, reason, stock target."""
    facts = []
    if attrs is not None and item in attrs.index:
        for name, v in attrs.loc[item].items():
            if not pd.isna(v):
                facts.append((str(name).replace("_", " "), _num(v) if isinstance(v, (int, float, np.number)) else escape(str(v))))
    src = a or classified
    for key, label in (("pattern", "pattern"), ("adi", "ADI"), ("cv2", "CV²"), ("n_demands", "demands")):
        if key in src and not pd.isna(src[key]):
            facts.append((label, _num(src[key]) if key != "pattern" else escape(str(src[key]))))
    if a:
        for key, label in (("method", "method"), ("parameters", "parameters"),
                           ("distribution", "demand model"), ("rule", "chosen by")):
            if key in a and not pd.isna(a[key]) and str(a[key]):
                facts.append((label, escape(str(a[key]))))
        if "reason" in a and not pd.isna(a["reason"]):
            facts.append(("why", escape(str(a["reason"]))))
        w = a.get("warnings")
        if isinstance(w, str) and w.strip():
            facts.append(("warnings", f'<span class="warn">{escape(w)}</span>'))
    if s:
        parts = [f"{label} {_num(s[k])}" for k, label in (
            ("reorder_point", "reorder point"), ("order_up_to", "order-up-to"),
            ("safety_stock", "safety stock"), ("order_quantity", "order now")) if k in s and not pd.isna(s[k])]
        if "expected_fill_rate" in s and not pd.isna(s["expected_fill_rate"]):
            parts.append(f"expected fill rate {_share(float(s['expected_fill_rate']))}")
        if parts:
            facts.append(("stock target", "; ".join(parts)))
    return facts


def _audit_section(ctx: _Context) -> str:
    out = ['<section id="audit"><h2>Audit table</h2>']
    audit = ctx.run.get("audit")
    if audit is None:
        out.append(_missing("audit") + "</section>")
        return "".join(out)
    out.append(_note("One row per item: the pattern found, the method given, its parameters, the in-sample "
                     "cost, the reason and any warning. Click a column heading to sort (again to reverse); "
                     "type in the box to keep only rows containing every word typed."))
    out.append('<p class="controls"><label for="audit-filter">Filter rows </label>'
               '<input type="search" id="audit-filter" placeholder="e.g. lumpy sba out-of-stock" '
               f'autocomplete="off"> <span id="audit-shown">{len(audit):,} of {len(audit):,} items shown</span></p>')
    out.append('<div class="scroll">' + _table(audit, table_id="audit-table", links=ctx.pages, sortable=True)
               + "</div></section>")
    return "".join(out)

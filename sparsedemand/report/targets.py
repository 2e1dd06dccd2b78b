"""The stock-targets section: totals, the largest safety stock, the caution.

Examples
--------
>>> html = _stock_section(ctx)  # doctest: +SKIP
"""

from __future__ import annotations

from html import escape

import pandas as pd

from ..stock import STOCK_CAUTION
from .charts import _top_bar_chart
from .context import _Context
from .tables import _is_number_column, _missing, _num, _share, _table


def _stock_section(ctx: _Context) -> str:
    out = ['<section id="stock"><h2>Stock targets</h2>',
           f'<p class="caution">{escape(STOCK_CAUTION)}</p>']
    stock = ctx.run.get("stock")
    if stock is None or stock.empty:
        out.append(_missing("stock") + "</section>")
        return "".join(out)
    st = stock.drop_duplicates("item").copy()
    for c in st.columns:
        if c not in ("item", "method", "distribution") and not _is_number_column(st[c]):
            converted = pd.to_numeric(st[c], errors="coerce")
            if converted.notna().sum() == st[c].notna().sum():
                st[c] = converted
    if "unit_price" not in st.columns and ctx.price is not None:
        st["unit_price"] = ctx.price.reindex(st["item"].to_numpy()).to_numpy()
    computed_value = "safety_stock_value" not in st.columns and {"safety_stock", "unit_price"} <= set(st.columns)
    if computed_value:
        st["safety_stock_value"] = st["safety_stock"] * st["unit_price"]
    totals = [("items with a stock target", f"{len(st):,}")]
    for col, label in (("mean_lead_time_demand", "mean demand over the lead time (units)"),
                       ("reorder_point", "reorder points (units)"),
                       ("order_up_to", "order-up-to levels (units)"),
                       ("safety_stock", "safety stock (units)"),
                       ("safety_stock_value", "safety stock value" + (" (units x unit price)" if computed_value else "")),
                       ("order_quantity", "suggested order quantity now (units)")):
        if col in st.columns and _is_number_column(st[col]):
            totals.append((label, _num(st[col].sum())))
    if {"order_quantity", "unit_price"} <= set(st.columns) and all(
            _is_number_column(st[c]) for c in ("order_quantity", "unit_price")):
        totals.append(("value of the suggested orders", _num((st["order_quantity"] * st["unit_price"]).sum())))
    if "expected_fill_rate" in st.columns and _is_number_column(st["expected_fill_rate"]):
        totals.append(("expected fill rate, average over items", _share(float(st["expected_fill_rate"].mean()))))
    if "distribution" in st.columns:
        kinds = st["distribution"].astype(str).value_counts()
        totals.append(("demand model", ", ".join(f"{k} {v:,}" for k, v in kinds.items())))
    critical = _critical(ctx, st)
    if critical is not None:
        totals.append(("items marked safety-critical", f"{int(critical.sum()):,}"))
    out.append('<dl class="facts">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in totals) + "</dl>")
    show = [c for c in ("item", "method", "mean_lead_time_demand", "reorder_point", "order_up_to",
                        "safety_stock", "safety_stock_value", "unit_price", "expected_fill_rate",
                        "distribution") if c in st.columns]
    n = ctx.table_rows
    for col, label in (("safety_stock", "units"), ("safety_stock_value", "value")):
        if col not in st.columns or not _is_number_column(st[col]) or not st[col].notna().any():
            continue
        top = st.nlargest(n, col)
        out.append(f"<h3>Largest safety stock by {label}</h3>")
        out.append(_top_bar_chart(top["item"].tolist(), top[col].to_numpy(float),
                                  f"safety stock ({label}), the {len(top)} largest items"))
        out.append(_table(top[show], links=ctx.pages))
    out.append("</section>")
    return "".join(out)


def _critical(ctx: _Context, st: pd.DataFrame) -> pd.Series | None:
    if "safety_critical" in st.columns:
        return pd.to_numeric(st["safety_critical"], errors="coerce").fillna(0) > 0
    h = ctx.run.history
    if h is not None and h.attributes is not None and "safety_critical" in h.attributes.columns:
        flags = pd.Series(pd.to_numeric(h.attributes["safety_critical"], errors="coerce").to_numpy(),
                          index=[str(i) for i in h.items])
        return flags.reindex(st["item"].to_numpy()).fillna(0) > 0
    return None

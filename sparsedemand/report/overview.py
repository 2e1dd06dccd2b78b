"""The overview and demand-pattern sections.

Examples
--------
>>> html = _overview(ctx)  # doctest: +SKIP
"""

from __future__ import annotations

import re
from html import escape

import numpy as np
import pandas as pd

from .charts import _pattern_chart, _pattern_map, _pattern_order
from .context import _Context, _classes
from .load import RUN_TABLES, RunOutputs
from .tables import _missing, _note, _num, _share, _table, _warning_mask


def _overview(ctx: _Context) -> str:
    run = ctx.run
    out = ['<section id="overview"><h2>Overview</h2>']
    facts = []
    h = run.history
    classes = _classes(run)
    if h is not None:
        d = h.describe()
        facts += [("items", f"{d['items']:,}"),
                  ("periods", f"{d['periods']:,} ({d['frequency']}), {d['first_period']} to {d['last_period']}"),
                  ("volume", f"{_num(d['volume'])} units"),
                  ("items that never sold", f"{d['never_sold']:,}"),
                  ("item-periods out of stock", _share(d["unavailable_share"]))]
        facts.append(("demand history", escape(run.history_source)))
    elif classes is not None:
        facts.append(("items", f"{len(classes):,}"))
        if ctx.volume is not None:
            facts.append(("volume", f"{_num(ctx.volume.sum())} units"))
    audit = run.get("audit")
    if audit is not None:
        flagged = _warning_mask(audit)
        facts.append(("items with a warning", f"{int(flagged.sum()):,} of {len(audit):,}"))
    if run.settings.get("horizon"):
        facts.append(("forecast horizon", f"{_num(run.settings['horizon'])} periods"))
    out.append('<dl class="facts">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in facts) + "</dl>")
    if h is None:
        out.append(_note("No demand history was found (no <code>history</code> given, no <code>run.json</code> "
                         "naming the input, no <code>demand.csv</code>): item charts show forecasts only."))

    if classes is not None:
        summary = _pattern_summary(classes, ctx.volume)
        out.append("<h3>Items and volume per pattern</h3>")
        out.append(_pattern_chart(summary))
        shown = summary.reset_index(names="pattern").rename(columns={
            "item_share": "share of items", "volume_share": "share of volume"})
        for c in ("share of items", "share of volume"):
            if c in shown:
                shown[c] = shown[c].map(_share)
        out.append(_table(shown))
    else:
        out.append(_missing("patterns"))

    if audit is not None:
        out.append("<h3>Methods given</h3>")
        counts = audit.groupby("method", sort=False).size().sort_values(ascending=False)
        flagged = pd.Series(_warning_mask(audit), index=audit.index).groupby(audit["method"]).sum()
        out.append(_table(pd.DataFrame({"method": counts.index, "items": counts.to_numpy(),
                                        "with a warning": flagged.reindex(counts.index).to_numpy()})))
        kinds = _warning_kinds(audit)
        if len(kinds):
            out.append("<h3>Warnings by kind</h3>")
            out.append(_table(kinds))
    out.append(_files_table(run))
    out.append("</section>")
    return "".join(out)


def _pattern_summary(classes: pd.DataFrame, volume: pd.Series | None) -> pd.DataFrame:
    patterns = classes["pattern"].astype(str)
    order = _pattern_order(patterns)
    items = patterns.value_counts().reindex(order)
    summary = pd.DataFrame({"items": items, "item_share": items / items.sum()})
    if volume is not None:
        vol = volume.reindex(classes["item"].to_numpy()).fillna(0.0).to_numpy()
        by = pd.Series(vol, index=patterns.to_numpy()).groupby(level=0).sum().reindex(order).fillna(0.0)
        total = by.sum()
        summary["volume"] = by
        summary["volume_share"] = by / total if total > 0 else 0.0
    return summary


def _warning_kinds(audit: pd.DataFrame) -> pd.DataFrame:
    """Warnings with their numbers replaced by N, counted by kind."""
    if "warnings" not in audit.columns:
        return pd.DataFrame(columns=["warning", "items"])
    flagged = _warning_mask(audit)
    counts: dict[str, int] = {}
    for text in audit.loc[flagged, "warnings"].astype(str):
        for part in text.split(";"):
            part = re.sub(r"\d+(\.\d+)?", "N", part.strip())
            if part:
                counts[part] = counts.get(part, 0) + 1
    ordered = sorted(counts.items(), key=lambda kv: -kv[1])
    return pd.DataFrame(ordered, columns=["warning", "items"])


def _files_table(run: RunOutputs) -> str:
    rows = []
    for name, (_, command) in RUN_TABLES.items():
        path = run.files.get(name)
        if path is None:
            rows.append((f"{name}.csv", "not in this folder", command))
        else:
            stamp = pd.Timestamp(path.stat().st_mtime, unit="s").strftime("%Y-%m-%d %H:%M")
            rows.append((path.name, f"{len(run.tables[name]):,} rows, modified {stamp} UTC", command))
    frame = pd.DataFrame(rows, columns=["table", "status", "written by"])
    return "<h3>Tables of this run</h3>" + _table(frame)


def _patterns_section(ctx: _Context) -> str:
    out = ['<section id="patterns"><h2>Demand patterns</h2>']
    classes = _classes(ctx.run)
    if classes is None or not {"adi", "cv2"} <= set(classes.columns):
        out.append(_missing("patterns") + "</section>")
        return "".join(out)
    adi = pd.to_numeric(classes["adi"], errors="coerce")
    cv2 = pd.to_numeric(classes["cv2"], errors="coerce")
    keep = np.isfinite(adi) & np.isfinite(cv2)
    adi_cut, cv2_cut = ctx.cutoffs
    out.append(_note(
        f"Each dot is an item: how often it sells (ADI, the average number of periods between demands) "
        f"against how much its order sizes vary (CV²). The dashed lines are the cutoffs ADI {adi_cut:g} and "
        f"CV² {cv2_cut:g} (Syntetos, Boylan &amp; Croston 2005) that split demand into smooth, erratic, "
        f"intermittent and lumpy. Items that never sold or have a single demand have no CV² and are not drawn."))
    if keep.any():
        figs = pd.DataFrame({"adi": adi[keep], "cv2": cv2[keep], "pattern": classes["pattern"][keep]})
        chart, note = _pattern_map(figs, ctx.cutoffs, ctx.rule)
        out.append(chart)
        dropped = int((~keep).sum())
        out.append(_note(f"{note}{int(keep.sum()):,} items drawn; {dropped:,} without both figures."))
    else:
        out.append(_note("No item has both an ADI and a CV²."))
    out.append("</section>")
    return "".join(out)

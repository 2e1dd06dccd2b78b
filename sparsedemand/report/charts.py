"""The report's matplotlib charts, each returned as an embedded PNG ``<figure>``.

Figures use the Agg canvas directly (no pyplot state) with fixed margins.

Examples
--------
>>> _method_order(["sba", "zeros", "router"])
['router', 'sba', 'zeros']
"""

from __future__ import annotations

import base64
import math
import re
from html import escape
from io import BytesIO

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.ticker import FuncFormatter, MaxNLocator

from ..classify import PATTERNS, STATUSES, croston_sba_boundary
from ..evaluate import BASELINES, ROUTER

# backtest metric names with a quantile level, e.g. coverage_q90
_QUANTILE_METRIC = re.compile(r"^(?P<family>[a-z_]+?)_q(?P<level>\d+(?:\.\d+)?)$")
_PATTERN_COLOURS = {
    "smooth": "#1b9e77", "erratic": "#d95f02", "intermittent": "#7570b3", "lumpy": "#e7298a",
    "gone-quiet": "#8c6d31", "too-short": "#969696", "never-sold": "#cccccc",
}
_DPI = 96


def _figure(width: float, height: float, *, left: float = 0.7, right: float = 0.2,
            bottom: float = 0.45, top: float = 0.35, wspace: float = 0.2, hspace: float = 0.45) -> Figure:
    """A figure with fixed margins in inches (an automatic layout engine would double the drawing time)."""
    fig = Figure(figsize=(width, height), dpi=_DPI)
    FigureCanvasAgg(fig)
    fig.subplots_adjust(left=left / width, right=1 - right / width, bottom=bottom / height,
                        top=1 - top / height, wspace=wspace, hspace=hspace)
    return fig


def _embed(fig: Figure, alt: str, caption: str = "") -> str:
    """The figure as an inline PNG, with its pixel size so the layout does not jump."""
    buffer = BytesIO()
    fig.savefig(buffer, format="png", metadata={"Software": None})
    png = buffer.getvalue()
    width, height = int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
    data = base64.b64encode(png).decode("ascii")
    cap = f"<figcaption>{caption}</figcaption>" if caption else ""
    return (f'<figure class="chart"><img src="data:image/png;base64,{data}" alt="{escape(alt)}" '
            f'width="{width}" height="{height}">{cap}</figure>')


def _style(ax, *, grid_axis: str = "y") -> None:
    ax.spines[["top", "right"]].set_visible(False)
    ax.grid(True, axis=grid_axis, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    ax.tick_params(labelsize=8)


def _method_colours(methods: list[str]) -> dict[str, str]:
    """Router black, baselines in greys and browns, other methods in distinct colours."""
    others = ["#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd", "#17becf", "#bcbd22",
              "#e377c2", "#7f7f7f", "#aec7e8", "#98df8a", "#ff9896", "#c5b0d5", "#9edae5"]
    basics = ["#8c564b", "#c49c94", "#636363", "#bdbdbd", "#d9a066", "#6b4c2a"]
    colours, i, j = {}, 0, 0
    for m in methods:
        if m == ROUTER:
            colours[m] = "#000000"
        elif m in BASELINES:
            colours[m] = basics[j % len(basics)]
            j += 1
        else:
            colours[m] = others[i % len(others)]
            i += 1
    return colours


def _pattern_order(values) -> list[str]:
    present = list(dict.fromkeys(map(str, values)))
    known = ["all", *PATTERNS, *STATUSES]
    return [p for p in known if p in present] + [p for p in present if p not in known]


def _method_order(values) -> list[str]:
    present = list(dict.fromkeys(map(str, values)))
    head = [ROUTER] if ROUTER in present else []
    middle = [m for m in present if m != ROUTER and m not in BASELINES]
    tail = [m for m in BASELINES if m in present]
    return head + middle + tail


def _pattern_chart(summary: pd.DataFrame) -> str:
    fig = _figure(7.5, 0.45 * len(summary) + 1.0, left=1.1, top=0.15)
    ax = fig.add_subplot()
    y = np.arange(len(summary))
    ax.barh(y - 0.2, summary["item_share"], height=0.4, color="#4c72b0", label="share of items")
    if "volume_share" in summary:
        ax.barh(y + 0.2, summary["volume_share"], height=0.4, color="#dd8452", label="share of volume")
    ax.set_yticks(y, summary.index)
    ax.invert_yaxis()
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:.0%}"))
    ax.legend(fontsize=8, frameon=False, loc="lower right")
    _style(ax, grid_axis="x")
    return _embed(fig, "Share of items and of volume per demand pattern")


def _pattern_map(figs: pd.DataFrame, cutoffs: tuple[float, float], rule: str) -> tuple[str, str]:
    """ADI-CV² scatter on log axes, cutoff lines and labelled regions; returns (html, note)."""
    adi_cut, cv2_cut = cutoffs
    adi = figs["adi"].to_numpy(float)
    cv2 = figs["cv2"].to_numpy(float)
    zero = cv2 <= 0
    positive = cv2[~zero]
    floor = float(min(positive.min() / 2, cv2_cut / 10)) if positive.size else cv2_cut / 10
    cv2 = np.where(zero, floor, cv2)
    x_lo = min(0.9, float(adi.min()) * 0.9)
    x_hi = max(adi_cut * 3, float(adi.max()) * 1.3)
    y_lo = min(floor * 0.8, cv2_cut / 20)
    y_hi = max(cv2_cut * 8, float(cv2.max()) * 1.5)
    fig = _figure(8.5, 5.2, right=2.0, bottom=0.6, left=0.8, top=0.2)
    ax = fig.add_subplot()
    patterns = figs["pattern"].astype(str).to_numpy()
    for name in _pattern_order(patterns):
        sel = patterns == name
        ax.scatter(adi[sel], cv2[sel], s=9, alpha=0.55, linewidths=0,
                   color=_PATTERN_COLOURS.get(name, "#444444"), label=f"{name} ({int(sel.sum()):,})")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlim(x_lo, x_hi)
    ax.set_ylim(y_lo, y_hi)
    ax.axvline(adi_cut, color="#333333", linewidth=1, linestyle="--")
    ax.axhline(cv2_cut, color="#333333", linewidth=1, linestyle="--")
    if rule == "kostenko-hyndman":
        grid = np.geomspace(1.0, 4 / 3, 50)
        ax.plot(grid, np.maximum(croston_sba_boundary(grid), y_lo), color="#555555", linewidth=1,
                label="Kostenko-Hyndman boundary")
    xm = (math.sqrt(x_lo * adi_cut), math.sqrt(adi_cut * x_hi))
    ym = (math.sqrt(y_lo * cv2_cut), math.sqrt(cv2_cut * y_hi))
    box = dict(boxstyle="round,pad=0.3", facecolor="white", edgecolor="#999999", alpha=0.85)
    for text, x, yv in (("smooth", xm[0], ym[0]), ("erratic", xm[0], ym[1]),
                        ("intermittent", xm[1], ym[0]), ("lumpy", xm[1], ym[1])):
        ax.text(x, yv, text, ha="center", va="center", fontsize=11, weight="bold",
                color=_PATTERN_COLOURS[text], bbox=box)
    ax.text(adi_cut, y_hi, f" ADI {adi_cut:g}", va="top", fontsize=8)
    ax.text(x_hi, cv2_cut, f"CV² {cv2_cut:g} ", ha="right", va="bottom", fontsize=8)
    ax.set_xlabel("ADI: average periods between demands (log scale)")
    ax.set_ylabel("CV²: squared variation of demand sizes (log scale)")
    ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.0),
              title="colour: pattern given", title_fontsize=7)
    _style(ax, grid_axis="both")
    note = (f"{int(zero.sum()):,} items with CV² = 0 (every demand the same size) are drawn at "
            f"CV² = {floor:.3g}, the bottom of the log scale. " if zero.any() else "")
    return _embed(fig, "Items on the ADI and CV² map with the pattern cutoffs"), note


def _grouped_bars(ax, table: pd.DataFrame, colours: dict[str, str]) -> None:
    """Bars of ``table`` (rows: groups on the x axis, columns: methods)."""
    groups, methods = list(table.index), list(table.columns)
    width = 0.8 / max(len(methods), 1)
    x = np.arange(len(groups))
    for k, m in enumerate(methods):
        ax.bar(x - 0.4 + width * (k + 0.5), table[m].to_numpy(float), width=width,
               color=colours[m], label=m, edgecolor="white" if m != ROUTER else "#000000",
               linewidth=0.3)
    ax.set_xticks(x, groups, fontsize=8)
    ax.axhline(0, color="#555555", linewidth=0.6)


def _metric_charts(frame: pd.DataFrame, metrics: list[str], levels: pd.Series,
                   colours: dict[str, str]) -> str:
    """Small multiples: one panel per metric, patterns on the x axis, a bar per method."""
    methods = _method_order(frame["method"])
    cols = 2 if len(metrics) > 1 else 1
    rows = math.ceil(len(metrics) / cols)
    fig = _figure(5.2 * cols + 1.9, 2.25 * rows + 0.3, right=1.9, bottom=0.35, top=0.3,
                  wspace=0.18, hspace=0.55)
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    for ax, metric in zip(axes, metrics):
        part = frame[frame["metric"] == metric]
        table = part.pivot_table(index="pattern", columns="method", values="value", aggfunc="first")
        table = table.reindex(index=_pattern_order(table.index),
                              columns=[m for m in methods if m in table.columns])
        _grouped_bars(ax, table, colours)
        ax.set_title(f"{metric} ({levels[metric]} level)", fontsize=9, loc="left")
        ax.yaxis.set_major_locator(MaxNLocator(nbins=4))
        _style(ax)
    for ax in axes[len(metrics):]:
        ax.set_visible(False)
    handles = [Rectangle((0, 0), 1, 1, color=colours[m]) for m in methods]
    fig.legend(handles, methods, fontsize=7, frameon=False, loc="upper right",
               ncol=1 if len(methods) <= 16 else 2)
    return _embed(fig, "Backtest metrics for each method and pattern")


def _router_chart(frame: pd.DataFrame, metrics: list[str], colours: dict[str, str]) -> str:
    fig = _figure(2.6 * len(metrics) + 1.3, 0.3 * frame["method"].nunique() + 0.9, left=1.3,
                  bottom=0.4, top=0.3, wspace=0.25)
    axes = fig.subplots(1, len(metrics), squeeze=False)[0]
    for ax, metric in zip(axes, metrics):
        part = frame[frame["metric"] == metric].set_index("method")["value"]
        part = part.reindex([m for m in _method_order(part.index)])
        y = np.arange(len(part))
        ax.barh(y, part.to_numpy(float), color=[colours[m] for m in part.index])
        ax.set_yticks(y, part.index if ax is axes[0] else [""] * len(part), fontsize=8)
        ax.invert_yaxis()
        ax.set_title(metric, fontsize=9)
        _style(ax, grid_axis="x")
    return _embed(fig, "The router against the naive baselines")


def _quantile_chart(frame: pd.DataFrame, family: str, colours: dict[str, str]) -> str:
    """A metric per quantile level, one panel per pattern; the diagonal for coverage."""
    frame = frame.assign(q=frame["metric"].str.extract(_QUANTILE_METRIC)["level"].astype(float) / 100)
    patterns = _pattern_order(frame["pattern"])[:6]
    fig = _figure(2.3 * len(patterns) + 2.5, 2.9, right=1.9, bottom=0.55, wspace=0.12)
    axes = fig.subplots(1, len(patterns), squeeze=False, sharey=True)[0]
    for ax, pattern in zip(axes, patterns):
        part = frame[frame["pattern"] == pattern]
        for m in _method_order(part["method"]):
            line = part[part["method"] == m].sort_values("q")
            ax.plot(line["q"], line["value"], marker="o", markersize=3, color=colours[m],
                    linewidth=2.2 if m == ROUTER else 1.0, label=m)
        if family == "coverage":
            lo, hi = float(frame["q"].min()) - 0.05, float(frame["q"].max()) + 0.05
            ax.plot([lo, hi], [lo, hi], color="#999999", linestyle="--", linewidth=1, label="target")
        ax.set_title(pattern, fontsize=9)
        ax.set_xlabel("quantile level", fontsize=8)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:.0%}"))
        _style(ax, grid_axis="both")
    axes[0].set_ylabel("share of periods at or below" if family == "coverage" else family, fontsize=8)
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, fontsize=7, frameon=False, loc="upper right")
    return _embed(fig, f"Backtest {family} per quantile level")


def _service_chart(frame: pd.DataFrame, colours: dict[str, str]) -> str:
    wide = frame.pivot_table(index="method", columns="metric", values="value", aggfunc="first")
    wide = wide.dropna(subset=["fill_rate", "avg_on_hand"])
    fig = _figure(6.5, 4.2, left=0.8, bottom=0.6, top=0.2, right=0.4)
    ax = fig.add_subplot()
    for m in _method_order(wide.index):
        x, y = wide.at[m, "avg_on_hand"], wide.at[m, "fill_rate"]
        ax.scatter([x], [y], s=70 if m == ROUTER else 30, color=colours[m], zorder=3,
                   edgecolors="white", linewidths=0.5)
        ax.annotate(m, (x, y), xytext=(4, 3), textcoords="offset points", fontsize=7,
                    weight="bold" if m == ROUTER else "normal")
    ax.set_xlabel("average units on hand per item and period")
    ax.set_ylabel("fill rate achieved")
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:.0%}"))
    _style(ax, grid_axis="both")
    return _embed(fig, "Simulated fill rate against average stock on hand, per method")


def _top_bar_chart(labels, values, xlabel: str) -> str:
    fig = _figure(7.5, 0.28 * len(labels) + 0.8, left=1.4, bottom=0.5, top=0.1)
    ax = fig.add_subplot()
    y = np.arange(len(labels))
    ax.barh(y, values, color="#4c72b0")
    ax.set_yticks(y, labels, fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel(xlabel, fontsize=8)
    _style(ax, grid_axis="x")
    return _embed(fig, xlabel)


class _ItemCanvas:
    """Item-page figures kept from one item to the next.

    Re-using the axes (and so their ticks) instead of making a new figure per
    item cuts the drawing time of the item pages by about a third.
    """

    def __init__(self) -> None:
        self._figures: dict[int, tuple[Figure, np.ndarray]] = {}

    def get(self, panels: int) -> tuple[Figure, np.ndarray]:
        if panels not in self._figures:
            fig = _figure(9.5, 2.1 * panels + 0.1, bottom=0.35, top=0.3, hspace=0.4)
            axes = fig.subplots(panels, 1, squeeze=False)[:, 0]
            for ax in axes:
                _style(ax)
                ax.xaxis.set_major_locator(MaxNLocator(nbins=6, integer=True))
                ax.yaxis.set_major_locator(MaxNLocator(nbins=4, integer=True))
            self._figures[panels] = (fig, axes)
        fig, axes = self._figures[panels]
        for legend in list(fig.legends):
            legend.remove()
        for ax in axes:
            for artist in [*ax.lines, *ax.collections, *ax.patches, *ax.texts]:
                artist.remove()
        return fig, axes

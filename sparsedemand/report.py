"""One self-contained HTML report of a run, for planners and auditors.

:func:`build_report` reads a *run folder* (the tables written by the
``classify``, ``forecast``, ``backtest`` and ``stock`` commands, and the demand
history they were computed from) and writes a single HTML file:

- charts are drawn with matplotlib (Agg canvas, no pyplot state) and embedded
  as base64 PNG images;
- the audit table is sorted and filtered by a few lines of plain JavaScript
  inside the file;
- nothing is fetched from the network, so the file opens from disk with no
  server and can be attached to an e-mail.

Run folder
----------
Every table may be CSV or Parquet (``name.csv`` first, then ``name.parquet``)
and every one may be missing; its section then says which command writes it.

``patterns``      classification (``item``, ``pattern``, ``adi``, ``cv2``, ``volume`` ...)
``forecasts``     ``item``, ``step``, ``period``, ``forecast`` and quantile columns ``q50`` ...
``audit``         the routing audit trail (``item``, ``pattern``, ``method``, ``reason``,
                  ``warnings`` ...)
``scores``        backtest scores, long: ``method``, ``pattern``, ``level``, ``metric``, ``value``
``item_scores``   backtest scores per item: ``item``, ``method``, one column per metric
``stock``         stock targets per item (``reorder_point``, ``safety_stock`` ...)

The demand history comes from the ``history`` argument when given, else from
``run.json`` (``{"input": path, "columns": {...}, "frequency": ...}``), else from
``demand.csv`` in the folder (demo runs).

Sections
--------
Overview (items, periods, volume, items and volume per pattern, warnings);
demand patterns (the ADI-CV² map, log axes, cutoff lines, labelled regions);
backtest (each metric per method and pattern, the router against the
baselines, coverage and pinball loss per quantile level, fill rate against
average on-hand); stock targets (totals, largest safety stock in units and in
value, with the caution); item pages (the top items by value and every item
with a warning, capped); the full audit table.

Fitted level on the item pages
------------------------------
When :mod:`sparsedemand.methods` provides ``fit`` and knows the item's method,
the line is the method's own one-step forecast with the item's fitted
parameters, made at up to ``level_points`` origins over the history (the
history up to each origin, right-aligned, earlier periods marked unavailable).
Otherwise it is simple exponential smoothing of the demand per available
period from the first demand on, with constant :data:`LEVEL_ALPHA`. The chart
legend says which one was drawn.
"""

from __future__ import annotations

import base64
import json
import math
import os
import re
from dataclasses import dataclass, field
from html import escape
from io import BytesIO
from numbers import Integral
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.ticker import FuncFormatter, MaxNLocator

from .classify import PATTERNS, STATUSES, croston_sba_boundary
from .errors import InputError
from .io import Columns, load_frame, period_labels, read_demand, write_text
from .evaluate import BASELINES, ROUTER
from .stock import STOCK_CAUTION
from .panel import DemandPanel, as_panel, first_demand_offsets

__all__ = [
    "build_report",
    "load_run",
    "RunOutputs",
    "RUN_TABLES",
    "BASELINES",
    "STOCK_CAUTION",
    "LEVEL_ALPHA",
    "ses_level",
]

# table name -> (columns it must have, the command that writes it)
RUN_TABLES: dict[str, tuple[tuple[str, ...], str]] = {
    "patterns": (("item", "pattern"), "sparsedemand classify"),
    "forecasts": (("item", "step", "forecast"), "sparsedemand forecast"),
    "audit": (("item", "pattern", "method"), "sparsedemand forecast"),
    "scores": (("method", "metric", "value"), "sparsedemand backtest"),
    "item_scores": (("item", "method"), "sparsedemand backtest"),
    "stock": (("item",), "sparsedemand stock"),
}
LEVEL_ALPHA = 0.1

# direction of a metric when judging the router against the baselines
_LOWER_BETTER = {"mase", "rmsse", "mae", "mse", "rmse", "rel_mae_gmean", "weighted_rmsse",
                 "stockout_periods", "crps"}
_HIGHER_BETTER = {"fill_rate", "cycle_service_level"}
_NEAR_ZERO_BETTER = {"scaled_bias", "pis"}
_HEADLINE = ("rmsse", "mase", "mae", "rel_mae_gmean", "weighted_rmsse", "scaled_bias")
_LEVEL_ORDER = ("item", "location", "category", "total")
_QUANTILE_METRIC = re.compile(r"^(?P<family>[a-z_]+?)_q(?P<level>\d+(?:\.\d+)?)$")
_QUANTILE_COLUMN = re.compile(r"^q(?P<level>\d+(?:\.\d+)?)$")
_PATTERN_COLOURS = {
    "smooth": "#1b9e77", "erratic": "#d95f02", "intermittent": "#7570b3", "lumpy": "#e7298a",
    "gone-quiet": "#8c6d31", "too-short": "#969696", "never-sold": "#cccccc",
}
_DPI = 96
_MAX_METRIC_CHARTS = 16


# ------------------------------------------------------------------ loading


@dataclass
class RunOutputs:
    """The tables of a run folder, each ``None`` when absent.

    Item labels are strings in every table (``item`` column) and in the
    history, so the tables join on them.
    """

    folder: Path
    settings: dict = field(default_factory=dict)
    history: DemandPanel | None = None
    history_source: str = ""
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    files: dict[str, Path] = field(default_factory=dict)

    def get(self, name: str) -> pd.DataFrame | None:
        return self.tables.get(name)


def load_run(run_dir: str | os.PathLike, *, history=None) -> RunOutputs:
    """Read a run folder's tables and its demand history.

    Parameters
    ----------
    run_dir : path-like
        The run folder.
    history : DemandPanel, DataFrame or 2-D array, optional
        The demand history; wins over ``run.json`` and ``demand.csv``.

    Returns
    -------
    RunOutputs

    Raises
    ------
    InputError
        The folder is missing, holds none of the run tables, or a table or
        ``run.json`` cannot be read or lacks a needed column.

    Examples
    --------
    >>> run = load_run("demo-output")  # doctest: +SKIP
    >>> sorted(run.tables)  # doctest: +SKIP
    ['audit', 'forecasts', 'patterns']
    """
    folder = Path(run_dir)
    if not folder.exists():
        raise InputError(f"{folder}: no such run folder")
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder (give the run folder the commands wrote into)")
    run = RunOutputs(folder=folder, settings=_read_settings(folder))
    for name, (required, _) in RUN_TABLES.items():
        path = _table_path(folder, name)
        if path is None:
            continue
        run.tables[name] = _read_table(path, required)
        run.files[name] = path
    _attach_history(run, history)
    if not run.tables and run.history is None:
        expected = ", ".join(f"{n}.csv" for n in RUN_TABLES)
        raise InputError(f"{folder}: no run outputs found (expected one of {expected} or demand.csv)")
    return run


def _table_path(folder: Path, name: str) -> Path | None:
    # a Dask run writes each table as a folder of Parquet parts
    for path in (folder / f"{name}.csv", folder / f"{name}.parquet", folder / name):
        if path.exists() and (path.is_file() or any(path.glob("*.parquet"))):
            return path
    return None


def _read_table(path: Path, required: tuple[str, ...]) -> pd.DataFrame:
    frame = load_frame(path, text_columns=("item", "method", "pattern", "level", "metric"))
    missing = [c for c in required if c not in frame.columns]
    if missing:
        found = ", ".join(map(str, frame.columns)) or "none"
        raise InputError(f"{path}: missing column '{missing[0]}' (columns found: {found})")
    if "item" in frame.columns:
        if frame["item"].isna().any():
            row = int(np.flatnonzero(frame["item"].isna().to_numpy())[0]) + 1
            raise InputError(f"{path}, row {row}: missing item label")
        frame["item"] = frame["item"].astype(str)
    return frame


def _read_settings(folder: Path) -> dict:
    path = folder / "run.json"
    if not path.exists():
        return {}
    try:
        settings = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: cannot read the run settings ({exc})") from None
    if not isinstance(settings, dict):
        raise InputError(f"{path}: expected a JSON object of run settings")
    return settings


def _attach_history(run: RunOutputs, history) -> None:
    if history is not None:
        run.history = as_panel(history, name="history")
        run.history_source = "given by the caller"
        return
    settings, folder = run.settings, run.folder
    if settings.get("input"):
        source = folder / "run.json"
        path = Path(str(settings["input"]))
        if not path.is_absolute() and (folder / path).exists():
            path = folder / path
        columns = settings.get("columns") or {}
        if not isinstance(columns, dict):
            raise InputError(f"{source}: 'columns' must be an object of column names")
        known = set(Columns.__dataclass_fields__)
        unknown = sorted(set(columns) - known)
        if unknown:
            raise InputError(f"{source}: unknown column field {unknown[0]!r} in 'columns'")
        if "attributes" in columns:
            columns = {**columns, "attributes": tuple(columns["attributes"] or ())}
        try:
            run.history, _ = read_demand(
                path,
                columns=Columns(**columns),
                frequency=settings.get("frequency"),
                layout=settings.get("layout", "auto"),
                net_returns=bool(settings.get("net_returns", False)),
            )
        except InputError as exc:
            raise InputError(f"{source}: the demand history named in 'input' cannot be read: {exc}") from None
        run.history_source = str(path)
        return
    demo = folder / "demand.csv"
    if demo.exists():
        from .demo import DEMO_ATTRIBUTES

        header = pd.read_csv(demo, nrows=0).columns
        extra = tuple(c for c in DEMO_ATTRIBUTES if c in header and c not in Columns().__dict__.values())
        run.history, _ = read_demand(demo, columns=Columns(attributes=extra))
        run.history_source = str(demo)


# ------------------------------------------------------------------ public entry point


def build_report(
    run_dir: str | os.PathLike,
    *,
    out: str | os.PathLike | None = None,
    history=None,
    title: str = "Demand, forecast and stock report",
    top_items: int = 10,
    max_item_pages: int = 25,
    table_rows: int = 15,
    adi_cutoff: float | None = None,
    cv2_cutoff: float | None = None,
    level_points: int = 120,
) -> Path:
    """Write the HTML report of a run folder and return its path.

    Parameters
    ----------
    run_dir : path-like
        The run folder (see the module docstring for its tables).
    out : path-like, optional
        The HTML file to write; default ``run_dir/report.html``. Written
        atomically: a failure leaves no partial file.
    history : DemandPanel, DataFrame or 2-D array, optional
        The demand history; wins over ``run.json`` and ``demand.csv``.
    title : str
        Heading and window title.
    top_items : int, default 10
        Items with the largest demand value that get an item page.
    max_item_pages : int, default 25
        Cap on item pages (top items first, then flagged items by value); the
        remaining flagged items are listed by name.
    table_rows : int, default 15
        Rows in the "largest safety stock" tables.
    adi_cutoff, cv2_cutoff : float, optional
        Cutoff lines on the pattern map; default from ``run.json``
        (``classify_options``), else 1.32 and 0.49.
    level_points : int, default 120
        Origins at which the fitted level is computed on each item page.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    InputError
        Missing or unreadable run folder, bad table, or a bad option.

    Examples
    --------
    >>> build_report("demo-output", out="demo-output/report.html")  # doctest: +SKIP
    PosixPath('demo-output/report.html')
    """
    for name, value, low in (("top_items", top_items, 0), ("max_item_pages", max_item_pages, 0),
                             ("table_rows", table_rows, 1), ("level_points", level_points, 2)):
        if not isinstance(value, Integral) or isinstance(value, bool) or value < low:
            raise InputError(f"{name} must be a whole number >= {low}, got {value!r}")
    target = Path(out) if out is not None else Path(run_dir) / "report.html"
    if target.is_dir():
        raise InputError(f"--out {target}: is a folder; give the HTML file to write")
    run = load_run(run_dir, history=history)
    options = dict(run.settings.get("classify_options") or {})
    cutoffs = (
        _cutoff("adi_cutoff", adi_cutoff, options.get("adi_cutoff", 1.32), 1.0),
        _cutoff("cv2_cutoff", cv2_cutoff, options.get("cv2_cutoff", 0.49), 0.0),
    )
    html = _render(run, title=str(title), cutoffs=cutoffs, rule=str(options.get("rule", "cutoffs")),
                   top_items=int(top_items), max_item_pages=int(max_item_pages),
                   table_rows=int(table_rows), level_points=int(level_points))
    return write_text(html, target)


def _cutoff(name: str, given, default, low: float) -> float:
    value = default if given is None else given
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(value) or value <= low:
        raise InputError(f"{name} must be a finite number > {low:g}, got {value!r}")
    return value


# ------------------------------------------------------------------ formatting helpers


def _num(value, digits: int = 3) -> str:
    """A number for people: thousands separators, ``digits`` significant decimals, blank NaN."""
    if value is None or value is pd.NA:
        return ""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return escape(str(value))
    if not math.isfinite(v):
        return "" if math.isnan(v) else ("∞" if v > 0 else "-∞")
    if v == round(v) and abs(v) < 1e15:
        return f"{int(round(v)):,}"
    if abs(v) >= 1000:
        return f"{v:,.0f}"
    return f"{v:.{digits}g}" if abs(v) < 1 else f"{v:,.{digits - 1}f}"


def _share(value: float) -> str:
    return "" if not np.isfinite(value) else f"{value:.1%}"


def _is_number_column(series: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)


def _table(frame: pd.DataFrame, *, table_id: str | None = None, links: dict | None = None,
           sortable: bool = False, headers: dict | None = None) -> str:
    """An HTML table of a frame; numeric cells carry their raw value in ``data-v``."""
    headers = headers or {}
    links = links or {}
    numeric = [_is_number_column(frame[c]) for c in frame.columns]
    # long text (reasons, warnings) wraps; everything else stays on one line
    wide = [not is_num and len(frame) > 0 and max(len(str(v)) for v in frame[c]) > 40
            for c, is_num in zip(frame.columns, numeric)]
    attrs = f' id="{table_id}"' if table_id else ""
    cls = "data sortable" if sortable else "data"
    head = []
    for name, is_num in zip(frame.columns, numeric):
        label = escape(headers.get(name, str(name)))
        kind = ' data-type="number"' if is_num else ""
        inner = f'<button type="button">{label}</button>' if sortable else label
        head.append(f'<th scope="col"{kind}>{inner}</th>')
    columns = [frame[c].to_numpy() for c in frame.columns]
    body = []
    for r in range(len(frame)):
        cells = []
        for c, name in enumerate(frame.columns):
            v = columns[c][r]
            if numeric[c]:
                raw = "" if pd.isna(v) else repr(float(v))
                cells.append(f'<td class="n" data-v="{raw}">{_num(v)}</td>')
                continue
            text = "" if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA else str(v)
            if name == "item" and text in links:
                cells.append(f'<td><a href="#{links[text]}">{escape(text)}</a></td>')
            elif wide[c]:
                cells.append(f'<td class="w">{escape(text)}</td>')
            else:
                cells.append(f"<td>{escape(text)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<table class="{cls}"{attrs}><thead><tr>{"".join(head)}</tr></thead>'
            f'<tbody>{"".join(body)}</tbody></table>')


def _note(text: str) -> str:
    return f'<p class="note">{text}</p>'


def _missing(*names: str) -> str:
    """The note for a section whose table is absent."""
    parts = [f"<code>{n}.csv</code> (written by <code>{RUN_TABLES[n][1]}</code>)" for n in names]
    return _note("Not in this run folder: " + " and ".join(parts) + ", so this section is left out.")


def _warning_mask(audit: pd.DataFrame | None) -> np.ndarray:
    if audit is None or "warnings" not in audit.columns:
        return np.zeros(0 if audit is None else len(audit), dtype=bool)
    text = audit["warnings"].astype(object).where(audit["warnings"].notna(), "")
    return np.array([bool(str(t).strip()) for t in text], dtype=bool)


# ------------------------------------------------------------------ charts


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


# ------------------------------------------------------------------ fitted level


def _parse_parameters(text) -> dict[str, float | int]:
    """``"alpha=0.1 (optimised), window=4"`` -> ``{"alpha": 0.1, "window": 4}``."""
    if not isinstance(text, str):
        return {}
    out: dict[str, float | int] = {}
    for key, value in re.findall(r"([A-Za-z_]\w*)=([^,\s]+)", text):
        try:
            number = float(value)
        except ValueError:
            return {}
        out[key] = int(number) if re.fullmatch(r"-?\d+", value) else number
    return out


def ses_level(y: np.ndarray, available: np.ndarray, start: int, *, alpha: float = LEVEL_ALPHA) -> np.ndarray:
    """Simple exponential smoothing of demand per period, as the expected demand of each period.

    ``level[t]`` is the smoothed demand known before period ``t``: the level
    starts at the first demand ``y[start]`` and moves ``alpha`` of the way to
    each later available period's demand; unavailable periods leave it
    unchanged. NaN up to and including ``start``.

    Examples
    --------
    >>> ses_level(np.array([0., 4., 0., 2.]), np.ones(4, bool), 1, alpha=0.5).tolist()
    [nan, nan, 4.0, 2.0]
    """
    n = len(y)
    level = np.full(n, np.nan)
    if start >= n:
        return level
    current = float(y[start])
    for t in range(start + 1, n):
        level[t] = current
        if available[t]:
            current += alpha * (float(y[t]) - current)
    return level


def _method_level(y, available, start, method: str, params: dict, points: int, season_length: int):
    """One-step forecasts of ``method`` at up to ``points`` origins, or None if it cannot be had.

    Row ``k`` of the block is the history before origin ``t_k``, right-aligned
    so every row has the same length; the padding is marked unavailable, so
    the method reads each row as the history up to its origin. The method is
    run with the item's fitted parameters, or refitted at each origin when
    those are not options of the method (the fitted zero-inflated
    distributions, for example). Returns (origins, level, how).
    """
    from . import methods as registry

    fit = getattr(registry, "fit", None)
    if fit is None or method not in getattr(registry, "METHODS", ()):
        return None
    n = len(y)
    if n - start < 3:
        return None
    origins = np.unique(np.linspace(start + 1, n - 1, min(points, n - 1 - start)).round().astype(np.int64))
    block = np.zeros((len(origins), n))
    ok = np.zeros((len(origins), n), dtype=bool)
    for k, t in enumerate(origins):
        block[k, n - t:] = y[:t]
        ok[k, n - t:] = available[:t]
    extra = {"season_length": season_length} if method == "seasonal_mean" and season_length else {}
    starts = first_demand_offsets(block)
    attempts = [({**extra, **params}, "with its fitted parameters")] if params else []
    for options, how in attempts + [(extra, "refitted at each point" if params else "")]:
        try:
            fitted = fit(method, block, starts, ok, horizon=1, **options)
        except (InputError, TypeError, ValueError):
            continue
        level = np.asarray(fitted.mean, dtype=float)[:, 0]
        if np.isfinite(level).any():
            return origins, level, how
    return None


def _fitted_level(y, available, start, method, params_text, points: int, season_length: int = 0):
    """(x, level, legend text) for an item page."""
    if method:
        found = _method_level(y, available, start, str(method), _parse_parameters(params_text), points,
                              season_length)
        if found is not None:
            x, level, how = found
            return x, level, f"fitted level: one-step forecast of {method} {how}".rstrip()
    level = ses_level(y, available, start)
    return np.arange(len(y)), level, f"smoothed level: exponential smoothing of demand, α = {LEVEL_ALPHA:g}"


# ------------------------------------------------------------------ sections


@dataclass
class _Context:
    run: RunOutputs
    cutoffs: tuple[float, float]
    rule: str
    top_items: int
    max_item_pages: int
    table_rows: int
    level_points: int
    volume: pd.Series | None = None
    price: pd.Series | None = None
    pages: dict[str, str] = field(default_factory=dict)  # item -> anchor id
    rows: dict[str, int] = field(default_factory=dict)  # item -> row of the history
    period_labels: list[str] = field(default_factory=list)
    canvas: _ItemCanvas | None = None


def _item_figures(run: RunOutputs) -> tuple[pd.Series | None, pd.Series | None]:
    """Per-item volume and unit price (indexed by item label) where known."""
    volume = price = None
    h = run.history
    if h is not None:
        labels = pd.Index([str(i) for i in h.items])
        volume = pd.Series(h.values.sum(axis=1), index=labels)
        if h.attributes is not None and "unit_price" in h.attributes.columns:
            price = pd.Series(pd.to_numeric(h.attributes["unit_price"], errors="coerce").to_numpy(),
                              index=labels)
    patterns = run.get("patterns")
    if volume is None and patterns is not None and "volume" in patterns.columns:
        volume = pd.to_numeric(patterns["volume"], errors="coerce").set_axis(patterns["item"]).groupby(level=0).first()
    stock = run.get("stock")
    if price is None and stock is not None and "unit_price" in stock.columns:
        price = pd.to_numeric(stock["unit_price"], errors="coerce").set_axis(stock["item"]).groupby(level=0).first()
    return volume, price


def _classes(run: RunOutputs) -> pd.DataFrame | None:
    """The per-item pattern table: patterns.csv, else the pattern columns of the audit."""
    for name in ("patterns", "audit"):
        frame = run.get(name)
        if frame is not None:
            return frame.drop_duplicates("item")
    return None


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
        facts = []
        if attrs is not None and item in attrs.index:
            for c, v in attrs.loc[item].items():
                if not pd.isna(v):
                    facts.append((str(c).replace("_", " "), _num(v) if isinstance(v, (int, float, np.number)) else escape(str(v))))
        c = classes.get(item) or {}
        src = a or c
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
        s = stock.get(item)
        if s:
            parts = [f"{label} {_num(s[k])}" for k, label in (
                ("reorder_point", "reorder point"), ("order_up_to", "order-up-to"),
                ("safety_stock", "safety stock"), ("order_quantity", "order now")) if k in s and not pd.isna(s[k])]
            if "expected_fill_rate" in s and not pd.isna(s["expected_fill_rate"]):
                parts.append(f"expected fill rate {_share(float(s['expected_fill_rate']))}")
            if parts:
                facts.append(("stock target", "; ".join(parts)))
        out.append('<dl class="facts">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in facts) + "</dl>")
        out.append(_item_chart(ctx, item, a, by_item.get(item)))
        if item in scores_by_item:
            sc = scores_by_item[item].drop(columns=[c for c in ("item", "pattern") if c in item_scores.columns])
            sc = sc.set_index("method").reindex(_method_order(sc["method"])).reset_index()
            out.append("<details><summary>Backtest scores of this item</summary>" + _table(sc) + "</details>")
        out.append("</article>")
    out.append("</section>")
    return "".join(out)


def _indexed(frame: pd.DataFrame | None) -> dict[str, dict]:
    if frame is None:
        return {}
    first = frame.drop_duplicates("item")
    return {str(rec["item"]): rec for rec in first.to_dict("records")}


def _attributes(h: DemandPanel | None) -> pd.DataFrame | None:
    if h is None or h.attributes is None:
        return None
    return h.attributes.set_axis([str(i) for i in h.items])


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


_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;margin:0;color:#222;
background:#fafafa;line-height:1.4}
header{background:#23395d;color:#fff;padding:1rem 2rem}header h1{margin:0 0 .3rem 0;font-size:1.5rem}
header nav a{color:#cfe0ff;margin-right:1rem}
main{padding:0 2rem 3rem 2rem;max-width:1200px}
section{background:#fff;border:1px solid #e2e2e2;border-radius:6px;padding:.5rem 1.5rem 1rem;margin:1.2rem 0}
h2{border-bottom:2px solid #23395d;padding-bottom:.2rem}
.note{color:#555;font-size:.92rem;max-width:60rem}
.caution{background:#fff4e5;border-left:5px solid #e08600;padding:.6rem 1rem;max-width:60rem}
.warn{color:#a33c00}
dl.facts{display:grid;grid-template-columns:max-content auto;gap:.15rem 1rem;font-size:.92rem}
dl.facts dt{font-weight:600;color:#444}dl.facts dd{margin:0}
figure.chart{margin:.6rem 0}figure.chart img{max-width:100%;height:auto;display:block}
table.data{border-collapse:collapse;font-size:.82rem;margin:.5rem 0}
table.data th,table.data td{border-bottom:1px solid #e6e6e6;padding:.2rem .5rem;text-align:left;vertical-align:top}
table.data td{white-space:nowrap}table.data td.w{white-space:normal;min-width:26rem}
table.data td.n{text-align:right;font-variant-numeric:tabular-nums}
table.data thead th{background:#eef2f8;position:sticky;top:0}
table.sortable th button{font:inherit;font-weight:600;background:none;border:0;padding:0;cursor:pointer;color:#23395d}
table.sortable th[aria-sort=ascending] button::after{content:" \\25B2"}
table.sortable th[aria-sort=descending] button::after{content:" \\25BC"}
.scroll{max-height:75vh;overflow:auto;border:1px solid #e2e2e2}
article.item{border-top:1px solid #ddd;padding-top:.4rem}
nav.item-index a{margin-right:.6rem;font-size:.85rem}
ul.legend{list-style:none;padding:0;margin:.2rem 0;font-size:.8rem;display:flex;flex-wrap:wrap;gap:.2rem 1.2rem}
ul.legend .key{display:inline-block;width:1.4em;height:.8em;margin-right:.35em;vertical-align:middle}
ul.legend .key.box{background:var(--c)}ul.legend .key.bar{border-left:3px solid var(--c);height:1em;width:.6em}
ul.legend .key.line{border-top:3px solid var(--c);height:0}
input[type=search]{font:inherit;padding:.2rem .4rem;width:22rem}
"""

_JS = """
(function () {
  var table = document.getElementById("audit-table");
  if (!table) { return; }
  var body = table.tBodies[0];
  var rows = Array.prototype.slice.call(body.rows);
  var text = rows.map(function (r) { return r.textContent.toLowerCase(); });
  var heads = table.tHead.rows[0].cells;
  Array.prototype.forEach.call(heads, function (th, col) {
    th.querySelector("button").addEventListener("click", function () {
      var up = th.getAttribute("aria-sort") !== "ascending";
      Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", up ? "ascending" : "descending");
      var numeric = th.getAttribute("data-type") === "number";
      var keyed = rows.map(function (r, i) {
        var cell = r.cells[col];
        var raw = cell.getAttribute("data-v");
        var key = numeric ? (raw === null || raw === "" ? NaN : parseFloat(raw)) : cell.textContent;
        return { row: r, key: key, i: i };
      });
      keyed.sort(function (a, b) {
        var d;
        if (numeric) {
          var an = isNaN(a.key), bn = isNaN(b.key);
          if (an || bn) { return an === bn ? a.i - b.i : (an ? 1 : -1); }
          d = a.key - b.key;
        } else {
          d = a.key.localeCompare(b.key, undefined, { numeric: true });
        }
        return (up ? d : -d) || a.i - b.i;
      });
      var frag = document.createDocumentFragment();
      keyed.forEach(function (k) { frag.appendChild(k.row); });
      body.appendChild(frag);
    });
  });
  var box = document.getElementById("audit-filter");
  var shown = document.getElementById("audit-shown");
  box.addEventListener("input", function () {
    var words = box.value.toLowerCase().split(/\\s+/).filter(Boolean);
    var n = 0;
    rows.forEach(function (r, i) {
      var hit = words.every(function (w) { return text[i].indexOf(w) !== -1; });
      r.hidden = !hit;
      if (hit) { n += 1; }
    });
    shown.textContent = n.toLocaleString("en") + " of " + rows.length.toLocaleString("en") + " items shown";
  });
})();
"""


def _render(run: RunOutputs, *, title, cutoffs, rule, top_items, max_item_pages, table_rows,
            level_points) -> str:
    ctx = _Context(run=run, cutoffs=cutoffs, rule=rule, top_items=top_items,
                   max_item_pages=max_item_pages, table_rows=table_rows, level_points=level_points)
    ctx.volume, ctx.price = _item_figures(run)
    if run.history is not None:
        ctx.rows = {str(item): k for k, item in enumerate(run.history.items)}
        ctx.period_labels = [str(p) for p in period_labels(run.history.periods)]
    ctx.canvas = _ItemCanvas()
    shown, _, _ = _choose_pages(ctx)
    ctx.pages = {item: f"item-{k + 1}" for k, item in enumerate(shown)}
    sections = [
        ("overview", "Overview", _overview),
        ("patterns", "Demand patterns", _patterns_section),
        ("backtest", "Backtest", _backtest_section),
        ("stock", "Stock targets", _stock_section),
        ("items", "Item pages", _items_section),
        ("audit", "Audit table", _audit_section),
    ]
    body = "".join(func(ctx) for _, _, func in sections)
    nav = "".join(f'<a href="#{key}">{label}</a>' for key, label, _ in sections)
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{escape(title)}</title><style>{_CSS}</style></head><body>"
        f"<header><h1>{escape(title)}</h1><p>Run folder: <code>{escape(str(run.folder))}</code></p>"
        f"<nav>{nav}</nav></header><main>{body}</main><script>{_JS}</script></body></html>\n"
    )

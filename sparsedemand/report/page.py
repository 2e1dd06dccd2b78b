"""The page: :func:`build_report` checks its options, loads the run and assembles the sections.

The stylesheet and the script of the audit table are package data
(``static/report.css``, ``static/report.js``), inlined so the file needs no
server or network.

Examples
--------
>>> build_report("demo-output", out="demo-output/report.html")  # doctest: +SKIP
PosixPath('demo-output/report.html')
"""

from __future__ import annotations

import math
import os
from html import escape
from importlib.resources import files
from numbers import Integral
from pathlib import Path

from ..errors import InputError
from ..io import period_labels, write_text
from .backtest import _backtest_section
from .charts import _ItemCanvas
from .context import _Context, _item_figures
from .items import _audit_section, _choose_pages, _items_section
from .load import RunOutputs, load_run
from .overview import _overview, _patterns_section
from .targets import _stock_section


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
        The run folder (see :mod:`sparsedemand.report` for its tables).
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
        f"<title>{escape(title)}</title><style>\n{_static('report.css')}</style></head><body>"
        f"<header><h1>{escape(title)}</h1><p>Run folder: <code>{escape(str(run.folder))}</code></p>"
        f"<nav>{nav}</nav></header><main>{body}</main><script>\n{_static('report.js')}</script></body></html>\n"
    )


def _static(name: str) -> str:
    """A file of ``static/``, as inlined in the page (after a line break of its own)."""
    return files(__package__).joinpath("static", name).read_text(encoding="utf-8")

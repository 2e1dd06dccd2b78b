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

Modules
-------
``load``      the run folder's tables, ``run.json`` and the demand history
``tables``    HTML pieces: numbers for people, data tables, notes
``charts``    matplotlib figures embedded as PNG
``level``     the fitted level on the item pages
``context``   what every section reads (run, options, per-item figures)
``overview``, ``backtest``, ``targets``, ``items``   one module per group of sections
``page``      :func:`build_report`: options, the sections, the page with ``static/`` inlined

Examples
--------
>>> from sparsedemand.report import build_report
>>> build_report("demo-output")  # doctest: +SKIP
PosixPath('demo-output/report.html')
"""

from __future__ import annotations

from ..evaluate import BASELINES
from ..stock import STOCK_CAUTION
from .load import RUN_TABLES, RunOutputs, load_run
from .level import LEVEL_ALPHA, ses_level
from .page import build_report

# Internals the report tests check directly.
from .backtest import _router_section  # noqa: F401
from .charts import _method_colours  # noqa: F401
from .level import _fitted_level, _method_level, _parse_parameters  # noqa: F401
from .overview import _pattern_summary  # noqa: F401

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

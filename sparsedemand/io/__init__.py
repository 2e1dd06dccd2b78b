"""Reading, validating and writing demand data.

Input comes in two layouts:

* **long**: one row per item and period, with columns for the item label, the
  period and the quantity (default names ``item``, ``period``, ``quantity``),
  an optional availability column (a 0/1 in-stock flag or an on-hand quantity;
  a value <= 0 means the item was not available) and optional per-item
  attribute columns (``location``, ``category``, ``unit_price`` and any named
  with ``attributes=``);
* **wide**: one row per item, one column per period.

Calendar rules: the calendar runs from the earliest to the latest period in the
input. Periods missing inside an item's span (from its first row to the end of
the calendar) are true zeros and are filled. Several rows for the same item and
period are summed. Periods are ISO dates (``2025-03-14``), months
(``2025-03``), ISO weeks (``2025-W11``) or plain integers; one file uses one
kind. Dates are taken at their native step (day, week or month, inferred) and
may be aggregated to a coarser ``frequency``; a bucket is available if any of
its sub-periods was.

Every problem raises :class:`~sparsedemand.errors.InputError` with a one-line
message naming the file, row (counting data rows from 1, header excluded),
item, column or option at fault.

Modules: :mod:`.columns` (``Columns``, ``LoadSummary``), :mod:`.calendar` (period
parsing, regrouping, labels), :mod:`.layouts` (the long and wide layouts),
:mod:`.readers` (files and DataFrames to panels, ``as_panel``), :mod:`.writing`
(atomic writers, staged output folders).
"""

from __future__ import annotations

from .calendar import FREQUENCIES, period_labels
from .columns import AVAILABILITY_GUESSES, KNOWN_ATTRIBUTES, Columns, LoadSummary
from .layouts import _availability_column, _require
from .readers import _first_line, as_panel, from_frame, load_frame, read_demand
from .writing import staged_output, write_table, write_text

__all__ = [
    "Columns",
    "LoadSummary",
    "read_demand",
    "from_frame",
    "as_panel",
    "load_frame",
    "period_labels",
    "write_table",
    "write_text",
    "staged_output",
    "FREQUENCIES",
]

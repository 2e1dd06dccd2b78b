"""HTML pieces of the report: numbers for people, data tables, notes.

Examples
--------
>>> _num(1234.6), _num(0.012345), _share(0.25)
('1,235', '0.0123', '25.0%')
"""

from __future__ import annotations

import math
from html import escape

import numpy as np
import pandas as pd

from .load import RUN_TABLES


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

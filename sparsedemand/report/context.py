"""What every report section reads: the run, the options and per-item figures.

Examples
--------
>>> _indexed(pd.DataFrame({"item": ["a", "a"], "x": [1, 2]}))
{'a': {'item': 'a', 'x': 1}}
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from ..panel import DemandPanel
from .charts import _ItemCanvas
from .load import RunOutputs


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


def _indexed(frame: pd.DataFrame | None) -> dict[str, dict]:
    if frame is None:
        return {}
    first = frame.drop_duplicates("item")
    return {str(rec["item"]): rec for rec in first.to_dict("records")}


def _attributes(h: DemandPanel | None) -> pd.DataFrame | None:
    if h is None or h.attributes is None:
        return None
    return h.attributes.set_axis([str(i) for i in h.items])

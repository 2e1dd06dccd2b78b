"""The input as one panel per item partition, on the calendar of the whole input.

The client finds the calendar's first and last period from one row per
distinct period value, numbers every row by its position in the whole input,
and shuffles rows by a hash of the cleaned item label. Each worker builds its
partition's :class:`~sparsedemand.panel.DemandPanel` with
:func:`sparsedemand.io.from_frame`, with a hidden placeholder item at the
calendar's ends, and reports its load totals; the client adds them up.
"""

from __future__ import annotations

import dataclasses
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .. import io as _io
from ..errors import InputError
from ..io import Columns, LoadSummary, from_frame
from ..panel import DemandPanel
from .cluster import gather, threads

__all__ = ["Part", "Loaded", "load_input"]

#: Label of the hidden item that pins every partition to the global calendar.
_PLACEHOLDER = "\x00sparsedemand-calendar"
#: Hidden column with each row's position in the whole input.
_ROW = "__sparsedemand_row__"

@dataclass(frozen=True)
class _Load:
    """How a partition is turned into a panel."""

    source: str
    columns: Columns
    frequency: str | None
    net_returns: bool
    first: object  # raw period values of the global calendar's ends
    last: object
    availability: str | None
    native_periods: int



@dataclass
class Part:
    """A partition's panel (kept on its worker) and what the client needs to know of it."""

    panel: DemandPanel | None
    info: dict



@dataclass
class Loaded:
    """The input loaded on the workers: one panel per partition, and what the client knows of them."""

    parts: list  # futures of Part
    items: pd.Index
    summary: LoadSummary
    calendar: DemandPanel
    name: str
    n_parts: int


def load_input(client, source, columns: Columns, frequency, net_returns, partitions) -> Loaded:
    """Read the input, find the global calendar, shuffle rows by item and build each partition's panel."""
    frame, name = _dask_frame(source, columns)
    n_parts = partitions or max(threads(client), frame.npartitions)
    offsets, firsts = _scan(frame, columns.period)
    load, summary, calendar = _prepare_calendar(firsts, frame._meta, name, columns, frequency, net_returns)
    shuffled = _by_item(_numbered(frame, columns.item, offsets), columns.item, n_parts)
    frames = client.compute(shuffled.to_delayed())
    parts = client.map(_load_part, frames, [load] * n_parts, pure=False)
    infos = gather(client, parts, _info_of)
    del frames
    items = pd.Index([x for info in infos for x in info["items"]], name="item")
    summary = _summary(summary, infos, items, load, calendar)
    return Loaded(parts, items, summary, calendar, name, n_parts)



def _dask_frame(source, columns: Columns):
    """The input as a Dask DataFrame, and the name that messages give it."""
    import dask.dataframe as dd

    if isinstance(source, pd.DataFrame):
        frame, name = dd.from_pandas(source, npartitions=1, sort=False), "DataFrame"
    elif isinstance(source, dd.DataFrame):
        frame, name = source, "Dask DataFrame"
    elif isinstance(source, (str, os.PathLike)):
        name = str(source)
        path = Path(source)
        if not path.exists():
            raise InputError(f"{name}: no such file")
        if path.is_file() and path.suffix.lower() not in (".parquet", ".pq"):
            raise InputError(f"{name}: the dask engine reads Parquet (a .parquet file or a dataset folder)")
        try:
            frame = dd.read_parquet(path)
        except Exception as exc:  # pyarrow raises many types
            raise InputError(f"{name}: cannot read as Parquet ({_io._first_line(exc)})") from None
    else:
        raise InputError(f"source must be a Parquet path or a DataFrame in long layout, got {type(source).__name__}")
    _io._require(frame, (columns.item, columns.period, columns.quantity), name, columns)
    return frame, name


def _scan(frame, period: str):
    """One pass over the input: rows per partition, and the first row of every distinct period value."""
    import dask

    meta = pd.DataFrame({period: frame._meta[period], "_part": np.zeros(0, np.int64),
                         "_local": np.zeros(0, np.int64)})
    lengths, firsts = dask.compute(frame.map_partitions(len), frame[[period]].map_partitions(
        _first_rows, period, meta=meta))
    offsets = np.concatenate([[0], np.cumsum(np.asarray(lengths, dtype=np.int64))[:-1]])
    firsts = firsts.reset_index(drop=True)
    firsts[_ROW] = offsets[firsts["_part"].to_numpy()] + firsts["_local"].to_numpy()
    firsts = firsts.sort_values(_ROW, kind="stable").drop_duplicates(period, keep="first")
    return offsets, firsts[[period, _ROW]].reset_index(drop=True)


def _first_rows(frame: pd.DataFrame, period: str, partition_info=None) -> pd.DataFrame:
    """The first row of every distinct period value (missing values included) in one partition."""
    out = frame[[period]].reset_index(drop=True)
    out["_part"] = partition_info["number"] if partition_info else 0
    out["_local"] = np.arange(len(out), dtype=np.int64)
    return out.drop_duplicates(period, keep="first")


def _numbered(frame, item: str, offsets: np.ndarray):
    """The input with each row's position in the whole input, and item labels stripped."""
    meta = frame._meta.copy()
    meta[item] = meta[item].astype(object)
    meta[_ROW] = np.zeros(0, dtype=np.int64)
    return frame.map_partitions(_number_rows, item, offsets, meta=meta)


def _number_rows(frame: pd.DataFrame, item: str, offsets, partition_info=None) -> pd.DataFrame:
    """Add each row's position in the whole input; strip item labels so equal labels hash alike."""
    number = partition_info["number"] if partition_info else 0
    out = frame.reset_index(drop=True)
    raw = out[item]
    labels = raw.astype(str).str.strip().astype(object)
    out[item] = labels.where(raw.notna().to_numpy(), None)
    out[_ROW] = np.arange(len(out), dtype=np.int64) + int(offsets[number])
    return out


def _prepare_calendar(firsts: pd.DataFrame, meta: pd.DataFrame, name: str, columns: Columns, frequency,
                      net_returns):
    """The global calendar, found by the loader itself from one row per distinct period value."""
    period = columns.period
    if len(firsts) == 0:
        raise InputError(f"{name}: no data rows")
    availability = _io._availability_column(meta, columns, name)
    probe = pd.DataFrame({"item": [f"p{i}" for i in range(len(firsts))], "period": firsts[period],
                          "quantity": np.zeros(len(firsts))})
    rows = firsts[_ROW].to_numpy()
    try:
        native = from_frame(probe, source=name, layout="long")
        calendar, summary = from_frame(probe, source=name, layout="long", frequency=frequency,
                                       net_returns=net_returns, return_summary=True)
    except InputError as exc:
        raise InputError(_input_rows(str(exc), rows)) from None
    first = firsts[period].iloc[int(np.flatnonzero(native.introduced == 0)[0])]
    last = firsts[period].iloc[int(np.flatnonzero(native.introduced == native.n_periods - 1)[0])]
    load = _Load(source=name, columns=columns, frequency=frequency, net_returns=net_returns, first=first, last=last,
                 availability=availability, native_periods=native.n_periods)
    summary = dataclasses.replace(summary, source=name)
    return load, summary, calendar


def _by_item(frame, item: str, n_parts: int):
    """Every row of an item in the same partition: hash of the label modulo ``n_parts``."""
    return frame.shuffle(on=item, npartitions=n_parts, ignore_index=True)

def _load_part(frame: pd.DataFrame, load: _Load) -> Part:
    """Build a partition's panel on the global calendar, in the input's row order."""
    if len(frame) == 0:
        return Part(None, {"items": [], "rows": 0, "rows_merged": 0, "zeros_filled": 0, "returns_clipped": 0,
                            "unavailable": 0, "cells": 0})
    frame = frame.sort_values(_ROW, kind="stable").reset_index(drop=True)
    rows = frame[_ROW].to_numpy()
    data = _with_placeholder(frame.drop(columns=[_ROW]), load)
    try:
        panel, summary = from_frame(data, source=load.source, layout="long", columns=load.columns,
                                    frequency=load.frequency, net_returns=load.net_returns, return_summary=True)
    except InputError as exc:
        raise InputError(_input_rows(str(exc), rows)) from None
    keep = np.asarray(panel.items != _PLACEHOLDER)
    panel = panel.subset(keep)
    placeholder_rows = len(data) - len(frame)
    info = {
        "items": list(panel.items),
        "rows": len(frame),
        "rows_merged": summary.rows_merged,
        "zeros_filled": summary.zeros_filled - (load.native_periods - placeholder_rows),
        "returns_clipped": summary.returns_clipped,
        "unavailable": int((~panel.mask()).sum()) if panel.available is not None else 0,
        "cells": panel.n_items * panel.n_periods,
    }
    return Part(panel, info)


def _with_placeholder(frame: pd.DataFrame, load: _Load) -> pd.DataFrame:
    """Append the placeholder item's rows at the calendar's first and last period (attributes of row 1)."""
    c = load.columns
    ends = [load.first] if _same(load.first, load.last) else [load.first, load.last]
    extra = frame.iloc[[0] * len(ends)].copy()
    extra[c.item] = _PLACEHOLDER
    extra[c.period] = pd.Series(ends, index=extra.index).astype(frame[c.period].dtype)
    extra[c.quantity] = 0
    if load.availability is not None:
        extra[load.availability] = 1
    return pd.concat([frame, extra], ignore_index=True)


def _same(a, b) -> bool:
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False


def _info_of(part: Part) -> dict:
    return part.info

def _summary(base: LoadSummary, infos: list, items: pd.Index, load: _Load, calendar: DemandPanel) -> LoadSummary:
    cells = sum(i["cells"] for i in infos)
    return dataclasses.replace(
        base,
        items=len(items),
        rows_read=sum(i["rows"] for i in infos),
        rows_merged=sum(i["rows_merged"] for i in infos),
        zeros_filled=sum(i["zeros_filled"] for i in infos),
        returns_clipped=sum(i["returns_clipped"] for i in infos),
        unavailable_share=float(sum(i["unavailable"] for i in infos) / cells) if cells else 0.0,
        availability_column=load.availability,
    )



_ROW_NUMBER = re.compile(r"\brow (\d+)")


def _input_rows(message: str, rows: np.ndarray) -> str:
    """Row numbers of a loader message (1-based in the loaded frame) as rows of the whole input."""

    def swap(match):
        k = int(match.group(1)) - 1
        if 0 <= k < len(rows):
            return f"row {int(rows[k]) + 1}"
        return "a placeholder row"

    return _ROW_NUMBER.sub(swap, message)

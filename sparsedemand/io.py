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
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import numpy as np
import pandas as pd

from .errors import InputError
from .panel import DemandPanel, _plain

__all__ = [
    "Columns",
    "LoadSummary",
    "read_demand",
    "from_frame",
    "load_frame",
    "write_table",
    "staged_output",
    "FREQUENCIES",
]

FREQUENCIES = ("day", "week", "month")
_RANK = {"day": 0, "week": 1, "month": 2}
KNOWN_ATTRIBUTES = ("location", "category", "unit_price")
AVAILABILITY_GUESSES = ("in_stock", "on_hand")

_PATTERNS = {
    "day": re.compile(r"^\d{4}-\d{2}-\d{2}(?:[ T]00:00(?::00(?:\.0+)?)?)?$"),
    "month": re.compile(r"^\d{4}-\d{2}$"),
    "week": re.compile(r"^\d{4}-W\d{2}$"),
    "integer": re.compile(r"^-?\d+$"),
}
_EXPECTED = "expected YYYY-MM-DD, YYYY-MM, YYYY-Www or an integer"


@dataclass(frozen=True)
class Columns:
    """Names of the input columns.

    Parameters
    ----------
    item, period, quantity : str
        Required columns of the long layout (``item`` also names the label
        column of the wide layout).
    availability : str or None
        A 0/1 in-stock flag or an on-hand quantity; ``None`` looks for
        ``in_stock`` or ``on_hand`` and uses neither if absent.
    location, category, unit_price : str
        Optional per-item attributes, used when present.
    attributes : tuple of str
        Further per-item attribute columns to keep (for example a lead time).

    Examples
    --------
    >>> Columns(quantity="units").quantity
    'units'
    """

    item: str = "item"
    period: str = "period"
    quantity: str = "quantity"
    availability: str | None = None
    location: str = "location"
    category: str = "category"
    unit_price: str = "unit_price"
    attributes: tuple[str, ...] = ()


@dataclass
class LoadSummary:
    """What the loader did, for the user to check."""

    source: str
    layout: str
    items: int = 0
    periods: int = 0
    frequency: str = ""
    first_period: str = ""
    last_period: str = ""
    rows_read: int = 0
    rows_merged: int = 0
    zeros_filled: int = 0
    returns_clipped: int = 0
    partial_buckets_dropped: list[str] = field(default_factory=list)
    unavailable_share: float = 0.0
    availability_column: str | None = None

    def text(self) -> str:
        """Summary lines for stderr."""
        lines = [
            f"loaded {self.source} ({self.layout} layout): {self.items:,} items x "
            f"{self.periods:,} {self.frequency} periods, {self.first_period} to {self.last_period}",
            f"  rows read {self.rows_read:,}; duplicate rows merged {self.rows_merged:,}; "
            f"zeros filled {self.zeros_filled:,}",
        ]
        if self.availability_column:
            lines.append(
                f"  availability from '{self.availability_column}': "
                f"{self.unavailable_share:.1%} of item-periods out of stock"
            )
        else:
            lines.append("  no availability column: every period counted as in stock")
        if self.returns_clipped:
            lines.append(f"  returns netted; {self.returns_clipped:,} item-periods clipped at zero")
        if self.partial_buckets_dropped:
            lines.append("  partial periods dropped: " + ", ".join(self.partial_buckets_dropped))
        return "\n".join(lines)


# ----------------------------------------------------------------- reading


def load_frame(path: str | os.PathLike, *, text_columns: tuple[str, ...] = ()) -> pd.DataFrame:
    """Read a CSV or Parquet file (or Parquet dataset directory) into a DataFrame.

    Columns listed in ``text_columns`` are read as strings from CSV so that
    labels such as ``007`` keep their leading zeros.
    """
    p = Path(path)
    name = str(path)
    if not p.exists():
        raise InputError(f"{name}: no such file")
    if p.is_file() and p.stat().st_size == 0:
        raise InputError(f"{name}: the file is empty")
    suffix = p.suffix.lower()
    if p.is_dir() or suffix in (".parquet", ".pq"):
        try:
            return pd.read_parquet(p)
        except Exception as exc:  # pyarrow raises many types
            raise InputError(f"{name}: cannot read as Parquet ({_first_line(exc)})") from None
    if suffix not in (".csv", ".txt", ".gz", ".tsv"):
        raise InputError(f"{name}: unknown file type {suffix!r} (use .csv or .parquet)")
    sep = "\t" if suffix == ".tsv" else ","
    try:
        # The raw header: pandas would silently rename a repeated column to "name.1".
        header = pd.read_csv(p, sep=sep, header=None, nrows=1, dtype=str).iloc[0]
        names = [str(c) for c in header if isinstance(c, str)]
        repeated = pd.Index(names)[pd.Index(names).duplicated()]
        if len(repeated):
            raise InputError(f"{name}: column {repeated[0]!r} appears twice in the header")
        dtypes = {c: str for c in text_columns if c in names}
        frame = pd.read_csv(p, sep=sep, dtype=dtypes, keep_default_na=True)
    except pd.errors.EmptyDataError:
        raise InputError(f"{name}: the file is empty") from None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        if isinstance(exc, InputError):
            raise
        raise InputError(f"{name}: cannot read as CSV ({_first_line(exc)})") from None
    if not isinstance(frame.index, pd.RangeIndex):
        # pandas takes the first field as an index when data rows are longer than the header.
        raise InputError(
            f"{name}, row 1: more fields than the header's {len(frame.columns)} columns "
            "(check the separator and quoting)"
        )
    return frame


def read_demand(
    path: str | os.PathLike,
    *,
    layout: str = "auto",
    columns: Columns | None = None,
    frequency: str | None = None,
    net_returns: bool = False,
) -> tuple[DemandPanel, LoadSummary]:
    """Read a demand file into a :class:`DemandPanel`.

    Parameters
    ----------
    path : path-like
        CSV file, Parquet file or Parquet dataset directory.
    layout : {"auto", "long", "wide"}
        ``auto`` picks long when the period and quantity columns exist.
    columns : Columns, optional
        Column names; defaults to ``item``, ``period``, ``quantity``.
    frequency : {"day", "week", "month"}, optional
        Aggregate to this bucket; must not be finer than the data.
    net_returns : bool, default False
        Allow negative quantities (returns), net them against sales within a
        period and clip the net at zero. Otherwise a negative quantity is an
        error.

    Returns
    -------
    panel : DemandPanel
    summary : LoadSummary

    Examples
    --------
    >>> panel, summary = read_demand("sales.csv")  # doctest: +SKIP
    """
    columns = columns or Columns()
    # Labels and text attributes stay text, so "007" keeps its leading zeros.
    frame = load_frame(
        path, text_columns=(columns.item, columns.period, columns.location, columns.category)
    )
    return _from_frame(
        frame,
        source=str(path),
        layout=layout,
        columns=columns,
        frequency=frequency,
        net_returns=net_returns,
    )


def from_frame(
    frame: pd.DataFrame,
    *,
    source: str = "DataFrame",
    layout: str = "auto",
    columns: Columns | None = None,
    frequency: str | None = None,
    net_returns: bool = False,
    return_summary: bool = False,
):
    """Build a panel from a long or wide DataFrame (see :func:`read_demand`).

    A DataFrame with neither an item column nor period and quantity columns is
    taken as wide with the items on its index.

    Examples
    --------
    >>> long = pd.DataFrame({"item": ["A", "A", "B"], "period": [0, 2, 1],
    ...                      "quantity": [1.0, 3.0, 2.0]})
    >>> from_frame(long).values
    array([[1., 0., 3.],
           [0., 2., 0.]])
    """
    columns = columns or Columns()
    if layout == "auto" and columns.item not in frame.columns and not {
        columns.period,
        columns.quantity,
    } <= set(frame.columns):
        frame = frame.rename_axis(columns.item).reset_index()
        layout = "wide"
    panel, summary = _from_frame(
        frame,
        source=source,
        layout=layout,
        columns=columns,
        frequency=frequency,
        net_returns=net_returns,
    )
    return (panel, summary) if return_summary else panel


def _from_frame(frame, *, source, layout, columns, frequency, net_returns):
    if layout not in ("auto", "long", "wide"):
        raise InputError(f"--layout must be auto, long or wide, got {layout!r}")
    if frequency is not None and frequency not in FREQUENCIES:
        raise InputError(f"--frequency must be day, week or month, got {frequency!r}")
    if len(frame.columns) == 0:
        raise InputError(f"{source}: the file is empty")
    if layout == "auto":
        long_cols = {columns.period, columns.quantity}
        layout = "long" if long_cols <= set(map(str, frame.columns)) else "wide"
        if layout == "wide" and not _looks_wide(frame, columns):
            _require(frame, (columns.item, columns.period, columns.quantity), source, columns)
    if layout == "long":
        return _read_long(frame, source, columns, frequency, net_returns)
    return _read_wide(frame, source, columns, frequency)


def _looks_wide(frame: pd.DataFrame, columns: Columns) -> bool:
    if columns.item not in frame.columns:
        return False
    others = [str(c) for c in frame.columns if c != columns.item and c not in _attr_names(columns)]
    return bool(others) and all(_label_kind(c) is not None for c in others)


def _attr_names(columns: Columns) -> list[str]:
    names = [columns.location, columns.category, columns.unit_price, *columns.attributes]
    return list(dict.fromkeys(names))


_OPTION_OF = {"item": "--item-column", "period": "--period-column", "quantity": "--quantity-column"}


def _require(frame, names, source, columns) -> None:
    found = ", ".join(map(str, frame.columns)) or "none"
    for role, name in zip(("item", "period", "quantity"), names):
        if name not in frame.columns:
            raise InputError(
                f"{source}: missing column '{name}' (columns found: {found}); "
                f"name the {role} column with {_OPTION_OF[role]}"
            )


# ---------------------------------------------------------------- periods


def _label_kind(label: str) -> str | None:
    for kind, pattern in _PATTERNS.items():
        if pattern.match(label):
            return kind
    return None


@dataclass(frozen=True)
class _Calendar:
    """Parsed periods: an integer code per input row and the calendar they index."""

    codes: np.ndarray  # int64 offset from the calendar start, one per row
    periods: pd.Index
    native: str  # "day" | "week" | "month" | "integer"


def _parse_periods(values, source: str, column: str, row_offset: int = 1) -> _Calendar:
    """Parse a period column; rows are numbered from ``row_offset``."""
    series = pd.Series(values)
    if isinstance(series.dtype, pd.PeriodDtype):
        return _from_period_objects(series, source, column)
    if pd.api.types.is_datetime64_any_dtype(series.dtype):
        if series.isna().any():
            row = int(np.flatnonzero(series.isna().to_numpy())[0]) + row_offset
            raise InputError(f"{source}, row {row}: missing {column}")
        dates = series.dt.tz_localize(None) if series.dt.tz is not None else series
        return _from_dates(dates.dt.normalize(), source, column, row_offset)
    if pd.api.types.is_integer_dtype(series.dtype):
        return _from_integers(series.to_numpy(np.int64))
    if pd.api.types.is_float_dtype(series.dtype):
        arr = series.to_numpy()
        bad = ~np.isfinite(arr) | (arr != np.round(arr))
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{source}, row {row + row_offset}: cannot read {column} {arr[row]!r} ({_EXPECTED})"
            )
        return _from_integers(arr.astype(np.int64))
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    if (codes < 0).any():
        row = int(np.flatnonzero(codes < 0)[0]) + row_offset
        raise InputError(f"{source}, row {row}: missing {column}")
    if len(uniques) and all(isinstance(u, pd.Period) for u in uniques):
        try:
            per = pd.PeriodIndex(list(uniques))
        except (TypeError, ValueError):
            freqs = list(dict.fromkeys(u.freqstr for u in uniques))
            raise InputError(
                f"{source}: mixed frequencies in {column}: {', '.join(freqs)}; use one calendar per file"
            ) from None
        return _from_period_objects(pd.Series(per.take(codes)), source, column)
    if len(uniques) and not isinstance(uniques[0], str):
        # date objects from Parquet, or mixed Python objects
        try:
            parsed = pd.to_datetime(pd.Series(uniques))
        except (TypeError, ValueError):
            row = int(np.flatnonzero(codes == 0)[0]) + row_offset
            raise InputError(
                f"{source}, row {row}: cannot read {column} {uniques[0]!r} ({_EXPECTED})"
            ) from None
        return _from_dates(parsed.dt.normalize().take(codes).reset_index(drop=True),
                           source, column, row_offset)
    labels = pd.Index(uniques).astype(str).str.strip()
    kinds = np.array([_label_kind(s) or "" for s in labels], dtype=object)
    bad = np.flatnonzero(kinds == "")
    if bad.size:
        row = int(np.flatnonzero(codes == bad[0])[0]) + row_offset
        raise InputError(f"{source}, row {row}: cannot read {column} {labels[bad[0]]!r} ({_EXPECTED})")
    # uniques come in order of first appearance: the first label of another kind
    # than the first row's is the earliest row that breaks the calendar.
    other = np.flatnonzero(kinds != kinds[0])
    if other.size:
        row = int(np.flatnonzero(codes == other[0])[0]) + row_offset
        first_row = int(np.flatnonzero(codes == 0)[0]) + row_offset
        raise InputError(
            f"{source}, row {row}: mixed frequencies in {column}: '{labels[other[0]]}' "
            f"({kinds[other[0]]}) after '{labels[0]}' ({kinds[0]}) in row {first_row}; "
            "use one calendar per file"
        )
    kind = kinds[0]
    if kind == "integer":
        return _from_integers(labels.astype(np.int64).to_numpy()[codes])
    try:
        if kind == "day":
            parsed = pd.to_datetime(labels.str.slice(0, 10), format="%Y-%m-%d")
        elif kind == "month":
            parsed = pd.to_datetime(labels, format="%Y-%m")
        else:
            parsed = pd.to_datetime(labels + "-1", format="%G-W%V-%u")
    except ValueError:
        for i, s in enumerate(labels):
            try:
                pd.to_datetime(s[:10] if kind == "day" else s + ("-1" if kind == "week" else ""),
                               format={"day": "%Y-%m-%d", "month": "%Y-%m", "week": "%G-W%V-%u"}[kind])
            except ValueError:
                row = int(np.flatnonzero(codes == i)[0]) + row_offset
                raise InputError(f"{source}, row {row}: cannot read {column} {s!r} (no such date)") from None
        raise
    if kind == "day":
        return _from_dates(pd.Series(parsed.take(codes)), source, column, row_offset)
    freq = "M" if kind == "month" else "W-SUN"
    per = pd.PeriodIndex(parsed, freq=freq)
    return _from_period_objects(pd.Series(per.take(codes)), source, column)


def _from_integers(arr: np.ndarray) -> _Calendar:
    lo, hi = int(arr.min()), int(arr.max())
    return _Calendar(codes=arr - lo, periods=pd.RangeIndex(lo, hi + 1), native="integer")


def _from_period_objects(series: pd.Series, source: str, column: str) -> _Calendar:
    per = pd.PeriodIndex(series)
    if per.isna().any():
        raise InputError(f"{source}: missing {column} values")
    freqstr = per.freqstr
    native = "month" if freqstr.startswith("M") else "week" if freqstr.startswith("W") else "day"
    ordinals = per.asi8
    lo, hi = int(ordinals.min()), int(ordinals.max())
    periods = pd.period_range(pd.Period(ordinal=lo, freq=per.freq), periods=hi - lo + 1, freq=per.freq)
    return _Calendar(codes=ordinals - lo, periods=periods, native=native)


def _from_dates(dates: pd.Series, source: str, column: str, row_offset: int) -> _Calendar:
    """Infer day, week or month steps from calendar dates."""
    days = dates.to_numpy("datetime64[D]").astype(np.int64)
    uniq = np.unique(days)
    stamps = pd.to_datetime(uniq.astype("datetime64[D]"))
    native = "day"
    if len(uniq) > 1:
        gaps = np.diff(uniq)
        if (stamps.day == 1).all() and gaps.min() >= 28:
            native = "month"
        elif len(set(stamps.day_of_week)) == 1 and (gaps % 7 == 0).all():
            native = "week"
    if native == "day":
        lo = int(uniq[0])
        periods = pd.period_range(stamps[0], periods=int(uniq[-1]) - lo + 1, freq="D")
        return _Calendar(codes=days - lo, periods=periods, native="day")
    if native == "week":
        end_day = ["SUN", "MON", "TUE", "WED", "THU", "FRI", "SAT"][stamps[0].day_of_week]
        freq = f"W-{end_day}"
    else:
        freq = "M"
    per = pd.PeriodIndex(dates.to_numpy("datetime64[D]"), freq=freq)
    return _from_period_objects(pd.Series(per), source, column)


def _rebucket(cal: _Calendar, frequency: str | None, source: str, summary: LoadSummary):
    """Map calendar codes to coarser buckets; returns (bucket_of_code, periods, keep_mask)."""
    n = len(cal.periods)
    identity = (np.arange(n, dtype=np.int64), cal.periods, np.ones(n, dtype=bool))
    if frequency is None or cal.native == frequency:
        return identity
    if cal.native == "integer":
        raise InputError(f"--frequency {frequency}: periods in {source} are plain integers, not dates")
    if _RANK[frequency] < _RANK[cal.native]:
        raise InputError(f"--frequency {frequency}: {source} has {cal.native}ly periods, which cannot be split")
    if cal.native == "week":
        raise InputError(f"--frequency {frequency}: weeks in {source} straddle months and cannot be regrouped")
    target = "W-SUN" if frequency == "week" else "M"
    buckets = cal.periods.asfreq(target, how="start")
    ords = buckets.asi8
    lo = int(ords.min())
    periods = pd.period_range(buckets[0], periods=int(ords.max()) - lo + 1, freq=target)
    keep = np.ones(len(periods), dtype=bool)
    first_day, last_day = cal.periods[0].start_time, cal.periods[-1].start_time
    if periods[0].start_time.normalize() < first_day:
        keep[0] = False
        summary.partial_buckets_dropped.append(f"{periods[0]} (starts before the data)")
    if periods[-1].end_time.normalize() > last_day:
        keep[-1] = False
        summary.partial_buckets_dropped.append(f"{periods[-1]} (ends after the data)")
    if not keep.any():
        raise InputError(f"--frequency {frequency}: {source} does not cover one whole {frequency}")
    return ords - lo, periods, keep


# ------------------------------------------------------------------ layouts


def _numeric(series: pd.Series, *, source: str, what: str, items=None, row_offset: int = 1):
    """Numbers from a column; raises naming the first bad row, item and value."""
    if pd.api.types.is_bool_dtype(series.dtype):
        return series.to_numpy(np.float64)
    if pd.api.types.is_numeric_dtype(series.dtype):
        arr = series.to_numpy(np.float64, na_value=np.nan)
    else:
        arr = pd.to_numeric(series, errors="coerce").to_numpy(np.float64, na_value=np.nan)
    bad = ~np.isfinite(arr)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raw = series.iloc[row]
        where = f"{source}, row {row + row_offset}"
        if items is not None:
            where += f", item {items[row]!r}"
        if raw is None or (isinstance(raw, float) and np.isnan(raw)) or raw is pd.NA:
            raise InputError(f"{where}: missing {what}")
        raise InputError(f"{where}: {what} {str(raw)!r} is not a number")
    return arr


def _item_labels(series: pd.Series, source: str, column: str) -> np.ndarray:
    missing = series.isna().to_numpy()
    if missing.any():
        raise InputError(f"{source}, row {int(np.flatnonzero(missing)[0]) + 1}: missing {column}")
    labels = series.astype(str).str.strip()
    blank = (labels == "").to_numpy()
    if blank.any():
        raise InputError(f"{source}, row {int(np.flatnonzero(blank)[0]) + 1}: empty {column}")
    return labels.to_numpy(dtype=object)


def _availability_column(frame: pd.DataFrame, columns: Columns, source: str) -> str | None:
    if columns.availability is not None:
        if columns.availability not in frame.columns:
            found = ", ".join(map(str, frame.columns))
            raise InputError(
                f"{source}: missing availability column '{columns.availability}' "
                f"(columns found: {found}); check --availability-column"
            )
        return columns.availability
    for guess in AVAILABILITY_GUESSES:
        if guess in frame.columns:
            return guess
    return None


def _attributes(frame, item_codes, items, columns, source, present) -> pd.DataFrame | None:
    """Per-item attributes; each must be constant within an item."""
    names = [c for c in _attr_names(columns) if c in present]
    for extra in columns.attributes:
        if extra not in frame.columns:
            found = ", ".join(map(str, frame.columns))
            raise InputError(f"{source}: missing attribute column '{extra}' (columns found: {found})")
    if not names:
        return None
    out = {}
    labels = np.asarray(items, dtype=object)[item_codes]
    first = np.unique(item_codes, return_index=True)[1]  # first row of each item
    for name in names:
        col = frame[name].reset_index(drop=True)
        if name == columns.unit_price:
            vals = _numeric(col, source=source, what="unit price", items=labels)
            if (vals < 0).any():
                row = int(np.flatnonzero(vals < 0)[0])
                raise InputError(
                    f"{source}, row {row + 1}, item {labels[row]!r}: negative unit price {vals[row]:g}"
                )
            col = pd.Series(vals)
        codes = pd.factorize(col, use_na_sentinel=True)[0]  # equal values, equal codes; NaN -1
        clash = codes != codes[first][item_codes]
        if clash.any():
            row = int(np.flatnonzero(clash)[0])
            ref = first[item_codes[row]]
            raise InputError(
                f"{source}, row {row + 1}, item {labels[row]!r}: {name} "
                f"{_plain(col.iloc[row])!r} differs from {_plain(col.iloc[ref])!r} on the item's first row"
            )
        out[name] = col.iloc[first].to_numpy()  # keeps the column's type (integer lead times)
    attrs = pd.DataFrame(out, index=pd.Index(items, name="item"))
    if columns.unit_price in attrs:
        attrs[columns.unit_price] = attrs[columns.unit_price].astype(np.float64)
    return attrs


def _read_long(frame, source, columns, frequency, net_returns):
    _require(frame, (columns.item, columns.period, columns.quantity), source, columns)
    summary = LoadSummary(source=source, layout="long", rows_read=len(frame))
    if len(frame) == 0:
        raise InputError(f"{source}: no data rows")
    labels = _item_labels(frame[columns.item], source, columns.item)
    item_codes, items = pd.factorize(labels, sort=False)
    item_codes = item_codes.astype(np.int64)
    qty = _numeric(frame[columns.quantity], source=source, what=columns.quantity, items=labels)
    if not net_returns and (qty < 0).any():
        row = int(np.flatnonzero(qty < 0)[0])
        raise InputError(
            f"{source}, row {row + 1}, item {labels[row]!r}: negative {columns.quantity} "
            f"{qty[row]:g} (use --net-returns to net returns against sales)"
        )
    cal = _parse_periods(frame[columns.period], source, columns.period)
    bucket_of, periods, keep_bucket = _rebucket(cal, frequency, source, summary)
    avail_name = _availability_column(frame, columns, source)
    avail_rows = None
    if avail_name is not None:
        avail_rows = _numeric(frame[avail_name], source=source, what=avail_name, items=labels) > 0
    attributes = _attributes(frame, item_codes, items, columns, source, set(frame.columns))

    # Everything is settled on the input calendar first (fill, merge, net, availability),
    # then summed into buckets, so a coarser load equals the finer panel added up.
    n_items, n_native = len(items), len(cal.periods)
    size = n_items * n_native
    raw_flat = item_codes * n_native + cal.codes
    counts = np.bincount(raw_flat, minlength=size).reshape(n_items, n_native)
    occupied = counts > 0
    summary.rows_merged = int(len(frame) - np.count_nonzero(counts))
    introduced = np.where(occupied.any(axis=1), occupied.argmax(axis=1), 0).astype(np.int64)
    summary.zeros_filled = int((n_native - introduced).sum() - occupied.sum())
    values = np.bincount(raw_flat, weights=qty, minlength=size).reshape(n_items, n_native)
    if net_returns:
        negative = values < 0
        summary.returns_clipped = int(negative.sum())
        values[negative] = 0.0
    available = None
    if avail_rows is not None:
        hits = np.bincount(raw_flat, weights=avail_rows, minlength=size).reshape(n_items, n_native)
        available = (hits > 0) | ~occupied  # a period with no row has no stock-out record
    if len(periods) != n_native:
        starts = np.flatnonzero(np.r_[True, np.diff(bucket_of) > 0])
        values = np.add.reduceat(values, starts, axis=1)
        intro_bucket = bucket_of[introduced]
        if available is not None:
            # Available if any sub-period in the item's span was; buckets before it count as in stock.
            before = np.arange(n_native)[None, :] < introduced[:, None]
            available = np.logical_or.reduceat(available & ~before, starts, axis=1)
            available |= np.arange(len(periods))[None, :] < intro_bucket[:, None]
        introduced = intro_bucket
    if not keep_bucket.all():
        values = values[:, keep_bucket]
        available = None if available is None else available[:, keep_bucket]
        periods = periods[keep_bucket]
        shift = int(np.argmax(keep_bucket))
        introduced = np.clip(introduced - shift, 0, len(periods) - 1)
    panel = DemandPanel(
        values,
        items=pd.Index(items, name="item"),
        periods=periods,
        available=available,
        attributes=attributes,
        introduced=introduced,
    )
    return panel, _finish(summary, panel, avail_name)


def _read_wide(frame, source, columns, frequency):
    if columns.item not in frame.columns:
        found = ", ".join(map(str, frame.columns))
        raise InputError(
            f"{source}: no '{columns.item}' column and no '{columns.period}'/'{columns.quantity}' "
            f"columns (columns found: {found}); name them with --item-column, --period-column, "
            "--quantity-column or choose --layout"
        )
    summary = LoadSummary(source=source, layout="wide", rows_read=len(frame))
    if len(frame) == 0:
        raise InputError(f"{source}: no data rows")
    labels = _item_labels(frame[columns.item], source, columns.item)
    dup = pd.Series(labels).duplicated()
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0])
        raise InputError(f"{source}, row {row + 1}: duplicate item label {labels[row]!r}")
    attr_cols = [c for c in _attr_names(columns) if c in frame.columns]
    period_cols = [c for c in frame.columns if c != columns.item and c not in attr_cols]
    if not period_cols:
        raise InputError(f"{source}: no period columns besides '{columns.item}'")
    for c in period_cols:
        if isinstance(c, pd.Period):
            continue  # the columns of DemandPanel.to_wide()
        if _label_kind(str(c).strip()) is None and not isinstance(c, (int, np.integer)):
            raise InputError(f"{source}: column {str(c)!r} is not a period ({_EXPECTED})")
    names = [c if isinstance(c, pd.Period) else str(c).strip() for c in period_cols]
    cal = _parse_periods(pd.Series(names, dtype=object), source, "period column")
    if len(np.unique(cal.codes)) != len(cal.codes):
        raise InputError(f"{source}: the same period appears in two columns")
    block = frame[period_cols]
    values_in = np.empty((len(frame), len(period_cols)), dtype=np.float64)
    missing = np.zeros_like(values_in, dtype=bool)
    for j, c in enumerate(period_cols):
        col = block[c]
        num = pd.to_numeric(col, errors="coerce").to_numpy(np.float64, na_value=np.nan)
        blank = col.isna().to_numpy()
        bad = np.isnan(num) & ~blank | np.isinf(num)
        if bad.any():
            r = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{source}, row {r + 1}, item {labels[r]!r}, column {str(c)!r}: "
                f"{str(col.iloc[r])!r} is not a number"
            )
        neg = num < 0
        if neg.any():
            r = int(np.flatnonzero(neg)[0])
            raise InputError(f"{source}, row {r + 1}, item {labels[r]!r}, column {str(c)!r}: negative quantity {num[r]:g}")
        values_in[:, j] = np.where(blank, 0.0, num)
        missing[:, j] = blank
    order = np.argsort(cal.codes, kind="stable")
    values_in, missing = values_in[:, order], missing[:, order]
    codes = cal.codes[order]
    n_periods = len(cal.periods)
    values = np.zeros((len(frame), n_periods))
    present = np.zeros((len(frame), n_periods), dtype=bool)
    values[:, codes] = values_in
    present[:, codes] = ~missing
    # Blanks before an item's first filled cell mean "not yet listed"; later blanks are errors.
    introduced = np.where(present.any(axis=1), present.argmax(axis=1), 0).astype(np.int64)
    cols = np.arange(n_periods)
    gap = ~present & (cols[None, :] > introduced[:, None]) & np.isin(cols, codes)[None, :]
    if gap.any():
        r, c = np.argwhere(gap)[0]
        raise InputError(f"{source}, row {r + 1}, item {labels[r]!r}, period {cal.periods[c]}: missing quantity")
    summary.zeros_filled = int((~np.isin(cols, codes)).sum() * len(frame))
    bucket_of, periods, keep = _rebucket(cal, frequency, source, summary)
    if len(periods) != n_periods or not keep.all():
        agg = np.zeros((len(frame), len(periods)))
        np.add.at(agg.T, bucket_of, values.T)
        values = agg[:, keep]
        intro_bucket = bucket_of[introduced] - int(np.argmax(keep))
        introduced = np.clip(intro_bucket, 0, int(keep.sum()) - 1)
        periods = periods[keep]
    attrs = None
    if attr_cols:
        item_codes = np.arange(len(frame))
        attrs = _attributes(frame, item_codes, labels, columns, source, set(attr_cols))
    panel = DemandPanel(
        values,
        items=pd.Index(labels, name="item"),
        periods=periods,
        attributes=attrs,
        introduced=introduced,
    )
    return panel, _finish(summary, panel, None)


def _finish(summary: LoadSummary, panel: DemandPanel, avail_name) -> LoadSummary:
    info = panel.describe()
    summary.items = panel.n_items
    summary.periods = panel.n_periods
    summary.frequency = info["frequency"]
    summary.first_period = info["first_period"]
    summary.last_period = info["last_period"]
    summary.unavailable_share = info["unavailable_share"]
    summary.availability_column = avail_name
    return summary


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


# ------------------------------------------------------------------ writing


def period_labels(periods: pd.Index) -> list:
    """Labels that read back to the same calendar: dates, ``YYYY-MM``, week start dates."""
    if isinstance(periods, pd.PeriodIndex):
        code = periods.freqstr
        if code.startswith("W"):
            starts = periods.start_time.strftime("%Y-%m-%d")
            return [None if pd.isna(s) else s for s in starts]
        return [None if pd.isna(p) else str(p) for p in periods]
    return list(periods)


def write_table(frame: pd.DataFrame, path: str | os.PathLike, *, index: bool = False) -> Path:
    """Write a table as CSV or Parquet (by extension) atomically.

    The table goes to a temporary file in the same folder first and is renamed
    into place, so a failure never leaves a half-written file.

    Examples
    --------
    >>> write_table(pd.DataFrame({"a": [1]}), "out.csv")  # doctest: +SKIP
    """
    target = Path(path)
    suffix = target.suffix.lower()
    if suffix not in (".csv", ".parquet", ".pq"):
        raise InputError(f"{target}: output must end in .csv or .parquet")
    frame = _printable(frame)
    if suffix == ".csv":
        return _write_atomically(target, lambda tmp: _write_csv(frame, tmp, index=index))
    return _write_atomically(target, lambda tmp: frame.to_parquet(tmp, index=index))


def _write_csv(frame: pd.DataFrame, path: str, *, index: bool) -> None:
    """CSV through pyarrow (several times faster than pandas), pandas for what it cannot type."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    try:
        table = pa.Table.from_pandas(frame, preserve_index=index)
    except (pa.ArrowInvalid, pa.ArrowTypeError, TypeError):
        frame.to_csv(path, index=index)
        return
    pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="needed"))


def write_text(text: str, path: str | os.PathLike) -> Path:
    """Write a text file atomically (temporary file, then rename)."""
    return _write_atomically(Path(path), lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))


def _write_atomically(target: Path, write) -> Path:
    """Run ``write(tmp)`` on a temporary file beside ``target``, then rename it into place."""
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    os.close(fd)
    try:
        write(tmp)
        os.chmod(tmp, _plain_file_mode())
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return target


def _plain_file_mode() -> int:
    """Permissions a plain ``open()`` would give (mkstemp makes owner-only files)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _printable(frame: pd.DataFrame) -> pd.DataFrame:
    """Periods as labels that read back to the same calendar."""
    out = frame
    for name in frame.columns:
        if isinstance(frame[name].dtype, pd.PeriodDtype):
            if out is frame:
                out = frame.copy()
            out[name] = period_labels(pd.PeriodIndex(frame[name]))
    return out


@contextlib.contextmanager
def staged_output(out_dir: str | os.PathLike) -> Iterator[Path]:
    """Collect a command's output files in a staging folder, then move them into place.

    Nothing reaches ``out_dir`` unless the whole block succeeds; if moving a
    file into place fails, the files already moved are taken back and the
    files they replaced restored, so ``out_dir`` is left as it was.

    Examples
    --------
    >>> with staged_output("run") as stage:  # doctest: +SKIP
    ...     write_table(table, stage / "audit.csv")
    """
    target = Path(out_dir)
    if target.exists() and not target.is_dir():
        raise InputError(f"--out {target}: exists and is not a folder")
    target.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{target.name}.", dir=target.parent))
    try:
        yield stage
        _move_into(stage, target)
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def _move_into(stage: Path, target: Path) -> None:
    """Move the staged tree into ``target``; if any step fails, undo the steps taken."""
    undo: list = []  # callables, run newest first
    backup = None
    try:
        if not target.exists():
            target.mkdir(parents=True)
            undo.append(lambda: shutil.rmtree(target, ignore_errors=True))
        backup = Path(tempfile.mkdtemp(prefix=f".{target.name}.old.", dir=target.parent))
        _merge(stage, target, backup, undo)
    except BaseException:
        for step in reversed(undo):
            with contextlib.suppress(OSError):
                step()
        raise
    finally:
        if backup is not None:
            shutil.rmtree(backup, ignore_errors=True)


def _merge(source: Path, dest_dir: Path, backup: Path, undo: list) -> None:
    """Move ``source``'s entries into ``dest_dir``; a Parquet dataset folder replaces the old one."""
    for item in sorted(source.iterdir()):
        dest = dest_dir / item.name
        if item.is_dir() and not _is_dataset(item):
            if dest.exists() and not dest.is_dir():
                raise InputError(f"--out {dest}: exists and is not a folder")
            if not dest.exists():
                dest.mkdir()
                undo.append(lambda d=dest: shutil.rmtree(d, ignore_errors=True))
            _merge(item, dest, backup, undo)
            continue
        if dest.exists():
            if dest.is_dir() != item.is_dir():
                kind = "a folder" if dest.is_dir() else "a file"
                raise InputError(f"--out {dest}: exists and is {kind}")
            saved = backup / f"{len(undo)}-{item.name}"
            os.replace(dest, saved)
            undo.append(lambda d=dest, s=saved: os.replace(s, d))
        os.replace(item, dest)
        undo.append(lambda d=dest: _remove(d))


def _remove(path: Path) -> None:
    if path.is_dir():
        shutil.rmtree(path)
    else:
        path.unlink()


def _is_dataset(folder: Path) -> bool:
    return any(p.suffix == ".parquet" for p in folder.iterdir())

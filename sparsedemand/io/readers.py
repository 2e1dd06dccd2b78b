"""Reading demand: files into DataFrames, DataFrames (long or wide) into panels."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from ..errors import InputError
from ..panel import DemandPanel
from ..panel import as_panel as _array_panel
from .calendar import FREQUENCIES
from .columns import Columns, LoadSummary
from .layouts import _looks_wide, _read_long, _read_wide, _require


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


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def as_panel(data, *, name: str = "data") -> DemandPanel:
    """Accept a panel, a long or wide DataFrame, a Series or a 2-D array.

    A DataFrame goes through :func:`from_frame` with the default column names
    (a long table with ``item``, ``period`` and ``quantity`` columns, or a wide
    one with the items on its index); a Series is one item. Panels and arrays
    are handled by :func:`sparsedemand.panel.as_panel`: in a bare array, NaN
    marks a period with no valid observation (unavailable, not zero demand).

    Examples
    --------
    >>> as_panel(pd.DataFrame({"item": ["A", "A"], "period": [0, 1],
    ...                        "quantity": [1.0, 2.0]})).values
    array([[1., 2.]])
    """
    if isinstance(data, pd.DataFrame):
        return from_frame(data, source=name)
    if isinstance(data, pd.Series):
        return from_frame(data.to_frame().T, source=name)
    return _array_panel(data, name=name)

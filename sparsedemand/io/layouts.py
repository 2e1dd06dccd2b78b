"""The long and wide layouts: columns checked row by row, then one panel built.

Everything is settled on the input calendar first (fill, merge, net,
availability), then summed into buckets.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import InputError
from ..panel import DemandPanel, _plain
from .calendar import _EXPECTED, _label_kind, _parse_periods, _rebucket
from .columns import AVAILABILITY_GUESSES, Columns, LoadSummary, _attr_names


def _looks_wide(frame: pd.DataFrame, columns: Columns) -> bool:
    if columns.item not in frame.columns:
        return False
    others = [str(c) for c in frame.columns if c != columns.item and c not in _attr_names(columns)]
    return bool(others) and all(_label_kind(c) is not None for c in others)


_OPTION_OF = {"item": "--item-column", "period": "--period-column", "quantity": "--quantity-column"}


def _require(frame, names, source, columns) -> None:
    found = ", ".join(map(str, frame.columns)) or "none"
    for role, name in zip(("item", "period", "quantity"), names):
        if name not in frame.columns:
            raise InputError(
                f"{source}: missing column '{name}' (columns found: {found}); "
                f"name the {role} column with {_OPTION_OF[role]}"
            )


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

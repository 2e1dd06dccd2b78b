"""The in-memory demand panel shared by every stage.

A :class:`DemandPanel` holds demand as a C-contiguous ``float64`` array of shape
``(n_items, n_periods)`` together with the labels and masks every later stage
needs. Kernels only ever see ``panel.values``, ``panel.start`` and
``panel.available``; pandas objects stay on this side of the boundary.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = ["DemandPanel", "first_demand_offsets", "as_panel"]


def first_demand_offsets(values: np.ndarray) -> np.ndarray:
    """Index of each row's first positive value, ``n_periods`` for a row with none.

    Parameters
    ----------
    values : ndarray of shape (n_items, n_periods)

    Returns
    -------
    ndarray of int64, shape (n_items,)

    Examples
    --------
    >>> first_demand_offsets(np.array([[0., 0., 3.], [0., 0., 0.]]))
    array([2, 3])
    """
    positive = values > 0
    if values.shape[1] == 0:  # no periods: argmax has nothing to look at
        return np.zeros(values.shape[0], dtype=np.int64)
    offsets = positive.argmax(axis=1).astype(np.int64)
    offsets[~positive.any(axis=1)] = values.shape[1]
    return offsets


def _plain(value):
    """A numpy scalar as the plain Python value, for readable messages."""
    return value.item() if isinstance(value, np.generic) else value


def _check_calendar(periods: pd.Index) -> None:
    """Periods must be consecutive steps of one day, week or month (or integers)."""
    if isinstance(periods, pd.RangeIndex):
        if len(periods) > 1 and periods.step != 1:
            raise InputError(f"integer periods must be consecutive, got a step of {periods.step}")
        return
    code = periods.freqstr
    if not (code == "D" or code == "M" or code.startswith("W-")):
        raise InputError(f"periods must be day, week or month periods, got frequency {code!r}")
    if len(periods) > 1 and not (np.diff(periods.asi8) == 1).all():
        raise InputError("periods must be consecutive, in order and without gaps")


@dataclass(frozen=True, eq=False)
class DemandPanel:
    """Demand for many items over one shared calendar.

    Parameters
    ----------
    values : ndarray of float64, shape (n_items, n_periods)
        Demand per item and period; never negative, never NaN.
    items : pandas.Index
        Unique item labels, one per row of ``values``.
    periods : pandas.PeriodIndex or pandas.RangeIndex
        The calendar, one label per column (day, week or month periods, or a
        plain integer range).
    available : ndarray of bool, shape (n_items, n_periods), optional
        False where the item was out of stock: a zero there is censored, not a
        true zero. ``None`` means every period was available.
    attributes : pandas.DataFrame, optional
        Per-item attributes indexed by item label (for example ``location``,
        ``category``, ``unit_price``).
    introduced : ndarray of int64, shape (n_items,), optional
        First period of each item's recorded span (its first input row).
        Defaults to 0 for every item.

    Attributes
    ----------
    start : ndarray of int64, shape (n_items,)
        Offset of each item's first demand (leading-zero trimming); equal to
        ``n_periods`` for an item that never sold.

    Examples
    --------
    >>> p = DemandPanel(np.array([[0., 2., 0., 1.]]), items=pd.Index(["A"]),
    ...                 periods=pd.RangeIndex(4))
    >>> p.shape, p.start
    ((1, 4), array([1]))
    """

    values: np.ndarray
    items: pd.Index
    periods: pd.Index
    available: np.ndarray | None = None
    attributes: pd.DataFrame | None = None
    introduced: np.ndarray | None = None
    start: np.ndarray = field(init=False, repr=False)

    def __post_init__(self) -> None:
        try:
            values = np.ascontiguousarray(self.values, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError("demand values must be numbers") from None
        if values.ndim != 2:
            raise InputError(f"demand values must be 2-D (items x periods), got {values.ndim}-D")
        n_items, n_periods = values.shape
        items = pd.Index(self.items)
        if len(items) != n_items:
            raise InputError(f"{len(items)} item labels for {n_items} rows of demand")
        if items.has_duplicates:
            dup = items[items.duplicated()][0]
            raise InputError(f"duplicate item label {_plain(dup)!r}")
        periods = self.periods
        if not isinstance(periods, (pd.PeriodIndex, pd.RangeIndex)):
            raise InputError("periods must be a pandas PeriodIndex or RangeIndex")
        if len(periods) != n_periods:
            raise InputError(f"{len(periods)} period labels for {n_periods} columns of demand")
        _check_calendar(periods)
        for bad, what in ((~np.isfinite(values), "NaN or infinite"), (values < 0, "negative")):
            if bad.any():
                r, c = np.argwhere(bad)[0]
                raise InputError(
                    f"demand values contain {what} entries: {values[r, c]:g} for item "
                    f"{_plain(items[r])!r}, period {periods[c]}"
                )
        available = self.available
        if available is not None:
            available = np.ascontiguousarray(available, dtype=np.bool_)
            if available.shape != values.shape:
                raise InputError(
                    f"availability mask has shape {available.shape}, demand has {values.shape}"
                )
        attributes = self.attributes
        if attributes is not None:
            if attributes.index.has_duplicates:
                dup = attributes.index[attributes.index.duplicated()][0]
                raise InputError(f"attributes list item {_plain(dup)!r} more than once")
            attributes = attributes.reindex(items)
        introduced = self.introduced
        if introduced is None:
            introduced = np.zeros(n_items, dtype=np.int64)
        introduced = np.ascontiguousarray(introduced, dtype=np.int64)
        if introduced.shape != (n_items,):
            raise InputError(f"introduced has shape {introduced.shape}, expected one offset for {n_items} items")
        outside = (introduced < 0) | (introduced >= max(n_periods, 1))
        if outside.any():
            r = int(np.flatnonzero(outside)[0])
            raise InputError(
                f"introduced offset {introduced[r]} for item {_plain(items[r])!r} "
                f"is outside the {n_periods} periods"
            )
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "items", items)
        object.__setattr__(self, "available", available)
        object.__setattr__(self, "attributes", attributes)
        object.__setattr__(self, "introduced", introduced)
        object.__setattr__(self, "start", first_demand_offsets(values))

    # ------------------------------------------------------------------ basics
    @property
    def shape(self) -> tuple[int, int]:
        return self.values.shape  # type: ignore[return-value]

    @property
    def n_items(self) -> int:
        return self.values.shape[0]

    @property
    def n_periods(self) -> int:
        return self.values.shape[1]

    @property
    def frequency(self) -> str | None:
        """``"day"``, ``"week"``, ``"month"`` or ``None`` for an integer calendar."""
        if isinstance(self.periods, pd.PeriodIndex):
            code = self.periods.freqstr
            if code.startswith("W"):
                return "week"
            if code.startswith("M"):
                return "month"
            return "day"
        return None

    @property
    def season_length(self) -> int:
        """Periods per season, chosen so that weekdays line up: 364, 52 or 12."""
        return {"day": 364, "week": 52, "month": 12}.get(self.frequency or "", 0)

    def mask(self) -> np.ndarray:
        """Availability mask, all True when the panel has none."""
        if self.available is None:
            return np.ones(self.values.shape, dtype=np.bool_)
        return self.available

    def attribute(self, name: str, default=None) -> pd.Series:
        """One attribute per item (in panel order), ``default`` where absent."""
        if self.attributes is not None and name in self.attributes.columns:
            return self.attributes[name]
        return pd.Series(default, index=self.items, name=name)

    # ------------------------------------------------------------- derivations
    def subset(self, rows) -> DemandPanel:
        """Panel of the selected items (integer positions, boolean mask or labels)."""
        if isinstance(rows, slice):
            idx = np.arange(self.n_items)[rows]
        else:
            rows = np.asarray(rows)
            if rows.dtype == bool:
                idx = np.flatnonzero(rows)
            elif np.issubdtype(rows.dtype, np.integer):
                idx = rows
            else:
                idx = self.items.get_indexer(rows)
                if (idx < 0).any():
                    missing = rows[idx < 0][0]
                    raise InputError(f"unknown item {_plain(missing)!r}")
        return DemandPanel(
            self.values[idx],
            items=self.items[idx],
            periods=self.periods,
            available=None if self.available is None else self.available[idx],
            attributes=None if self.attributes is None else self.attributes.iloc[idx],
            introduced=self.introduced[idx],
        )

    def head(self, n_periods: int) -> DemandPanel:
        """Panel of the first ``n_periods`` periods only (for backtest origins)."""
        if not 0 < n_periods <= self.n_periods:
            raise InputError(f"cannot cut the history to {n_periods} of {self.n_periods} periods")
        return DemandPanel(
            self.values[:, :n_periods],
            items=self.items,
            periods=self.periods[:n_periods],
            available=None if self.available is None else self.available[:, :n_periods],
            attributes=self.attributes,
            introduced=np.minimum(self.introduced, n_periods - 1),
        )

    def future_periods(self, horizon: int) -> pd.Index:
        """Calendar labels of the ``horizon`` periods after the panel's end."""
        if isinstance(self.periods, pd.PeriodIndex):
            last = self.periods[-1] if len(self.periods) else None
            return pd.period_range(last + 1, periods=horizon, freq=self.periods.freq)
        stop = int(self.periods[-1]) + 1 if len(self.periods) else 0
        return pd.RangeIndex(stop, stop + horizon)

    def to_wide(self) -> pd.DataFrame:
        """Items as rows, periods as columns."""
        return pd.DataFrame(self.values, index=self.items, columns=self.periods)

    def to_long(
        self,
        *,
        item_column: str = "item",
        period_column: str = "period",
        quantity_column: str = "quantity",
        availability_column: str | None = "in_stock",
    ) -> pd.DataFrame:
        """Long table, one row per item and period from the item's first recorded period.

        Attribute columns are repeated on every row; the availability column
        (a 0/1 in-stock flag) is written only when the panel has a mask.
        """
        n_items, n_periods = self.shape
        cols = np.arange(n_periods)
        keep = cols[None, :] >= self.introduced[:, None]
        rows, pos = np.nonzero(keep)
        out = {
            item_column: self.items.take(rows),
            period_column: self.periods.take(pos),
            quantity_column: self.values[rows, pos],
        }
        if self.available is not None and availability_column:
            out[availability_column] = self.available[rows, pos].astype(np.int8)
        frame = pd.DataFrame(out)
        if self.attributes is not None:
            for name in self.attributes.columns:
                frame[name] = self.attributes[name].to_numpy()[rows]
        return frame

    def describe(self) -> dict:
        """Headline figures for summaries and reports."""
        mask = self.mask()
        summary = {
            "items": self.n_items,
            "periods": self.n_periods,
            "frequency": self.frequency or "integer",
            "first_period": str(self.periods[0]) if self.n_periods else "",
            "last_period": str(self.periods[-1]) if self.n_periods else "",
            "volume": float(self.values.sum()),
            "never_sold": int((self.start >= self.n_periods).sum()),
            "unavailable_share": float(1.0 - mask.mean()) if mask.size else 0.0,
        }
        return summary


def as_panel(data, *, name: str = "data") -> DemandPanel:
    """Accept a panel or a 2-D array (one row per item); a 1-D array is one item.

    In a bare array, NaN marks a period with no valid observation (treated as
    unavailable, not as zero demand). DataFrames and Series are read by
    :func:`sparsedemand.io.as_panel`, which builds on this function.

    Examples
    --------
    >>> as_panel(np.array([[1.0, 0.0, 2.0]])).items.tolist()
    [0]
    """
    if isinstance(data, DemandPanel):
        return data
    if isinstance(data, (pd.DataFrame, pd.Series)):
        raise InputError(f"{name}: a DataFrame is read by sparsedemand.io.as_panel, not panel.as_panel")
    arr = np.asarray(data, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2:
        raise InputError(f"{name}: expected a 2-D array (items x periods), got {arr.ndim}-D")
    if np.isinf(arr).any():
        r, c = np.argwhere(np.isinf(arr))[0]
        raise InputError(f"{name}: infinite demand at item {r}, period {c}")
    if (arr < 0).any():
        r, c = np.argwhere(arr < 0)[0]
        raise InputError(f"{name}: negative demand {arr[r, c]:g} at item {r}, period {c}")
    # NaN in a bare array marks a period with no valid observation (out of stock).
    missing = np.isnan(arr)
    available = ~missing if missing.any() else None
    return DemandPanel(
        np.where(missing, 0.0, arr),
        items=pd.RangeIndex(arr.shape[0]),
        periods=pd.RangeIndex(arr.shape[1]),
        available=available,
    )

"""Period labels: parsing a period column into a calendar, regrouping it, writing it back.

Periods are ISO dates (``2025-03-14``), months (``2025-03``), ISO weeks
(``2025-W11``) or plain integers; one file uses one kind. Dates are taken at
their native step (day, week or month, inferred) and may be regrouped into a
coarser bucket.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from .columns import LoadSummary

FREQUENCIES = ("day", "week", "month")
_RANK = {"day": 0, "week": 1, "month": 2}

_PATTERNS = {
    "day": re.compile(r"^\d{4}-\d{2}-\d{2}(?:[ T]00:00(?::00(?:\.0+)?)?)?$"),
    "month": re.compile(r"^\d{4}-\d{2}$"),
    "week": re.compile(r"^\d{4}-W\d{2}$"),
    "integer": re.compile(r"^-?\d+$"),
}
_EXPECTED = "expected YYYY-MM-DD, YYYY-MM, YYYY-Www or an integer"


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


def period_labels(periods: pd.Index) -> list:
    """Labels that read back to the same calendar: dates, ``YYYY-MM``, week start dates."""
    if isinstance(periods, pd.PeriodIndex):
        code = periods.freqstr
        if code.startswith("W"):
            starts = periods.start_time.strftime("%Y-%m-%d")
            return [None if pd.isna(s) else s for s in starts]
        return [None if pd.isna(p) else str(p) for p in periods]
    return list(periods)

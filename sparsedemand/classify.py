"""Sort items by demand pattern and record why.

Definitions
-----------
Every figure is measured on the item's *trimmed history*: from its first
demand on, over available (in-stock) periods only. A period flagged out of
stock is dropped entirely, whatever was recorded in it, because both its zero
and any part-sale in it are censored.

- ADI (average inter-demand interval) = available periods in the trimmed
  history / periods with demand > 0.
- CV² = (standard deviation / mean)² of the non-zero demand sizes, population
  form (ddof = 0).
- Patterns, with the cutoffs of Syntetos, Boylan & Croston (2005, JORS
  56:495-503), ADI 1.32 and CV² 0.49, a value equal to a cutoff going to the
  higher side: ``smooth`` (ADI < 1.32, CV² < 0.49), ``erratic`` (ADI < 1.32,
  CV² >= 0.49), ``intermittent`` (ADI >= 1.32, CV² < 0.49), ``lumpy``
  (ADI >= 1.32, CV² >= 0.49).

Items the four patterns cannot describe get a status instead, checked in this
order:

- ``never-sold``: no demand in any available period.
- ``too-short``: fewer than ``min_demands`` demands, or a trimmed history of
  fewer than ``min_periods`` available periods.
- ``gone-quiet``: no demand in the last K available periods, where
  K = max(``quiet_min``, ceil(``quiet_factor`` x the item's mean interval
  between demands)); a sign of possible obsolescence. The mean interval is the
  item's ADI over its active life (first to last demand), so the silence being
  judged does not stretch its own limit.

The table
---------
:func:`classify` returns one row per item in input order, indexed by item
label, with columns

- ``item``: the item label;
- ``pattern``: one of :data:`PATTERNS` or :data:`STATUSES`;
- ``reason``: why, in plain words;
- ``adi``, ``cv2``: the figures (NaN where undefined: no demand, or
  CV² with fewer than two demands);
- ``n_demands``: periods with demand > 0 in the trimmed history;
- ``n_periods``: available periods in the trimmed history;
- ``unavailable_periods``: out-of-stock periods in the trimmed history;
- ``first_demand``, ``last_demand``: period labels (missing if never sold);
- ``leading_zeros``: periods between the item's first recorded period
  and its first demand;
- ``mean_size``: mean of the non-zero sizes;
- ``mean_interval``: mean available periods between demands;
- ``quiet_periods``: available periods since the last demand;
- ``quiet_limit``: quiet periods that make the item ``gone-quiet``;
- ``volume``: total recorded demand;
- ``measured_pattern``: the pattern the figures alone indicate, also
  for items given a status (missing where CV² is undefined).
"""

from __future__ import annotations

import math
from numbers import Integral, Real

import numpy as np
import pandas as pd
from numba import njit

from .errors import InputError
from .io import as_panel
from .panel import DemandPanel

__all__ = [
    "PATTERNS",
    "STATUSES",
    "RULES",
    "classify",
    "pattern_summary",
    "croston_sba_boundary",
]

PATTERNS: tuple[str, ...] = ("smooth", "erratic", "intermittent", "lumpy")
STATUSES: tuple[str, ...] = ("never-sold", "too-short", "gone-quiet")
RULES: tuple[str, ...] = ("cutoffs", "kostenko-hyndman")

_LABELS = PATTERNS + STATUSES
_SMOOTH, _ERRATIC, _INTERMITTENT, _LUMPY, _NEVER, _SHORT, _QUIET = range(7)
_NO_PATTERN = -1


# ------------------------------------------------------------------ kernel


@njit(cache=True, fastmath={"reassoc"})
def _item_figures(values, start, available, has_mask):
    """Per-item counts and size moments in one pass over the panel.

    ``start`` holds the first-demand offsets (every period before it is zero);
    ``available`` is read only when ``has_mask`` is true. The main loop is
    branch-free (float counters, 0/1 weights) so that it vectorises; sizes are
    summed shifted by the item's first size so the variance stays accurate.
    """
    n_items, n_periods = values.shape
    first = np.full(n_items, -1, np.int64)
    last = np.full(n_items, -1, np.int64)
    n_avail = np.zeros(n_items, np.int64)  # available periods from the first demand on
    n_dem = np.zeros(n_items, np.int64)
    quiet = np.zeros(n_items, np.int64)  # available periods after the last demand
    unavail = np.zeros(n_items, np.int64)  # unavailable periods from the first demand on
    unavail_row = np.zeros(n_items, np.int64)
    mean = np.full(n_items, np.nan)
    var = np.full(n_items, np.nan)
    volume = np.zeros(n_items)
    for i in range(n_items):
        s = min(start[i], n_periods)
        f = s
        ua = 0
        vol = 0.0
        if has_mask:
            for j in range(s):
                ua += not available[i, j]
            # a sale in an out-of-stock period is censored: the history starts later
            while f < n_periods and not (available[i, f] and values[i, f] > 0.0):
                ua += not available[i, f]
                vol += values[i, f]
                f += 1
        if f >= n_periods:
            unavail_row[i] = ua
            volume[i] = vol
            continue
        shift = values[i, f]
        na = 0.0
        nd = 0.0
        s1 = 0.0
        s2 = 0.0
        for j in range(f, n_periods):
            x = values[i, j]
            a = (1.0 if available[i, j] else 0.0) if has_mask else 1.0
            w = a if x > 0.0 else 0.0
            vol += x
            na += a
            nd += w
            d = (x - shift) * w
            s1 += d
            s2 += d * d
        lst = n_periods - 1
        q = 0
        while has_mask and not available[i, lst] or values[i, lst] <= 0.0:
            q += not has_mask or available[i, lst]
            lst -= 1
        ut = n_periods - f - int(na)
        first[i] = f
        last[i] = lst
        n_avail[i] = int(na)
        n_dem[i] = int(nd)
        quiet[i] = q
        unavail[i] = ut
        unavail_row[i] = ua + ut
        volume[i] = vol
        mean[i] = shift + s1 / nd
        var[i] = max((s2 - s1 * s1 / nd) / nd, 0.0)
    return first, last, n_avail, n_dem, quiet, unavail, unavail_row, mean, var, volume


# ------------------------------------------------------------- public API


def croston_sba_boundary(adi):
    """CV² on the exact boundary between Croston's method and SBA at a given ADI.

    Kostenko & Hyndman (2006, JORS 57:1256-1257) compare the mean squared
    errors of Croston's method and of SBA (Syntetos & Boylan's bias-corrected
    Croston) using the bias and variance approximations of Syntetos, Boylan &
    Croston (2005). For demand occurring with probability 1/p (p = ADI), the
    SBA error is the smaller when

        CV² > 2 / p - 3 / 2        (equivalently p > 4 / (3 + 2 CV²)),

    a curve through (ADI 1, CV² 0.5) and (ADI 4/3, CV² 0) that the cutoffs
    1.32 and 0.49 approximate. Below the curve Croston's method is the better.

    Parameters
    ----------
    adi : float or array_like
        Average inter-demand interval(s), >= 1.

    Returns
    -------
    float or ndarray
        The boundary CV² (negative where SBA wins at any CV²).

    Examples
    --------
    >>> float(croston_sba_boundary(1.0)), float(croston_sba_boundary(4 / 3))
    (0.5, 0.0)
    """
    return 2.0 / np.asarray(adi, dtype=np.float64) - 1.5


def classify(
    data,
    *,
    adi_cutoff: float = 1.32,
    cv2_cutoff: float = 0.49,
    rule: str = "cutoffs",
    min_demands: int = 2,
    min_periods: int = 8,
    quiet_factor: float | None = 4.0,
    quiet_min: int = 8,
) -> pd.DataFrame:
    """Classify every item by demand pattern, with the reason in plain words.

    Definitions are in the module docstring: ADI and CV² are measured on the
    trimmed history (from the first demand on) over available periods only;
    patterns follow Syntetos, Boylan & Croston (2005, JORS 56:495-503); items
    the patterns cannot describe get a status (``never-sold``, ``too-short``,
    ``gone-quiet``).

    Parameters
    ----------
    data : DemandPanel, wide DataFrame (items x periods) or 2-D array
        Demand; in a bare array NaN marks an unavailable period.
    adi_cutoff : float, default 1.32
        ADI at or above which demand counts as infrequent.
    cv2_cutoff : float, default 0.49
        CV² at or above which sizes count as variable.
    rule : {"cutoffs", "kostenko-hyndman"}, default "cutoffs"
        ``"cutoffs"`` splits on the two cutoffs. ``"kostenko-hyndman"`` calls
        an item smooth when it lies below the exact Croston/SBA boundary
        ``CV² = 2/ADI - 3/2`` of Kostenko & Hyndman (2006, JORS 57:1256-1257;
        see :func:`croston_sba_boundary`) and splits the rest on the cutoffs;
        an item above the boundary but under both cutoffs goes to whichever
        figure is nearer its cutoff (ADI / adi_cutoff against
        CV² / cv2_cutoff): intermittent or erratic.
    min_demands : int, default 2
        Fewer demands than this makes an item ``too-short`` (at least 2: CV²
        needs two sizes).
    min_periods : int, default 8
        A trimmed history of fewer available periods makes an item ``too-short``.
    quiet_factor : float or None, default 4.0
        An item is ``gone-quiet`` after ``max(quiet_min, ceil(quiet_factor x
        mean interval))`` available periods without demand. ``None`` turns the
        check off.
    quiet_min : int, default 8
        Smallest quiet limit, so that frequently sold items are not flagged
        after a short lull.

    Returns
    -------
    pandas.DataFrame
        One row per item in input order, indexed by item label, with the
        columns listed under *The table* in the module docstring.
        ``table.attrs["classify_options"]`` records the options used.

    Examples
    --------
    >>> demand = np.array([[0, 3, 0, 0, 4, 0, 0, 3, 0, 0, 4, 0],
    ...                    [2, 9, 1, 8, 2, 7, 1, 9, 3, 8, 1, 2]], dtype=float)
    >>> table = classify(demand)
    >>> table[["adi", "pattern"]].round(2)
        adi       pattern
    0  2.75  intermittent
    1  1.00       erratic
    >>> table.loc[0, "reason"]
    'ADI 2.75 >= 1.32 and CV² 0.02 < 0.49: intermittent'
    """
    options = _check_options(adi_cutoff=adi_cutoff, cv2_cutoff=cv2_cutoff, rule=rule, min_demands=min_demands,
                             min_periods=min_periods, quiet_factor=quiet_factor, quiet_min=quiet_min)
    panel = as_panel(data)
    figures = _figures(panel)
    table = _table(panel, figures, options)
    table.attrs["classify_options"] = options
    return table


def pattern_summary(table: pd.DataFrame, panel) -> pd.DataFrame:
    """Count and share of items and of volume per pattern and status.

    Parameters
    ----------
    table : DataFrame
        The result of :func:`classify` for ``panel``.
    panel : DemandPanel, wide DataFrame or 2-D array
        The demand that was classified (volume is its total recorded demand).

    Returns
    -------
    pandas.DataFrame
        Indexed by pattern/status name in the order of :data:`PATTERNS` then
        :data:`STATUSES` (every name listed, zero counts included), with
        columns ``items``, ``item_share``, ``volume``, ``volume_share``
        (shares are fractions of the totals; 0 when the total is 0).

    Examples
    --------
    >>> demand = np.array([[0, 3, 0, 0, 4, 0, 0, 3, 0, 0, 4, 0],
    ...                    [0] * 12], dtype=float)
    >>> pattern_summary(classify(demand), demand).loc[["intermittent", "never-sold"]]
                  items  item_share  volume  volume_share
    intermittent      1         0.5    14.0           1.0
    never-sold        1         0.5     0.0           0.0
    """
    if not isinstance(table, pd.DataFrame) or "pattern" not in table.columns:
        raise InputError("table: expected the classification table with a 'pattern' column")
    panel = as_panel(panel)
    if len(table) != panel.n_items or not table.index.equals(_plain(panel.items)):
        raise InputError(
            f"table: {len(table)} classified items do not match the {panel.n_items} items of the demand"
        )
    unknown = set(table["pattern"].unique()) - set(_LABELS)
    if unknown:
        raise InputError(f"table: unknown pattern {sorted(map(str, unknown))[0]!r}")
    volume = panel.values.sum(axis=1)
    codes = pd.Categorical(table["pattern"].to_numpy(), categories=_LABELS).codes
    items = np.bincount(codes, minlength=len(_LABELS))
    vol = np.bincount(codes, weights=volume, minlength=len(_LABELS))
    n, total = items.sum(), vol.sum()
    return pd.DataFrame(
        {
            "items": items.astype(np.int64),
            "item_share": items / n if n else np.zeros(len(_LABELS)),
            "volume": vol,
            "volume_share": vol / total if total > 0 else np.zeros(len(_LABELS)),
        },
        index=pd.Index(_LABELS),
    )


# --------------------------------------------------------------- helpers


def _check_options(**opts) -> dict:
    """Validate the options; return them as plain Python values."""

    def number(name, low, *, strict=False, allow_none=False):
        value = opts[name]
        if value is None and allow_none:
            return None
        ok = isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value)
        if not ok or value < low or (strict and value == low):
            bound = f"{'>' if strict else '>='} {low:g}"
            off = " (or None to turn the check off)" if allow_none else ""
            raise InputError(f"{name} must be a finite number {bound}{off}, got {value!r}")
        return float(value)

    def integer(name, low):
        value = opts[name]
        if not isinstance(value, Integral) or isinstance(value, bool) or value < low:
            raise InputError(f"{name} must be a whole number >= {low}, got {value!r}")
        return int(value)

    rule = opts["rule"]
    if rule not in RULES:
        raise InputError(f"rule must be one of {', '.join(RULES)}, got {rule!r}")
    return {
        "rule": rule,
        "adi_cutoff": number("adi_cutoff", 1.0),  # ADI is never below 1
        "cv2_cutoff": number("cv2_cutoff", 0.0, strict=True),
        "min_demands": integer("min_demands", 2),  # CV² needs two sizes
        "min_periods": integer("min_periods", 1),
        "quiet_factor": number("quiet_factor", 0.0, strict=True, allow_none=True),
        "quiet_min": integer("quiet_min", 1),
    }


def _figures(panel: DemandPanel) -> dict:
    """Run the kernel; return its per-item arrays by name."""
    has_mask = panel.available is not None
    mask = panel.available if has_mask else np.ones((1, 1), dtype=np.bool_)
    start = np.ascontiguousarray(panel.start, dtype=np.int64)
    names = ("first", "last", "n_avail", "n_dem", "quiet", "unavail", "unavail_row",
             "mean", "var", "volume")
    return dict(zip(names, _item_figures(panel.values, start, mask, has_mask)))


def _four_way(adi, cv2, adi_cutoff, cv2_cutoff):
    """Pattern codes from the two cutoffs (a value equal to a cutoff goes up)."""
    infrequent = adi >= adi_cutoff
    variable = cv2 >= cv2_cutoff
    return np.where(infrequent, np.where(variable, _LUMPY, _INTERMITTENT),
                    np.where(variable, _ERRATIC, _SMOOTH))


def _table(panel: DemandPanel, fig: dict, opt: dict) -> pd.DataFrame:
    n_dem, n_avail = fig["n_dem"], fig["n_avail"]
    sold = n_dem > 0
    two = n_dem >= 2
    with np.errstate(divide="ignore", invalid="ignore"):
        adi = np.where(sold, n_avail / np.maximum(n_dem, 1), np.nan)
        inv_adi = np.where(sold, n_dem / np.maximum(n_avail, 1), np.nan)
        cv2 = np.where(two, fig["var"] / fig["mean"] ** 2, np.nan)
        # available periods from first to last demand, over the gaps between demands
        interval = np.where(two, (n_avail - fig["quiet"] - 1) / np.maximum(n_dem - 1, 1), np.nan)
    measured = _four_way(adi, cv2, opt["adi_cutoff"], opt["cv2_cutoff"])
    boundary = 2.0 * inv_adi - 1.5  # croston_sba_boundary without the extra division
    if opt["rule"] == "kostenko-hyndman":
        below = cv2 < boundary
        between = ~below & (measured == _SMOOTH)
        adi_side = adi / opt["adi_cutoff"] >= cv2 / opt["cv2_cutoff"]
        measured = np.where(below, _SMOOTH, measured)
        measured = np.where(between, np.where(adi_side, _INTERMITTENT, _ERRATIC), measured)
    measured = np.where(two, measured, _NO_PATTERN)

    quiet = fig["quiet"]
    has_limit = two & (opt["quiet_factor"] is not None)
    if opt["quiet_factor"] is not None:
        # the tiny allowance keeps 4 x 2.0000000000000004 at 8 periods
        raw = np.ceil(opt["quiet_factor"] * np.nan_to_num(interval) - 1e-9)
        limit = np.maximum(opt["quiet_min"], raw).astype(np.int64)
    else:
        limit = np.zeros(len(n_dem), dtype=np.int64)

    few = sold & (n_dem < opt["min_demands"])
    brief = sold & (n_avail < opt["min_periods"])
    gone = has_limit & ~few & ~brief & (quiet >= limit)
    code = measured.copy()
    code[gone] = _QUIET
    code[few | brief] = _SHORT
    code[~sold] = _NEVER

    n_total = panel.n_periods
    first = fig["first"]
    leading = np.where(sold, first, n_total) - panel.introduced
    reason = _reasons(
        code=code, measured=measured, adi=adi, cv2=cv2, boundary=boundary, n_dem=n_dem,
        n_avail=n_avail, unavail_row=fig["unavail_row"], quiet=quiet, limit=limit,
        interval=interval, few=few, brief=brief, n_total=n_total, opt=opt,
    )
    items = _plain(panel.items)
    table = pd.DataFrame(
        {
            "item": items,
            "pattern": np.asarray(_LABELS, dtype=object)[code],
            "reason": reason,
            "adi": adi,
            "cv2": cv2,
            "n_demands": n_dem,
            "n_periods": n_avail,
            "unavailable_periods": fig["unavail"],
            "first_demand": _labels_at(panel.periods, first),
            "last_demand": _labels_at(panel.periods, fig["last"]),
            "leading_zeros": np.maximum(leading, 0),
            "mean_size": fig["mean"],
            "mean_interval": interval,
            "quiet_periods": _nullable(quiet, sold),
            "quiet_limit": _nullable(limit, has_limit),
            "volume": fig["volume"],
            "measured_pattern": [PATTERNS[m] if m >= 0 else None for m in measured],
        },
        index=items,
    )
    return table


def _plain(items: pd.Index) -> pd.Index:
    """Item labels without an index name (``item`` is also a column)."""
    return items.rename(None)


def _labels_at(periods: pd.Index, offsets: np.ndarray):
    """Period labels at the offsets; missing where the offset is -1."""
    missing = offsets < 0
    if isinstance(periods, pd.PeriodIndex):
        if len(periods) == 0:
            return pd.PeriodIndex([pd.NaT] * len(offsets), freq=periods.freq)
        return periods.take(np.where(missing, 0, offsets)).where(~missing)
    labels = np.asarray(periods, dtype=np.int64)
    taken = labels[np.where(missing, 0, offsets)] if len(labels) else np.zeros(len(offsets), np.int64)
    return _nullable(taken, ~missing)


def _nullable(values: np.ndarray, valid: np.ndarray) -> pd.arrays.IntegerArray:
    """Whole numbers with missing entries where ``valid`` is False."""
    return pd.arrays.IntegerArray(np.asarray(values, dtype=np.int64), ~np.asarray(valid, dtype=bool))


def _versus(name: str, value: float, ref: float, *, ref_exact: bool = True) -> str:
    """'ADI 2.41 >= 1.32', with enough digits that a strict '<' never reads as equal.

    ``ref_exact`` shows ``ref`` as given (a cutoff the user typed); otherwise
    it is rounded like the value (a computed boundary).
    """
    ref_text = f"{ref:.15g}"
    places = max(2, len(ref_text.partition(".")[2])) if ref_exact else 2
    while True:
        text = f"{value:.{places}f}"
        if not ref_exact:
            ref_text = f"{ref:.{places}f}"
        if value >= ref or float(text) < float(ref_text) or places >= 17:
            break
        places += 1
    return f"{name} {text} {'>=' if value >= ref else '<'} {ref_text}"


def _versus_many(name: str, values: np.ndarray, refs, *, ref_exact: bool = True) -> list[str]:
    """:func:`_versus` for many values at once (the slow path only near the reference)."""
    refs = np.broadcast_to(np.asarray(refs, dtype=np.float64), values.shape)
    if ref_exact:
        ref_text = f"{float(refs[0]):.15g}" if len(refs) else ""
        places = max(2, len(ref_text.partition(".")[2]))
        ref_texts = [ref_text] * len(values)
    else:
        places = 2
        ref_texts = list(map(f"{{:.{places}f}}".format, refs.tolist()))
    texts = map(f"{{:.{places}f}}".format, values.tolist())
    ops = np.where(values >= refs, ">=", "<").tolist()
    out = [f"{name} {t} {o} {r}" for t, o, r in zip(texts, ops, ref_texts)]
    close = (values < refs) & (refs - values <= 2 * 10.0**-places)
    for k in np.flatnonzero(close):
        out[k] = _versus(name, float(values[k]), float(refs[k]), ref_exact=ref_exact)
    return out


def _reasons(*, code, measured, adi, cv2, boundary, n_dem, n_avail, unavail_row, quiet, limit,
             interval, few, brief, n_total, opt) -> np.ndarray:
    """Plain-language reason per item."""
    ac, cc = opt["adi_cutoff"], opt["cv2_cutoff"]
    out = np.empty(len(code), dtype=object)
    figures = np.empty(len(code), dtype=object)
    idx = np.flatnonzero(measured >= 0)
    text = [f"{a} and {c}" for a, c in zip(_versus_many("ADI", adi[idx], ac),
                                           _versus_many("CV²", cv2[idx], cc))]
    if opt["rule"] == "kostenko-hyndman":
        where = _versus_many("CV²", cv2[idx], boundary[idx], ref_exact=False)
        side = np.where(cv2[idx] < boundary[idx], 0, np.where((adi[idx] < ac) & (cv2[idx] < cc), 1, 2))
        nearer = np.where(measured[idx] == _INTERMITTENT, "ADI", "CV²")
        text = [
            f"{w} = 2/ADI - 3/2 (below the Kostenko-Hyndman boundary)" if k == 0
            else f"{w} = 2/ADI - 3/2 (above the Kostenko-Hyndman boundary); {t}"
            + (f", {m} the nearer its cutoff" if k == 1 else "")
            for w, k, t, m in zip(where, side.tolist(), text, nearer.tolist())
        ]
    figures[idx] = text
    sel = np.flatnonzero(code <= _LUMPY)
    out[sel] = [f"{f}: {PATTERNS[c]}" for f, c in zip(figures[sel], code[sel].tolist())]
    for i in np.flatnonzero(code == _NEVER):
        stock = f" ({unavail_row[i]} of them out of stock)" if unavail_row[i] else ""
        out[i] = f"no demand in {n_total} periods{stock}: never-sold"
    for i in np.flatnonzero(code == _SHORT):
        why = []
        if few[i]:
            why.append(f"{_count(n_dem[i], 'demand')}, fewer than the {opt['min_demands']} needed")
        if brief[i]:
            why.append(f"{_count(n_avail[i], 'available period')} since the first demand, "
                       f"fewer than the {opt['min_periods']} needed")
        out[i] = f"{' and '.join(why)}: too-short"
    for i in np.flatnonzero(code == _QUIET):
        out[i] = (f"no demand in the last {quiet[i]} available periods (limit {limit[i]}: the larger "
                  f"of {opt['quiet_min']} and {opt['quiet_factor']:g} x {interval[i]:.2f} periods "
                  f"between demands); {figures[i]} would make it {PATTERNS[measured[i]]}: gone-quiet")
    return out


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}{'' if n == 1 else 's'}"

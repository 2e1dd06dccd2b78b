"""Stock under a budget, uncertain lead times, packs and minimum orders.

Periodic review, order-up-to level ``S``, unmet demand backordered: the same
model and definitions as :mod:`sparsedemand.stock`. Per item and whole-unit
level ``S = 0 .. S_max`` a :class:`ServiceCurves` holds

* ``filled(S)``: expected units filled from stock per period,
  ``(E[D_R] - ESPRC(S)) / R`` with ``ESPRC(S) = E[(D_{L+R} - S)^+] - E[(D_L - S)^+]``,
  i.e. the expected fill rate times the mean demand per period;
* ``on_hand(S)``: expected stock on hand, ``(1/R) sum_j E[(S - D_{L+j})^+]``, ``j = 1 .. R``;
* ``cycle_service(S)``: ``P(D_{L+R} <= S)``.

:func:`order_up_to_curves` builds them from the PMFs the stock stage already
computes. On top of the curves: :func:`allocate_budget` (greedy marginal
analysis), :func:`budget_frontier` and :func:`uniform_ladder` (what a budget
buys against one service target for all), :func:`packed_curves` and
:func:`order_quantity` (packs and minimum orders), and the lead-time helpers
:func:`lead_time_mixture` and :func:`lead_time_distribution`.

Examples
--------
>>> c = service_curves([[0.0, 0.6, 0.9, 1.0]], [[0.0, 0.4, 1.1, 2.0]])
>>> allocate_budget(c, unit_price=[10.0], budget=12.0).level.tolist()
[2]
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numba import njit
from scipy.special import gammaln

from .errors import InputError
from .methods import distributions as dist

__all__ = [
    "ServiceCurves", "Allocation", "service_curves", "order_up_to_curves", "levels_for_service",
    "curve_values", "allocate_budget", "budget_frontier", "uniform_ladder", "packed_curves",
    "order_quantity", "lead_time_mixture", "lead_time_distribution", "lead_time_moments",
    "lead_time_demand_moments",
]

_SLACK = 1e-12  # the stock stage's slack on a cumulative probability
_GAIN_TOL = 1e-12  # relative: gains below this share of an item's demand are noise


# --------------------------------------------------------------------------- curves
@dataclass(frozen=True)
class ServiceCurves:
    """Per-item curves over whole order-up-to levels, stored flat (CSR).

    Item ``i`` has levels ``S = 0 .. sizes[i] - 1`` at ``indptr[i] + S`` of
    ``filled``, ``on_hand`` and ``cycle_service`` (NaN when not given).
    ``mean_demand`` is the expected demand per period (what ``filled`` tends to).
    """

    indptr: np.ndarray
    filled: np.ndarray
    on_hand: np.ndarray
    cycle_service: np.ndarray
    mean_demand: np.ndarray
    items: list

    @property
    def n_items(self) -> int:
        return len(self.indptr) - 1

    @property
    def sizes(self) -> np.ndarray:
        return np.diff(self.indptr)


def _flat(curve, n: int | None, name: str) -> tuple[np.ndarray, np.ndarray]:
    """(flat values, lengths) from a 2-D array or ragged rows; trailing NaN = beyond the item's grid."""
    rows = []
    for r in (np.asarray(curve, dtype=np.float64) if isinstance(curve, np.ndarray) else curve):
        r = np.asarray(r, dtype=np.float64).ravel()
        ok = np.flatnonzero(~np.isnan(r))
        rows.append(r[: ok[-1] + 1] if ok.size else r[:0])
    if n is not None and len(rows) != n:
        raise InputError(f"{name} has {len(rows)} items, expected {n}")
    lengths = np.fromiter((len(r) for r in rows), dtype=np.int64, count=len(rows))
    flat = np.concatenate(rows) if rows else np.zeros(0)
    return flat, lengths


def service_curves(filled, on_hand, *, cycle_service=None, mean_demand=None, items=None) -> ServiceCurves:
    """Check and pack per-item curves over ``S = 0 .. S_max`` (2-D arrays or ragged rows).

    Parameters
    ----------
    filled, on_hand : 2-D array or sequence of 1-D arrays
        Expected units filled per period and expected units on hand at each
        level; ``on_hand`` must not decrease with ``S``. In a 2-D array,
        trailing NaN mark levels beyond an item's grid.
    cycle_service : same shape, optional
        ``P(no stock-out in a cycle)`` at each level (needed by the frontier).
    mean_demand : array (n_items,), optional
        Mean demand per period (default: the last ``filled`` value).
    items : sequence, optional
        Item labels for messages and tables.

    Examples
    --------
    >>> service_curves([[0.0, 0.5], [0.0, 1.0, 2.0]], [[0.0, 1.0], [0.0, 0.5, 1.0]]).sizes.tolist()
    [2, 3]
    """
    f, lengths = _flat(filled, None, "filled")
    n = len(lengths)
    labels = list(range(n)) if items is None else list(items)
    if len(labels) != n:
        raise InputError(f"{len(labels)} item labels for {n} curves")
    h, lh = _flat(on_hand, n, "on_hand")
    c, lc = (np.full_like(f, np.nan), lengths) if cycle_service is None else _flat(cycle_service, n, "cycle_service")
    indptr = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    for name, arr, ln in (("filled", f, lengths), ("on_hand", h, lh), ("cycle_service", c, lc)):
        bad = (ln != lengths) | (lengths == 0)
        if bad.any():
            raise InputError(f"{name} curve of item {labels[int(np.flatnonzero(bad)[0])]!r} is empty or "
                             "not as long as its filled curve")
        if name != "cycle_service" or cycle_service is not None:
            nonfinite = ~np.isfinite(arr)
            if nonfinite.any():
                i = int(np.searchsorted(indptr, np.flatnonzero(nonfinite)[0], side="right") - 1)
                raise InputError(f"{name} curve of item {labels[i]!r} has a missing or infinite value")
    drop = np.diff(h) < -1e-9 * np.maximum(1.0, np.abs(h[1:]))
    drop[indptr[1:-1] - 1] = False  # across items
    if drop.any():
        i = int(np.searchsorted(indptr, np.flatnonzero(drop)[0] + 1, side="right") - 1)
        raise InputError(f"on_hand curve of item {labels[i]!r} decreases with the order-up-to level")
    if mean_demand is None:
        mean = f[indptr[1:] - 1].copy()
    else:
        mean = np.broadcast_to(np.asarray(mean_demand, dtype=np.float64), (n,)).copy()
        if (~np.isfinite(mean) | (mean < 0)).any():
            i = int(np.flatnonzero(~np.isfinite(mean) | (mean < 0))[0])
            raise InputError(f"mean_demand must be finite and >= 0, got {mean[i]!r} for item {labels[i]!r}")
    return ServiceCurves(indptr, f, h, c, mean, labels)


def order_up_to_curves(p_lead, p_steps: Sequence, *, review_period=1, items=None) -> ServiceCurves:
    """Service curves from dense PMFs, with the stock stage's formulas.

    Parameters
    ----------
    p_lead : ndarray (n_items, W)
        PMF of demand over the lead time ``D_L``.
    p_steps : sequence of ndarray (n_items, W)
        ``p_steps[j-1]`` is the PMF of ``D_{L+min(j, R)}``, ``j = 1 .. max R``
        (as ``stock._pmf_targets`` takes them); the last one is ``D_{L+R}``.
    review_period : int or array of int (n_items,)
        ``R``, >= 1.

    Returns
    -------
    ServiceCurves
        Levels ``S = 0 .. W`` for every item (level ``W`` lies beyond the grid,
        where the curves have reached their limits).

    Examples
    --------
    >>> p = np.array([[0.5, 0.5, 0.0]])   # D_L in {0, 1}; D_{L+1} adds 0 or 1 more
    >>> order_up_to_curves(p, [np.array([[0.25, 0.5, 0.25]])]).filled.round(2).tolist()
    [0.0, 0.25, 0.5, 0.5]
    """
    p_lead = np.asarray(p_lead, dtype=np.float64)
    steps = [np.asarray(p, dtype=np.float64) for p in p_steps]
    if p_lead.ndim != 2 or not steps or any(p.shape != p_lead.shape for p in steps):
        raise InputError("p_lead and every p_steps entry must be 2-D PMFs of one shape (items x grid)")
    n, width = p_lead.shape
    R = np.broadcast_to(np.asarray(review_period), (n,)).astype(np.int64)
    if (R < 1).any() or (R > len(steps)).any():
        raise InputError(f"review_period must lie in 1 .. {len(steps)} (one PMF per step)")
    level = np.arange(width + 1, dtype=np.float64)[None, :]
    curve_l = dist.shortage_curve(p_lead)
    curve_c = dist.shortage_curve(steps[-1])
    mean_r = np.maximum(dist.pmf_mean(steps[-1]) - dist.pmf_mean(p_lead), 0.0)
    filled = (mean_r[:, None] - (curve_c - curve_l)) / R[:, None]
    on_hand = np.zeros((n, width + 1))
    for j, p in enumerate(steps, start=1):  # E[(S - D)^+] = S - E[D] + E[(D - S)^+]
        left = np.maximum(level - dist.pmf_mean(p)[:, None] + dist.shortage_curve(p), 0.0)
        on_hand += np.where((j <= R)[:, None], left, 0.0)
    csl = np.concatenate([np.cumsum(steps[-1], axis=1), np.ones((n, 1))], axis=1)
    return service_curves(np.maximum(filled, 0.0), on_hand / R[:, None], cycle_service=np.minimum(csl, 1.0),
                          mean_demand=mean_r / R, items=items)


def levels_for_service(curves: ServiceCurves, level: float, *, floor=0) -> np.ndarray:
    """Smallest ``S`` with ``cycle_service(S) >= level`` per item (the stock stage's rule), at least ``floor``.

    Examples
    --------
    >>> c = service_curves([[0.0, 1.0, 1.0]], [[0.0, 1.0, 2.0]], cycle_service=[[0.3, 0.9, 1.0]])
    >>> levels_for_service(c, 0.9).tolist()
    [1]
    """
    if np.isnan(curves.cycle_service).any():
        raise InputError("a service target needs cycle_service curves")
    hit = curves.cycle_service >= float(level) - _SLACK
    out = np.empty(curves.n_items, dtype=np.int64)
    for i, (lo, hi) in enumerate(zip(curves.indptr[:-1], curves.indptr[1:])):
        h = hit[lo:hi]
        out[i] = int(np.argmax(h)) if h.any() else hi - lo - 1
    return np.maximum(out, _floors(curves, floor))


def curve_values(curves: ServiceCurves, level) -> dict:
    """Per-item ``filled``, ``fill_rate``, ``on_hand`` and ``cycle_service`` at whole levels ``S``.

    Examples
    --------
    >>> c = service_curves([[0.0, 0.5, 1.0]], [[0.0, 0.5, 1.5]])
    >>> curve_values(c, [1])["fill_rate"].tolist()
    [0.5]
    """
    S = _floors(curves, level)
    at = curves.indptr[:-1] + S
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = np.where(curves.mean_demand > 0, curves.filled[at] / curves.mean_demand, np.nan)
    return {"filled": curves.filled[at], "fill_rate": rate, "on_hand": curves.on_hand[at],
            "cycle_service": curves.cycle_service[at]}


def _floors(curves: ServiceCurves, floor) -> np.ndarray:
    n = curves.n_items
    f = np.broadcast_to(np.asarray(floor, dtype=np.float64), (n,))
    bad = ~np.isfinite(f) | (f != np.round(f)) | (f < 0) | (f >= curves.sizes)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"minimum order-up-to level {f[i]!r} for item {curves.items[i]!r} is not a whole "
                         f"level in 0 .. {curves.sizes[i] - 1}")
    return f.astype(np.int64)


def _prices(curves: ServiceCurves, unit_price) -> np.ndarray:
    if unit_price is None:
        raise InputError("--budget needs unit prices")
    p = np.asarray(unit_price, dtype=np.float64)
    p = np.full(curves.n_items, float(p)) if p.ndim == 0 else p
    if p.shape != (curves.n_items,):
        raise InputError(f"--budget needs one unit price per item ({curves.n_items}), got {p.size}")
    bad = ~np.isfinite(p) | (p <= 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        what = "no unit price" if np.isnan(p[i]) else f"unit price {p[i]!r}"
        raise InputError(f"--budget needs unit prices > 0: item {curves.items[i]!r} has {what}")
    return p


# --------------------------------------------------------------------------- greedy path
@njit(cache=True)
def _hull_steps(v, f, indptr, floor, eps, to_level, dv, df, ratio):
    """Upper concave envelope of each item's (value, filled) points from its floor on.

    Item ``i``'s steps go to slots ``indptr[i] ..``; returns the step count per
    item. Points that gain nothing over the best so far are skipped; collinear
    points are kept (finer steps). Ratios are made non-increasing per item so
    rounding cannot reorder an item's own steps.
    """
    n = indptr.shape[0] - 1
    count = np.zeros(n, dtype=np.int64)
    stack = np.empty(max(1, int(np.max(np.diff(indptr)))), dtype=np.int64)
    for i in range(n):
        lo = indptr[i] + floor[i]
        top = 0
        stack[0] = lo
        for j in range(lo + 1, indptr[i + 1]):
            if f[j] <= f[stack[top]] + eps[i]:
                continue
            while top >= 1:
                a = stack[top - 1]
                b = stack[top]
                if (v[b] - v[a]) * (f[j] - f[a]) - (f[b] - f[a]) * (v[j] - v[a]) > 0.0:
                    top -= 1
                else:
                    break
            top += 1
            stack[top] = j
        base = indptr[i]
        for k in range(1, top + 1):
            a = stack[k - 1]
            b = stack[k]
            to_level[base + k - 1] = b - base
            dv[base + k - 1] = v[b] - v[a]
            df[base + k - 1] = f[b] - f[a]
            r = (f[b] - f[a]) / (v[b] - v[a]) if v[b] > v[a] else np.inf
            if k > 1 and r > ratio[base + k - 2]:
                r = ratio[base + k - 2]
            ratio[base + k - 1] = r
        count[i] = top
    return count


@dataclass(frozen=True)
class _Path:
    """Envelope steps of all items in greedy order (largest gain per unit of value first)."""

    item: np.ndarray
    from_level: np.ndarray
    to_level: np.ndarray
    dv: np.ndarray
    df: np.ndarray
    ratio: np.ndarray
    floor: np.ndarray
    value0: float  # stock value of the floors


def _path(curves: ServiceCurves, price: np.ndarray, floor) -> _Path:
    fl = _floors(curves, floor)
    sizes = curves.sizes
    v = curves.on_hand * np.repeat(price, sizes)
    m = curves.filled.size
    to_level, dv, df, ratio = (np.zeros(m, np.int64), np.zeros(m), np.zeros(m), np.zeros(m))
    eps = _GAIN_TOL * np.maximum(curves.mean_demand, np.abs(curves.filled[curves.indptr[1:] - 1]))
    count = _hull_steps(v, curves.filled, curves.indptr, fl, eps, to_level, dv, df, ratio)
    keep = np.arange(m) - np.repeat(curves.indptr[:-1], sizes) < np.repeat(count, sizes)
    item = np.repeat(np.arange(curves.n_items), sizes)[keep]
    to_level, dv, df, ratio = to_level[keep], dv[keep], df[keep], ratio[keep]
    first = np.ones(item.size, dtype=bool)
    first[1:] = item[1:] != item[:-1]
    from_level = np.where(first, fl[item], np.roll(to_level, 1))
    order = np.argsort(-ratio, kind="stable")
    value0 = float(v[curves.indptr[:-1] + fl].sum())
    return _Path(item[order], from_level[order], to_level[order], dv[order], df[order], ratio[order], fl, value0)


@njit(cache=True)
def _take(item, dv, room, n_items, fill_up):
    """Steps taken in greedy order within ``room``; with ``fill_up`` a step that does not fit freezes its item."""
    taken = np.zeros(item.shape[0], dtype=np.bool_)
    frozen = np.zeros(n_items, dtype=np.bool_)
    for k in range(item.shape[0]):
        i = item[k]
        if frozen[i]:
            continue
        if dv[k] <= room:
            taken[k] = True
            room -= dv[k]
        elif fill_up:
            frozen[i] = True
        else:
            break
    return taken


@dataclass(frozen=True)
class Allocation:
    """Result of :func:`allocate_budget` (per-item arrays have shape (n_items,)).

    Attributes
    ----------
    level : chosen order-up-to level ``S`` per item.
    at_floor : True where the item was held at its minimum level.
    filled, on_hand, stock_value : per item at ``level`` (units per period, units, value).
    total_value, total_filled : sums; ``total_value <= budget``.
    fill_rate : ``total_filled / total mean demand`` (demand-weighted fill rate).
    upper_bound : expected units filled per period that no allocation within
        the budget can exceed (the greedy's fractional bound on the envelopes).
    """

    items: list
    level: np.ndarray
    at_floor: np.ndarray
    filled: np.ndarray
    on_hand: np.ndarray
    stock_value: np.ndarray
    budget: float
    total_value: float
    total_filled: float
    fill_rate: float
    upper_bound: float

    def table(self) -> pd.DataFrame:
        """One row per item: ``item, order_up_to, at_floor, filled, on_hand, stock_value``."""
        return pd.DataFrame({"item": self.items, "order_up_to": self.level, "at_floor": self.at_floor,
                             "filled": self.filled, "on_hand": self.on_hand, "stock_value": self.stock_value})


def allocate_budget(curves: ServiceCurves, *, unit_price, budget: float, floor=0,
                    fill_up: bool = True) -> Allocation:
    """Order-up-to levels serving the most expected demand within a stock-value budget.

    Greedy marginal analysis: from each item's ``floor``, repeatedly raise the
    item whose next step gains the most expected units filled per unit of
    added expected on-hand value (``unit_price x on_hand``). An item steps
    along the upper concave envelope of its curve: from level ``S`` to the
    next level maximising ``(filled(S') - filled(S)) / (value(S') - value(S))``
    over all ``S' > S`` (the nearest on ties), so a plateau of a lumpy item
    does not hide a later gain. Steps are taken in order of that ratio while
    they fit; with ``fill_up`` a step that does not fit stops only its own item
    and smaller steps of other items are still taken.

    What this costs: on the envelopes the greedy is optimal (Fox 1966,
    Management Science 13:210-216, marginal analysis for separable concave
    resource allocation; from memory): at every stock value it reaches, no
    choice of levels with no more value fills more. Between those points, and
    on non-concave raw curves, it can fall short of the best choice by at most
    the gain of the one envelope step that did not fit (so by at most one
    envelope step of one item); ``upper_bound`` reports the fractional bound.

    Parameters
    ----------
    curves : ServiceCurves
    unit_price : float or array (n_items,)
        Price per unit, > 0 for every item.
    budget : float
        Largest total expected on-hand value.
    floor : int or array of int (n_items,)
        Minimum level per item (say from a minimum service level,
        :func:`levels_for_service`, or the item's own fixed target).
    fill_up : bool
        Keep taking smaller steps of other items after one does not fit.

    Raises
    ------
    InputError
        A missing, zero or negative price (naming the item), or a budget below
        the value of the floors.

    Examples
    --------
    >>> c = service_curves([[0.0, 0.8, 0.9, 1.0], [0.0, 0.5, 1.0, 1.0]],
    ...                    [[0.0, 0.2, 1.0, 2.0], [0.0, 0.5, 1.2, 2.2]])
    >>> a = allocate_budget(c, unit_price=[1.0, 1.0], budget=1.5)
    >>> a.level.tolist(), round(a.total_value, 2)
    ([1, 2], 1.4)
    """
    price = _prices(curves, unit_price)
    budget = float(budget)
    if not math.isfinite(budget):
        raise InputError(f"--budget must be a finite number, got {budget!r}")
    path = _path(curves, price, floor)
    if path.value0 > budget * (1 + 1e-12):
        raise InputError(f"--budget {budget:,.2f} is below {path.value0:,.2f}, the stock value of the minimum "
                         "order-up-to levels")
    room = budget - path.value0 + 1e-12 * max(1.0, abs(budget))
    taken = _take(path.item, path.dv, room, curves.n_items, fill_up)
    level = path.floor.copy()
    np.maximum.at(level, path.item[taken], path.to_level[taken])
    at = curves.indptr[:-1] + level
    filled, on_hand = curves.filled[at], curves.on_hand[at]
    # fractional bound: the path's prefix that fits plus part of the next step
    cum_v = np.cumsum(path.dv)
    k = int(np.searchsorted(cum_v, room, side="right"))
    bound = curves.filled[curves.indptr[:-1] + path.floor].sum() + path.df[:k].sum()
    if k < path.dv.size:
        bound += (room - (cum_v[k - 1] if k else 0.0)) * path.ratio[k]
    total = float(curves.mean_demand.sum())
    return Allocation(curves.items, level, level == path.floor, filled, on_hand, on_hand * price, budget,
                      float((on_hand * price).sum()), float(filled.sum()),
                      float(filled.sum() / total) if total > 0 else math.nan, float(max(bound, filled.sum())))


def _path_table(curves: ServiceCurves, path: _Path) -> pd.DataFrame:
    """Totals after each step of the greedy path (row 0: the floors)."""
    n = curves.n_items
    base = curves.indptr[:-1]
    csl = curves.cycle_service
    first = np.zeros(path.item.size, dtype=bool)
    seen = np.zeros(n, dtype=bool)
    _, idx = np.unique(path.item, return_index=True)
    first[idx] = True  # an item leaves its floor at its first step in greedy order
    seen[path.item[idx]] = True
    total = float(curves.mean_demand.sum())
    filled0 = float(curves.filled[base + path.floor].sum())
    d_csl = csl[base[path.item] + path.to_level] - csl[base[path.item] + path.from_level]
    with np.errstate(invalid="ignore", divide="ignore"):
        return pd.DataFrame({
            "stock_value": path.value0 + np.concatenate([[0.0], np.cumsum(path.dv)]),
            "fill_rate": (filled0 + np.concatenate([[0.0], np.cumsum(path.df)])) / total,
            "cycle_service_level": (csl[base + path.floor].sum() + np.concatenate([[0.0], np.cumsum(d_csl)])) / n,
            "items_at_floor": n - np.concatenate([[0], np.cumsum(first)]),
        })


def _uniform_row(curves: ServiceCurves, price: np.ndarray, level: np.ndarray) -> dict:
    vals = curve_values(curves, level)
    total = float(curves.mean_demand.sum())
    return {"stock_value": float((vals["on_hand"] * price).sum()),
            "fill_rate": float(vals["filled"].sum() / total) if total > 0 else math.nan,
            "cycle_service_level": float(vals["cycle_service"].mean())}


def budget_frontier(curves: ServiceCurves, *, unit_price, floor=0, up_to_service: float = 0.995,
                    max_rows: int = 300) -> pd.DataFrame:
    """Fill rate against stock value along the greedy path, in one pass.

    Each row is a point of the path :func:`allocate_budget` walks (without
    its fill-up): the stock value spent so far and what it buys. Rows run
    from the floors up to what a uniform target of ``up_to_service`` cycle
    service (for every item, at least its floor) would cost, thinned to at
    most ``max_rows`` points evenly spread in stock value (the first and the
    last kept). Every row is optimal for its own stock value on the envelopes.

    Returns
    -------
    pandas.DataFrame
        Columns ``stock_value, fill_rate`` (expected share of all demand met
        from stock, weighted by mean demand), ``cycle_service_level`` (mean
        over items), ``items_at_floor``; both rates and the value never
        decrease down the table. ``attrs["uniform_value"]`` is the cap.

    Examples
    --------
    >>> c = service_curves([[0.0, 0.9, 1.0], [0.0, 0.5, 1.0]], [[0.0, 0.1, 1.0], [0.0, 0.5, 1.0]],
    ...                    cycle_service=[[0.1, 0.9, 1.0], [0.5, 0.8, 1.0]])
    >>> budget_frontier(c, unit_price=1.0, up_to_service=0.99)["fill_rate"].round(3).tolist()
    [0.0, 0.45, 0.7, 0.95, 1.0]
    """
    if not 0.0 < float(up_to_service) <= 1.0:
        raise InputError(f"up_to_service must lie in (0, 1], got {up_to_service!r}")
    if int(max_rows) != max_rows or max_rows < 2:
        raise InputError(f"max_rows must be a whole number >= 2, got {max_rows!r}")
    price = _prices(curves, unit_price)
    path = _path(curves, price, floor)
    table = _path_table(curves, path)
    cap = _uniform_row(curves, price, levels_for_service(curves, up_to_service, floor=floor))["stock_value"]
    table = table[table["stock_value"] <= cap * (1 + 1e-12) + 1e-12].reset_index(drop=True)
    if len(table) > max_rows:
        grid = np.linspace(table["stock_value"].iloc[0], table["stock_value"].iloc[-1], int(max_rows))
        rows = np.unique(np.searchsorted(table["stock_value"].to_numpy(), grid, side="right") - 1)
        table = table.iloc[np.union1d(rows, [0, len(table) - 1])].reset_index(drop=True)
    table.attrs["uniform_value"] = cap
    return table


def uniform_ladder(curves: ServiceCurves, *, unit_price,
                   levels: Sequence[float] = (0.8, 0.9, 0.95, 0.98, 0.99, 0.995), floor=0) -> pd.DataFrame:
    """The same figures for one cycle-service target for all items, beside the allocation's.

    Each row sets every item to the smallest level meeting ``service_target``
    (at least its floor). ``allocated_fill_rate`` and
    ``allocated_cycle_service_level`` are what the greedy path reaches for no
    more than the same stock value: the gain of allocating the budget.

    Examples
    --------
    >>> c = service_curves([[0.0, 0.9, 1.0], [0.0, 0.5, 1.0]], [[0.0, 0.1, 1.0], [0.0, 0.5, 1.0]],
    ...                    cycle_service=[[0.1, 0.9, 1.0], [0.5, 0.8, 1.0]])
    >>> t = uniform_ladder(c, unit_price=1.0, levels=[0.8])
    >>> t[["stock_value", "fill_rate", "allocated_fill_rate"]].round(3).iloc[0].tolist()
    [0.6, 0.7, 0.7]
    """
    price = _prices(curves, unit_price)
    path = _path(curves, price, floor)
    table = _path_table(curves, path)
    fl = _floors(curves, floor)
    rows = []
    for lv in levels:
        if not 0.0 <= float(lv) <= 1.0:
            raise InputError(f"service levels must lie in [0, 1], got {lv!r}")
        S = levels_for_service(curves, lv, floor=fl)
        row = {"service_target": float(lv), **_uniform_row(curves, price, S), "items_at_floor": int((S == fl).sum())}
        k = int(np.searchsorted(table["stock_value"].to_numpy(), row["stock_value"] * (1 + 1e-12), side="right") - 1)
        row["allocated_fill_rate"] = float(table["fill_rate"].iloc[k])
        row["allocated_cycle_service_level"] = float(table["cycle_service_level"].iloc[k])
        rows.append(row)
    return pd.DataFrame(rows)

"""Budget allocation by greedy marginal analysis, its frontier and the uniform-target ladder.

Examples
--------
>>> from sparsedemand.budget.curves import service_curves
>>> c = service_curves([[0.0, 0.6, 0.9, 1.0]], [[0.0, 0.4, 1.1, 2.0]])
>>> allocate_budget(c, unit_price=[10.0], budget=12.0).level.tolist()
[2]
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numba import njit

from ..errors import InputError
from .curves import ServiceCurves, _floors, _prices, curve_values, levels_for_service

__all__ = ["Allocation", "allocate_budget", "budget_frontier", "uniform_ladder"]

_GAIN_TOL = 1e-12  # relative: gains below this share of an item's demand are noise


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


def _levels(curves: ServiceCurves, path: _Path, room: float, fill_up: bool) -> np.ndarray:
    taken = _take(path.item, path.dv, room, curves.n_items, fill_up)
    level = path.floor.copy()
    np.maximum.at(level, path.item[taken], path.to_level[taken])  # an item's taken steps form a prefix
    return level


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
    >>> from sparsedemand.budget import service_curves
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
    level = _levels(curves, path, room, fill_up)
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
    >>> from sparsedemand.budget import service_curves
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
    ``allocated_cycle_service_level`` are what :func:`allocate_budget` gets
    from the same stock value as a budget: the gain of allocating it.

    Examples
    --------
    >>> from sparsedemand.budget import service_curves
    >>> c = service_curves([[0.0, 0.9, 1.0], [0.0, 0.5, 1.0]], [[0.0, 0.1, 1.0], [0.0, 0.5, 1.0]],
    ...                    cycle_service=[[0.1, 0.9, 1.0], [0.5, 0.8, 1.0]])
    >>> t = uniform_ladder(c, unit_price=1.0, levels=[0.8])
    >>> t[["stock_value", "fill_rate", "allocated_fill_rate"]].round(3).iloc[0].tolist()
    [0.6, 0.7, 0.7]
    """
    price = _prices(curves, unit_price)
    path = _path(curves, price, floor)
    fl = _floors(curves, floor)
    rows = []
    for lv in levels:
        if not 0.0 <= float(lv) <= 1.0:
            raise InputError(f"service levels must lie in [0, 1], got {lv!r}")
        S = levels_for_service(curves, lv, floor=fl)
        row = {"service_target": float(lv), **_uniform_row(curves, price, S), "items_at_floor": int((S == fl).sum())}
        room = row["stock_value"] - path.value0 + 1e-12 * max(1.0, row["stock_value"])
        alloc = _uniform_row(curves, price, _levels(curves, path, room, True))
        row["allocated_fill_rate"] = alloc["fill_rate"]
        row["allocated_cycle_service_level"] = alloc["cycle_service_level"]
        rows.append(row)
    return pd.DataFrame(rows)

"""Replay recorded demand against a periodic-review, order-up-to stock policy.

The policy reviews stock every ``review`` periods (R) and orders up to a
level S that the caller sets per item and per review, typically a quantile of
the forecast demand over ``lead_time + review`` periods (L + R). An order
placed at the start of period t arrives at the start of period t + L, before
that period's demand (so L = 0 means same-period delivery), which is why one
order has to cover the demand of periods t .. t + L + R - 1.

Each period, in this order:

1. at a review period (t = 0, R, 2R, ...) order ``max(0, S - position)``,
   the position being stock on hand minus backorders plus everything on order;
2. receive what arrives this period;
3. serve the period's demand from stock on hand. What cannot be served is
   lost (``unmet="lost"``, the customer buys elsewhere) or backordered
   (``unmet="backorder"``, served from later deliveries, which counts as not
   filled on time).

Scoring, per item:

- fill rate: demand served from stock on hand when it occurred / demand;
- cycle service level: share of replenishment cycles with no shortage; a
  cycle runs from one delivery opportunity (L periods after a review) to the
  next, and the periods before the first delivery opportunity form one more
  cycle served from the starting stock;
- average stock on hand at the end of a period;
- stock-out periods: periods where some demand went unmet.

Recorded stock-outs: a period the history flags as unavailable (or whose
demand is NaN) has an unknown true demand. The simulated stock still moves by
the recorded quantity (NaN counts as 0), so that later periods see a
plausible stock, but the period adds nothing to any score: not to demand,
fill, shortages, stock-out periods nor the average on hand, and a cycle made
only of such periods is not counted.

Targets are decision support; follow the organisation's policies, regulations
and qualified staff, especially for safety-critical spares.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
import numpy.typing as npt
import pandas as pd
from numba import njit

from ..errors import InputError

__all__ = ["StockSimulation", "simulate_order_up_to", "review_periods"]

_UNMET = ("lost", "backorder")


@dataclass(frozen=True)
class StockSimulation:
    """Per-item outcome of :func:`simulate_order_up_to` (all arrays have shape (n_items,)).

    Attributes
    ----------
    fill_rate : share of scored demand served from stock when it occurred
        (NaN when the item had no scored demand).
    cycle_service : share of scored replenishment cycles without a shortage
        (NaN when no cycle was scored).
    mean_on_hand : average end-of-period stock on hand over scored periods.
    stockout_periods : scored periods with unmet demand.
    demand : scored demand, units.
    unmet : scored demand not served on time (lost or backordered), units.
    orders : orders placed over the whole run.
    scored_periods, skipped_periods : periods used / left out of the scores.
    cycles : replenishment cycles scored.
    """

    fill_rate: np.ndarray
    cycle_service: np.ndarray
    mean_on_hand: np.ndarray
    stockout_periods: np.ndarray
    demand: np.ndarray
    unmet: np.ndarray
    orders: np.ndarray
    scored_periods: np.ndarray
    skipped_periods: np.ndarray
    cycles: np.ndarray

    def to_frame(self, index=None) -> pd.DataFrame:
        """One row per item, one column per attribute."""
        return pd.DataFrame({f.name: getattr(self, f.name) for f in fields(self)}, index=index)


def review_periods(n_periods: int, *, review: int) -> np.ndarray:
    """Offsets of the review periods 0, R, 2R, ... within ``n_periods``.

    Examples
    --------
    >>> review_periods(7, review=3).tolist()
    [0, 3, 6]
    """
    _check_whole("review", review, minimum=1)
    return np.arange(0, n_periods, review, dtype=np.int64)


@njit(cache=True)
def _simulate_kernel(demand, scored, level, initial, review, lead, backorder):
    n, T = demand.shape
    served_sum = np.zeros(n)
    demand_sum = np.zeros(n)
    on_hand_sum = np.zeros(n)
    stockouts = np.zeros(n, dtype=np.int64)
    orders = np.zeros(n, dtype=np.int64)
    n_scored = np.zeros(n, dtype=np.int64)
    n_cycles = np.zeros(n, dtype=np.int64)
    n_good_cycles = np.zeros(n, dtype=np.int64)
    arrivals = np.zeros(T)
    for i in range(n):
        arrivals[:] = 0.0
        net = initial[i]
        on_order = 0.0
        cycle_scored = False
        cycle_short = False
        for t in range(T):
            # A new replenishment cycle starts at each delivery opportunity.
            if t > 0 and (t - lead) % review == 0 and t >= lead:
                if cycle_scored:
                    n_cycles[i] += 1
                    if not cycle_short:
                        n_good_cycles[i] += 1
                cycle_scored = False
                cycle_short = False
            if t % review == 0:
                q = level[i, t // review] - (net + on_order)
                if q > 0.0:
                    orders[i] += 1
                    on_order += q
                    if t + lead < T:
                        arrivals[t + lead] += q
            if arrivals[t] > 0.0:
                net += arrivals[t]
                on_order -= arrivals[t]
            d = demand[i, t]
            if d != d:
                d = 0.0
            stock = net if net > 0.0 else 0.0
            served = d if d < stock else stock
            if backorder:
                net -= d
            else:
                net = stock - served
            if scored[i, t]:
                n_scored[i] += 1
                cycle_scored = True
                demand_sum[i] += d
                served_sum[i] += served
                on_hand_sum[i] += net if net > 0.0 else 0.0
                # Tolerance for rounding in fractional order-up-to levels.
                if d - served > 1e-9 * (1.0 + d):
                    stockouts[i] += 1
                    cycle_short = True
        if cycle_scored:
            n_cycles[i] += 1
            if not cycle_short:
                n_good_cycles[i] += 1
    return served_sum, demand_sum, on_hand_sum, stockouts, orders, n_scored, n_cycles, n_good_cycles


def _check_whole(name: str, value, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{name}: must be a whole number of periods >= {minimum}, got {value!r}")
    return int(value)


def _item_label(i: int) -> str:
    return f"item {i}"


def _levels(order_up_to, n_items: int, n_periods: int, review: int) -> np.ndarray:
    """Order-up-to level per item and review, shape (n_items, n_reviews)."""
    n_reviews = -(-n_periods // review)
    s = np.asarray(order_up_to, dtype=np.float64)
    if s.ndim == 0:
        s = np.full((n_items, n_reviews), float(s))
    elif s.ndim == 1:
        if s.shape[0] != n_items:
            raise InputError(f"order_up_to: {s.shape[0]} levels for {n_items} items")
        s = np.repeat(s[:, None], n_reviews, axis=1)
    elif s.ndim == 2 and s.shape[0] == n_items and s.shape[1] == n_periods and n_periods != n_reviews:
        s = s[:, ::review]  # one level per period given: use those of the review periods
    if s.shape != (n_items, n_reviews):
        raise InputError(
            f"order_up_to: shape {np.shape(order_up_to)}; expected ({n_items}, {n_reviews}) "
            f"(one level per item and review), ({n_items}, {n_periods}) or ({n_items},)"
        )
    bad = ~np.isfinite(s) | (s < 0)
    if bad.any():
        i, k = np.argwhere(bad)[0]
        raise InputError(f"order_up_to: missing or negative level for {_item_label(i)} at review {k}")
    return np.ascontiguousarray(s)


def _check_demand(demand) -> np.ndarray:
    """Demand as a C float64 (items, periods) array; NaN allowed, negative or infinite not."""
    d = np.asarray(demand, dtype=np.float64)
    if d.ndim == 1:
        d = d[None, :]
    if d.ndim != 2 or d.shape[1] == 0:
        raise InputError(f"demand: expected a non-empty 1-D series or 2-D items x periods array, got shape {np.shape(demand)}")
    d = np.ascontiguousarray(d)
    if np.isinf(d).any() or (d < 0).any():
        i, t = np.argwhere(np.isinf(d) | (d < 0))[0]
        raise InputError(f"demand: negative or infinite value at {_item_label(i)}, period {t}")
    return d


def _check_available(available, shape: tuple[int, int]) -> np.ndarray:
    """Availability flags as a bool array of the demand's shape."""
    flags = np.asarray(available)
    if flags.ndim == 1:
        flags = flags[None, :]
    if flags.shape != shape:
        raise InputError(f"available: mask has shape {np.shape(available)}, demand has {shape}")
    if flags.dtype != np.bool_:
        if not np.isin(flags, (0, 1)).all():
            raise InputError("available: availability flags must be boolean (or 0/1)")
        flags = flags.astype(np.bool_)
    return flags


def _check_initial(initial_stock, n_items: int) -> np.ndarray:
    """Starting stock per item (a scalar applies to every item)."""
    initial = np.asarray(initial_stock, dtype=np.float64).ravel()
    if initial.size == 1:
        initial = np.full(n_items, float(initial[0]))
    if initial.shape != (n_items,):
        raise InputError(f"initial_stock: {initial.size} values for {n_items} items")
    if not np.isfinite(initial).all() or (initial < 0).any():
        i = int(np.flatnonzero(~np.isfinite(initial) | (initial < 0))[0])
        raise InputError(f"initial_stock: missing or negative value for {_item_label(i)}")
    return initial


def simulate_order_up_to(
    demand: npt.ArrayLike,
    order_up_to: npt.ArrayLike,
    *,
    review: int = 1,
    lead_time: int = 0,
    available: npt.ArrayLike | None = None,
    unmet: str = "lost",
    initial_stock: npt.ArrayLike | None = None,
) -> StockSimulation:
    """Run a periodic-review order-up-to policy over recorded demand, item by item.

    See the module docstring for the timeline and the scoring rules. The
    policy is the (R, S) system of the inventory handbooks (Silver, Pyke &
    Peterson 1998, "Inventory Management and Production Planning and
    Scheduling", 3rd ed., Wiley; from memory).

    Parameters
    ----------
    demand : array_like (items, periods) or (periods,)
        Recorded demand over the simulated periods; NaN marks an unavailable
        period.
    order_up_to : array_like
        S per item and review, shape (items, n_reviews) with
        ``n_reviews = ceil(periods / review)``; or one per item and period
        (the review periods' values are used); or one per item; or a scalar.
    review : int, default 1
        Review period R, in periods.
    lead_time : int, default 0
        Lead time L, in periods.
    available : array_like of bool, same shape as ``demand``, optional
        False where the history says the item was out of stock; such periods
        are skipped in scoring.
    unmet : {"lost", "backorder"}, default "lost"
        What happens to demand that cannot be served from stock.
    initial_stock : array_like (items,), optional
        Stock on hand at the start, nothing on order. Default: the first
        review's order-up-to level.

    Returns
    -------
    StockSimulation

    Examples
    --------
    >>> # 2 units a period, review every 2, lead time 1, S = 5 covers 2.5 of the 3 periods at risk
    >>> res = simulate_order_up_to([[2.0] * 8], [5.0], review=2, lead_time=1)
    >>> float(res.fill_rate[0]), float(res.cycle_service[0])
    (0.875, 0.6)
    """
    if unmet not in _UNMET:
        raise InputError(f"unmet: must be one of {', '.join(_UNMET)}, got {unmet!r}")
    review = _check_whole("review", review, minimum=1)
    lead = _check_whole("lead_time", lead_time, minimum=0)
    d = _check_demand(demand)
    n_items, n_periods = d.shape
    scored = np.isfinite(d)
    if available is not None:
        scored &= _check_available(available, d.shape)
    level = _levels(order_up_to, n_items, n_periods, review)
    initial = level[:, 0].copy() if initial_stock is None else _check_initial(initial_stock, n_items)

    served, total, on_hand, stockouts, orders, n_scored, n_cycles, n_good = _simulate_kernel(
        d, np.ascontiguousarray(scored), level, initial, np.int64(review), np.int64(lead), unmet == "backorder"
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        fill = np.where(total > 0, served / np.where(total > 0, total, 1.0), np.nan)
        csl = np.where(n_cycles > 0, n_good / np.maximum(n_cycles, 1), np.nan)
        mean_on_hand = np.where(n_scored > 0, on_hand / np.maximum(n_scored, 1), np.nan)
    return StockSimulation(
        fill_rate=fill,
        cycle_service=csl,
        mean_on_hand=mean_on_hand,
        stockout_periods=stockouts,
        demand=total,
        unmet=total - served,
        orders=orders,
        scored_periods=n_scored,
        skipped_periods=n_periods - n_scored,
        cycles=n_cycles,
    )

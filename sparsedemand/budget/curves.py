"""Service curves per whole order-up-to level, and what packs do to them.

Periodic review, order-up-to level ``S``, unmet demand backordered: the
stock stage's model and definitions (see the package docstring).

Examples
--------
>>> c = service_curves([[0.0, 0.5, 1.0]], [[0.0, 0.5, 1.5]])
>>> curve_values(c, [2])["on_hand"].tolist()
[1.5]
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numba import njit

from ..errors import InputError
from ..methods import distributions as dist

__all__ = ["ServiceCurves", "service_curves", "order_up_to_curves", "levels_for_service", "curve_values",
           "order_quantity", "packed_curves"]

_SLACK = 1e-12  # the stock stage's slack on a cumulative probability


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
    if isinstance(curve, np.ndarray) and curve.ndim == 2:  # one pass, no per-row copies
        arr = np.asarray(curve, dtype=np.float64)
        ok = ~np.isnan(arr)
        lengths = np.where(ok.any(axis=1), arr.shape[1] - np.argmax(ok[:, ::-1], axis=1), 0).astype(np.int64)
        if n is not None and len(lengths) != n:
            raise InputError(f"{name} has {len(lengths)} items, expected {n}")
        return arr[np.arange(arr.shape[1])[None, :] < lengths[:, None]], lengths
    rows = []
    for r in curve:
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
            raise InputError(f"mean_demand must be finite and >= 0, got {mean[i]:g} for item {labels[i]!r}")
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
    hits = np.flatnonzero(curves.cycle_service >= float(level) - _SLACK)
    lo, hi = curves.indptr[:-1], curves.indptr[1:]
    pos = np.minimum(np.searchsorted(hits, lo), max(hits.size - 1, 0))
    found = hits[pos] if hits.size else hi
    out = np.where((found >= lo) & (found < hi), found, hi - 1) - lo  # never reached: the last level
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
        raise InputError(f"minimum order-up-to level {f[i]:g} for item {curves.items[i]!r} is not a whole "
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
        what = "no unit price" if np.isnan(p[i]) else f"unit price {p[i]:g}"
        raise InputError(f"--budget needs unit prices > 0: item {curves.items[i]!r} has {what}")
    return p


# --------------------------------------------------------------------------- packs and minimum orders
def order_quantity(order_up_to, position, *, pack_size=1, minimum_order=0) -> np.ndarray:
    """Order now: whole packs, at least the minimum order, nothing when the position is at or above ``S``.

    Rule: with inventory position ``IP`` (on hand + on order - backorders),
    order 0 when ``IP >= S``; otherwise the smallest whole number of packs
    ``n P`` with ``n P >= S - IP`` and ``n P >= M`` (the minimum rounded up to
    whole packs), so the position after ordering is at least ``S``.

    Examples
    --------
    >>> order_quantity([10, 10, 10, 10], [10, 7, 9, -3], pack_size=4, minimum_order=6).tolist()
    [0.0, 8.0, 8.0, 16.0]
    """
    S = np.asarray(order_up_to, dtype=np.float64)
    ip = np.asarray(position, dtype=np.float64)
    P = np.asarray(pack_size, dtype=np.float64)
    M = np.asarray(minimum_order, dtype=np.float64)
    for name, arr in (("order-up-to level", S), ("inventory position", ip)):
        if not np.isfinite(arr).all():
            raise InputError(f"{name} must be finite for every item")
    if (~np.isfinite(P) | (P < 1) | (P != np.round(P))).any():
        raise InputError("--pack-size must be a whole number >= 1 for every item")
    if (~np.isfinite(M) | (M < 0)).any():
        raise InputError("--min-order must be a number >= 0 for every item")
    need = np.maximum(S - ip, M)
    packs = np.ceil(need / P - 1e-9)  # 1e-9: a need of exactly n packs in floating point
    return np.where(ip >= S, 0.0, np.maximum(packs, 1.0) * P)


@njit(cache=True)
def _window_mean(flat, indptr, pack, along, out):
    """Mean of each curve over ``S .. S + P - 1``; past its end flat, or ``along`` its last step."""
    for i in range(indptr.shape[0] - 1):
        lo = indptr[i]
        hi = indptr[i + 1]
        n = hi - lo
        slope = flat[hi - 1] - flat[hi - 2] if along and n > 1 else 0.0
        p = pack[i]
        for s in range(n):
            acc = 0.0
            for y in range(s, s + p):
                acc += flat[lo + y] if y < n else flat[hi - 1] + (y - n + 1) * slope
            out[lo + s] = acc / p


def packed_curves(curves: ServiceCurves, *, pack_size=1) -> ServiceCurves:
    """Curves for order-up-to ``S`` with orders in whole packs of ``P``: each the mean over ``S .. S + P - 1``.

    With packs, ordering the smallest number of packs that brings the
    position to ``S`` or above leaves the position after ordering in
    ``S .. S + P - 1``, and in the long run uniformly so when demand per
    review is whole and not confined to multiples of a divisor of ``P`` (the
    ``(s, nQ)`` result of Hadley & Whitin 1963, Analysis of Inventory
    Systems; from memory). Expected fill, on-hand and cycle service are then
    the averages of the per-level figures over that range. A minimum order
    ``M`` above one pack breaks the uniformity; the average is then an
    approximation. Past an item's grid, filled and cycle service stay at
    their last value and on hand goes on along its last step (exact when the
    grid covers the demand, as from :func:`order_up_to_curves`).

    Examples
    --------
    >>> c = service_curves([[0.0, 0.6, 0.9, 1.0]], [[0.0, 0.4, 1.1, 2.0]])
    >>> packed_curves(c, pack_size=2).filled.round(2).tolist()
    [0.3, 0.75, 0.95, 1.0]
    """
    P = np.broadcast_to(np.asarray(pack_size, dtype=np.float64), (curves.n_items,))
    if (~np.isfinite(P) | (P < 1) | (P != np.round(P))).any():
        raise InputError("--pack-size must be a whole number >= 1 for every item")
    P = P.astype(np.int64)
    out = []
    for flat, along in ((curves.filled, False), (curves.on_hand, True), (curves.cycle_service, False)):
        res = np.empty_like(flat)
        _window_mean(flat, curves.indptr, P, along, res)
        out.append(res)
    return ServiceCurves(curves.indptr, out[0], out[1], np.minimum(out[2], 1.0), curves.mean_demand, curves.items)

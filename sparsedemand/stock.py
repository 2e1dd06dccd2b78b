"""Stock targets from the forecast's predictive distribution.

For every item this module turns the distribution of demand per period (see
:mod:`sparsedemand.methods.distributions`) into the demand over the
*lead time* ``L`` and over the *protection interval* ``L + R`` (lead time plus
review period), and from those into

* a **reorder point** ``s`` for continuous review with lot size ``Q`` (an order
  of ``Q`` goes out when the inventory position reaches ``s``), protecting the
  lead time;
* an **order-up-to level** ``S`` for periodic review (every ``R`` periods the
  inventory position is raised to ``S``), protecting ``L + R``;

for a target *cycle service level* (probability of no stock-out in a
replenishment cycle) or a target *fill rate* (share of demand met from stock
on hand). Unmet demand is assumed backordered. Formulas
(Silver, Pyke & Thomas 2017, Inventory and Production Management in Supply
Chains, 4th ed., ch. 6-7; the exact backorder form of the shortage per cycle
as in Hadley & Whitin 1963, Analysis of Inventory Systems):

* cycle service: ``s`` is the smallest whole level with ``P(D_L <= s) >= target``,
  ``S`` the smallest with ``P(D_{L+R} <= S) >= target``;
* expected shortage per cycle, periodic review:
  ``ESPRC(S) = E[(D_{L+R} - S)^+] - E[(D_L - S)^+]`` and fill rate
  ``1 - ESPRC(S) / E[D_R]``; continuous review:
  ``ESPRC(s) = E[(D_L - s)^+] - E[(D_L - s - Q)^+]`` and fill rate
  ``1 - ESPRC(s) / Q``. (The textbook approximation drops the second term;
  keeping it matters at the low service levels lumpy items often show.)
  With a fill-rate target the level is the smallest whole level meeting it;
* expected on hand: the average over the ``R`` periods of a review cycle of
  the expected end-of-period stock ``E[(S - D_{L+j})^+]``, ``j = 1 .. R``;
* safety stock: target level minus the mean demand over its protection
  interval (``S - E[D_{L+R}]``; ``s - E[D_L]`` for the reorder point).

For the ``"normal"`` kind (smooth demand only) the classical continuous
formulas are used with the standard normal loss function :func:`normal_loss`.
All other kinds go through the exact whole-unit distributions.

The targets are decision support: see :data:`STOCK_CAUTION`.

Examples
--------
>>> from sparsedemand.methods.forecasts import ItemForecasts
>>> fit = ItemForecasts(mean=np.array([[0.5]]), distribution=np.array(["zip"], dtype=object),
...                     dist_params={"pi": np.array([0.5]), "lam": np.array([1.0])},
...                     method=np.array(["zip"], dtype=object))
>>> table = stock_targets(fit, lead_time=2, service_level=0.9)
>>> table[["reorder_point", "order_up_to"]].iloc[0].tolist()
[3, 4]
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import ndtr, ndtri

from .errors import InputError
from .methods import distributions as dist
from .methods.forecasts import label_seeds

__all__ = [
    "STOCK_CAUTION",
    "normal_loss",
    "stock_targets",
    "stock_totals",
    "totals_text",
]

STOCK_CAUTION: str = (
    "Caution: these stock targets are decision support, not instructions. Safety-critical spares "
    "must follow the organisation's own policies, the applicable regulations and the judgement "
    "of qualified staff."
)

#: Cells per working block (items x grid x horizons); bounds memory whatever the mix of volumes.
_CELL_BUDGET = 1 << 21
_SLACK = 1e-12


def _unpack(forecast):
    """(mean 2-D, kind per item, dist_params, method per item) from a fit-like object."""
    if not all(hasattr(forecast, a) for a in ("mean", "distribution", "dist_params")):
        raise InputError("forecast must have mean, distribution and dist_params (a method fit or ItemForecasts)")
    mean = np.asarray(forecast.mean, dtype=np.float64)
    mean = mean[:, None] if mean.ndim == 1 else mean
    if mean.ndim != 2:
        raise InputError(f"forecast mean must be (items, horizon), got shape {mean.shape}")
    n = mean.shape[0]
    kind = np.asarray(forecast.distribution, dtype=object)
    kind = np.full(n, kind.item(), dtype=object) if kind.ndim == 0 else kind
    if kind.shape != (n,):
        raise InputError(f"forecast has {kind.size} distribution kinds for {n} items")
    unknown = sorted({str(k) for k in kind} - set(dist.KINDS))
    if unknown:
        raise InputError(f"unknown distribution kind {unknown[0]!r}; expected one of {', '.join(dist.KINDS)}")
    method = getattr(forecast, "method", None)
    if method is None:
        method = getattr(forecast, "name", "")
    method = np.asarray(method, dtype=object)
    method = np.full(n, method.item(), dtype=object) if method.ndim == 0 else method
    return mean, kind, dict(forecast.dist_params or {}), method


# --------------------------------------------------------------------------- options
def _option(x, n: int, option: str, items, *, whole: bool = False, minimum=None, strict: bool = False,
            allow_nan: bool = False) -> np.ndarray:
    """A scalar or per-item option as an ``(n,)`` array, with a one-line error naming option and item."""
    try:
        arr = x.to_numpy(dtype=np.float64) if isinstance(x, pd.Series) else np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{option} must be numeric, got {x!r}"[:200]) from None
    if arr.ndim == 0:
        arr = np.full(n, float(arr))
    if arr.shape != (n,):
        raise InputError(f"{option} has {arr.size} values for {n} items")
    bad = np.isinf(arr) | (np.isnan(arr) & (not allow_nan))
    if whole:
        bad |= ~np.isnan(arr) & (arr != np.round(arr))
    if minimum is not None:
        bad |= (arr <= minimum) if strict else (arr < minimum)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        what = "a whole number of periods" if whole else "a number"
        bound = "" if minimum is None else f" {'>' if strict else '>='} {minimum:g}"
        raise InputError(f"{option} must be {what}{bound}, got {arr[i]:g} for item {items[i]!r}")
    return arr


def _target(service_level, fill_rate) -> tuple[str, float]:
    if (service_level is None) == (fill_rate is None):
        raise InputError("give exactly one of --service-level or --fill-rate")
    option, value = ("--service-level", service_level) if fill_rate is None else ("--fill-rate", fill_rate)
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{option} must be a number between 0 and 1 exclusive, got {value!r}") from None
    if not 0.0 < v < 1.0:
        raise InputError(f"{option} must be between 0 and 1 exclusive, got {value!r}")
    return ("cycle" if fill_rate is None else "fill"), v


# --------------------------------------------------------------------------- normal case
def normal_loss(z) -> np.ndarray:
    """Standard normal loss function ``G(z) = phi(z) - z (1 - Phi(z)) = E[(Z - z)^+]``.

    Silver, Pyke & Thomas (2017), Inventory and Production Management in
    Supply Chains, 4th ed., appendix on the unit normal loss function.

    Examples
    --------
    >>> normal_loss([0.0, 1.0]).round(4).tolist()
    [0.3989, 0.0833]
    """
    z = np.asarray(z, dtype=np.float64)
    return np.exp(-0.5 * z * z) / np.sqrt(2.0 * np.pi) - z * ndtr(-z)


def _normal_shortage(mu, sd, level):
    """``E[(X - level)^+]`` for ``X ~ N(mu, sd^2)``; ``(mu - level)^+`` when ``sd == 0``."""
    safe = np.where(sd > 0, sd, 1.0)
    return np.where(sd > 0, sd * normal_loss((level - mu) / safe), np.maximum(mu - level, 0.0))


def _smallest_level(ok, lo, hi):
    """Smallest whole ``k`` in ``(lo, hi]`` with ``ok(k)``, for a predicate increasing in ``k`` (bisection)."""
    lo = lo.astype(np.float64).copy()
    hi = hi.astype(np.float64).copy()
    while (hi - lo > 1).any():
        mid = np.floor((lo + hi) / 2)
        good = ok(mid)
        active = hi - lo > 1
        hi = np.where(active & good, mid, hi)
        lo = np.where(active & ~good, mid, lo)
    return hi


def _normal_targets(mean, sigma, L, R, Q, target_kind, target):
    """Closed-form targets for the normal approximation."""
    rmax = int(R.max(initial=1))
    mu_l = dist.period_totals(mean, L)
    sd_l = sigma * np.sqrt(L)
    steps = [np.minimum(j, R) for j in range(1, rmax + 1)]
    mu_j = [dist.period_totals(mean, L + s) for s in steps]
    sd_j = [sigma * np.sqrt(L + s) for s in steps]
    mu_c, sd_c = mu_j[-1], sd_j[-1]
    mu_r = mu_c - mu_l

    def fill_s(s):
        short = _normal_shortage(mu_l, sd_l, s) - _normal_shortage(mu_l, sd_l, s + Q)
        return 1.0 - short / Q

    def fill_S(S):
        short = _normal_shortage(mu_c, sd_c, S) - _normal_shortage(mu_l, sd_l, S)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(mu_r > 0, 1.0 - short / np.where(mu_r > 0, mu_r, 1.0), np.nan)

    if target_kind == "cycle":
        z = float(ndtri(target))
        s = np.maximum(np.ceil(mu_l + z * sd_l - 1e-9), 0.0)
        S = np.maximum(np.ceil(mu_c + z * sd_c - 1e-9), 0.0)
    else:
        top_l = np.ceil(mu_l + 40 * sd_l + Q) + 1
        top_c = np.ceil(mu_c + 40 * sd_c) + 1
        s = _smallest_level(lambda k: fill_s(k) >= target - _SLACK, np.full_like(mu_l, -1.0), top_l)
        S = _smallest_level(lambda k: ~(fill_S(k) < target - _SLACK), np.full_like(mu_c, -1.0), top_c)

    def csl(mu, sd, level):
        safe = np.where(sd > 0, sd, 1.0)
        return np.where(sd > 0, ndtr((level - mu) / safe), (mu <= level).astype(np.float64))

    on_hand = np.zeros_like(mu_c)
    for j in range(rmax):  # end-of-period stock E[(S - D_{L+j})^+] for j = 1 .. R
        left = np.maximum(S - mu_j[j] + _normal_shortage(mu_j[j], sd_j[j], S), 0.0)
        on_hand += np.where(j < R, left, 0.0)
    on_hand /= R
    return {
        "mean_lead_time_demand": mu_l,
        "mean_protection_demand": mu_c,
        "reorder_point": s,
        "order_up_to": S,
        "reorder_point_service_level": csl(mu_l, sd_l, s),
        "reorder_point_fill_rate": fill_s(s),
        "cycle_service_level": csl(mu_c, sd_c, S),
        "expected_fill_rate": fill_S(S),
        "expected_on_hand": on_hand,
    }


# --------------------------------------------------------------------------- distribution case
def _first_true(mask: np.ndarray) -> np.ndarray:
    """Index of the first True per row, the last column where there is none."""
    return np.where(mask.any(axis=1), mask.argmax(axis=1), mask.shape[1] - 1)


def _curve_at(curve: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Shortage curve (rows of ``E[(D - k)^+]``, k = 0 .. W) at real ``level[:, None] + k`` grids."""
    width = curve.shape[1]
    lo = np.floor(level).astype(np.int64)
    frac = (level - lo)[:, None]
    idx = np.arange(width)[None, :] + lo[:, None]
    a = np.take_along_axis(curve, np.clip(idx, 0, width - 1), axis=1)
    b = np.take_along_axis(curve, np.clip(idx + 1, 0, width - 1), axis=1)
    return a + frac * (b - a)


def _pmf_targets(p_lead, p_steps, R, Q, target_kind, target):
    """Targets from dense PMFs: ``p_lead`` of D_L, ``p_steps[j-1]`` of D_{L+min(j,R)}, all (n, W)."""
    n, width = p_lead.shape
    rows = np.arange(n)
    p_cover = p_steps[-1]
    cdf_l = np.cumsum(p_lead, axis=1)
    cdf_c = np.cumsum(p_cover, axis=1)
    curve_l = dist.shortage_curve(p_lead)
    curve_c = dist.shortage_curve(p_cover)
    mean_l = dist.pmf_mean(p_lead)
    mean_c = dist.pmf_mean(p_cover)
    mean_r = np.maximum(mean_c - mean_l, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        fill_s_curve = 1.0 - (curve_l - _curve_at(curve_l, Q)) / Q[:, None]
        fill_S_curve = np.where(mean_r[:, None] > 0,
                                1.0 - (curve_c - curve_l) / np.where(mean_r > 0, mean_r, 1.0)[:, None], np.nan)
    if target_kind == "cycle":
        s = _first_true(cdf_l >= target - _SLACK)
        S = _first_true(cdf_c >= target - _SLACK)
    else:
        s = _first_true(fill_s_curve[:, :width] >= target - _SLACK)
        S = _first_true(~(fill_S_curve[:, :width] < target - _SLACK))
    k = np.arange(width, dtype=np.float64)
    on_hand = np.zeros(n)
    for j, p in enumerate(p_steps, start=1):  # end-of-period stock E[(S - D_{L+j})^+]
        left = (np.maximum(S[:, None] - k[None, :], 0.0) * p).sum(axis=1)
        on_hand += np.where(j <= R, left, 0.0)
    return {
        "mean_lead_time_demand": mean_l,
        "mean_protection_demand": mean_c,
        "reorder_point": s.astype(np.float64),
        "order_up_to": S.astype(np.float64),
        "reorder_point_service_level": cdf_l[rows, s],
        "reorder_point_fill_rate": fill_s_curve[rows, s],
        "cycle_service_level": cdf_c[rows, S],
        "expected_fill_rate": fill_S_curve[rows, S],
        "expected_on_hand": on_hand / R,
    }


def _distribution_targets(kind, params, mean, L, R, Q, target_kind, target, *, history, history_rows, seeds,
                          items, n_samples, jitter, max_units):
    """Targets for items of one pmf-based kind, in blocks of similar grid size.

    ``history`` is the whole panel's (values, start, available); item ``i`` is
    its row ``history_rows[i]``.
    """
    n = mean.shape[0]
    out = {}
    guess = dist.grid_sizes(kind, params, mean, periods=L + R, items=items, max_units=max_units)
    for chunk in dist.size_blocks(guess * (R + 1), _CELL_BUDGET):
        rmax = int(R[chunk].max(initial=1))
        horizons = [L[chunk]] + [L[chunk] + np.minimum(j, R[chunk]) for j in range(1, rmax + 1)]
        sub = {k: v[chunk] for k, v in params.items()}
        hist = {}
        if history is not None and kind in ("empirical", "compound"):  # compound: historical size mean
            hist = dict(values=history[0], start=history[1], available=history[2],
                        history_rows=history_rows[chunk])
        ragged = dist.demand_pmfs(kind, sub, mean[chunk], periods=horizons, seed=seeds[chunk],
                                  n_samples=n_samples, jitter=jitter, max_units=max_units,
                                  items=[items[i] for i in chunk], ragged=True, **hist)
        width = np.max([[len(r) for r in rows] for rows in ragged], axis=0) + 1
        for blk in dist.size_blocks(width * (rmax + 1), _CELL_BUDGET):
            w = int(width[blk].max())
            dense = [dist.pad_rows([rows[i] for i in blk], w) for rows in ragged]
            res = _pmf_targets(dense[0], dense[1:], R[chunk][blk], Q[chunk][blk], target_kind, target)
            for key, value in res.items():
                out.setdefault(key, np.full(n, np.nan))[chunk[blk]] = value
    return out


# --------------------------------------------------------------------------- main entry
def _history_panel(history, n: int):
    if history is None:
        return None
    from .io import as_panel
    from .panel import DemandPanel

    panel = history if isinstance(history, DemandPanel) else as_panel(history, name="history")
    if panel.n_items != n:
        raise InputError(f"history has {panel.n_items} items, the forecast has {n}")
    return panel


def stock_targets(
    forecast,
    *,
    lead_time,
    review_period=1,
    service_level: float | None = None,
    fill_rate: float | None = None,
    lot_size=None,
    on_hand=None,
    on_order=None,
    unit_price=None,
    items=None,
    history=None,
    seed: int = 0,
    n_samples: int = 2000,
    jitter: bool = True,
    max_units: int | None = None,
) -> pd.DataFrame:
    """Reorder points, order-up-to levels and their expected performance, one row per item.

    Parameters
    ----------
    forecast : method fit or ItemForecasts
        Anything with ``mean`` (items x horizon, per-period means),
        ``distribution`` (one kind, or one per item) and ``dist_params``
        (per-item arrays; NaN where not applicable), plus ``name`` or
        ``method``. Use :func:`gather_forecasts` to combine several method
        fits covering different items.
    lead_time : int or array of int (n_items,)
        Replenishment lead time in periods, >= 0 (per item allowed).
    review_period : int or array of int (n_items,)
        Periods between reviews, >= 1 (per item allowed).
    service_level, fill_rate : float
        Exactly one target, strictly between 0 and 1: cycle service level
        (probability of no stock-out per cycle) or fill rate (share of demand
        met from stock).
    lot_size : float or array, optional
        Order quantity ``Q`` of the continuous-review policy, > 0; default the
        mean demand per review period, at least one unit.
    on_hand, on_order : float or array, optional
        Current stock (>= 0; NaN = unknown) and stock already ordered (NaN
        counts as none). With ``on_hand`` the table gets the suggested order
        now, ``max(0, order_up_to - on_hand - on_order)``.
    unit_price : float or array, optional
        Price per unit (>= 0; NaN = unknown), for the value columns.
    items : sequence, optional
        Item labels (default: from a ``history`` panel, else 0 .. n-1).
    history : DemandPanel or 2-D array, optional
        The demand history, rows aligned with the forecast; needed by items
        with the ``"empirical"`` (bootstrap) distribution.
    seed : int
        Bootstrap seed; each item's stream is derived from it and the item's
        label, so an item's targets do not depend on the other items.
    n_samples : int
        Bootstrap paths per item.
    jitter : bool
        Jitter resampled bootstrap sizes (Willemain et al. 2004).
    max_units : int, optional
        Cap on the demand grid per item (see the distributions module).

    Returns
    -------
    pandas.DataFrame
        Columns ``item, method, distribution, lead_time, review_period,
        mean_lead_time_demand, mean_protection_demand, reorder_point,
        order_up_to, safety_stock, reorder_point_safety_stock,
        cycle_service_level, expected_fill_rate, reorder_point_service_level,
        reorder_point_fill_rate, lot_size, expected_on_hand``; with
        ``on_hand`` also ``on_hand, on_order, order_quantity``; with
        ``unit_price`` also ``unit_price, order_up_to_value,
        safety_stock_value, expected_on_hand_value`` (and ``order_value``).
        Fill rates are NaN where no demand is expected. ``attrs`` records the
        target and the caution text.

    Examples
    --------
    >>> from types import SimpleNamespace as F
    >>> fit = F(name="sba", mean=np.array([[0.3]]), distribution="compound",
    ...         dist_params={"p": np.array([0.1]), "size_mean": np.array([3.0]),
    ...                      "size_var": np.array([2.0])})
    >>> t = stock_targets(fit, lead_time=4, service_level=0.95, on_hand=1, items=["A"])
    >>> t[["reorder_point", "order_up_to", "order_quantity"]].iloc[0].tolist()
    [5.0, 6.0, 5.0]
    """
    mean, kind, params, method = _unpack(forecast)
    opts = _checked_options(
        mean.shape[0], kind, history=history, items=items, service_level=service_level,
        fill_rate=fill_rate, lead_time=lead_time, review_period=review_period, on_hand=on_hand,
        on_order=on_order, unit_price=unit_price, n_samples=n_samples, lot_size=lot_size, seed=seed,
    )
    result, label_col, lot = _targets_by_kind(mean, kind, params, opts, n_samples=n_samples,
                                              jitter=jitter, max_units=max_units)
    return _stock_table(opts, method, label_col, lot, result)


@dataclass(frozen=True)
class _Options:
    """The checked per-item options of one :func:`stock_targets` call."""

    items: pd.Index
    labels: list
    hist: tuple | None  # (values, start, mask) of the history panel
    target_kind: str  # "cycle" or "fill"
    target: float
    L: np.ndarray
    R: np.ndarray
    hand: np.ndarray | None
    order: np.ndarray
    price: np.ndarray | None
    lots: np.ndarray | None
    seeds: np.ndarray


def _checked_options(n, kind, *, history, items, service_level, fill_rate, lead_time, review_period,
                     on_hand, on_order, unit_price, n_samples, lot_size, seed) -> _Options:
    """Every option as a checked ``(n,)`` array; errors name the option and the item."""
    panel = _history_panel(history, n)
    hist = None if panel is None else (panel.values, panel.start, panel.mask())
    if items is None:
        items = pd.RangeIndex(n) if panel is None else panel.items
    items = pd.Index(items)
    if len(items) != n:
        raise InputError(f"{len(items)} item labels for {n} forecast rows")
    labels = list(items)
    target_kind, target = _target(service_level, fill_rate)
    L = _option(lead_time, n, "--lead-time", labels, whole=True, minimum=0).astype(np.int64)
    R = _option(review_period, n, "--review-period", labels, whole=True, minimum=1).astype(np.int64)
    hand = None if on_hand is None else _option(on_hand, n, "--on-hand", labels, minimum=0, allow_nan=True)
    order = np.zeros(n) if on_order is None else np.nan_to_num(
        _option(on_order, n, "--on-order", labels, minimum=0, allow_nan=True), nan=0.0)
    price = None if unit_price is None else _option(unit_price, n, "--unit-price", labels, minimum=0, allow_nan=True)
    if isinstance(n_samples, bool) or int(n_samples) != n_samples or n_samples < 1:
        raise InputError(f"--samples must be a whole number >= 1, got {n_samples!r}")
    if (kind == "empirical").any() and hist is None:
        first = labels[int(np.flatnonzero(kind == "empirical")[0])]
        raise InputError(f"item {first!r} uses the bootstrap distribution, which needs the demand history")
    lots = None if lot_size is None else _option(lot_size, n, "--lot-size", labels, minimum=0, strict=True)
    return _Options(items, labels, hist, target_kind, target, L, R, hand, order, price, lots,
                    label_seeds(labels, seed))


def _lot_sizes(k, rows, sub_mean, opts: _Options) -> np.ndarray:
    """The order quantity ``Q`` of items ``rows`` (all of kind ``k``)."""
    L, R = opts.L[rows], opts.R[rows]
    if opts.lots is not None:
        return opts.lots[rows]
    if k == "empirical":  # the bootstrap's own demand rate, from the history
        return np.maximum(1.0, _history_rate(*opts.hist, rows) * R)
    # the forecast demand over one review period
    return np.maximum(1.0, dist.period_totals(sub_mean, L + R) - dist.period_totals(sub_mean, L))


def _targets_by_kind(mean, kind, params, opts: _Options, *, n_samples, jitter, max_units):
    """Targets per item, computed kind by kind: (result columns, distribution labels, lot sizes)."""
    n = mean.shape[0]
    result: dict[str, np.ndarray] = {}
    label_col = np.empty(n, dtype=object)
    lot = np.full(n, np.nan)
    for k in dist.KINDS:
        rows = np.flatnonzero(kind == k)
        if rows.size == 0:
            continue
        sub = {key: np.asarray(v, dtype=np.float64)[rows] for key, v in params.items()
               if np.ndim(v) == 1 and len(v) == n}
        sub_mean = np.ascontiguousarray(mean[rows])
        sub_labels = [opts.labels[i] for i in rows]
        q = _lot_sizes(k, rows, sub_mean, opts)
        L, R = opts.L[rows], opts.R[rows]
        if k == "normal":
            prm = dist.checked_params(k, sub, sub_mean, items=sub_labels)
            res = _normal_targets(sub_mean, prm["sigma"], L, R, q, opts.target_kind, opts.target)
        else:
            res = _distribution_targets(
                k, sub, sub_mean, L, R, q, opts.target_kind, opts.target,
                history=opts.hist, history_rows=rows, seeds=opts.seeds[rows],
                items=sub_labels, n_samples=n_samples, jitter=jitter, max_units=max_units)
        for key, value in res.items():
            result.setdefault(key, np.full(n, np.nan))[rows] = value
        label_col[rows] = dist.distribution_labels(k, sub, rows.size)
        lot[rows] = q
    return result, label_col, lot


def _stock_table(opts: _Options, method, label_col, lot, result) -> pd.DataFrame:
    """The stock table: targets, safety stock, the order now and values where prices are known."""
    table = pd.DataFrame({"item": opts.items, "method": method, "distribution": label_col,
                          "lead_time": opts.L, "review_period": opts.R})
    for key in ("mean_lead_time_demand", "mean_protection_demand"):
        table[key] = result[key]
    table["reorder_point"] = result["reorder_point"].astype(np.int64)
    table["order_up_to"] = result["order_up_to"].astype(np.int64)
    table["safety_stock"] = table["order_up_to"] - table["mean_protection_demand"]
    table["reorder_point_safety_stock"] = table["reorder_point"] - table["mean_lead_time_demand"]
    for key in ("cycle_service_level", "expected_fill_rate", "reorder_point_service_level",
                "reorder_point_fill_rate"):
        table[key] = np.clip(result[key], 0.0, 1.0)
    table["lot_size"] = lot
    table["expected_on_hand"] = result["expected_on_hand"]
    hand, order, price = opts.hand, opts.order, opts.price
    if hand is not None:
        table["on_hand"] = hand
        table["on_order"] = order
        table["order_quantity"] = np.maximum(0.0, table["order_up_to"] - hand - order)
    if price is not None:
        table["unit_price"] = price
        table["order_up_to_value"] = table["order_up_to"] * price
        table["safety_stock_value"] = table["safety_stock"] * price
        table["expected_on_hand_value"] = table["expected_on_hand"] * price
        if hand is not None:
            table["order_value"] = table["order_quantity"] * price
    table.attrs.update({
        "target": "cycle service level" if opts.target_kind == "cycle" else "fill rate",
        "target_value": opts.target,
        "caution": STOCK_CAUTION,
    })
    return table


def _history_rate(values, start, available, rows) -> np.ndarray:
    """Mean demand per available period from the first demand on, for history ``rows`` (0 if never sold)."""
    out = np.zeros(len(rows))
    cols = np.arange(values.shape[1])[None, :]
    for lo in range(0, len(rows), 4096):  # bounded temporaries on long histories
        r = rows[lo : lo + 4096]
        use = available[r] & (cols >= start[r][:, None])
        count = use.sum(axis=1)
        total = np.where(use, values[r], 0.0).sum(axis=1)
        out[lo : lo + 4096] = np.divide(total, count, out=np.zeros(len(r)), where=count > 0)
    return out


# --------------------------------------------------------------------------- totals
_TOTAL_COLUMNS = ("reorder_point", "order_up_to", "safety_stock", "expected_on_hand", "order_quantity")


def stock_totals(table: pd.DataFrame) -> pd.DataFrame:
    """Totals of the stock table in units and, where prices are known, in value.

    Returns
    -------
    pandas.DataFrame
        Index ``["units", "value"]``; columns among ``reorder_point,
        order_up_to, safety_stock, expected_on_hand, order_quantity`` (those
        present). The value row sums ``units x unit_price`` over items with a
        known price (NaN without a price column); ``attrs["priced_items"]``
        counts them.

    Examples
    --------
    >>> t = pd.DataFrame({"order_up_to": [2, 3], "unit_price": [10.0, np.nan]})
    >>> stock_totals(t)["order_up_to"].tolist()
    [5.0, 20.0]
    """
    cols = [c for c in _TOTAL_COLUMNS if c in table.columns]
    units = table[cols].sum().astype(np.float64)
    if "unit_price" in table.columns:
        price = table["unit_price"].to_numpy(dtype=np.float64)
        known = ~np.isnan(price)
        value = pd.Series({c: float((table[c].to_numpy(dtype=np.float64)[known] * price[known]).sum())
                           for c in cols})
        priced = int(known.sum())
    else:
        value = pd.Series(np.nan, index=cols)
        priced = 0
    out = pd.DataFrame([units, value], index=["units", "value"])
    out.attrs.update({"items": len(table), "priced_items": priced})
    return out


_TOTAL_NAMES = {
    "order_up_to": "order-up-to levels",
    "reorder_point": "reorder points",
    "safety_stock": "safety stock",
    "expected_on_hand": "expected stock on hand",
    "order_quantity": "suggested orders now",
}


def totals_text(table: pd.DataFrame) -> str:
    """Plain-text totals for the terminal, ending with :data:`STOCK_CAUTION`.

    Examples
    --------
    >>> print(totals_text(pd.DataFrame({"order_up_to": [2, 3]})).splitlines()[1])
      order-up-to levels: 5 units
    """
    totals = stock_totals(table)
    lines = [f"Stock targets for {totals.attrs['items']:,} items:"]
    for col in ("order_up_to", "reorder_point", "safety_stock", "expected_on_hand", "order_quantity"):
        if col not in totals.columns:
            continue
        line = f"  {_TOTAL_NAMES[col]}: {totals.at['units', col]:,.0f} units"
        if totals.attrs["priced_items"]:
            line += f", value {totals.at['value', col]:,.2f}"
        lines.append(line)
    priced, n = totals.attrs["priced_items"], totals.attrs["items"]
    if 0 < priced < n:
        lines.append(f"  (values cover the {priced:,} of {n:,} items with a unit price)")
    lines.append(STOCK_CAUTION)
    return "\n".join(lines)

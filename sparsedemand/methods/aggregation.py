"""Temporal aggregation: ADIDA and IMAPA.

ADIDA (Nikolopoulos, Syntetos, Boylan, Petropoulos & Assimakopoulos 2011,
Journal of the Operational Research Society 62:544-554): sum the trimmed,
available history into non-overlapping buckets of ``level`` periods, forecast
the bucket series with a smoothing method, and spread the bucket forecast
evenly, ``F / level`` per period. Buckets are aligned to the end of the
history so the most recent bucket is complete; the incomplete oldest
periods are dropped and leading empty buckets trimmed. The default level is
the item's mean inter-demand interval (periods / demands), rounded, at
least 1; a level longer than the history is cut to the history's length.

IMAPA (Petropoulos & Kourentzes 2015, Journal of the Operational Research
Society 66:914-924): the ADIDA forecasts at every level ``1 .. max_level``
averaged with equal weights. Here one smoothing method serves every level
(``method=``) and the default ``max_level`` is the item's rounded mean
inter-demand interval, at least 2.

The predictive distribution is the compound one: the forecast mean is split
into a demand probability ``p = mean / s`` and a size ``s``, the item's mean
non-zero size (``p`` capped at 1, then ``s = mean``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._fitting import CROSTON, SBA, SBJ, SES, smooth_fit_item
from ._input import (
    MethodFit,
    PanelArrays,
    check_bounds,
    check_choice,
    check_constant,
    check_cost,
    check_count,
    compound_params,
    constant_mean,
    run_public,
)
from ._recurrences import bias_factor
from .events import run_in_threads, size_moments
from .optimize import WORK_SIZE

__all__ = ["adida", "imapa", "aggregate_item", "AGGREGATE_METHODS"]

AGGREGATE_METHODS = ("sba", "croston", "sbj", "ses")


@njit(cache=True, nogil=True)
def aggregate_item(pos, size, n, level, out_pos, out_size):
    """Bucket one item's demands; return (demands, periods) of the bucket series.

    The bucket series is written to ``out_pos``/``out_size`` trimmed so its
    first demand is at 0. Returns (0, 0) when no complete bucket has demand.
    """
    n_buckets = n // level
    offset = n - n_buckets * level
    k = 0
    end = offset  # first period after the current bucket
    for j in range(pos.shape[0]):
        p = pos[j]
        if p < offset:
            continue
        if p < end:
            out_size[k - 1] += size[j]
        else:
            b = (p - offset) // level  # divide once per bucket, not per demand
            end = offset + (b + 1) * level
            out_pos[k] = b
            out_size[k] = size[j]
            k += 1
    if k == 0:
        return 0, 0
    b0 = out_pos[0]
    for j in range(k):
        out_pos[j] -= b0
    return k, n_buckets - b0


@njit("int64(int64, int64, int64)", cache=True, nogil=True)
def _mean_interval_level(n, k, minimum):
    return max(minimum, int(np.floor(n / k + 0.5)))


@njit(cache=True, nogil=True)
def _adida_item(method, pos, size, n, level, alpha, cost_code, lo, hi, st, bp, bs):
    """(per-period forecast, cost, alpha) of ADIDA at one level."""
    level = min(level, n)
    k, nb = aggregate_item(pos, size, n, level, bp, bs)
    if k == 0:
        return 0.0, np.nan, np.nan
    f, c, a, _, _, _, _ = smooth_fit_item(
        method, bp[:k], bs[:k], nb, alpha, alpha, True, cost_code, lo, hi, st
    )
    return max(f, 0.0) / level, c, a


LANES = 4  # levels advanced together in one read of the events


@njit(cache=True, nogil=True, inline="always")
def _bucket_of(t, shift, inv):
    # floor((t - offset + 0.5) / level), with shift = (0.5 - offset) / level: exact for
    # integer t (the 0.5 keeps every value at least 0.5 / level from an integer), and -1
    # before the offset
    return np.floor(t * inv + shift)


@njit(cache=True, nogil=True, inline="always")
def _croston_step(t, ay, r, shift, inv, z, x, disc, cur):
    # one demand (position t, alpha * size ay) into one level's discounted sums;
    # x is kept divided by alpha
    q = _bucket_of(t, shift, inv)
    d = q - cur
    m = r if d != 0.0 else 1.0
    return z * m + ay, x * m + d, disc * m, q


@njit(cache=True, nogil=True, inline="always")
def _ses_step(t, ay, rpow, shift, inv, z, cur):
    q = _bucket_of(t, shift, inv)
    return z * rpow[int(q - cur)] + ay, q


@njit(cache=True, nogil=True, fastmath={"contract"})
def _levels_forecast(method, pos, size, n, levels, alpha, factor, rpow, lane, start, out):
    """Per-period ADIDA forecasts at ``LANES`` levels with a fixed constant, in one pass.

    IMAPA with a given constant needs each level's final state, not its
    in-sample cost, so ``LANES`` levels share one read of the events and
    their recurrences run side by side, without branches. Written as sums,
    the Croston state after the buckets ``1 .. m`` with sums ``s_i`` and gaps
    ``g_i`` is ``z = r**(m-1) s_1 + a sum_{i>=2} r**(m-i) s_i`` and
    ``x = r**(m-2) g_2 + a sum_{i>=3} r**(m-i) g_i`` (``r = 1 - a``): every
    demand adds ``a y`` to ``z``, every new bucket first discounts ``z`` and
    ``x`` by ``r`` and adds ``a g`` to ``x``, and the first bucket's extra
    weight is added at the end. SES is the same with a discount of ``r**g``.
    The result equals the bucket-by-bucket recurrence up to rounding.
    ``rpow[g] = r**g``; ``lane`` is scratch of ``(6, LANES)`` floats and
    ``start`` of ``LANES`` integers. ``out[g]`` is NaN when no complete
    bucket has demand at ``levels[g]``.
    """
    ses = method == SES
    r = 1.0 - alpha
    k = pos.shape[0]
    shift, inv, z, x, disc, cur = lane[0], lane[1], lane[2], lane[3], lane[4], lane[5]
    common = 0
    for g in range(LANES):
        lv = levels[g]
        offset = n - (n // lv) * lv
        inv[g] = 1.0 / lv
        shift[g] = (0.5 - offset) * inv[g]
        j = 0
        while j < k and pos[j] < offset:
            j += 1
        start[g] = j
        common = max(common, j)
    # each level starts at its own first complete bucket, then all run together
    for g in range(LANES):
        z[g] = 0.0
        x[g] = 0.0
        disc[g] = 1.0
        if start[g] == k:
            continue
        cur[g] = _bucket_of(float(pos[start[g]]), shift[g], inv[g])
        for j in range(start[g], common):
            if ses:
                z[g], cur[g] = _ses_step(float(pos[j]), alpha * size[j], rpow, shift[g], inv[g],
                                         z[g], cur[g])
            else:
                z[g], x[g], disc[g], cur[g] = _croston_step(
                    float(pos[j]), alpha * size[j], r, shift[g], inv[g], z[g], x[g],
                    disc[g], cur[g])
    h0, h1, h2, h3 = shift[0], shift[1], shift[2], shift[3]
    v0, v1, v2, v3 = inv[0], inv[1], inv[2], inv[3]
    z0, z1, z2, z3 = z[0], z[1], z[2], z[3]
    b0, b1, b2, b3 = cur[0], cur[1], cur[2], cur[3]
    # slices from the common start, so the loop index is known to be non-negative
    tail_pos = pos[common:]
    tail_size = size[common:]
    if ses:
        for j in range(tail_pos.shape[0]):
            t = float(tail_pos[j])
            ay = alpha * tail_size[j]
            z0, b0 = _ses_step(t, ay, rpow, h0, v0, z0, b0)
            z1, b1 = _ses_step(t, ay, rpow, h1, v1, z1, b1)
            z2, b2 = _ses_step(t, ay, rpow, h2, v2, z2, b2)
            z3, b3 = _ses_step(t, ay, rpow, h3, v3, z3, b3)
    else:
        x0, x1, x2, x3 = x[0], x[1], x[2], x[3]
        d0, d1, d2, d3 = disc[0], disc[1], disc[2], disc[3]
        for j in range(tail_pos.shape[0]):
            t = float(tail_pos[j])
            ay = alpha * tail_size[j]
            z0, x0, d0, b0 = _croston_step(t, ay, r, h0, v0, z0, x0, d0, b0)
            z1, x1, d1, b1 = _croston_step(t, ay, r, h1, v1, z1, x1, d1, b1)
            z2, x2, d2, b2 = _croston_step(t, ay, r, h2, v2, z2, x2, d2, b2)
            z3, x3, d3, b3 = _croston_step(t, ay, r, h3, v3, z3, x3, d3, b3)
        x[0], x[1], x[2], x[3] = x0, x1, x2, x3
        disc[0], disc[1], disc[2], disc[3] = d0, d1, d2, d3
    z[0], z[1], z[2], z[3] = z0, z1, z2, z3
    cur[0], cur[1], cur[2], cur[3] = b0, b1, b2, b3
    for g in range(LANES):
        out[g] = _lane_finish(ses, pos, size, n, levels[g], start[g], alpha, factor, rpow,
                              shift[g], inv[g], z[g], x[g], disc[g], cur[g])


@njit(cache=True, nogil=True)
def _lane_finish(ses, pos, size, n, level, j, alpha, factor, rpow, shift, inv, z, x, disc, last):
    # add the first bucket's extra weight; per-period forecast of one level
    k = pos.shape[0]
    if j == k:
        return np.nan
    r = 1.0 - alpha
    first = _bucket_of(float(pos[j]), shift, inv)
    s1 = 0.0
    while j < k and _bucket_of(float(pos[j]), shift, inv) == first:
        s1 += size[j]
        j += 1
    if ses:
        level_now = z + rpow[int(last - first) + 1] * s1
        f = level_now * rpow[n // level - 1 - int(last)]
    elif j == k:
        f = factor * s1  # one bucket with demand: interval 1
    else:
        second = _bucket_of(float(pos[j]), shift, inv)
        f = factor * (z + r * disc * s1) / (alpha * x + disc * (second - first))
    return max(f, 0.0) / level


@njit(cache=True, nogil=True)
def _aggregate_panel(i0, i1, indptr, pos, size, length, method, alpha, cost_code, lo, hi, level,
                     combine, out):
    st = np.empty(WORK_SIZE)
    fixed = alpha == alpha
    factor = bias_factor(method, alpha) if fixed else 1.0
    levels = np.empty(LANES, np.int64)
    lane = np.empty((6, LANES))
    start = np.empty(LANES, np.int64)
    fc = np.empty(LANES)
    longest = 0
    for i in range(i0, i1):
        longest = max(longest, length[i])
    rpow = np.empty(longest + 1)
    if fixed:
        rpow[0] = 1.0
        for g in range(1, longest + 1):
            rpow[g] = rpow[g - 1] * (1.0 - alpha)
    for i in range(i0, i1):
        n = length[i]
        if n == 0:
            out[0, i] = 0.0
            out[1:, i] = np.nan
            continue
        p = pos[indptr[i]:indptr[i + 1]]
        s = size[indptr[i]:indptr[i + 1]]
        k = p.shape[0]
        if not (combine and fixed):
            bp = np.empty(k, np.int64)
            bs = np.empty(k, np.float64)
        if not combine:
            lv = level if level > 0 else _mean_interval_level(n, k, 1)
            f, c, a = _adida_item(method, p, s, n, lv, alpha, cost_code, lo, hi, st, bp, bs)
            out[0, i] = f
            out[1, i] = c
            out[2, i] = a
            out[3, i] = min(lv, n)
            continue
        top = level if level > 0 else _mean_interval_level(n, k, 2)
        top = min(top, n)
        if fixed:
            # a combination has no single in-sample cost, so skip it
            total = 0.0
            with_demand = 0
            for l0 in range(1, top + 1, LANES):
                for g in range(LANES):
                    levels[g] = min(l0 + g, top)  # spare lanes repeat the top level
                _levels_forecast(method, p, s, n, levels, alpha, factor, rpow, lane, start, fc)
                for g in range(min(LANES, top + 1 - l0)):
                    if fc[g] == fc[g]:
                        total += fc[g]
                        with_demand += 1
            out[0, i] = total / top
            out[1, i] = np.nan
            out[2, i] = alpha if with_demand > 0 else np.nan
            out[3, i] = top
            continue
        total = 0.0
        a_sum = 0.0
        a_count = 0
        for lv in range(1, top + 1):
            f, c, a = _adida_item(method, p, s, n, lv, alpha, cost_code, lo, hi, st, bp, bs)
            total += f
            if a == a:
                a_sum += a
                a_count += 1
        out[0, i] = total / top
        out[1, i] = np.nan
        out[2, i] = a_sum / a_count if a_count > 0 else np.nan
        out[3, i] = top


_METHOD_CODE = {"sba": SBA, "croston": CROSTON, "sbj": SBJ, "ses": SES}


def _fit_aggregate(data, horizon, name, combine, level, method, alpha, cost, bounds):
    lv = check_count("level" if not combine else "max_level", level, allow_none=True)
    m = check_choice("method", method, AGGREGATE_METHODS)
    a = check_constant("alpha", alpha)
    code = check_cost(cost)
    lo, hi = check_bounds(bounds)
    ev = data.events
    out = np.empty((4, ev.n_items))
    run_in_threads(
        _aggregate_panel, ev.n_items, ev.indptr, ev.pos, ev.size, ev.length, _METHOD_CODE[m], a,
        code, lo, hi, lv, combine, out,
    )
    mean = np.maximum(out[0], 0.0)
    size_mean, size_var = size_moments(ev)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = np.where(size_mean > 0, mean / size_mean, 0.0)
    s = np.where(p > 1.0, mean, size_mean)
    p = np.minimum(p, 1.0)
    return MethodFit(
        name=name,
        mean=constant_mean(mean, horizon),
        params={"alpha": out[2], ("max_level" if combine else "level"): out[3]},
        cost=out[1],
        distribution="compound",
        dist_params=compound_params(p, s, size_var),
    )


def fit_adida(
    data: PanelArrays,
    horizon: int,
    *,
    level: int | None = None,
    method: str = "sba",
    alpha: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
) -> MethodFit:
    """Fit ADIDA for every item; the cost is that of the bucket series."""
    return _fit_aggregate(data, horizon, "adida", False, level, method, alpha, cost, bounds)


def fit_imapa(
    data: PanelArrays,
    horizon: int,
    *,
    max_level: int | None = None,
    method: str = "sba",
    alpha: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
) -> MethodFit:
    """Fit IMAPA for every item; cost NaN (a combination has no single fit), alpha averaged."""
    return _fit_aggregate(data, horizon, "imapa", True, max_level, method, alpha, cost, bounds)


def adida(
    y,
    horizon: int = 1,
    *,
    level: int | None = None,
    method: str = "sba",
    alpha: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """Aggregate-disaggregate forecast (ADIDA).

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand; NaN marks an unavailable period. Leading zeros are trimmed.
    horizon : int
        Steps ahead; the forecast is flat.
    level : int or None
        Bucket length in periods; ``None`` uses each item's rounded mean
        inter-demand interval.
    method : {"sba", "croston", "sbj", "ses"}
        Method applied to the bucket series (one constant for size and interval).
    alpha : float in (0, 1] or None
        Its smoothing constant; ``None`` optimises it on the bucket series.
    cost : {"mse", "mae", "mar", "msr"}
        In-sample cost (in bucket units).
    bounds : (float, float)
        Search range of an optimised constant.
    available : array-like of bool, optional
        False where a period is unavailable.
    return_params : bool
        Also return alpha and level per item, and the bucket-series cost.

    Returns
    -------
    ndarray of shape (horizon,) or (n_items, horizon); with
    ``return_params=True`` a tuple ``(forecast, params, cost)``.

    Examples
    --------
    >>> adida([0, 3, 0, 0, 2, 0, 1, 0], level=2, method="ses", alpha=0.5)
    array([0.75])
    """
    return run_public(
        fit_adida, y, horizon, available, return_params,
        dict(level=level, method=method, alpha=alpha, cost=cost, bounds=bounds),
    )


def imapa(
    y,
    horizon: int = 1,
    *,
    max_level: int | None = None,
    method: str = "sba",
    alpha: float | None = 0.1,
    cost: str = "mse",
    bounds: tuple[float, float] = (0.01, 0.5),
    available=None,
    return_params: bool = False,
):
    """Equal-weight combination of ADIDA forecasts at levels ``1 .. max_level`` (IMAPA).

    Parameters are those of :func:`adida`, with ``max_level`` (``None``: the
    item's rounded mean inter-demand interval, at least 2) instead of
    ``level``. The returned cost is NaN and alpha is the mean over levels.

    Examples
    --------
    >>> imapa([0, 3, 0, 0, 2, 0, 1, 0], max_level=2, method="ses", alpha=0.5)
    array([0.5859375])
    """
    return run_public(
        fit_imapa, y, horizon, available, return_params,
        dict(max_level=max_level, method=method, alpha=alpha, cost=cost, bounds=bounds),
    )

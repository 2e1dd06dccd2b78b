"""Per-item recurrences of the exponential-smoothing family: Croston/SBA/SBJ, TSB, SES.

Each kernel runs one item's recurrence over its demands and returns the
forecast and the in-sample cost (the recurrences themselves are described in
:mod:`.croston`, :mod:`.tsb` and :mod:`.smoothing`). They sit below both the
shared search driver (:mod:`._fitting`) and the family modules that fit
through it, so the imports run one way.
"""

from __future__ import annotations

import math

from numba import njit

from .optimize import (
    MAE,
    MSE,
    fill_powers,
    finish_cost,
    geometric_sums,
    point_error,
    run_constant,
    run_geometric,
)

__all__ = ["bias_factor", "croston_item", "tsb_item", "ses_item"]


@njit(cache=True, nogil=True)
def bias_factor(code, beta):
    """1 for Croston, ``1 - beta/2`` for SBA, ``1 - beta/(2 - beta)`` for SBJ."""
    if code == 1:
        return 1.0 - beta / 2.0
    if code == 2:
        return 1.0 - beta / (2.0 - beta)
    return 1.0


@njit(cache=True, nogil=True, fastmath={"contract"})
def croston_item(pos, size, n, alpha, beta, factor_code, cost_code):
    """One item: (forecast, in-sample cost, final size z, final interval x)."""
    # ``z + a (y - z)`` is computed as ``(1 - a) z + a y``: equal up to rounding, and the
    # running state then waits on one multiply-add per demand instead of three steps
    c = bias_factor(factor_code, beta)
    k = pos.shape[0]
    z = size[0]
    x = float(pos[1] - pos[0]) if k > 1 else 1.0
    ra = 1.0 - alpha
    rb = 1.0 - beta
    f = c * z / x
    acc = 0.0
    acc_runs = 0.0  # squared or absolute errors of the zero runs, summed apart
    cum = 0.0
    for j in range(1, k):
        gap = pos[j] - pos[j - 1]
        y = size[j]
        if cost_code == MSE:
            acc_runs += (gap - 1) * (f * f)
            acc += (y - f) * (y - f)
        elif cost_code == MAE:
            acc_runs += (gap - 1) * f
            acc += abs(y - f)
        else:
            acc, cum = run_constant(cost_code, acc, cum, f, gap - 1)
            acc, cum = point_error(cost_code, acc, cum, y - f)
        z = ra * z + alpha * y
        x = rb * x + beta * gap
        f = c * z / x
    acc, cum = run_constant(cost_code, acc + acc_runs, cum, f, n - 1 - pos[k - 1])
    return f, finish_cost(acc, n - 1), z, x


@njit(cache=True, nogil=True)
def tsb_item(pos, size, n, alpha, beta, cost_code, work):
    """One item: (forecast, in-sample cost, final probability p, final size z).

    ``work`` is scratch space of at least ``POWERS`` floats.
    """
    k = pos.shape[0]
    z = size[0]
    x = float(pos[1] - pos[0]) if k > 1 else 1.0
    p = 1.0 / x
    r = 1.0 - beta
    log_r = math.log(r) if r > 0.0 else -math.inf
    fill_powers(work, r)
    acc = 0.0
    cum = 0.0
    for j in range(1, k):
        m = pos[j] - pos[j - 1] - 1
        decay, sm, qm = geometric_sums(work, r, log_r, m)
        acc, cum = run_geometric(cost_code, acc, cum, p * z, r, log_r, decay, sm, qm, m)
        p *= decay
        y = size[j]
        acc, cum = point_error(cost_code, acc, cum, y - p * z)
        p += beta * (1.0 - p)
        z += alpha * (y - z)
    m = n - 1 - pos[k - 1]
    decay, sm, qm = geometric_sums(work, r, log_r, m)
    acc, cum = run_geometric(cost_code, acc, cum, p * z, r, log_r, decay, sm, qm, m)
    p *= decay
    return p * z, finish_cost(acc, n - 1), p, z


@njit("UniTuple(float64, 2)(int64[::1], float64[::1], int64, float64, int64, float64[::1])", cache=True, nogil=True)
def ses_item(pos, size, n, alpha, cost_code, work):
    """One item: (forecast, in-sample cost); ``work``: scratch of ``3 * POWERS`` floats."""
    k = pos.shape[0]
    level = size[0]
    r = 1.0 - alpha
    log_r = math.log(r) if r > 0.0 else -math.inf
    fill_powers(work, r)
    acc = 0.0
    cum = 0.0
    for j in range(1, k):
        m = pos[j] - pos[j - 1] - 1
        decay, sm, qm = geometric_sums(work, r, log_r, m)
        acc, cum = run_geometric(cost_code, acc, cum, level, r, log_r, decay, sm, qm, m)
        level *= decay
        y = size[j]
        acc, cum = point_error(cost_code, acc, cum, y - level)
        level += alpha * (y - level)
    m = n - 1 - pos[k - 1]
    decay, sm, qm = geometric_sums(work, r, log_r, m)
    acc, cum = run_geometric(cost_code, acc, cum, level, r, log_r, decay, sm, qm, m)
    return level * decay, finish_cost(acc, n - 1)

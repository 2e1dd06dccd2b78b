"""Uncertain lead times: demand over a mixture of lead times, a stated lead-time distribution.

Examples
--------
>>> lead_time_moments(*lead_time_distribution(3.0, 0.0))
(3.0, 0.0)
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from scipy.special import gammaln

from ..errors import InputError

__all__ = ["lead_time_mixture", "lead_time_distribution", "lead_time_moments", "lead_time_demand_moments"]


def _lead_table(lead_times: Sequence) -> tuple[np.ndarray, np.ndarray]:
    """(values, weights), both (n_items, J): observations become relative frequencies."""
    pairs = []
    for i, lt in enumerate(lead_times):
        if isinstance(lt, tuple) and len(lt) == 2:
            vals, w = (np.asarray(x, dtype=np.float64).ravel() for x in lt)
        else:
            vals, counts = np.unique(np.asarray(lt, dtype=np.float64).ravel(), return_counts=True)
            w = counts.astype(np.float64)
        if (vals.size == 0 or vals.shape != w.shape or (~np.isfinite(vals) | (vals < 0) | (vals != np.round(vals))).any()
                or (~np.isfinite(w) | (w < 0)).any() or w.sum() <= 0):
            raise InputError(f"lead times of item {i} must be whole numbers of periods >= 0 with weights >= 0")
        pairs.append((vals.astype(np.int64), w / w.sum()))
    width = max((v.size for v, _ in pairs), default=1)
    values = np.zeros((len(pairs), width), dtype=np.int64)
    weights = np.zeros((len(pairs), width))
    for i, (v, w) in enumerate(pairs):
        values[i, : v.size], weights[i, : v.size] = v, w
    return values, weights


def lead_time_mixture(lead_times: Sequence, pmf_for: Callable | Sequence, *, extra_periods=0) -> np.ndarray:
    """PMF of demand over an uncertain lead time: the mixture over each item's lead times.

    ``P(D = k) = sum_l w_l P(D_{l + e} = k)`` with ``w_l`` the relative
    frequency of lead time ``l`` (or the given weights) and ``e`` =
    ``extra_periods`` (say ``j`` for ``D_{L+j}``, ``R`` for the protection
    interval). Assumes lead times independent of demand; orders that cross
    are ignored.

    Parameters
    ----------
    lead_times : sequence, one entry per item
        Observed lead times (whole periods; weights = relative frequencies),
        or a ``(values, weights)`` pair such as :func:`lead_time_distribution` gives.
    pmf_for : callable or sequence
        ``pmf_for(periods)`` with ``periods`` an int array (n_items,) returns
        the (n_items, K) PMF of demand over that many periods per item (say
        ``lambda n: demand_pmf(kind, params, mean, periods=n)``); or a
        sequence whose entry ``n`` is that (n_items, K) PMF for ``n`` periods.
    extra_periods : int or array of int (n_items,)

    Returns
    -------
    ndarray (n_items, K)

    Examples
    --------
    >>> one = np.array([[0.5, 0.5, 0.0]])             # demand per period in {0, 1}
    >>> table = [np.array([[1.0, 0.0, 0.0]]), one, np.array([[0.25, 0.5, 0.25]])]
    >>> lead_time_mixture([[1, 2, 2, 1]], table).tolist()
    [[0.375, 0.5, 0.125]]
    """
    values, weights = _lead_table(lead_times)
    n = values.shape[0]
    extra = np.broadcast_to(np.asarray(extra_periods, dtype=np.int64), (n,))
    get = pmf_for if callable(pmf_for) else _table_lookup(pmf_for)
    out = np.zeros((n, 1))
    for j in range(values.shape[1]):
        w = weights[:, j]
        if not (w > 0).any():
            continue
        p = np.asarray(get(values[:, j] + extra), dtype=np.float64)
        if p.shape[0] != n or p.ndim != 2:
            raise InputError(f"pmf_for must give an (n_items, K) PMF, got shape {p.shape}")
        if p.shape[1] > out.shape[1]:
            out = np.pad(out, ((0, 0), (0, p.shape[1] - out.shape[1])))
        out[:, : p.shape[1]] += w[:, None] * p
    return out


def _table_lookup(table: Sequence) -> Callable:
    def get(periods: np.ndarray) -> np.ndarray:
        if periods.max(initial=0) >= len(table):
            raise InputError(f"no PMF given for {int(periods.max())} periods (the table stops at {len(table) - 1})")
        width = max(np.asarray(table[u]).shape[1] for u in np.unique(periods))
        out = np.zeros((periods.size, width))
        for u in np.unique(periods):
            rows = np.flatnonzero(periods == u)
            p = np.asarray(table[u], dtype=np.float64)
            out[rows, : p.shape[1]] = p[rows]
        return out
    return get


def lead_time_distribution(mean: float, sd: float, *, tail: float = 1e-9) -> tuple[np.ndarray, np.ndarray]:
    """A stated whole-period lead-time distribution with a given mean and standard deviation.

    The shifted negative binomial ``L = c + X``: ``X`` negative binomial with
    mean ``mean - c`` and variance ``sd^2``, ``c`` the smallest whole shift
    ``>= 0`` that makes the variance exceed the mean of ``X`` (as the
    negative binomial needs). Why: lead times are whole periods, bounded
    below and skewed to the right (late deliveries run later than early ones
    run early); this family matches the mean and variance exactly, puts no
    mass below ``c``, and is the family the demand sizes already use. When no
    such shift exists (``sd`` below about one period), the three points
    ``k - 1, k, k + 1`` around ``k = round(mean)`` carry the mean and variance
    exactly; an ``sd`` below the least spread whole numbers can have at that
    mean (two neighbours) is raised to it. The negative binomial is cut where
    less than ``tail`` is left and renormalised.

    Returns
    -------
    values : ndarray of int64, weights : ndarray (summing to 1)

    Examples
    --------
    >>> v, w = lead_time_distribution(4.0, 0.0)
    >>> v.tolist(), w.tolist()
    ([4], [1.0])
    """
    mean, sd = float(mean), float(sd)
    if not (math.isfinite(mean) and math.isfinite(sd)) or mean < 0 or sd < 0:
        raise InputError(f"lead time mean and sd must be finite and >= 0, got {mean!r} and {sd!r}")
    var = sd * sd
    c = max(0, math.floor(mean - var) + 1)
    if c < mean - 1e-12 and var > 1e-12:
        m = mean - c
        p, r = m / var, m * m / (var - m)  # success probability, size
        width = int(math.ceil(m + 20 * sd)) + 10
        while True:
            k = np.arange(width, dtype=np.float64)
            w = np.exp(gammaln(k + r) - gammaln(r) - gammaln(k + 1) + r * math.log(p) + k * math.log1p(-p))
            if w.sum() >= 1 - tail or width > 1 << 22:
                break
            width *= 2
        cut = int(np.searchsorted(np.cumsum(w), 1 - tail)) + 1
        return np.arange(c, c + min(cut, width), dtype=np.int64), w[:cut] / w[:cut].sum()
    k = int(math.floor(mean + 0.5))
    d = mean - k
    var = max(var, abs(d) - d * d)
    up, down = (var + d * d + d) / 2, (var + d * d - d) / 2
    vals = np.array([k - 1, k, k + 1], dtype=np.int64)
    w = np.array([down, 1.0 - up - down, up])
    keep = (w > 1e-15) & (vals >= 0)
    return vals[keep], w[keep] / w[keep].sum()


def lead_time_moments(values, weights) -> tuple[float, float]:
    """Mean and standard deviation of a stated lead-time distribution.

    Examples
    --------
    >>> lead_time_moments([2, 4], [0.5, 0.5])
    (3.0, 1.0)
    """
    v = np.asarray(values, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    w = w / w.sum()
    m = float(v @ w)
    return m, float(math.sqrt(max(float((v - m) ** 2 @ w), 0.0)))


def lead_time_demand_moments(*, lead_mean, lead_sd, period_mean, period_sd) -> tuple[np.ndarray, np.ndarray]:
    """Mean and sd of demand over a random lead time (periods independent, lead time independent of demand).

    ``E = E[L] mu`` and ``Var = E[L] sigma^2 + mu^2 Var(L)`` (Silver, Pyke &
    Thomas 2017, Inventory and Production Management in Supply Chains, 4th
    ed., ch. 6; from memory).

    Examples
    --------
    >>> m, sd = lead_time_demand_moments(lead_mean=3.0, lead_sd=1.0, period_mean=2.0, period_sd=1.0)
    >>> float(m), round(float(sd), 4)  # sqrt(3 + 4)
    (6.0, 2.6458)
    """
    lm, ls, pm, ps = (np.asarray(x, dtype=np.float64) for x in (lead_mean, lead_sd, period_mean, period_sd))
    return lm * pm, np.sqrt(lm * ps**2 + pm**2 * ls**2)

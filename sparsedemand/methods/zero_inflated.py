"""Zero-inflated Poisson (ZIP) and negative binomial (ZINB) fitted by maximum likelihood.

Each item's trimmed, available history is taken as i.i.d. draws from

* ZIP: ``P(0) = pi + (1 - pi) exp(-lam)``, ``P(y) = (1 - pi) Poisson(y; lam)``;
* ZINB: ``P(0) = pi + (1 - pi) NB(0; mu, r)``, ``P(y) = (1 - pi) NB(y; mu, r)``,
  with NB mean ``mu`` and variance ``mu + mu**2 / r``.

The forecast mean is ``(1 - pi) lam`` or ``(1 - pi) mu`` per period, and the
fitted law is the predictive distribution. The ZIP mean and variance are
``(1 - pi) lam`` and ``(1 - pi) lam (1 + pi lam)``.

Fitting uses the hurdle form of the likelihood: with ``pi >= 0`` free, the
maximum splits into the share of periods with demand, ``k / n``, and the
zero-truncated count law fitted to the ``k`` positive demands. For ZIP the
truncated fit solves ``lam / (1 - exp(-lam)) = mean positive demand``
(Newton, monotone from the right); for ZINB, for each ``r`` the truncated mean
is matched the same way and ``r`` maximises the profile likelihood (grid plus
Brent's line search over ``log r`` in [0.01, 10 000], inside numba). Then
``pi = 1 - (k / n) / (1 - P0)``. If that ``pi`` would be negative (fewer zeros
than the count law alone implies) the maximum lies on ``pi = 0`` and the plain
Poisson (``lam`` = mean) or NB (``mu`` = mean, ``r`` by profile) is fitted.
The in-sample cost is the negative log-likelihood per period. Sizes need
not be integers (the likelihood uses ``lgamma``).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ._input import MethodFit, PanelArrays, constant_mean, run_public
from .events import run_in_threads
from .optimize import STATE_SIZE, line_ask, line_start, line_tell

__all__ = ["zip", "zinb", "zip_item", "zinb_item"]

_R_LOW = 0.01
_R_HIGH = 1e4
_EPS = 1e-12


@njit(cache=True, nogil=True)
def _truncated_poisson_rate(mean_pos):
    # root of h(l) = l - m (1 - exp(-l)); h is convex with h(0) = 0, h'(0) < 0
    lam = mean_pos
    for _ in range(100):
        e = math.exp(-lam)
        h = lam - mean_pos * (1.0 - e)
        step = h / (1.0 - mean_pos * e)
        lam -= step
        if abs(step) <= 1e-14 * lam:
            break
    return lam


@njit(cache=True, nogil=True)
def zip_item(size, n, table, vals, cnts):
    """(pi, lam, negative log-likelihood per period) of one item's history.

    ``table``, ``vals`` and ``cnts`` are scratch as for :func:`zinb_item`.
    """
    k = size.shape[0]
    g, _ = _size_summary(size, table, vals, cnts)
    total, lg = _grouped_totals(vals, cnts, g)
    n0 = n - k
    pi = 0.0
    lam = total / n
    mean_pos = total / k
    if n0 > 0 and mean_pos > 1.0 + _EPS:
        lam1 = _truncated_poisson_rate(mean_pos)
        pi1 = 1.0 - (k / n) / (1.0 - math.exp(-lam1))
        if pi1 > 0.0:
            pi = pi1
            lam = lam1
    ll = k * math.log1p(-pi) - k * lam + total * math.log(lam) - lg
    if n0 > 0:
        ll += n0 * math.log(pi + (1.0 - pi) * math.exp(-lam))
    return pi, lam, -ll / n


@njit(cache=True, nogil=True)
def _log_p0(mu, r):
    return -r * math.log1p(mu / r)


@njit(cache=True, nogil=True)
def _truncated_nb_mean(mean_pos, r, mu):
    # root of h(mu) = mu - m (1 - P0(mu)); convex, h(0) = 0, h'(0) = 1 - m < 0; Newton from
    # the caller's guess (the root at a nearby r), or from m, where h >= 0
    if mu != mu or mu <= 0.0 or mu - mean_pos * (1.0 - math.exp(_log_p0(mu, r))) < 0.0:
        mu = mean_pos
    for _ in range(100):
        p0 = math.exp(_log_p0(mu, r))
        h = mu - mean_pos * (1.0 - p0)
        dh = 1.0 - mean_pos * p0 * r / (r + mu)
        step = h / dh
        mu -= step
        if abs(step) <= 1e-14 * mu:
            break
    return mu


# integer sizes up to this value are counted in a table instead of sorted
_TABLE = 1024


@njit(cache=True, nogil=True)
def _size_summary(size, table, vals, cnts):
    """Distinct sizes and their counts (sorted); returns (groups, largest integer or -1).

    Integer sizes up to ``_TABLE`` are counted in ``table`` (left zeroed); other
    sizes are sorted. The second value is the largest size when every size is
    an integer in the table, else -1.
    """
    k = size.shape[0]
    top = 0
    for j in range(k):
        v = size[j]
        if v != math.floor(v) or v > _TABLE:
            top = -1
            break
        top = max(top, int(v))
    g = 0
    if top >= 0:
        for j in range(k):
            table[int(size[j])] += 1.0
        for v in range(1, top + 1):
            if table[v] > 0.0:
                vals[g] = v
                cnts[g] = table[v]
                g += 1
                table[v] = 0.0
        return g, top
    for j in range(k):  # a loop: array slice assignment costs seconds of compile time
        vals[j] = size[j]
    _shell_sort(vals, k)
    for j in range(k):  # group in place: g <= j
        v = vals[j]
        if g > 0 and v == vals[g - 1]:
            cnts[g - 1] += 1.0
        else:
            vals[g] = v
            cnts[g] = 1.0
            g += 1
    return g, -1


@njit(cache=True, nogil=True)
def _grouped_totals(vals, cnts, g):
    # (sum of the sizes, sum of lgamma(size + 1)) from the distinct sizes and their counts
    total = 0.0
    lg = 0.0
    for q in range(g):
        total += cnts[q] * vals[q]
        lg += cnts[q] * math.lgamma(vals[q] + 1.0)
    return total, lg


@njit(cache=True, nogil=True)
def _shell_sort(a, k):
    # in place, a[:k]; numba's np.sort would add seconds of first-run compile time
    gap = 1
    while gap < k // 3:
        gap = 3 * gap + 1
    while gap > 0:
        for i in range(gap, k):
            v = a[i]
            j = i
            while j >= gap and a[j - gap] > v:
                a[j] = a[j - gap]
                j -= gap
            a[j] = v
        gap //= 3


@njit(cache=True, nogil=True)
def _gamma_ratio_sum(vals, cnts, g, tails, top, r):
    # sum over demands of lgamma(y + r) - lgamma(r); for integer sizes this is
    # sum_{i < y} log(r + i), i.e. sum_i tails[i] log(r + i) with tails[i] = #{y > i},
    # cheaper than two lgamma calls per distinct size when the sizes are small
    s = 0.0
    if top >= 0 and top <= 3 * g + 4:
        for i in range(top):
            s += tails[i] * math.log(r + i)
        return s
    lgr = math.lgamma(r)
    for q in range(g):
        s += cnts[q] * (math.lgamma(vals[q] + r) - lgr)
    return s


@njit(cache=True, nogil=True)
def _nb_positive_ll(ratio, k, total, mu, r, lp0):
    # log-likelihood of the k positive demands under the untruncated NB(mu, r), without the
    # constant sum of lgamma(y + 1); ``ratio`` from _gamma_ratio_sum, ``lp0`` = log P(0)
    return ratio + k * lp0 + total * (math.log(mu) - math.log(r + mu))


@njit(cache=True, nogil=True)
def _profile(vals, cnts, g, tails, top, k, n, total, truncated, r, mu0):
    # (mu, negative profile log-likelihood at r without the constant sum of lgamma(y + 1)):
    # truncated positives, or plain NB on all n periods
    ratio = _gamma_ratio_sum(vals, cnts, g, tails, top, r)
    if truncated:
        mu = _truncated_nb_mean(total / k, r, mu0)
        lp0 = _log_p0(mu, r)
        return mu, -(_nb_positive_ll(ratio, k, total, mu, r, lp0) - k * math.log(-math.expm1(lp0)))
    mu = total / n
    lp0 = _log_p0(mu, r)
    return mu, -(_nb_positive_ll(ratio, k, total, mu, r, lp0) + (n - k) * lp0)


@njit(cache=True, nogil=True)
def _fit_r(vals, cnts, g, tails, top, k, n, total, truncated, st):
    line_start(st, 0, math.log(_R_LOW), math.log(_R_HIGH), 16, 1e-3)
    best_u = math.log(_R_HIGH)
    best = np.inf
    mu = np.nan
    while True:
        u = line_ask(st, 0)
        if u != u:
            break
        mu, v = _profile(vals, cnts, g, tails, top, k, n, total, truncated, math.exp(u), mu)
        if v < best:
            best = v
            best_u = u
        line_tell(st, 0, v)
    r = math.exp(best_u)
    return _profile(vals, cnts, g, tails, top, k, n, total, truncated, r, mu)[0], r


@njit(cache=True, nogil=True)
def zinb_item(size, n, st, table, vals, cnts, tails):
    """(pi, mu, r, negative log-likelihood per period) of one item's history.

    ``table`` (``_TABLE + 1`` zeros, left zeroed), ``vals``, ``cnts`` and
    ``tails`` (at least ``max(len(size), _TABLE)`` floats) are scratch.
    """
    k = size.shape[0]
    g, top = _size_summary(size, table, vals, cnts)
    total, lg = _grouped_totals(vals, cnts, g)
    if top >= 0:
        # tails[i] = number of demands larger than i
        above = float(k)
        q = 0
        for i in range(top):
            while q < g and vals[q] <= i:
                above -= cnts[q]
                q += 1
            tails[i] = above
    n0 = n - k
    pi = -1.0
    if n0 > 0 and total / k > 1.0 + _EPS:
        mu, r = _fit_r(vals, cnts, g, tails, top, k, n, total, True, st)
        pi = 1.0 - (k / n) / (-math.expm1(_log_p0(mu, r)))
    if pi <= 0.0:
        pi = 0.0
        mu, r = _fit_r(vals, cnts, g, tails, top, k, n, total, False, st)
    ratio = _gamma_ratio_sum(vals, cnts, g, tails, top, r)
    lp0 = _log_p0(mu, r)
    ll = k * math.log1p(-pi) + _nb_positive_ll(ratio, k, total, mu, r, lp0) - lg
    if n0 > 0:
        ll += n0 * math.log(pi + (1.0 - pi) * math.exp(lp0))
    return pi, mu, r, -ll / n


@njit(cache=True, nogil=True)
def _zi_panel(i0, i1, indptr, size, length, negative_binomial, out):
    st = np.empty(STATE_SIZE)
    longest = _TABLE
    for i in range(i0, i1):
        longest = max(longest, indptr[i + 1] - indptr[i])
    table = np.zeros(_TABLE + 1)
    vals = np.empty(longest)
    cnts = np.empty(longest)
    tails = np.empty(longest)
    for i in range(i0, i1):
        n = length[i]
        if n == 0:
            # never sold: all mass at zero
            out[0, i] = 0.0
            out[1, i] = np.nan
            out[2, i] = 1.0
            out[3, i] = 0.0
            out[4, i] = 1.0
            continue
        s = size[indptr[i]:indptr[i + 1]]
        if negative_binomial:
            pi, mu, r, c = zinb_item(s, n, st, table, vals, cnts, tails)
        else:
            pi, mu, c = zip_item(s, n, table, vals, cnts)
            r = np.nan
        out[0, i] = (1.0 - pi) * mu
        out[1, i] = c
        out[2, i] = pi
        out[3, i] = mu
        out[4, i] = r


def _fit_zero_inflated(data: PanelArrays, horizon: int, negative_binomial: bool) -> MethodFit:
    ev = data.events
    out = np.empty((5, ev.n_items))
    run_in_threads(_zi_panel, ev.n_items, ev.indptr, ev.size, ev.length, negative_binomial, out)
    if negative_binomial:
        params = {"pi": out[2], "mu": out[3], "r": out[4]}
    else:
        params = {"pi": out[2], "lam": out[3]}
    return MethodFit(
        name="zinb" if negative_binomial else "zip",
        mean=constant_mean(out[0], horizon),
        params=params,
        cost=out[1],
        distribution="zinb" if negative_binomial else "zip",
        dist_params={key: value.copy() for key, value in params.items()},
    )


def fit_zip(data: PanelArrays, horizon: int) -> MethodFit:
    """Fit a zero-inflated Poisson to every item (see the module docstring)."""
    return _fit_zero_inflated(data, horizon, False)


def fit_zinb(data: PanelArrays, horizon: int) -> MethodFit:
    """Fit a zero-inflated negative binomial to every item (see the module docstring)."""
    return _fit_zero_inflated(data, horizon, True)


def zip(y, horizon: int = 1, *, available=None, return_params: bool = False):  # noqa: A001
    """Zero-inflated Poisson forecast ``(1 - pi) lam`` by maximum likelihood per item.

    Parameters
    ----------
    y : array-like, shape (n_periods,) or (n_items, n_periods), or DemandPanel
        Demand; NaN marks an unavailable period. Leading zeros are trimmed.
    horizon : int
        Steps ahead; the forecast is flat.
    available : array-like of bool, optional
        False where a period is unavailable.
    return_params : bool
        Also return ``pi`` and ``lam`` per item and the negative
        log-likelihood per period.

    Examples
    --------
    >>> zip([0, 0, 3, 0, 0, 0, 4, 0, 0, 5], horizon=2)
    array([1.5, 1.5])
    """
    return run_public(fit_zip, y, horizon, available, return_params, {})


def zinb(y, horizon: int = 1, *, available=None, return_params: bool = False):
    """Zero-inflated negative binomial forecast ``(1 - pi) mu`` by maximum likelihood.

    Parameters and returns as :func:`zip`; the parameters are ``pi``, ``mu``
    and ``r``.

    Examples
    --------
    >>> zinb([0, 0, 3, 0, 0, 0, 4, 0, 0, 1, 0, 9]).round(3)
    array([1.7])
    """
    return run_public(fit_zinb, y, horizon, available, return_params, {})

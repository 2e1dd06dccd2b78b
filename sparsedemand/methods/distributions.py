"""Predictive demand distributions on the integer grid.

Every function here works on many items at once. A probability mass function
(PMF) is a 2-D ``float64`` array of shape ``(n_items, K)``: row ``i`` holds
``P(D_i = k)`` for ``k = 0 .. K-1``, where ``D_i`` is the item's total demand
over a number of consecutive periods (for example the lead time, or the lead
time plus the review period; the number may differ per item).

Kinds (per-period parameters, periods independent and identically distributed):

``"compound"``
    ``B * S`` with ``B ~ Bernoulli(p)`` and a demand size ``S >= 1`` matched to
    ``size_mean`` and ``size_var`` (optionally ``size_hist_mean``, the mean
    of the sizes the variance was measured on: the variance is then carried
    to ``size_mean`` at the same coefficient of variation; derived from the
    history when ``values`` are passed) by :func:`size_family`: ``S = 1 + NB`` (a
    negative binomial) when the sizes are more variable than ``1 + Poisson``
    allows, otherwise ``S = c + Poisson`` with the largest whole shift ``c >= 1``
    that keeps the Poisson part's variance at or above ``size_var``
    (``c = size_mean`` and no Poisson part for constant sizes). Both families
    are closed under addition, so the total over ``n`` periods is the exact
    compound binomial ``sum_k Binomial(k; n, p) * P(S_1 + ... + S_k = t)``.
``"zip"`` / ``"zinb"``
    Zero-inflated Poisson / negative binomial: the same mixture over the number
    of active (non-structural-zero) periods, with ``Poisson(k lam)`` or
    ``NB(k r, mu)`` for ``k`` active periods.
``"normal"``
    A normal approximation for smooth demand only: mean the sum of the per-step
    forecast means, variance ``n sigma^2``; discretised with a continuity
    correction and censored at 0 (the mass below 0 is put on 0).
``"empirical"``
    The bootstrap of Willemain, Smart & Schwarz (2004, International Journal of
    Forecasting 20:375-387): a two-state Markov chain for demand occurrence
    estimated from the item's own available history, started from the last
    observed state; sizes resampled from the item's non-zero demands and
    jittered; seeded and deterministic for a given seed. The paper jitters a
    resampled size ``x`` to ``1 + INT(x + Z sqrt(x))`` with ``Z`` standard
    normal, keeping ``x`` when that is not positive (from memory); here the
    jittered size is the nearest whole number to ``x + Z sqrt(x)`` (again
    ``x`` when not positive), which does not add half a unit to every size.
    Sizes are rounded to whole units; all horizons of one call share the
    same sample paths.
``"point"``
    No spread: the total forecast mean, split between the two neighbouring
    whole numbers so that the PMF keeps the mean (all mass on 0 for a zero
    forecast).

Grid size: each item starts from ``K = ceil(mean + 12 sd) + 2`` of its total and
the grid is doubled until the probability left beyond it is below
:data:`TAIL_TOLERANCE`, up to ``max_units`` (default :data:`MAX_UNITS`); at
the cap the remaining tail mass is put on the last cell. Work is done in
blocks of items with similar grids (:func:`size_blocks`). A dense result is as
wide as its widest item needs; ``demand_pmfs(..., ragged=True)`` returns one
row per item, each only as long as that item needs, for many items of very
different volumes.

Examples
--------
>>> pmf = demand_pmf("zip", {"pi": np.array([0.5]), "lam": np.array([2.0])},
...                  np.array([1.0]), periods=1)
>>> round(float(pmf[0, 0]), 4)  # 0.5 + 0.5 * exp(-2)
0.5677
>>> pmf_quantiles(pmf, [0.5, 0.95]).tolist()
[[0, 4]]
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from numba import njit
from scipy.special import ndtr

from ..errors import InputError
from .events import run_in_threads

__all__ = [
    "KINDS",
    "MAX_UNITS",
    "TAIL_TOLERANCE",
    "SD_MULTIPLE",
    "demand_pmf",
    "demand_pmfs",
    "grid_sizes",
    "total_moments",
    "period_totals",
    "checked_params",
    "size_family",
    "distribution_labels",
    "item_seeds",
    "size_blocks",
    "pad_rows",
    "pmf_quantiles",
    "ragged_quantiles",
    "pmf_cdf",
    "pmf_mean",
    "pmf_var",
    "shortage_curve",
    "expected_shortage",
    "expected_on_hand",
]

KINDS: tuple[str, ...] = ("compound", "zip", "zinb", "normal", "empirical", "point")

#: Largest grid (whole units of total demand) any item may get.
MAX_UNITS: int = 1 << 20
#: Probability allowed beyond an item's grid before the grid is doubled.
TAIL_TOLERANCE: float = 1e-10
#: Initial grid reach in standard deviations above the mean.
SD_MULTIPLE: float = 12.0

_REQUIRED = {
    "compound": ("p", "size_mean", "size_var"),
    "zip": ("pi", "lam"),
    "zinb": ("pi", "mu", "r"),
    "normal": ("sigma",),
    "empirical": (),
    "point": (),
}
# Weights and component values below these are dropped (far below any level of interest).
_LOG_MIN_WEIGHT = math.log(1e-20)
_MIN_CELL = 1e-30
# Comparisons against a probability level tolerate this much rounding in a cumulative sum.
_LEVEL_SLACK = 1e-12


# --------------------------------------------------------------------------- inputs
def _item_labels(items, n: int):
    return list(range(n)) if items is None else list(items)


def _per_item(x, n: int, *, name: str, integer: bool = False, minimum=None) -> np.ndarray:
    """Broadcast a scalar or per-item sequence to ``(n,)`` and check it."""
    arr = np.asarray(x, dtype=np.float64)
    if arr.ndim == 0:
        arr = np.full(n, float(arr))
    if arr.shape != (n,):
        raise InputError(f"{name} must be a single value or one value per item ({n}), got shape {arr.shape}")
    bad = ~np.isfinite(arr)
    if integer:
        bad |= arr != np.round(arr)
    if minimum is not None:
        bad |= arr < minimum
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        kind = "a whole number" if integer else "a number"
        bound = f" >= {minimum}" if minimum is not None else ""
        raise InputError(f"{name} must be {kind}{bound}, got {arr[i]!r} at position {i}")
    return arr.astype(np.int64) if integer else arr


def _mean_matrix(mean, n: int | None = None) -> np.ndarray:
    m = np.asarray(mean, dtype=np.float64)
    if m.ndim == 1:
        m = m[:, None]
    if m.ndim != 2 or m.shape[1] == 0:
        raise InputError(f"mean must be (items,) or (items, horizon) with horizon >= 1, got shape {m.shape}")
    if n is not None and m.shape[0] != n:
        raise InputError(f"mean has {m.shape[0]} rows for {n} items")
    if (np.isnan(m) | (m < 0)).any():
        i = int(np.flatnonzero((np.isnan(m) | (m < 0)).any(axis=1))[0])
        raise InputError(f"forecast mean must be finite and >= 0, got {m[i].min()!r} for item {i}")
    return np.ascontiguousarray(m)


def period_totals(mean, periods) -> np.ndarray:
    """Sum of the per-step forecast means over the first ``periods`` steps, per item.

    Steps beyond the forecast horizon repeat the last step's mean.

    Examples
    --------
    >>> period_totals(np.array([[1.0, 2.0]]), np.array([3])).tolist()
    [5.0]
    """
    mean = _mean_matrix(mean)
    periods = _per_item(periods, mean.shape[0], name="periods", integer=True, minimum=0)
    h = mean.shape[1]
    csum = np.concatenate([np.zeros((mean.shape[0], 1)), np.cumsum(mean, axis=1)], axis=1)
    inside = np.minimum(periods, h)
    rows = np.arange(mean.shape[0])
    return csum[rows, inside] + np.maximum(periods - h, 0) * mean[:, -1]


def checked_params(kind: str, dist_params: Mapping | None, mean, *, items=None) -> dict:
    """Per-item parameter arrays for ``kind``, checked (one-line errors naming parameter and item).

    NaN parameters are accepted only for items whose first-step forecast mean
    is 0; they are replaced by values giving all mass on 0.

    Examples
    --------
    >>> checked_params("zip", {"pi": [np.nan], "lam": [np.nan]}, [0.0])
    {'pi': array([1.]), 'lam': array([0.])}
    """
    mean = _mean_matrix(mean)
    return _params(kind, dist_params, mean.shape[0], mean[:, 0], items)


def _params(kind: str, dist_params: Mapping | None, n: int, mean0: np.ndarray, items) -> dict:
    if kind not in KINDS:
        raise InputError(f"unknown distribution kind {kind!r}; expected one of {', '.join(KINDS)}")
    dist_params = {} if dist_params is None else dist_params
    out = {}
    for key in _REQUIRED[kind]:
        if key not in dist_params:
            raise InputError(f"{kind} distribution needs dist_params[{key!r}]")
        arr = np.asarray(dist_params[key], dtype=np.float64)
        if arr.ndim == 0:
            arr = np.full(n, float(arr))
        if arr.shape != (n,):
            raise InputError(f"dist_params[{key!r}] has shape {arr.shape}, expected ({n},)")
        out[key] = arr.copy()
    if not out:
        return out
    labels = _item_labels(items, n)
    idle = mean0 <= 0
    anynan = np.zeros(n, dtype=bool)
    for arr in out.values():
        anynan |= np.isnan(arr)
    bad = anynan & ~idle
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        missing = [k for k, v in out.items() if np.isnan(v[i])]
        raise InputError(f"{kind} distribution: {', '.join(missing)} is NaN for item {labels[i]!r} with a positive forecast")
    zero = anynan & idle  # no forecast demand and no parameters: a point mass at 0

    def check(key, ok, rule):
        bad = ~zero & ~ok(out[key])
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"{kind} distribution: {key} must be {rule}, got {out[key][i]!r} for item {labels[i]!r}")

    with np.errstate(invalid="ignore"):
        if kind == "compound":
            check("p", lambda v: (v >= 0) & (v <= 1), "between 0 and 1")
            check("size_var", lambda v: v >= 0, ">= 0")
            # sizes below one unit only matter where demand can occur
            idle_size = out["p"] == 0
            out["size_mean"][idle_size] = np.fmax(out["size_mean"][idle_size], 1.0)
            check("size_mean", lambda v: v >= 1 - 1e-9,
                  ">= 1 (whole units; rescale fractional quantities)")
            out["size_mean"] = np.maximum(out["size_mean"], 1.0)
            out["p"][zero] = 0.0
            if dist_params.get("size_hist_mean") is not None:
                out["size_var"] = _rescaled_size_var(out["size_mean"], out["size_var"],
                                                     dist_params["size_hist_mean"], n)
        elif kind in ("zip", "zinb"):
            check("pi", lambda v: (v >= 0) & (v <= 1), "between 0 and 1")
            if kind == "zip":
                check("lam", lambda v: v >= 0, ">= 0")
            else:
                check("mu", lambda v: v >= 0, ">= 0")
                check("r", lambda v: v > 0, "> 0")
            out["pi"][zero] = 1.0
        elif kind == "normal":
            check("sigma", lambda v: v >= 0, ">= 0")
            out["sigma"][zero] = 0.0
    for arr in out.values():
        arr[zero & np.isnan(arr)] = 0.0
    return out


# --------------------------------------------------------------------------- size family
def _rescaled_size_var(size_mean, size_var, hist_mean, n: int) -> np.ndarray:
    """Size variance carried to the forecast size mean at the history's coefficient of variation.

    A smoothed size mean can sit far from the mean of the history the
    variance was measured on (say 1.5 against 11.4 after a run of small
    orders); matching that mean with the raw variance would imply absurdly
    heavy tails, so the variance is scaled by ``(size_mean / hist_mean)^2``.
    """
    hist = np.asarray(hist_mean, dtype=np.float64)
    hist = np.full(n, float(hist)) if hist.ndim == 0 else hist
    if hist.shape != (n,):
        raise InputError(f"dist_params['size_hist_mean'] has shape {hist.shape}, expected ({n},)")
    usable = np.isfinite(hist) & (hist > 0)
    ratio = np.where(usable, size_mean / np.where(usable, hist, 1.0), 1.0)
    return np.where(np.isnan(size_var), size_var, size_var * ratio * ratio)


def size_family(size_mean, size_var) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Whole-unit demand size ``S = c + X`` matched to a mean and variance.

    ``X`` is negative binomial with mean ``m`` and size ``r`` when the variance
    exceeds ``size_mean - 1`` (what ``1 + Poisson`` allows; then ``c = 1``),
    otherwise Poisson with mean ``m = size_mean - c`` where
    ``c = floor(size_mean - size_var) >= 1``, so that ``Var(S) = m`` lies in
    ``[size_var, size_var + 1)``; ``r = inf`` marks the Poisson case and
    ``m = 0`` a fixed size.

    Returns
    -------
    shift : ndarray of int64, excess_mean : ndarray, nb_size : ndarray (inf for Poisson)

    Examples
    --------
    >>> c, m, r = size_family(np.array([1.0, 3.0, 4.0]), np.array([0.0, 6.0, 0.0]))
    >>> c.tolist(), m.tolist(), r.tolist()
    ([1, 1, 4], [0.0, 2.0, 0.0], [inf, 1.0, inf])
    """
    mean = np.asarray(size_mean, dtype=np.float64)
    var = np.asarray(size_var, dtype=np.float64)
    excess = mean - 1.0
    over = (var > excess + 1e-12) & (excess > 1e-12)
    shift = np.where(over, 1.0, np.maximum(1.0, np.floor(mean - var + 1e-9)))
    shift = np.where(np.isfinite(shift), shift, 1.0).astype(np.int64)
    m = np.where(over, excess, np.maximum(mean - shift, 0.0))
    m = np.where(m < 1e-12, 0.0, m)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(over, excess**2 / (var - excess), np.inf)
    return shift, m, r


def _mixture_inputs(kind: str, prm: dict):
    """(active probability, shift per active period, component mean, NB size) for the mixture kernel."""
    if kind == "compound":
        shift, m, r = size_family(prm["size_mean"], prm["size_var"])
        return prm["p"], shift, m, r
    n = len(prm["pi"])
    shift = np.zeros(n, dtype=np.int64)
    if kind == "zip":
        return 1.0 - prm["pi"], shift, prm["lam"], np.full(n, np.inf)
    return 1.0 - prm["pi"], shift, prm["mu"], prm["r"]


def total_moments(kind: str, dist_params: Mapping | None, mean, *, periods, items=None) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance of total demand over ``periods`` (closed forms; NaN variance for ``"empirical"``).

    Per period, with ``q`` the probability of an active period and ``A`` the
    demand of an active period, ``E = q E[A]`` and
    ``Var = q Var(A) + q (1 - q) E[A]^2`` (law of total variance); the total
    over ``n`` independent periods has ``n`` times both.

    Examples
    --------
    >>> m, v = total_moments("compound", {"p": [0.2], "size_mean": [3.0], "size_var": [4.0]},
    ...                      [0.6], periods=5)
    >>> float(m[0]), round(float(v[0]), 6)
    (3.0, 11.2)
    """
    mean = _mean_matrix(mean)
    n_items = mean.shape[0]
    n = _per_item(periods, n_items, name="periods", integer=True, minimum=0).astype(np.float64)
    total = period_totals(mean, n.astype(np.int64))
    prm = _params(kind, dist_params, n_items, mean[:, 0], items)
    if kind in ("compound", "zip", "zinb"):
        return _mixture_moments(*_mixture_inputs(kind, prm), n)
    if kind == "normal":
        return total, n * prm["sigma"] ** 2
    if kind == "point":
        frac = total - np.floor(total)
        return total, frac * (1 - frac)
    return total, np.full(n_items, np.nan)


def grid_sizes(kind: str, dist_params: Mapping | None, mean, *, periods, items=None,
               max_units: int | None = None) -> np.ndarray:
    """Initial grid size per item: ``ceil(mean + 12 sd) + 2`` of its total, capped.

    For ``"empirical"`` this is only a moment guess from the forecast mean; the
    bootstrap sizes its grid from its own samples.

    Examples
    --------
    >>> grid_sizes("zip", {"pi": [0.0], "lam": [4.0]}, [4.0], periods=1).tolist()
    [30]
    """
    cap = _cap(max_units)
    m, v = total_moments(kind, dist_params, mean, periods=periods, items=items)
    return _initial_grid(m, np.where(np.isnan(v), m, v), cap)  # empirical: a Poisson-like guess


def _cap(max_units) -> int:
    if max_units is None:
        return MAX_UNITS
    if int(max_units) != max_units or max_units < 2:
        raise InputError(f"max_units must be a whole number >= 2, got {max_units!r}")
    return int(max_units)


# --------------------------------------------------------------------------- kernels
@njit(cache=True)
def _log_rising(a, x):
    """``log Gamma(a + x) - log Gamma(a)`` without cancellation for large ``a`` (Stirling series)."""
    if x == 0.0:
        return 0.0
    if a < 10.0:
        return math.lgamma(a + x) - math.lgamma(a)
    z = a + x
    return ((a - 0.5) * math.log1p(x / a) + x * math.log(z) - x
            + (1.0 / z - 1.0 / a) / 12.0 - (1.0 / z**3 - 1.0 / a**3) / 360.0)


@njit(cache=True)
def _add_component(row, base, xmax, w, poisson, a, lp, l1p):
    """Add ``w * P(X = x)`` at ``row[base + x]`` for ``x <= xmax``; return a bound on ``w * P(X > xmax)``.

    ``X`` is Poisson with mean ``a`` (``poisson``) or negative binomial with
    size ``a`` and success probability ``exp(lp)``. The walk starts at the mode
    (or the grid end) and uses the ratio of successive probabilities, stopping
    once the terms are negligible. Past the mode the ratio decreases, so the
    mass beyond the grid is at most a geometric series from the last term
    (at most ``w`` when the grid ends before the mode).
    """
    if poisson:
        mode = math.floor(a)
        q1 = 0.0
    else:
        q1 = math.exp(l1p)
        mode = math.floor((a - 1.0) * q1 / math.exp(lp)) if a > 1.0 else 0.0
    x0 = int(min(mode, float(xmax)))
    if poisson:
        logp = -a + x0 * math.log(a) - math.lgamma(x0 + 1.0)
    else:
        logp = _log_rising(a, float(x0)) - math.lgamma(x0 + 1.0) + a * lp + x0 * l1p
    p0 = math.exp(logp)
    row[base + x0] += w * p0
    p = p0
    for x in range(x0, 0, -1):  # downwards: P(x-1) from P(x)
        if poisson:
            p *= x / a
        else:
            p *= x / ((x - 1.0 + a) * q1)
        row[base + x - 1] += w * p
        if w * p < _MIN_CELL:
            break
    p = p0
    for x in range(x0 + 1, xmax + 1):  # upwards: P(x) from P(x-1)
        if poisson:
            p *= a / x
        else:
            p *= (x - 1.0 + a) / x * q1
        row[base + x] += w * p
        if w * p < _MIN_CELL and x > mode:
            return 0.0
    ratio = a / (xmax + 1.0) if poisson else (xmax + a) / (xmax + 1.0) * q1
    if xmax < mode or ratio >= 1.0:
        return w  # no geometric bound yet: at most the whole component
    return min(w, w * p * ratio / (1.0 - ratio))


@njit(cache=True)
def _mixture_kernel(n, q, shift, mu, size, grid, out, tail):
    """Total over ``n[i]`` periods of ``B * (shift + X)``, B ~ Bernoulli(q), X Poisson/NB (size inf = Poisson).

    Mixture over the number ``k`` of active periods: ``Binomial(k; n, q)`` times
    the law of ``k * shift + X_1 + ... + X_k`` (Poisson(k mu) or NB(k r, same
    success probability)). Rows are filled on ``0 .. grid[i]-1`` of ``out``;
    ``tail[i]`` receives a bound on the probability beyond the grid.
    """
    for i in range(out.shape[0]):
        row = out[i]
        ni = n[i]
        qi = q[i]
        K = grid[i]
        tail[i] = 0.0
        if ni <= 0 or qi <= 0.0:
            row[0] += 1.0
            continue
        c = shift[i]
        m = mu[i]
        r = size[i]
        poisson = not (r < np.inf)
        lp = 0.0
        l1p = 0.0
        if m > 0.0 and not poisson:
            lp = -math.log1p(m / r)
            l1p = math.log(m) - math.log(r + m)
        lq = math.log(qi)
        l1q = math.log1p(-qi) if qi < 1.0 else -np.inf
        lgn = math.lgamma(ni + 1.0)
        for k in range(ni + 1):
            if qi >= 1.0:
                if k != ni:
                    continue
                lw = 0.0
            else:
                lw = lgn - math.lgamma(k + 1.0) - math.lgamma(ni - k + 1.0) + k * lq + (ni - k) * l1q
            if lw < _LOG_MIN_WEIGHT:
                continue
            w = math.exp(lw)
            base = c * k
            xmax = K - 1 - base
            if xmax < 0:  # k active periods already need more than the grid
                tail[i] += w
                continue
            if k == 0 or m <= 0.0:
                row[base] += w
                continue
            a = k * m if poisson else k * r
            tail[i] += _add_component(row, base, xmax, w, poisson, a, lp, l1p)


_U12 = np.uint64(12)
_U25 = np.uint64(25)
_U27 = np.uint64(27)
_U11 = np.uint64(11)
_MULT = np.uint64(2685821657736338717)
_TWO53 = 1.0 / 9007199254740992.0


@njit(cache=True)
def _uniform(state):
    """xorshift64* step: returns (new state, uniform double in [0, 1))."""
    state ^= state >> _U12
    state ^= state << _U25
    state ^= state >> _U27
    return state, float((state * _MULT) >> _U11) * _TWO53


@njit(cache=True)
def _bootstrap_kernel(values, rows, start, available, has_mask, checkpoints, seeds, n_samples, jitter, out):
    """Willemain-Smart-Schwarz bootstrap totals at each checkpoint, ``out[i, j, s]``.

    Item ``i`` uses history row ``rows[i]`` of ``values`` and ``available``
    (read only when ``has_mask``) from period ``start[i]`` on, so a subset of
    a large panel needs no copy.

    Occurrence: two-state Markov chain estimated from transitions between
    consecutive available periods from the item's first demand on (a state
    with no observed exits uses the item's overall demand rate), started from
    the last available state. Sizes: whole-unit non-zero demands resampled with
    replacement; jittered to ``round(x + z sqrt(x))``, keeping ``x`` when that
    is not positive. Every item has its own seed, so an item's samples do not
    depend on which other items share the call.
    """
    n_periods = values.shape[1]
    n_items = rows.shape[0]
    n_checks = checkpoints.shape[1]
    sizes = np.empty(n_periods, dtype=np.float64)
    roots = np.empty(n_periods, dtype=np.float64)
    for i in range(n_items):
        h = rows[i]
        nz = 0
        n_av = 0
        n00 = 0
        n01 = 0
        n10 = 0
        n11 = 0
        prev = -1
        last = 0
        for t in range(start[i], n_periods):
            if has_mask and not available[h, t]:
                prev = -1
                continue
            v = values[h, t]
            occ = 1 if v > 0.0 else 0
            if occ == 1:
                sizes[nz] = max(1.0, float(np.rint(v)))
                roots[nz] = math.sqrt(sizes[nz])
                nz += 1
            n_av += 1
            if prev == 0:
                if occ == 1:
                    n01 += 1
                else:
                    n00 += 1
            elif prev == 1:
                if occ == 1:
                    n11 += 1
                else:
                    n10 += 1
            prev = occ
            last = occ
        horizon = 0
        for j in range(n_checks):
            horizon = max(horizon, checkpoints[i, j])
        if nz == 0 or horizon == 0:
            for j in range(n_checks):
                for s in range(n_samples):
                    out[i, j, s] = 0
            continue
        rate = nz / n_av
        p01 = n01 / (n00 + n01) if n00 + n01 > 0 else rate
        p11 = n11 / (n10 + n11) if n10 + n11 > 0 else rate
        state = np.uint64(seeds[i]) * _MULT + np.uint64(0x9E3779B97F4A7C15)
        if state == np.uint64(0):  # xorshift must not start from zero
            state = _MULT
        csum = np.zeros(horizon + 1, dtype=np.int64)
        spare = 0.0
        have_spare = False
        for s in range(n_samples):
            occupied = last
            total = 0
            for step in range(1, horizon + 1):
                state, u = _uniform(state)
                occupied = 1 if u < (p11 if occupied == 1 else p01) else 0
                if occupied == 1:
                    state, u = _uniform(state)
                    pick = min(int(u * nz), nz - 1)
                    x = sizes[pick]
                    if jitter:
                        if have_spare:
                            z = spare
                            have_spare = False
                        else:  # Box-Muller gives two independent normals
                            state, u1 = _uniform(state)
                            state, u2 = _uniform(state)
                            radius = math.sqrt(-2.0 * math.log(1.0 - u1))
                            z = radius * math.cos(2.0 * math.pi * u2)
                            spare = radius * math.sin(2.0 * math.pi * u2)
                            have_spare = True
                        jx = np.rint(x + z * roots[pick])
                        if jx > 0.0:
                            x = jx
                    total += int(x)
                csum[step] = total
            for j in range(n_checks):
                out[i, j, s] = csum[checkpoints[i, j]]


def item_seeds(seed, n_items: int, *, keys=None) -> np.ndarray:
    """Independent per-item 32-bit seeds: splitmix64 of ``seed`` and a per-item key.

    ``keys`` (whole numbers, one per item) default to the row positions; pass
    keys derived from the item labels to make an item's samples independent
    of its position. A per-item ``seed`` array is taken as the seeds
    themselves (reduced to 32 bits).

    Examples
    --------
    >>> (item_seeds(0, 3) == item_seeds(0, 3)).all(), len(set(item_seeds(0, 3).tolist()))
    (np.True_, 3)
    """
    arr = np.asarray(seed)
    if arr.ndim == 1:
        if arr.shape != (n_items,):
            raise InputError(f"seed must be one number or one per item ({n_items}), got shape {arr.shape}")
        return (arr.astype(np.uint64) & np.uint64(0xFFFFFFFF)).astype(np.int64)
    if arr.ndim != 0 or int(seed) != seed or seed < 0:
        raise InputError(f"seed must be a whole number >= 0, got {seed!r}")
    key = np.arange(n_items, dtype=np.uint64) if keys is None else np.asarray(keys).astype(np.uint64)
    if key.shape != (n_items,):
        raise InputError(f"seed keys must be one per item ({n_items}), got shape {key.shape}")
    with np.errstate(over="ignore"):
        z = np.uint64(int(seed) % (1 << 64)) * np.uint64(0x9E3779B97F4A7C15) + (key + np.uint64(1)) * np.uint64(
            0xBF58476D1CE4E5B9
        )
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z & np.uint64(0xFFFFFFFF)).astype(np.int64)


# --------------------------------------------------------------------------- PMFs
#: Cells per dense working block; rows are grouped by grid size under this budget.
_BLOCK_CELLS = 1 << 22


def size_blocks(grid: np.ndarray, budget: int = _BLOCK_CELLS) -> list[np.ndarray]:
    """Positions into ``grid`` in increasing size, split so each block has at most ``budget`` cells.

    Examples
    --------
    >>> [b.tolist() for b in size_blocks(np.array([5, 1, 5]), budget=10)]
    [[1, 0], [2]]
    """
    order = np.argsort(grid, kind="stable")
    g = grid[order]
    out = []
    i = 0
    while i < len(order):
        lo, hi = i + 1, len(order)  # largest j with (j - i) * g[j - 1] <= budget
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if (mid - i) * g[mid - 1] <= budget:
                lo = mid
            else:
                hi = mid - 1
        out.append(order[i:lo])
        i = lo
    return out


def _store_rows(block: np.ndarray, rows: np.ndarray, out: list) -> None:
    """Put each row of ``block``, cut after its last positive cell, at ``out[rows[i]]``."""
    if block.shape[0] == 0:
        return
    positive = block > 0
    last = np.where(positive.any(axis=1), block.shape[1] - 1 - positive[:, ::-1].argmax(axis=1), 0)
    for r, row, end in zip(rows.tolist(), block, last.tolist()):
        out[r] = row[: end + 1].copy()


def pad_rows(rows: Sequence, width: int | None = None) -> np.ndarray:
    """Stack ragged PMF rows into one zero-padded ``(len(rows), width)`` array.

    Examples
    --------
    >>> pad_rows([np.array([1.0]), np.array([0.5, 0.5])]).tolist()
    [[1.0, 0.0], [0.5, 0.5]]
    """
    if width is None:
        width = max((len(r) for r in rows), default=1)
    out = np.zeros((len(rows), width))
    for i, r in enumerate(rows):
        out[i, : len(r)] = r
    return out


def _initial_grid(total_mean: np.ndarray, total_var: np.ndarray, cap: int) -> np.ndarray:
    k = np.ceil(total_mean + SD_MULTIPLE * np.sqrt(np.maximum(total_var, 0.0))) + 2
    return np.clip(np.nan_to_num(k, nan=2.0, posinf=cap), 2, cap).astype(np.int64)


def _mixture_moments(q, shift, m, r, n):
    with np.errstate(divide="ignore", invalid="ignore"):
        var_a = np.where(np.isinf(r), m, m + m * m / r)
    a = shift + m
    return n * q * a, n * (q * var_a + q * (1 - q) * a * a)


def _mixture_rows(kind: str, prm: dict, n: np.ndarray, cap: int) -> list:
    q, shift, m, r = (np.ascontiguousarray(x) for x in _mixture_inputs(kind, prm))
    q, m, r = (x.astype(np.float64) for x in (q, m, r))
    shift = shift.astype(np.int64)
    grid = _initial_grid(*_mixture_moments(q, shift, m, r, n), cap)
    out: list = [None] * len(n)
    pending = np.arange(len(n))
    while pending.size:
        retry = []
        for blk in size_blocks(grid[pending]):
            rows = pending[blk]
            block = np.zeros((rows.size, int(grid[rows].max())))
            tail = np.zeros(rows.size)
            _mixture_kernel(n[rows], q[rows], shift[rows], m[rows], r[rows], grid[rows], block, tail)
            short = tail > TAIL_TOLERANCE
            capped = short & (grid[rows] >= cap)
            # at the cap the tail goes on the last cell so that each row sums to 1
            left = np.maximum(1.0 - block.sum(axis=1), 0.0)
            block[np.flatnonzero(capped), grid[rows[capped]] - 1] += left[capped]
            done = ~short | capped
            block /= block.sum(axis=1, keepdims=True)  # rounding in the log-probabilities of large counts
            _store_rows(block[done], rows[done], out)
            retry.append(rows[~done])
        pending = np.concatenate(retry)
        grid[pending] = np.minimum(grid[pending] * 2, cap)
    return out


def _normal_rows(total: np.ndarray, sd: np.ndarray, cap: int) -> list:
    grid = _initial_grid(total, sd * sd, cap)
    out: list = [None] * len(total)
    for rows in size_blocks(grid):
        width = int(grid[rows].max())
        k = np.arange(width, dtype=np.float64)
        s = sd[rows][:, None]
        safe = np.where(s > 0, s, 1.0)
        upper = ndtr((k[None, :] + 0.5 - total[rows][:, None]) / safe)
        block = np.diff(upper, axis=1, prepend=0.0)
        block[:, -1] += 1.0 - upper[:, -1]
        flat = sd[rows] <= 0
        if flat.any():
            block[flat] = _point_block(total[rows][flat], width)
        _store_rows(np.clip(block, 0.0, None), rows, out)
    return out


def _point_block(total: np.ndarray, width: int) -> np.ndarray:
    """All mass on ``total``, split between its neighbouring whole numbers to keep the mean."""
    lo = np.floor(total + 1e-12).astype(np.int64)
    frac = np.clip(total - lo, 0.0, 1.0)
    frac[frac < 1e-12] = 0.0
    block = np.zeros((len(total), width))
    rows = np.arange(len(total))
    block[rows, np.minimum(lo, width - 1)] += 1.0 - frac
    hi = frac > 0
    block[rows[hi], np.minimum(lo[hi] + 1, width - 1)] += frac[hi]
    return block


def _point_rows(total: np.ndarray, cap: int) -> list:
    total = np.minimum(total, cap - 1)
    grid = np.floor(total + 1e-12).astype(np.int64) + 2
    out: list = [None] * len(total)
    for rows in size_blocks(grid):
        _store_rows(_point_block(total[rows], int(grid[rows].max())), rows, out)
    return out


@njit(cache=True)
def _histogram_rows(totals, cap):
    """Relative frequencies of each row of ``totals`` as one flat array plus row offsets."""
    n_rows, n_samples = totals.shape
    offsets = np.zeros(n_rows + 1, dtype=np.int64)
    for i in range(n_rows):
        top = 0
        for s in range(n_samples):
            top = max(top, totals[i, s])
        offsets[i + 1] = offsets[i] + min(top, cap - 1) + 1
    data = np.zeros(offsets[n_rows], dtype=np.float64)
    for i in range(n_rows):
        o = offsets[i]
        last = offsets[i + 1] - o - 1
        for s in range(n_samples):
            data[o + min(totals[i, s], last)] += 1.0  # exact counts, then one division
    data /= n_samples
    return data, offsets


def _bootstrap_rows(values, rows, start, available, has_mask, checks: np.ndarray, seeds, n_samples: int,
                    jitter: bool, cap: int, block_items: int = 256) -> list[list]:
    n_items, n_checks = checks.shape
    out: list[list] = [[None] * n_items for _ in range(n_checks)]
    for lo in range(0, n_items, block_items):
        sl = slice(lo, min(lo + block_items, n_items))
        totals = np.empty((sl.stop - lo, n_checks, n_samples), dtype=np.int64)
        _bootstrap_kernel(values, rows[sl], start[sl], available, has_mask, checks[sl], seeds[sl],
                          n_samples, jitter, totals)
        for j in range(n_checks):
            data, offsets = _histogram_rows(np.ascontiguousarray(totals[:, j, :]), cap)
            for r in range(sl.stop - lo):
                out[j][lo + r] = data[offsets[r] : offsets[r + 1]]
    return out


@njit(cache=True, nogil=True)
def _scan_history(i0, i1, values, available, has_mask, rows, size_mean, first, bad):
    """One pass over the history rows of items ``i0 .. i1-1``: mean size, first demand.

    ``bad[i]`` gets the first period of the item's row whose available value
    is negative or not finite, -1 when all are valid.
    """
    n_periods = values.shape[1]
    for i in range(i0, i1):
        h = rows[i]
        total = 0.0
        count = 0
        first[i] = n_periods
        bad[i] = -1
        for t in range(n_periods):
            if has_mask and not available[h, t]:
                continue
            v = values[h, t]
            if not (v >= 0.0 and v < np.inf):
                bad[i] = t
                break
            if v > 0.0:
                if count == 0:
                    first[i] = t
                total += v
                count += 1
        size_mean[i] = total / count if count > 0 else np.nan


def _history(values, start, available, history_rows, n_items: int):
    """Checked history (no copies of float64 input): values, item rows, item starts, mask, has_mask, mean sizes."""
    if values is None:
        raise InputError("the empirical (bootstrap) distribution needs the demand history: pass values=")
    values = np.ascontiguousarray(values, dtype=np.float64)
    if values.ndim != 2:
        raise InputError(f"values must be 2-D (items x periods), got shape {values.shape}")
    n_rows, n_periods = values.shape
    if history_rows is None:
        if n_rows != n_items:
            raise InputError(f"values has {n_rows} rows for {n_items} items")
        rows = np.arange(n_items, dtype=np.int64)
    else:
        rows = np.asarray(history_rows, dtype=np.int64)
        if rows.shape != (n_items,) or ((rows < 0) | (rows >= n_rows)).any():
            raise InputError(f"history_rows must give one row of values (0 .. {n_rows - 1}) per item")
    has_mask = available is not None
    if has_mask:
        available = np.ascontiguousarray(available, dtype=np.bool_)
        if available.shape != values.shape:
            raise InputError(f"available has shape {available.shape}, values has {values.shape}")
    else:
        available = np.ones((1, 1), dtype=np.bool_)
    sizes = np.empty(n_items)
    first = np.empty(n_items, dtype=np.int64)
    bad = np.empty(n_items, dtype=np.int64)
    # values where the item was unavailable are never read
    run_in_threads(_scan_history, n_items, values, available, has_mask, rows, sizes, first, bad)
    faulty = np.flatnonzero(bad >= 0)
    if faulty.size:
        h, t = int(rows[faulty[0]]), int(bad[faulty[0]])
        raise InputError(f"values must be finite and >= 0, got {values[h, t]!r} for row {h}, period {t}")
    if start is None:
        item_start = first
    else:
        item_start = _per_item(start, n_rows, name="start", integer=True, minimum=0)[rows]
    item_start = np.minimum(item_start, n_periods).astype(np.int64)
    return values, rows, item_start, available, has_mask, sizes


def demand_pmfs(
    kind: str,
    dist_params: Mapping | None,
    mean,
    *,
    periods: Sequence,
    values=None,
    start=None,
    available=None,
    seed=0,
    n_samples: int = 2000,
    jitter: bool = True,
    max_units: int | None = None,
    items=None,
    ragged: bool = False,
    history_rows=None,
) -> list:
    """PMFs of total demand for several numbers of periods at once.

    Same as :func:`demand_pmf` for each entry of ``periods`` (each a whole
    number or one per item); for ``"empirical"`` all entries come from the same
    bootstrap paths, so for example the lead-time total never exceeds the
    lead-time-plus-review total of the same path. ``history_rows`` (one per
    item) says which row of ``values``, ``start`` and ``available`` holds
    each item's history, so a subset of a large panel needs no copy. With
    ``ragged=True`` each
    entry is a list of 1-D rows, each only as long as its own item needs
    (memory in proportion to the items' demand, whatever the mix of volumes).

    Examples
    --------
    >>> a, b = demand_pmfs("point", None, [1.0], periods=[2, 3])
    >>> a.argmax(axis=1).tolist(), b.argmax(axis=1).tolist()
    ([2], [3])
    """
    mean = _mean_matrix(mean)
    n_items = mean.shape[0]
    cap = _cap(max_units)
    if isinstance(periods, (str, bytes)) or np.ndim(periods) == 0:
        raise InputError("periods must be a sequence of period counts; use demand_pmf for one")
    counts = [_per_item(p, n_items, name="periods", integer=True, minimum=0) for p in periods]
    if kind == "compound" and values is not None and (dist_params or {}).get("size_hist_mean") is None:
        dist_params = dict(dist_params or {}, size_hist_mean=_history(values, start, available, history_rows,
                                                                      n_items)[-1])
    prm = _params(kind, dist_params, n_items, mean[:, 0], items)
    if kind == "empirical":
        if int(n_samples) != n_samples or n_samples < 1:
            raise InputError(f"n_samples must be a whole number >= 1, got {n_samples!r}")
        vals, hrows, st, av, has_mask, _ = _history(values, start, available, history_rows, n_items)
        checks = np.ascontiguousarray(np.stack(counts, axis=1)) if counts else np.zeros((n_items, 0), np.int64)
        rows = _bootstrap_rows(vals, hrows, st, av, has_mask, checks, item_seeds(seed, n_items), int(n_samples),
                               bool(jitter), cap)
    else:
        rows = []
        for n in counts:
            if kind in ("compound", "zip", "zinb"):
                rows.append(_mixture_rows(kind, prm, n, cap))
            elif kind == "normal":
                rows.append(_normal_rows(period_totals(mean, n), prm["sigma"] * np.sqrt(n), cap))
            else:
                rows.append(_point_rows(period_totals(mean, n), cap))
    return rows if ragged else [pad_rows(r) for r in rows]


def demand_pmf(
    kind: str,
    dist_params: Mapping | None,
    mean,
    *,
    periods,
    values=None,
    start=None,
    available=None,
    seed=0,
    n_samples: int = 2000,
    jitter: bool = True,
    max_units: int | None = None,
    items=None,
    history_rows=None,
) -> np.ndarray:
    """PMF of total demand over ``periods`` consecutive periods, one row per item.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS`.
    dist_params : mapping of str to ndarray (n_items,)
        The kind's parameters (see the module docstring); ``None`` for
        ``"empirical"`` and ``"point"``. NaN parameters are accepted only for
        items whose forecast mean is 0 (they get all mass on 0).
    mean : ndarray (n_items,) or (n_items, horizon)
        Forecast mean per period; used by ``"normal"`` and ``"point"`` (the
        per-step means are summed, the last step repeated beyond the horizon).
    periods : int or ndarray of int (n_items,)
        Number of periods summed, >= 0 (0 gives all mass on 0).
    values, start, available : ndarray, optional
        Demand history (rows x periods), first-demand offsets and availability
        mask per row: needed for ``"empirical"``; for ``"compound"`` it gives
        the historical size mean when ``dist_params`` has no ``size_hist_mean``.
    history_rows : ndarray of int (n_items,), optional
        Row of the history holding each item (default: row ``i`` is item ``i``).
    seed : int or ndarray of int (n_items,)
        Bootstrap seed (one for the call, or one per item).
    n_samples : int
        Bootstrap paths per item.
    jitter : bool
        Jitter resampled bootstrap sizes.
    max_units : int, optional
        Grid cap (default :data:`MAX_UNITS`).
    items : sequence, optional
        Item labels used in error messages.

    Returns
    -------
    ndarray of float64, shape (n_items, K)
        Row ``i`` is ``P(D_i = k)``, ``k = 0 .. K-1``; rows sum to 1. ``K`` is
        what the widest item needs: use :func:`demand_pmfs` with
        ``ragged=True`` for many items of very different volumes.

    Examples
    --------
    >>> pmf = demand_pmf("compound", {"p": [0.5], "size_mean": [1.0], "size_var": [0.0]},
    ...                  [0.5], periods=2)
    >>> pmf.round(4).tolist()  # Binomial(2, 0.5)
    [[0.25, 0.5, 0.25]]
    """
    return demand_pmfs(kind, dist_params, mean, periods=[periods], values=values, start=start,
                       available=available, seed=seed, n_samples=n_samples, jitter=jitter,
                       max_units=max_units, items=items, history_rows=history_rows)[0]


def distribution_labels(kind: str, dist_params: Mapping | None = None, n_items: int | None = None) -> np.ndarray:
    """Plain-language name of the model behind each item's distribution.

    Examples
    --------
    >>> distribution_labels("compound", {"p": [0.1, 0.1], "size_mean": [3.0, 3.0],
    ...                                  "size_var": [5.0, 0.0]}).tolist()
    ['compound Bernoulli-negative binomial', 'compound Bernoulli, fixed size']
    """
    fixed = {
        "zip": "zero-inflated Poisson",
        "zinb": "zero-inflated negative binomial",
        "normal": "normal approximation",
        "empirical": "bootstrap (Willemain et al. 2004)",
        "point": "point forecast (no spread)",
    }
    if kind not in KINDS:
        raise InputError(f"unknown distribution kind {kind!r}; expected one of {', '.join(KINDS)}")
    if kind != "compound":
        if n_items is None:
            n_items = len(next(iter(dist_params.values()))) if dist_params else 1
        return np.full(n_items, fixed[kind], dtype=object)
    size_mean = np.nan_to_num(np.asarray(dist_params["size_mean"], float), nan=1.0)
    size_var = np.nan_to_num(np.asarray(dist_params["size_var"], float), nan=0.0)
    if dist_params.get("size_hist_mean") is not None:
        size_var = _rescaled_size_var(size_mean, size_var, dist_params["size_hist_mean"], len(size_mean))
    _, m, r = size_family(size_mean, size_var)
    return np.where(m <= 0, "compound Bernoulli, fixed size",
                    np.where(np.isinf(r), "compound Bernoulli-Poisson",
                             "compound Bernoulli-negative binomial")).astype(object)


# --------------------------------------------------------------------------- summaries
def _as_pmf(pmf) -> np.ndarray:
    arr = np.asarray(pmf, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] == 0:
        raise InputError(f"pmf must be 2-D (items x grid), got shape {arr.shape}")
    return arr


def pmf_cdf(pmf) -> np.ndarray:
    """``P(D <= k)`` for every grid point (cumulative sum along the grid)."""
    return np.cumsum(_as_pmf(pmf), axis=1)


def pmf_quantiles(pmf, levels) -> np.ndarray:
    """Smallest ``k`` with ``P(D <= k) >= level``, for each item and level.

    A rounding slack of 1e-12 is allowed on the cumulative sum; a level the
    grid never reaches (only possible at the grid cap) gives the last cell.

    Returns
    -------
    ndarray of int64, shape (n_items, n_levels)

    Examples
    --------
    >>> pmf_quantiles(np.array([[0.5, 0.3, 0.2]]), [0.5, 0.8, 0.81]).tolist()
    [[0, 1, 2]]
    """
    cdf = pmf_cdf(pmf)
    lv = np.atleast_1d(np.asarray(levels, dtype=np.float64))
    if lv.ndim != 1 or ((lv < 0) | (lv > 1) | np.isnan(lv)).any():
        raise InputError(f"quantile levels must lie in [0, 1], got {levels!r}")
    out = np.empty((cdf.shape[0], lv.size), dtype=np.int64)
    for j, level in enumerate(lv):
        hit = cdf >= level - _LEVEL_SLACK
        out[:, j] = np.where(hit.any(axis=1), hit.argmax(axis=1), cdf.shape[1] - 1)
    return out



@njit(cache=True)
def _ragged_quantile_kernel(flat, indptr, levels, slack):
    """Smallest k with cumulative probability >= level - slack, for each PMF row and level."""
    n = indptr.shape[0] - 1
    out = np.empty((n, levels.shape[0]), dtype=np.int64)
    for i in range(n):
        lo = indptr[i]
        hi = indptr[i + 1]
        for j in range(levels.shape[0]):
            target = levels[j] - slack
            c = 0.0
            k = hi - lo - 1  # the last cell when the level is never reached
            for t in range(lo, hi):
                c += flat[t]
                if c >= target:
                    k = t - lo
                    break
            out[i, j] = k
    return out


def ragged_quantiles(rows: Sequence, levels) -> np.ndarray:
    """:func:`pmf_quantiles` of PMF rows of different lengths, without padding them to one width.

    Parameters
    ----------
    rows : sequence of 1-D arrays
        One PMF per item (as from ``demand_pmfs(..., ragged=True)``).
    levels : sequence of float

    Returns
    -------
    ndarray of int64, shape (n_items, n_levels)

    Examples
    --------
    >>> ragged_quantiles([np.array([0.5, 0.5]), np.array([0.1, 0.1, 0.8])], [0.5, 0.9]).tolist()
    [[0, 1], [2, 2]]
    """
    levels = np.asarray(levels, dtype=np.float64)
    lengths = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    indptr = np.zeros(len(rows) + 1, dtype=np.int64)
    np.cumsum(lengths, out=indptr[1:])
    flat = np.concatenate(rows) if len(rows) else np.zeros(0)
    # the same slack as pmf_quantiles, so both agree cell for cell
    return _ragged_quantile_kernel(np.ascontiguousarray(flat, dtype=np.float64), indptr, levels, _LEVEL_SLACK)


def pmf_mean(pmf) -> np.ndarray:
    """Mean of each row's distribution."""
    p = _as_pmf(pmf)
    return p @ np.arange(p.shape[1], dtype=np.float64)


def pmf_var(pmf) -> np.ndarray:
    """Variance of each row's distribution."""
    p = _as_pmf(pmf)
    k = np.arange(p.shape[1], dtype=np.float64)
    m = p @ k
    return np.maximum(p @ (k * k) - m * m, 0.0)


def shortage_curve(pmf) -> np.ndarray:
    """``E[(D - s)^+]`` for ``s = 0 .. K`` (one extra column, always 0).

    Uses ``E[(D - s)^+] = sum_{k >= s} P(D > k)`` with the survival function
    summed from the right, which keeps tail probabilities accurate.

    Examples
    --------
    >>> shortage_curve(np.array([[0.5, 0.0, 0.5]])).tolist()  # D in {0, 2}
    [[1.0, 0.5, 0.0, 0.0]]
    """
    p = _as_pmf(pmf)
    surv = np.cumsum(p[:, ::-1], axis=1)[:, ::-1]  # P(D >= k)
    above = np.concatenate([surv[:, 1:], np.zeros((p.shape[0], 1))], axis=1)  # P(D > k)
    curve = np.cumsum(above[:, ::-1], axis=1)[:, ::-1]
    return np.concatenate([curve, np.zeros((p.shape[0], 1))], axis=1)


def _interp_curve(curve: np.ndarray, mean: np.ndarray, level) -> np.ndarray:
    """Evaluate ``E[(D - s)^+]`` at real levels: linear between whole numbers, ``E[D] - s`` below 0."""
    n, width = curve.shape
    s = np.asarray(level, dtype=np.float64)
    if s.ndim == 0:
        s = np.full(n, float(s))
    if s.shape != (n,):
        raise InputError(f"level must be one value or one per item ({n}), got shape {s.shape}")
    if np.isnan(s).any():
        raise InputError("level contains NaN")
    lo = np.clip(np.floor(s), 0, width - 1).astype(np.int64)
    hi = np.minimum(lo + 1, width - 1)
    rows = np.arange(n)
    frac = np.clip(s - lo, 0.0, 1.0)
    val = curve[rows, lo] + frac * (curve[rows, hi] - curve[rows, lo])
    return np.where(s < 0, mean - s, val)


def expected_shortage(pmf, level) -> np.ndarray:
    """``E[(D - level)^+]``: expected demand beyond a stock level, per item.

    Exact at whole-number levels and linear between them (``D`` is whole).

    Examples
    --------
    >>> expected_shortage(np.array([[0.5, 0.0, 0.5]]), 1.0).tolist()
    [0.5]
    """
    p = _as_pmf(pmf)
    return _interp_curve(shortage_curve(p), pmf_mean(p), level)


def expected_on_hand(pmf, level) -> np.ndarray:
    """``E[(level - D)^+] = level - E[D] + E[(D - level)^+]``: expected stock left, per item.

    Examples
    --------
    >>> expected_on_hand(np.array([[0.5, 0.0, 0.5]]), 2.0).tolist()
    [1.0]
    """
    p = _as_pmf(pmf)
    s = np.asarray(level, dtype=np.float64)
    return np.maximum(s - pmf_mean(p) + expected_shortage(p, level), 0.0)

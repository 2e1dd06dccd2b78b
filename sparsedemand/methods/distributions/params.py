"""Checked inputs of the predictive distributions: kinds, parameters, per-item counts, grid sizes.

Also the compound kind's size family (:func:`size_family`) and the moments of
each kind's total, which set the first grid an item gets.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from ...errors import InputError

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


def _initial_grid(total_mean: np.ndarray, total_var: np.ndarray, cap: int) -> np.ndarray:
    k = np.ceil(total_mean + SD_MULTIPLE * np.sqrt(np.maximum(total_var, 0.0))) + 2
    return np.clip(np.nan_to_num(k, nan=2.0, posinf=cap), 2, cap).astype(np.int64)


def _mixture_moments(q, shift, m, r, n):
    with np.errstate(divide="ignore", invalid="ignore"):
        var_a = np.where(np.isinf(r), m, m + m * m / r)
    a = shift + m
    return n * q * a, n * (q * var_a + q * (1 - q) * a * a)

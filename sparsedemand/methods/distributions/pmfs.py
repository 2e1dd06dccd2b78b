"""The entry points: :func:`demand_pmfs`, :func:`demand_pmf` and :func:`distribution_labels`."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from ...errors import InputError
from .bootstrap import _bootstrap_rows, _history, item_seeds
from .grids import _mixture_rows, _normal_rows, _point_rows, pad_rows
from .params import KINDS, _cap, _mean_matrix, _params, _per_item, _rescaled_size_var, period_totals, size_family

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

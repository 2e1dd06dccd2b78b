"""Forecasts of many items gathered from the fits of several methods, and per-item seeds.

Sits below the router and the stock stage, which both hand item forecasts around.
"""
from __future__ import annotations

import zlib
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .distributions import item_seeds

__all__ = ["ItemForecasts", "gather_forecasts", "label_seeds"]


@dataclass(frozen=True)
class ItemForecasts:
    """Forecasts for many items that may come from different methods.

    Attributes
    ----------
    mean : ndarray (n_items, horizon)
        Forecast mean per period.
    distribution : ndarray of str (n_items,)
        Predictive distribution kind per item (see
        :data:`sparsedemand.methods.distributions.KINDS`).
    dist_params : dict of str to ndarray (n_items,)
        Parameters of every kind present; NaN where a parameter does not
        apply to an item's kind.
    method : ndarray of str (n_items,)
        Forecasting method per item.
    """

    mean: np.ndarray
    distribution: np.ndarray
    dist_params: dict
    method: np.ndarray


def gather_forecasts(groups: Iterable, n_items: int) -> ItemForecasts:
    """Merge per-group method fits into one :class:`ItemForecasts`.

    Parameters
    ----------
    groups : iterable of (rows, fit)
        ``rows`` are the integer positions (or a boolean mask) of the items a
        fit covers; ``fit`` has ``name``, ``mean``, ``distribution`` and
        ``dist_params`` (a method fit). Horizons may differ: shorter ones are
        extended by repeating their last step.
    n_items : int
        Total number of items; every item must be covered exactly once.

    Examples
    --------
    >>> from types import SimpleNamespace as F
    >>> a = F(name="zeros", mean=np.zeros((1, 2)), distribution="point", dist_params={})
    >>> b = F(name="zip", mean=np.ones((1, 1)), distribution="zip",
    ...       dist_params={"pi": np.array([0.5]), "lam": np.array([2.0])})
    >>> g = gather_forecasts([([1], a), ([0], b)], 2)
    >>> g.method.tolist(), g.mean.tolist(), g.dist_params["lam"].tolist()
    (['zip', 'zeros'], [[1.0, 1.0], [0.0, 0.0]], [2.0, nan])
    """
    parts = []
    for rows, fit in groups:
        idx = np.asarray(rows)
        idx = np.flatnonzero(idx) if idx.dtype == bool else idx.astype(np.int64)
        mean = np.asarray(fit.mean, dtype=np.float64)
        mean = mean[:, None] if mean.ndim == 1 else mean
        if mean.shape[0] != idx.size:
            raise InputError(f"fit {fit.name!r} has {mean.shape[0]} rows for {idx.size} items")
        parts.append((idx, fit, mean))
    horizon = max((m.shape[1] for _, _, m in parts), default=1)
    mean = np.full((n_items, horizon), np.nan)
    kind = np.full(n_items, None, dtype=object)
    method = np.full(n_items, None, dtype=object)
    params: dict[str, np.ndarray] = {}
    covered = np.zeros(n_items, dtype=bool)
    for idx, fit, m in parts:
        if covered[idx].any():
            raise InputError(f"item at position {int(idx[covered[idx]][0])} is covered by two fits")
        covered[idx] = True
        mean[idx] = np.concatenate([m, np.repeat(m[:, -1:], horizon - m.shape[1], axis=1)], axis=1)
        kind[idx] = np.broadcast_to(np.asarray(fit.distribution, dtype=object), idx.shape)
        method[idx] = fit.name
        for key, value in (fit.dist_params or {}).items():
            params.setdefault(key, np.full(n_items, np.nan))[idx] = np.asarray(value, dtype=np.float64)
    if not covered.all():
        raise InputError(f"item at position {int(np.flatnonzero(~covered)[0])} has no forecast")
    return ItemForecasts(mean=mean, distribution=kind, dist_params=params, method=method)



def label_seeds(items, seed) -> np.ndarray:
    """Per-item bootstrap seeds from the item labels, so results do not depend on row order or grouping."""
    if isinstance(seed, bool) or int(seed) != seed or seed < 0:
        raise InputError(f"--seed must be a whole number >= 0, got {seed!r}")
    keys = np.fromiter((zlib.crc32(str(x).encode("utf-8")) for x in items), dtype=np.uint64, count=len(items))
    return item_seeds(int(seed), len(items), keys=keys)

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

Modules: :mod:`.params` (kinds, checked parameters, grid sizes, the size
family), :mod:`.grids` (PMF rows of the mixture, normal and point kinds),
:mod:`.bootstrap` (the seeded bootstrap and per-item seeds), :mod:`.pmfs`
(:func:`demand_pmfs`, :func:`demand_pmf`, :func:`distribution_labels`),
:mod:`.summaries` (quantiles, moments, shortage and on-hand).

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

from .bootstrap import item_seeds
from .grids import pad_rows, size_blocks
from .params import (
    KINDS,
    MAX_UNITS,
    SD_MULTIPLE,
    TAIL_TOLERANCE,
    checked_params,
    grid_sizes,
    period_totals,
    size_family,
    total_moments,
)
from .pmfs import demand_pmf, demand_pmfs, distribution_labels
from .summaries import (
    expected_on_hand,
    expected_shortage,
    pmf_cdf,
    pmf_mean,
    pmf_quantiles,
    pmf_var,
    ragged_quantiles,
    shortage_curve,
)

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

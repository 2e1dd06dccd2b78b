"""The test for a change in demand frequency behind the ``rate-change`` routing status.

Per item, the demands in the recent window are hypergeometric if the
frequency did not change; :func:`rate_change` gives Fisher's exact two-sided
p-value from the exact tails (a numba kernel).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numba import njit

from ..errors import InputError
from ..io import as_panel
from .rules import CHANGE_LEVEL

__all__ = ["rate_change"]


def rate_change(panel, classes: pd.DataFrame, *, level: float = CHANGE_LEVEL) -> pd.DataFrame:
    """Test each item for a change in demand frequency between its recent and earlier history.

    The recent window is the last third of the item's trimmed, available
    history (at least 8 available periods, leaving at least 8 before it).
    Given the item's demands, the number falling in the window is
    hypergeometric if the frequency did not change; the two-sided p-value of
    Fisher's exact test (Fisher 1935, The Design of Experiments) is twice the
    smaller tail, capped at 1. Items too short to split get NaN and no flag.

    Parameters
    ----------
    panel : DemandPanel
        The history ``classes`` was computed from.
    classes : DataFrame
        :func:`sparsedemand.classify.classify` of ``panel``.
    level : float, default :data:`CHANGE_LEVEL`
        Flag items with a p-value below this.

    Returns
    -------
    pandas.DataFrame
        Indexed like ``classes``: ``recent_periods``, ``recent_demands``,
        ``earlier_periods``, ``earlier_demands``, ``p_value``, ``changed``.

    Examples
    --------
    >>> from sparsedemand.classify import classify
    >>> y = np.array([[2.0] * 24 + [0, 0, 0, 1, 0, 0, 0, 0, 0, 1, 0, 0],   # demand every period, then rarely
    ...               [2.0, 0] * 18])                                       # every other period throughout
    >>> table = rate_change(y, classify(y))
    >>> table[["recent_demands", "recent_periods", "changed"]].values.tolist()
    [[2, 12, True], [6, 12, False]]
    """
    if not (isinstance(level, (int, float)) and 0.0 < level < 1.0):
        raise InputError(f"change level must lie strictly between 0 and 1, got {level!r}")
    panel = as_panel(panel)
    total = classes["n_periods"].to_numpy(dtype=np.int64)
    demands = classes["n_demands"].to_numpy(dtype=np.int64)
    window = np.maximum(total // 3, _MIN_SPLIT)
    testable = total - window >= _MIN_SPLIT
    has_mask = panel.available is not None
    mask = panel.available if has_mask else np.ones((1, 1), dtype=np.bool_)
    n_recent, d_recent = _recent_counts(panel.values, mask, has_mask,
                                        np.ascontiguousarray(panel.start, dtype=np.int64),
                                        np.where(testable, window, 0).astype(np.int64))
    low, high = _hypergeom_tails(d_recent.astype(np.int64), total, demands, n_recent.astype(np.int64),
                                 testable)
    p = np.where(testable, np.minimum(1.0, 2.0 * np.minimum(low, high)), np.nan)
    return pd.DataFrame(
        {
            "recent_periods": np.where(testable, n_recent, 0),
            "recent_demands": np.where(testable, d_recent, 0),
            "earlier_periods": np.where(testable, total - n_recent, 0),
            "earlier_demands": np.where(testable, demands - d_recent, 0),
            "p_value": p,
            "changed": testable & (p < level),
        },
        index=classes.index,
    )


_MIN_SPLIT = 8


@njit(cache=True)
def _hypergeom_tails(x, population, successes, draws, use):
    """P(X <= x) and P(X >= x) for X ~ Hypergeometric(population, successes, draws), per item.

    Exact sums over the support: the terms are built outward from the mode by
    the ratio of neighbouring probabilities (so none underflows before it is
    negligible) and normalised by their total. Items with ``use`` False get NaN.
    """
    n_items = x.shape[0]
    low = np.full(n_items, np.nan)
    high = np.full(n_items, np.nan)
    for i in range(n_items):
        if not use[i]:
            continue
        big_n, k, n, xi = population[i], successes[i], draws[i], x[i]
        lo = max(0, n + k - big_n)
        hi = min(n, k)
        mode = min(hi, max(lo, ((n + 1) * (k + 1)) // (big_n + 2)))
        total = 1.0  # the mode's term, relative
        le = 1.0 if mode <= xi else 0.0
        ge = 1.0 if mode >= xi else 0.0
        term = 1.0
        for j in range(mode, lo, -1):  # term(j - 1) from term(j)
            term *= j * (big_n - k - n + j) / ((k - j + 1) * (n - j + 1))
            total += term
            if j - 1 <= xi:
                le += term
            if j - 1 >= xi:
                ge += term
        term = 1.0
        for j in range(mode, hi):  # term(j + 1) from term(j)
            term *= (k - j) * (n - j) / ((j + 1) * (big_n - k - n + j + 1))
            total += term
            if j + 1 <= xi:
                le += term
            if j + 1 >= xi:
                ge += term
        low[i] = min(1.0, le / total)
        high[i] = min(1.0, ge / total)
    return low, high


@njit(cache=True)
def _recent_counts(values, available, has_mask, start, window):
    """Available periods and demands among the last ``window[i]`` available periods of each item."""
    n_items, n_periods = values.shape
    n_recent = np.zeros(n_items, np.int64)
    d_recent = np.zeros(n_items, np.int64)
    for i in range(n_items):
        j = n_periods - 1
        while j >= start[i] and n_recent[i] < window[i]:
            if not has_mask or available[i, j]:
                n_recent[i] += 1
                if values[i, j] > 0.0:
                    d_recent[i] += 1
            j -= 1
    return n_recent, d_recent

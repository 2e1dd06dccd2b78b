"""Group levels: bottom-up sums and the weighted RMSSE over aggregation levels."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import pandas as pd
from numba import njit
from scipy import sparse

from ..errors import InputError
from .holdout import _as_2d, _availability, _holdout, _masked_mean, _point
from .scale import _History, _history, _per_scale, _usable


def _membership(level: str, labels, n_items: int) -> tuple[sparse.csr_matrix, pd.Index, np.ndarray]:
    """Group x item 0/1 matrix for one level, the group labels and each item's group code."""
    if np.ndim(labels) == 0:
        labels = np.repeat(np.asarray([labels], dtype=object), n_items)
    labels = np.asarray(labels)
    if labels.shape != (n_items,):
        raise InputError(f"groups[{level!r}]: {labels.size} labels for {n_items} items")
    codes, uniques = pd.factorize(labels, sort=True)
    if (codes < 0).any():
        raise InputError(f"groups[{level!r}]: missing label for item {int(np.flatnonzero(codes < 0)[0])}")
    member = sparse.csr_matrix(
        (np.ones(n_items), (codes, np.arange(n_items))), shape=(len(uniques), n_items)
    )
    return member, pd.Index(uniques), codes


def bottom_up(
    values: npt.ArrayLike, labels, *, available: npt.ArrayLike | None = None
) -> tuple[np.ndarray, np.ndarray, pd.Index]:
    """Sum item series into groups, counting only each item's available periods.

    Parameters
    ----------
    values : array_like (items, periods)
    labels : array_like (items,) or a scalar
        Group label of each item; one scalar puts every item in one group.
    available : array_like of bool (items, periods), optional

    Returns
    -------
    sums : ndarray (groups, periods)
        Sum over the group's members available in that period.
    group_available : ndarray of bool (groups, periods)
        True where at least one member was available.
    groups : pandas.Index
        Sorted group labels, one per row.

    Examples
    --------
    >>> s, ok, g = bottom_up([[1, 2], [3, 4], [5, 6]], ["a", "b", "a"])
    >>> s.tolist(), g.tolist()
    ([[6.0, 8.0], [3.0, 4.0]], ['a', 'b'])
    """
    v, _ = _as_2d("values", values, allow_1d=False)
    ok = _availability("available", available, v)
    member, groups, _ = _membership("labels", labels, v.shape[0])
    sums = np.asarray(member @ np.where(ok, v, 0.0))
    group_ok = np.asarray(member @ ok.astype(np.float64)) > 0
    return sums, group_ok, groups


@njit(cache=True)
def _group_scale_kernel(raw, flags, has_flags, start, order, bounds):
    """RMSSE scale of each group's summed history (members listed by ``order``, cut at ``bounds``).

    A group's difference at t sums the differences of its members available
    at t and t-1 (a member not yet selling adds a true zero); it counts when
    at least one member is available in both, from the group's earliest first
    demand on. A one-item group gets the item's scale.
    """
    n_groups = bounds.size - 1
    T = raw.shape[1]
    mean_sq = np.full(n_groups, np.nan)
    d_sum = np.zeros(T)
    d_cnt = np.zeros(T, dtype=np.int64)
    for g in range(n_groups):
        d_sum[:] = 0.0
        d_cnt[:] = 0
        g_start = T
        for k in range(bounds[g], bounds[g + 1]):
            i = order[k]
            if start[i] < g_start:
                g_start = start[i]
            prev_ok = _usable(raw, flags, has_flags, i, 0)
            for t in range(1, T):
                ok = _usable(raw, flags, has_flags, i, t)
                if ok and prev_ok:
                    d_sum[t] += raw[i, t] - raw[i, t - 1]
                    d_cnt[t] += 1
                prev_ok = ok
        total = 0.0
        count = 0
        for t in range(g_start + 1, T):
            if d_cnt[t] > 0:
                total += d_sum[t] * d_sum[t]
                count += 1
        if count > 0:
            mean_sq[g] = total / count
    return mean_sq


def _group_scales(hist: _History, codes: np.ndarray, n_groups: int) -> np.ndarray:
    """Squared RMSSE scale of each group's summed in-sample history (groups numbered by ``codes``)."""
    order = np.argsort(codes, kind="stable").astype(np.int64)
    bounds = np.searchsorted(codes[order], np.arange(n_groups + 1)).astype(np.int64)
    return _group_scale_kernel(hist.raw, hist.flags, hist.has_flags, hist.start, order, bounds)


def _group_rmsse(member, err: np.ndarray, scored: np.ndarray, scale_sq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """RMSSE of every group from item errors (0 where not scored) and the 0/1 scored mask.

    Returns the scores and the group's scored-period mask (a period counts
    when at least one member is scored in it).
    """
    g_mask = np.asarray(member @ scored) > 0
    g_err = np.asarray(member @ err)
    return np.sqrt(_per_scale(_masked_mean(g_err**2, g_mask), scale_sq)), g_mask


def _level_score(score: np.ndarray, weight: np.ndarray) -> float:
    """Weighted mean of the defined group scores, the weights renormalised over them."""
    defined = np.isfinite(score)
    w = weight[defined]
    return float(np.sum(w * score[defined]) / np.sum(w)) if defined.any() and w.sum() > 0 else float("nan")


def _item_weights(weights, n_items: int) -> np.ndarray:
    if weights is None:
        return np.full(n_items, 1.0 / max(n_items, 1))
    w = np.asarray(weights, dtype=np.float64).ravel()
    if w.shape != (n_items,):
        raise InputError(f"weights: {w.size} weights for {n_items} items")
    if not np.isfinite(w).all() or (w < 0).any() or w.sum() <= 0:
        raise InputError("weights: must be finite, non-negative and not all zero")
    return w


@dataclass(frozen=True)
class HierarchyScore:
    """Weighted RMSSE over group levels.

    Attributes
    ----------
    value : float
        Mean over levels of each level's weighted RMSSE (levels with no defined
        group score are left out).
    levels : pandas.DataFrame
        One row per level: ``score``, ``groups``, ``undefined`` (groups with
        NaN RMSSE, left out and the level's weights renormalised).
    groups : pandas.DataFrame
        One row per group: ``level``, ``group``, ``weight`` (share of the
        level), ``rmsse``, ``scored_periods``.
    """

    value: float
    levels: pd.DataFrame
    groups: pd.DataFrame


def hierarchical_rmsse(
    insample: npt.ArrayLike,
    actual: npt.ArrayLike,
    forecast: npt.ArrayLike,
    groups: dict,
    *,
    weights: npt.ArrayLike | None = None,
    available: npt.ArrayLike | None = None,
    insample_available: npt.ArrayLike | None = None,
) -> HierarchyScore:
    """Weighted RMSSE over aggregation levels, aggregating bottom-up before scoring.

    For every level (for example ``{"item": ids, "location": loc,
    "category": cat, "total": "all"}``) the actuals, forecasts and in-sample
    histories of the members are summed per group, each group is scored with
    RMSSE on its own aggregated history, and the groups are averaged with
    weights equal to their members' share of ``weights``; the final score is the
    plain mean over levels. This is the weighted RMSSE of Makridakis,
    Spiliotis & Assimakopoulos (2022, IJF 38:1346-1364), with
    stock-outs handled as follows:

    - an evaluation period of a group sums the actual and the forecast of the
      members available in it (so like is compared with like), and is dropped
      when no member is available;
    - a naive difference of a group's in-sample series sums the differences of
      the members available in both periods, and is dropped when there is none;
    - the group's history starts at its earliest member's first demand.

    Without masks this is exactly the aggregate-then-score of that paper's rules.

    Parameters
    ----------
    insample, actual, forecast : array_like (items, periods)
    groups : dict of level name -> labels (items,) or a scalar (one group)
    weights : array_like (items,), optional
        Item weights such as :func:`item_weights`; ``None`` weighs items equally.

    Examples
    --------
    >>> ins = [[0, 1, 0, 2], [1, 1, 0, 0]]
    >>> res = hierarchical_rmsse(ins, [[1, 1], [0, 0]], [[1, 1], [0, 0]], {"item": [0, 1], "total": "all"})
    >>> float(res.value)
    0.0
    """
    y, _ = _as_2d("actual", actual, allow_1d=False)
    h = _holdout(y, available)
    f = _point("forecast", forecast, h)
    hist = _history(insample, insample_available, allow_1d=False)
    if hist.raw.shape[0] != h.n_items:
        raise InputError(f"insample: {hist.raw.shape[0]} items, actual has {h.n_items}")
    if not groups:
        raise InputError("groups: give at least one level, e.g. {'item': item_labels}")
    w = _item_weights(weights, h.n_items)

    mask_f = h.mask.astype(np.float64)
    err = f - h.actual  # zero where not scored

    level_rows, group_rows = [], []
    for level, labels in groups.items():
        member, names, codes = _membership(str(level), labels, h.n_items)
        score, g_mask = _group_rmsse(member, err, mask_f, _group_scales(hist, codes, len(names)))
        g_w = np.asarray(member @ w) / w.sum()
        level_rows.append({"level": str(level), "score": _level_score(score, g_w), "groups": len(names),
                           "undefined": int((~np.isfinite(score)).sum())})
        group_rows.append(pd.DataFrame({"level": str(level), "group": names.astype(object), "weight": g_w,
                                        "rmsse": score, "scored_periods": g_mask.sum(axis=1)}))
    levels_frame = pd.DataFrame(level_rows).set_index("level")
    scores = levels_frame["score"].to_numpy()
    value = float(np.nanmean(scores)) if np.isfinite(scores).any() else float("nan")
    return HierarchyScore(value, levels_frame, pd.concat(group_rows, ignore_index=True))

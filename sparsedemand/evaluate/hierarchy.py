"""Weighted RMSSE per group level at each origin, the group scales made once per origin."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..metrics.hierarchy import _group_rmsse, _group_scales, _history, _level_score, _membership
from ..panel import DemandPanel


@dataclass(frozen=True)
class Level:
    """One group level at one origin: membership, RMSSE scale and weight of every group."""

    member: object  # sparse (groups x items) 0/1 matrix
    scale_sq: np.ndarray
    weight: np.ndarray


def hierarchy_levels(train: DemandPanel, groups: dict, weights: np.ndarray) -> dict[str, Level]:
    """The in-sample side of :func:`sparsedemand.metrics.hierarchical_rmsse`, made once per origin.

    The group scales come from the history before the origin alone, so every
    method scored at the origin shares them; this uses the metric's own
    helpers, and the tests check the result against ``hierarchical_rmsse``.
    """
    hist = _history(train.values, train.available, allow_1d=False)
    total = weights.sum()
    out = {}
    for level, labels in groups.items():
        member, names, codes = _membership(str(level), labels, train.n_items)
        out[str(level)] = Level(member, _group_scales(hist, codes, len(names)), np.asarray(member @ weights) / total)
    return out


def hierarchy_scores(ctx, fc) -> pd.Series:
    """Weighted RMSSE per group level of forecast ``fc`` at origin ``ctx``, and their mean under ``"all"``.

    The same numbers as :func:`sparsedemand.metrics.hierarchical_rmsse` with
    the origin's scales reused (groups with an undefined score left out and
    the level's weights renormalised; levels with no defined group left out
    of the mean).
    """
    if not ctx.hierarchy:
        return pd.Series({level: np.nan for level in [*ctx.groups, "all"]})
    ok = ctx.available & ~fc.failed[:, None]
    err = np.where(ok, fc.mean - ctx.actual, 0.0)
    scored = ok.astype(np.float64)
    out = {}
    for level, lv in ctx.hierarchy.items():
        score, _ = _group_rmsse(lv.member, err, scored, lv.scale_sq)
        out[level] = _level_score(score, lv.weight)
    values = np.array(list(out.values()))
    out["all"] = float(np.nanmean(values)) if np.isfinite(values).any() else np.nan
    return pd.Series(out)

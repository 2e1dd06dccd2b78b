"""Holdout selection: per pattern, the candidate method with the lowest mean RMSSE on the last periods."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .. import methods as _methods
from ..classify import PATTERNS
from ..errors import InputError
from ..metrics import rmsse
from ._fitting import _fit_with_fallback
from .rules import ROUTING_STATUSES, Rule


def _select_by_holdout(panel, keys, policy, candidates, holdout, cost):
    """Per pattern (and ``rate-change``), the candidate with the lowest mean RMSSE on the last ``holdout`` periods.

    Every candidate is fitted to the history before the holdout (its
    smoothing constants optimised as the router does); a failed fit falls
    back to the mean since first demand, as the router's does. Items whose
    RMSSE is undefined (no demand before the holdout, or a zero scale) are
    left out of the mean; ``scored_items`` counts the rest.
    """
    candidates = tuple(candidates)
    if not candidates:
        raise InputError("--candidates: give at least one method")
    for name in candidates:
        if name not in _methods.METHODS:
            raise InputError(f"--candidates: unknown method {name!r} (known: {', '.join(_methods.METHODS)})")
    cut = panel.n_periods - holdout
    if cut < 2:
        raise InputError(f"--holdout {holdout} leaves fewer than 2 periods to fit on "
                         f"(the history has {panel.n_periods})")
    train = panel.head(cut)
    actual = panel.values[:, cut:]
    actual_ok = None if panel.available is None else panel.available[:, cut:]
    new_policy = dict(policy)
    records = []
    for pattern in (*PATTERNS, *ROUTING_STATUSES):
        rows = np.flatnonzero(keys == pattern)
        if rows.size == 0:
            continue
        scores = {}
        for name in candidates:
            mean = np.zeros((rows.size, holdout))
            for part, fitted, _ in _fit_with_fallback(train, rows, Rule(name), holdout, cost):
                mean[np.searchsorted(rows, part)] = np.maximum(fitted.mean, 0.0)
            s = np.asarray(rmsse(train.values[rows], actual[rows], mean,
                                 available=None if actual_ok is None else actual_ok[rows],
                                 insample_available=None if train.available is None else train.available[rows]),
                           dtype=float)
            ok = np.isfinite(s)
            scores[name] = (float(s[ok].mean()) if ok.any() else np.inf, int(ok.sum()))
        best = min(scores, key=lambda name: scores[name][0])
        for name, (score, scored) in scores.items():
            records.append({"pattern": pattern, "method": name, "mean_rmsse": score, "items": int(rows.size),
                            "scored_items": scored, "chosen": name == best})
        new_policy[pattern] = Rule(best, {}, source=f"holdout selection ({holdout} periods, "
                                                    f"mean RMSSE {scores[best][0]:.3f})")
    columns = ["pattern", "method", "mean_rmsse", "items", "scored_items", "chosen"]
    return new_policy, pd.DataFrame(records, columns=columns)

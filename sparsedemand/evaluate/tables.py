"""The backtest's output tables: scores per method and pattern, per item, and the origins."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..panel import DemandPanel
from .options import LABELS
from .scoring import Totals, ratio


def score_table(totals: dict[str, Totals], names: list[str], kinds) -> pd.DataFrame:
    labels = [*LABELS, "all"]
    frames = []
    for method, t in totals.items():
        present = t.pat_count.max(axis=1) > 0
        value = ratio(t.pat_sum, t.pat_count)
        # excluded_periods is a count of periods: report the total, not a mean
        j = names.index("excluded_periods")
        value[:, j] = t.pat_sum[:, j]
        for p in np.flatnonzero(present):
            frames.append(pd.DataFrame({"method": method, "pattern": labels[p], "level": "item",
                                        "metric": names, "value": value[p], "count": t.pat_count[p]}))
            rel = math.exp(t.pat_log[p] / t.pat_log_w[p]) if t.pat_log_w[p] > 0 else np.nan
            extra = [("rel_mae_gmean", rel, t.pat_log_n[p])]
            for (kind, metric), acc in t.weighted.items():
                v = acc[p, 0] / acc[p, 1] if acc[p, 1] > 0 else np.nan
                extra.append((f"{metric}_{kind}_weighted", v, acc[p, 2]))
            frames.append(pd.DataFrame({"method": method, "pattern": labels[p], "level": "item",
                                        "metric": [e[0] for e in extra], "value": [e[1] for e in extra],
                                        "count": [e[2] for e in extra]}))
        if t.hierarchy:
            h = pd.DataFrame(t.hierarchy)
            frames.append(pd.DataFrame({"method": method, "pattern": "all", "level": h.columns,
                                        "metric": "weighted_rmsse", "value": h.mean(axis=0).to_numpy(),
                                        "count": h.notna().sum(axis=0).to_numpy().astype(float)}))
    table = pd.concat(frames, ignore_index=True)
    return table


def item_table(totals: dict[str, Totals], names: list[str], panel: DemandPanel,
                patterns: pd.DataFrame) -> pd.DataFrame:
    last = patterns.iloc[:, -1].to_numpy()
    j = names.index("excluded_periods")
    frames = []
    for method, t in totals.items():
        value = ratio(t.item_sum, t.item_count)
        value[:, j] = t.item_sum[:, j]
        frame = pd.DataFrame(value, columns=names)
        frame.insert(0, "item", panel.items.to_numpy())
        frame.insert(1, "method", method)
        frame.insert(2, "pattern", last)
        frame.insert(3, "origins", t.item_scored)
        with np.errstate(invalid="ignore", divide="ignore"):
            frame["rel_mae"] = np.where(t.item_log_w > 0, np.exp(t.item_log / np.where(t.item_log_w > 0,
                                                                                           t.item_log_w, 1.0)),
                                        np.nan)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def origin_table(panel: DemandPanel, cuts: np.ndarray, horizon: int) -> pd.DataFrame:
    periods = panel.periods
    return pd.DataFrame({
        "origin": np.arange(1, len(cuts) + 1),
        "train_periods": cuts,
        "first_train": [periods[0]] * len(cuts),
        "last_train": [periods[c - 1] for c in cuts],
        "first_scored": [periods[c] for c in cuts],
        "last_scored": [periods[c + horizon - 1] for c in cuts],
    })

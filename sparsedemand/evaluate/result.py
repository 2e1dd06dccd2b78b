"""The result of a backtest: its tables, one-value look-ups and the printed summary."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..route import quantile_column
from .options import ROUTER

_MAIN = "rmsse"  # the metric the router is ranked on


@dataclass
class BacktestResult:
    """Scores of a backtest.

    Attributes
    ----------
    scores : DataFrame
        Long table: ``method``, ``pattern`` (``"all"`` or a pattern name),
        ``level`` (``"item"``, a group level, or ``"all"`` for the mean of
        ``weighted_rmsse`` over levels), ``metric``, ``value``, and ``count``
        (the (item, origin) pairs, or origins for ``weighted_rmsse``, behind
        the value).
    item_scores : DataFrame
        One row per item and method: ``item``, ``method``, ``pattern`` (at
        the last origin), ``origins`` (origins with at least one scored
        period), the metrics of :func:`metric_names` averaged over origins
        (``excluded_periods`` summed) and ``rel_mae`` (geometric mean over
        origins of the item's relative MAE).
    origins : DataFrame
        One row per origin: training periods, first and last training and
        scored period labels.
    patterns : DataFrame
        The pattern of every item at every origin (items x origins).
    settings : dict
        The options the backtest ran with.
    forecasts : dict
        With ``keep_forecasts=True``: ``(origin, method)`` -> :class:`OriginForecast`
        (origins numbered from 1); empty otherwise.
    """

    scores: pd.DataFrame
    item_scores: pd.DataFrame
    origins: pd.DataFrame
    patterns: pd.DataFrame
    settings: dict = field(default_factory=dict)
    forecasts: dict = field(default_factory=dict, repr=False)

    def value(self, method: str, metric: str, *, pattern: str = "all", level: str = "item") -> float:
        """One aggregate score (NaN when absent).

        Examples
        --------
        >>> result.value("router", "rmsse")  # doctest: +SKIP
        0.83
        """
        s = self.scores
        hit = s[(s["method"] == method) & (s["metric"] == metric) & (s["pattern"] == pattern)
                & (s["level"] == level)]
        return float(hit["value"].iloc[0]) if len(hit) else float("nan")

    def summary(self) -> pd.DataFrame:
        """Methods as rows, the main metrics over all items as columns.

        Columns: ``mase``, ``rmsse``, ``scaled_bias``, ``spl`` (mean scaled
        pinball loss over the levels), ``coverage_qNN`` (the level nearest
        0.9), ``fill_rate``, ``avg_on_hand``, ``rel_mae_gmean``,
        ``weighted_rmsse`` (mean over group levels).
        """
        s = self.scores[self.scores["pattern"] == "all"]
        item = s[s["level"] == "item"].pivot_table(index="method", columns="metric", values="value",
                                                   aggfunc="first", dropna=False)
        order = list(dict.fromkeys(self.scores["method"]))
        out = pd.DataFrame(index=pd.Index(order, name="method"))
        for name in ("mase", "rmsse", "scaled_bias"):
            out[name] = item.get(name)
        spl = [c for c in item.columns if c.startswith("spl_")]
        out["spl"] = item[spl].mean(axis=1) if spl else np.nan
        cov = self._coverage_column()
        if cov is not None:
            out[cov] = item.get(cov)
        for name in ("fill_rate", "avg_on_hand", "rel_mae_gmean"):
            out[name] = item.get(name)
        overall = s[(s["metric"] == "weighted_rmsse") & (s["level"] == "all")].set_index("method")["value"]
        out["weighted_rmsse"] = overall
        return out

    def _coverage_column(self) -> str | None:
        levels = self.settings.get("levels", ())
        if not levels:
            return None
        nearest = min(levels, key=lambda q: (abs(q - 0.9), -q))
        return f"coverage_{quantile_column(nearest)}"

    def router_rank(self, metric: str = _MAIN) -> tuple[int, int]:
        """(rank, methods ranked) of the router on a lower-is-better metric over all items."""
        column = self.summary()[metric].dropna()
        if ROUTER not in column.index:
            return 0, len(column)
        return int((column < column[ROUTER]).sum()) + 1, len(column)

    def summary_text(self) -> str:
        """The summary as a printable table, the best value per column marked with ``*``.

        Lower is best for the errors, nearest 0 for the bias, nearest the
        level for the coverage, highest for the fill rate; the average stock
        on hand is not judged (less stock is only better at the same fill
        rate).
        """
        table = self.summary()
        cov = self._coverage_column()
        cov_target = float(cov[len("coverage_q"):]) / 100 if cov else None
        cells = pd.DataFrame(index=table.index)
        for col in table.columns:
            x = table[col].astype(float)
            if col in ("scaled_bias",):
                key = x.abs()
            elif col == cov:
                key = (x - cov_target).abs()
            elif col == "fill_rate":
                key = -x
            elif col == "avg_on_hand":
                key = None
            else:
                key = x
            best = key.min() if key is not None and key.notna().any() else None
            text = []
            for v, k in zip(x, x.index):
                if not np.isfinite(v):
                    text.append("-")
                    continue
                mark = "*" if best is not None and np.isclose(key[k], best, rtol=1e-12, atol=1e-15) else " "
                text.append(f"{v:.3f}{mark}")
            cells[col] = text
        lines = [cells.to_string()]
        rank, n = self.router_rank(_MAIN)
        if rank:
            lines.append(f"router ranks {rank} of {n} methods on RMSSE (lower is better); "
                         "* marks the best value in each column")
        else:
            lines.append("* marks the best value in each column (the router was not run)")
        excluded = self.scores[(self.scores["metric"] == "excluded_periods") & (self.scores["pattern"] == "all")]
        if len(excluded):
            left_out = float(excluded["value"].iloc[0])
            cells_scored = float(excluded["count"].iloc[0]) * self.settings.get("holdout", 0)
            share = left_out / cells_scored if cells_scored else 0.0
            lines.append(f"out-of-stock periods left out of every score: {left_out:,.0f} of "
                         f"{cells_scored:,.0f} item-periods ({share:.1%})")
        origins = self.settings.get("origins", 1)
        lines.append(f"{origins} origin{'s' if origins != 1 else ''}, holdout "
                     f"{self.settings.get('holdout')} periods, lead time {self.settings.get('lead_time')}, "
                     f"review period {self.settings.get('review_period')}, service level "
                     f"{self.settings.get('service_level')}")
        return "\n".join(lines)

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables written by the ``backtest`` command, by file stem."""
        return {"scores": self.scores, "item_scores": self.item_scores}

"""The router's output: :class:`ForecastResult` and the long quantile table.

Examples
--------
>>> quantile_column(0.9), quantile_column(0.975)
('q90', 'q97.5')
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..methods.forecasts import gather_forecasts
from ..panel import DemandPanel

__all__ = ["ForecastResult", "quantile_column"]


def quantile_column(level: float) -> str:
    """Column name of a quantile level: 0.9 -> ``q90``, 0.975 -> ``q97.5``."""
    return "q" + f"{level * 100:.6g}"


@dataclass
class ForecastResult:
    """Routed forecasts with their audit trail.

    Attributes
    ----------
    point : DataFrame
        Mean forecasts, items as rows, future periods as columns.
    quantiles : DataFrame
        Long table ``item``, ``step``, ``period`` and one column per level.
    audit : DataFrame
        One row per item: pattern, statistics, method, parameters, in-sample
        cost, reason and warnings.
    selection : DataFrame or None
        Holdout scores behind each pattern's pick (holdout selection only).
    """

    point: pd.DataFrame
    quantiles: pd.DataFrame
    audit: pd.DataFrame
    classes: pd.DataFrame
    panel: DemandPanel
    levels: tuple[float, ...]
    groups: list = field(default_factory=list, repr=False)
    selection: pd.DataFrame | None = None

    def item_forecasts(self):
        """Means and predictive distributions of every item, for the stock stage."""
        return gather_forecasts([(rows, fitted) for rows, _, fitted in self.groups], self.panel.n_items)

    def table(self) -> pd.DataFrame:
        """The long forecast table written to ``forecasts.csv``."""
        long = self.quantiles.copy()
        means = self.point.to_numpy()
        long.insert(3, "forecast", means.reshape(-1))
        return long

def _quantile_table(panel, periods, qs, levels) -> pd.DataFrame:
    n, horizon = qs.shape[:2]
    table = pd.DataFrame(
        {
            "item": panel.items.repeat(horizon),  # keeps the labels' dtype: no object per row
            "step": np.tile(np.arange(1, horizon + 1), n),
            # positions, not Period objects: taking from the index keeps its dtype without
            # parsing one object per row
            "period": periods[np.tile(np.arange(horizon), n)],
        }
    )
    for k, level in enumerate(levels):
        table[quantile_column(level)] = qs[:, :, k].reshape(-1)
    return table

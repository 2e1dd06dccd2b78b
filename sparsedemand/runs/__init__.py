"""Whole commands as library calls, shared by the command line, the Dask engine and the demo.

:mod:`~sparsedemand.runs.settings` holds one frozen, checked settings object
per command; :mod:`~sparsedemand.runs.commands` runs a command on one panel
(or one partition's panel) and returns its tables; :mod:`~sparsedemand.runs.partitions`
combines what partitions of a run split by item computed.

Examples
--------
>>> import numpy as np
>>> from sparsedemand.panel import as_panel
>>> from sparsedemand.runs import StockSettings, stock_run
>>> run = stock_run(as_panel(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0] * 2])), StockSettings(lead_time=1))
>>> run.tables["stock"].shape[0]
1
"""

from .commands import (RunResult, backtest_run, classify_run, compute_stock, forecast_run, format_table,
                       lead_times, read_on_hand, resolved_overrides, routed_forecast, routing_summary,
                       stock_horizon, stock_run, stock_table)
from .settings import BacktestSettings, ClassifySettings, ForecastSettings, StockSettings, whole_number

__all__ = [
    "ClassifySettings", "ForecastSettings", "BacktestSettings", "StockSettings", "whole_number",
    "RunResult", "classify_run", "forecast_run", "backtest_run", "stock_run", "stock_table", "compute_stock",
    "stock_horizon", "routed_forecast", "lead_times", "read_on_hand", "resolved_overrides", "routing_summary",
    "format_table",
]

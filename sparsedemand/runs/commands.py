"""Whole commands as library calls: a panel and settings in, tables and a terminal summary out.

The command line, the Dask engine (once per partition) and the demo call
these; none of them writes anything, so each caller decides where the tables
go.

Examples
--------
>>> import numpy as np
>>> from sparsedemand.panel import as_panel
>>> from sparsedemand.runs import ForecastSettings, forecast_run
>>> panel = as_panel(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0] * 2]))
>>> sorted(forecast_run(panel, ForecastSettings(horizon=4)).tables)
['audit', 'forecasts', 'patterns']
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..classify import classify, pattern_summary
from ..errors import InputError
from ..evaluate import backtest
from ..io import load_frame
from ..panel import DemandPanel
from ..route import ForecastResult, forecast, load_overrides
from ..stock import stock_targets, totals_text
from .settings import BacktestSettings, ClassifySettings, ForecastSettings, StockSettings

__all__ = ["RunResult", "classify_run", "forecast_run", "backtest_run", "stock_run", "stock_table",
           "compute_stock", "stock_horizon", "routed_forecast", "lead_times", "resolved_overrides",
           "read_on_hand", "routing_summary", "format_table"]


@dataclass(frozen=True)
class RunResult:
    """What a whole command computed.

    Attributes
    ----------
    tables : dict of str to DataFrame
        The output tables by name (``forecasts``, ``audit``, ``stock`` ...).
    summary : str
        The text the command prints on stdout.
    result : ForecastResult, BacktestResult or None
        The stage's own result object.
    horizon : int or None
        The horizon forecast (``stock`` sets it from the lead times).
    """

    tables: dict = field(default_factory=dict)
    summary: str = ""
    result: object = None
    horizon: int | None = None


def format_table(frame: pd.DataFrame) -> str:
    """A summary table as the commands print it."""
    return frame.to_string(float_format=lambda v: f"{v:,.3f}")


def classify_run(panel: DemandPanel, settings: ClassifySettings) -> RunResult:
    """Patterns of every item (table ``patterns``) and their summary.

    Examples
    --------
    >>> import numpy as np
    >>> from sparsedemand.panel import as_panel
    >>> run = classify_run(as_panel(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]])), ClassifySettings())
    >>> run.tables["patterns"]["pattern"].tolist()
    ['intermittent']
    """
    table = classify(panel, **settings.options())
    return RunResult({"patterns": table}, format_table(pattern_summary(table, panel)), table)


def resolved_overrides(settings: ForecastSettings):
    """The per-item rules of the settings, with an override file read."""
    if isinstance(settings.overrides, Path):
        return load_overrides(settings.overrides)
    return settings.overrides


def routed_forecast(panel: DemandPanel, settings: ForecastSettings, *,
                    progress: Callable | None = None) -> ForecastResult:
    """The router's forecast with these settings (an override file is read here)."""
    if settings.horizon is None:
        raise InputError("--horizon is needed to forecast")
    return forecast(
        panel,
        settings.horizon,
        overrides=resolved_overrides(settings),
        classify_options=settings.classify.options(),
        progress=progress,
        levels=settings.levels,
        policy=settings.policy,
        cost=settings.cost,
        selection=settings.selection,
        candidates=settings.candidates,
        holdout=settings.holdout,
        seed=settings.seed,
        **settings.options,
    )


def routing_summary(audit: pd.DataFrame) -> pd.DataFrame:
    """Items per pattern and method, with how many carry warnings, and a total row."""
    counts = audit.groupby(["pattern", "method"]).size().rename("items")
    warned = audit["warnings"].astype(bool).groupby([audit["pattern"], audit["method"]]).sum()
    table = pd.concat([counts, warned.rename("with_warnings")], axis=1).reset_index()
    total = pd.DataFrame([{"pattern": "all", "method": "", "items": int(counts.sum()),
                           "with_warnings": int(warned.sum())}])
    return pd.concat([table, total], ignore_index=True).set_index(["pattern", "method"])


def _routed_tables(result: ForecastResult) -> dict:
    return {"forecasts": result.table(), "audit": result.audit, "patterns": result.classes}


def forecast_run(panel: DemandPanel, settings: ForecastSettings, *, progress: Callable | None = None) -> RunResult:
    """Routed forecasts: tables ``forecasts``, ``audit``, ``patterns`` (and ``selection`` with holdout selection).

    Examples
    --------
    >>> import numpy as np
    >>> from sparsedemand.panel import as_panel
    >>> run = forecast_run(as_panel(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0] * 2])), ForecastSettings(horizon=2))
    >>> len(run.tables["forecasts"])
    2
    """
    result = routed_forecast(panel, settings, progress=progress)
    tables = _routed_tables(result)
    if result.selection is not None:
        tables["selection"] = result.selection
    return RunResult(tables, format_table(routing_summary(result.audit)), result, settings.horizon)


def backtest_run(panel: DemandPanel, settings: BacktestSettings, *, progress: Callable | None = None) -> RunResult:
    """Backtest scores: tables ``scores`` and ``item_scores``.

    Examples
    --------
    >>> import numpy as np
    >>> from sparsedemand.panel import as_panel
    >>> panel = as_panel(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0] * 3]))
    >>> sorted(backtest_run(panel, BacktestSettings(holdout=5, methods=("sba",))).tables)
    ['item_scores', 'scores']
    """
    fs = settings.forecast
    result = backtest(
        panel,
        overrides=resolved_overrides(fs),
        classify_options=fs.classify.options(),
        progress=progress,
        levels=fs.levels,
        policy=fs.policy,
        cost=fs.cost,
        seed=fs.seed,
        holdout=settings.holdout,
        origins=settings.origins,
        step=settings.step,
        methods=settings.methods,
        baseline=settings.baseline,
        lead_time=settings.lead_time,
        review_period=settings.review_period,
        service_level=settings.service_level,
        unmet=settings.unmet,
        weights=settings.weights,
        **settings.options,
    )
    tables = {"scores": result.scores, "item_scores": result.item_scores}
    return RunResult(tables, result.summary_text(), result, settings.holdout)


def read_on_hand(path: Path, items, *, item_column: str = "item") -> dict:
    """Current stock per item from a snapshot CSV, aligned to ``items`` (NaN where absent)."""
    frame = load_frame(path, text_columns=(item_column,))
    for col in (item_column, "on_hand"):
        if col not in frame.columns:
            found = ", ".join(map(str, frame.columns))
            raise InputError(f"{path}: missing column '{col}' (columns found: {found})")
    labels = frame[item_column].astype(str).str.strip()
    dup = labels.duplicated()
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0]) + 1
        raise InputError(f"{path}, row {row}: item {labels.iloc[row - 1]!r} appears twice")
    pos = pd.Index(items).get_indexer(labels)
    if (pos < 0).any():
        row = int(np.flatnonzero(pos < 0)[0]) + 1
        raise InputError(f"{path}, row {row}: unknown item {labels.iloc[row - 1]!r} (not in the input)")
    out = {}
    for col in ("on_hand", "on_order"):
        if col not in frame.columns:
            continue
        vals = pd.to_numeric(frame[col], errors="coerce").to_numpy(np.float64)
        bad = np.isnan(vals) & frame[col].notna().to_numpy() | (vals < 0)
        if bad.any():
            row = int(np.flatnonzero(bad)[0]) + 1
            raise InputError(f"{path}, row {row}, item {labels.iloc[row - 1]!r}: "
                             f"{col} {frame[col].iloc[row - 1]!r} is not a number >= 0")
        aligned = np.full(len(items), np.nan)
        aligned[pos] = vals
        out[col] = aligned
    return out


def lead_times(panel: DemandPanel, settings: StockSettings):
    """Lead time per item: the setting, or the item's value in the lead-time column."""
    column = settings.lead_time_column
    if column is None:
        return settings.lead_time
    raw = panel.attribute(column)
    vals = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(vals) | (vals < 0) | (vals != np.round(vals))
    if bad.any():
        item = panel.items[int(np.flatnonzero(bad)[0])]
        raise InputError(f"--lead-time-column {column}: item {item!r} has lead time "
                         f"{raw.iloc[int(np.flatnonzero(bad)[0])]!r}, not a whole number >= 0")
    return vals.astype(np.int64)


def stock_table(result: ForecastResult, settings: StockSettings, *,
                snapshot: pd.DataFrame | None = None) -> pd.DataFrame:
    """Stock targets for a routed forecast.

    ``settings`` may also be a mapping of :class:`StockSettings` fields.
    ``snapshot`` (current ``on_hand`` and ``on_order`` indexed by item,
    already checked against every item) is read from
    ``settings.on_hand_file`` when not given; the Dask engine passes the one
    it checked for all partitions.
    """
    if not isinstance(settings, StockSettings):
        settings = StockSettings(**settings)
    panel = result.panel
    if snapshot is None and settings.on_hand_file is not None:
        snapshot = pd.DataFrame(read_on_hand(settings.on_hand_file, panel.items), index=panel.items)
    extra = {}
    if snapshot is not None:
        aligned = snapshot.reindex(panel.items)
        for column in aligned.columns:
            extra[column] = aligned[column].to_numpy(dtype=np.float64)
    price = panel.attribute("unit_price")
    if price.notna().any():
        extra["unit_price"] = price.to_numpy(dtype=float)
    return stock_targets(
        result.item_forecasts(),
        lead_time=lead_times(panel, settings),
        review_period=settings.review_period,
        service_level=settings.service_level,
        fill_rate=settings.fill_rate,
        history=panel,
        items=panel.items,
        seed=settings.seed,
        **extra,
    )


compute_stock = stock_table  # the name the stock targets went by before the runs layer


def stock_horizon(panel: DemandPanel, settings: StockSettings) -> int:
    """The forecast must cover the whole protection interval (lead time + review period)."""
    return int(np.max(lead_times(panel, settings))) + settings.review_period


def stock_run(panel: DemandPanel, settings: StockSettings, *, progress: Callable | None = None,
              horizon: int | None = None, snapshot: pd.DataFrame | None = None) -> RunResult:
    """Stock targets and the forecast behind them: tables ``stock``, ``forecasts``, ``audit``, ``patterns``.

    ``horizon`` defaults to the longest lead time plus the review period (the
    Dask engine passes the one of all partitions).

    Examples
    --------
    >>> import numpy as np
    >>> from sparsedemand.panel import as_panel
    >>> run = stock_run(as_panel(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0] * 2])), StockSettings(lead_time=2))
    >>> run.horizon, sorted(run.tables)
    (3, ['audit', 'forecasts', 'patterns', 'stock'])
    """
    horizon = stock_horizon(panel, settings) if horizon is None else horizon
    result = routed_forecast(panel, replace(settings.forecast, horizon=horizon), progress=progress)
    table = stock_table(result, settings, snapshot=snapshot)
    tables = {"stock": table, **_routed_tables(result)}
    return RunResult(tables, totals_text(table), result, horizon)

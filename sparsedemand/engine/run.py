"""Running forecast, stock and backtest on a Dask cluster: the settings, the partitions' work, the central steps.

Each partition runs the same whole command as the local engine
(:mod:`sparsedemand.runs`) on its own panel and writes its part files; the
client combines the small totals and writes ``run.json``.

Stock targets are decision support; follow the organisation's policies,
regulations and qualified staff, especially for safety-critical spares.
"""

from __future__ import annotations

import dataclasses
import json
import os
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .. import io as _io
from .._version import __version__
from ..errors import InputError
from ..io import Columns, LoadSummary, staged_output, write_table
from ..panel import DemandPanel
from ..route import DEFAULT_CANDIDATES, DEFAULT_LEVELS
from ..runs import (BacktestSettings, ClassifySettings, ForecastSettings, StockSettings, backtest_run,
                    forecast_run, lead_times, read_on_hand, resolved_overrides, stock_run, whole_number)
from ..runs.partitions import (add_routing_counts, add_stock_totals, base_policy, check_forecast,
                               choose_by_holdout, combine_backtest_scores, holdout_scores, routing_counts)
from ..stock import stock_totals
from .cluster import gather, start_client
from .partition import Loaded, Part, load_input

__all__ = ["COMMANDS", "DistributedRun", "run_distributed", "run_settings"]

COMMANDS: tuple[str, ...] = ("forecast", "stock", "backtest")


# --------------------------------------------------------------------------- result
@dataclass(frozen=True)
class DistributedRun:
    """What a distributed run wrote and a few totals for the terminal.

    Attributes
    ----------
    command : str
        ``"forecast"``, ``"stock"`` or ``"backtest"``.
    out_dir : Path
        The output folder.
    paths : dict of str to Path
        Every table written: a Parquet dataset folder (``forecasts``,
        ``audit``, ``patterns``, ``stock``, ``item_scores``) or a single file
        (``selection``, ``scores``, ``origins``, ``run``).
    partitions : int
        Item partitions the work was split into.
    summary : LoadSummary
        The load summary of the whole input, as the local loader prints it.
    routing : DataFrame or None
        Items per ``pattern`` and ``method`` with the number ``with_warnings``.
    stock_totals : DataFrame or None
        :func:`sparsedemand.stock.stock_totals` of the whole stock table.
    selection : DataFrame or None
        Holdout selection scores (``selection="holdout"`` only).
    scores : DataFrame or None
        Backtest scores combined over the partitions.
    not_combined : tuple of str
        Backtest metrics left out of ``scores`` because they cannot be added
        up over partitions (see :func:`combine_backtest_scores`).
    seconds : float
        Wall time of the run, cluster start included.
    """

    command: str
    out_dir: Path
    paths: dict
    partitions: int
    summary: LoadSummary
    routing: pd.DataFrame | None = None
    stock_totals: pd.DataFrame | None = None
    selection: pd.DataFrame | None = None
    scores: pd.DataFrame | None = None
    not_combined: tuple[str, ...] = ()
    seconds: float = 0.0


# --------------------------------------------------------------------------- settings shipped to workers

@dataclass(frozen=True)
class _Task:
    """What every partition runs once its panel is built."""

    command: str
    stage: str
    out_dir: str
    horizon: int
    settings: ForecastSettings | StockSettings | BacktestSettings  # as run on each partition
    overrides: Mapping | None



# --------------------------------------------------------------------------- entry point
def run_distributed(
    command: str, source, *, out_dir: str | os.PathLike, scheduler=None, n_workers: int = 2,
    partitions: int | None = None, columns: Columns | None = None, frequency: str | None = None,
    net_returns: bool = False, horizon: int | None = None, levels: Sequence[float] = DEFAULT_LEVELS,
    policy=None, overrides=None, cost: str = "mse", selection: str = "policy",
    candidates: Sequence[str] = DEFAULT_CANDIDATES, holdout: int | None = None, seed: int = 0,
    classify_options: Mapping[str, object] | None = None, forecast_options: Mapping[str, object] | None = None,
    lead_time: int | None = None, lead_time_column: str | None = None, review_period: int = 1,
    service_level: float | None = None, fill_rate: float | None = None,
    on_hand_file: str | os.PathLike | None = None, origins: int = 1, step: int | None = None,
    backtest_options: Mapping[str, object] | None = None,
) -> DistributedRun:
    """Run ``forecast``, ``stock`` or ``backtest`` on a Dask cluster, partitioned by item.

    Parameters
    ----------
    command : {"forecast", "stock", "backtest"}
        What to run; the outputs match the local command's tables.
    source : path, dask DataFrame or pandas DataFrame
        A Parquet file or dataset folder in long layout (one row per item and
        period), or a DataFrame in long layout.
    out_dir : path
        Output folder; on a remote cluster it must be on storage shared by
        the client and every worker.
    scheduler : str or distributed.Client, optional
        Scheduler address (``tcp://host:8786``) or an open client; default:
        a local cluster on 127.0.0.1, started and closed by this call.
    n_workers : int, default 2
        Worker processes of the local cluster (ignored with ``scheduler``).
    partitions : int, optional
        Item partitions; default the number of worker threads or the input's
        partitions, whichever is larger.
    columns, frequency, net_returns
        As for :func:`sparsedemand.io.read_demand`.
    horizon : int
        Periods to forecast (``forecast``). ``stock`` uses the longest lead
        time plus the review period, as the local command does.
    levels, policy, overrides, cost, selection, candidates, holdout, seed, classify_options
        As for :func:`sparsedemand.route.forecast` (``policy`` and
        ``overrides`` may be file paths). ``holdout`` is also the backtest's
        holdout length.
    forecast_options : mapping, optional
        Any further keyword of :func:`sparsedemand.route.forecast` (for
        example ``change_level``).
    lead_time, lead_time_column, review_period, service_level, fill_rate, on_hand_file
        Stock options, as for the ``stock`` command: exactly one of
        ``lead_time`` and ``lead_time_column``; the target defaults to a 0.95
        cycle service level; ``on_hand_file`` is a CSV snapshot with
        ``item``, ``on_hand`` and optionally ``on_order``.
    origins, step, backtest_options
        Backtest origins, the periods between them, and any further keyword
        of :func:`sparsedemand.evaluate.backtest` (``methods``,
        ``lead_time``, ``service_level``, ``weights`` ...).

    Returns
    -------
    DistributedRun
        The paths written and the run's totals. The keywords become the
        command's settings (:mod:`sparsedemand.runs`), checked before any
        input is read; :func:`run_settings` takes those directly.

    Notes
    -----
    Identical to the local engine up to float round-off: forecasts and
    quantiles, audit, patterns, holdout selection, stock targets, per-item
    backtest scores and the backtest scores that are means or totals over
    items (compare tables sorted by item: rows come partition by partition).
    Backtest aggregates that mix items in other ways are left out and named
    in ``not_combined`` (see :func:`combine_backtest_scores`).

    Examples
    --------
    >>> run = run_distributed("forecast", "demand/", out_dir="run", horizon=28)  # doctest: +SKIP
    >>> sorted(run.paths)  # doctest: +SKIP
    ['audit', 'forecasts', 'patterns', 'run']
    """
    settings = _settings(command, horizon=horizon, levels=levels, policy=policy, overrides=overrides, cost=cost,
                         selection=selection, candidates=candidates, holdout=holdout, seed=seed,
                         classify_options=classify_options, forecast_options=forecast_options,
                         lead_time=lead_time, lead_time_column=lead_time_column, review_period=review_period,
                         service_level=service_level, fill_rate=fill_rate, on_hand_file=on_hand_file,
                         origins=origins, step=step, backtest_options=backtest_options)
    return run_settings(command, source, settings, out_dir=out_dir, scheduler=scheduler, n_workers=n_workers,
                        partitions=partitions, columns=columns, frequency=frequency, net_returns=net_returns)


_BACKTEST_FIELDS = ("methods", "baseline", "lead_time", "review_period", "service_level", "unmet", "weights")


def _settings(command: str, *, horizon, levels, policy, overrides, cost, selection, candidates, holdout, seed,
              classify_options, forecast_options, lead_time, lead_time_column, review_period, service_level,
              fill_rate, on_hand_file, origins, step, backtest_options):
    """The keywords of :func:`run_distributed` as the settings of one command."""
    if command not in COMMANDS:
        raise InputError(f"command must be one of {', '.join(COMMANDS)}, got {command!r}")
    if command == "forecast" and horizon is None:
        raise InputError("--horizon is needed to forecast")
    forecast = ForecastSettings(
        horizon=horizon if command == "forecast" else None, levels=levels, policy=policy, overrides=overrides,
        cost=cost, selection=selection if command != "backtest" else "policy", seed=seed, candidates=candidates,
        holdout=holdout, classify=ClassifySettings.from_mapping(classify_options), options=forecast_options or {})
    if command == "stock":
        return StockSettings(lead_time=lead_time, lead_time_column=lead_time_column, review_period=review_period,
                             service_level=service_level, fill_rate=fill_rate, on_hand_file=on_hand_file,
                             seed=seed, forecast=forecast)
    if command == "backtest":
        given = dict(backtest_options or {})
        fields = {k: given.pop(k) for k in _BACKTEST_FIELDS if k in given}
        return BacktestSettings(holdout=holdout, origins=origins, step=step, forecast=forecast, options=given,
                                **fields)
    return forecast


def run_settings(
    command: str,
    source,
    settings: ForecastSettings | StockSettings | BacktestSettings,
    *,
    out_dir: str | os.PathLike,
    scheduler=None,
    n_workers: int = 2,
    partitions: int | None = None,
    columns: Columns | None = None,
    frequency: str | None = None,
    net_returns: bool = False,
) -> DistributedRun:
    """Run one command, given by its settings, on a Dask cluster; see :func:`run_distributed`.

    ``settings`` is the command's settings object: :class:`~sparsedemand.runs.ForecastSettings`
    for ``forecast``, :class:`~sparsedemand.runs.StockSettings` for ``stock``,
    :class:`~sparsedemand.runs.BacktestSettings` for ``backtest``.

    Examples
    --------
    >>> from sparsedemand.runs import ForecastSettings
    >>> run = run_settings("forecast", "demand/", ForecastSettings(horizon=28), out_dir="run")  # doctest: +SKIP
    """
    started = time.perf_counter()
    _check_command(command, settings)
    if partitions is not None:
        partitions = whole_number("--partitions", partitions, minimum=1)
    columns = _with_lead_column(columns or Columns(), settings)
    forecast = _forecast_of(settings)
    overrides = resolved_overrides(forecast)
    with start_client(scheduler, n_workers=n_workers) as client:
        loaded = load_input(client, source, columns, frequency, net_returns, partitions)
        _check_override_items(overrides, loaded.items)
        horizon, snapshot = _horizon_and_snapshot(client, loaded, command, settings)
        check_forecast(forecast, horizon, loaded.calendar)
        own, selection = _partition_settings(client, loaded, command, settings, horizon)
        with staged_output(out_dir) as stage:
            task = _Task(command=command, stage=str(stage), out_dir=str(out_dir), horizon=horizon, settings=own,
                         overrides=overrides)
            paths, extra = _run_and_collect(client, loaded, task, snapshot, selection, stage)
            manifest = _manifest(command, settings, own, loaded, columns, frequency, net_returns, horizon,
                                 scheduler, extra.get("not_combined", ()))
            _io.write_text(json.dumps(manifest, indent=2, default=str) + "\n", stage / "run.json")
            paths["run"] = Path(out_dir) / "run.json"
        client.cancel(loaded.parts)
    return DistributedRun(command=command, out_dir=Path(out_dir), paths=paths, partitions=loaded.n_parts,
                          summary=loaded.summary, routing=extra.get("routing"),
                          stock_totals=extra.get("stock_totals"), selection=selection, scores=extra.get("scores"),
                          not_combined=tuple(extra.get("not_combined", ())), seconds=time.perf_counter() - started)


_SETTINGS_OF = {"forecast": ForecastSettings, "stock": StockSettings, "backtest": BacktestSettings}


def _check_command(command: str, settings) -> None:
    if command not in COMMANDS:
        raise InputError(f"command must be one of {', '.join(COMMANDS)}, got {command!r}")
    if not isinstance(settings, _SETTINGS_OF[command]):
        raise InputError(f"{command} runs with {_SETTINGS_OF[command].__name__}, got {type(settings).__name__}")
    if command == "forecast" and settings.horizon is None:
        raise InputError("--horizon is needed to forecast")


def _forecast_of(settings) -> ForecastSettings:
    return settings if isinstance(settings, ForecastSettings) else settings.forecast


def _with_lead_column(columns: Columns, settings) -> Columns:
    """The stock command reads its lead-time column as a per-item attribute."""
    column = getattr(settings, "lead_time_column", None) if isinstance(settings, StockSettings) else None
    if column is None or column in columns.attributes:
        return columns
    return dataclasses.replace(columns, attributes=(*columns.attributes, column))

def _horizon_and_snapshot(client, loaded: Loaded, command: str, settings):
    """The horizon every partition forecasts, and the on-hand snapshot checked against every item."""
    if command == "forecast":
        return settings.horizon, None
    if command == "backtest":
        return settings.holdout, None
    if settings.lead_time_column is not None:
        longest = max(x for x in gather(client, loaded.parts, _longest_lead, settings) if x is not None)
    else:
        longest = settings.lead_time
    horizon = int(longest) + int(settings.review_period)
    if settings.on_hand_file is None:
        return horizon, None
    return horizon, pd.DataFrame(read_on_hand(Path(settings.on_hand_file), loaded.items), index=loaded.items)


def _partition_settings(client, loaded: Loaded, command: str, settings, horizon: int):
    """The settings each partition runs with: the holdout selection made over every item, if asked for.

    Returns them and the selection's score table (or None).
    """
    forecast = _forecast_of(settings)
    table = None
    policy = forecast.policy
    if forecast.selection == "holdout" and command != "backtest":
        length = forecast.holdout or horizon
        base = base_policy(forecast)  # the table the router would start from
        scores = gather(client, loaded.parts, _holdout_scores, forecast, base, length)
        policy, table = choose_by_holdout(scores, base, forecast.candidates, length)
    own = dataclasses.replace(forecast, policy=policy, selection="policy", holdout=None)
    if command == "forecast":
        return own, table
    return dataclasses.replace(settings, forecast=own), table


def _run_and_collect(client, loaded: Loaded, task: _Task, snapshot, selection, stage: Path):
    """Every partition's part files, then the tables made centrally; returns the paths and the totals."""
    names = _tables_of(task.command)
    for table in names:
        (stage / table).mkdir()
    shared = None if snapshot is None else client.scatter(snapshot, broadcast=True)
    results = gather(client, loaded.parts, _run_part, task, shared, indexed=True)
    paths = {table: Path(task.out_dir) / table for table in names}
    extra = _central_tables(task.command, results, selection, stage, paths, task.out_dir)
    return paths, extra

def _longest_lead(part: Part, settings: StockSettings):
    if part.panel is None:
        return None
    return int(np.max(lead_times(part.panel, settings), initial=0))


# --------------------------------------------------------------------------- worker side: the work
def _own_overrides(settings, overrides: Mapping | None, panel: DemandPanel):
    """The settings with the overrides of this partition's items only."""
    mine = None
    if overrides:
        items = set(panel.items)
        mine = {k: v for k, v in overrides.items() if k in items or str(k) in items}
    forecast = dataclasses.replace(_forecast_of(settings), overrides=mine)
    return forecast if isinstance(settings, ForecastSettings) else dataclasses.replace(settings, forecast=forecast)


def _run_part(part: Part, task: _Task, snapshot: pd.DataFrame | None, index: int) -> dict:
    """Run the command on one partition, write its part files, return its small totals."""
    panel = part.panel
    if panel is None or panel.n_items == 0:
        return {}
    settings = _own_overrides(task.settings, task.overrides, panel)
    stage = Path(task.stage)
    part_file = f"part-{index:05d}.parquet"
    if task.command == "backtest":
        run = backtest_run(panel, settings)
        _write_part(run.tables["item_scores"], stage, "item_scores", part_file, task.out_dir)
        return {"scores": run.result.scores, "origins": run.result.origins, "settings": run.result.settings}
    out: dict = {}
    if task.command == "stock":
        run = stock_run(panel, settings, horizon=task.horizon, snapshot=snapshot)
        out["stock_totals"] = stock_totals(run.tables["stock"])
    else:
        run = forecast_run(panel, settings)
    for name, frame in run.tables.items():
        _write_part(frame, stage, name, part_file, task.out_dir)
    out["routing"] = routing_counts(run.result.audit)
    return out


def _write_part(frame: pd.DataFrame, stage: Path, name: str, part_file: str, out_dir: str) -> None:
    """One partition's file of a dataset, only while the run's staging folder exists.

    The check just before writing keeps a worker that finishes after a failed
    or interrupted run from recreating the removed staging folder.
    """
    if not (stage / name).is_dir():
        raise InputError(f"--out {out_dir}: the workers cannot see the staging folder {stage}; give an output "
                         "folder on storage shared by every worker (or the run was stopped)")
    write_table(frame, stage / name / part_file)



def _holdout_scores(part: Part, settings: ForecastSettings, policy: Mapping, holdout: int) -> pd.DataFrame:
    """The router's holdout scores on this partition's items; the client adds them up."""
    return holdout_scores(part.panel, settings, policy, holdout)

def _check_override_items(overrides, items: pd.Index) -> None:
    """Every override names an item of the whole input (labels match as text, as the router matches them)."""
    if not overrides:
        return
    known = set(items)
    for key, rule in overrides.items():
        if key not in known and str(key) not in known:
            source = getattr(rule, "source", "")
            origin = source if source.startswith("override file") else "overrides"
            raise InputError(f"{origin}: unknown item {key!r} (not in the input)")



def _central_tables(command: str, results: list, selection, stage: Path, paths: dict, out_dir) -> dict:
    results = [r for r in results if r]
    out: dict = {}
    if command == "backtest":
        scores, dropped = combine_backtest_scores([r["scores"] for r in results],
                                                  levels=results[0]["settings"]["levels"])
        write_table(scores, stage / "scores.parquet")
        write_table(results[0]["origins"], stage / "origins.parquet")
        paths["scores"] = Path(out_dir) / "scores.parquet"
        paths["origins"] = Path(out_dir) / "origins.parquet"
        out.update(scores=scores, not_combined=dropped)
        return out
    out["routing"] = add_routing_counts([r["routing"] for r in results])
    if command == "stock":
        out["stock_totals"] = add_stock_totals([r["stock_totals"] for r in results])
    if selection is not None:
        write_table(selection, stage / "selection.parquet")
        paths["selection"] = Path(out_dir) / "selection.parquet"
    return out


def _manifest(command: str, settings, own, loaded: Loaded, columns: Columns, frequency, net_returns, horizon,
              scheduler, not_combined) -> dict:
    """``run.json`` in the local commands' layout, plus how the run was distributed."""
    forecast = _forecast_of(settings)
    name = loaded.name
    manifest = {
        "command": command,
        "version": __version__,
        "input": str(Path(name).resolve()) if name not in ("DataFrame", "Dask DataFrame") else None,
        "layout": "long",
        "columns": dataclasses.asdict(columns),
        "frequency": frequency,
        "net_returns": net_returns,
        "horizon": horizon,
        "classify_options": forecast.classify.options(),
        "engine": {"name": "dask", "scheduler": scheduler if isinstance(scheduler, str) else "local cluster",
                   "partitions": loaded.n_parts, "layout": "one Parquet file per partition"},
    }
    if command == "backtest":
        given = {k: getattr(settings, k) for k in _BACKTEST_FIELDS}
        manifest["backtest_options"] = {**given, **settings.options, "holdout": horizon, "origins": settings.origins,
                                        "step": settings.step, "levels": forecast.levels, "cost": forecast.cost,
                                        "seed": forecast.seed, "classify_options": forecast.classify.options()}
        manifest["scores_left_out"] = list(not_combined)
    else:
        manifest["forecast_options"] = {**forecast.options, "levels": forecast.levels, "cost": forecast.cost,
                                        "selection": _forecast_of(own).selection, "seed": forecast.seed}
    if command == "stock":
        manifest["stock_options"] = settings.manifest()
    manifest["load"] = {"items": loaded.summary.items, "periods": loaded.summary.periods,
                        "rows_read": loaded.summary.rows_read}
    manifest["policy_file"] = forecast.policy_file
    return manifest


def _tables_of(command: str) -> tuple[str, ...]:
    return {"forecast": ("forecasts", "audit", "patterns"),
            "stock": ("stock", "forecasts", "audit", "patterns"),
            "backtest": ("item_scores",)}[command]

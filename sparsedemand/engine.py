"""Running forecast, stock and backtest on a Dask cluster, one slice of the items per task.

The local engine reads the whole history into one panel. This engine reads a
long-layout Parquet dataset (or a Dask DataFrame) with Dask, sends every row
of an item to the same partition (a hash of the cleaned item label modulo the
number of partitions), builds one :class:`~sparsedemand.panel.DemandPanel` per
partition through :func:`sparsedemand.io.from_frame` with the same column and
calendar options, and runs the same functions on it as the local engine:
:func:`sparsedemand.route.forecast`, :func:`sparsedemand.stock.stock_targets`
and :func:`sparsedemand.evaluate.backtest`.

What keeps the partitions equal to one big panel
------------------------------------------------
* **One calendar.** The earliest and latest period of the whole input are
  found first; every partition's loader sees them (as two rows of a hidden
  placeholder item, dropped again after loading), so every item lies on the
  same calendar, with the same partial buckets dropped when aggregating.
* **Original row order.** Rows keep their position in the input: within a
  partition they are loaded in input order, so items come in order of first
  appearance, duplicate rows are summed in the same order, and a bad row is
  reported with its row number in the whole input.
* **Per-item work.** Classification, fitting, stock targets and per-item
  backtest scores depend on the item's own history only, and every bootstrap
  is seeded from the item label, so no result depends on which items share a
  partition.
* **Cross-item steps done centrally.** Holdout selection (the method per
  pattern with the lowest mean RMSSE over all the pattern's items) adds up the
  partitions' sums and counts before choosing; per-item overrides, the
  on-hand snapshot and the lead-time column are checked against all items.

Outputs are Parquet datasets, one file per partition
(``DIR/forecasts/part-00000.parquet`` ...), plus ``run.json``. Everything is
written into a staging folder beside ``DIR`` and moved into place only when
every partition has succeeded (:func:`sparsedemand.io.staged_output`), so on
a real cluster ``DIR`` must be on storage that every worker and the client
share.

Stock targets are decision support; follow the organisation's policies,
regulations and qualified staff, especially for safety-critical spares.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import logging
import os
import re
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import io as _io
from .errors import InputError
from .io import Columns, LoadSummary, from_frame, staged_output, write_table
from .panel import DemandPanel
from .route import DEFAULT_CANDIDATES, DEFAULT_LEVELS, Rule

__all__ = [
    "COMMANDS",
    "ENGINES",
    "LOCAL_CLUSTER_OPTIONS",
    "WORKER_ENV",
    "DistributedRun",
    "run_distributed",
    "start_client",
    "combine_backtest_scores",
]

COMMANDS: tuple[str, ...] = ("forecast", "stock", "backtest")
ENGINES: tuple[str, ...] = ("local", "dask")

#: Label of the hidden item that pins every partition to the global calendar.
_PLACEHOLDER = "\x00sparsedemand-calendar"
#: Hidden column with each row's position in the whole input.
_ROW = "__sparsedemand_row__"
#: Environment of the worker processes of a cluster started here: one thread per kernel.
WORKER_ENV = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1",
              "OPENBLAS_NUM_THREADS": "1"}
#: Options of the local cluster started here: loopback only, no dashboard; the scheduler's own HTTP
#: routes (health, metrics) on a free loopback port rather than the default 8787 another cluster may hold.
LOCAL_CLUSTER_OPTIONS = {"threads_per_worker": 1, "processes": True, "host": "127.0.0.1", "dashboard_address": None,
                         "scheduler_kwargs": {"dashboard_address": "127.0.0.1:0"}, "env": WORKER_ENV}
_QUIET_LOGGERS = ("distributed.shuffle._scheduler_plugin", "distributed.shuffle")
_SELECTION_COLUMNS = ["pattern", "method", "mean_rmsse", "items", "scored_items", "chosen"]


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
class _Load:
    """How a partition is turned into a panel."""

    source: str
    columns: Columns
    frequency: str | None
    net_returns: bool
    first: object  # raw period values of the global calendar's ends
    last: object
    availability: str | None
    native_periods: int


@dataclass(frozen=True)
class _Task:
    """What every partition runs once its panel is built."""

    command: str
    stage: str
    out_dir: str
    horizon: int
    forecast: dict  # keywords of route.forecast besides the panel, horizon and overrides
    overrides: Mapping | None
    stock: dict = field(default_factory=dict)
    backtest: dict = field(default_factory=dict)


@dataclass
class _Part:
    """A partition's panel (kept on its worker) and what the client needs to know of it."""

    panel: DemandPanel | None
    info: dict


# --------------------------------------------------------------------------- cluster
@contextlib.contextmanager
def start_client(scheduler=None, *, n_workers: int = 2):
    """A Dask client: connected to ``scheduler``, or on a local cluster started (and closed) here.

    Parameters
    ----------
    scheduler : str, distributed.Client or None
        Address of a running scheduler (``tcp://host:8786``), or a client
        the caller owns (left open). ``None`` starts a
        ``distributed.LocalCluster`` of ``n_workers`` processes with one
        thread each, on 127.0.0.1 only, with no dashboard, and with
        ``NUMBA_NUM_THREADS=1`` and ``OMP_NUM_THREADS=1`` in the workers.
    n_workers : int, default 2
        Worker processes of the local cluster.

    Examples
    --------
    >>> with start_client(n_workers=2) as client:  # doctest: +SKIP
    ...     client.ncores()
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise InputError("--engine dask needs dask.distributed: pip install 'sparsedemand[dask]'") from None
    # The local scheduler runs in this process: keep its shuffle notices off stderr (a failed
    # partition's error reaches the caller as an InputError, not as a worker log).
    for name in _QUIET_LOGGERS:
        logging.getLogger(name).setLevel(logging.ERROR)
    if isinstance(scheduler, Client):
        yield scheduler
        return
    if scheduler is not None:
        if not isinstance(scheduler, str) or not scheduler.strip():
            raise InputError(f"--scheduler must be an address such as tcp://host:8786, got {scheduler!r}")
        try:
            client = Client(scheduler.strip(), timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise InputError(f"--scheduler {scheduler}: cannot connect ({_io._first_line(exc)})") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = _whole("--workers", n_workers, minimum=1)
    cluster = LocalCluster(n_workers=n, silence_logs=logging.CRITICAL, **LOCAL_CLUSTER_OPTIONS)
    try:
        client = Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


# --------------------------------------------------------------------------- entry point
def run_distributed(
    command: str,
    source,
    *,
    out_dir: str | os.PathLike,
    scheduler=None,
    n_workers: int = 2,
    partitions: int | None = None,
    columns: Columns | None = None,
    frequency: str | None = None,
    net_returns: bool = False,
    horizon: int | None = None,
    levels: Sequence[float] = DEFAULT_LEVELS,
    policy=None,
    overrides=None,
    cost: str = "mse",
    selection: str = "policy",
    candidates: Sequence[str] = DEFAULT_CANDIDATES,
    holdout: int | None = None,
    seed: int = 0,
    classify_options: Mapping[str, object] | None = None,
    forecast_options: Mapping[str, object] | None = None,
    lead_time: int | None = None,
    lead_time_column: str | None = None,
    review_period: int = 1,
    service_level: float | None = None,
    fill_rate: float | None = None,
    on_hand_file: str | os.PathLike | None = None,
    origins: int = 1,
    step: int | None = None,
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
        The paths written and the run's totals.

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
    started = time.perf_counter()
    if command not in COMMANDS:
        raise InputError(f"command must be one of {', '.join(COMMANDS)}, got {command!r}")
    if partitions is not None:
        partitions = _whole("--partitions", partitions, minimum=1)
    columns = columns or Columns()
    if command == "stock" and lead_time_column is not None and lead_time_column not in columns.attributes:
        columns = dataclasses.replace(columns, attributes=(*columns.attributes, lead_time_column))
    stock_opts = _stock_options(command, lead_time, lead_time_column, review_period, service_level, fill_rate,
                                on_hand_file, seed)
    if command == "forecast":
        if horizon is None:
            raise InputError("--horizon is needed to forecast")
        horizon = _whole("--horizon", horizon, minimum=1)
    if command == "backtest" and holdout is None:
        raise InputError("--holdout is needed for a backtest")
    policy_file = str(policy) if isinstance(policy, (str, os.PathLike)) else None
    if policy_file is not None:
        policy = _route().load_policy(policy)
    if isinstance(overrides, (str, os.PathLike)):
        overrides = _route().load_overrides(overrides, item_column="item")
    copts = dict(classify_options or {})

    with start_client(scheduler, n_workers=n_workers) as client:
        frame, name = _dask_frame(source, columns)
        n_parts = partitions or max(_threads(client), frame.npartitions)
        offsets, firsts = _scan(frame, columns.period)
        load, summary, calendar = _prepare_calendar(firsts, frame._meta, name, columns, frequency, net_returns)
        shuffled = _by_item(_numbered(frame, columns.item, offsets), columns.item, n_parts)
        frames = client.compute(shuffled.to_delayed())
        parts = client.map(_load_part, frames, [load] * n_parts, pure=False)
        infos = _gather(client, parts, _info_of)
        del frames
        items = pd.Index([x for info in infos for x in info["items"]], name="item")
        summary = _summary(summary, infos, items, load, calendar)

        _check_override_items(overrides, items)
        snapshot = None
        if command == "stock":
            horizon = _stock_horizon(client, parts, stock_opts)
            if stock_opts["on_hand_file"] is not None:
                snapshot = _snapshot(stock_opts["on_hand_file"], items)
        if command == "backtest":
            horizon = _whole("--holdout", holdout, minimum=1)
        _check_forecast(calendar, horizon, levels, cost, selection, holdout)

        fopts = _keywords("forecast_options", forecast_options, _OWN_FORECAST_KEYWORDS)
        fopts.update(levels=tuple(levels), policy=policy, cost=cost, selection="policy", seed=seed,
                     classify_options=copts)
        selection_table = None
        if selection == "holdout" and command != "backtest":
            length = holdout or horizon
            base = _route()._resolve_policy(policy)  # the table the router would start from
            change = fopts.get("change_level", _route().CHANGE_LEVEL)
            scores = _gather(client, parts, _holdout_scores, base, tuple(candidates), length, cost, copts, change)
            fopts["policy"], selection_table = _choose(scores, base, tuple(candidates), length)

        bopts = {}
        if command == "backtest":
            bopts = _keywords("backtest_options", backtest_options, _OWN_BACKTEST_KEYWORDS)
            bopts.update(holdout=horizon, origins=origins, step=step, policy=policy, levels=tuple(levels),
                         cost=cost, seed=seed, classify_options=copts)

        with staged_output(out_dir) as stage:
            names = _tables_of(command)
            for table in names:
                (stage / table).mkdir()
            task = _Task(command=command, stage=str(stage), out_dir=str(out_dir), horizon=int(horizon),
                         forecast=fopts, overrides=overrides, stock=stock_opts, backtest=bopts)
            shared = None if snapshot is None else client.scatter(snapshot, broadcast=True)
            results = _gather(client, parts, _run_part, task, shared, indexed=True)
            paths = {table: Path(out_dir) / table for table in names}
            extra = _central_tables(command, results, selection_table, stage, paths, out_dir)
            manifest = _manifest(command, name, columns, frequency, net_returns, horizon, copts, fopts, stock_opts,
                                 bopts, scheduler, n_parts, extra.get("not_combined", ()), summary)
            manifest["policy_file"] = policy_file
            _io.write_text(json.dumps(manifest, indent=2, default=str) + "\n", stage / "run.json")
            paths["run"] = Path(out_dir) / "run.json"
        client.cancel(parts)

    return DistributedRun(
        command=command,
        out_dir=Path(out_dir),
        paths=paths,
        partitions=n_parts,
        summary=summary,
        routing=extra.get("routing"),
        stock_totals=extra.get("stock_totals"),
        selection=selection_table,
        scores=extra.get("scores"),
        not_combined=tuple(extra.get("not_combined", ())),
        seconds=time.perf_counter() - started,
    )


# --------------------------------------------------------------------------- client side: input
def _dask_frame(source, columns: Columns):
    """The input as a Dask DataFrame, and the name that messages give it."""
    import dask.dataframe as dd

    if isinstance(source, pd.DataFrame):
        frame, name = dd.from_pandas(source, npartitions=1, sort=False), "DataFrame"
    elif isinstance(source, dd.DataFrame):
        frame, name = source, "Dask DataFrame"
    elif isinstance(source, (str, os.PathLike)):
        name = str(source)
        path = Path(source)
        if not path.exists():
            raise InputError(f"{name}: no such file")
        if path.is_file() and path.suffix.lower() not in (".parquet", ".pq"):
            raise InputError(f"{name}: the dask engine reads Parquet (a .parquet file or a dataset folder)")
        try:
            frame = dd.read_parquet(path)
        except Exception as exc:  # pyarrow raises many types
            raise InputError(f"{name}: cannot read as Parquet ({_io._first_line(exc)})") from None
    else:
        raise InputError(f"source must be a Parquet path or a DataFrame in long layout, got {type(source).__name__}")
    _io._require(frame, (columns.item, columns.period, columns.quantity), name, columns)
    return frame, name


def _scan(frame, period: str):
    """One pass over the input: rows per partition, and the first row of every distinct period value."""
    import dask

    meta = pd.DataFrame({period: frame._meta[period], "_part": np.zeros(0, np.int64),
                         "_local": np.zeros(0, np.int64)})
    lengths, firsts = dask.compute(frame.map_partitions(len), frame[[period]].map_partitions(
        _first_rows, period, meta=meta))
    offsets = np.concatenate([[0], np.cumsum(np.asarray(lengths, dtype=np.int64))[:-1]])
    firsts = firsts.reset_index(drop=True)
    firsts[_ROW] = offsets[firsts["_part"].to_numpy()] + firsts["_local"].to_numpy()
    firsts = firsts.sort_values(_ROW, kind="stable").drop_duplicates(period, keep="first")
    return offsets, firsts[[period, _ROW]].reset_index(drop=True)


def _first_rows(frame: pd.DataFrame, period: str, partition_info=None) -> pd.DataFrame:
    """The first row of every distinct period value (missing values included) in one partition."""
    out = frame[[period]].reset_index(drop=True)
    out["_part"] = partition_info["number"] if partition_info else 0
    out["_local"] = np.arange(len(out), dtype=np.int64)
    return out.drop_duplicates(period, keep="first")


def _numbered(frame, item: str, offsets: np.ndarray):
    """The input with each row's position in the whole input, and item labels stripped."""
    meta = frame._meta.copy()
    meta[item] = meta[item].astype(object)
    meta[_ROW] = np.zeros(0, dtype=np.int64)
    return frame.map_partitions(_number_rows, item, offsets, meta=meta)


def _number_rows(frame: pd.DataFrame, item: str, offsets, partition_info=None) -> pd.DataFrame:
    """Add each row's position in the whole input; strip item labels so equal labels hash alike."""
    number = partition_info["number"] if partition_info else 0
    out = frame.reset_index(drop=True)
    raw = out[item]
    labels = raw.astype(str).str.strip().astype(object)
    out[item] = labels.where(raw.notna().to_numpy(), None)
    out[_ROW] = np.arange(len(out), dtype=np.int64) + int(offsets[number])
    return out


def _prepare_calendar(firsts: pd.DataFrame, meta: pd.DataFrame, name: str, columns: Columns, frequency,
                      net_returns):
    """The global calendar, found by the loader itself from one row per distinct period value."""
    period = columns.period
    if len(firsts) == 0:
        raise InputError(f"{name}: no data rows")
    availability = _io._availability_column(meta, columns, name)
    probe = pd.DataFrame({"item": [f"p{i}" for i in range(len(firsts))], "period": firsts[period],
                          "quantity": np.zeros(len(firsts))})
    rows = firsts[_ROW].to_numpy()
    try:
        native = from_frame(probe, source=name, layout="long")
        calendar, summary = from_frame(probe, source=name, layout="long", frequency=frequency,
                                       net_returns=net_returns, return_summary=True)
    except InputError as exc:
        raise InputError(_input_rows(str(exc), rows)) from None
    first = firsts[period].iloc[int(np.flatnonzero(native.introduced == 0)[0])]
    last = firsts[period].iloc[int(np.flatnonzero(native.introduced == native.n_periods - 1)[0])]
    load = _Load(source=name, columns=columns, frequency=frequency, net_returns=net_returns, first=first, last=last,
                 availability=availability, native_periods=native.n_periods)
    summary = dataclasses.replace(summary, source=name)
    return load, summary, calendar


def _by_item(frame, item: str, n_parts: int):
    """Every row of an item in the same partition: hash of the label modulo ``n_parts``."""
    return frame.shuffle(on=item, npartitions=n_parts, ignore_index=True)


def _threads(client) -> int:
    return max(1, sum(client.nthreads().values()))


# --------------------------------------------------------------------------- worker side: loading
def _load_part(frame: pd.DataFrame, load: _Load) -> _Part:
    """Build a partition's panel on the global calendar, in the input's row order."""
    if len(frame) == 0:
        return _Part(None, {"items": [], "rows": 0, "rows_merged": 0, "zeros_filled": 0, "returns_clipped": 0,
                            "unavailable": 0, "cells": 0})
    frame = frame.sort_values(_ROW, kind="stable").reset_index(drop=True)
    rows = frame[_ROW].to_numpy()
    data = _with_placeholder(frame.drop(columns=[_ROW]), load)
    try:
        panel, summary = from_frame(data, source=load.source, layout="long", columns=load.columns,
                                    frequency=load.frequency, net_returns=load.net_returns, return_summary=True)
    except InputError as exc:
        raise InputError(_input_rows(str(exc), rows)) from None
    keep = np.asarray(panel.items != _PLACEHOLDER)
    panel = panel.subset(keep)
    placeholder_rows = len(data) - len(frame)
    info = {
        "items": list(panel.items),
        "rows": len(frame),
        "rows_merged": summary.rows_merged,
        "zeros_filled": summary.zeros_filled - (load.native_periods - placeholder_rows),
        "returns_clipped": summary.returns_clipped,
        "unavailable": int((~panel.mask()).sum()) if panel.available is not None else 0,
        "cells": panel.n_items * panel.n_periods,
    }
    return _Part(panel, info)


def _with_placeholder(frame: pd.DataFrame, load: _Load) -> pd.DataFrame:
    """Append the placeholder item's rows at the calendar's first and last period (attributes of row 1)."""
    c = load.columns
    ends = [load.first] if _same(load.first, load.last) else [load.first, load.last]
    extra = frame.iloc[[0] * len(ends)].copy()
    extra[c.item] = _PLACEHOLDER
    extra[c.period] = pd.Series(ends, index=extra.index).astype(frame[c.period].dtype)
    extra[c.quantity] = 0
    if load.availability is not None:
        extra[load.availability] = 1
    return pd.concat([frame, extra], ignore_index=True)


def _same(a, b) -> bool:
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False


def _info_of(part: _Part) -> dict:
    return part.info


def _longest_lead(part: _Part, opts: dict):
    if part.panel is None:
        return None
    from .cli import lead_times

    return int(np.max(lead_times(part.panel, opts), initial=0))


# --------------------------------------------------------------------------- worker side: the work
def _run_part(part: _Part, task: _Task, snapshot: pd.DataFrame | None, index: int) -> dict:
    """Run the command on one partition, write its part files, return its small totals."""
    panel = part.panel
    if panel is None or panel.n_items == 0:
        return {}
    stage = Path(task.stage)
    overrides = None
    if task.overrides:
        mine = set(panel.items)
        overrides = {k: v for k, v in task.overrides.items() if k in mine or str(k) in mine}
    part_file = f"part-{index:05d}.parquet"
    out: dict = {}
    if task.command == "backtest":
        from .evaluate import backtest

        result = backtest(panel, overrides=overrides, **task.backtest)
        _write_part(result.item_scores, stage, "item_scores", part_file, task.out_dir)
        out["scores"] = result.scores
        out["origins"] = result.origins
        out["settings"] = result.settings
        return out
    from .route import forecast

    result = forecast(panel, task.horizon, overrides=overrides, **task.forecast)
    tables = {"forecasts": result.table(), "audit": result.audit, "patterns": result.classes}
    if task.command == "stock":
        from .cli import compute_stock

        tables["stock"] = compute_stock(result, task.stock, snapshot=snapshot)
        from .stock import stock_totals

        out["stock_totals"] = stock_totals(tables["stock"])
    for name, frame in tables.items():
        _write_part(frame, stage, name, part_file, task.out_dir)
    audit = result.audit
    out["routing"] = pd.DataFrame({"pattern": audit["pattern"], "method": audit["method"],
                                   "items": 1, "with_warnings": audit["warnings"].astype(bool).astype(np.int64)})
    out["routing"] = out["routing"].groupby(["pattern", "method"], sort=False, as_index=False).sum()
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


def _holdout_scores(part: _Part, policy: Mapping, candidates: tuple, holdout: int, cost: str,
                    classify_options: dict, change_level) -> pd.DataFrame:
    """The router's holdout scores on this partition's items (one row per policy row and candidate).

    The items' policy rows are found as the router finds them; ``mean_rmsse``
    times ``scored_items`` is the partition's sum, and the client adds the
    sums up before any method is chosen.
    """
    from .classify import classify
    from .route import _select_by_holdout, rate_change, routing_keys

    panel = part.panel
    if panel is None or panel.n_items == 0:
        return pd.DataFrame(columns=_SELECTION_COLUMNS)
    classes = classify(panel, **classify_options)
    changes = None if change_level is None else rate_change(panel, classes, level=change_level)
    keys = routing_keys(classes, None if changes is None else changes["changed"].to_numpy())
    return _select_by_holdout(panel, keys, policy, candidates, holdout, cost)[1]


# --------------------------------------------------------------------------- client side: central steps
def _gather(client, parts, func, *args, indexed: bool = False) -> list:
    """Run ``func(part, *args[, index])`` on every partition; wait for all, then raise the first failure.

    Waiting for every task before raising keeps a failed run from leaving a
    worker still writing into a staging folder that is being removed.
    """
    from distributed import wait

    extra = [list(range(len(parts)))] if indexed else []
    futures = client.map(func, parts, *[[a] * len(parts) for a in args], *extra, pure=False)
    wait(futures)
    for future in futures:
        if future.status == "error":
            exc = future.exception()
            client.cancel(futures)
            if isinstance(exc, InputError):
                raise InputError(str(exc)) from None
            raise exc
    out = client.gather(futures)
    client.cancel(futures)
    return out


def _summary(base: LoadSummary, infos: list, items: pd.Index, load: _Load, calendar: DemandPanel) -> LoadSummary:
    cells = sum(i["cells"] for i in infos)
    return dataclasses.replace(
        base,
        items=len(items),
        rows_read=sum(i["rows"] for i in infos),
        rows_merged=sum(i["rows_merged"] for i in infos),
        zeros_filled=sum(i["zeros_filled"] for i in infos),
        returns_clipped=sum(i["returns_clipped"] for i in infos),
        unavailable_share=float(sum(i["unavailable"] for i in infos) / cells) if cells else 0.0,
        availability_column=load.availability,
    )


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


def _snapshot(path, items: pd.Index) -> pd.DataFrame:
    """The on-hand snapshot checked against every item, as the local command reads it."""
    from .cli import read_on_hand

    aligned = read_on_hand(Path(path), items)
    return pd.DataFrame(aligned, index=items)


def _choose(parts: list[pd.DataFrame], policy: Mapping[str, Rule], candidates: tuple, holdout: int):
    """Per pattern, the candidate with the lowest mean RMSSE over every partition's items (first on ties).

    The same choice, audit text and score table as the router's holdout
    selection on one panel; the means differ from it by float round-off only.
    """
    from .classify import PATTERNS
    from .route import ROUTING_STATUSES

    table = pd.concat([p for p in parts if len(p)], ignore_index=True)
    scored = table["scored_items"].to_numpy(dtype=np.float64)
    table["sum"] = np.where(scored > 0, table["mean_rmsse"].to_numpy(dtype=np.float64) * scored, 0.0)
    totals = table.groupby(["pattern", "method"], sort=False)[["sum", "scored_items", "items"]].sum()
    new_policy = dict(policy)
    records = []
    for pattern in (*PATTERNS, *ROUTING_STATUSES):
        if pattern not in totals.index.get_level_values(0):
            continue
        scores = {}
        for name in candidates:
            row = totals.loc[(pattern, name)]
            n = int(row["scored_items"])
            scores[name] = (float(row["sum"] / n) if n > 0 else np.inf, n)
        items = int(totals.loc[(pattern, candidates[0]), "items"])
        best = min(scores, key=lambda name: scores[name][0])
        for name, (score, n) in scores.items():
            records.append({"pattern": pattern, "method": name, "mean_rmsse": score, "items": items,
                            "scored_items": n, "chosen": name == best})
        new_policy[pattern] = Rule(best, {}, source=f"holdout selection ({holdout} periods, "
                                                    f"mean RMSSE {scores[best][0]:.3f})")
    return new_policy, pd.DataFrame(records, columns=_SELECTION_COLUMNS)


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
    routing = pd.concat([r["routing"] for r in results], ignore_index=True)
    out["routing"] = routing.groupby(["pattern", "method"], as_index=False).sum()
    if command == "stock":
        out["stock_totals"] = _add_totals([r["stock_totals"] for r in results])
    if selection is not None:
        write_table(selection, stage / "selection.parquet")
        paths["selection"] = Path(out_dir) / "selection.parquet"
    return out


def _add_totals(parts: list[pd.DataFrame]) -> pd.DataFrame:
    """Stock totals of partitions added up (values only over priced items, as in stock_totals)."""
    total = parts[0].copy()
    for p in parts[1:]:
        total = total.add(p, fill_value=0.0)
    priced = sum(p.attrs.get("priced_items", 0) for p in parts)
    if not priced:
        total.loc["value"] = np.nan
    total.attrs.update({"items": sum(p.attrs.get("items", 0) for p in parts), "priced_items": priced})
    return total


#: Backtest metrics that are means over (item, origin) pairs, or totals: these add up over partitions.
def combine_backtest_scores(parts: Sequence[pd.DataFrame], *, levels: Sequence[float] = DEFAULT_LEVELS):
    """Backtest score tables of disjoint sets of items combined into the table of all items.

    Every per-item metric of :func:`sparsedemand.evaluate.metric_names` is a
    mean over (item, origin) pairs with a ``count``: its combined value is
    ``sum(value * count) / sum(count)`` (``excluded_periods``, a total, is
    summed). Metrics that mix items in other ways cannot be rebuilt from the
    partitions' tables and are left out: ``rel_mae_gmean`` (its weights, the
    scored periods, are not in the table), the volume- or value-weighted
    MASE/RMSSE (each partition normalises its own weights) and
    ``weighted_rmsse`` (it scores sums of items over locations and
    categories).

    Parameters
    ----------
    parts : sequence of DataFrame
        ``BacktestResult.scores`` of each partition.
    levels : sequence of float
        The quantile levels of the backtest (to name the metrics).

    Returns
    -------
    scores : DataFrame
        Columns ``method, pattern, level, metric, value, count``.
    left_out : tuple of str
        The metrics that were not combined.

    Examples
    --------
    >>> a = pd.DataFrame({"method": ["sba"], "pattern": ["all"], "level": ["item"], "metric": ["mase"],
    ...                   "value": [1.0], "count": [1.0]})
    >>> b = a.assign(value=[4.0], count=[2.0])
    >>> combine_backtest_scores([a, b])[0]["value"].tolist()
    [3.0]
    """
    from .evaluate import metric_names

    names = metric_names(levels)
    table = pd.concat(list(parts), ignore_index=True)
    additive = table["metric"].isin(names) & (table["level"] == "item")
    left_out = tuple(dict.fromkeys(table.loc[~additive, "metric"]))
    table = table[additive].copy()
    total = table["metric"] == "excluded_periods"
    table["weighted"] = np.where(total, table["value"], table["value"] * table["count"])
    table.loc[table["count"] == 0, "weighted"] = 0.0
    keys = ["method", "pattern", "level", "metric"]
    out = table.groupby(keys, sort=False, as_index=False)[["weighted", "count"]].sum()
    mean = out["weighted"] / out["count"].where(out["count"] > 0)
    out["value"] = np.where(out["metric"] == "excluded_periods", out["weighted"], mean)
    out = out[["method", "pattern", "level", "metric", "value", "count"]]
    from .classify import PATTERNS, STATUSES

    order = {m: i for i, m in enumerate(dict.fromkeys(table["method"]))}
    pattern_order = {p: i for i, p in enumerate([*PATTERNS, *STATUSES, "all"])}
    metric_order = {m: i for i, m in enumerate(names)}
    out = out.sort_values(["method", "pattern", "metric"], key=lambda s: s.map(
        {"method": order, "pattern": pattern_order, "metric": metric_order}[s.name]), kind="stable")
    return out.reset_index(drop=True), left_out


def _manifest(command, name, columns, frequency, net_returns, horizon, copts, fopts, sopts, bopts, scheduler,
              n_parts, not_combined, summary) -> dict:
    """``run.json`` in the local commands' layout, plus how the run was distributed."""
    from . import __version__

    settings = {
        "command": command,
        "version": __version__,
        "input": str(Path(name).resolve()) if name not in ("DataFrame", "Dask DataFrame") else None,
        "layout": "long",
        "columns": dataclasses.asdict(columns),
        "frequency": frequency,
        "net_returns": net_returns,
        "horizon": horizon,
        "classify_options": copts,
        "engine": {"name": "dask", "scheduler": scheduler if isinstance(scheduler, str) else "local cluster",
                   "partitions": n_parts, "layout": "one Parquet file per partition"},
    }
    if command == "backtest":
        settings["backtest_options"] = {k: v for k, v in bopts.items() if k != "policy"}
        settings["scores_left_out"] = list(not_combined)
    else:
        settings["forecast_options"] = {k: v for k, v in fopts.items() if k not in ("policy", "classify_options")}
    if command == "stock":
        settings["stock_options"] = sopts
    settings["load"] = {"items": summary.items, "periods": summary.periods, "rows_read": summary.rows_read}
    return settings


# --------------------------------------------------------------------------- options
def _stock_options(command, lead_time, lead_time_column, review_period, service_level, fill_rate, on_hand_file,
                   seed) -> dict:
    if command != "stock":
        return {}
    if (lead_time is None) == (lead_time_column is None):
        raise InputError("give exactly one of --lead-time and --lead-time-column")
    if lead_time is not None:
        lead_time = _whole("--lead-time", lead_time, minimum=0)
    if service_level is None and fill_rate is None:
        service_level = 0.95
    return {"lead_time": lead_time, "lead_time_column": lead_time_column,
            "review_period": _whole("--review-period", review_period, minimum=1),
            "service_level": service_level, "fill_rate": fill_rate, "on_hand_file": on_hand_file, "seed": seed}


_OWN_FORECAST_KEYWORDS = frozenset({"data", "horizon", "levels", "policy", "overrides", "cost", "selection",
                                    "candidates", "holdout", "seed", "classify_options", "progress"})
_OWN_BACKTEST_KEYWORDS = frozenset({"data", "holdout", "origins", "step", "policy", "overrides", "levels", "cost",
                                    "seed", "classify_options", "progress"})


def _keywords(option: str, given: Mapping | None, own: frozenset) -> dict:
    """Further keywords passed through to a kernel; those with their own keyword here are refused."""
    out = dict(given or {})
    clash = sorted(set(out) & own)
    if clash:
        raise InputError(f"{option}: give {clash[0]!r} as its own keyword")
    return out


def _stock_horizon(client, parts, opts: dict) -> int:
    """The stock command's horizon: the longest lead time plus the review period."""
    if opts["lead_time_column"] is not None:
        longest = max(x for x in _gather(client, parts, _longest_lead, opts) if x is not None)
    else:
        longest = opts["lead_time"]
    return int(longest) + int(opts["review_period"])


def _tables_of(command: str) -> tuple[str, ...]:
    return {"forecast": ("forecasts", "audit", "patterns"),
            "stock": ("stock", "forecasts", "audit", "patterns"),
            "backtest": ("item_scores",)}[command]


def _check_forecast(calendar: DemandPanel, horizon, levels, cost, selection, holdout) -> None:
    from .route import _check_forecast_options

    _check_forecast_options(horizon, tuple(levels), cost, selection, holdout, calendar)


def _route():
    from . import route

    return route


def _whole(option: str, value, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{option} must be a whole number >= {minimum}, got {value!r}")
    return int(value)


_ROW_NUMBER = re.compile(r"\brow (\d+)")


def _input_rows(message: str, rows: np.ndarray) -> str:
    """Row numbers of a loader message (1-based in the loaded frame) as rows of the whole input."""

    def swap(match):
        k = int(match.group(1)) - 1
        if 0 <= k < len(rows):
            return f"row {int(rows[k]) + 1}"
        return "a placeholder row"

    return _ROW_NUMBER.sub(swap, message)

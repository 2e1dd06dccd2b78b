"""Reading a run folder: its tables, ``run.json`` and the demand history.

Examples
--------
>>> run = load_run("demo-output")  # doctest: +SKIP
>>> sorted(run.tables)  # doctest: +SKIP
['audit', 'forecasts', 'patterns']
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..io import Columns, as_panel, load_frame, read_demand
from ..panel import DemandPanel

# table name -> (columns it must have, the command that writes it)
RUN_TABLES: dict[str, tuple[tuple[str, ...], str]] = {
    "patterns": (("item", "pattern"), "sparsedemand classify"),
    "forecasts": (("item", "step", "forecast"), "sparsedemand forecast"),
    "audit": (("item", "pattern", "method"), "sparsedemand forecast"),
    "scores": (("method", "metric", "value"), "sparsedemand backtest"),
    "item_scores": (("item", "method"), "sparsedemand backtest"),
    "stock": (("item",), "sparsedemand stock"),
}

# Per-item attribute columns read from a bare ``demand.csv`` (a demo folder with no run.json):
# the attributes the demo scenario writes. Those that Columns already names are left out below.
DEMAND_CSV_ATTRIBUTES = ("location", "category", "unit_price", "lead_time", "safety_critical")


@dataclass
class RunOutputs:
    """The tables of a run folder, each ``None`` when absent.

    Item labels are strings in every table (``item`` column) and in the
    history, so the tables join on them.
    """

    folder: Path
    settings: dict = field(default_factory=dict)
    history: DemandPanel | None = None
    history_source: str = ""
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    files: dict[str, Path] = field(default_factory=dict)

    def get(self, name: str) -> pd.DataFrame | None:
        return self.tables.get(name)


def load_run(run_dir: str | os.PathLike, *, history=None) -> RunOutputs:
    """Read a run folder's tables and its demand history.

    Parameters
    ----------
    run_dir : path-like
        The run folder.
    history : DemandPanel, DataFrame or 2-D array, optional
        The demand history; wins over ``run.json`` and ``demand.csv``.

    Returns
    -------
    RunOutputs

    Raises
    ------
    InputError
        The folder is missing, holds none of the run tables, or a table or
        ``run.json`` cannot be read or lacks a needed column.

    Examples
    --------
    >>> run = load_run("demo-output")  # doctest: +SKIP
    >>> sorted(run.tables)  # doctest: +SKIP
    ['audit', 'forecasts', 'patterns']
    """
    folder = Path(run_dir)
    if not folder.exists():
        raise InputError(f"{folder}: no such run folder")
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder (give the run folder the commands wrote into)")
    run = RunOutputs(folder=folder, settings=_read_settings(folder))
    for name, (required, _) in RUN_TABLES.items():
        path = _table_path(folder, name)
        if path is None:
            continue
        run.tables[name] = _read_table(path, required)
        run.files[name] = path
    _attach_history(run, history)
    if not run.tables and run.history is None:
        expected = ", ".join(f"{n}.csv" for n in RUN_TABLES)
        raise InputError(f"{folder}: no run outputs found (expected one of {expected} or demand.csv)")
    return run


def _table_path(folder: Path, name: str) -> Path | None:
    # a Dask run writes each table as a folder of Parquet parts
    for path in (folder / f"{name}.csv", folder / f"{name}.parquet", folder / name):
        if path.exists() and (path.is_file() or any(path.glob("*.parquet"))):
            return path
    return None


def _read_table(path: Path, required: tuple[str, ...]) -> pd.DataFrame:
    frame = load_frame(path, text_columns=("item", "method", "pattern", "level", "metric"))
    missing = [c for c in required if c not in frame.columns]
    if missing:
        found = ", ".join(map(str, frame.columns)) or "none"
        raise InputError(f"{path}: missing column '{missing[0]}' (columns found: {found})")
    if "item" in frame.columns:
        if frame["item"].isna().any():
            row = int(np.flatnonzero(frame["item"].isna().to_numpy())[0]) + 1
            raise InputError(f"{path}, row {row}: missing item label")
        frame["item"] = frame["item"].astype(str)
    return frame


def _read_settings(folder: Path) -> dict:
    path = folder / "run.json"
    if not path.exists():
        return {}
    try:
        settings = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: cannot read the run settings ({exc})") from None
    if not isinstance(settings, dict):
        raise InputError(f"{path}: expected a JSON object of run settings")
    return settings


def _attach_history(run: RunOutputs, history) -> None:
    if history is not None:
        run.history = as_panel(history, name="history")
        run.history_source = "given by the caller"
    elif run.settings.get("input"):
        _history_from_settings(run)
    elif (run.folder / "demand.csv").exists():
        _history_from_demand_csv(run, run.folder / "demand.csv")


def _history_from_settings(run: RunOutputs) -> None:
    """The input file ``run.json`` names, read with the columns and options recorded there."""
    settings, folder = run.settings, run.folder
    source = folder / "run.json"
    path = Path(str(settings["input"]))
    if not path.is_absolute() and (folder / path).exists():
        path = folder / path
    columns = settings.get("columns") or {}
    if not isinstance(columns, dict):
        raise InputError(f"{source}: 'columns' must be an object of column names")
    known = set(Columns.__dataclass_fields__)
    unknown = sorted(set(columns) - known)
    if unknown:
        raise InputError(f"{source}: unknown column field {unknown[0]!r} in 'columns'")
    if "attributes" in columns:
        columns = {**columns, "attributes": tuple(columns["attributes"] or ())}
    try:
        run.history, _ = read_demand(
            path,
            columns=Columns(**columns),
            frequency=settings.get("frequency"),
            layout=settings.get("layout", "auto"),
            net_returns=bool(settings.get("net_returns", False)),
        )
    except InputError as exc:
        raise InputError(f"{source}: the demand history named in 'input' cannot be read: {exc}") from None
    run.history_source = str(path)


def _history_from_demand_csv(run: RunOutputs, path: Path) -> None:
    header = pd.read_csv(path, nrows=0).columns
    named = Columns().__dict__.values()
    extra = tuple(c for c in DEMAND_CSV_ATTRIBUTES if c in header and c not in named)
    run.history, _ = read_demand(path, columns=Columns(attributes=extra))
    run.history_source = str(path)

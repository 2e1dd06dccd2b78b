"""The ``sparsedemand`` command line.

Every command reads and validates its input through :mod:`sparsedemand.io`,
prints the load summary to stderr, and writes its outputs atomically. Bad
input ends with one line ``error: ...`` and exit code 2, never a traceback.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import contextlib
import dataclasses

import click
import numpy as np
import pandas as pd

from . import __version__
from .errors import InputError
from .io import Columns, FREQUENCIES, read_demand

class Console:
    """Where messages and progress go: stderr, silenced by ``--quiet``."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet

    def say(self, text: str) -> None:
        if not self.quiet:
            click.echo(text, err=True)

    def progress(self, iterable, *, label: str, length: int | None = None):
        """A progress bar on a terminal; a plain iterator otherwise."""
        if self.quiet or not sys.stderr.isatty():
            return contextlib.nullcontext(iterable)
        return click.progressbar(iterable, length=length, label=label, file=sys.stderr)


def input_options(func):
    """Options shared by every command that reads a demand file."""
    options = [
        click.argument("input_path", metavar="INPUT", type=click.Path(dir_okay=True, path_type=Path)),
        click.option("--layout", type=click.Choice(["auto", "long", "wide"]), default="auto",
                     show_default=True, help="Long: one row per item and period. Wide: one row per item."),
        click.option("--item-column", default="item", show_default=True, help="Column with the item label."),
        click.option("--period-column", default="period", show_default=True,
                     help="Column with the period (YYYY-MM-DD, YYYY-MM, YYYY-Www or an integer)."),
        click.option("--quantity-column", default="quantity", show_default=True, help="Column with the demand."),
        click.option("--availability-column", default=None,
                     help="0/1 in-stock flag or on-hand quantity (<= 0 means out of stock). "
                          "Default: 'in_stock' or 'on_hand' when present."),
        click.option("--location-column", default="location", show_default=True),
        click.option("--category-column", default="category", show_default=True),
        click.option("--price-column", default="unit_price", show_default=True,
                     help="Unit price, for value weighting and stock value."),
        click.option("--attribute-column", "attribute_columns", multiple=True,
                     help="Further per-item column to keep (repeatable), e.g. a lead time."),
        click.option("--frequency", type=click.Choice(FREQUENCIES), default=None,
                     help="Aggregate to this bucket (not finer than the data)."),
        click.option("--net-returns", is_flag=True, default=False,
                     help="Net negative quantities (returns) against sales in the period, clipping at zero."),
        click.option("--quiet", is_flag=True, default=False, help="No summary or progress on stderr."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def pop_columns(kwargs: dict) -> Columns:
    """The column names given by the shared input options."""
    return Columns(
        item=kwargs.pop("item_column"),
        period=kwargs.pop("period_column"),
        quantity=kwargs.pop("quantity_column"),
        availability=kwargs.pop("availability_column"),
        location=kwargs.pop("location_column"),
        category=kwargs.pop("category_column"),
        unit_price=kwargs.pop("price_column"),
        attributes=tuple(kwargs.pop("attribute_columns")),
    )


def load_input(kwargs: dict, console: Console):
    """Read the input named by the shared options; print the load summary."""
    columns = pop_columns(kwargs)
    path = kwargs.pop("input_path")
    source = {
        "input": str(Path(path).resolve()),
        "layout": kwargs.pop("layout"),
        "columns": dataclasses.asdict(columns),
        "frequency": kwargs.pop("frequency"),
        "net_returns": kwargs.pop("net_returns"),
    }
    panel, summary = read_demand(
        path,
        layout=source["layout"],
        columns=columns,
        frequency=source["frequency"],
        net_returns=source["net_returns"],
    )
    console.say(summary.text())
    return panel, summary, source


def write_manifest(stage: Path, command: str, source: dict, **settings) -> None:
    """``run.json``: what was read and how, so the report can find the history again."""
    import json

    from .io import write_text

    manifest = {"command": command, "version": __version__, **source, **settings}
    write_text(json.dumps(manifest, indent=2, default=str) + "\n", stage / "run.json")


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="sparsedemand")
def cli() -> None:
    """Forecast and stock slow-moving, intermittent demand.

    Typical run: classify the items, forecast with the routed methods, check the
    methods in a backtest, set stock targets, and read the report.
    """


# ------------------------------------------------------------------ demo


@cli.command()
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Folder for the demo data and every output.")
@click.option("--data-only", is_flag=True, default=False, help="Only write the demo history.")
@click.option("--parts", default=1200, show_default=True, type=click.IntRange(1, 200_000),
              help="Part numbers in the invented catalogue (1 to 3 depots each).")
@click.option("--seed", default=7, show_default=True, type=int, help="Seed of the generator.")
@click.option("--horizon", default=28, show_default=True, type=click.IntRange(1, 3650),
              help="Forecast horizon in days.")
@click.option("--quiet", is_flag=True, default=False)
def demo(out_dir: Path, data_only: bool, parts: int, seed: int, horizon: int, quiet: bool) -> None:
    """Generate the invented parts-distributor history and run the whole job on it."""
    from .demo import run_demo

    console = Console(quiet)
    run_demo(out_dir, parts=parts, seed=seed, horizon=horizon, data_only=data_only, say=console.say)


def engine_options(func):
    """Where the work runs: this process, or a Dask cluster."""
    options = [
        click.option("--engine", type=click.Choice(["local", "dask"]), default="local", show_default=True,
                     help="dask: partition a long Parquet input by item and run on a Dask cluster."),
        click.option("--scheduler", default=None,
                     help="Address of a running Dask scheduler (tcp://host:8786); default: a local cluster."),
        click.option("--workers", default=2, show_default=True, type=click.IntRange(1, 512),
                     help="Worker processes of the local Dask cluster."),
        click.option("--partitions", default=None, type=click.IntRange(1, 1_000_000),
                     help="Item partitions for the Dask engine (default: one per worker thread)."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def pop_engine(kwargs: dict, fmt: str) -> dict | None:
    """The Dask settings, or None for the local engine (unused Dask options are errors)."""
    engine = {k: kwargs.pop(k) for k in ("engine", "scheduler", "workers", "partitions")}
    if engine["engine"] == "local":
        for option in ("scheduler", "partitions"):
            if engine[option] is not None:
                raise InputError(f"--{option} needs --engine dask")
        return None
    if kwargs.get("layout") == "wide":
        raise InputError("--engine dask reads the long layout only (one row per item and period)")
    if fmt != "parquet":
        raise InputError("--engine dask writes partitioned Parquet: add --format parquet")
    return engine


def run_on_dask(command: str, engine: dict, kwargs: dict, out_dir: Path, console: Console, **options):
    """Run one command on Dask with the CLI's options; returns the engine's run record."""
    try:
        from .engine import run_distributed
    except ImportError:
        raise InputError("--engine dask needs the dask extra: pip install 'sparsedemand[dask]'") from None

    columns = pop_columns(kwargs)
    run = run_distributed(
        command,
        kwargs.pop("input_path"),
        out_dir=out_dir,
        scheduler=engine["scheduler"],
        n_workers=engine["workers"],
        partitions=engine["partitions"],
        columns=columns,
        frequency=kwargs.pop("frequency"),
        net_returns=kwargs.pop("net_returns"),
        **options,
    )
    console.say(run.summary.text())
    return run


def output_options(folder_help: str):
    """``--out`` (a folder) and ``--format`` of the commands that write a run folder."""

    def apply(func):
        func = click.option("--format", "fmt", type=click.Choice(["csv", "parquet"]), default="csv",
                            show_default=True, help="File format of the tables.")(func)
        return click.option("--out", "out_dir", required=True,
                            type=click.Path(file_okay=False, path_type=Path), help=folder_help)(func)

    return apply


def write_routed(stage: Path, result, fmt: str) -> None:
    """The routed forecast's tables: forecasts, audit trail and patterns."""
    from .io import write_table

    write_table(result.table(), stage / f"forecasts.{fmt}")
    write_table(result.audit, stage / f"audit.{fmt}")
    write_table(result.classes, stage / f"patterns.{fmt}")


# ------------------------------------------------------------------ classify


def classify_options(func):
    """Options of the demand-pattern classifier."""
    options = [
        click.option("--adi-cutoff", default=1.32, show_default=True, type=float,
                     help="Average demand interval at which demand counts as intermittent."),
        click.option("--cv2-cutoff", default=0.49, show_default=True, type=float,
                     help="Squared coefficient of variation of sizes at which demand counts as erratic."),
        click.option("--rule", "class_rule", type=click.Choice(["cutoffs", "kostenko-hyndman"]),
                     default="cutoffs", show_default=True,
                     help="Fixed cutoffs, or the exact SBA-versus-Croston boundary."),
        click.option("--min-demands", default=2, show_default=True, type=int,
                     help="Fewer demands than this: too little history."),
        click.option("--min-periods", default=8, show_default=True, type=int,
                     help="A history (from the first demand) shorter than this: too little history."),
        click.option("--quiet-factor", default=4.0, show_default=True, type=float,
                     help="No demand in the last (factor x mean interval between demands) periods: "
                          "gone quiet. 0 turns the check off."),
        click.option("--quiet-min", default=8, show_default=True, type=int,
                     help="Fewest silent periods that can make an item gone quiet."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def pop_classify_options(kwargs: dict) -> dict:
    opts = {
        "adi_cutoff": kwargs.pop("adi_cutoff"),
        "cv2_cutoff": kwargs.pop("cv2_cutoff"),
        "rule": kwargs.pop("class_rule"),
        "min_demands": kwargs.pop("min_demands"),
        "min_periods": kwargs.pop("min_periods"),
        "quiet_min": kwargs.pop("quiet_min"),
    }
    quiet = kwargs.pop("quiet_factor")
    opts["quiet_factor"] = None if quiet == 0 else quiet
    return opts


@cli.command("classify")
@input_options
@classify_options
@click.option("--out", "out_file", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Table of patterns, one row per item (.csv or .parquet).")
def classify_cmd(out_file: Path, **kwargs) -> None:
    """Sort every item into smooth, erratic, intermittent or lumpy demand, and say why."""
    from .classify import classify, pattern_summary
    from .io import write_table

    console = Console(kwargs.pop("quiet"))
    copts = pop_classify_options(kwargs)
    panel, _, _ = load_input(kwargs, console)
    table = classify(panel, **copts)
    write_table(table, out_file)
    click.echo(_format_summary(pattern_summary(table, panel)))
    console.say(f"wrote {out_file}")


def _format_summary(frame) -> str:
    return frame.to_string(float_format=lambda v: f"{v:,.3f}")


# ------------------------------------------------------------------ forecast


def _parse_levels(text: str) -> tuple[float, ...]:
    try:
        levels = tuple(float(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise InputError(f"--quantiles must be numbers separated by commas, got {text!r}") from None
    if not levels or any(not 0 < q < 1 for q in levels):
        raise InputError(f"--quantiles must lie strictly between 0 and 1, got {text!r}")
    if len(set(levels)) < len(levels):
        raise InputError(f"--quantiles lists a level twice: {text!r}")
    return levels


horizon_option = click.option("--horizon", required=True, type=int, help="Periods to forecast.")


def forecast_options(func):
    options = [
        click.option("--quantiles", "levels", default="0.5,0.8,0.9,0.95", show_default=True,
                     help="Quantile levels of the predictive distribution, comma separated."),
        click.option("--policy", "policy_file", type=click.Path(dir_okay=False, path_type=Path),
                     default=None, help="TOML routing policy replacing rows of the default table."),
        click.option("--overrides", "override_file", type=click.Path(dir_okay=False, path_type=Path),
                     default=None, help="CSV of item, method and parameters that wins over the policy."),
        click.option("--cost", type=click.Choice(["mse", "mae", "mar", "msr"]), default="mse",
                     show_default=True, help="In-sample cost minimised when fitting smoothing constants."),
        click.option("--selection", type=click.Choice(["policy", "holdout"]), default="policy",
                     show_default=True,
                     help="policy: the routing table. holdout: per pattern, the best method on the last periods."),
        click.option("--seed", default=0, show_default=True, type=int, help="Seed for bootstrap distributions."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def pop_horizon(kwargs: dict) -> int:
    horizon = kwargs.pop("horizon")
    if horizon < 1:
        raise InputError(f"--horizon must be at least 1, got {horizon}")
    return horizon


def pop_forecast_options(kwargs: dict) -> dict:
    from .route import load_policy

    policy = kwargs.pop("policy_file")
    return {
        "levels": _parse_levels(kwargs.pop("levels")),
        # the policy is checked before the (possibly large) input is read
        "policy": load_policy(policy) if policy is not None else None,
        "overrides": kwargs.pop("override_file"),
        "cost": kwargs.pop("cost"),
        "selection": kwargs.pop("selection"),
        "seed": kwargs.pop("seed"),
    }


@cli.command("forecast")
@input_options
@classify_options
@horizon_option
@forecast_options
@engine_options
@output_options("Folder for forecasts and the audit table.")
def forecast_cmd(out_dir: Path, fmt: str, **kwargs) -> None:
    """Route every item to a suitable method and forecast, with an audit trail."""
    from .io import staged_output, write_table

    console = Console(kwargs.pop("quiet"))
    copts = pop_classify_options(kwargs)
    horizon = pop_horizon(kwargs)
    fopts = pop_forecast_options(kwargs)
    engine = pop_engine(kwargs, fmt)
    if engine is not None:
        run = run_on_dask("forecast", engine, kwargs, out_dir, console, horizon=horizon,
                          classify_options=copts, **fopts)
        click.echo(_format_summary(run.routing))
        console.say(f"wrote {out_dir} ({run.partitions} partitions)")
        return
    panel, _, source = load_input(kwargs, console)
    result = routed_forecast(panel, horizon, fopts, copts, console)
    with staged_output(out_dir) as stage:
        write_routed(stage, result, fmt)
        write_manifest(stage, "forecast", source, horizon=horizon, classify_options=copts,
                       forecast_options=fopts)
        if result.selection is not None:
            write_table(result.selection, stage / f"selection.{fmt}")
    click.echo(_format_summary(_routing_summary(result.audit)))
    console.say(f"wrote {out_dir}/forecasts.{fmt} and {out_dir}/audit.{fmt}")


def routed_forecast(panel, horizon: int, fopts: dict, copts: dict, console: Console):
    """The router's forecast with the CLI's options (policy and override files read here)."""
    from .route import forecast, load_overrides

    options = dict(fopts)
    overrides = options.pop("overrides")
    return forecast(
        panel,
        horizon,
        overrides=load_overrides(overrides) if overrides is not None else None,
        classify_options=copts,
        progress=console.progress,
        **options,
    )


def _routing_summary(audit):
    counts = audit.groupby(["pattern", "method"]).size().rename("items")
    warned = audit["warnings"].astype(bool).groupby([audit["pattern"], audit["method"]]).sum()
    table = pd.concat([counts, warned.rename("with_warnings")], axis=1).reset_index()
    total = pd.DataFrame([{"pattern": "all", "method": "", "items": int(counts.sum()),
                           "with_warnings": int(warned.sum())}])
    return pd.concat([table, total], ignore_index=True).set_index(["pattern", "method"])


# ------------------------------------------------------------------ backtest


@cli.command("backtest")
@input_options
@classify_options
@forecast_options
@click.option("--holdout", required=True, type=int, help="Periods scored after each origin.")
@click.option("--origins", default=1, show_default=True, type=int,
              help="Forecast origins (rolling origin, expanding window).")
@click.option("--step", default=None, type=int, help="Periods between origins (default: --holdout).")
@click.option("--methods", "method_list", default=None,
              help="Methods to compare, comma separated (default: every method).")
@click.option("--baseline", default="mean_since_first", show_default=True,
              help="Method the relative MAE divides by.")
@click.option("--lead-time", "sim_lead_time", default=1, show_default=True, type=int,
              help="Lead time of the simulated order-up-to policy.")
@click.option("--review-period", "sim_review", default=1, show_default=True, type=int,
              help="Review period of the simulated policy.")
@click.option("--service-level", "sim_service", default=0.95, show_default=True, type=float,
              help="Quantile of lead-time-plus-review demand the simulated policy orders up to.")
@click.option("--unmet", type=click.Choice(["lost", "backorder"]), default="lost", show_default=True,
              help="What happens to demand the simulated stock cannot serve.")
@click.option("--weights", type=click.Choice(["volume", "value"]), default="volume", show_default=True,
              help="Weighting of the weighted scores (value = unit price x units).")
@engine_options
@output_options("Folder for scores.csv and item_scores.csv.")
def backtest_cmd(out_dir: Path, fmt: str, **kwargs) -> None:
    """Score every method, the router and the naive baselines on your own history."""
    from .evaluate import backtest
    from .io import staged_output, write_table

    console = Console(kwargs.pop("quiet"))
    copts = pop_classify_options(kwargs)
    fopts = pop_forecast_options(kwargs)
    methods = kwargs.pop("method_list")
    bopts = {
        "holdout": kwargs.pop("holdout"),
        "origins": kwargs.pop("origins"),
        "step": kwargs.pop("step"),
        "methods": None if methods is None else tuple(m.strip() for m in methods.split(",") if m.strip()),
        "baseline": kwargs.pop("baseline"),
        "lead_time": kwargs.pop("sim_lead_time"),
        "review_period": kwargs.pop("sim_review"),
        "service_level": kwargs.pop("sim_service"),
        "unmet": kwargs.pop("unmet"),
        "weights": kwargs.pop("weights"),
    }
    if fopts.pop("selection") != "policy":
        raise InputError("--selection holdout is for forecast; the backtest scores the policy's router")
    engine = pop_engine(kwargs, fmt)
    if engine is not None:
        extra = {k: bopts[k] for k in ("methods", "baseline", "lead_time", "review_period",
                                        "service_level", "unmet", "weights")}
        run = run_on_dask("backtest", engine, kwargs, out_dir, console, classify_options=copts,
                          holdout=bopts["holdout"], origins=bopts["origins"], step=bopts["step"],
                          backtest_options=extra, **fopts)
        console.say(f"wrote {out_dir}; left out on Dask: {', '.join(run.not_combined) or 'nothing'}")
        return
    panel, _, source = load_input(kwargs, console)
    from .route import load_overrides

    overrides = fopts.pop("overrides")
    result = backtest(
        panel,
        overrides=load_overrides(overrides) if overrides is not None else None,
        classify_options=copts,
        progress=console.progress,
        **fopts,
        **bopts,
    )
    with staged_output(out_dir) as stage:
        write_table(result.scores, stage / f"scores.{fmt}")
        write_table(result.item_scores, stage / f"item_scores.{fmt}")
        write_manifest(stage, "backtest", source, classify_options=copts, backtest_options=bopts)
    click.echo(result.summary_text())
    console.say(f"wrote {out_dir}/scores.{fmt} and {out_dir}/item_scores.{fmt}")


# ------------------------------------------------------------------ stock


def stock_options(func):
    options = [
        click.option("--lead-time", default=None, type=click.IntRange(min=0),
                     help="Replenishment lead time in periods (same for every item)."),
        click.option("--lead-time-column", default=None,
                     help="Input column with each item's lead time in periods (constant per item)."),
        click.option("--review-period", default=1, show_default=True, type=click.IntRange(min=1),
                     help="Periods between reviews of the order-up-to policy."),
        click.option("--service-level", default=None, type=float,
                     help="Target cycle service level (probability of no stock-out per cycle)."),
        click.option("--fill-rate", default=None, type=float,
                     help="Target fill rate (share of demand met from stock); instead of --service-level."),
        click.option("--on-hand", "on_hand_file", default=None,
                     type=click.Path(dir_okay=False, path_type=Path),
                     help="CSV snapshot of current stock: item, on_hand and optionally on_order columns."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def pop_stock_options(kwargs: dict) -> dict:
    opts = {k: kwargs.pop(k) for k in ("lead_time", "lead_time_column", "review_period",
                                       "service_level", "fill_rate", "on_hand_file")}
    if (opts["lead_time"] is None) == (opts["lead_time_column"] is None):
        raise InputError("give exactly one of --lead-time and --lead-time-column")
    if opts["service_level"] is None and opts["fill_rate"] is None:
        opts["service_level"] = 0.95
    if opts["lead_time_column"]:
        kwargs["attribute_columns"] = tuple(kwargs["attribute_columns"]) + (opts["lead_time_column"],)
    return opts


def read_on_hand(path: Path, items, *, item_column: str = "item"):
    """Current stock per item from a snapshot CSV, aligned to ``items`` (NaN where absent)."""
    from .io import load_frame

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


def lead_times(panel, opts: dict):
    """Lead time per item: the option, or the item's value in the lead-time column."""
    column = opts["lead_time_column"]
    if column is None:
        return opts["lead_time"]
    raw = panel.attribute(column)
    vals = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(vals) | (vals < 0) | (vals != np.round(vals))
    if bad.any():
        item = panel.items[int(np.flatnonzero(bad)[0])]
        raise InputError(f"--lead-time-column {column}: item {item!r} has lead time "
                         f"{raw.iloc[int(np.flatnonzero(bad)[0])]!r}, not a whole number >= 0")
    return vals.astype(np.int64)


def compute_stock(result, opts: dict, *, snapshot: pd.DataFrame | None = None):
    """Stock targets for a routed forecast, with the CLI's options.

    ``snapshot`` (current ``on_hand`` and ``on_order`` indexed by item, already
    checked against every item) is read from ``opts["on_hand_file"]`` when not
    given; the Dask engine passes the one it checked for all partitions.
    """
    from .stock import stock_targets

    panel = result.panel
    if snapshot is None and opts["on_hand_file"] is not None:
        snapshot = pd.DataFrame(read_on_hand(opts["on_hand_file"], panel.items), index=panel.items)
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
        lead_time=lead_times(panel, opts),
        review_period=opts["review_period"],
        service_level=opts["service_level"],
        fill_rate=opts["fill_rate"],
        history=panel,
        items=panel.items,
        seed=opts.get("seed", 0),
        **extra,
    )


@cli.command("stock")
@input_options
@classify_options
@forecast_options
@stock_options
@engine_options
@output_options("Folder for stock.csv (and the forecasts and audit behind it).")
def stock_cmd(out_dir: Path, fmt: str, **kwargs) -> None:
    """Reorder points and order-up-to levels from the routed forecast distributions."""
    from .io import staged_output, write_table
    from .stock import totals_text

    console = Console(kwargs.pop("quiet"))
    copts = pop_classify_options(kwargs)
    fopts = pop_forecast_options(kwargs)
    sopts = pop_stock_options(kwargs)
    engine = pop_engine(kwargs, fmt)
    if engine is not None:
        run = run_on_dask("stock", engine, kwargs, out_dir, console, classify_options=copts,
                          **fopts, **sopts)
        click.echo(totals_text(pd.read_parquet(run.paths["stock"])))
        return
    sopts["seed"] = fopts["seed"]
    panel, _, source = load_input(kwargs, console)
    # The forecast must cover the whole protection interval (lead time + review period).
    horizon = int(np.max(lead_times(panel, sopts))) + sopts["review_period"]
    result = routed_forecast(panel, horizon, fopts, copts, console)
    table = compute_stock(result, sopts)
    with staged_output(out_dir) as stage:
        write_table(table, stage / f"stock.{fmt}")
        write_routed(stage, result, fmt)
        write_manifest(stage, "stock", source, horizon=horizon, classify_options=copts,
                       forecast_options=fopts, stock_options=sopts)
    click.echo(totals_text(table))
    console.say(f"wrote {out_dir}/stock.{fmt}")


# ------------------------------------------------------------------ report


@cli.command("report")
@click.argument("run_dir", metavar="DIR", type=click.Path(path_type=Path))
@click.option("--out", "out_file", default=None, type=click.Path(dir_okay=False, path_type=Path),
              help="HTML file to write (default DIR/report.html).")
@click.option("--title", default="Demand, forecast and stock report", show_default=True)
@click.option("--item-pages", default=25, show_default=True, type=click.IntRange(0, 500),
              help="Most item pages (top items by value, then flagged items).")
@click.option("--quiet", is_flag=True, default=False)
def report_cmd(run_dir: Path, out_file: Path | None, title: str, item_pages: int, quiet: bool) -> None:
    """One self-contained HTML report from a run folder (forecast, backtest, stock outputs)."""
    from .report import build_report

    console = Console(quiet)
    path = build_report(run_dir, out=out_file, title=title, max_item_pages=item_pages)
    console.say(f"wrote {path}")


# ------------------------------------------------------------------ entry point


def main(argv: list[str] | None = None) -> None:
    """Console-script entry point: one-line errors, exit code 2 for bad input."""
    try:
        code = cli.main(args=argv, prog_name="sparsedemand", standalone_mode=False)
    except click.exceptions.NoArgsIsHelpError as exc:  # pragma: no cover - click >= 8.2
        click.echo(exc.ctx.get_help() if exc.ctx else str(exc), err=True)
        sys.exit(2)
    except click.UsageError as exc:
        where = exc.ctx.command_path if exc.ctx is not None else "sparsedemand"
        click.echo(f"error: {where}: {exc.format_message()} (see --help)", err=True)
        sys.exit(2)
    except click.ClickException as exc:
        click.echo(f"error: {exc.format_message()}", err=True)
        sys.exit(exc.exit_code)
    except click.Abort:
        click.echo("error: aborted", err=True)
        sys.exit(1)
    except InputError as exc:
        click.echo(f"error: {exc}", err=True)
        sys.exit(2)
    except OSError as exc:
        name = exc.filename or ""
        click.echo(f"error: {name}{': ' if name else ''}{exc.strerror or exc}", err=True)
        sys.exit(2)
    except KeyboardInterrupt:
        click.echo("error: interrupted", err=True)
        sys.exit(130)
    except Exception as exc:  # a bug, not bad input: keep it to one line unless asked
        if os.environ.get("SPARSEDEMAND_DEBUG"):
            raise
        click.echo(
            f"internal error: {type(exc).__name__}: {exc} "
            "(set SPARSEDEMAND_DEBUG=1 for the traceback and please report it)",
            err=True,
        )
        sys.exit(1)
    sys.exit(code if isinstance(code, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()

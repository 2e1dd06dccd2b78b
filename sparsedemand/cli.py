"""The ``sparsedemand`` command line: parsing and printing only.

Every command turns its options into the settings of :mod:`sparsedemand.runs`,
reads and validates its input through :mod:`sparsedemand.io`, prints the load
summary to stderr, runs the command through the runs layer (or the Dask
engine) and writes its outputs atomically. Bad input ends with one line
``error: ...`` and exit code 2, never a traceback.
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import sys
from dataclasses import dataclass
from pathlib import Path

import click

from ._version import __version__
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


@dataclass(frozen=True)
class InputSpec:
    """What the shared input options say: the file, its layout, columns and calendar."""

    path: Path
    layout: str
    columns: Columns
    frequency: str | None
    net_returns: bool

    def source(self) -> dict:
        """The input's part of ``run.json``."""
        return {"input": str(Path(self.path).resolve()), "layout": self.layout,
                "columns": dataclasses.asdict(self.columns), "frequency": self.frequency,
                "net_returns": self.net_returns}

    def with_attribute(self, column: str | None) -> InputSpec:
        """The same input, also keeping ``column`` as a per-item attribute."""
        if not column:
            return self
        columns = dataclasses.replace(self.columns, attributes=(*self.columns.attributes, column))
        return dataclasses.replace(self, columns=columns)


def input_spec(input_path: Path, *, layout: str, item_column: str, period_column: str, quantity_column: str,
               availability_column: str | None, location_column: str, category_column: str, price_column: str,
               attribute_columns: tuple[str, ...], frequency: str | None, net_returns: bool) -> InputSpec:
    """The shared input options as one object."""
    columns = Columns(item=item_column, period=period_column, quantity=quantity_column,
                      availability=availability_column, location=location_column, category=category_column,
                      unit_price=price_column, attributes=tuple(attribute_columns))
    return InputSpec(input_path, layout, columns, frequency, net_returns)


def load_input(spec: InputSpec, console: Console):
    """Read the input named by the shared options; print the load summary."""
    panel, summary = read_demand(spec.path, layout=spec.layout, columns=spec.columns, frequency=spec.frequency,
                                 net_returns=spec.net_returns)
    console.say(summary.text())
    return panel, summary


def write_manifest(stage: Path, command: str, source: dict, settings: dict) -> None:
    """``run.json``: what was read and how, so the report can find the history again."""
    import json

    from .io import write_text

    manifest = {"command": command, "version": __version__, **source, **settings}
    write_text(json.dumps(manifest, indent=2, default=str) + "\n", stage / "run.json")


def write_run(out_dir: Path, tables: dict, fmt: str, *, command: str, source: dict, settings: dict) -> None:
    """A run folder: every table as ``NAME.fmt`` and ``run.json``, moved into place together."""
    from .io import staged_output, write_table

    with staged_output(out_dir) as stage:
        for name, frame in tables.items():
            write_table(frame, stage / f"{name}.{fmt}")
        write_manifest(stage, command, source, settings)


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


@dataclass(frozen=True)
class DaskSpec:
    """Where a Dask run goes: a scheduler address (or a local cluster of ``workers``) and the partitions."""

    scheduler: str | None
    workers: int
    partitions: int | None


def dask_spec(*, engine: str, scheduler: str | None, workers: int, partitions: int | None, layout: str,
              fmt: str) -> DaskSpec | None:
    """The Dask settings, or None for the local engine (unused Dask options are errors)."""
    if engine == "local":
        for option, value in (("scheduler", scheduler), ("partitions", partitions)):
            if value is not None:
                raise InputError(f"--{option} needs --engine dask")
        return None
    if layout == "wide":
        raise InputError("--engine dask reads the long layout only (one row per item and period)")
    if fmt != "parquet":
        raise InputError("--engine dask writes partitioned Parquet: add --format parquet")
    return DaskSpec(scheduler, workers, partitions)


def run_on_dask(command: str, settings, dask: DaskSpec, spec: InputSpec, out_dir: Path, console: Console):
    """Run one command on Dask with the CLI's settings; returns the engine's run record."""
    try:
        from .engine import run_settings
    except ImportError:
        raise InputError("--engine dask needs the dask extra: pip install 'sparsedemand[dask]'") from None

    run = run_settings(command, spec.path, settings, out_dir=out_dir, scheduler=dask.scheduler,
                       n_workers=dask.workers, partitions=dask.partitions, columns=spec.columns,
                       frequency=spec.frequency, net_returns=spec.net_returns)
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


def classify_settings(*, adi_cutoff: float, cv2_cutoff: float, class_rule: str, min_demands: int,
                      min_periods: int, quiet_factor: float, quiet_min: int):
    """The classifier options as settings (``--quiet-factor 0`` turns the check off)."""
    from .runs import ClassifySettings

    return ClassifySettings(adi_cutoff=adi_cutoff, cv2_cutoff=cv2_cutoff, rule=class_rule,
                            min_demands=min_demands, min_periods=min_periods,
                            quiet_factor=None if quiet_factor == 0 else quiet_factor, quiet_min=quiet_min)


def input_and_classify(func):
    """The shared input options and the classifier's options, in the order ``--help`` lists them."""
    return input_options(classify_options(func))


@cli.command("classify")
@input_and_classify
@click.option("--out", "out_file", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Table of patterns, one row per item (.csv or .parquet).")
def classify_cmd(input_path: Path, layout: str, item_column: str, period_column: str, quantity_column: str,
                 availability_column: str | None, location_column: str, category_column: str, price_column: str,
                 attribute_columns: tuple[str, ...], frequency: str | None, net_returns: bool, quiet: bool,
                 adi_cutoff: float, cv2_cutoff: float, class_rule: str, min_demands: int, min_periods: int,
                 quiet_factor: float, quiet_min: int, out_file: Path) -> None:
    """Sort every item into smooth, erratic, intermittent or lumpy demand, and say why."""
    from .io import write_table
    from .runs import classify_run

    console = Console(quiet)
    settings = classify_settings(adi_cutoff=adi_cutoff, cv2_cutoff=cv2_cutoff, class_rule=class_rule,
                                 min_demands=min_demands, min_periods=min_periods, quiet_factor=quiet_factor,
                                 quiet_min=quiet_min)
    spec = input_spec(input_path, layout=layout, item_column=item_column, period_column=period_column,
                      quantity_column=quantity_column, availability_column=availability_column,
                      location_column=location_column, category_column=category_column,
                      price_column=price_column, attribute_columns=attribute_columns, frequency=frequency,
                      net_returns=net_returns)
    panel, _ = load_input(spec, console)
    run = classify_run(panel, settings)
    write_table(run.tables["patterns"], out_file)
    click.echo(run.summary)
    console.say(f"wrote {out_file}")


# ------------------------------------------------------------------ forecast


def parse_levels(text: str) -> tuple[float, ...]:
    """``--quantiles``: levels separated by commas."""
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


def forecast_settings(*, horizon: int | None, levels: str, policy_file: Path | None, override_file: Path | None,
                      cost: str, selection: str, seed: int, classify):
    """The forecast options as settings; the policy file is read and checked before the input."""
    from .route import load_policy
    from .runs import ForecastSettings

    return ForecastSettings(horizon=horizon, levels=parse_levels(levels),
                            policy=load_policy(policy_file) if policy_file is not None else None,
                            overrides=override_file, cost=cost, selection=selection, seed=seed, classify=classify)


@cli.command("forecast")
@input_and_classify
@horizon_option
@forecast_options
@engine_options
@output_options("Folder for forecasts and the audit table.")
def forecast_cmd(input_path: Path, layout: str, item_column: str, period_column: str, quantity_column: str,
                 availability_column: str | None, location_column: str, category_column: str, price_column: str,
                 attribute_columns: tuple[str, ...], frequency: str | None, net_returns: bool, quiet: bool,
                 adi_cutoff: float, cv2_cutoff: float, class_rule: str, min_demands: int, min_periods: int,
                 quiet_factor: float, quiet_min: int, horizon: int, levels: str, policy_file: Path | None,
                 override_file: Path | None, cost: str, selection: str, seed: int, engine: str,
                 scheduler: str | None, workers: int, partitions: int | None, out_dir: Path, fmt: str) -> None:
    """Route every item to a suitable method and forecast, with an audit trail."""
    from .runs import forecast_run, format_table

    console = Console(quiet)
    classify = classify_settings(adi_cutoff=adi_cutoff, cv2_cutoff=cv2_cutoff, class_rule=class_rule,
                                 min_demands=min_demands, min_periods=min_periods, quiet_factor=quiet_factor,
                                 quiet_min=quiet_min)
    settings = forecast_settings(horizon=horizon, levels=levels, policy_file=policy_file,
                                 override_file=override_file, cost=cost, selection=selection, seed=seed,
                                 classify=classify)
    dask = dask_spec(engine=engine, scheduler=scheduler, workers=workers, partitions=partitions, layout=layout,
                     fmt=fmt)
    spec = input_spec(input_path, layout=layout, item_column=item_column, period_column=period_column,
                      quantity_column=quantity_column, availability_column=availability_column,
                      location_column=location_column, category_column=category_column,
                      price_column=price_column, attribute_columns=attribute_columns, frequency=frequency,
                      net_returns=net_returns)
    if dask is not None:
        run = run_on_dask("forecast", settings, dask, spec, out_dir, console)
        click.echo(format_table(run.routing))
        console.say(f"wrote {out_dir} ({run.partitions} partitions)")
        return
    panel, _ = load_input(spec, console)
    run = forecast_run(panel, settings, progress=console.progress)
    write_run(out_dir, run.tables, fmt, command="forecast", source=spec.source(),
              settings={"horizon": horizon, "classify_options": classify.options(),
                        "forecast_options": settings.manifest()})
    click.echo(run.summary)
    console.say(f"wrote {out_dir}/forecasts.{fmt} and {out_dir}/audit.{fmt}")


# ------------------------------------------------------------------ backtest


def backtest_options(func):
    """Options of the backtest: origins, methods compared, the simulated stock policy, weights."""
    options = [
        click.option("--holdout", required=True, type=int, help="Periods scored after each origin."),
        click.option("--origins", default=1, show_default=True, type=int,
                     help="Forecast origins (rolling origin, expanding window)."),
        click.option("--step", default=None, type=int, help="Periods between origins (default: --holdout)."),
        click.option("--methods", "method_list", default=None,
                     help="Methods to compare, comma separated (default: every method)."),
        click.option("--baseline", default="mean_since_first", show_default=True,
                     help="Method the relative MAE divides by."),
        click.option("--lead-time", "sim_lead_time", default=1, show_default=True, type=int,
                     help="Lead time of the simulated order-up-to policy."),
        click.option("--review-period", "sim_review", default=1, show_default=True, type=int,
                     help="Review period of the simulated policy."),
        click.option("--service-level", "sim_service", default=0.95, show_default=True, type=float,
                     help="Quantile of lead-time-plus-review demand the simulated policy orders up to."),
        click.option("--unmet", type=click.Choice(["lost", "backorder"]), default="lost", show_default=True,
                     help="What happens to demand the simulated stock cannot serve."),
        click.option("--weights", type=click.Choice(["volume", "value"]), default="volume", show_default=True,
                     help="Weighting of the weighted scores (value = unit price x units)."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


@cli.command("backtest")
@input_and_classify
@forecast_options
@backtest_options
@engine_options
@output_options("Folder for scores.csv and item_scores.csv.")
def backtest_cmd(input_path: Path, layout: str, item_column: str, period_column: str, quantity_column: str,
                 availability_column: str | None, location_column: str, category_column: str, price_column: str,
                 attribute_columns: tuple[str, ...], frequency: str | None, net_returns: bool, quiet: bool,
                 adi_cutoff: float, cv2_cutoff: float, class_rule: str, min_demands: int, min_periods: int,
                 quiet_factor: float, quiet_min: int, levels: str, policy_file: Path | None,
                 override_file: Path | None, cost: str, selection: str, seed: int, holdout: int, origins: int,
                 step: int | None, method_list: str | None, baseline: str, sim_lead_time: int, sim_review: int,
                 sim_service: float, unmet: str, weights: str, engine: str, scheduler: str | None, workers: int,
                 partitions: int | None, out_dir: Path, fmt: str) -> None:
    """Score every method, the router and the naive baselines on your own history."""
    from .runs import BacktestSettings, backtest_run

    console = Console(quiet)
    classify = classify_settings(adi_cutoff=adi_cutoff, cv2_cutoff=cv2_cutoff, class_rule=class_rule,
                                 min_demands=min_demands, min_periods=min_periods, quiet_factor=quiet_factor,
                                 quiet_min=quiet_min)
    forecast = forecast_settings(horizon=None, levels=levels, policy_file=policy_file, override_file=override_file,
                                 cost=cost, selection=selection, seed=seed, classify=classify)
    methods = None if method_list is None else tuple(m.strip() for m in method_list.split(",") if m.strip())
    settings = BacktestSettings(holdout=holdout, origins=origins, step=step, methods=methods, baseline=baseline,
                                lead_time=sim_lead_time, review_period=sim_review, service_level=sim_service,
                                unmet=unmet, weights=weights, forecast=forecast)
    dask = dask_spec(engine=engine, scheduler=scheduler, workers=workers, partitions=partitions, layout=layout,
                     fmt=fmt)
    spec = input_spec(input_path, layout=layout, item_column=item_column, period_column=period_column,
                      quantity_column=quantity_column, availability_column=availability_column,
                      location_column=location_column, category_column=category_column,
                      price_column=price_column, attribute_columns=attribute_columns, frequency=frequency,
                      net_returns=net_returns)
    if dask is not None:
        run = run_on_dask("backtest", settings, dask, spec, out_dir, console)
        console.say(f"wrote {out_dir}; left out on Dask: {', '.join(run.not_combined) or 'nothing'}")
        return
    panel, _ = load_input(spec, console)
    run = backtest_run(panel, settings, progress=console.progress)
    write_run(out_dir, run.tables, fmt, command="backtest", source=spec.source(),
              settings={"classify_options": classify.options(), "backtest_options": settings.manifest()})
    click.echo(run.summary)
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


@cli.command("stock")
@input_and_classify
@forecast_options
@stock_options
@engine_options
@output_options("Folder for stock.csv (and the forecasts and audit behind it).")
def stock_cmd(input_path: Path, layout: str, item_column: str, period_column: str, quantity_column: str,
              availability_column: str | None, location_column: str, category_column: str, price_column: str,
              attribute_columns: tuple[str, ...], frequency: str | None, net_returns: bool, quiet: bool,
              adi_cutoff: float, cv2_cutoff: float, class_rule: str, min_demands: int, min_periods: int,
              quiet_factor: float, quiet_min: int, levels: str, policy_file: Path | None,
              override_file: Path | None, cost: str, selection: str, seed: int, lead_time: int | None,
              lead_time_column: str | None, review_period: int, service_level: float | None,
              fill_rate: float | None, on_hand_file: Path | None, engine: str, scheduler: str | None,
              workers: int, partitions: int | None, out_dir: Path, fmt: str) -> None:
    """Reorder points and order-up-to levels from the routed forecast distributions."""
    import pandas as pd

    from .runs import StockSettings, stock_run
    from .stock import totals_text

    console = Console(quiet)
    classify = classify_settings(adi_cutoff=adi_cutoff, cv2_cutoff=cv2_cutoff, class_rule=class_rule,
                                 min_demands=min_demands, min_periods=min_periods, quiet_factor=quiet_factor,
                                 quiet_min=quiet_min)
    forecast = forecast_settings(horizon=None, levels=levels, policy_file=policy_file, override_file=override_file,
                                 cost=cost, selection=selection, seed=seed, classify=classify)
    settings = StockSettings(lead_time=lead_time, lead_time_column=lead_time_column, review_period=review_period,
                             service_level=service_level, fill_rate=fill_rate, on_hand_file=on_hand_file,
                             seed=seed, forecast=forecast)
    spec = input_spec(input_path, layout=layout, item_column=item_column, period_column=period_column,
                      quantity_column=quantity_column, availability_column=availability_column,
                      location_column=location_column, category_column=category_column,
                      price_column=price_column, attribute_columns=attribute_columns, frequency=frequency,
                      net_returns=net_returns).with_attribute(lead_time_column)
    dask = dask_spec(engine=engine, scheduler=scheduler, workers=workers, partitions=partitions, layout=layout,
                     fmt=fmt)
    if dask is not None:
        run = run_on_dask("stock", settings, dask, spec, out_dir, console)
        click.echo(totals_text(pd.read_parquet(run.paths["stock"])))
        return
    panel, _ = load_input(spec, console)
    run = stock_run(panel, settings, progress=console.progress)
    write_run(out_dir, run.tables, fmt, command="stock", source=spec.source(),
              settings={"horizon": run.horizon, "classify_options": classify.options(),
                        "forecast_options": forecast.manifest(), "stock_options": settings.manifest()})
    click.echo(run.summary)
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

"""The built-in demo scenario: an invented regional distributor of replacement parts.

The invented business supplies replacement parts for farm and
light-industrial machinery from three depots (North, River and Hill).
Roughly three years of daily history cover every kind of demand a planner
meets: a handful of steady fast movers with a weekly cycle (fasteners and
filters), erratic lines, the many intermittent and lumpy spares, parts
introduced part-way through, parts that stop selling, level shifts, a few
listed parts that never sold, and stock-out episodes recorded in an ``in_stock``
column (sales during them are lost, so their zeros are censored).

The generator is deterministic for a given seed. Only rows with a sale or a
stock-out are written, plus each part's first listed day and the last day of
the calendar, so missing days are true zeros under the loader's calendar rule.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = ["DemoSpec", "make_demo", "DEMO_START", "DEMO_DAYS", "DEMO_ATTRIBUTES"]

DEMO_START = "2023-12-04"  # a Monday, so weeks line up
DEMO_DAYS = 1092  # 156 whole weeks
DEMO_ATTRIBUTES = ("location", "category", "unit_price", "lead_time", "safety_critical")

_DEPOTS = (("NOR", "North depot"), ("RIV", "River depot"), ("HIL", "Hill depot"))
# code, name, price median, price spread, share of parts, safety critical
_CATEGORIES = (
    ("FAS", "fasteners", 0.6, 0.5, 0.06, False),
    ("FIL", "filters", 9.0, 0.4, 0.10, False),
    ("BRG", "bearings", 24.0, 0.7, 0.18, False),
    ("SEA", "seals and gaskets", 6.0, 0.6, 0.16, False),
    ("BLT", "belts and chains", 31.0, 0.6, 0.14, False),
    ("ELE", "electrical", 48.0, 0.8, 0.14, False),
    ("HYD", "hydraulics", 115.0, 0.7, 0.12, False),
    ("BRK", "brake parts", 72.0, 0.6, 0.10, True),
)
_WEEKDAY = np.array([1.35, 1.2, 1.15, 1.1, 1.0, 0.15, 0.05])  # Mon..Sun order intake


@dataclass(frozen=True)
class DemoSpec:
    """Size of the demo assortment.

    Parameters
    ----------
    parts : int
        Part numbers in the catalogue; each is stocked at one to three depots.
    days : int
        Days of history.
    seed : int
        Seed of the generator.
    """

    parts: int = 1200
    days: int = DEMO_DAYS
    seed: int = 7


def _kind_weights(category: str) -> dict[str, float]:
    if category == "FAS":
        return {"fast": 0.55, "smooth": 0.25, "erratic": 0.1, "intermittent": 0.1}
    if category == "FIL":
        return {"fast": 0.15, "smooth": 0.3, "erratic": 0.15, "intermittent": 0.25, "lumpy": 0.15}
    return {"smooth": 0.03, "erratic": 0.04, "intermittent": 0.48, "lumpy": 0.45}


def _simulate_series(rng: np.random.Generator, kind: str, days: int, weekday: np.ndarray):
    """Daily demand and stock-out flags for one series; returns (demand, in_stock, introduced)."""
    level = np.ones(days)
    if rng.random() < 0.2:  # level shift
        at = rng.integers(days // 4, 3 * days // 4)
        level[at:] = rng.choice([0.4, 0.6, 1.8, 2.5])
    introduced = 0
    if rng.random() < 0.08:
        introduced = int(rng.integers(days // 5, 4 * days // 5))
    stop = days
    first_stop = max(introduced + 60, days // 2)
    if rng.random() < 0.07 and first_stop < days - 90:
        stop = int(rng.integers(first_stop, days - 90))
    if kind == "fast":
        rate = rng.uniform(3.0, 14.0) * weekday * level
        demand = rng.poisson(rate).astype(float)
    else:
        p_occ, size_mean, size_cv = {
            "smooth": (rng.uniform(0.8, 0.95), rng.uniform(2.0, 6.0), rng.uniform(0.15, 0.45)),
            "erratic": (rng.uniform(0.8, 0.95), rng.uniform(3.0, 12.0), rng.uniform(0.9, 1.6)),
            "intermittent": (rng.uniform(0.01, 0.2), rng.uniform(1.0, 3.0), rng.uniform(0.0, 0.45)),
            "lumpy": (rng.uniform(0.005, 0.12), rng.uniform(2.0, 15.0), rng.uniform(0.9, 2.0)),
        }[kind]
        # Frequent lines are ordered every day (workshops run weekends); slow ones follow the week.
        profile = np.ones(days) if kind in ("smooth", "erratic") else weekday / weekday.mean()
        occ = rng.random(days) < np.clip(p_occ * level * profile, 0, 0.99)
        if size_cv < 0.05:
            sizes = np.full(days, max(1.0, round(size_mean)))
        else:
            shape = 1.0 / size_cv**2
            sizes = 1.0 + np.floor(rng.gamma(shape, max(size_mean - 1.0, 0.2) / shape, days) + 0.5)
        demand = np.where(occ, sizes, 0.0)
    demand[:introduced] = 0.0
    demand[stop:] = 0.0
    in_stock = np.ones(days, dtype=np.int8)
    if rng.random() < 0.18:
        for _ in range(rng.integers(1, 4)):
            begin = int(rng.integers(introduced, days - 5))
            length = int(rng.integers(5, 40))
            in_stock[begin : begin + length] = 0
        demand[in_stock == 0] = 0.0  # sales lost while out of stock
    return demand, in_stock, introduced


def make_demo(spec: DemoSpec | None = None) -> pd.DataFrame:
    """Generate the demo history as a long table.

    Parameters
    ----------
    spec : DemoSpec, optional
        Size and seed; the default gives about 2,000 part-depot series.

    Returns
    -------
    pandas.DataFrame
        Columns ``item``, ``period``, ``quantity``, ``in_stock``, ``location``,
        ``category``, ``unit_price``, ``lead_time`` (days) and
        ``safety_critical`` (0/1).

    Examples
    --------
    >>> table = make_demo(DemoSpec(parts=20, days=120, seed=1))
    >>> sorted(table.columns)[:3]
    ['category', 'in_stock', 'item']
    """
    spec = spec or DemoSpec()
    if spec.parts < 1:
        raise InputError(f"demo parts must be at least 1, got {spec.parts}")
    if spec.days < 28:
        raise InputError(f"demo days must be at least 28, got {spec.days}")
    if spec.parts > 200_000:
        raise InputError(f"demo parts must be at most 200,000, got {spec.parts}")
    rng = np.random.default_rng(spec.seed)
    dates = pd.date_range(DEMO_START, periods=spec.days, freq="D")
    weekday = _WEEKDAY[dates.day_of_week]
    labels = dates.strftime("%Y-%m-%d").to_numpy()
    shares = np.array([c[4] for c in _CATEGORIES])
    cat_idx = rng.choice(len(_CATEGORIES), size=spec.parts, p=shares / shares.sum())
    cols: dict[str, list] = {k: [] for k in ("series", "day", "quantity", "in_stock")}
    series_rows = []
    for part in range(spec.parts):
        code, cat_name, price_med, price_sd, _, critical = _CATEGORIES[cat_idx[part]]
        price = round(float(price_med * np.exp(rng.normal(0.0, price_sd))), 2)
        n_depots = rng.choice([1, 2, 3], p=[0.5, 0.35, 0.15])
        depots = rng.choice(len(_DEPOTS), size=n_depots, replace=False)
        weights = _kind_weights(code)
        kinds, probs = list(weights), np.array(list(weights.values()))
        never_sold = rng.random() < 0.01
        for d in sorted(depots):
            kind = kinds[rng.choice(len(kinds), p=probs / probs.sum())]
            demand, in_stock, introduced = _simulate_series(rng, kind, spec.days, weekday)
            if never_sold:
                demand[:] = 0.0
            keep = (demand > 0) | (in_stock == 0)
            keep[introduced] = True
            keep[-1] = True
            idx = np.flatnonzero(keep)
            depot_code, depot_name = _DEPOTS[d]
            cols["series"].append(np.full(idx.size, len(series_rows)))
            cols["day"].append(idx)
            cols["quantity"].append(demand[idx].astype(np.int64))
            cols["in_stock"].append(in_stock[idx])
            series_rows.append(
                (
                    f"{depot_code}-{code}{part + 1:04d}",
                    depot_name,
                    cat_name,
                    price,
                    int(rng.choice([3, 5, 7, 10, 14, 21])),
                    int(critical),
                )
            )
    series = np.concatenate(cols["series"])
    info = pd.DataFrame(
        series_rows,
        columns=["item", "location", "category", "unit_price", "lead_time", "safety_critical"],
    )
    table = info.iloc[series].reset_index(drop=True)
    table.insert(1, "period", labels[np.concatenate(cols["day"])])
    table.insert(2, "quantity", np.concatenate(cols["quantity"]))
    table.insert(3, "in_stock", np.concatenate(cols["in_stock"]))
    return table


def run_demo(
    out_dir,
    *,
    parts: int = 1200,
    seed: int = 7,
    horizon: int = 28,
    data_only: bool = False,
    say=print,
) -> dict:
    """Write the demo history to ``out_dir/demand.csv`` and run the whole job on it.

    The job reads the file back through the same loader a user's file goes
    through, then classifies, forecasts, backtests, sets stock targets and
    writes the report. Returns the paths written.

    Examples
    --------
    >>> run_demo("demo-output", parts=50)  # doctest: +SKIP
    """
    from pathlib import Path

    from .io import Columns, read_demand, staged_output, write_table

    out = Path(out_dir)
    table = make_demo(DemoSpec(parts=parts, seed=seed))
    written = {}
    with staged_output(out) as stage:
        write_table(table, stage / "demand.csv")
    written["demand"] = out / "demand.csv"
    say(f"wrote the demo history: {out / 'demand.csv'} ({len(table):,} rows)")
    if data_only:
        return written
    columns = Columns(attributes=("lead_time", "safety_critical"))
    panel, summary = read_demand(out / "demand.csv", columns=columns)
    say(summary.text())
    written.update(run_job(panel, out, horizon=horizon, seed=seed, say=say))
    return written


def run_job(panel, out, *, horizon: int, seed: int, say=print, lead_time_column: str = "lead_time",
            service_level: float = 0.95, review_period: int = 1) -> dict:
    """Classify, forecast, backtest, stock and report on one panel (the demo's chain).

    The forecast runs over the demo's horizon; the stock targets use that
    forecast; the backtest holds out one horizon at three origins.
    """
    from pathlib import Path

    from .classify import pattern_summary
    from .io import staged_output, write_table
    from .report import build_report
    from .runs import BacktestSettings, ForecastSettings, StockSettings, backtest_run, forecast_run, format_table
    from .runs import stock_table
    from .stock import totals_text

    out = Path(out)
    forecast = forecast_run(panel, ForecastSettings(horizon=horizon, seed=seed))
    result = forecast.result
    say("patterns:\n" + format_table(pattern_summary(result.classes, panel)))
    stock = stock_table(result, StockSettings(lead_time_column=lead_time_column, review_period=review_period,
                                              service_level=service_level, seed=seed))
    tables = {"patterns": result.classes, "forecasts": result.table(), "audit": result.audit,
              "stock": stock}
    scores = backtest_run(panel, BacktestSettings(holdout=horizon, origins=3, forecast=ForecastSettings(seed=seed)))
    say(scores.summary)
    tables.update(scores.tables)
    with staged_output(out) as stage:
        for name, frame in tables.items():
            write_table(frame, stage / f"{name}.csv")
    written = {name: out / f"{name}.csv" for name in tables}
    say(totals_text(stock))
    written["report"] = build_report(out, out=out / "report.html", history=panel)
    say(f"wrote {len(written)} files to {out}; open {written['report']} in a browser")
    return written

"""Every stage of a planning run, timed and measured on seeded synthetic panels.

Run from the repository root::

    python benchmarks/run_all.py            # full: 30,000 x 1,941 daily, 200,000 x 156 weekly
    python benchmarks/run_all.py --quick    # small panels, under a minute: a smoke check

The full run writes ``benchmarks/RESULTS.md``; ``--quick`` writes
``benchmarks/data/RESULTS-quick.md`` so it never replaces the full figures.
The synthetic histories are written once as long-format Parquet files under
``benchmarks/data/`` (git-ignored) and reused.

For each panel and stage (load from Parquet, classify, the shared event
extraction, every method with fixed and with optimised constants, the routed
forecast with quantiles, the backtest, stock targets) the results give the
wall time, the process CPU time, the time as a multiple of one numpy
``sum()`` over the same array measured in the same run, and the extra peak
resident memory of the call as a multiple of the panel's demand array. A
per-item pure-Python loop of the same recurrences, timed on a sample of items
and extrapolated, is the reference for what a straightforward script costs.
The whole command-line run (``sparsedemand forecast FILE --horizon 28 --out
DIR``) is timed end to end in a subprocess, twice.
"""

from __future__ import annotations

import argparse
import ctypes
import functools
import gc
import math
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numba
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from scipy.optimize import minimize, minimize_scalar

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

from bench_classify import cpu_model, synthetic_panel  # noqa: E402

import sparsedemand  # noqa: E402
from sparsedemand import methods  # noqa: E402
from sparsedemand.classify import PATTERNS, STATUSES, classify  # noqa: E402
from sparsedemand.errors import InputError  # noqa: E402
from sparsedemand.io import read_demand  # noqa: E402
from sparsedemand.methods.events import worker_count  # noqa: E402
from sparsedemand.route import Rule, _routed_options, forecast  # noqa: E402
from sparsedemand.stock import stock_targets  # noqa: E402

DATA = HERE / "data"
HORIZON = 28
FORMAT_VERSION = 1  # bump when the generator or the file layout changes
WARM_ITEMS = 50  # items of the warm-up call that loads (or compiles) every kernel

# --------------------------------------------------------------------- targets
MAX_SUM_RATIO = 150.0  # routed forecast, as a multiple of one numpy sum()
MIN_LOOP_SPEEDUP = 100.0  # routed forecast against the per-item Python loop
MAX_MEMORY_RATIO = 3.0  # extra peak memory of the routed forecast / panel size
MAX_CLI_SECONDS = 60.0  # whole command-line run, warm cache


@dataclass(frozen=True)
class PanelSpec:
    """A synthetic panel: its size, calendar step and seed."""

    label: str
    n_items: int
    n_periods: int
    step: str  # "day" or "week"
    seed: int
    sample: int  # items timed in the per-item Python loop, constants fixed
    opt_sample: int  # items timed in the per-item Python loop, constants optimised
    repeats: int  # timed repeats of the quick stages
    backtest_items: int | None = None  # backtest on this many random items, scaled (None: all)
    profile_items: int | None = None  # items of the profiled backtest (None: all)

    @property
    def name(self) -> str:
        return f"{self.n_items:,} x {self.n_periods:,} {self.label}"

    def file(self) -> Path:
        return DATA / (f"{self.label}-{self.n_items}x{self.n_periods}-seed{self.seed}"
                       f"-v{FORMAT_VERSION}.parquet")


# The backtest scores every method and the router at each origin; on the weekly panel it
# runs on a tenth of the items and is scaled, to keep the whole run near 15 minutes.
FULL = (
    PanelSpec("daily", 30_000, 1_941, "day", 2024, sample=300, opt_sample=100, repeats=3,
              profile_items=2_000),
    PanelSpec("weekly", 200_000, 156, "week", 2025, sample=2_000, opt_sample=300, repeats=3,
              backtest_items=20_000),
)
QUICK = (
    PanelSpec("daily", 600, 400, "day", 2024, sample=60, opt_sample=20, repeats=2, profile_items=100),
    PanelSpec("weekly", 3_000, 104, "week", 2025, sample=200, opt_sample=50, repeats=2,
              backtest_items=500),
)


# ------------------------------------------------------------------ the data


def make_history(spec: PanelSpec) -> tuple[np.ndarray, np.ndarray]:
    """Demand and availability of a seeded panel with stock-outs.

    The mix (frequent, sparse, late-listed, gone-quiet and never-sold items;
    stock-out runs of about 14 periods, about 5 % of item-periods) comes from
    the classifier benchmark's generator. Sales are lost while an item is out
    of stock, so those periods record zero demand, as a real till would.
    """
    _, masked = synthetic_panel(spec.n_items, spec.n_periods, seed=spec.seed)
    values, available = masked.values, masked.available
    values[~available] = 0.0
    return values, available


def write_history(values: np.ndarray, available: np.ndarray, spec: PanelSpec, path: Path) -> int:
    """Long-format Parquet: non-zero rows, stock-out rows, and each item's first and last period.

    Periods missing from the file are zeros by the loader's calendar rule
    (an item's span runs from its first row to the end of the calendar), so
    the file holds the whole panel. Returns the number of rows.
    """
    n_items, n_periods = values.shape
    keep = (values > 0) | ~available
    keep[:, 0] = True
    keep[:, -1] = True
    flat = np.flatnonzero(keep.ravel())
    item, period = np.divmod(flat, n_periods)
    step = 7 if spec.step == "week" else 1
    first = np.datetime64("2021-01-04", "D")  # a Monday, so weeks start on Mondays
    days = first + period.astype("timedelta64[D]") * step
    labels = np.array([f"SKU-{i:06d}" for i in range(n_items)], dtype=object)
    table = pa.table({
        "item": pa.array(labels[item], type=pa.string()),
        "period": pa.array(days.astype("datetime64[ms]")),
        "quantity": pa.array(values.ravel()[flat].astype(np.int32)),
        "in_stock": pa.array(available.ravel()[flat].astype(np.int8)),
    })
    path.parent.mkdir(parents=True, exist_ok=True)
    partial = path.with_suffix(".partial")
    pq.write_table(table, partial, row_group_size=1 << 20)
    partial.replace(path)
    return len(flat)


def history_file(spec: PanelSpec) -> tuple[Path, float | None, bool | None]:
    """The cached Parquet file of ``spec``: (path, seconds to generate or None, round trip exact)."""
    path = spec.file()
    if path.exists():
        return path, None, None
    t0 = time.perf_counter()
    values, available = make_history(spec)
    write_history(values, available, spec, path)
    took = time.perf_counter() - t0
    panel, _ = read_demand(path)
    exact = bool(np.array_equal(panel.values, values) and np.array_equal(panel.mask(), available))
    return path, took, exact


# ------------------------------------------------------------- measurement

_LIBC = ctypes.CDLL("libc.so.6") if sys.platform.startswith("linux") else None


def read_field(path: str, key: str) -> str | None:
    """The value of the first ``key:`` or ``key=`` line of a text file such as /proc/meminfo."""
    try:
        for line in Path(path).read_text().splitlines():
            if line.startswith(key) and line[len(key):len(key) + 1] in (":", "="):
                return line[len(key) + 1:].strip()
    except OSError:
        pass
    return None


def _status_kb(key: str) -> int:
    return int(read_field("/proc/self/status", key).split()[0])


def _reset_peak() -> bool:
    """Reset the kernel's peak-RSS mark (VmHWM) of this process; False if not allowed."""
    try:
        Path("/proc/self/clear_refs").write_text("5")
        return True
    except OSError:
        return False


class _Sampler(threading.Thread):
    """Fallback: sample the resident set every millisecond."""

    def __init__(self) -> None:
        super().__init__(daemon=True)
        self.peak = _status_kb("VmRSS")
        self.done = threading.Event()

    def run(self) -> None:
        while not self.done.wait(0.001):
            self.peak = max(self.peak, _status_kb("VmRSS"))


class MemoryGuard(threading.Thread):
    """Stop the whole run, children included, before the machine runs out of memory.

    The machine is shared: a stage that needs more memory than there is would otherwise
    bring the kernel's OOM killer down on whatever else is running.
    """

    def __init__(self, floor_gib: float = 1.5) -> None:
        super().__init__(daemon=True)
        self.floor_kb = floor_gib * 2**20
        self.stage = "start"
        self.children: list[subprocess.Popen] = []

    def run(self) -> None:
        while True:
            available = read_field("/proc/meminfo", "MemAvailable")
            if available is not None and int(available.split()[0]) < self.floor_kb:
                for child in self.children:
                    if child.poll() is None:
                        child.kill()
                print(f"\nstopped: less than {self.floor_kb / 2**20:.1f} GiB of memory left during "
                      f"'{self.stage}' (peak RSS of this process {_status_kb('VmHWM') / 2**20:.1f} GiB)",
                      file=sys.stderr, flush=True)
                os._exit(3)
            time.sleep(0.25)


GUARD = MemoryGuard()


MEMORY_METHOD = (
    "peak resident set size of the process (VmHWM, reset through /proc/self/clear_refs just "
    "before the call) minus the resident set just before it, after a garbage collection and "
    "malloc_trim; this counts every allocation, numpy, numba, pyarrow and pandas alike"
    if _reset_peak() else
    "resident set sampled every millisecond in a thread, peak minus the resident set just before "
    "the call (after a garbage collection and malloc_trim); short spikes can be missed"
)


@dataclass
class Call:
    wall: float
    cpu: float
    extra_peak: int  # bytes
    result: object = field(default=None, repr=False)


def measure(func) -> Call:
    """One call: wall and process CPU seconds, and the extra peak resident memory."""
    gc.collect()
    if _LIBC is not None:
        _LIBC.malloc_trim(0)
    base = _status_kb("VmRSS")
    sampler = None
    if not _reset_peak():
        sampler = _Sampler()
        sampler.start()
    c0, t0 = time.process_time(), time.perf_counter()
    result = func()
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    if sampler is None:
        peak = _status_kb("VmHWM")
    else:
        sampler.done.set()
        sampler.join()
        peak = max(sampler.peak, _status_kb("VmRSS"))
    return Call(wall, cpu, max(peak - base, 0) * 1024, result)


def best_call(func, repeats: int) -> Call:
    """Best wall time of ``repeats`` calls, with that call's CPU time and the largest peak."""
    calls = []
    for _ in range(repeats):
        calls.append(measure(func))
        if len(calls) < repeats:
            calls[-1].result = None  # free it before the next call
    best = min(calls, key=lambda c: c.wall)
    return Call(best.wall, best.cpu, max(c.extra_peak for c in calls), calls[-1].result)


def sum_time(values: np.ndarray, repeats: int = 15) -> float:
    """Best of ``repeats`` numpy sum() passes over the panel's array."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        values.sum()
        times.append(time.perf_counter() - t0)
    return min(times)


# ------------------------------------------- the "what an analyst would write" loops
#
# Straightforward per-item code, period by period: drop the stock-out periods, trim
# the leading zeros, run the recurrence and its in-sample one-step squared error (the
# kernels compute that cost too). With constants to optimise, scipy's bounded scalar
# search (L-BFGS-B for TSB's two constants) over the same bounds as the router.

BOUNDS = (0.01, 0.5)  # the registry's default search range


def _history(row: np.ndarray, ok: np.ndarray) -> list[float]:
    hist = [v for v, a in zip(row.tolist(), ok.tolist()) if a]
    for t, v in enumerate(hist):
        if v > 0:
            return hist[t:]
    return []


def _first_interval(hist: list[float]) -> int:
    for t in range(1, len(hist)):
        if hist[t] > 0:
            return t
    return 1


def _mse(err: float, hist: list[float]) -> float:
    return err / (len(hist) - 1) if len(hist) > 1 else math.nan


def run_croston(hist, alpha, correction=1.0) -> tuple[float, float]:
    """Croston (1972): (forecast, in-sample MSE); SBA with ``correction = 1 - alpha / 2``."""
    size, interval, since = hist[0], float(_first_interval(hist)), 0
    f = correction * size / interval
    err = 0.0
    for v in hist[1:]:
        err += (v - f) ** 2
        since += 1
        if v > 0:
            size += alpha * (v - size)
            interval += alpha * (since - interval)
            since = 0
            f = correction * size / interval
    return f, _mse(err, hist)


def run_ses(hist, alpha) -> tuple[float, float]:
    level, err = hist[0], 0.0
    for v in hist[1:]:
        err += (v - level) ** 2
        level += alpha * (v - level)
    return level, _mse(err, hist)


def run_tsb(hist, alpha, beta) -> tuple[float, float]:
    """Teunter, Syntetos & Babai (2011): (forecast, in-sample MSE)."""
    size, prob = hist[0], 1.0 / _first_interval(hist)
    err = 0.0
    for v in hist[1:]:
        err += (v - prob * size) ** 2
        if v > 0:
            prob += beta * (1.0 - prob)
            size += alpha * (v - size)
        else:
            prob -= beta * prob
    return prob * size, _mse(err, hist)


RUNS = {
    "croston": lambda hist, a, b: run_croston(hist, a),
    "sba": lambda hist, a, b: run_croston(hist, a, 1.0 - a / 2.0),
    "ses": lambda hist, a, b: run_ses(hist, a),
    "tsb": run_tsb,
}


def loop_item(method: str, row: np.ndarray, ok: np.ndarray, options: dict | None = None) -> float:
    """One item's forecast by ``method``.

    ``options`` None fixes every constant at 0.1; otherwise they are the router's options
    for the item: a constant given is kept, a constant set to None is optimised within
    ``bounds`` by the in-sample MSE.
    """
    hist = _history(row, ok)
    if method == "zeros" or not hist:
        return 0.0
    if method == "mean_since_first":
        return sum(hist) / len(hist)
    run = RUNS[method]
    consts = {"alpha": 0.1, "beta": 0.1}
    free = []
    for name in ("alpha", "beta") if method == "tsb" else ("alpha",):
        value = 0.1 if options is None else options.get(name, 0.1)
        if value is None:
            free.append(name)
        else:
            consts[name] = float(value)
    if free and len(hist) >= 2:
        bounds = tuple(options.get("bounds", BOUNDS))

        def cost(x) -> float:
            c = dict(consts, **dict(zip(free, x)))
            return run(hist, c["alpha"], c["beta"])[1]

        if len(free) == 1:
            best = [minimize_scalar(lambda v: cost([v]), bounds=bounds, method="bounded").x]
        else:
            best = minimize(cost, x0=[0.1] * len(free), bounds=[bounds] * len(free)).x
        consts.update(zip(free, (float(v) for v in best)))
    return run(hist, consts["alpha"], consts["beta"])[0]


def time_loop(plan, values, ok, rows) -> tuple[float, np.ndarray]:
    """Seconds for the loop over ``rows``, each with its (method, options), and the forecasts."""
    t0 = time.perf_counter()
    out = [loop_item(method, values[i], ok[i], options) for (method, options), i in zip(plan, rows)]
    return time.perf_counter() - t0, np.array(out)


# ------------------------------------------------------------------ the stages


@dataclass
class Row:
    stage: str
    call: Call
    note: str = ""
    scale: float = 1.0  # measured on a sample of items: times are scaled by this
    sample_bytes: int | None = None  # the sample's demand array, for the memory ratio


@dataclass
class LoopRow:
    label: str
    per_item: float  # seconds per item of the Python loop
    total: float  # extrapolated to every item
    kernel_label: str
    kernel: float  # seconds of the kernel path on every item
    agreement: str


@dataclass
class PanelResult:
    spec: PanelSpec
    path: Path
    file_rows: int
    file_mb: float
    generated_s: float | None
    round_trip: bool | None
    panel_bytes: int
    mask_bytes: int
    demand_share: float
    stockout_share: float
    t_sum: float = 0.0
    t_sum_start: float = 0.0
    t_sum_end: float = 0.0
    warm_s: float = 0.0
    stages: list[Row] = field(default_factory=list)
    fixed: list[Row] = field(default_factory=list)
    optimised: list[Row] = field(default_factory=list)
    loops: list[LoopRow] = field(default_factory=list)
    patterns: dict = field(default_factory=dict)
    cli: list[dict] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    profiles: list[tuple[str, dict]] = field(default_factory=list)

    def stage(self, prefix: str) -> Row:
        return next(r for r in self.stages if r.stage.startswith(prefix))


def _backtest():
    try:
        from sparsedemand.evaluate import backtest
    except ImportError:
        return None
    return backtest


def lead_times(n_items: int, seed: int) -> np.ndarray:
    return np.random.default_rng(seed).integers(1, 9, n_items)


def sample_rows(n_items: int, size: int | None, seed: int) -> np.ndarray:
    """Sorted random item positions (every item when ``size`` is None or too large)."""
    if size is None or size >= n_items:
        return np.arange(n_items)
    return np.sort(np.random.default_rng(seed).choice(n_items, size=size, replace=False))


def warm_up(panel, seed: int) -> None:
    """Call every stage once on a few items, so that JIT compilation or cache loading is not timed."""
    small = panel.subset(slice(0, WARM_ITEMS))
    classify(small)
    ev_small = methods.extract_events(small.values, small.start, small.available)
    for name in methods.METHODS:
        methods.fit(name, small.values, small.start, small.available, horizon=HORIZON, events=ev_small,
                    **fixed_options(name, panel))
    for name, opts in optimised_options().items():
        if isinstance(opts, dict):
            methods.fit(name, small.values, small.start, small.available, horizon=HORIZON,
                        events=ev_small, **opts)
    warm_fc = forecast(small, HORIZON)
    stock_targets(warm_fc.item_forecasts(), lead_time=lead_times(WARM_ITEMS, seed),
                  service_level=0.95, history=small, items=small.items)
    backtest = _backtest()
    if backtest is not None:
        backtest(small, holdout=HORIZON, origins=3)


def run_stages(spec: PanelSpec, res: PanelResult, say) -> None:
    """Load, classify, fit, route, backtest and stock one panel, in this process."""
    repeats = spec.repeats
    say(f"[{spec.label}] load from Parquet")
    load = best_call(lambda: read_demand(res.path), max(1, repeats - 1))
    panel = load.result[0]
    load.result = None
    res.stages.append(Row("load from Parquet (read_demand)", load, f"{res.file_rows:,} rows"))
    values, start, available = panel.values, panel.start, panel.available
    res.t_sum_start = sum_time(values)

    say(f"[{spec.label}] warm-up on {WARM_ITEMS} items (JIT compile or cache load)")
    t0 = time.perf_counter()
    warm_up(panel, spec.seed)
    res.warm_s = time.perf_counter() - t0

    say(f"[{spec.label}] classify")
    cls = best_call(lambda: classify(panel), repeats)
    res.patterns = cls.result["pattern"].value_counts().reindex(PATTERNS + STATUSES, fill_value=0).to_dict()
    cls.result = None
    res.stages.append(Row("classify", cls))

    say(f"[{spec.label}] events and methods")
    ev_call = best_call(lambda: methods.extract_events(values, start, available), repeats)
    events = ev_call.result
    res.stages.append(Row("extract events (shared by every method)", ev_call,
                          f"{len(events.pos):,} demands"))
    for name in methods.METHODS:
        opts = fixed_options(name, panel)
        call = best_call(lambda: methods.fit(name, values, start, available, horizon=HORIZON,
                                             events=events, **opts), repeats)
        call.result = None
        res.fixed.append(Row(name, call, ", ".join(f"{k}={v}" for k, v in opts.items())))
    for name, opts in optimised_options().items():
        if isinstance(opts, str):
            res.notes.append(f"{name} with the router's options is not measured: it fails with {opts}")
            continue
        call = best_call(lambda: methods.fit(name, values, start, available, horizon=HORIZON,
                                             events=events, **opts), max(1, repeats - 1))
        call.result = None
        tuned = ", ".join(k for k, v in opts.items() if v is None)
        res.optimised.append(Row(name, call, f"{tuned} optimised"))
    del events

    say(f"[{spec.label}] routed forecast")
    fc = best_call(lambda: forecast(panel, HORIZON), max(1, repeats - 1))
    result = fc.result
    fc.result = None
    res.stages.append(Row(f"routed forecast (horizon {HORIZON}, quantiles {', '.join(map(str, result.levels))})",
                          fc, "classify, route, fit, quantiles, audit table"))

    say(f"[{spec.label}] stock targets")
    lead = lead_times(panel.n_items, spec.seed)
    st = best_call(lambda: stock_targets(result.item_forecasts(), lead_time=lead, service_level=0.95,
                                         history=panel, items=panel.items), repeats)
    st.result = None
    res.stages.append(Row("stock targets (lead times 1-8, 95 % cycle service)", st,
                          "from the routed forecast's distributions"))

    backtest = _backtest()
    if backtest is None:
        res.notes.append("sparsedemand.evaluate.backtest does not exist yet: the backtest is not measured")
    else:
        rows = sample_rows(panel.n_items, spec.backtest_items, spec.seed)
        part = panel if len(rows) == panel.n_items else panel.subset(rows)
        say(f"[{spec.label}] backtest on {len(rows):,} items")
        bt = best_call(lambda: backtest(part, holdout=HORIZON, origins=3), 1)
        bt.result = None
        scale = panel.n_items / len(rows)
        note = "every method and the router scored at each origin"
        if scale > 1:
            note += f"; measured on {len(rows):,} random items in {_secs(bt.wall)} and scaled by {scale:g}"
        res.stages.append(Row(f"backtest (holdout {HORIZON}, 3 origins)", bt, note, scale,
                              part.values.nbytes))
        del part

    say(f"[{spec.label}] per-item Python loops on {spec.sample:,} items")
    compare_loops(spec, res, panel, result)
    res.t_sum_end = sum_time(values)
    res.t_sum = min(res.t_sum_start, res.t_sum_end)


def compare_loops(spec: PanelSpec, res: PanelResult, panel, result) -> None:
    """The per-item Python loops on a random sample, against the kernels on every item."""
    values, start, available, mask = panel.values, panel.start, panel.available, panel.mask()
    samples = {False: sample_rows(panel.n_items, spec.sample, spec.seed + 1),
               True: sample_rows(panel.n_items, spec.opt_sample, spec.seed + 2)}
    events_s = res.stage("extract events").call.wall
    kernel_time = {("fixed", r.stage): r.call.wall + events_s for r in res.fixed}
    kernel_time.update({("optimised", r.stage): r.call.wall + events_s for r in res.optimised})
    for optimise, rows in samples.items():
        kind = "optimised" if optimise else "fixed"
        scale = panel.n_items / len(rows)
        sample_args = (values[rows], start[rows], None if available is None else available[rows])
        for name in RUNS:
            opts = optimised_options()[name] if optimise else {}
            took, got = time_loop([(name, opts if optimise else None)] * len(rows), values, mask, rows)
            kernel = methods.fit(name, *sample_args, horizon=1, **opts).mean[:, 0]
            label = f"{name}, " + ("constants optimised" if optimise else "alpha = beta = 0.1")
            res.loops.append(LoopRow(label, took / len(rows), took * scale,
                                     "the kernel incl. event extraction", kernel_time[(kind, name)],
                                     agreement(got, kernel, exact=not optimise)))
    # each item's rule as the router applied it (fixed constants, bounds)
    routed: list = [None] * panel.n_items
    for part, rule, _ in result.groups:
        opts = _routed_options(rule, "mse", season_length=panel.season_length)
        for i in part:
            routed[i] = (rule.method, opts)
    fc = res.stage("routed forecast").call.wall
    for optimise, rows in samples.items():
        plan = [routed[i] if optimise else (routed[i][0], None) for i in rows]
        unknown = sorted({m for m, _ in plan} - set(RUNS) - {"zeros", "mean_since_first"})
        if unknown:
            res.notes.append(f"the routed Python loop has no recurrence for {', '.join(unknown)}: not run")
            return
        mix = ", ".join(f"{k} {v}" for k, v in Counter(m for m, _ in plan).most_common())
        took, got = time_loop(plan, values, mask, rows)
        label = (f"routed ({len(rows):,} items: {mix}), "
                 + ("constants as the router sets or optimises them" if optimise else "constants fixed at 0.1"))
        res.loops.append(LoopRow(label, took / len(rows), took * panel.n_items / len(rows),
                                 "the routed forecast", fc,
                                 agreement(got, result.point.to_numpy()[rows, 0], exact=False)
                                 if optimise else "different constants"))


def agreement(got: np.ndarray, kernel: np.ndarray, *, exact: bool) -> str:
    """How closely the loop's forecasts match the kernel's."""
    diff = np.abs(got - kernel)
    if exact:
        return f"largest difference {diff.max():.1e}"
    rel = diff / np.maximum(np.abs(kernel), 1e-9)
    return f"within 1 % on {np.mean(rel <= 0.01):.0%} of items (the optimisers differ)"


def fixed_options(name: str, panel) -> dict:
    """Registry defaults, plus the one option without a default (the season of the calendar)."""
    return {"season_length": panel.season_length} if name == "seasonal_mean" else {}


@functools.cache
def optimised_options() -> dict[str, dict | str]:
    """The router's options for every method with a constant to optimise.

    A method whose routed options it rejects maps to the one-line message instead.
    """
    probe = np.array([[0.0, 2.0, 0.0, 1.0, 0.0, 0.0, 3.0, 1.0]])
    out: dict[str, dict | str] = {}
    for name in methods.METHODS:
        opts = _routed_options(Rule(name), "mse")
        defaults = methods.method_options(name)
        if not any(v is None and defaults[k] is not None for k, v in opts.items()):
            continue  # nothing to optimise (None is already the default, as repeat_last's window)
        try:
            methods.fit(name, probe, np.array([1]), None, horizon=1, **opts)
        except InputError as exc:
            out[name] = f"{', '.join(f'{k}={v!r}' for k, v in opts.items())}: {exc}"
            continue
        out[name] = opts
    return out


# ------------------------------------------------------------ the command line


def cli_runs(path: Path, times: int, say) -> list[dict]:
    runs = []
    with tempfile.TemporaryDirectory(prefix="sd-bench-cli-") as tmp:
        for k in range(times):
            say(f"  command-line run {k + 1} of {times}")
            runs.append(_timed_child(path, Path(tmp) / f"out{k}"))
            shutil.rmtree(Path(tmp) / f"out{k}", ignore_errors=True)
    return runs


def _timed_child(path: Path, out_dir: Path) -> dict:
    """Run the command; os.wait4 gives its own CPU time and peak memory.

    NUMBA_DEBUG_CACHE makes numba say on stdout which kernels it compiled and saved to the
    cache, so the count is the child's own, whatever else writes to the cache meanwhile.
    """
    exe = Path(sys.executable).with_name("sparsedemand")
    cmd = [str(exe), "forecast", str(path), "--horizon", str(HORIZON), "--out", str(out_dir)]
    env = dict(os.environ, NUMBA_DEBUG_CACHE="1")
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        t0 = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=out, stderr=err, env=env)
        GUARD.children.append(proc)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        compiled = sum(1 for line in out if line.startswith("[cache] data saved"))
        err.seek(0)
        lines = err.read().strip().splitlines()
    return {
        "wall": wall,
        "code": proc.returncode,
        "cpu": usage.ru_utime + usage.ru_stime,
        "max_rss": usage.ru_maxrss * 1024,
        "compiled": compiled,
        "message": lines[-1] if (lines and proc.returncode) else "",
    }


# ------------------------------------------------------------------- machine


def machine() -> list[tuple[str, str]]:
    mem_kb = read_field("/proc/meminfo", "MemTotal")
    mem = f"{int(mem_kb.split()[0]) / 2**20:.1f} GiB" if mem_kb else "unknown"
    distro = read_field("/etc/os-release", "PRETTY_NAME")
    os_name = f"{distro.strip(chr(34))} ({platform.platform()})" if distro else platform.platform()
    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:
        usable = os.cpu_count()
    cpu_max = Path("/sys/fs/cgroup/cpu.max")
    quota = cpu_max.read_text().strip() if cpu_max.exists() else "n/a"
    env = {k: v for k, v in sorted(os.environ.items())
           if k.startswith(("OPENBLAS", "OMP_", "MKL_", "NUMBA_", "MALLOC_"))}
    try:
        commit = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"],
                                capture_output=True, text=True, check=True).stdout.strip()
        changed = subprocess.run(["git", "-C", str(ROOT), "status", "--porcelain", "--", "sparsedemand"],
                                 capture_output=True, text=True, check=True).stdout.splitlines()
        if changed:
            commit += ", uncommitted changes in " + ", ".join(line[3:] for line in changed)
    except (OSError, subprocess.CalledProcessError):
        commit = "unknown"
    return [
        ("CPU", cpu_model()),
        ("cores", f"{os.cpu_count()} (usable by this process: {usable}; cgroup cpu.max: {quota})"),
        ("memory", mem),
        ("OS", os_name),
        ("python", platform.python_version()),
        ("numpy / numba / pandas / pyarrow",
         f"{np.__version__} / {numba.__version__} / {pd.__version__} / {pa.__version__}"),
        ("sparsedemand", f"{sparsedemand.__version__} (commit {commit})"),
        ("kernel threads", f"{worker_count()} (numba NUMBA_NUM_THREADS {numba.config.NUMBA_NUM_THREADS})"),
        ("thread and allocator environment variables",
         ", ".join(f"{k}={v}" for k, v in env.items()) or "none set (OPENBLAS_*, OMP_*, MKL_*, NUMBA_*)"),
    ]


def load_average() -> str:
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


# ------------------------------------------------------------------ profiles

PROFILE_MARK = "_profiled_stage"


def _profiled_stage(func):
    """The frame that marks the profiled stage in the sampled stacks."""
    return func()


def profile_child(stage: str, path: Path, items: int | None, seed: int) -> None:
    """Body of the profiled subprocess: load, warm up, then run one stage inside the marker."""
    panel, _ = read_demand(path)
    if items is not None and items < panel.n_items:
        panel = panel.subset(sample_rows(panel.n_items, items, seed))
    warm_up(panel, seed)
    if stage == "forecast":
        _profiled_stage(lambda: forecast(panel, HORIZON))
    else:
        _profiled_stage(lambda: _backtest()(panel, holdout=HORIZON, origins=3))


def profile(stage: str, spec: PanelSpec, path: Path, items: int | None) -> dict:
    """Sample one stage with py-spy (100 Hz, idle threads included) and sum the stacks."""
    pyspy = shutil.which("py-spy", path=str(Path(sys.executable).parent)) or shutil.which("py-spy")
    if pyspy is None:
        return {"error": "py-spy is not installed"}
    with tempfile.TemporaryDirectory(prefix="sd-bench-prof-") as tmp:
        raw = Path(tmp) / "stacks.txt"
        cmd = [pyspy, "record", "--idle", "-r", "100", "-f", "raw", "-o", str(raw), "--",
               sys.executable, str(Path(__file__).resolve()), "--profile-child", stage,
               "--file", str(path), "--seed", str(spec.seed)]
        if items is not None:
            cmd += ["--items", str(items)]
        child = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        GUARD.children.append(child)
        done = subprocess.CompletedProcess(cmd, 0, "", child.communicate()[1])
        if not raw.exists():
            return {"error": f"py-spy failed: {(done.stderr.strip().splitlines() or ['?'])[-1]}"}
        return summarise_stacks(raw.read_text())


def summarise_stacks(text: str, top: int = 12) -> dict:
    """Own and inclusive shares of each function in the stacks that pass through the marker."""
    own, inclusive, total = Counter(), Counter(), 0
    for line in text.splitlines():
        stack, _, count = line.rpartition(" ")
        if not stack or PROFILE_MARK not in stack:
            continue
        frames = stack.split(";")
        frames = frames[next(i for i, f in enumerate(frames) if PROFILE_MARK in f) + 1:]
        if not frames:
            continue
        n = int(count)
        total += n
        names = [f.rsplit(":", 1)[0] + ")" if f.endswith(")") and ":" in f else f for f in frames]
        own[names[-1]] += n
        for name in set(names):
            inclusive[name] += n
    package = [(k, v) for k, v in inclusive.most_common() if "sparsedemand/" in k]
    return {"samples": total,
            "own": [(v / total, k) for k, v in own.most_common(top)] if total else [],
            "inclusive": [(v / total, k) for k, v in package[:top]] if total else []}


# -------------------------------------------------------------------- report


def _mb(n: float) -> str:
    return f"{n / 2**20:,.0f} MB"


def _secs(t: float) -> str:
    if t < 1e-3:
        return f"{t * 1e6:,.0f} µs"
    return f"{t * 1e3:,.1f} ms" if t < 1 else f"{t:,.2f} s"


def verdict(ok: bool) -> str:
    return "**PASS**" if ok else "**FAIL**"


def stage_table(rows: list[Row], res: PanelResult, label: str = "stage") -> list[str]:
    lines = [f"| {label} | wall | CPU | x numpy sum | extra peak memory | x panel | note |",
             "| --- | ---: | ---: | ---: | ---: | ---: | --- |"]
    for r in rows:
        c, base = r.call, r.sample_bytes or res.panel_bytes
        lines.append(f"| {r.stage} | {_secs(c.wall * r.scale)} | {_secs(c.cpu * r.scale)} | "
                     f"{c.wall * r.scale / res.t_sum:,.1f} | {_mb(c.extra_peak)} | "
                     f"{c.extra_peak / base:.2f} | {r.note} |")
    return lines


def targets(res: PanelResult) -> list[tuple[str, str, str, bool]]:
    fc = res.stage("routed forecast").call
    loops = [row for row in res.loops if row.label.startswith("routed")]
    out = [("routed forecast time / one numpy sum()", f"<= {MAX_SUM_RATIO:.0f}x",
            f"{fc.wall / res.t_sum:,.0f}x ({_secs(fc.wall)} / {_secs(res.t_sum)})",
            fc.wall / res.t_sum <= MAX_SUM_RATIO)]
    for kind, row in zip(("generous: constants fixed at 0.1", "like for like: constants optimised"), loops):
        out.append((f"routed forecast speed-up over the per-item Python loop ({kind})",
                    f">= {MIN_LOOP_SPEEDUP:.0f}x",
                    f"{row.total / fc.wall:,.1f}x ({_secs(row.total)} extrapolated / {_secs(fc.wall)})",
                    row.total / fc.wall >= MIN_LOOP_SPEEDUP))
    out.append(("routed forecast extra peak memory / panel", f"<= {MAX_MEMORY_RATIO:.0f}x",
                f"{fc.extra_peak / res.panel_bytes:.2f}x ({_mb(fc.extra_peak)} / {_mb(res.panel_bytes)})",
                fc.extra_peak / res.panel_bytes <= MAX_MEMORY_RATIO))
    for k, run in enumerate(res.cli):
        kind = f"{run['compiled']} kernels compiled" if run["compiled"] else "every kernel from the cache"
        out.append((f"command-line run {k + 1} ({kind}), end to end", f"< {MAX_CLI_SECONDS:.0f} s",
                    f"{run['wall']:.1f} s" + ("" if run["code"] == 0 else f" (exit code {run['code']})"),
                    run["code"] == 0 and run["wall"] < MAX_CLI_SECONDS))
    return out


def profile_lines(title: str, prof: dict) -> list[str]:
    lines = [f"#### {title}", ""]
    if "error" in prof:
        return lines + [f"Not profiled: {prof['error']}.", ""]
    lines += [f"{prof['samples']:,} samples at 100 Hz in the stage (main thread; `run_in_threads` "
              "is the main thread waiting for numba kernels running on the worker threads).", "",
              "| own time | function (file) | | time inside | package function (file) |",
              "| ---: | --- | --- | ---: | --- |"]
    own, inc = prof["own"], prof["inclusive"]
    for k in range(max(len(own), len(inc))):
        a = f"{own[k][0]:.1%} | `{own[k][1]}`" if k < len(own) else " | "
        b = f"{inc[k][0]:.1%} | `{inc[k][1]}`" if k < len(inc) else " | "
        lines.append(f"| {a} | | {b} |")
    return lines + [""]


def panel_section(res: PanelResult) -> list[str]:
    spec = res.spec
    gen = (f"generated this run in {res.generated_s:.1f} s; reading it back gives the generated arrays "
           f"exactly: {'yes' if res.round_trip else 'NO'}" if res.generated_s is not None
           else "cached from an earlier run")
    lines = [
        f"## {spec.name} panel",
        "",
        f"- file: `{res.path.relative_to(ROOT)}`, {res.file_rows:,} rows, {res.file_mb:,.0f} MB "
        f"(item, period as timestamp, quantity int32, in_stock int8; {gen})",
        f"- panel in memory: demand array {_mb(res.panel_bytes)} (float64, the 'panel size' of the "
        f"memory ratios), availability mask {_mb(res.mask_bytes)}",
        f"- demand in {res.demand_share:.1%} of item-periods; out of stock in {res.stockout_share:.1%}",
        "- patterns: " + ", ".join(f"{k} {v:,}" for k, v in res.patterns.items()),
        f"- one numpy sum() over the demand array: {_secs(res.t_sum_start)} at the start, "
        f"{_secs(res.t_sum_end)} at the end of this panel's stages; the ratios use the faster, "
        f"{_secs(res.t_sum)}",
        f"- warm-up on {WARM_ITEMS} items before timing (JIT compile or cache load): {res.warm_s:.1f} s",
        "",
        "### Stages",
        "",
        *stage_table(res.stages, res),
        *[f"\n{note}." for note in res.notes],
        "",
        "### Methods, fixed constants (registry defaults, events given)",
        "",
        *stage_table(res.fixed, res, "method"),
        "",
        "### Methods, optimised constants (as the router fits them, events given)",
        "",
        *stage_table(res.optimised, res, "method"),
        "",
        f"### Per-item Python loop against the kernels (random items, extrapolated to all "
        f"{spec.n_items:,}: {spec.sample:,} with fixed constants, {spec.opt_sample:,} optimised)",
        "",
        "| loop | per item | all items | against | its time | speed-up | same result? |",
        "| --- | ---: | ---: | --- | ---: | ---: | --- |",
        *[f"| {r.label} | {r.per_item * 1e3:.2f} ms | {_secs(r.total)} | {r.kernel_label} | "
          f"{_secs(r.kernel)} | {r.total / r.kernel:,.1f}x | {r.agreement} |" for r in res.loops],
    ]
    if res.cli:
        lines += [
            "",
            f"### Command line: `sparsedemand forecast {res.path.name} --horizon {HORIZON} --out DIR`",
            "",
            "| run | wall | CPU | peak memory | kernels compiled during the run | exit code |",
            "| --- | ---: | ---: | ---: | ---: | ---: |",
        ]
        for k, run in enumerate(res.cli):
            lines.append(f"| {k + 1} | {run['wall']:.1f} s | {run['cpu']:.1f} s | {_mb(run['max_rss'])} | "
                         f"{run['compiled']} | {run['code']}{' ' + run['message'] if run['message'] else ''} |")
    if res.profiles:
        lines += ["", "### Where the time goes (py-spy)", ""]
        for title, prof in res.profiles:
            lines += profile_lines(title, prof)
    return lines


def write_results(path: Path, results: list[PanelResult], info, quick: bool, started: str,
                  loads: list[float], load_start: str, load_end: str, took: float) -> None:
    daily = results[0]
    busiest = max(loads)
    loaded = (f"- **the machine was loaded by other work**: the 1-minute load average reached "
              f"{busiest:.2f} on {os.cpu_count()} cores during the run, so every wall time, the numpy "
              "sum included, is slowed; the CPU times are steadier" if busiest >= 1.5 else
              f"- the 1-minute load average stayed below 1.5 during the run (highest {busiest:.2f})")
    lines = [
        "# Benchmarks: every stage on one machine" + (" (--quick smoke run)" if quick else ""),
        "",
        f"Command: `python benchmarks/run_all.py{' --quick' if quick else ''}`, started {started}, "
        f"took {took / 60:.1f} min. Written by the script; do not edit by hand.",
        "",
        "## Machine",
        "",
        *[f"- {k}: {v}" for k, v in info],
        f"- load average (1 / 5 / 15 min) at the start: {load_start}; at the end: {load_end}",
        loaded,
        "",
        f"## Targets ({daily.spec.name} panel, {os.cpu_count()} cores)",
        "",
        "| target | limit | measured | result |",
        "| --- | --- | --- | --- |",
        *[f"| {name} | {limit} | {got} | {verdict(ok)} |" for name, limit, got, ok in targets(daily)],
        "",
        "Both loops run, for each item, the method the router chose for it (so they pay nothing "
        "for classification and routing) and compute the point forecast and its in-sample error "
        "only: no quantiles and no audit table. The like-for-like loop keeps the constants the "
        "router fixes and optimises the others within the router's bounds (scipy's bounded "
        "search on the in-sample MSE); the generous one fixes every constant at 0.1, so it does "
        "far less work than the routed forecast.",
        "",
        "## How it is measured",
        "",
        "- wall: best of the timed repeats, after a warm-up call on a few items so that JIT "
        "compilation or cache loading is not timed (the command-line runs include it); CPU: "
        "process CPU time (all threads) of that call, steadier than wall time on a shared machine.",
        "- x numpy sum: wall time divided by one numpy `sum()` over the same demand array, "
        "measured in the same run (best of 15, at the start and at the end of the panel's stages).",
        f"- extra peak memory: {MEMORY_METHOD}. Largest over the repeats; 'x panel' divides it by "
        "the demand array's size (of the sample, for a stage run on a sample). The load stage's "
        "figure includes the panel it returns.",
        "- per-item loop: straightforward pure-Python code (benchmarks/run_all.py, `run_*` and "
        "`loop_item`), period by period on one item's row, with stock-out periods dropped and "
        "leading zeros trimmed; timed on random items and scaled to the whole panel. The last "
        "column checks it computes what the kernel computes.",
        "- command line: the installed `sparsedemand` script in a subprocess, timed from start to "
        "exit, with its own CPU time and peak memory (os.wait4); 'kernels compiled' counts the "
        "kernels numba compiled and saved in that run (NUMBA_DEBUG_CACHE; 0: every kernel came "
        "from the cache). The "
        "command-line runs come first, before this process has loaded any kernel.",
        "- profiles: py-spy samples a separate process that loads the file, warms up and runs the "
        "stage once; shares are of the samples inside the stage.",
        "",
    ]
    for res in results:
        lines += panel_section(res) + [""]
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(lines), encoding="utf-8")


# ---------------------------------------------------------------------- main


def bench_panel(spec: PanelSpec, *, cli_times: int, profiles: bool, say) -> PanelResult:
    say(f"[{spec.label}] {spec.name}: data file")
    path, generated, exact = history_file(spec)
    meta = pq.ParquetFile(path).metadata
    stock = pq.read_table(path, columns=["in_stock", "quantity"])
    stockouts = int((stock["in_stock"].to_numpy() == 0).sum())
    demands = int((stock["quantity"].to_numpy() > 0).sum())
    del stock
    cells = spec.n_items * spec.n_periods
    res = PanelResult(
        spec=spec, path=path, file_rows=meta.num_rows, file_mb=path.stat().st_size / 2**20,
        generated_s=generated, round_trip=exact, panel_bytes=cells * 8, mask_bytes=cells,
        demand_share=demands / cells, stockout_share=stockouts / cells,
    )
    gc.collect()
    if cli_times:
        # first, before this process has loaded any kernel: the first run finds the cache as it is
        say(f"[{spec.label}] command line")
        res.cli = cli_runs(path, cli_times, say)
    run_stages(spec, res, say)
    if profiles:
        say(f"[{spec.label}] profiling the routed forecast")
        res.profiles.append((f"routed forecast, {spec.name}", profile("forecast", spec, path, None)))
        if _backtest() is not None:
            n = min(spec.profile_items or spec.n_items, spec.n_items)
            say(f"[{spec.label}] profiling the backtest on {n:,} items")
            res.profiles.append((f"backtest, {n:,} random items of the {spec.label} panel",
                                 profile("backtest", spec, path, spec.profile_items)))
    return res


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small panels, under a minute (smoke check)")
    ap.add_argument("--out", type=Path, default=None,
                    help="results file (default benchmarks/RESULTS.md, --quick: benchmarks/data/RESULTS-quick.md)")
    ap.add_argument("--no-cli", action="store_true", help="skip the command-line runs")
    ap.add_argument("--profile-child", choices=("forecast", "backtest"), help=argparse.SUPPRESS)
    ap.add_argument("--file", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--items", type=int, default=None, help=argparse.SUPPRESS)
    ap.add_argument("--seed", type=int, default=0, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.profile_child:
        profile_child(args.profile_child, args.file, args.items, args.seed)
        return
    out = args.out or (DATA / "RESULTS-quick.md" if args.quick else HERE / "RESULTS.md")
    gc.collect()
    gc.freeze()  # the collections before each measured call then skip the modules' objects
    specs = QUICK if args.quick else FULL
    loads = [os.getloadavg()[0]]

    GUARD.start()

    def say(text: str) -> None:
        GUARD.stage = text
        loads.append(os.getloadavg()[0])
        print(f"{time.strftime('%H:%M:%S')} (load {loads[-1]:.2f}) {text}", file=sys.stderr, flush=True)

    started = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    load_start = load_average()
    t0 = time.perf_counter()
    info = machine()
    results = []
    for k, spec in enumerate(specs):
        results.append(bench_panel(spec, cli_times=0 if args.no_cli else (2 if k == 0 else 1),
                                   profiles=k == 0, say=say))
    loads.append(os.getloadavg()[0])
    write_results(out, results, info, args.quick, started, loads, load_start, load_average(),
                  time.perf_counter() - t0)
    say(f"wrote {out}")
    print(out.read_text())


if __name__ == "__main__":
    main()

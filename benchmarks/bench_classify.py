"""Time the demand-pattern classifier on a seeded synthetic panel.

Writes benchmarks/RESULTS-classify.md with the machine details, the time to
classify 30,000 items x 1,941 periods after JIT (with and without an
availability mask), and the ratio to one numpy ``sum()`` over the same array
measured in the same run. Target: under 1 s.

Run:  python benchmarks/bench_classify.py [--items N] [--periods T] [--repeats R]
"""

from __future__ import annotations

import argparse
import os
import platform
import time
from pathlib import Path

import numba
import numpy as np
import pandas as pd

from sparsedemand.classify import PATTERNS, STATUSES, _figures, classify
from sparsedemand.panel import DemandPanel

RESULTS = Path(__file__).with_name("RESULTS-classify.md")


def synthetic_panel(n_items: int, n_periods: int, *, seed: int = 2024) -> tuple[DemandPanel, DemandPanel]:
    """A mix of frequent, sparse, late-listed, silent and never-sold items.

    Returns the panel without a mask and the same demand with stock-out runs.
    """
    rng = np.random.default_rng(seed)
    rate = rng.beta(0.6, 1.8, size=n_items)  # chance of a demand per period
    size = rng.gamma(1.5, 2.0, size=n_items)  # mean extra units per demand
    occurs = rng.random((n_items, n_periods), dtype=np.float32) < rate[:, None].astype(np.float32)
    steady = rng.random(n_items) < 0.6  # steady sizes (Poisson) or variable ones (geometric)
    sizes = np.where(
        steady[:, None],
        1.0 + rng.poisson(size[:, None], (n_items, n_periods)),
        rng.geometric(1.0 / (1.0 + size[:, None]), (n_items, n_periods)).astype(np.float64),
    )
    values = np.where(occurs, sizes, 0.0)
    cols = np.arange(n_periods)
    listed = np.where(rng.random(n_items) < 0.2, rng.integers(0, n_periods, n_items), 0)
    values[cols[None, :] < listed[:, None]] = 0.0
    silent_from = np.where(rng.random(n_items) < 0.1, rng.integers(0, n_periods, n_items), n_periods)
    values[cols[None, :] >= silent_from[:, None]] = 0.0
    values[rng.random(n_items) < 0.03] = 0.0
    # stock-outs: runs of about two weeks starting at random periods
    out_start = rng.random((n_items, n_periods), dtype=np.float32) < 0.004
    run = np.zeros_like(out_start)
    for k in range(14):
        run[:, k:] |= out_start[:, : n_periods - k]
    items = pd.Index([f"P{i:05d}" for i in range(n_items)])
    periods = pd.RangeIndex(n_periods)
    plain = DemandPanel(values, items=items, periods=periods)
    masked = DemandPanel(values, items=items, periods=periods, available=~run)
    return plain, masked


def best_of(func, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return min(times)


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--items", type=int, default=30_000)
    parser.add_argument("--periods", type=int, default=1_941)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()

    plain, masked = synthetic_panel(args.items, args.periods)
    t0 = time.perf_counter()
    classify(plain.subset(slice(0, 10)))
    first_call = time.perf_counter() - t0  # includes JIT or cache load

    rows = []
    for label, panel in (("no mask", plain), ("with stock-out mask", masked)):
        t_sum = best_of(lambda: panel.values.sum(), args.repeats)
        t_kernel = best_of(lambda: _figures(panel), args.repeats)
        t_full = best_of(lambda: classify(panel), args.repeats)
        rows.append((label, t_sum, t_kernel, t_full))
    table = classify(masked)
    counts = table["pattern"].value_counts().reindex(PATTERNS + STATUSES, fill_value=0)

    lines = [
        "# Classifier benchmark",
        "",
        f"Panel: {args.items:,} items x {args.periods:,} periods, float64, seeded synthetic "
        "(benchmarks/bench_classify.py). Best of "
        f"{args.repeats} runs after JIT; the numpy sum is measured in the same run.",
        "",
        "## Machine",
        "",
        f"- CPU: {cpu_model()}",
        f"- cores: {os.cpu_count()}",
        f"- python {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}, "
        f"pandas {pd.__version__}",
        f"- platform: {platform.platform()}",
        f"- load average when measured (1/5/15 min): {', '.join(f'{x:.2f}' for x in os.getloadavg())}"
        " (other work on the machine slows every column, the numpy sum included)",
        "",
        "## Times",
        "",
        "| panel | numpy sum() | kernel only | classify() (table + reasons) | classify / sum | target |",
        "| --- | --- | --- | --- | --- | --- |",
    ]
    for label, t_sum, t_kernel, t_full in rows:
        verdict = "met" if t_full < 1.0 else "MISSED"
        lines.append(
            f"| {label} | {t_sum * 1e3:.1f} ms | {t_kernel * 1e3:.1f} ms | {t_full * 1e3:.1f} ms | "
            f"{t_full / t_sum:.1f}x | < 1 s: {verdict} |"
        )
    lines += [
        "",
        f"First call on 10 items (JIT compile or cache load): {first_call:.2f} s.",
        "",
        "## Patterns in the masked synthetic panel",
        "",
        "| pattern | items |",
        "| --- | --- |",
        *[f"| {name} | {int(n):,} |" for name, n in counts.items()],
        "",
    ]
    RESULTS.write_text("\n".join(lines), encoding="utf-8")
    print("\n".join(lines))


if __name__ == "__main__":
    main()

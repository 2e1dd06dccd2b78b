"""Time the HTML report on the demo assortment (about 2,000 part-depot series).

Builds a run folder with the synthetic tables of tests/report_run.py (the real
demo history and classifier; forecasts, audit, scores and stock made by hand)
and times build_report: reading the folder (history from demand.csv included)
and drawing and writing the file, best of N runs. Writes
benchmarks/RESULTS-report.md with the machine details. Target: a few seconds.

Run:  python benchmarks/bench_report.py [--parts N] [--repeats R] [--pages P]
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))  # the synthetic run folder lives with the tests

from bench_classify import cpu_model  # noqa: E402
from report_run import make_run  # noqa: E402

from sparsedemand.report import build_report, load_run  # noqa: E402

RESULTS = HERE / "RESULTS-report.md"


def best_of(func, repeats: int) -> tuple[float, float]:
    """Smallest wall time and smallest CPU time of this process over ``repeats`` calls.

    The CPU time is the steadier figure on a shared machine: it leaves out the
    time spent waiting for a core.
    """
    walls, cpus = [], []
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        func()
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
    return min(walls), min(cpus)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=1200)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--pages", type=int, default=25)
    args = parser.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "run"
        frames = make_run(folder, parts=args.parts, days=1092, horizon=28)
        n_items, n_periods = frames["panel"].shape
        build_report(folder, max_item_pages=args.pages)  # warm-up: fonts, numba caches
        t_load = best_of(lambda: load_run(folder), args.repeats)
        t_full = best_of(lambda: build_report(folder, max_item_pages=args.pages), args.repeats)
        history = load_run(folder).history
        t_given = best_of(lambda: build_report(folder, history=history, max_item_pages=args.pages),
                          args.repeats)
        t_few = best_of(lambda: build_report(folder, history=history, max_item_pages=0), args.repeats)
        size = (folder / "report.html").stat().st_size
        size_full = build_report(folder, history=history, max_item_pages=args.pages).stat().st_size

    per_page = [(g - f) / max(args.pages, 1) for g, f in zip(t_given, t_few)]
    lines = [
        "# Report benchmark",
        "",
        f"Run folder: the demo history ({args.parts:,} parts, {n_items:,} part-depot series x "
        f"{n_periods:,} days, 412k-row demand.csv) with every table of tests/report_run.py "
        f"(benchmarks/bench_report.py). Best of {args.repeats} runs after a warm-up; wall time and "
        "the CPU time of the process (steadier when other work shares the cores).",
        "",
        "## Machine",
        "",
        f"- CPU: {cpu_model()}",
        f"- cores: {os.cpu_count()}; load average at the end {os.getloadavg()[0]:.2f}",
        f"- python {platform.python_version()}, numpy {np.__version__}, pandas {pd.__version__}, "
        f"matplotlib {matplotlib.__version__}",
        f"- platform: {platform.platform()}",
        "",
        "## Times",
        "",
        "| step | wall | CPU |",
        "| --- | --- | --- |",
        f"| read the run folder (tables and demand.csv) | {t_load[0]:.2f} s | {t_load[1]:.2f} s |",
        f"| build_report, history read from the folder, {args.pages} item pages | {t_full[0]:.2f} s | "
        f"{t_full[1]:.2f} s |",
        f"| build_report, history given, {args.pages} item pages | {t_given[0]:.2f} s | {t_given[1]:.2f} s |",
        f"| build_report, history given, no item pages | {t_few[0]:.2f} s | {t_few[1]:.2f} s |",
        f"| one item page (difference / pages) | {per_page[0] * 1e3:.0f} ms | {per_page[1] * 1e3:.0f} ms |",
        "",
        f"Target: a few seconds for the whole report ({t_full[1]:.1f} s of CPU here).",
        "",
        f"Report size: {size_full / 1e6:.1f} MB with {args.pages} item pages, {size / 1e6:.1f} MB without.",
        "",
    ]
    RESULTS.write_text("\n".join(lines), encoding="utf-8")
    print("\n".join(lines))


if __name__ == "__main__":
    main()

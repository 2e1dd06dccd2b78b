"""Time the stock targets on a seeded synthetic panel, per distribution kind.

Writes benchmarks/RESULTS-stock.md with the machine details and the time of
``stock_targets`` for 30,000 items (lead times 1-8 periods per item) for each
predictive distribution kind, review periods 1 and 4, a cycle service target
and a fill-rate target, after JIT. The forecasts come from the registry
(SBA for "compound", SES for "normal", the recent mean for the bootstrap);
the zero-inflated parameters are moment fits so that the benchmark times the
stock stage only.

Run:  python benchmarks/bench_stock.py [--items N] [--periods T] [--repeats R]
"""

from __future__ import annotations

import argparse
import os
import platform
import time
from pathlib import Path
from types import SimpleNamespace

import numba
import numpy as np
import pandas as pd
from bench_classify import best_of, cpu_model, synthetic_panel

from sparsedemand import methods
from sparsedemand.stock import stock_targets

RESULTS = Path(__file__).with_name("RESULTS-stock.md")


def zero_inflated_fits(panel) -> tuple[SimpleNamespace, SimpleNamespace]:
    """Moment-matched ZIP and ZINB parameters per item (available periods from the first demand)."""
    values, mask = panel.values, panel.mask()
    use = mask & (np.arange(panel.n_periods)[None, :] >= panel.start[:, None])
    count = np.maximum(use.sum(axis=1), 1)
    mean = np.where(use, values, 0).sum(axis=1) / count
    var = np.where(use, (values - mean[:, None]) ** 2, 0).sum(axis=1) / count
    lam = np.maximum(mean + np.maximum(var / np.maximum(mean, 1e-9) - 1, 0), 1e-9)
    pi = np.clip(1 - mean / lam, 0, 0.99)
    zip_fit = SimpleNamespace(name="zip", mean=mean[:, None], distribution="zip",
                              dist_params={"pi": pi, "lam": (mean / (1 - pi))})
    mu = np.maximum(mean / (1 - pi), 1e-9)
    zinb_fit = SimpleNamespace(name="zinb", mean=mean[:, None], distribution="zinb",
                               dist_params={"pi": pi, "mu": mu, "r": np.full(len(mean), 2.0)})
    return zip_fit, zinb_fit


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--items", type=int, default=30_000)
    parser.add_argument("--periods", type=int, default=1_941)
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args()

    _, panel = synthetic_panel(args.items, args.periods)
    rng = np.random.default_rng(7)
    lead = rng.integers(1, 9, args.items)
    args_fit = (panel.values, panel.start, panel.available)
    fits = {
        "compound": methods.fit("sba", *args_fit, horizon=12),
        "normal": methods.fit("ses", *args_fit, horizon=12),
        "empirical": methods.fit("mean_recent", *args_fit, horizon=12),
    }
    fits["zip"], fits["zinb"] = zero_inflated_fits(panel)

    t0 = time.perf_counter()
    for fit in fits.values():  # JIT compile or cache load
        small = SimpleNamespace(name=fit.name, mean=fit.mean[:10], distribution=fit.distribution,
                                dist_params={k: v[:10] for k, v in fit.dist_params.items()})
        stock_targets(small, lead_time=lead[:10], service_level=0.95, history=panel.subset(slice(0, 10)))
    first_call = time.perf_counter() - t0

    rows = []
    for kind, fit in fits.items():
        for review in (1, 4):
            for target in ({"service_level": 0.95}, {"fill_rate": 0.95}):
                seconds = best_of(lambda: stock_targets(fit, lead_time=lead, review_period=review,
                                                        history=panel, **target), args.repeats)
                rows.append((kind, review, next(iter(target)), seconds))

    lines = [
        "# Stock-target benchmark",
        "",
        f"Panel: {args.items:,} items x {args.periods:,} periods, seeded synthetic with stock-outs "
        "(benchmarks/bench_classify.py); lead times 1-8 periods per item; bootstrap 2,000 paths per item. "
        f"Best of {args.repeats} runs after JIT.",
        "",
        "## Machine",
        "",
        f"- CPU: {cpu_model()}",
        f"- cores: {os.cpu_count()}",
        f"- python {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}, "
        f"pandas {pd.__version__}",
        f"- platform: {platform.platform()}",
        f"- load average at the end (1/5/15 min; other work shares the cores): "
        f"{' / '.join(f'{x:.1f}' for x in os.getloadavg())}",
        "",
        "## Times (stock_targets, whole table)",
        "",
        "| distribution kind | review period | target | seconds |",
        "| --- | --- | --- | --- |",
        *[f"| {k} | {r} | {t.replace('_', ' ')} | {s:.2f} |" for k, r, t, s in rows],
        "",
        f"First calls on 10 items, all kinds (JIT compile or cache load): {first_call:.2f} s.",
        "",
    ]
    RESULTS.write_text("\n".join(lines), encoding="utf-8")
    print("\n".join(lines))


if __name__ == "__main__":
    main()

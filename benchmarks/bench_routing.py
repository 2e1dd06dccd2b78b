"""Accuracy of the routed forecast against naive baselines and every single method.

Synthetic non-stationary slow movers with known means (level shifts, demand dying out; the
generator of the routing test, tests/test_route.py), several seeds. For each seed: the MSE of
every forecast against the true mean over the horizon. Writes benchmarks/RESULTS-routing.md.

Run: python benchmarks/bench_routing.py [--items 1000] [--seeds 5]
"""

from __future__ import annotations

import argparse
import platform
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))
sys.path.insert(0, str(HERE))

from bench_classify import cpu_model  # noqa: E402
from test_route import _slow_movers  # noqa: E402  (the test's generator: one definition)

from sparsedemand import methods as M  # noqa: E402
from sparsedemand.panel import DemandPanel  # noqa: E402
from sparsedemand.route import INTERMITTENT_BOUNDS, forecast  # noqa: E402

BASELINES = ("zeros", "mean_since_first", "repeat_last")


def _scores(values: np.ndarray, truth: np.ndarray) -> dict[str, float]:
    horizon = truth.shape[1]
    panel = DemandPanel(values, items=pd.RangeIndex(len(values)), periods=pd.RangeIndex(values.shape[1]))
    out = {"router": float(np.mean((forecast(panel, horizon).point.to_numpy() - truth) ** 2))}
    for name in M.METHODS:
        options = M.method_options(name)
        free = {k: None for k in ("alpha", "beta", "window") if k in options and options[k] != "same"}
        free = free if "cost" in options else {}
        if name == "seasonal_mean":
            free["season_length"] = 52
        fits = {name: {}}
        if "bounds" in options:
            fits[f"{name} (0.01-0.2)"] = {"bounds": INTERMITTENT_BOUNDS}
        for label, extra in fits.items():
            mean = M.fit(name, values, panel.start, None, horizon=horizon, **free, **extra).mean
            out[label] = float(np.mean((mean - truth) ** 2))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--items", type=int, default=1000)
    parser.add_argument("--seeds", type=int, default=5)
    args = parser.parse_args()
    started = time.time()
    rows = {}
    for seed in range(args.seeds):
        values, truth = _slow_movers(args.items, seed=1000 + seed)
        rows[seed] = _scores(values, truth)
    table = pd.DataFrame(rows)
    singles = table.drop(index="router")
    summary = pd.DataFrame({
        "router": table.loc["router"],
        "best single": singles.min(),
        "best single method": singles.idxmin(),
        **{name: table.loc[name] for name in BASELINES},
    })
    summary["router / best single"] = summary["router"] / summary["best single"]
    lines = [
        "# Routed forecast against baselines and single methods",
        "",
        f"{args.items} synthetic weekly slow movers per seed (156 periods of history, 12 ahead), "
        "known true means; MSE of each forecast against the true mean over the horizon.",
        f"Machine: {cpu_model()}, Python {platform.python_version()}; "
        f"run {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, {time.time() - started:.0f} s.",
        "",
        "## Per seed",
        "",
        "```",
        summary.to_string(float_format="%.3f"),
        "```",
        "",
        "## Mean MSE over seeds, every method",
        "",
        "```",
        table.mean(axis=1).sort_values().rename("mean MSE").to_frame().to_string(float_format="%.3f"),
        "```",
        "",
    ]
    (HERE / "RESULTS-routing.md").write_text("\n".join(lines), encoding="utf-8")
    print("\n".join(lines))


if __name__ == "__main__":
    main()

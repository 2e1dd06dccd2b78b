"""Speed of the forecasting kernels on a 30,000 x 1,941 synthetic intermittent panel.

Writes benchmarks/RESULTS-methods.md: machine details, the time of one numpy
sum() over the panel, the shared event extraction, each fixed-parameter
method as a ratio to that sum, each optimised method, and the first-call
compile time in a fresh process (cold cache) against a warm cache.

Run: python benchmarks/bench_methods.py [--items 30000] [--periods 1941]
Times are the best of several repeats; other processes on the machine slow
every figure, so the load average is recorded too.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

FIXED = [
    ("croston", {}), ("sba", {}), ("sbj", {}), ("tsb", {}), ("ses", {}),
    ("moving_average", {}), ("adida", {}), ("imapa", {}), ("zip", {}),
    ("zeros", {}), ("mean_all", {}), ("mean_since_first", {}), ("mean_recent", {}),
    ("repeat_last", {}), ("seasonal_mean", {"season_length": 364}),
]
OPTIMISED = [
    ("croston", {"alpha": None}), ("sba", {"alpha": None}), ("ses", {"alpha": None}),
    ("tsb", {"alpha": None, "beta": 0.1}), ("tsb", {"alpha": None, "beta": None}),
    ("sba", {"alpha": None, "beta": None}), ("croston", {"alpha": None, "cost": "mar"}),
    ("moving_average", {"window": None}), ("adida", {"alpha": None}),
    ("imapa", {"alpha": None}), ("zinb", {}),
]

COMPILE_SNIPPET = """
import time, numpy as np
t = time.perf_counter()
from sparsedemand.methods import fit, METHODS
y = (np.random.default_rng(0).random((4, 40)) < 0.3) * 2.0
s = np.zeros(4, np.int64)
for name in METHODS:
    opts = {"season_length": 7} if name == "seasonal_mean" else {}
    fit(name, y, s, None, horizon=2, **opts)
    fit(name, y, s, y >= 0, horizon=2, **opts)
fit("tsb", y, s, None, horizon=2, alpha=None, beta=None)
fit("moving_average", y, s, None, horizon=2, window=None)
print(time.perf_counter() - t)
"""


def make_panel(n_items: int, n_periods: int, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Intermittent demand: per-item demand probability 0.02-0.3, sizes 1 + Poisson(1-4)."""
    rng = np.random.default_rng(seed)
    p = rng.uniform(0.02, 0.3, n_items)
    lam = rng.uniform(1.0, 4.0, n_items)
    values = np.zeros((n_items, n_periods))
    for lo in range(0, n_items, 5000):
        hi = min(n_items, lo + 5000)
        occ = rng.random((hi - lo, n_periods)) < p[lo:hi, None]
        sizes = 1 + rng.poisson(np.broadcast_to(lam[lo:hi, None], occ.shape))
        values[lo:hi] = occ * sizes
    # items start selling at different times; a few never sell
    first = rng.integers(0, n_periods // 2, n_items)
    values[np.arange(n_periods)[None, :] < first[:, None]] = 0.0
    values[rng.random(n_items) < 0.01] = 0.0
    available = rng.random((n_items, n_periods)) > 0.03
    return values, available


def best_of(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def compile_times() -> tuple[float, float]:
    """First-call time in a fresh process with an empty cache, then with the cache warm."""
    env = dict(os.environ, NUMBA_CACHE_DIR=tempfile.mkdtemp(prefix="sd-numba-"))
    # a fresh copy of the package so its own __pycache__ caches play no part
    work = Path(tempfile.mkdtemp(prefix="sd-pkg-"))
    shutil.copytree(ROOT / "sparsedemand", work / "sparsedemand",
                    ignore=shutil.ignore_patterns("__pycache__"))
    env["PYTHONPATH"] = str(work)
    runs = []
    for _ in range(2):
        out = subprocess.run([sys.executable, "-c", COMPILE_SNIPPET], env=env, cwd=work,
                             capture_output=True, text=True, check=True)
        runs.append(float(out.stdout.strip().splitlines()[-1]))
    shutil.rmtree(work, ignore_errors=True)
    shutil.rmtree(env["NUMBA_CACHE_DIR"], ignore_errors=True)
    return runs[0], runs[1]


def machine() -> dict:
    import numba

    cpu = platform.processor() or ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        load = " ".join(Path("/proc/loadavg").read_text().split()[:3])
    except OSError:
        load = "n/a"
    return {
        "CPU": cpu, "cores": str(os.cpu_count()), "threads used": str(_workers()),
        "python": platform.python_version(), "numpy": np.__version__,
        "numba": numba.__version__, "platform": platform.platform(),
        "load average at start (1, 5, 15 min)": load,
    }


def _workers() -> int:
    from sparsedemand.methods.events import worker_count

    return worker_count()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--items", type=int, default=30000)
    ap.add_argument("--periods", type=int, default=1941)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--out", default=str(HERE / "RESULTS-methods.md"))
    args = ap.parse_args()

    info = machine()
    cold, warm = compile_times()
    from sparsedemand.methods import extract_events, fit

    values, available = make_panel(args.items, args.periods)
    start = np.zeros(args.items, np.int64)
    small = values[:50]
    for name, opts in FIXED + OPTIMISED:  # load every kernel before timing
        fit(name, small, start[:50], None, horizon=28, **opts)

    t_sum = best_of(lambda: values.sum(), args.repeats * 2)
    t_ext = best_of(lambda: extract_events(values, start), args.repeats)
    t_ext_mask = best_of(lambda: extract_events(values, start, available), args.repeats)
    events = extract_events(values, start)
    n_events = len(events.pos)

    rows = []
    for name, opts in FIXED:
        t = best_of(lambda: fit(name, values, start, None, horizon=28, events=events, **opts),
                    args.repeats)
        rows.append((name, opts, t))
    opt_rows = []
    for name, opts in OPTIMISED:
        t = best_of(lambda: fit(name, values, start, None, horizon=28, events=events, **opts), 2)
        opt_rows.append((name, opts, t))

    def label(name, opts):
        return name + (" " + ", ".join(f"{k}={v}" for k, v in opts.items()) if opts else "")

    lines = [
        "# Forecasting kernels: timings",
        "",
        f"Panel: {args.items:,} items x {args.periods:,} periods, synthetic intermittent demand "
        f"({n_events:,} demands, {n_events / values.size:.1%} of periods; 3 % of periods "
        "unavailable in the masked runs). Horizon 28. Best of several repeats.",
        "",
        "## Machine",
        "",
        *[f"- {k}: {v}" for k, v in info.items()],
        "",
        "## Reference and shared pass",
        "",
        "| step | time (ms) | ratio to one numpy sum() |",
        "| --- | ---: | ---: |",
        f"| numpy values.sum() | {t_sum * 1e3:.1f} | 1.00 |",
        f"| extract_events (no mask) | {t_ext * 1e3:.1f} | {t_ext / t_sum:.2f} |",
        f"| extract_events (with mask) | {t_ext_mask * 1e3:.1f} | {t_ext_mask / t_sum:.2f} |",
        "",
        "The event extraction is the one full pass over the panel; every kernel below",
        "reads only the events (`fit(..., events=...)`), so a run that fits several",
        "methods pays for it once.",
        "",
        "## Fixed-parameter kernels (events given)",
        "",
        "Target: within 3x one sum() (events given).",
        "",
        "| method | time (ms) | ratio to sum() | ratio incl. extraction | target |",
        "| --- | ---: | ---: | ---: | --- |",
        *[f"| {label(n, o)} | {t * 1e3:.1f} | {t / t_sum:.2f} | {(t + t_ext) / t_sum:.2f} "
          f"| {'met' if t / t_sum <= 3.0 else 'MISSED'} |" for n, o, t in rows],
        "",
        "## Optimised kernels (events given; target under 3 s)",
        "",
        "ZIP and ZINB have no smoothing constants: their parameters are always fitted by",
        "maximum likelihood. ZIP's fit is a closed form plus a one-dimensional Newton",
        "solve, so it is timed with the fixed-parameter kernels; ZINB searches its",
        "dispersion by profile likelihood, so it is timed here.",
        "",
        "| method | time (s) | ratio to sum() | target |",
        "| --- | ---: | ---: | --- |",
        *[f"| {label(n, o)} | {t:.2f} | {t / t_sum:.1f} | {'met' if t < 3.0 else 'MISSED'} |"
          for n, o, t in opt_rows],
        "",
        "## Compilation (all kernels, first calls, fresh process)",
        "",
        f"- empty cache (compile everything): {cold:.1f} s "
        f"({'met' if cold < 20.0 else 'MISSED'}: target under 20 s)",
        f"- warm cache (load compiled code): {warm:.1f} s",
        "",
    ]
    Path(args.out).write_text("\n".join(lines))
    print("\n".join(lines))


if __name__ == "__main__":
    main()

"""Invented daily panels with known per-period means, for calendar profiles.

The invented scenario: a cooperative of hardware-and-garden stores (four
stores, six categories). Trade-counter categories follow the working week,
garden categories also follow the seasons, the rest have no cycle at all. Each
item's own weekday shape is its category's with a small item-level deviation.
Slow items (demand probability 0.05 to 0.3 per day, sizes 1 + gamma) and fast
items (Poisson, 2 to 12 a day) are mixed; about a fifth of the items have
stock-out runs (no sales, recorded as not available); some items start late.

``python benchmarks/calendar_panels.py`` estimates profiles on a few seeds and
prints, for cycled and uncycled items, the share with a profile and the
squared error against the true future mean with and without profiles; then
times :func:`sparsedemand.profiles.estimate_profiles` on 30,000 x 1,941 days.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sparsedemand.panel import DemandPanel
from sparsedemand.profiles import estimate_profiles

START = "2021-01-04"  # a Monday
STORES = ("Quayside", "Millbrook", "Ridgeway", "Fordham")
# category, weekday shape (Mon..Sun) or None, yearly amplitude (0 = none)
CATEGORIES = (
    ("trade fixings", np.array([1.5, 1.3, 1.2, 1.2, 1.1, 0.5, 0.2]), 0.0),
    ("plumbing", np.array([1.3, 1.2, 1.2, 1.1, 1.0, 0.7, 0.5]), 0.0),
    ("garden seed", np.array([0.8, 0.8, 0.8, 0.9, 1.0, 1.5, 1.2]), 0.6),
    ("spares", None, 0.0),
    ("adhesives", None, 0.0),
    ("lamps", None, 0.0),
)


@dataclass(frozen=True)
class CalendarPanel:
    """A generated panel with the true mean of every history and future period."""

    panel: DemandPanel
    history_mean: np.ndarray  # items x periods
    future_mean: np.ndarray  # items x horizon
    cycled: np.ndarray  # bool per item: its true mean has a calendar cycle


def _shape(days: pd.PeriodIndex, weekday, amplitude, rng, n_items) -> np.ndarray:
    """Per-item multiplicative calendar shape (items x days), mean about 1."""
    if weekday is None:
        week = np.ones((n_items, 7))
    else:
        week = weekday / weekday.mean() * np.exp(rng.normal(0.0, 0.1, (n_items, 7)))
        week /= week.mean(axis=1, keepdims=True)
    out = week[:, np.asarray(days.day_of_week)]
    if amplitude:
        angle = 2 * np.pi * (np.asarray(days.day_of_year) - 120) / 365.25
        out = out * (1.0 + amplitude * np.cos(angle))[None, :]
    return out


def make_calendar_panel(
    *, n_items: int = 3000, days: int = 1092, horizon: int = 364, seed: int = 0
) -> CalendarPanel:
    """Generate the panel, its true means and which items are cycled.

    Examples
    --------
    >>> cp = make_calendar_panel(n_items=60, days=140, horizon=7, seed=1)
    >>> cp.panel.shape, cp.future_mean.shape
    ((60, 140), (60, 7))
    """
    rng = np.random.default_rng(seed)
    calendar = pd.period_range(START, periods=days + horizon, freq="D")
    cat = rng.integers(0, len(CATEGORIES), n_items)
    store = rng.integers(0, len(STORES), n_items)
    fast = rng.random(n_items) < 0.25
    p = np.where(fast, 1.0, rng.uniform(0.05, 0.3, n_items))
    size = np.where(fast, rng.uniform(2.0, 12.0, n_items), rng.uniform(1.5, 4.0, n_items))
    shape = np.ones((n_items, days + horizon))
    for c, (_, weekday, amplitude) in enumerate(CATEGORIES):
        rows = np.flatnonzero(cat == c)
        shape[rows] = _shape(calendar, weekday, amplitude, rng, rows.size)
    mean = p[:, None] * size[:, None] * shape
    hist = mean[:, :days]
    occur_p = np.clip(p[:, None] * shape[:, :days], 0.0, 0.95)
    occurs = rng.random(hist.shape) < occur_p
    slow_size = size[:, None] * shape[:, :days] * p[:, None] / np.maximum(occur_p, 1e-12)
    gamma = rng.gamma(2.0, np.maximum(slow_size - 1.0, 0.05) / 2.0)
    values = np.where(fast[:, None], rng.poisson(hist), np.where(occurs, 1.0 + gamma, 0.0))
    values = np.floor(values + rng.random(values.shape))  # random rounding keeps the mean exact
    late = rng.random(n_items) < 0.1
    begin = np.where(late, rng.integers(0, days // 2, n_items), 0)
    values[np.arange(days)[None, :] < begin[:, None]] = 0.0
    available = np.ones(values.shape, dtype=bool)
    for i in np.flatnonzero(rng.random(n_items) < 0.2):
        for _ in range(rng.integers(1, 4)):
            at = rng.integers(0, days - 5)
            available[i, at: at + rng.integers(5, 31)] = False
    values[~available] = 0.0
    attrs = pd.DataFrame({"location": np.array(STORES)[store],
                          "category": np.array([c[0] for c in CATEGORIES])[cat]},
                         index=pd.Index([f"item{i:05d}" for i in range(n_items)]))
    panel = DemandPanel(values, items=attrs.index, periods=calendar[:days],
                        available=available, attributes=attrs)
    cycled = np.array([CATEGORIES[c][1] is not None for c in cat])
    hist = np.where(np.arange(days)[None, :] < begin[:, None], 0.0, hist)
    return CalendarPanel(panel, hist, mean[:, days:], cycled)


def error_ratios(cp: CalendarPanel, history: np.ndarray, future: np.ndarray, rows,
                 *, window: int = 182) -> dict:
    """Squared error against the true future mean, with profile factors vs flat.

    ``shape``: the level is the true mean over the horizon (an oracle), so
    only the shape is scored, every item alike; its ratio is reported where
    the flat error is not zero (it is zero on uncycled items, whose shape
    error is given as ``shape_mse``). ``level``: the level is the mean of
    the last ``window`` in-stock periods, divided by their factors, as a
    method would estimate it; summed squared errors, with vs without.
    """
    mu = cp.future_mean[rows]
    f = future[rows] / future[rows].mean(axis=1, keepdims=True)
    shape = mu / mu.mean(axis=1, keepdims=True)
    shape_with, shape_flat = ((shape - f) ** 2).mean(), ((shape - 1.0) ** 2).mean()
    y = cp.panel.values[rows, -window:]
    ok = cp.panel.mask()[rows, -window:]
    h = history[rows, -window:]
    with np.errstate(invalid="ignore", divide="ignore"):
        lvl_with = np.nan_to_num((y * ok).sum(axis=1) / (h * ok).sum(axis=1))
        lvl_flat = np.nan_to_num((y * ok).sum(axis=1) / ok.sum(axis=1))
    sq_with = ((mu - lvl_with[:, None] * future[rows]) ** 2).sum()
    sq_flat = ((mu - lvl_flat[:, None]) ** 2).sum()
    return {"shape_ratio": shape_with / shape_flat if shape_flat > 1e-12 else float("nan"),
            "shape_mse": shape_with, "level_ratio": sq_with / sq_flat}


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--items", type=int, default=3000)
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--no-timing", action="store_true")
    args = ap.parse_args(argv)
    for seed in range(args.seeds):
        cp = make_calendar_panel(n_items=args.items, seed=seed)
        prof = estimate_profiles(cp.panel)
        fut = prof.future_factors(cp.future_mean.shape[1])
        hist = prof.history_factors()
        has = np.zeros(cp.panel.n_items, dtype=bool)
        for t in prof.tables:
            has |= t.source != "none"
        for name, rows in (("cycled", np.flatnonzero(cp.cycled)),
                           ("uncycled", np.flatnonzero(~cp.cycled))):
            r = error_ratios(cp, hist, fut, rows)
            print(f"seed {seed} {name:>8}: {rows.size:5d} items, with a profile "
                  f"{has[rows].mean():6.1%}; MSE with/without profiles: oracle level "
                  f"{r['shape_ratio']:.3f} (shape MSE {r['shape_mse']:.4f}), 182-day level "
                  f"{r['level_ratio']:.3f}")
    if args.no_timing:
        return
    rng = np.random.default_rng(0)
    n_items, days = 30_000, 1941
    values = np.where(rng.random((n_items, days)) < 0.2, rng.integers(1, 5, (n_items, days)), 0.0)
    attrs = pd.DataFrame({"location": rng.integers(0, 10, n_items).astype(str),
                          "category": rng.integers(0, 40, n_items).astype(str)})
    avail = rng.random((n_items, days)) > 0.02
    panel = DemandPanel(values, items=pd.RangeIndex(n_items), available=avail,
                        periods=pd.period_range("2019-01-01", periods=days, freq="D"),
                        attributes=attrs)
    estimate_profiles(panel)  # compile and warm up
    best_sum = min(_timed(lambda: panel.values.sum()) for _ in range(5))
    best = min(_timed(lambda: estimate_profiles(panel)) for _ in range(3))
    print(f"estimate_profiles on {n_items:,} x {days:,} days: {best:.3f} s "
          f"({best / best_sum:.0f}x one numpy sum of {best_sum * 1e3:.1f} ms)")


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


if __name__ == "__main__":
    main()

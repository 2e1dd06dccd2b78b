"""Synthetic run folders for the report tests.

``make_run`` writes the tables the other commands write (patterns, forecasts,
audit, scores, item scores, stock) for a small demo history. Patterns come
from the real classifier; forecasts, audit rows, scores and stock targets are
made by hand here so that the report can be tested on its own.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from sparsedemand.classify import classify
from sparsedemand.demo import DemoSpec, make_demo
from sparsedemand.io import Columns, from_frame, write_table

POLICY = {"smooth": "ses", "erratic": "sba", "intermittent": "sba", "lumpy": "sba",
          "gone-quiet": "tsb", "too-short": "mean_since_first", "never-sold": "zeros"}
METHODS = ("router", "sba", "tsb", "ses", "zeros", "mean_since_first", "repeat_last")
LEVELS = (0.5, 0.8, 0.9, 0.95)
DEMO_COLUMNS = Columns(attributes=("lead_time", "safety_critical"))


def demo_history(*, parts: int = 40, days: int = 364, seed: int = 5):
    """A small demo history as a long table and as a panel.

    Two items are added so that every run has items without a CV²: one never
    sold and one with a single demand near the end.
    """
    table = make_demo(DemoSpec(parts=parts, days=days, seed=seed))
    first, last = table["period"].min(), table["period"].max()
    late = sorted(table["period"].unique())[-20]
    extra = pd.DataFrame({
        "item": ["HIL-NEW0001", "HIL-NEW0001", "RIV-OLD0001", "RIV-OLD0001"],
        "period": [late, last, first, last],
        "quantity": [2, 0, 0, 0],
        "in_stock": 1,
        "location": ["Hill depot", "Hill depot", "River depot", "River depot"],
        "category": "bearings",
        "unit_price": [20.0, 20.0, 15.0, 15.0],
        "lead_time": 7,
        "safety_critical": 0,
    })
    table = pd.concat([table, extra], ignore_index=True)
    return table, from_frame(table, columns=DEMO_COLUMNS)


def hand_forecasts(panel, horizon: int) -> pd.DataFrame:
    """Mean of the last 90 available periods per item, Poisson quantiles."""
    values, ok = panel.values[:, -90:], panel.mask()[:, -90:]
    mean = (values * ok).sum(axis=1) / np.maximum(ok.sum(axis=1), 1)
    periods = panel.future_periods(horizon)
    n = panel.n_items
    frame = pd.DataFrame({
        "item": np.repeat(panel.items.astype(str).to_numpy(), horizon),
        "step": np.tile(np.arange(1, horizon + 1), n),
        "period": np.tile(np.asarray([str(p) for p in periods]), n),
        "forecast": np.repeat(mean, horizon),
    })
    for level in LEVELS:
        frame[f"q{level * 100:.6g}"] = stats.poisson.ppf(level, frame["forecast"].clip(lower=1e-9))
    return frame


def hand_audit(classes: pd.DataFrame) -> pd.DataFrame:
    """Audit rows in the router's layout, with its kinds of warnings."""
    method = classes["pattern"].map(POLICY)
    warnings = []
    for pattern, unavailable in zip(classes["pattern"], classes["unavailable_periods"]):
        notes = []
        if unavailable > 0:
            notes.append(f"{int(unavailable)} out-of-stock periods left out")
        if pattern == "gone-quiet":
            notes.append("no recent demand: check for obsolescence")
        warnings.append("; ".join(notes))
    return pd.DataFrame({
        "item": classes["item"].to_numpy(),
        "pattern": classes["pattern"].to_numpy(),
        "adi": classes["adi"].to_numpy(),
        "cv2": classes["cv2"].to_numpy(),
        "n_demands": classes["n_demands"].to_numpy(),
        "method": method.to_numpy(),
        "parameters": np.where(method.isin(["ses", "sba", "tsb"]), "alpha=0.1 (optimised)", ""),
        "in_sample_cost": np.linspace(0.1, 2.0, len(classes)),
        "cost_measure": "mse",
        "distribution": np.where(method == "zeros", "point", "compound"),
        "rule": "default policy",
        "reason": [f"{r}; default policy row '{p}' -> {m}"
                   for r, p, m in zip(classes["reason"], classes["pattern"], method)],
        "warnings": warnings,
    })


def hand_scores(classes: pd.DataFrame, *, seed: int = 1) -> pd.DataFrame:
    """Long backtest scores; the router is made the best on the scaled errors."""
    rng = np.random.default_rng(seed)
    rows = []
    patterns = ["all", *dict.fromkeys(classes["pattern"])]
    for pattern in patterns:
        for k, method in enumerate(METHODS):
            quality = 0.7 if method == "router" else 0.9 + 0.1 * k
            for metric, value in (("mase", quality), ("rmsse", quality * 0.9),
                                  ("scaled_bias", rng.normal(0, 0.2)), ("mae", quality * 2.0),
                                  ("pis", rng.normal(0, 3)), ("shortages", rng.integers(0, 9)),
                                  ("fill_rate", min(0.99, 1.15 - 0.4 * quality)),
                                  ("cycle_service_level", 0.8), ("avg_on_hand", 2.0 + k),
                                  ("stockout_periods", 3.0 * quality)):
                rows.append((method, pattern, "item", metric, float(value)))
            for level in LEVELS:
                tag = f"q{level * 100:.6g}"
                rows.append((method, pattern, "item", f"coverage_{tag}", min(1.0, level + rng.normal(0, 0.04))))
                rows.append((method, pattern, "item", f"spl_{tag}", quality * (1.2 - level)))
    for k, method in enumerate(METHODS):
        for level in ("location", "category", "total"):
            rows.append((method, "all", level, "rmsse", 0.5 + 0.05 * k))
    return pd.DataFrame(rows, columns=["method", "pattern", "level", "metric", "value"])


def hand_item_scores(classes: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for item, pattern in zip(classes["item"], classes["pattern"]):
        for k, method in enumerate(METHODS):
            rows.append((item, method, pattern, 0.8 + 0.1 * k, 0.7 + 0.1 * k))
    return pd.DataFrame(rows, columns=["item", "method", "pattern", "mase", "rmsse"])


def hand_stock(panel, audit: pd.DataFrame, forecasts: pd.DataFrame) -> pd.DataFrame:
    mean = forecasts.groupby("item", sort=False)["forecast"].first().reindex(audit["item"]).to_numpy()
    lead = panel.attribute("lead_time", 7).astype(float).to_numpy()
    price = panel.attribute("unit_price", 1.0).astype(float).to_numpy()
    mu = mean * lead
    rop = stats.poisson.ppf(0.95, np.maximum(mu, 1e-9))
    safety = rop - mu
    return pd.DataFrame({
        "item": audit["item"].to_numpy(),
        "method": audit["method"].to_numpy(),
        "mean_lead_time_demand": mu,
        "reorder_point": rop,
        "order_up_to": rop + np.ceil(mean * 7),
        "safety_stock": safety,
        "expected_fill_rate": np.where(mu > 0, 0.97, 1.0),
        "distribution": audit["distribution"].to_numpy(),
        "unit_price": price,
        "safety_stock_value": safety * price,
        "order_quantity": np.maximum(rop - 1, 0),
    })


def make_run(folder: Path, *, parts: int = 40, days: int = 364, seed: int = 5, horizon: int = 14,
             tables=("patterns", "forecasts", "audit", "scores", "item_scores", "stock"),
             history: str = "demand.csv") -> dict:
    """Write a run folder; ``history`` is ``"demand.csv"``, ``"run.json"`` or ``"none"``.

    Returns the frames written, by table name, plus ``"panel"``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    table, panel = demo_history(parts=parts, days=days, seed=seed)
    classes = classify(panel)
    frames = {"patterns": classes}
    frames["forecasts"] = hand_forecasts(panel, horizon)
    frames["audit"] = hand_audit(classes)
    frames["scores"] = hand_scores(classes)
    frames["item_scores"] = hand_item_scores(classes)
    frames["stock"] = hand_stock(panel, frames["audit"], frames["forecasts"])
    for name in tables:
        write_table(frames[name], folder / f"{name}.csv")
    if history == "demand.csv":
        write_table(table, folder / "demand.csv")
    elif history == "run.json":
        source = folder / "input" / "sales.csv"
        write_table(table.rename(columns={"quantity": "units"}), source)
        settings = {"input": "input/sales.csv", "horizon": horizon,
                    "columns": {"quantity": "units", "attributes": ["lead_time", "safety_critical"]},
                    "frequency": None, "classify_options": {"adi_cutoff": 1.32, "cv2_cutoff": 0.49}}
        (folder / "run.json").write_text(json.dumps(settings), encoding="utf-8")
    frames["panel"] = panel
    return frames

"""One planning cycle from a Python session, on the invented parts-distributor demo.

Run: python examples/planning_cycle.py [OUT_DIR]
"""

from __future__ import annotations

import sys
from pathlib import Path

import sparsedemand as sd
from sparsedemand.demo import DemoSpec
from sparsedemand.io import Columns, staged_output, write_table
from sparsedemand.stock import totals_text


def main(out: Path) -> None:
    history = sd.make_demo(DemoSpec(parts=300, seed=11))
    panel = sd.from_frame(history, columns=Columns(attributes=("lead_time", "safety_critical")))

    patterns = sd.classify(panel)
    print(patterns["pattern"].value_counts().to_string(), end="\n\n")

    # Try TSB on lumpy items: the policy file replaces that row of the default table.
    policy = Path(__file__).with_name("policy.toml")
    result = sd.forecast(panel, 28, policy=policy, seed=0)
    print(result.audit[["item", "pattern", "method", "parameters"]].head().to_string(), end="\n\n")

    scores = sd.backtest(panel, holdout=28, origins=2, policy=policy, seed=0)
    print(scores.summary_text(), end="\n\n")

    targets = sd.stock_targets(
        result.item_forecasts(),
        lead_time=panel.attribute("lead_time").to_numpy(int),
        service_level=0.95,
        unit_price=panel.attribute("unit_price").to_numpy(float),
        history=panel,
        items=panel.items,
    )
    print(totals_text(targets))

    with staged_output(out) as stage:
        write_table(result.table(), stage / "forecasts.csv")
        write_table(result.audit, stage / "audit.csv")
        write_table(scores.scores, stage / "scores.csv")
        write_table(scores.item_scores, stage / "item_scores.csv")
        write_table(targets, stage / "stock.csv")
    report = sd.build_report(out, history=panel)
    print(f"\nreport: {report}")


if __name__ == "__main__":
    main(Path(sys.argv[1] if len(sys.argv) > 1 else "planning-cycle-output"))

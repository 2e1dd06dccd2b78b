"""Build the HTML report of a run folder, or of a fresh demo run.

    python examples/report_from_run.py                 # demo run in ./demo-output, then its report
    python examples/report_from_run.py RUN_DIR [OUT]   # report of an existing run folder

The report is one HTML file (charts embedded, no network needed): open it in
any browser or attach it to an e-mail.
"""

from __future__ import annotations

import sys
from pathlib import Path

from sparsedemand.errors import InputError
from sparsedemand.report import build_report


def main(argv: list[str]) -> int:
    if argv:
        run_dir = Path(argv[0])
    else:
        from sparsedemand.demo import run_demo

        run_dir = Path("demo-output")
        run_demo(run_dir, parts=200)
    out = Path(argv[1]) if len(argv) > 1 else run_dir / "report.html"
    try:
        path = build_report(run_dir, out=out, title="Spare parts: demand, forecasts and stock")
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

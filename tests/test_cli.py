"""The command line end to end on a small demo file: outputs, summaries, and one-line errors
that leave nothing behind."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from sparsedemand import cli
from sparsedemand.demo import DemoSpec, make_demo

SCRIPT = Path(sys.executable).with_name("sparsedemand")
FORECAST_COLUMNS = ["item", "step", "period", "forecast", "q50", "q80", "q90", "q95"]
AUDIT_COLUMNS = ["item", "pattern", "adi", "cv2", "n_demands", "method", "parameters", "in_sample_cost",
                 "reason", "warnings"]


@pytest.fixture(scope="module")
def demo_csv(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("input") / "demand.csv"
    make_demo(DemoSpec(parts=40, days=200)).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def n_items(demo_csv) -> int:
    frame = pd.read_csv(demo_csv, usecols=["item"])
    return frame["item"].nunique()


def run(capsys, *argv) -> tuple[int, str, str]:
    """Run the console entry point in this process; return (exit code, stdout, stderr)."""
    capsys.readouterr()
    with pytest.raises(SystemExit) as info:
        cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return info.value.code, out, err


def leftovers(folder: Path) -> list[str]:
    """Staging or backup folders a command may have left in ``folder``."""
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


# ---------------------------------------------------------------- commands end to end


def test_console_script_classifies_the_demo_file(demo_csv, n_items, tmp_path):
    out = tmp_path / "patterns.csv"
    proc = subprocess.run([str(SCRIPT), "classify", str(demo_csv), "--out", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    table = pd.read_csv(out)
    assert len(table) == n_items
    assert {"item", "pattern", "reason", "adi", "cv2", "n_demands"} <= set(table.columns)
    # terminal summary: items per pattern, every pattern and status listed
    for name in ("smooth", "erratic", "intermittent", "lumpy", "gone-quiet", "too-short", "never-sold"):
        assert name in proc.stdout
    assert "items" in proc.stdout and "volume" in proc.stdout
    assert "demand.csv (long layout)" in proc.stderr and f"{n_items} items" in proc.stderr


@pytest.fixture(scope="module")
def forecast_run(demo_csv, tmp_path_factory):
    out = tmp_path_factory.mktemp("runs") / "forecast"
    with pytest.raises(SystemExit) as info:
        cli.main(["forecast", str(demo_csv), "--horizon", "7", "--out", str(out)])
    assert info.value.code == 0
    return out


def test_forecast_writes_tables_and_manifest(forecast_run, n_items, capsys):
    assert sorted(p.name for p in forecast_run.iterdir()) == ["audit.csv", "forecasts.csv", "patterns.csv",
                                                             "run.json"]
    table = pd.read_csv(forecast_run / "forecasts.csv")
    assert list(table.columns) == FORECAST_COLUMNS
    assert len(table) == 7 * n_items and table["step"].between(1, 7).all()
    assert table["period"].iloc[:7].tolist() == [str(p) for p in pd.period_range("2024-06-21", periods=7, freq="D")]
    audit = pd.read_csv(forecast_run / "audit.csv", keep_default_na=False)
    assert set(AUDIT_COLUMNS) <= set(audit.columns) and len(audit) == n_items
    manifest = json.loads((forecast_run / "run.json").read_text())
    assert manifest["command"] == "forecast" and manifest["horizon"] == 7
    assert manifest["input"].endswith("demand.csv")
    assert leftovers(forecast_run.parent) == []


def test_forecast_prints_items_per_pattern_and_method(demo_csv, n_items, tmp_path, capsys):
    code, out, err = run(capsys, "forecast", demo_csv, "--horizon", "3", "--out", tmp_path / "f")
    assert code == 0
    assert "pattern" in out and "method" in out and "with_warnings" in out
    assert "intermittent" in out and "sba" in out
    total = [line for line in out.splitlines() if line.startswith("all")]
    assert len(total) == 1 and int(total[0].split()[1]) == n_items
    assert "wrote" in err


def test_forecast_parquet(demo_csv, tmp_path, capsys):
    out = tmp_path / "pq"
    code, _, err = run(capsys, "forecast", demo_csv, "--horizon", "4", "--out", out, "--format", "parquet")
    assert code == 0, err
    assert {p.name for p in out.iterdir()} == {"audit.parquet", "forecasts.parquet", "patterns.parquet", "run.json"}
    assert list(pd.read_parquet(out / "forecasts.parquet").columns) == FORECAST_COLUMNS
    assert set(AUDIT_COLUMNS) <= set(pd.read_parquet(out / "audit.parquet").columns)


def test_forecast_with_policy_and_override_files(demo_csv, tmp_path, capsys):
    policy = tmp_path / "policy.toml"
    policy.write_text('[patterns.lumpy]\nmethod = "tsb"\nalpha = 0.1\n', encoding="utf-8")
    first = pd.read_csv(demo_csv, usecols=["item"])["item"].iloc[0]
    overrides = tmp_path / "overrides.csv"
    overrides.write_text(f"item,method\n{first},zeros\n", encoding="utf-8")
    out = tmp_path / "f"
    code, _, err = run(capsys, "forecast", demo_csv, "--horizon", "3", "--out", out,
                       "--policy", policy, "--overrides", overrides)
    assert code == 0, err
    audit = pd.read_csv(out / "audit.csv", keep_default_na=False).set_index("item")
    lumpy = audit[(audit["pattern"] == "lumpy") & (audit.index != first)]
    assert len(lumpy) and (lumpy["method"] == "tsb").all()
    assert lumpy["rule"].str.contains("policy.toml, line 1").all()
    assert audit.loc[first, "method"] == "zeros" and "overrides.csv, line 2" in audit.loc[first, "rule"]
    forecasts = pd.read_csv(out / "forecasts.csv")
    assert (forecasts.loc[forecasts["item"] == first, "forecast"] == 0).all()


def test_holdout_selection_writes_the_scores(demo_csv, tmp_path, capsys):
    out = tmp_path / "sel"
    code, _, err = run(capsys, "forecast", demo_csv, "--horizon", "5", "--out", out, "--selection", "holdout")
    assert code == 0, err
    table = pd.read_csv(out / "selection.csv")
    assert list(table.columns) == ["pattern", "method", "mean_rmsse", "items", "scored_items", "chosen"]
    assert (table.groupby("pattern")["chosen"].sum() == 1).all()
    best = table.loc[table.groupby("pattern")["mean_rmsse"].idxmin()]
    assert best["chosen"].all()


def test_stock_writes_targets_and_prints_the_caution(demo_csv, n_items, tmp_path, capsys):
    out = tmp_path / "stock"
    code, stdout, err = run(capsys, "stock", demo_csv, "--lead-time", "3", "--out", out)
    assert code == 0, err
    assert {"stock.csv", "forecasts.csv", "audit.csv", "patterns.csv", "run.json"} <= {p.name for p in out.iterdir()}
    stock = pd.read_csv(out / "stock.csv")
    assert len(stock) == n_items and {"item", "reorder_point", "order_up_to", "safety_stock"} <= set(stock.columns)
    assert (stock["order_up_to"] >= stock["reorder_point"]).all()
    assert json.loads((out / "run.json").read_text())["command"] == "stock"
    assert "Stock targets for" in stdout
    # common practice: stock targets for spares come with a caution
    assert "decision support" in stdout and "safety-critical" in stdout.lower()


def test_stock_with_a_lead_time_column(demo_csv, tmp_path, capsys):
    out = tmp_path / "stock"
    code, _, err = run(capsys, "stock", demo_csv, "--lead-time-column", "lead_time", "--out", out, "--quiet")
    assert code == 0, err
    stock = pd.read_csv(out / "stock.csv")
    leads = pd.read_csv(demo_csv).groupby("item")["lead_time"].first()
    assert stock.set_index("item")["lead_time"].to_dict() == leads.to_dict()


def test_report_from_a_forecast_run(forecast_run, tmp_path, capsys):
    target = tmp_path / "report.html"
    code, _, err = run(capsys, "report", forecast_run, "--out", target)
    assert code == 0, err
    html = target.read_text(encoding="utf-8")
    assert html.lstrip().lower().startswith("<!doctype html") and "</html>" in html
    assert "wrote" in err


# ---------------------------------------------------------------- bad input


def _bad_policy(tmp: Path) -> Path:
    path = tmp / "policy.toml"
    path.write_text('[patterns.lumpy]\n\nmethod = "holt"\n', encoding="utf-8")
    return path


def _unknown_item(tmp: Path) -> Path:
    path = tmp / "overrides.csv"
    path.write_text("item,method\nNO-SUCH-PART,zeros\n", encoding="utf-8")
    return path


BAD = {
    "missing file": (["forecast", "{missing}", "--horizon", "3"], ["nothing.csv", "no such file"]),
    "bad column": (["forecast", "{csv}", "--horizon", "3", "--quantity-column", "qty"],
                   ["missing column 'qty'", "columns found: item, period, quantity"]),
    "horizon 0": (["forecast", "{csv}", "--horizon", "0"], ["--horizon"]),
    "quantile 1.2": (["forecast", "{csv}", "--horizon", "3", "--quantiles", "0.5,1.2"], ["--quantiles"]),
    "quantile text": (["forecast", "{csv}", "--horizon", "3", "--quantiles", "0.5,high"], ["--quantiles", "high"]),
    "policy line": (["forecast", "{csv}", "--horizon", "3", "--policy", "{policy}"],
                    ["policy.toml, line 3", "unknown method 'holt'"]),
    "override item": (["forecast", "{csv}", "--horizon", "3", "--overrides", "{overrides}"],
                      ["overrides.csv, line 2", "unknown item 'NO-SUCH-PART'"]),
    "unknown option": (["forecast", "{csv}", "--horizon", "3", "--horizn", "4"], ["--horizn"]),
    "both lead times": (["stock", "{csv}", "--lead-time", "3", "--lead-time-column", "lead_time"],
                        ["--lead-time", "--lead-time-column"]),
    "no lead time": (["stock", "{csv}"], ["--lead-time", "--lead-time-column"]),
}


def _argv(template, demo_csv, tmp_path, out):
    values = {"csv": demo_csv, "missing": tmp_path / "nothing.csv", "policy": _bad_policy(tmp_path),
              "overrides": _unknown_item(tmp_path)}
    return [a.format(**values) for a in template] + ["--out", str(out)]


def check_one_line_error(code: int, err: str, parts) -> str:
    assert code == 2, err
    lines = [line for line in err.splitlines() if line.strip()]
    errors = [line for line in lines if line.startswith("error:")]
    assert len(errors) == 1 and lines[-1] == errors[0], err
    assert "Traceback" not in err
    for part in parts:
        assert part in errors[0], (part, errors[0])
    return errors[0]


@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_is_one_line_error_and_writes_nothing(case, demo_csv, tmp_path, capsys):
    template, parts = BAD[case]
    runs = tmp_path / "runs"
    runs.mkdir()
    out = runs / "out"
    code, stdout, err = run(capsys, *_argv(template, demo_csv, tmp_path, out))
    check_one_line_error(code, err, parts)
    assert not out.exists() and leftovers(runs) == []
    assert stdout == ""


def test_classify_with_a_bad_column_writes_no_file(demo_csv, tmp_path, capsys):
    out = tmp_path / "patterns.csv"
    code, _, err = run(capsys, "classify", demo_csv, "--item-column", "part", "--out", out)
    check_one_line_error(code, err, ["missing column 'part'", "columns found:"])
    assert list(tmp_path.iterdir()) == []


def test_console_script_exit_code_for_a_bad_option(demo_csv, tmp_path):
    out = tmp_path / "out"
    proc = subprocess.run([str(SCRIPT), "forecast", str(demo_csv), "--horizon", "3", "--quantiles", "0.5,2",
                           "--out", str(out)], capture_output=True, text=True, timeout=120)
    check_one_line_error(proc.returncode, proc.stderr, ["--quantiles"])
    assert not out.exists()


def test_a_failure_while_writing_leaves_the_previous_run_untouched(demo_csv, tmp_path, capsys, monkeypatch):
    import sparsedemand.io as io

    out = tmp_path / "run"
    code, _, err = run(capsys, "forecast", demo_csv, "--horizon", "2", "--out", out)
    assert code == 0, err
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    real, calls = io.write_table, []

    def failing(frame, path, **kw):
        calls.append(path)
        if len(calls) == 2:
            raise OSError(28, "No space left on device", str(path))
        return real(frame, path, **kw)

    monkeypatch.setattr(io, "write_table", failing)
    code, _, err = run(capsys, "forecast", demo_csv, "--horizon", "5", "--out", out)
    check_one_line_error(code, err, ["No space left on device"])
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert leftovers(tmp_path) == []


def test_negative_lead_time_names_the_option(demo_csv, tmp_path, capsys):
    code, _, err = run(capsys, "stock", demo_csv, "--lead-time", "-1", "--out", tmp_path / "out")
    check_one_line_error(code, err, ["--lead-time"])

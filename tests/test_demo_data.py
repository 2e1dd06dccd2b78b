"""The built-in demo scenario and the command line around it (``demo --data-only`` only)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import sparsedemand
from sparsedemand.cli import main
from sparsedemand.demo import DemoSpec, make_demo
from sparsedemand.errors import InputError
from sparsedemand.io import Columns, from_frame, read_demand

DEMO_COLUMNS = Columns(attributes=("lead_time", "safety_critical"))


@pytest.fixture(scope="module")
def demo_table() -> pd.DataFrame:
    return make_demo(DemoSpec(parts=200, seed=7))


@pytest.fixture(scope="module")
def demo_panel(demo_table):
    return from_frame(demo_table, columns=DEMO_COLUMNS, return_summary=True)


# ---------------------------------------------------------------- the generator


def test_same_seed_same_table():
    spec = DemoSpec(parts=30, seed=5)
    pd.testing.assert_frame_equal(make_demo(spec), make_demo(spec))


def test_other_seed_other_table():
    a = make_demo(DemoSpec(parts=30, seed=5))
    b = make_demo(DemoSpec(parts=30, seed=6))
    assert not (a.shape == b.shape and a.equals(b))


@pytest.mark.parametrize(("spec", "part"), [(DemoSpec(parts=0), "parts"), (DemoSpec(days=10), "days")])
def test_bad_spec(input_error, spec, part):
    input_error(lambda: make_demo(spec), part)


@pytest.mark.parametrize("days", [28, 29, 120])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_short_history_works(days, seed):
    # 28 days is the shortest history the generator accepts: every such history is generated
    # and loads as a daily panel of exactly that many days, starting on 2023-12-04
    table = make_demo(DemoSpec(parts=50, days=days, seed=seed))
    assert table["period"].nunique() == days
    assert table["period"].min() == "2023-12-04"
    assert table["period"].max() == str((pd.Timestamp("2023-12-04") + pd.Timedelta(days=days - 1)).date())
    panel = from_frame(table, columns=DEMO_COLUMNS)
    assert panel.frequency == "day" and panel.n_periods == days
    assert panel.n_items == table["item"].nunique() >= 50


@pytest.mark.parametrize("days", [27, 1, 0, -5])
def test_too_short_history_says_why(input_error, days):
    message = input_error(lambda: make_demo(DemoSpec(parts=50, days=days, seed=0)), "demo days")
    assert message == f"demo days must be at least 28, got {days}"


def test_columns_and_types(demo_table):
    assert list(demo_table.columns) == ["item", "period", "quantity", "in_stock", "location",
                                        "category", "unit_price", "lead_time", "safety_critical"]
    assert (demo_table["quantity"] >= 0).all()
    assert set(demo_table["in_stock"].unique()) == {0, 1}
    assert set(demo_table["safety_critical"].unique()) <= {0, 1}
    assert (demo_table["unit_price"] > 0).all()


def test_loads_cleanly(demo_panel, demo_table):
    panel, summary = demo_panel
    assert summary.rows_merged == 0 and summary.returns_clipped == 0
    assert panel.frequency == "day" and panel.n_periods == 1092
    assert panel.n_items == demo_table["item"].nunique()
    assert 0 < summary.unavailable_share < 0.2
    assert set(panel.attributes.columns) == {"location", "category", "unit_price", "lead_time",
                                             "safety_critical"}


def test_loads_cleanly_from_its_csv_in_whole_weeks(tmp_path, demo_table, demo_panel):
    path = tmp_path / "demand.csv"
    demo_table.to_csv(path, index=False)
    daily, _ = read_demand(path, columns=DEMO_COLUMNS)
    np.testing.assert_array_equal(daily.values, demo_panel[0].values)
    # ISO 8601 weeks run Monday to Sunday: the history starts on a Monday and spans
    # whole weeks, so no partial week is dropped.
    weekly, summary = read_demand(path, columns=DEMO_COLUMNS, frequency="week")
    assert weekly.n_periods == 1092 // 7 and summary.partial_buckets_dropped == []
    assert weekly.periods[0].start_time.day_name() == "Monday"


def test_several_depots(demo_table):
    depots = demo_table.groupby("item")["location"].first()
    assert depots.nunique() >= 3
    part = demo_table["item"].str.split("-").str[1]  # the same part number at several depots
    assert (demo_table.groupby(part)["location"].nunique() > 1).any()


def test_items_introduced_late(demo_panel):
    panel, _ = demo_panel
    late = panel.introduced > 180
    assert 0 < late.sum() < panel.n_items / 4
    # Nothing recorded before introduction: first demand never precedes it.
    assert (panel.start[late] >= panel.introduced[late]).all()


def test_items_that_stop_selling(demo_panel):
    panel, _ = demo_panel
    sold = panel.values > 0
    n = panel.n_periods
    count = sold.sum(axis=1)
    last = n - 1 - np.argmax(sold[:, ::-1], axis=1)
    mean_gap = (last - panel.start + 1) / np.maximum(count, 1)
    # Sold regularly (30+ sales), then silent for 90+ days and 10+ usual gaps.
    stopped = (count >= 30) & ((n - 1 - last) > np.maximum(90, 10 * mean_gap))
    assert stopped.sum() >= 3


def test_stock_outs_are_recorded_with_zero_sales(demo_table, demo_panel):
    out = demo_table[demo_table["in_stock"] == 0]
    assert len(out) > 100 and out["item"].nunique() >= 10
    assert (out["quantity"] == 0).all()  # sales are lost while out of stock
    panel, _ = demo_panel
    assert not panel.available.all() and (panel.values[~panel.available] == 0).all()


def test_a_few_items_never_sold(demo_panel):
    panel, _ = demo_panel
    never = int((panel.start >= panel.n_periods).sum())
    assert 1 <= never <= 0.05 * panel.n_items


def test_fast_movers_have_a_weekly_cycle(demo_panel):
    panel, _ = demo_panel
    fast = panel.values.mean(axis=1) > 2.0
    assert 3 <= fast.sum() <= 0.25 * panel.n_items
    weekday = panel.periods.day_of_week  # Monday = 0
    means = np.stack([panel.values[fast][:, weekday == d].mean(axis=1) for d in range(7)], axis=1)
    # Trade customers order on working days (common practice): weekends are far quieter.
    weekly = means[:, 5:].max(axis=1) < 0.5 * means[:, :5].min(axis=1)
    assert 3 <= weekly.sum() < fast.sum()


def _pattern(row: np.ndarray) -> str | None:
    nonzero = row[row > 0]
    if nonzero.size < 2:
        return None
    adi = row.size / nonzero.size
    cv2 = nonzero.var() / nonzero.mean() ** 2
    # Cut-offs ADI 1.32 and CV² 0.49: Syntetos, Boylan & Croston (2005), Journal of the
    # Operational Research Society 56(5), 495-503.
    if adi < 1.32:
        return "smooth" if cv2 < 0.49 else "erratic"
    return "intermittent" if cv2 < 0.49 else "lumpy"


def test_all_four_demand_patterns(demo_panel):
    panel, _ = demo_panel
    found = pd.Series([
        _pattern(panel.values[i, panel.start[i]:][panel.available[i, panel.start[i]:]])
        for i in range(panel.n_items)
    ]).value_counts()
    for name in ("smooth", "erratic", "intermittent", "lumpy"):
        assert found.get(name, 0) >= 0.02 * panel.n_items, found.to_dict()


# ---------------------------------------------------------------------- the CLI


def run_main(args: list[str], capsys) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(args)
    out, err = capsys.readouterr()
    code = info.value.code
    return (0 if code is None else int(code)), out, err


def test_version_from_the_console_script():
    script = Path(sys.executable).with_name("sparsedemand")
    done = subprocess.run([str(script), "--version"], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0
    assert done.stdout.strip() == f"sparsedemand, version {sparsedemand.__version__}"


def test_group_help(capsys):
    code, out, _ = run_main(["--help"], capsys)
    assert code == 0 and "Usage: sparsedemand" in out and "demo" in out and "--version" in out


def test_demo_help(capsys):
    code, out, _ = run_main(["demo", "--help"], capsys)
    assert code == 0 and "--data-only" in out and "--out" in out


def test_demo_data_only(tmp_path, capsys):
    out_dir = tmp_path / "run"
    code, _, err = run_main(["demo", "--out", str(out_dir), "--data-only", "--parts", "30"], capsys)
    assert code == 0, err
    assert sorted(p.name for p in out_dir.iterdir()) == ["demand.csv"]  # the history only
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]  # no staging folder left
    panel, summary = read_demand(out_dir / "demand.csv", columns=DEMO_COLUMNS)
    assert summary.rows_merged == 0 and panel.frequency == "day"
    expected = from_frame(make_demo(DemoSpec(parts=30, seed=7)), columns=DEMO_COLUMNS)
    np.testing.assert_array_equal(panel.values, expected.values)
    assert panel.items.tolist() == expected.items.tolist()


@pytest.mark.parametrize(
    ("args", "part"),
    [
        (["demo", "--out", "{out}", "--data-only", "--parts", "0"], "--parts"),
        (["demo", "--out", "{out}", "--data-only", "--parts", "many"], "--parts"),
        (["demo", "--data-only"], "--out"),
        (["demo", "--out", "{out}", "--data-only", "--colour", "red"], "--colour"),
        (["demo", "--out", "{file}", "--data-only", "--parts", "5"], "is a file"),
        (["forecast-everything"], "forecast-everything"),
    ],
)
def test_bad_options_exit_2_with_one_line(tmp_path, capsys, args, part):
    existing = tmp_path / "taken"
    existing.write_text("mine")
    argv = [a.format(out=tmp_path / "run", file=existing) for a in args]
    code, _, err = run_main(argv, capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and part in lines[0], err
    assert "Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["taken"]  # nothing written
    assert existing.read_text() == "mine"

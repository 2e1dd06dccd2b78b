"""Loaders, calendar rules and atomic writers of sparsedemand.io.

Row numbers in messages count data rows from 1 (the header is not a row).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sparsedemand.io import (
    Columns,
    from_frame,
    load_frame,
    read_demand,
    staged_output,
    write_table,
    write_text,
)
from sparsedemand.panel import DemandPanel

HEADER = "item,period,quantity\n"


def days(start: str, n: int) -> list[str]:
    return [d.strftime("%Y-%m-%d") for d in pd.date_range(start, periods=n, freq="D")]


def panels_equal(a: DemandPanel, b: DemandPanel) -> None:
    np.testing.assert_array_equal(a.values, b.values)
    assert a.items.tolist() == b.items.tolist()
    pd.testing.assert_index_equal(a.periods, b.periods)
    np.testing.assert_array_equal(a.mask(), b.mask())
    np.testing.assert_array_equal(a.introduced, b.introduced)
    if a.attributes is None or b.attributes is None:
        assert a.attributes is None and b.attributes is None
    else:
        pd.testing.assert_frame_equal(a.attributes, b.attributes, check_dtype=False)


# =================================================================== bad input


@pytest.mark.parametrize(
    ("header", "missing", "option"),
    [
        ("sku,period,quantity", "item", "--item-column"),
        ("item,date,quantity", "period", "--period-column"),
        ("item,period,qty", "quantity", "--quantity-column"),
    ],
)
def test_misnamed_column_lists_the_columns_found(write_csv, input_error, header, missing, option):
    path = write_csv("sales.csv", header + "\nA,2024-01,1\n")
    found = ", ".join(header.split(","))
    input_error(
        lambda: read_demand(path),
        "sales.csv",
        f"missing column '{missing}'",
        f"columns found: {found}",
        option,
    )


def test_configured_column_names_are_used(write_csv):
    path = write_csv("sales.csv", "sku,month,units\nA,2024-01,1\nA,2024-02,2\n")
    panel = read_demand(path, columns=Columns(item="sku", period="month", quantity="units"))[0]
    assert panel.values.tolist() == [[1.0, 2.0]]


def test_zero_byte_csv_is_empty(write_csv, input_error):
    input_error(lambda: read_demand(write_csv("e.csv", "")), "e.csv", "empty")


def test_zero_byte_parquet_is_empty(tmp_path, input_error):
    path = tmp_path / "e.parquet"
    path.write_bytes(b"")
    input_error(lambda: read_demand(path), "e.parquet", "empty")


def test_header_only_csv_has_no_data_rows(write_csv, input_error):
    input_error(lambda: read_demand(write_csv("h.csv", HEADER)), "h.csv", "no data rows")


def test_header_only_parquet_has_no_data_rows(tmp_path, input_error):
    path = tmp_path / "h.parquet"
    pd.DataFrame({"item": pd.Series([], dtype=str), "period": pd.Series([], dtype=str),
                  "quantity": pd.Series([], dtype=float)}).to_parquet(path)
    input_error(lambda: read_demand(path), "h.parquet", "no data rows")


@pytest.mark.parametrize(
    ("value", "reason"),
    [
        ("Jan 2024", "expected YYYY-MM-DD"),
        ("2024/01/05", "expected YYYY-MM-DD"),
        ("2024-13-01", "no such date"),
        ("2024-02-30", "no such date"),  # Gregorian calendar: February has at most 29 days
        ("2023-02-29", "no such date"),  # 2023 is not a leap year (Gregorian rule)
        ("2024-01-05 10:30", "expected YYYY-MM-DD"),  # a time of day is not a period
    ],
)
def test_unparseable_period_names_row_and_value(write_csv, input_error, value, reason):
    path = write_csv("p.csv", HEADER + "A,2024-01-04,1\nB,2024-01-05,2\nC," + value + ",3\n")
    input_error(lambda: read_demand(path), "p.csv", "row 3", repr(value), reason)


def test_iso_week_53_only_in_long_years(write_csv, input_error):
    # ISO 8601: a year has week 53 when it starts on a Thursday (or a Wednesday in a
    # leap year); 2020 started on a Wednesday and was a leap year, 2024 started on a Monday.
    ok = read_demand(write_csv("ok.csv", HEADER + "A,2020-W53,1\n"))[0]
    assert ok.periods[0].start_time == pd.Timestamp("2020-12-28")
    path = write_csv("bad.csv", HEADER + "A,2024-W52,1\nA,2024-W53,1\n")
    input_error(lambda: read_demand(path), "row 2", "'2024-W53'", "no such date")


def test_missing_period_cell(write_csv, input_error):
    path = write_csv("p.csv", HEADER + "A,2024-01,1\nA,,1\n")
    input_error(lambda: read_demand(path), "p.csv", "row 2", "missing period")


def test_missing_item_cell(write_csv, input_error):
    path = write_csv("p.csv", HEADER + "A,2024-01,1\n,2024-02,1\n")
    input_error(lambda: read_demand(path), "p.csv", "row 2", "missing item")


@pytest.mark.parametrize("value", ["two", "1,5", "1e", "inf"])
def test_non_numeric_quantity_names_row_item_value(write_csv, input_error, value):
    cell = f'"{value}"' if "," in value else value
    path = write_csv("q.csv", HEADER + f"A,2024-01,1\nB,2024-01,{cell}\n")
    input_error(lambda: read_demand(path), "q.csv", "row 2", "item 'B'", repr(value), "not a number")


@pytest.mark.parametrize("cell", ["", "NaN", "nan"])
def test_nan_quantity_names_row_and_item(write_csv, input_error, cell):
    path = write_csv("q.csv", HEADER + f"A,2024-01,1\nA,2024-02,1\nB,2024-01,{cell}\n")
    input_error(lambda: read_demand(path), "q.csv", "row 3", "item 'B'", "missing quantity")


def test_nan_quantity_in_a_frame(input_error):
    frame = pd.DataFrame({"item": ["A", "B"], "period": [1, 2], "quantity": [1.0, np.nan]})
    input_error(lambda: from_frame(frame, source="mine"), "mine, row 2", "item 'B'", "missing quantity")


def test_negative_quantity_names_row_and_item(write_csv, input_error):
    path = write_csv("n.csv", HEADER + "A,2024-01,1\nB,2024-01,-2\n")
    input_error(lambda: read_demand(path), "n.csv", "row 2", "item 'B'", "negative", "-2",
                "--net-returns")


def test_net_returns_nets_within_a_period_and_clips_at_zero(write_csv):
    path = write_csv(
        "n.csv",
        HEADER
        + "A,2024-01,1\nA,2024-01,-3\n"  # net -2: clipped to 0
        + "A,2024-02,5\nA,2024-02,-2\n"  # net 3
        + "B,2024-01,-1\nB,2024-02,4\n",  # net -1: clipped to 0
    )
    panel, summary = read_demand(path, net_returns=True)
    assert panel.values.tolist() == [[0.0, 3.0], [0.0, 4.0]]
    assert summary.returns_clipped == 2
    assert "2 item-periods clipped at zero" in summary.text()


def test_net_returns_nets_in_the_input_period_before_aggregating(write_csv):
    # A return on Tuesday clipped on its own day; the week is then the sum of the days,
    # the same as loading the days and adding them up.
    rows = "A,2024-01-01,5\nA,2024-01-02,-3\nA,2024-01-02,1\n" + "".join(
        f"A,{d},0\n" for d in days("2024-01-03", 5)
    )
    path = write_csv("n.csv", HEADER + rows)
    daily = read_demand(path, net_returns=True)[0]
    weekly, summary = read_demand(path, net_returns=True, frequency="week")
    assert daily.values[0, :2].tolist() == [5.0, 0.0]
    assert weekly.values.tolist() == [[daily.values.sum()]] == [[5.0]]
    assert summary.returns_clipped == 1


def test_duplicate_item_in_wide_layout(write_csv, input_error):
    path = write_csv("w.csv", "item,2024-01,2024-02\nA,1,2\nB,0,1\nA,3,3\n")
    input_error(lambda: read_demand(path), "w.csv", "row 3", "duplicate item label 'A'")


def test_duplicate_period_column_in_wide_layout(write_csv, input_error):
    path = write_csv("w.csv", "item,2024-01,2024-02,2024-01\nA,1,2,3\n")
    input_error(lambda: read_demand(path), "w.csv", "'2024-01'", "twice")


def test_wide_blank_cell_after_listing_is_an_error(write_csv, input_error):
    path = write_csv("w.csv", "item,2024-01,2024-02,2024-03\nA,1,,2\n")
    input_error(lambda: read_demand(path), "w.csv", "row 1", "item 'A'", "2024-02", "missing quantity")


def test_wide_non_numeric_and_negative_cells(write_csv, input_error):
    path = write_csv("w.csv", "item,2024-01,2024-02\nA,1,2\nB,x,1\n")
    input_error(lambda: read_demand(path), "row 2", "item 'B'", "'2024-01'", "'x'", "not a number")
    path = write_csv("w2.csv", "item,2024-01,2024-02\nA,1,-2\n")
    input_error(lambda: read_demand(path), "row 1", "item 'A'", "'2024-02'", "negative")


def test_wide_column_that_is_not_a_period(write_csv, input_error):
    path = write_csv("w.csv", "item,2024-01,2024-02,colour\nA,1,2,red\n")
    input_error(lambda: read_demand(path, layout="wide"), "w.csv", "'colour'", "not a period")


@pytest.mark.parametrize(
    ("values", "first", "second"),
    [
        (["2024-01", "2024-02", "2024-01-05"], "'2024-01' (month)", "'2024-01-05' (day)"),
        (["2024-W01", "2024-W02", "3"], "'2024-W01' (week)", "'3' (integer)"),
        (["2024-01-01", "2024-01-02", "2024-W02"], "'2024-01-01' (day)", "'2024-W02' (week)"),
    ],
)
def test_mixed_frequencies_name_the_first_row_that_differs(write_csv, input_error, values, first, second):
    path = write_csv("m.csv", HEADER + "".join(f"A,{v},1\n" for v in values))
    input_error(lambda: read_demand(path), "m.csv", "row 3", "mixed frequencies", first, second)


def test_unknown_file_type(write_csv, input_error):
    path = write_csv("sales.xlsx", "not a table")
    input_error(lambda: read_demand(path), "sales.xlsx", "unknown file type '.xlsx'")


def test_missing_file(tmp_path, input_error):
    input_error(lambda: read_demand(tmp_path / "nope.csv"), "nope.csv", "no such file")


def test_folder_that_is_not_parquet(tmp_path, input_error):
    (tmp_path / "x.csv").write_text(HEADER)
    input_error(lambda: read_demand(tmp_path), str(tmp_path), "cannot read as Parquet")


def test_row_with_more_fields_than_the_header(write_csv, input_error):
    # Without a check, the extra field would silently shift every column by one.
    path = write_csv("r.csv", HEADER + "A,2024-01,1,5\nB,2024-01,1,2\n")
    input_error(lambda: read_demand(path), "r.csv", "more fields than the header")


def test_unreadable_csv(write_csv, input_error):
    path = write_csv("r.csv", HEADER + "A,2024-01,1\nB,2024-01,1,2,3\n")
    input_error(lambda: read_demand(path), "r.csv", "cannot read as CSV")


@pytest.mark.parametrize(("cell", "part"), [("yes", "'yes' is not a number"), ("", "missing in_stock")])
def test_bad_availability_value(write_csv, input_error, cell, part):
    path = write_csv("a.csv", "item,period,quantity,in_stock\nA,2024-01,1,1\nA,2024-02,0," + cell + "\n")
    input_error(lambda: read_demand(path), "a.csv", "row 2", "item 'A'", part)


def test_named_availability_column_must_exist(write_csv, input_error):
    path = write_csv("a.csv", HEADER + "A,2024-01,1\n")
    input_error(
        lambda: read_demand(path, columns=Columns(availability="stock")),
        "a.csv", "'stock'", "columns found: item, period, quantity", "--availability-column",
    )


def test_attribute_that_changes_within_an_item(write_csv, input_error):
    path = write_csv(
        "t.csv",
        "item,period,quantity,location\nA,2024-01,1,North\nB,2024-01,1,Hill\nA,2024-02,1,River\n",
    )
    input_error(lambda: read_demand(path), "t.csv", "row 3", "item 'A'", "location", "'River'", "'North'")


def test_unit_price_that_changes_within_an_item(write_csv, input_error):
    path = write_csv("t.csv", "item,period,quantity,unit_price\nA,2024-01,1,2.5\nA,2024-02,1,3\n")
    message = input_error(lambda: read_demand(path), "row 2", "item 'A'", "unit_price", "3", "2.5")
    assert "np." not in message  # plain numbers, not numpy reprs


def test_bad_unit_price(write_csv, input_error):
    path = write_csv("t.csv", "item,period,quantity,unit_price\nA,2024-01,1,2.5\nB,2024-01,1,-1\n")
    input_error(lambda: read_demand(path), "t.csv", "row 2", "item 'B'", "negative unit price -1")
    path = write_csv("t2.csv", "item,period,quantity,unit_price\nA,2024-01,1,cheap\n")
    input_error(lambda: read_demand(path), "t2.csv", "row 1", "item 'A'", "'cheap' is not a number")


def test_named_attribute_column_must_exist(write_csv, input_error):
    path = write_csv("t.csv", HEADER + "A,2024-01,1\n")
    input_error(lambda: read_demand(path, columns=Columns(attributes=("lead_time",))),
                "t.csv", "'lead_time'", "columns found")


@pytest.mark.parametrize(
    ("kwargs", "part"),
    [({"layout": "diagonal"}, "--layout"), ({"frequency": "year"}, "--frequency")],
)
def test_bad_option_values(long_frame, input_error, kwargs, part):
    input_error(lambda: from_frame(long_frame, **kwargs), part, repr(next(iter(kwargs.values()))))


# ============================================================= calendar rules


def test_missing_periods_inside_a_span_are_filled_as_zeros(long_frame):
    panel, summary = from_frame(long_frame, return_summary=True)
    assert panel.items.tolist() == ["A", "B"]
    assert [str(p) for p in panel.periods] == ["2024-01", "2024-02", "2024-03", "2024-04"]
    assert panel.values.tolist() == [[3.0, 0.0, 1.0, 0.0], [0.0, 2.0, 0.0, 5.0]]
    assert panel.introduced.tolist() == [0, 1]  # B is listed from February
    # B has no row for March: one zero filled; January is before B's span, not filled.
    assert summary.zeros_filled == 1
    assert summary.rows_read == 6 and summary.rows_merged == 0
    assert "zeros filled 1" in summary.text()


def test_span_runs_to_the_end_of_the_calendar(input_error):
    frame = pd.DataFrame({"item": ["A", "B"], "period": ["2024-01", "2024-04"], "quantity": [2, 1]})
    panel, summary = from_frame(frame, return_summary=True)
    assert panel.values.tolist() == [[2.0, 0.0, 0.0, 0.0], [0.0, 0.0, 0.0, 1.0]]
    assert summary.zeros_filled == 3


def test_duplicate_rows_are_summed_and_counted(write_csv):
    path = write_csv("d.csv", HEADER + "A,2024-01,1\nA,2024-01,2\nA,2024-01,4\nA,2024-02,1\nB,2024-02,3\n")
    panel, summary = read_demand(path)
    assert panel.values.tolist() == [[7.0, 1.0], [0.0, 3.0]]
    assert summary.rows_merged == 2
    assert "duplicate rows merged 2" in summary.text()


def _daily_frame(start: str, n: int, *, in_stock=None) -> pd.DataFrame:
    quantity = np.arange(1, n + 1, dtype=float)
    frame = pd.DataFrame({"item": "A", "period": days(start, n), "quantity": quantity})
    if in_stock is not None:
        frame["in_stock"] = in_stock
    return frame


def test_day_to_week_drops_partial_edge_weeks():
    # ISO 8601: weeks run Monday to Sunday; 2024-01-03 is a Wednesday and 2024-01-01
    # a Monday, so 3 Jan - 23 Jan covers a partial week, two whole weeks and a partial one.
    frame = _daily_frame("2024-01-03", 21)
    panel, summary = from_frame(frame, frequency="week", return_summary=True)
    assert panel.frequency == "week"
    assert [p.start_time for p in panel.periods] == [pd.Timestamp("2024-01-08"), pd.Timestamp("2024-01-15")]
    # 8 Jan is the 6th day of the data (quantity 6): week sums 6..12 and 13..19.
    assert panel.values.tolist() == [[sum(range(6, 13)), sum(range(13, 20))]]
    assert len(summary.partial_buckets_dropped) == 2
    assert "2024-01-01" in summary.partial_buckets_dropped[0]
    assert "2024-01-22" in summary.partial_buckets_dropped[1]
    assert "partial periods dropped" in summary.text()


def test_day_to_month_drops_partial_edge_months():
    # Gregorian calendar: February 2024 has 29 days (leap year).
    frame = _daily_frame("2024-01-15", 31 - 14 + 29 + 10)  # 15 Jan to 10 Mar
    panel, summary = from_frame(frame, frequency="month", return_summary=True)
    assert [str(p) for p in panel.periods] == ["2024-02"]
    first_feb = 31 - 14 + 1  # quantity on 1 Feb
    assert panel.values.tolist() == [[float(sum(range(first_feb, first_feb + 29)))]]
    assert summary.partial_buckets_dropped == ["2024-01 (starts before the data)",
                                               "2024-03 (ends after the data)"]


def test_whole_weeks_keep_every_bucket():
    panel, summary = from_frame(_daily_frame("2024-01-01", 14), frequency="week", return_summary=True)
    assert panel.values.tolist() == [[float(sum(range(1, 8))), float(sum(range(8, 15)))]]
    assert summary.partial_buckets_dropped == []


def test_less_than_one_whole_bucket(input_error):
    input_error(lambda: from_frame(_daily_frame("2024-01-03", 4), frequency="week"),
                "--frequency week", "whole week")


def test_aggregated_bucket_is_available_if_any_sub_period_was():
    # Week 1: out of stock Mon-Wed (rows with in_stock 0), no rows Thu-Sun (true zeros, in stock).
    # Week 2: out of stock every day. Week 3: in stock only on Sunday.
    rows = [(d, 0, 0) for d in days("2024-01-01", 3)]
    rows += [(d, 0, 0) for d in days("2024-01-08", 7)]
    rows += [(d, 0, 0) for d in days("2024-01-15", 6)] + [("2024-01-21", 2, 1)]
    frame = pd.DataFrame(rows, columns=["period", "quantity", "in_stock"]).assign(item="A")
    panel = from_frame(frame, frequency="week")
    assert panel.values.tolist() == [[0.0, 0.0, 2.0]]
    assert panel.available.tolist() == [[True, False, True]]


def test_frequency_equal_to_the_data_changes_nothing(long_frame):
    plain, s1 = from_frame(long_frame, return_summary=True)
    same, s2 = from_frame(long_frame, frequency="month", return_summary=True)
    panels_equal(plain, same)
    assert s2.zeros_filled == s1.zeros_filled == 1


def test_weekly_aggregation_equals_summing_the_daily_panel():
    rng = np.random.default_rng(4)
    n = 28
    frame = pd.DataFrame({
        "item": np.repeat(["A", "B"], n),
        "period": days("2024-01-01", n) * 2,
        "quantity": rng.poisson(0.7, 2 * n).astype(float),
        "in_stock": (rng.random(2 * n) < 0.7).astype(int),
    })
    daily = from_frame(frame)
    weekly = from_frame(frame, frequency="week")
    np.testing.assert_array_equal(weekly.values, daily.values.reshape(2, 4, 7).sum(axis=2))
    np.testing.assert_array_equal(weekly.available, daily.available.reshape(2, 4, 7).any(axis=2))


@pytest.mark.parametrize(
    ("text", "frequency", "part"),
    [
        ("A,2024-01,1\nA,2024-02,1\n", "week", "cannot be split"),
        ("A,2024-01,1\nA,2024-02,1\n", "day", "cannot be split"),
        ("A,2024-W01,1\nA,2024-W02,1\n", "day", "cannot be split"),
        ("A,2024-W01,1\nA,2024-W09,1\n", "month", "straddle months"),
        ("A,1,1\nA,2,1\n", "week", "plain integers"),
    ],
)
def test_refuses_to_go_finer_or_sideways(write_csv, input_error, text, frequency, part):
    path = write_csv("f.csv", HEADER + text)
    input_error(lambda: read_demand(path, frequency=frequency), f"--frequency {frequency}", "f.csv", part)


def test_dates_on_one_weekday_are_weeks():
    # 2024-01-03 is a Wednesday (ISO 8601 calendar); weeks then run Wednesday to Tuesday.
    frame = pd.DataFrame({"item": "A", "period": ["2024-01-03", "2024-01-17", "2024-01-31"],
                          "quantity": [1, 2, 3]})
    panel = from_frame(frame)
    assert panel.frequency == "week"
    assert [p.start_time.day_name() for p in panel.periods] == ["Wednesday"] * 5
    assert panel.values.tolist() == [[1.0, 0.0, 2.0, 0.0, 3.0]]


def test_dates_on_two_weekdays_stay_days():
    frame = pd.DataFrame({"item": "A", "period": ["2024-01-03", "2024-01-11"], "quantity": [1, 2]})
    panel = from_frame(frame)
    assert panel.frequency == "day" and panel.n_periods == 9


def test_iso_week_labels():
    # ISO 8601: week 1 is the week with the year's first Thursday; 2024-W01 starts on
    # Monday 2024-01-01, 2025-W01 on Monday 2024-12-30, 2021-W01 on Monday 2021-01-04.
    frame = pd.DataFrame({"item": "A", "period": ["2024-W52", "2025-W01", "2020-W53", "2021-W01"],
                          "quantity": [1, 2, 3, 4]})
    panel = from_frame(frame)
    assert panel.frequency == "week" and panel.season_length == 52
    start = {str(p.start_time.date()): panel.values[0, j] for j, p in enumerate(panel.periods)}
    assert start["2024-12-23"] == 1 and start["2024-12-30"] == 2
    assert start["2020-12-28"] == 3 and start["2021-01-04"] == 4
    assert all(p.start_time.day_of_week == 0 for p in panel.periods)  # Mondays


def test_month_labels():
    frame = pd.DataFrame({"item": "A", "period": ["2023-11", "2024-02"], "quantity": [1, 2]})
    panel = from_frame(frame)
    assert panel.frequency == "month"
    assert [str(p) for p in panel.periods] == ["2023-11", "2023-12", "2024-01", "2024-02"]


def test_integer_periods(write_csv):
    panel, summary = read_demand(write_csv("i.csv", HEADER + "A,-1,1\nA,2,2\nB, 0 ,1\n"))
    assert panel.frequency is None
    assert list(panel.periods) == [-1, 0, 1, 2]
    assert panel.values.tolist() == [[1.0, 0.0, 0.0, 2.0], [0.0, 1.0, 0.0, 0.0]]
    assert summary.frequency == "integer"


def test_datetime_and_period_columns_in_a_frame():
    stamps = pd.to_datetime(["2024-03-01", "2024-03-03"])
    by_date = from_frame(pd.DataFrame({"item": "A", "period": stamps, "quantity": [1, 2]}))
    assert by_date.frequency == "day" and by_date.values.tolist() == [[1.0, 0.0, 2.0]]
    months = pd.PeriodIndex(["2024-01", "2024-03"], freq="M")
    by_period = from_frame(pd.DataFrame({"item": "A", "period": months, "quantity": [1, 2]}))
    assert by_period.frequency == "month" and by_period.values.tolist() == [[1.0, 0.0, 2.0]]


def test_availability_as_a_flag(long_frame):
    panel, summary = from_frame(long_frame, return_summary=True)
    # B's January is before its span and its March has no row: both count as in stock.
    assert panel.available.tolist() == [[True, False, True, True], [True, True, True, True]]
    assert summary.availability_column == "in_stock"
    assert summary.unavailable_share == pytest.approx(1 / 8)
    assert "12.5% of item-periods out of stock" in summary.text()


def test_availability_as_on_hand_quantity(write_csv):
    path = write_csv("o.csv", "item,period,quantity,on_hand\nA,1,1,5\nA,2,0,0\nA,3,0,-2\nA,4,1,0.5\n")
    panel, summary = read_demand(path)
    assert panel.available.tolist() == [[True, False, False, True]]
    assert summary.availability_column == "on_hand"


def test_named_availability_column(write_csv):
    path = write_csv("o.csv", "item,period,quantity,stock\nA,1,1,1\nA,2,0,0\n")
    assert read_demand(path)[0].available is None
    assert read_demand(path, columns=Columns(availability="stock"))[0].available.tolist() == [[True, False]]


def test_no_availability_column(write_csv):
    panel, summary = read_demand(write_csv("o.csv", HEADER + "A,1,1\n"))
    assert panel.available is None and panel.mask().all()
    assert "no availability column" in summary.text()


def test_duplicate_rows_of_availability(write_csv):
    # Two rows for one period: in stock if either row says so.
    path = write_csv("o.csv", "item,period,quantity,in_stock\nA,1,1,0\nA,1,0,1\nA,2,0,0\nA,2,0,0\n")
    assert read_demand(path)[0].available.tolist() == [[True, False]]


def test_csv_and_parquet_give_the_same_panel(tmp_path, long_frame):
    long_frame.to_csv(tmp_path / "s.csv", index=False)
    long_frame.to_parquet(tmp_path / "s.parquet", index=False)
    a, sa = read_demand(tmp_path / "s.csv")
    b, sb = read_demand(tmp_path / "s.parquet")
    panels_equal(a, b)
    assert (sa.zeros_filled, sa.rows_merged) == (sb.zeros_filled, sb.rows_merged)


def test_parquet_with_date_and_datetime_columns(tmp_path):
    frame = pd.DataFrame({"item": ["A", "A"], "quantity": [1.0, 2.0],
                          "period": pd.to_datetime(["2024-01-01", "2024-01-03"])})
    frame.to_parquet(tmp_path / "t.parquet")
    frame.assign(period=frame["period"].dt.date).to_parquet(tmp_path / "d.parquet")
    for name in ("t.parquet", "d.parquet"):
        panel = read_demand(tmp_path / name)[0]
        assert panel.frequency == "day" and panel.values.tolist() == [[1.0, 0.0, 2.0]]


def test_labels_keep_leading_zeros(write_csv):
    path = write_csv("z.csv", "item,period,quantity,location,category\n007,1,1,01,010\n0070,1,2,02,010\n")
    panel = read_demand(path)[0]
    assert panel.items.tolist() == ["007", "0070"]
    assert panel.attribute("location").tolist() == ["01", "02"]
    assert panel.attribute("category").tolist() == ["010", "010"]


def test_labels_are_stripped(write_csv):
    panel = read_demand(write_csv("s.csv", HEADER + " A ,1,1\nA,2,1\n"))[0]
    assert panel.items.tolist() == ["A"]


def test_attributes_one_per_item(write_csv):
    path = write_csv(
        "t.csv",
        "item,period,quantity,location,unit_price,lead_time\n"
        "A,1,1,North,2.5,7\nB,1,1,Hill,10,14\nA,2,1,North,2.5,7\n",
    )
    panel = read_demand(path, columns=Columns(attributes=("lead_time",)))[0]
    attrs = panel.attributes
    assert attrs.index.tolist() == ["A", "B"]
    assert attrs["location"].tolist() == ["North", "Hill"]
    assert attrs["unit_price"].dtype == np.float64 and attrs["unit_price"].tolist() == [2.5, 10.0]
    assert attrs["lead_time"].tolist() == [7, 14]
    assert pd.api.types.is_integer_dtype(attrs["lead_time"])


def test_wide_layout(write_csv, wide_frame):
    panel, summary = read_demand(write_csv("w.csv", wide_frame))
    assert summary.layout == "wide"
    assert panel.items.tolist() == ["A", "B", "C"]
    assert panel.values.tolist() == [[1.0, 0.0, 2.0], [0.0, 4.0, 0.0], [0.0, 2.0, 0.0]]
    assert panel.introduced.tolist() == [0, 0, 1]  # C's leading blank: not yet listed


def test_wide_layout_fills_missing_period_columns(write_csv):
    panel, summary = read_demand(write_csv("w.csv", "item,2024-03,2024-01\nA,2,1\nB,1,0\n"))
    assert [str(p) for p in panel.periods] == ["2024-01", "2024-02", "2024-03"]
    assert panel.values.tolist() == [[1.0, 0.0, 2.0], [0.0, 0.0, 1.0]]
    assert summary.zeros_filled == 2


def test_wide_layout_aggregates_days_to_weeks(write_csv):
    cols = days("2024-01-01", 14)
    text = "item," + ",".join(cols) + "\nA," + ",".join(["1"] * 14) + "\n"
    panel = read_demand(write_csv("w.csv", text), frequency="week")[0]
    assert panel.values.tolist() == [[7.0, 7.0]]


# ================================================================= round trips


def _complete_long(values, introduced, available, periods, items, locations, prices) -> pd.DataFrame:
    rows = []
    for i, item in enumerate(items):
        for j in range(introduced[i], len(periods)):
            rows.append((item, periods[j], float(values[i, j]), int(available[i, j]),
                         locations[i], prices[i]))
    return pd.DataFrame(rows, columns=["item", "period", "quantity", "in_stock", "location", "unit_price"])


def _sorted(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy()
    out["period"] = out["period"].astype(str)
    out["item"] = out["item"].astype(str)
    return out.sort_values(["item", "period"]).reset_index(drop=True)


def _assert_long_equal(back: pd.DataFrame, original: pd.DataFrame) -> None:
    back = back[list(original.columns)]
    pd.testing.assert_frame_equal(_sorted(back), _sorted(original), check_dtype=False)


@pytest.fixture
def complete_long() -> pd.DataFrame:
    rng = np.random.default_rng(11)
    periods = pd.period_range("2024-01-01", periods=10, freq="D")
    items = ["007", "A-1", "B"]
    values = rng.poisson(1.0, (3, 10)).astype(float)
    return _complete_long(values, [0, 3, 9], rng.random((3, 10)) < 0.8, periods, items,
                          ["North", "River", "Hill"], [1.5, 20.0, 0.25])


def test_long_panel_long_is_lossless(complete_long):
    panel = from_frame(complete_long)
    _assert_long_equal(panel.to_long(), complete_long)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_round_trip_through_files(tmp_path, complete_long, suffix):
    panel = from_frame(complete_long)
    path = write_table(panel.to_long(), tmp_path / f"demand{suffix}")
    again = read_demand(path)[0]
    panels_equal(again, panel)
    _assert_long_equal(again.to_long(), complete_long)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
@pytest.mark.parametrize("freq", ["W-SUN", "M"])
def test_round_trip_through_files_weeks_and_months(tmp_path, suffix, freq):
    periods = pd.period_range("2024-01-01", periods=5, freq=freq)
    panel = DemandPanel(np.array([[1.0, 0, 2, 0, 0], [0, 0, 3, 1, 0]]), items=pd.Index(["X", "Y"]),
                        periods=periods, introduced=np.array([0, 2]))
    again = read_demand(write_table(panel.to_long(), tmp_path / f"d{suffix}"))[0]
    panels_equal(again, panel)


CALENDARS = {
    "day": lambda n: pd.period_range("2024-02-26", periods=n, freq="D"),
    "week": lambda n: pd.period_range("2024-12-16", periods=n, freq="W-SUN"),
    "month": lambda n: pd.period_range("2023-11", periods=n, freq="M"),
    "integer": lambda n: pd.RangeIndex(-2, n - 2),
}


@st.composite
def complete_tables(draw):
    n_items = draw(st.integers(1, 4))
    n_periods = draw(st.integers(2, 9))
    calendar = draw(st.sampled_from(sorted(CALENDARS)))
    periods = CALENDARS[calendar](n_periods)
    items = draw(st.lists(st.text("AB07-", min_size=1, max_size=4), min_size=n_items,
                          max_size=n_items, unique=True))
    introduced = draw(st.lists(st.integers(0, n_periods - 1), min_size=n_items, max_size=n_items))
    introduced[0] = 0  # the calendar starts with the earliest row
    quantities = st.integers(0, 50).map(float) | st.sampled_from([0.5, 2.25, 1e6])
    values = np.array(draw(st.lists(quantities, min_size=n_items * n_periods,
                                    max_size=n_items * n_periods))).reshape(n_items, n_periods)
    available = np.array(draw(st.lists(st.booleans(), min_size=n_items * n_periods,
                                       max_size=n_items * n_periods))).reshape(n_items, n_periods)
    locations = draw(st.lists(st.sampled_from(["North", "01", "Hill depot"]), min_size=n_items,
                              max_size=n_items))
    prices = draw(st.lists(st.sampled_from([0.0, 0.1, 3.0, 125.5]), min_size=n_items, max_size=n_items))
    return _complete_long(values, introduced, available, periods, items, locations, prices)


@settings(max_examples=60, deadline=None)
@given(table=complete_tables())
def test_round_trip_property(table):
    panel = from_frame(table)
    _assert_long_equal(panel.to_long(), table)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(table=complete_tables(), suffix=st.sampled_from([".csv", ".parquet"]))
def test_round_trip_property_through_files(table, suffix):
    panel = from_frame(table)
    with tempfile.TemporaryDirectory() as folder:
        path = write_table(panel.to_long(), Path(folder) / f"t{suffix}")
        again = read_demand(path)[0]
    panels_equal(again, panel)
    _assert_long_equal(again.to_long(), table)


@pytest.mark.parametrize("calendar", sorted(CALENDARS))
def test_wide_panel_wide(calendar):
    periods = CALENDARS[calendar](4)
    panel = DemandPanel(np.array([[1.0, 0, 2, 0], [0, 3, 0, 0.5]]), items=pd.Index(["A", "B"]),
                        periods=periods)
    wide = panel.to_wide()
    again = from_frame(wide)
    panels_equal(again, panel)
    pd.testing.assert_frame_equal(again.to_wide(), wide, check_names=False)


def test_wide_file_panel_wide(write_csv, wide_frame):
    panel = read_demand(write_csv("w.csv", wide_frame))[0]
    wide = panel.to_wide()
    expected = wide_frame.set_index("item").fillna(0.0)
    np.testing.assert_array_equal(wide.to_numpy(), expected.to_numpy())
    assert [str(c) for c in wide.columns] == list(expected.columns)


# ============================================================== atomic output


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_write_table_round_trips_csv_and_parquet(tmp_path):
    frame = pd.DataFrame({"a": [1, 2], "b": ["x", "007"]})
    for name in ("t.csv", "t.parquet"):
        path = write_table(frame, tmp_path / "sub" / name)
        back = load_frame(path, text_columns=("b",))
        assert back["b"].tolist() == ["x", "007"] and back["a"].tolist() == [1, 2]
    assert _leftovers(tmp_path / "sub") == ["t.csv", "t.parquet"]


def test_write_table_rejects_other_suffixes(tmp_path, input_error):
    input_error(lambda: write_table(pd.DataFrame({"a": [1]}), tmp_path / "t.xlsx"), "t.xlsx", ".csv")
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize(("method", "name"), [("csv", "t.csv"), ("to_parquet", "t.parquet")])
def test_write_table_failure_leaves_nothing(tmp_path, monkeypatch, method, name):
    from sparsedemand.io import writing as sdio

    owner = sdio if method == "csv" else pd.DataFrame
    attr = "_write_csv" if method == "csv" else method
    real = getattr(owner, attr)

    def half_then_fail(frame, path, *args, **kwargs):
        real(frame.iloc[:1], path, *args, **kwargs)  # something reaches the disk first
        raise OSError("disk full")

    monkeypatch.setattr(owner, attr, half_then_fail)
    with pytest.raises(OSError, match="disk full"):
        write_table(pd.DataFrame({"a": range(100)}), tmp_path / name)
    assert _leftovers(tmp_path) == []


def test_write_table_failure_keeps_the_previous_file(tmp_path, monkeypatch):
    target = tmp_path / "t.csv"
    target.write_text("old\n")

    from sparsedemand.io import writing as sdio

    def fail(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(sdio, "_write_csv", fail)
    with pytest.raises(OSError):
        write_table(pd.DataFrame({"a": [1]}), target)
    assert target.read_text() == "old\n" and _leftovers(tmp_path) == ["t.csv"]


def test_write_text_writes_and_replaces(tmp_path):
    target = tmp_path / "notes" / "r.txt"
    write_text("first", target)
    write_text("second\n", target)
    assert target.read_text(encoding="utf-8") == "second\n"
    assert _leftovers(target.parent) == ["r.txt"]


def test_write_text_failure_mid_write_leaves_nothing(tmp_path):
    target = tmp_path / "r.txt"
    with pytest.raises(UnicodeEncodeError):  # a lone surrogate cannot be written as UTF-8
        write_text("x" * 100_000 + "\ud800", target)
    assert _leftovers(tmp_path) == []
    target.write_text("old")
    with pytest.raises(UnicodeEncodeError):
        write_text("new\ud800", target)
    assert target.read_text() == "old" and _leftovers(tmp_path) == ["r.txt"]


def test_staged_output_moves_everything_on_success(tmp_path):
    out = tmp_path / "run"
    with staged_output(out) as stage:
        write_table(pd.DataFrame({"a": [1]}), stage / "a.csv")
        write_text("hello", stage / "sub" / "b.txt")
        assert not out.exists()  # nothing visible before the block ends
    assert (out / "a.csv").exists() and (out / "sub" / "b.txt").read_text() == "hello"
    assert _leftovers(tmp_path) == ["run"]


def test_staged_output_failure_inside_the_block_leaves_nothing(tmp_path):
    out = tmp_path / "run"
    with pytest.raises(RuntimeError, match="boom"):
        with staged_output(out) as stage:
            write_table(pd.DataFrame({"a": [1]}), stage / "a.csv")
            raise RuntimeError("boom")
    assert _leftovers(tmp_path) == []


def test_staged_output_failure_keeps_previous_outputs(tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / "a.csv").write_text("old")
    with pytest.raises(RuntimeError):
        with staged_output(out) as stage:
            write_text("new", stage / "a.csv")
            write_text("new", stage / "b.csv")
            raise RuntimeError("boom")
    assert _leftovers(out) == ["a.csv"] and (out / "a.csv").read_text() == "old"
    assert _leftovers(tmp_path) == ["run"]


@pytest.mark.parametrize("existing", [False, True])
def test_staged_output_failure_while_moving_leaves_no_partial_output(tmp_path, monkeypatch, existing):
    out = tmp_path / "run"
    if existing:
        out.mkdir()
        (out / "a.csv").write_text("old a")
        (out / "keep.txt").write_text("kept")
    real_replace = os.replace
    calls = []

    def flaky_replace(src, dst):
        calls.append(dst)
        if len(calls) == 2:
            raise OSError("device gone")
        return real_replace(src, dst)

    with pytest.raises(OSError, match="device gone"):
        with staged_output(out) as stage:
            (stage / "a.csv").write_text("new a")
            (stage / "b.csv").write_text("new b")
            (stage / "c.csv").write_text("new c")
            monkeypatch.setattr(os, "replace", flaky_replace)
    monkeypatch.undo()
    if existing:
        assert _leftovers(out) == ["a.csv", "keep.txt"]
        assert (out / "a.csv").read_text() == "old a"
        assert _leftovers(tmp_path) == ["run"]
    else:
        assert _leftovers(tmp_path) == []


def test_staged_output_replaces_a_parquet_dataset_folder(tmp_path):
    out = tmp_path / "run"
    (out / "data").mkdir(parents=True)
    (out / "data" / "part-old.parquet").write_text("old")
    with staged_output(out) as stage:
        (stage / "data").mkdir()
        write_table(pd.DataFrame({"a": [1]}), stage / "data" / "part-0.parquet")
    assert _leftovers(out / "data") == ["part-0.parquet"]


def test_staged_output_refuses_a_file(tmp_path, input_error):
    path = tmp_path / "run"
    path.write_text("x")
    input_error(lambda: staged_output(path).__enter__(), "--out", "not a folder")
    assert path.read_text() == "x" and _leftovers(tmp_path) == ["run"]


def test_days_before_an_item_is_listed_do_not_make_its_first_week_available():
    # Listed on Thursday and out of stock Thursday to Sunday: the week was never in stock.
    frame = pd.DataFrame({
        "item": ["A"] * 7 + ["B"] * 4,
        "period": days("2024-01-01", 7) + days("2024-01-04", 4),
        "quantity": [1.0] * 7 + [0.0] * 4,
        "in_stock": [1] * 7 + [0] * 4,
    })
    panel = from_frame(frame, frequency="week")
    assert panel.available.tolist() == [[True], [False]]


def test_period_objects_in_an_object_column(input_error):
    months = pd.Series([pd.Period("2024-01", "M"), pd.Period("2024-03", "M")], dtype=object)
    panel = from_frame(pd.DataFrame({"item": "A", "period": months, "quantity": [1, 2]}))
    assert panel.frequency == "month" and panel.values.tolist() == [[1.0, 0.0, 2.0]]
    mixed = pd.Series([pd.Period("2024-01", "M"), pd.Period("2024-01-02", "D")], dtype=object)
    input_error(lambda: from_frame(pd.DataFrame({"item": "A", "period": mixed, "quantity": [1, 2]})),
                "mixed frequencies")


def test_staged_output_refuses_to_replace_a_folder_with_a_file(tmp_path, input_error):
    out = tmp_path / "run"
    (out / "a.csv").mkdir(parents=True)
    (out / "a.csv" / "mine.txt").write_text("keep")

    def run():
        with staged_output(out) as stage:
            write_text("new", stage / "a.csv")

    input_error(run, "a.csv", "exists and is a folder")
    assert (out / "a.csv" / "mine.txt").read_text() == "keep"
    assert _leftovers(tmp_path) == ["run"]


def test_written_files_get_ordinary_permissions(tmp_path):
    # The temporary file must not pass its owner-only mode on to the output.
    plain = tmp_path / "plain.txt"
    plain.write_text("x")
    expected = plain.stat().st_mode & 0o777
    write_table(pd.DataFrame({"a": [1]}), tmp_path / "t.csv")
    write_text("x", tmp_path / "t.txt")
    assert (tmp_path / "t.csv").stat().st_mode & 0o777 == expected
    assert (tmp_path / "t.txt").stat().st_mode & 0o777 == expected


def test_attribute_missing_on_every_row_of_an_item_is_allowed(write_csv, input_error):
    path = write_csv("t.csv", "item,period,quantity,location\nA,1,1,\nB,1,1,Hill\nA,2,1,\n")
    panel = read_demand(path)[0]
    assert pd.isna(panel.attribute("location")["A"]) and panel.attribute("location")["B"] == "Hill"
    path = write_csv("t2.csv", "item,period,quantity,location\nA,1,1,North\nA,2,1,\n")
    input_error(lambda: read_demand(path), "t2.csv", "row 2", "item 'A'", "location", "'North'")

"""The in-memory demand panel: validation, offsets, derivations and as_panel."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sparsedemand.io import as_panel
from sparsedemand.panel import DemandPanel, first_demand_offsets


def make(values, *, items=None, periods=None, **kwargs) -> DemandPanel:
    values = np.asarray(values, dtype=float)
    items = pd.Index([f"P{i}" for i in range(values.shape[0])]) if items is None else items
    periods = pd.RangeIndex(values.shape[1]) if periods is None else periods
    return DemandPanel(values, items=items, periods=periods, **kwargs)


# ------------------------------------------------------------------ validation


def test_values_are_c_contiguous_float64():
    panel = make(np.asfortranarray(np.array([[1, 0, 2], [0, 0, 3]], dtype=np.int32)))
    assert panel.values.dtype == np.float64 and panel.values.flags.c_contiguous
    assert panel.shape == (2, 3) and panel.n_items == 2 and panel.n_periods == 3


@pytest.mark.parametrize(
    ("kwargs", "parts"),
    [
        ({"values": np.zeros(3)}, ["2-D", "1-D"]),
        ({"values": np.zeros((2, 3)), "items": pd.Index(["A"])}, ["1 item labels", "2 rows"]),
        ({"values": np.zeros((1, 3)), "periods": pd.RangeIndex(4)}, ["4 period labels", "3 columns"]),
        ({"values": np.zeros((1, 3)), "available": np.ones((1, 2), bool)}, ["availability", "(1, 2)", "(1, 3)"]),
        ({"values": np.zeros((1, 3)), "periods": pd.Index([0, 1, 2])}, ["PeriodIndex or RangeIndex"]),
        ({"values": np.zeros((2, 3)), "items": pd.Index(["A", "A"])}, ["duplicate item label 'A'"]),
        ({"values": np.zeros((2, 3)), "introduced": np.array([0])}, ["introduced", "2 items"]),
        ({"values": np.zeros((1, 3)), "introduced": np.array([3])}, ["introduced", "3"]),
        ({"values": np.zeros((1, 3)), "introduced": np.array([-1])}, ["introduced", "-1"]),
    ],
)
def test_shape_and_label_checks(input_error, kwargs, parts):
    values = kwargs.pop("values")
    n = values.shape[0] if values.ndim == 2 else 1
    base = {"items": pd.Index([f"P{i}" for i in range(n)]),
            "periods": pd.RangeIndex(values.shape[-1])}
    base.update(kwargs)
    input_error(lambda: DemandPanel(values, **base), *parts)


@pytest.mark.parametrize(
    ("bad", "parts"),
    [(np.nan, ["NaN", "'B'", "period 2"]), (np.inf, ["infinite", "'B'", "period 2"]),
     (-1.0, ["negative", "-1", "'B'", "period 2"])],
)
def test_value_checks_name_item_and_period(input_error, bad, parts):
    values = np.zeros((2, 4))
    values[1, 2] = bad
    input_error(lambda: make(values, items=pd.Index(["A", "B"])), *parts)


def test_non_numeric_values(input_error):
    values = np.array([["1", "x"]], dtype=object)
    input_error(lambda: DemandPanel(values, items=pd.Index(["A"]), periods=pd.RangeIndex(2)), "numbers")


@pytest.mark.parametrize(
    ("periods", "part"),
    [
        (pd.RangeIndex(0, 6, 2), "consecutive"),
        (pd.PeriodIndex(["2024-01", "2024-03", "2024-04"], freq="M"), "consecutive"),
        (pd.PeriodIndex(["2024-02", "2024-01", "2024-03"], freq="M"), "consecutive"),
        (pd.period_range("2024Q1", periods=3, freq="Q"), "day, week or month"),
        (pd.period_range("2024-01-01", periods=3, freq="h"), "day, week or month"),
    ],
)
def test_calendar_checks(input_error, periods, part):
    input_error(lambda: make(np.zeros((1, 3)), periods=periods), part)


def test_attributes_are_aligned_to_items_and_checked(input_error):
    attrs = pd.DataFrame({"unit_price": [5.0, 1.0]}, index=["B", "A"])
    panel = make(np.zeros((2, 2)), items=pd.Index(["A", "B"]), attributes=attrs)
    assert panel.attribute("unit_price").tolist() == [1.0, 5.0]
    assert panel.attribute("location", default="none").tolist() == ["none", "none"]
    dup = pd.DataFrame({"unit_price": [5.0, 1.0]}, index=["A", "A"])
    input_error(lambda: make(np.zeros((2, 2)), items=pd.Index(["A", "B"]), attributes=dup),
                "attributes", "'A'")


def test_mask_is_all_true_without_availability():
    panel = make([[0, 1]])
    assert panel.available is None and panel.mask().tolist() == [[True, True]]
    masked = make([[0, 1]], available=np.array([[0, 1]]))
    assert masked.available.dtype == np.bool_ and masked.mask().tolist() == [[False, True]]


# --------------------------------------------------------------- start offsets


def test_first_demand_offsets():
    values = np.array([[0, 0, 3, 0], [0, 0, 0, 0], [1, 0, 0, 0], [0, 0, 0, 0.5]])
    assert first_demand_offsets(values).tolist() == [2, 4, 0, 3]
    assert make(values).start.tolist() == [2, 4, 0, 3]  # never sold: n_periods


def test_start_is_recomputed_for_derived_panels():
    panel = make([[0, 0, 2, 0], [1, 0, 0, 0]], introduced=np.array([1, 0]))
    assert panel.subset([0]).start.tolist() == [2]
    assert panel.head(2).start.tolist() == [2, 0]  # first demand after the cut: never sold


def test_describe():
    panel = make([[0, 0, 2], [0, 0, 0]], periods=pd.period_range("2024-01", periods=3, freq="M"),
                 available=np.array([[1, 0, 1], [1, 1, 1]]))
    info = panel.describe()
    assert info["items"] == 2 and info["periods"] == 3 and info["frequency"] == "month"
    assert (info["first_period"], info["last_period"]) == ("2024-01", "2024-03")
    assert info["volume"] == 2.0 and info["never_sold"] == 1
    assert info["unavailable_share"] == pytest.approx(1 / 6)


# ------------------------------------------------------------------ subset/head


@pytest.fixture
def panel() -> DemandPanel:
    return make(
        [[1, 0, 0, 2], [0, 0, 3, 0], [0, 0, 0, 0]],
        items=pd.Index(["A", "B", "C"]),
        available=np.array([[1, 1, 0, 1], [1, 0, 1, 1], [1, 1, 1, 0]]),
        attributes=pd.DataFrame({"location": ["N", "R", "H"]}, index=["A", "B", "C"]),
        introduced=np.array([0, 1, 3]),
    )


@pytest.mark.parametrize("rows", [[2, 0], np.array([2, 0]), ["C", "A"], pd.Index(["C", "A"])])
def test_subset_by_positions_or_labels(panel, rows):
    sub = panel.subset(rows)
    assert sub.items.tolist() == ["C", "A"]
    assert sub.values.tolist() == [[0, 0, 0, 0], [1, 0, 0, 2]]
    assert sub.available.tolist() == [[True, True, True, False], [True, True, False, True]]
    assert sub.attribute("location").tolist() == ["H", "N"]
    assert sub.introduced.tolist() == [3, 0] and sub.start.tolist() == [4, 0]


def test_subset_by_mask_and_slice(panel):
    assert panel.subset(np.array([False, True, True])).items.tolist() == ["B", "C"]
    assert panel.subset(slice(0, 2)).items.tolist() == ["A", "B"]


def test_subset_unknown_item(panel, input_error):
    input_error(lambda: panel.subset(["A", "Z"]), "unknown item 'Z'")


def test_head(panel, input_error):
    cut = panel.head(2)
    assert cut.n_periods == 2 and list(cut.periods) == [0, 1]
    assert cut.values.tolist() == [[1, 0], [0, 0], [0, 0]]
    assert cut.available.tolist() == [[True, True], [True, False], [True, True]]
    assert cut.introduced.tolist() == [0, 1, 1]  # C was listed after the cut
    assert cut.attribute("location").tolist() == ["N", "R", "H"]
    input_error(lambda: panel.head(0), "0 of 4")
    input_error(lambda: panel.head(5), "5 of 4")


# ----------------------------------------------------------- calendar helpers


def test_future_periods_days():
    # Gregorian calendar: 2024 is a leap year, so 28 Feb is followed by 29 Feb.
    panel = make(np.zeros((1, 3)), periods=pd.period_range("2024-02-26", periods=3, freq="D"))
    assert [str(p) for p in panel.future_periods(3)] == ["2024-02-29", "2024-03-01", "2024-03-02"]


def test_future_periods_weeks():
    # ISO 8601: 2024-W52 runs Monday 23 Dec to Sunday 29 Dec; the next week starts 30 Dec.
    panel = make(np.zeros((1, 2)), periods=pd.period_range("2024-12-16", periods=2, freq="W-SUN"))
    future = panel.future_periods(2)
    assert [p.start_time for p in future] == [pd.Timestamp("2024-12-30"), pd.Timestamp("2025-01-06")]
    assert future.freqstr == "W-SUN"


def test_future_periods_months():
    panel = make(np.zeros((1, 2)), periods=pd.period_range("2024-10", periods=2, freq="M"))
    assert [str(p) for p in panel.future_periods(3)] == ["2024-12", "2025-01", "2025-02"]


def test_future_periods_integers():
    panel = make(np.zeros((1, 5)), periods=pd.RangeIndex(5, 10))
    assert list(panel.future_periods(3)) == [10, 11, 12]


@pytest.mark.parametrize(
    ("periods", "frequency", "season"),
    [
        # 364 = 52 weeks of 7 days keeps weekdays aligned year on year (common practice).
        (pd.period_range("2024-01-01", periods=3, freq="D"), "day", 364),
        (pd.period_range("2024-01-01", periods=3, freq="W-SUN"), "week", 52),
        (pd.period_range("2024-01-01", periods=3, freq="W-TUE"), "week", 52),
        (pd.period_range("2024-01", periods=3, freq="M"), "month", 12),
        (pd.RangeIndex(3), None, 0),
    ],
)
def test_frequency_and_season_length(periods, frequency, season):
    panel = make(np.zeros((1, 3)), periods=periods)
    assert panel.frequency == frequency and panel.season_length == season


def test_to_wide_and_to_long(panel):
    wide = panel.to_wide()
    assert wide.index.tolist() == ["A", "B", "C"] and list(wide.columns) == [0, 1, 2, 3]
    np.testing.assert_array_equal(wide.to_numpy(), panel.values)
    long = panel.to_long(item_column="sku", quantity_column="units")
    # One row per item from its first recorded period: 4 + 3 + 1.
    assert len(long) == 8 and list(long.columns) == ["sku", "period", "units", "in_stock", "location"]
    assert long[long["sku"] == "C"][["period", "units", "in_stock"]].values.tolist() == [[3, 0, 0]]
    assert "in_stock" not in make([[1.0]]).to_long().columns


# -------------------------------------------------------------------- as_panel


def test_as_panel_from_numpy_nan_is_unavailable():
    panel = as_panel(np.array([[1.0, np.nan, 0.0], [np.nan, 2.0, 3.0]]))
    assert panel.values.tolist() == [[1.0, 0.0, 0.0], [0.0, 2.0, 3.0]]
    assert panel.available.tolist() == [[True, False, True], [False, True, True]]
    assert list(panel.items) == [0, 1] and list(panel.periods) == [0, 1, 2]
    assert panel.frequency is None


def test_as_panel_from_numpy_without_nan_has_no_mask():
    panel = as_panel([[0, 1, 2]])
    assert panel.available is None and panel.values.tolist() == [[0.0, 1.0, 2.0]]
    assert as_panel(np.array([3.0, 0.0])).shape == (1, 2)  # 1-D: one item


@pytest.mark.parametrize(
    ("data", "parts"),
    [
        (np.zeros((2, 2, 2)), ["2-D", "3-D"]),
        (np.array([[0.0, -1.0]]), ["negative", "-1", "item 0", "period 1"]),
        (np.array([[0.0], [np.inf]]), ["infinite", "item 1", "period 0"]),
    ],
)
def test_as_panel_rejects_bad_arrays(input_error, data, parts):
    input_error(lambda: as_panel(data, name="history"), "history", *parts)


def test_as_panel_passes_a_panel_through(panel):
    assert as_panel(panel) is panel


def test_as_panel_from_frames(long_frame, wide_frame):
    from_long = as_panel(long_frame)
    assert from_long.items.tolist() == ["A", "B"] and from_long.frequency == "month"
    from_wide = as_panel(wide_frame.set_index("item"))
    assert from_wide.items.tolist() == ["A", "B", "C"]
    assert from_wide.values.tolist() == [[1, 0, 2], [0, 4, 0], [0, 2, 0]]
    series = as_panel(pd.Series([1.0, 0.0, 2.0], index=[0, 1, 2], name="X"))
    assert series.items.tolist() == ["X"] and series.values.tolist() == [[1, 0, 2]]


def test_first_demand_offsets_with_no_periods():
    # An empty history has its "first demand" at the end of the calendar, here 0.
    assert first_demand_offsets(np.zeros((3, 0))).tolist() == [0, 0, 0]

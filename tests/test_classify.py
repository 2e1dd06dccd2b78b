"""Demand-pattern classifier: worked examples, published cutoffs, properties, inputs."""

from __future__ import annotations

import inspect
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from sparsedemand.classify import (
    PATTERNS,
    STATUSES,
    classify,
    croston_sba_boundary,
    pattern_summary,
)
from sparsedemand.errors import InputError
from sparsedemand.panel import DemandPanel

# Figures that do not depend on where the history sits in the calendar.
SHIFT_FREE = ["pattern", "adi", "cv2", "n_demands", "n_periods", "mean_size", "mean_interval",
              "quiet_periods", "quiet_limit", "measured_pattern"]


def one(row, **options) -> pd.Series:
    """Classify a single item and return its row."""
    return classify(np.asarray([row], dtype=float), **options).iloc[0]


# ------------------------------------------------------------ published values


def test_default_cutoffs_are_the_published_ones():
    # Syntetos, Boylan & Croston (2005), JORS 56:495-503: ADI 1.32, CV² 0.49.
    defaults = inspect.signature(classify).parameters
    assert defaults["adi_cutoff"].default == 1.32
    assert defaults["cv2_cutoff"].default == 0.49
    assert defaults["min_demands"].default == 2
    assert PATTERNS == ("smooth", "erratic", "intermittent", "lumpy")
    assert STATUSES == ("never-sold", "too-short", "gone-quiet")


# --------------------------------------------------------- hand-worked examples


def test_smooth():
    # trimmed history: the 10 periods from index 2; 9 demands -> ADI 10/9 = 1.111 < 1.32
    # sizes five 4s and four 5s: mean 40/9, E[x²] = (5*16 + 4*25)/9 = 20,
    # var = 20 - 1600/81 = 20/81, CV² = (20/81) / (1600/81) = 0.0125 < 0.49
    r = one([0, 0, 4, 5, 4, 0, 5, 4, 5, 4, 5, 4])
    assert r["pattern"] == "smooth"
    assert r["adi"] == pytest.approx(10 / 9)
    assert r["cv2"] == pytest.approx(0.0125)
    assert (r["n_demands"], r["n_periods"], r["leading_zeros"]) == (9, 10, 2)
    assert (r["first_demand"], r["last_demand"]) == (2, 11)
    assert r["mean_size"] == pytest.approx(40 / 9)
    assert r["reason"] == "ADI 1.11 < 1.32 and CV² 0.01 < 0.49: smooth"


def test_erratic():
    # a demand every period: ADI 10/10 = 1 < 1.32
    # sizes 1, 9 five times each: mean 5, var 16, CV² 16/25 = 0.64 >= 0.49
    r = one([1, 9] * 5)
    assert r["pattern"] == "erratic"
    assert r["adi"] == 1.0
    assert r["cv2"] == pytest.approx(0.64)


def test_intermittent():
    # first demand at index 1: 11 periods, 5 demands -> ADI 11/5 = 2.2 >= 1.32
    # sizes all 3: CV² 0 < 0.49
    r = one([0, 3, 0, 0, 3, 0, 3, 0, 0, 3, 0, 3])
    assert r["pattern"] == "intermittent"
    assert r["adi"] == pytest.approx(2.2)
    assert r["cv2"] == 0.0
    assert r["reason"] == "ADI 2.20 >= 1.32 and CV² 0.00 < 0.49: intermittent"


def test_lumpy():
    # 11 periods, 5 demands -> ADI 2.2; sizes 1, 9, 1, 9, 1: mean 21/5 = 4.2,
    # E[x²] = (3*1 + 2*81)/5 = 33, var = 33 - 17.64 = 15.36, CV² = 15.36/17.64 = 0.8707
    r = one([0, 1, 0, 0, 9, 0, 1, 0, 0, 9, 0, 1])
    assert r["pattern"] == "lumpy"
    assert r["cv2"] == pytest.approx(15.36 / 17.64)
    # population form (ddof 0), as numpy's default
    assert r["cv2"] == pytest.approx(np.var([1, 9, 1, 9, 1]) / np.mean([1, 9, 1, 9, 1]) ** 2)


def test_never_sold():
    r = one([0.0] * 12)
    assert r["pattern"] == "never-sold"
    assert math.isnan(r["adi"]) and math.isnan(r["cv2"])
    assert r["n_demands"] == 0 and r["leading_zeros"] == 12
    assert pd.isna(r["first_demand"]) and pd.isna(r["last_demand"])
    assert r["reason"] == "no demand in 12 periods: never-sold"


def test_too_short_by_demands():
    # a single demand in 9 periods of history: fewer than min_demands = 2
    r = one([0, 0, 0, 5, 0, 0, 0, 0, 0, 0, 0, 0])
    assert r["pattern"] == "too-short"
    assert r["adi"] == 9.0 and math.isnan(r["cv2"])
    assert r["reason"] == "1 demand, fewer than the 2 needed: too-short"
    assert one([0, 0, 0, 5, 0, 0, 4, 0, 0, 0, 0, 0])["pattern"] != "too-short"
    assert one([0, 0, 0, 5, 0, 0, 4, 0, 0, 0, 0, 0], min_demands=3)["pattern"] == "too-short"


def test_too_short_by_periods():
    # first demand at index 9: a trimmed history of 3 periods < min_periods
    r = one([0] * 9 + [2, 3, 2], min_periods=4)
    assert r["pattern"] == "too-short"
    assert "3 available periods since the first demand, fewer than the 4 needed" in r["reason"]
    assert one([0] * 8 + [1, 2, 3, 2], min_periods=4)["pattern"] == "smooth"


def test_gone_quiet():
    # demands of 2 at 0, 2, ..., 18 (10 demands), then zeros to index 31.
    # mean interval between demands (18 - 0) / 9 = 2 -> limit max(8, 4 x 2) = 8;
    # quiet periods 31 - 18 = 13 >= 8: gone quiet. The figures alone: ADI 32/10 = 3.2.
    r = one([2, 0] * 10 + [0] * 12)
    assert r["pattern"] == "gone-quiet"
    assert (r["quiet_periods"], r["quiet_limit"], r["mean_interval"]) == (13, 8, 2.0)
    assert r["measured_pattern"] == "intermittent"
    assert r["reason"].startswith("no demand in the last 13 available periods (limit 8")
    assert r["reason"].endswith("would make it intermittent: gone-quiet")


def test_quiet_limit_equal_goes_to_gone_quiet():
    # demands every 3 periods from 0 to 27 (10 demands): mean interval 3, limit 4 x 3 = 12.
    history = [4, 0, 0] * 9 + [4]
    assert one(history + [0] * 12)["pattern"] == "gone-quiet"  # 12 quiet periods = limit
    assert one(history + [0] * 11)["pattern"] == "intermittent"  # 11 < 12
    assert one(history + [0] * 11, quiet_factor=3.5)["quiet_limit"] == 11  # ceil(3.5 x 3) = 11
    assert one(history + [0] * 30, quiet_factor=None)["pattern"] == "intermittent"


def test_quiet_limit_not_stretched_by_the_silence():
    # three sales at 0, 2, 4 then 60 silent periods. The ADI over the whole trimmed
    # history is 65/3 = 21.7, so 4 x ADI = 87 would never flag it; the mean interval
    # between demands is 2, limit max(8, 8) = 8.
    r = one([1, 0, 1, 0, 1] + [0] * 60)
    assert r["pattern"] == "gone-quiet"
    assert r["adi"] == pytest.approx(65 / 3)
    assert r["quiet_limit"] == 8


def test_quiet_minimum_protects_frequent_items():
    # a daily seller (every period) silent for 5 periods: 4 x 1 = 4 < quiet_min 8
    assert one([3] * 30 + [0] * 5)["pattern"] != "gone-quiet"
    assert one([3] * 30 + [0] * 5, quiet_min=5)["pattern"] == "gone-quiet"


def test_out_of_stock_tail_is_not_silence():
    # the same silent tail, but out of stock (NaN in an array): no available
    # period without demand, so nothing to judge -> not gone quiet (common practice:
    # a stock-out is not a sign of obsolescence).
    r = one([2, 0] * 10 + [np.nan] * 12)
    assert r["pattern"] == "intermittent"
    assert r["quiet_periods"] == 1 and r["unavailable_periods"] == 12
    assert r["n_periods"] == 20 and r["adi"] == 2.0


def test_sale_in_an_out_of_stock_period_is_ignored():
    # period 1 is flagged out of stock although 7 units were recorded: dropped.
    values = np.array([[0, 7, 0, 2, 0, 2, 0, 2, 0, 2, 0, 2.0]])
    mask = np.ones_like(values, dtype=bool)
    mask[0, 1] = False
    panel = DemandPanel(values, items=pd.Index(["A"]), periods=pd.RangeIndex(12), available=mask)
    r = classify(panel).iloc[0]
    # history starts at index 3: 9 periods, 5 demands of 2
    assert (r["first_demand"], r["n_periods"], r["n_demands"], r["cv2"]) == (3, 9, 5, 0.0)
    assert r["volume"] == 17.0  # recorded demand, censored or not


def test_never_sold_reports_stock_outs():
    r = one([0, np.nan, np.nan, 0])
    assert r["reason"] == "no demand in 4 periods (2 of them out of stock): never-sold"


# -------------------------------------------------- a value on the cutoff goes up


def test_adi_equal_to_cutoff_is_intermittent():
    # (5, 5, 5, 0) eight times then a 5: 33 periods, 25 demands -> ADI 33/25 = 1.32
    r = one([5, 5, 5, 0] * 8 + [5])
    assert r["adi"] == 1.32
    assert r["pattern"] == "intermittent"
    assert r["reason"].startswith("ADI 1.32 >= 1.32")
    # (5, 5, 5, 5, 0) four times then 5: 21 periods, 17 demands -> ADI 1.235 < 1.32
    assert one([5, 5, 5, 5, 0] * 4 + [5])["pattern"] == "smooth"


def test_cv2_equal_to_cutoff_is_variable():
    # sizes 17 and 3: mean 10, var 49, CV² 49/100 = 0.49 exactly
    r = one([17, 3] * 6)
    assert r["cv2"] == 0.49
    assert r["pattern"] == "erratic"
    r = one([17, 0, 3, 0] * 6)  # ADI 23/12 = 1.92
    assert r["pattern"] == "lumpy"


def test_just_below_a_cutoff_never_reads_as_equal():
    # sizes 1.7 and 0.3 (almost 0.49); the reason must not say "0.49 < 0.49"
    r = one([1.6999, 0.3001] * 6)
    assert r["cv2"] < 0.49 and r["pattern"] == "smooth"
    text = r["reason"].split(" and ")[1]
    shown = float(text.split()[1])
    assert shown < 0.49, r["reason"]


def test_custom_cutoffs():
    # ADI 2.2, CV² 0.87 (the lumpy example) with cutoffs 2.5 and 1.0: smooth
    r = one([0, 1, 0, 0, 9, 0, 1, 0, 0, 9, 0, 1], adi_cutoff=2.5, cv2_cutoff=1.0)
    assert r["pattern"] == "smooth"
    assert r["reason"] == "ADI 2.20 < 2.5 and CV² 0.87 < 1: smooth"


# ------------------------------------------------------ Kostenko-Hyndman rule


def _mse_gap(p, cv2, alpha):
    """MSE(Croston) - MSE(SBA) per unit mu², from the published approximations.

    Demand occurs with probability 1/p; sizes have mean mu and CV² cv2.
    Croston's bias alpha/(2-alpha) * mu (p-1)/p² (Syntetos & Boylan 2001, IJPE
    71:457-466) and variance alpha/(2-alpha) * (mu² (p-1)/p³ + sigma²/p²)
    (Syntetos & Boylan 2005, IJF 21:303-314), both from memory; SBA multiplies
    the estimate by (1 - alpha/2) (the same papers). Kostenko & Hyndman (2006,
    JORS 57:1256-1257) draw the boundary where this gap changes sign.
    """
    k = alpha / (2 - alpha)
    var_c = k * ((p - 1) / p**3 + cv2 / p**2)
    bias_c = k * (p - 1) / p**2
    bias_s = (1 - alpha / 2) * (1 / p + bias_c) - 1 / p
    return (var_c + bias_c**2) - ((1 - alpha / 2) ** 2 * var_c + bias_s**2)


@pytest.mark.parametrize("adi", [1.0, 1.1, 1.2, 1.25, 1.3])
def test_kostenko_hyndman_boundary_matches_the_mse_comparison(adi):
    # the boundary is where SBA's MSE overtakes Croston's, for a small smoothing constant
    root = brentq(lambda c: _mse_gap(adi, c, 1e-6), -5.0, 5.0)
    assert croston_sba_boundary(adi) == pytest.approx(root, abs=1e-5)


def test_kostenko_hyndman_boundary_near_the_cutoffs():
    # the curve crosses CV² 0 at ADI 4/3 and meets ADI 1 at CV² 1/2, the points the
    # cutoffs 1.32 and 0.49 of Syntetos, Boylan & Croston (2005) round.
    assert croston_sba_boundary(4 / 3) == pytest.approx(0.0, abs=1e-12)
    assert croston_sba_boundary(1.0) == 0.5
    assert _mse_gap(1.32, 0.0, 1e-6) < 0 < _mse_gap(1.34, 0.0, 1e-6)


def test_kostenko_hyndman_rule():
    kh = {"rule": "kostenko-hyndman"}
    # ADI 1, CV² 0.49 (sizes 17, 3): under the boundary 0.5 -> Croston's side, smooth;
    # the cutoffs call it erratic.
    assert one([17, 3] * 6, **kh)["pattern"] == "smooth"
    assert one([17, 3] * 6)["pattern"] == "erratic"
    # ADI 25/20 = 1.25: boundary 2/1.25 - 1.5 = 0.1. Sizes 13, 7: CV² (6/20)² = 0.09 < 0.1.
    row = [13, 7, 13, 7, 0] * 5
    assert one(row, **kh)["pattern"] == "smooth"
    # sizes 7, 3: CV² (4/10)² = 0.16 >= 0.1, above the boundary but under both cutoffs;
    # ADI 1.25/1.32 = 0.95 outweighs CV² 0.16/0.49 = 0.33 -> intermittent.
    row = [7, 3, 7, 3, 0] * 5
    r = one(row, **kh)
    assert r["pattern"] == "intermittent"
    assert "above the Kostenko-Hyndman boundary" in r["reason"]
    assert one(row)["pattern"] == "smooth"
    # ADI 12/9 = 4/3 and constant sizes: CV² 0 equals the boundary -> SBA's side
    row = [2, 2, 0, 2, 2, 2, 0, 2, 2, 0, 2, 2]  # 12 periods, 9 demands
    r = one(row, **kh)
    assert r["adi"] == pytest.approx(4 / 3)
    assert r["pattern"] == "intermittent"


# ---------------------------------------------------------- reference figures


def reference(row, mask):
    """The definitions applied literally, item by item (numpy for the moments)."""
    kept = row[mask]
    pos = np.flatnonzero(kept > 0)
    if pos.size == 0:
        return {"n_demands": 0, "n_periods": 0, "adi": np.nan, "cv2": np.nan}
    trimmed = kept[pos[0]:]
    sizes = trimmed[trimmed > 0]
    cv2 = np.var(sizes) / np.mean(sizes) ** 2 if sizes.size >= 2 else np.nan
    return {"n_demands": sizes.size, "n_periods": trimmed.size,
            "adi": trimmed.size / sizes.size, "cv2": cv2}


demand_cell = st.one_of(st.just(0.0), st.just(0.0), st.integers(1, 40).map(float),
                        st.floats(0.01, 1e4))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(1, 5).flatmap(lambda n: st.tuples(
    st.lists(st.lists(demand_cell, min_size=20, max_size=20), min_size=n, max_size=n),
    st.lists(st.lists(st.sampled_from([True, True, True, False]), min_size=20, max_size=20),
             min_size=n, max_size=n),
)))
def test_kernel_matches_the_definitions(data):
    values, mask = (np.array(x) for x in data)
    values = values.astype(float)
    panel = DemandPanel(values, items=pd.RangeIndex(len(values)), periods=pd.RangeIndex(20),
                        available=mask)
    table = classify(panel, min_periods=1)
    for i in range(len(values)):
        ref = reference(values[i], mask[i])
        got = table.iloc[i]
        assert got["n_demands"] == ref["n_demands"]
        assert got["n_periods"] == ref["n_periods"]
        np.testing.assert_allclose(got["adi"], ref["adi"], rtol=1e-12)
        np.testing.assert_allclose(got["cv2"], ref["cv2"], rtol=1e-7, atol=1e-12)


# -------------------------------------------------------------- properties


rows = st.lists(demand_cell, min_size=2, max_size=40).filter(lambda r: sum(v > 0 for v in r) >= 2)


@settings(max_examples=60, deadline=None)
@given(rows, st.floats(1e-3, 1e3))
def test_scaling_sizes_leaves_cv2_unchanged(row, factor):
    a = one(row, min_periods=1)
    b = one(np.array(row) * factor, min_periods=1)
    assert b["cv2"] == pytest.approx(a["cv2"], rel=1e-9, abs=1e-12)
    assert b["adi"] == a["adi"]
    if abs(a["cv2"] - 0.49) > 1e-9:
        assert b["pattern"] == a["pattern"]


@settings(max_examples=60, deadline=None)
@given(st.lists(demand_cell, min_size=1, max_size=40), st.integers(1, 30))
def test_leading_zeros_change_nothing(row, extra):
    a = classify(np.array([row]), min_periods=1)
    b = classify(np.array([[0.0] * extra + row]), min_periods=1)
    pd.testing.assert_frame_equal(a[SHIFT_FREE], b[SHIFT_FREE])
    assert b["leading_zeros"].iat[0] == a["leading_zeros"].iat[0] + extra
    if a["n_demands"].iat[0]:
        assert b["first_demand"].iat[0] == a["first_demand"].iat[0] + extra
        assert b["reason"].iat[0] == a["reason"].iat[0]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(demand_cell, st.sampled_from([True, True, False])), min_size=1,
                max_size=40).filter(lambda cells: any(ok for _, ok in cells)),
       st.sampled_from(["cutoffs", "kostenko-hyndman"]))
def test_masked_periods_equal_dropped_periods(cells, rule):
    values = np.array([[v for v, _ in cells]])
    mask = np.array([[ok for _, ok in cells]])
    panel = DemandPanel(values, items=pd.Index(["A"]), periods=pd.RangeIndex(values.shape[1]),
                        available=mask)
    masked = classify(panel, min_periods=1, rule=rule)
    dropped = classify(values[:, mask[0]], min_periods=1, rule=rule)
    cols = [c for c in SHIFT_FREE if c != "mean_size"]
    pd.testing.assert_frame_equal(masked[cols].reset_index(drop=True), dropped[cols])
    np.testing.assert_allclose(masked["mean_size"], dropped["mean_size"], rtol=1e-12)


# ------------------------------------------------------------------ inputs


def test_array_frame_and_panel_give_the_same_table():
    values = np.array([
        [0, 3, 0, 0, 3, 0, 3, 0, 0, 3, 0, 3],
        [1, 9, 1, 9, 1, 9, 1, 9, 1, 9, 1, 9],
        [0] * 12,
        [2, 0] * 6,
    ], dtype=float)
    labels = pd.Index(["A", "B", "C", "D"])
    from_array = classify(values)
    from_frame = classify(pd.DataFrame(values, index=labels))
    from_panel = classify(DemandPanel(values, items=labels, periods=pd.RangeIndex(12)))
    pd.testing.assert_frame_equal(from_frame, from_panel)
    relabelled = from_array.set_axis(labels).assign(item=labels)
    pd.testing.assert_frame_equal(relabelled, from_panel)
    assert list(from_panel.index) == ["A", "B", "C", "D"]
    assert list(from_panel["pattern"]) == ["intermittent", "erratic", "never-sold", "intermittent"]


def test_nan_in_an_array_is_the_same_as_a_mask():
    values = np.array([[0, 3, 0, 0, 3, 0, 3, 0, 0, 3, 0, 3.0]])
    holes = values.copy()
    holes[0, [2, 6]] = np.nan
    mask = ~np.isnan(holes)
    panel = DemandPanel(np.nan_to_num(holes), items=pd.RangeIndex(1), periods=pd.RangeIndex(12), available=mask)
    pd.testing.assert_frame_equal(classify(holes), classify(panel))


def test_table_layout_and_calendar_labels(wide_frame):
    frame = wide_frame.set_index("item")
    table = classify(frame, min_periods=1)
    expected = ["item", "pattern", "reason", "adi", "cv2", "n_demands", "n_periods",
                "unavailable_periods", "first_demand", "last_demand", "leading_zeros",
                "mean_size", "mean_interval", "quiet_periods", "quiet_limit", "volume",
                "measured_pattern"]
    assert list(table.columns) == expected
    assert list(table.index) == ["A", "B", "C"] and list(table["item"]) == ["A", "B", "C"]
    assert isinstance(table["first_demand"].dtype, pd.PeriodDtype)
    assert str(table.loc["A", "first_demand"]) == "2024-01"
    assert str(table.loc["A", "last_demand"]) == "2024-03"
    # C is listed from February and sells then: no leading zeros
    assert table.loc["C", "leading_zeros"] == 0
    assert table.loc["B", "leading_zeros"] == 1
    assert table.attrs["classify_options"]["min_periods"] == 1


def test_empty_panel():
    table = classify(np.zeros((0, 5)))
    assert len(table) == 0 and "pattern" in table.columns


# --------------------------------------------------------------- bad options


@pytest.mark.parametrize("option, value", [
    ("adi_cutoff", 0.5), ("adi_cutoff", float("nan")), ("adi_cutoff", "1.32"),
    ("adi_cutoff", True), ("cv2_cutoff", -0.1), ("cv2_cutoff", 0), ("cv2_cutoff", float("inf")),
    ("rule", "sbc"), ("min_demands", 1), ("min_demands", 2.5), ("min_demands", True),
    ("min_periods", 0), ("quiet_factor", 0.0), ("quiet_factor", -1.0), ("quiet_min", 0),
])
def test_bad_options_are_named(option, value, input_error):
    input_error(lambda: classify(np.ones((1, 10)), **{option: value}), option)


def test_bad_data_is_refused(input_error):
    input_error(lambda: classify(np.ones((2, 2, 2))), "2-D")
    input_error(lambda: classify(np.array([[1.0, -2.0]])), "negative")


# ----------------------------------------------------------------- summary


def test_pattern_summary():
    values = np.array([
        [0, 3, 0, 0, 3, 0, 3, 0, 0, 3, 0, 3],  # intermittent, volume 15
        [0, 6, 0, 0, 6, 0, 6, 0, 0, 6, 0, 6],  # intermittent, volume 30
        [1, 9] * 6,                            # erratic, volume 60
        [0] * 12,                              # never-sold
    ], dtype=float)
    table = classify(values)
    summary = pattern_summary(table, values)
    assert list(summary.index) == list(PATTERNS + STATUSES)
    assert summary.loc["intermittent", "items"] == 2
    assert summary.loc["intermittent", "item_share"] == 0.5
    assert summary.loc["intermittent", "volume"] == 45.0
    assert summary.loc["intermittent", "volume_share"] == pytest.approx(45 / 105)
    assert summary.loc["lumpy", "items"] == 0
    assert summary["items"].sum() == 4 and summary["volume_share"].sum() == pytest.approx(1.0)


def test_pattern_summary_refuses_a_foreign_table(input_error):
    table = classify(np.ones((2, 10)))
    input_error(lambda: pattern_summary(table, np.ones((3, 10))), "table")
    with pytest.raises(InputError):
        pattern_summary(table.drop(columns="pattern"), np.ones((2, 10)))

"""Calendar profiles: tests against scipy, hand-worked factors, simulations with known truth."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from sparsedemand.errors import InputError
from sparsedemand.panel import DemandPanel
from sparsedemand.profiles import (
    benjamini_hochberg, calendar_slots, estimate_profiles, holm, occurrence_test, volume_test,
)

MONDAY = "2024-01-01"
WEEK = np.array([1.5, 1.3, 1.2, 1.1, 1.0, 0.5, 0.4])  # Mon..Sun, an invented working week


def _days(n, start=MONDAY):
    return pd.period_range(start, periods=n, freq="D")


def _panel(values, *, available=None, attributes=None, start=MONDAY):
    values = np.atleast_2d(np.asarray(values, dtype=float))
    items = pd.Index([f"i{k}" for k in range(values.shape[0])])
    if attributes is not None:
        attributes = attributes.set_axis(items)
    return DemandPanel(values, items=items, periods=_days(values.shape[1], start),
                       available=available, attributes=attributes)


def _simulate(rng, n_items, days, shape_of, *, categories, locations=3):
    """Slow (p 0.05-0.3, sizes 1 + Poisson) and fast (Poisson 3-10) items; mean x weekday shape."""
    cat = rng.integers(0, len(categories), n_items)
    dow = np.asarray(_days(days).day_of_week)
    fast = rng.random(n_items) < 0.25
    p = rng.uniform(0.05, 0.3, n_items)
    values = np.zeros((n_items, days))
    for i in range(n_items):
        shape = shape_of(categories[cat[i]])[dow]
        if fast[i]:
            values[i] = rng.poisson(rng.uniform(3, 10) * shape)
        else:
            occ = rng.random(days) < np.clip(p[i] * shape, 0, 0.95)
            values[i] = np.where(occ, 1 + rng.poisson(1.5, days), 0)
    attrs = pd.DataFrame({"location": rng.integers(0, locations, n_items).astype(str),
                          "category": np.array(categories)[cat]})
    return _panel(values, attributes=attrs), np.array(categories)[cat]


# ----------------------------------------------------------------------- the test statistics
def test_occurrence_test_against_a_flat_profile_is_pearsons_2_by_s_table():
    # Pearson's chi-square test of independence (Pearson 1900), as scipy.stats.chi2_contingency
    # computes it without the continuity correction.
    rng = np.random.default_rng(3)
    for _ in range(5):
        exposure = rng.integers(20, 80, 7).astype(float)
        demands = np.array([rng.integers(1, e) for e in exposure], dtype=float)
        stat, p = occurrence_test(demands[None], exposure[None])
        table = np.vstack([demands, exposure - demands])
        ref = stats.chi2_contingency(table, correction=False)
        assert stat[0] == pytest.approx(ref.statistic, rel=1e-10)
        assert p[0] == pytest.approx(ref.pvalue, rel=1e-8)


def test_occurrence_test_against_a_profile_by_hand():
    # Hand computation: 12 demands, exposures 10 and 20, profile (2, 1): expected demands are
    # 12 * 20/40 = 6 and 6, rates 0.6 and 0.3; X2 = 4/(6*0.4) + 4/(6*0.7) on 1 df.
    stat, p = occurrence_test(np.array([[8.0, 4.0]]), np.array([[10.0, 20.0]]),
                              np.array([2.0, 1.0]))
    assert stat[0] == pytest.approx(4 / 2.4 + 4 / 4.2)
    assert p[0] == pytest.approx(stats.chi2.sf(4 / 2.4 + 4 / 4.2, 1))


def test_volume_test_against_a_flat_profile_is_one_way_anova():
    # One-way analysis of variance (Fisher 1925), as scipy.stats.f_oneway computes it.
    rng = np.random.default_rng(5)
    slots = [rng.poisson(lam, size) * rng.integers(1, 4, size).astype(float)
             for lam, size in ((0.4, 40), (0.6, 35), (0.3, 41), (0.5, 30))]
    vol = np.array([[s.sum() for s in slots]])
    sq = np.array([[(s**2).sum() for s in slots]])
    exp = np.array([[s.size for s in slots]], dtype=float)
    f, p = volume_test(vol, sq, exp)
    ref = stats.f_oneway(*slots)
    assert f[0] == pytest.approx(ref.statistic, rel=1e-10)
    assert p[0] == pytest.approx(ref.pvalue, rel=1e-8)


def test_volume_test_against_a_profile_by_hand():
    # Hand computation: slots {1, 3} and {2, 2} with profile (1, 3): expected volumes 8 * 1/4 = 2
    # and 6; within variance (2 + 0) / 2 = 1; F = ((4-2)^2/2 + (4-6)^2/2) / 1 / 1 = 4 on (1, 2) df.
    f, p = volume_test(np.array([[4.0, 4.0]]), np.array([[10.0, 8.0]]), np.array([[2.0, 2.0]]),
                       np.array([1.0, 3.0]))
    assert f[0] == pytest.approx(4.0)
    assert p[0] == pytest.approx(stats.f.sf(4.0, 1, 2))


def test_benjamini_hochberg_and_holm_against_scipy_and_statsmodels():
    # Benjamini and Hochberg (1995) as scipy.stats.false_discovery_control; Holm (1979) as
    # statsmodels' multipletests(method="holm") (consistency checks against both packages).
    rng = np.random.default_rng(11)
    p = np.concatenate([rng.uniform(size=40), rng.uniform(0, 0.01, 10)])
    assert np.allclose(benjamini_hochberg(p), stats.false_discovery_control(p))
    assert np.allclose(holm(p), multipletests(p, method="holm")[1])
    with_nan = np.array([0.01, np.nan, 0.04, 0.03])
    q = benjamini_hochberg(with_nan)
    assert np.isnan(q[1])
    assert np.allclose(q[[0, 2, 3]], stats.false_discovery_control([0.01, 0.04, 0.03]))


# -------------------------------------------------------------------------- slots and factors
def test_slots_of_days_weeks_and_months():
    # 2024-01-01 was a Monday (calendar fact); the week 2024-01-29..02-04 has its Thursday
    # in February.
    assert calendar_slots(_days(8), "weekday").tolist() == [0, 1, 2, 3, 4, 5, 6, 0]
    weeks = pd.period_range("2024-01-22", periods=3, freq="W-SUN")
    assert calendar_slots(weeks, "month").tolist() == [0, 1, 1]
    months = pd.period_range("2023-11", periods=3, freq="M")
    assert calendar_slots(months, "month").tolist() == [10, 11, 0]


def _steady_week(weeks=60, week=(4.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0)):
    return np.tile(np.array(week), weeks)


def test_factors_of_a_noise_free_week_by_hand():
    # Hand computation: weekday rates 4, 2, 1, 1, 1, 1, 1 average 11/7, so the factors are the rates
    # divided by 11/7. Without noise the within variance is 0, so k = 0 and the weight is 1.
    prof = estimate_profiles(_panel(_steady_week()), volume_demands_per_slot=1)
    table = prof.tables[0]
    assert table.kind == "weekday" and table.source[0] == "own shrunk toward flat"
    expected = np.array([4, 2, 1, 1, 1, 1, 1]) / (11 / 7)
    assert np.allclose(table.factors[0], expected)
    assert table.factors[0].mean() == pytest.approx(1.0)  # one week averages 1


def test_out_of_stock_periods_and_leading_zeros_are_ignored():
    base = estimate_profiles(_panel(_steady_week()), volume_demands_per_slot=1).tables[0].factors
    values = np.concatenate([np.zeros(7 * 5), _steady_week()])  # five weeks before the first sale
    available = np.ones(values.size, dtype=bool)
    out = np.arange(7 * 5, values.size, 7)[::3]  # every third Monday out of stock, sales lost
    values[out], available[out] = 0.0, False
    prof = estimate_profiles(_panel(values, available=available[None]), volume_demands_per_slot=1)
    assert np.allclose(prof.tables[0].factors, base)
    with_zeros = estimate_profiles(_panel(values), volume_demands_per_slot=1).tables[0].factors
    assert with_zeros[0, 0] < base[0, 0]  # the same zeros counted as sales would lower Monday


def test_month_factors_average_one_over_the_year_and_need_two_years():
    rng = np.random.default_rng(2)
    days = _days(3 * 365)
    season = 1 + 0.6 * np.cos(2 * np.pi * (np.asarray(days.day_of_year) - 100) / 365.25)
    values = rng.poisson(6 * season, (3, days.size)).astype(float)
    values[2, : 3 * 365 - 700] = 0.0  # under two years from the first demand
    prof = estimate_profiles(_panel(values))
    month = next(t for t in prof.tables if t.kind == "month")
    days_in_month = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])
    assert month.source[0] != "none" and month.source[2] == "none"
    assert month.factors[:2] @ days_in_month / 365 == pytest.approx([1.0, 1.0])
    assert np.all(month.factors[2] == 1.0)


# --------------------------------------------------------------------- decisions, with known truth
@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4])
def test_items_without_a_cycle_get_none(seed):
    # Simulation with known truth: no item has a cycle. Under the global null, Benjamini-Hochberg
    # and Holm reject anything with probability at most the level (Benjamini and Hochberg 1995).
    rng = np.random.default_rng(seed)
    panel, _ = _simulate(rng, 400, 728, lambda c: np.ones(7), categories=["a", "b", "c"])
    prof = estimate_profiles(panel)
    flagged = np.zeros(panel.n_items, dtype=bool)
    for t in prof.tables:
        flagged |= t.source != "none"
    assert flagged.mean() <= 0.05


def test_false_profiles_among_flagged_items_stay_under_the_fdr_level():
    # Simulation with known truth: half the categories follow the week. The share of uncycled items
    # among those given a profile, averaged over seeds, must stay within the level.
    shares = []
    for seed in range(4):
        rng = np.random.default_rng(100 + seed)
        panel, cat = _simulate(rng, 500, 728, lambda c: WEEK if c in ("w1", "w2") else np.ones(7),
                               categories=["w1", "w2", "f1", "f2"])
        weekday = estimate_profiles(panel).tables[0]
        flagged = weekday.source != "none"
        false = flagged & np.isin(cat, ["f1", "f2"])
        shares.append(false.sum() / max(flagged.sum(), 1))
        cycled = np.isin(cat, ["w1", "w2"])
        assert flagged[cycled].mean() >= 0.95  # items in a cycled group get a profile
    assert np.mean(shares) <= 0.05


def test_slow_items_in_a_cycled_group_borrow_the_group_profile():
    rng = np.random.default_rng(8)
    panel, _ = _simulate(rng, 300, 728, lambda c: WEEK, categories=["w"])
    values = panel.values.copy()
    values[:5, :-56] = 0.0  # five items with only eight weeks of history: too few to test alone
    short = DemandPanel(values, items=panel.items, periods=panel.periods,
                        attributes=panel.attributes)
    table = estimate_profiles(short).tables[0]
    young = table.source[:5]
    assert all(s in ("location x category", "category", "location", "all items")
               or s.startswith("own shrunk toward") for s in young)
    assert all(s != "none" for s in young)
    assert np.all(table.factors[:5, 6] < 0.8)  # the group's quiet Sunday


@pytest.mark.parametrize("seed", [21, 22])
def test_slow_items_keep_their_cycle_beside_flat_frequent_items(seed):
    # Simulation with known truth: one category, frequent items selling flat every day and
    # slow items following the working week; the frequent volumes must not flatten the
    # slow items' profile (groups are split by demand frequency).
    rng = np.random.default_rng(seed)
    dow = np.asarray(_days(728).day_of_week)
    week = WEEK / WEEK.mean()
    frequent = rng.poisson(20.0, (30, 728)).astype(float)
    occurs = rng.random((150, 728)) < 0.12 * week[dow]
    slow = np.where(occurs, 1.0 + rng.poisson(1.0, (150, 728)), 0.0)
    attrs = pd.DataFrame({"category": ["x"] * 180})
    table = estimate_profiles(_panel(np.vstack([frequent, slow]), attributes=attrs)).tables[0]
    assert np.abs(np.median(table.factors[30:], axis=0) - week).max() < 0.1
    assert np.abs(np.median(table.factors[:30], axis=0) - 1.0).max() < 0.05


def test_an_item_that_contradicts_its_group_does_not_get_the_group_profile():
    rng = np.random.default_rng(9)
    dow = np.asarray(_days(728).day_of_week)
    values = rng.poisson(4 * WEEK[dow], (60, 728)).astype(float)
    values[0] = rng.poisson(4 * WEEK[::-1][dow])  # busy at the weekend, quiet on Monday
    attrs = pd.DataFrame({"category": ["x"] * 60})
    table = estimate_profiles(_panel(values, attributes=attrs)).tables[0]
    assert table.source[1].startswith("own shrunk toward")
    assert table.source[0] == "own shrunk toward flat"
    assert table.factors[0, 6] > table.factors[0, 0]


def test_future_factors_line_up_with_the_weekday_of_future_periods():
    panel = _panel(_steady_week(), start="2024-01-03")  # starts on a Wednesday
    prof = estimate_profiles(panel, volume_demands_per_slot=1)
    fut = prof.future_factors(10)
    weekdays = np.asarray(panel.future_periods(10).day_of_week)
    assert np.allclose(fut[0], prof.tables[0].factors[0, weekdays])
    hist = prof.history_factors()
    assert np.allclose(hist[0], prof.tables[0].factors[0, np.asarray(panel.periods.day_of_week)])
    assert np.allclose(panel.values[0] / hist[0], panel.values[0].mean())  # deseasonalised: flat


def test_subset_frame_and_repr():
    rng = np.random.default_rng(4)
    panel, _ = _simulate(rng, 40, 364, lambda c: WEEK, categories=["w"])
    prof = estimate_profiles(panel)
    sub = prof.subset(["i3", "i1"])
    assert list(sub.items) == ["i3", "i1"]
    assert np.allclose(sub.future_factors(7), prof.future_factors(7, rows=[3, 1]))
    frame = prof.to_frame()
    assert frame.shape[0] == 40 and "weekday_source" in frame and "weekday_Sun" in frame
    assert repr(prof).startswith("CalendarProfiles(40 items; weekday:")


def test_no_profile_for_integer_periods_or_calendar_none():
    values = np.tile([5.0, 0, 0, 5, 5, 5, 5], 30)[None]
    flat = DemandPanel(values, items=pd.Index(["a"]), periods=pd.RangeIndex(values.shape[1]))
    prof = estimate_profiles(flat)
    assert prof.tables == () and np.all(prof.future_factors(5) == 1.0)
    none = estimate_profiles(_panel(values), calendar="none")
    assert none.tables == () and np.all(none.history_factors() == 1.0)


@pytest.mark.parametrize("options, word", [
    ({"calendar": "weekly"}, "--calendar"),
    ({"fdr": 0.0}, "--calendar-fdr"),
    ({"fdr": 1.5}, "--calendar-fdr"),
    ({"fdr": True}, "--calendar-fdr"),
    ({"group_demands_per_slot": -1}, "group_demands_per_slot"),
])
def test_bad_options_raise_input_error(options, word):
    with pytest.raises(InputError, match=word):
        estimate_profiles(_panel(_steady_week(4)), **options)


def test_bad_horizon_and_unknown_item_raise_input_error():
    prof = estimate_profiles(_panel(_steady_week(4)))
    with pytest.raises(InputError, match="horizon"):
        prof.future_factors(-1)
    with pytest.raises(InputError, match="unknown item"):
        prof.subset(["nope"])

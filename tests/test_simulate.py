"""Order-up-to simulation against hand-solved cases and the textbook (R, S) formulas."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from sparsedemand.errors import InputError
from sparsedemand.evaluate.simulate import review_periods, simulate_order_up_to


def test_exact_cover_gives_full_service():
    # demand 1 a period, R = 1, L = 0, S = 1: every period is topped up to exactly one unit (by hand)
    res = simulate_order_up_to(np.ones((1, 10)), 1.0)
    assert res.fill_rate[0] == 1.0 and res.cycle_service[0] == 1.0
    assert res.mean_on_hand[0] == 0.0 and res.stockout_periods[0] == 0
    # S = d (L + R) with backorders never runs short (common practice)
    res = simulate_order_up_to(np.full((1, 12), 2.0), 2.0 * (3 + 2), review=2, lead_time=3, unmet="backorder")
    assert res.fill_rate[0] == 1.0 and res.stockout_periods[0] == 0


# Constant demand of 2, R = 2, L = 1, S = 5, starting stock 5, 8 periods, solved by hand.
# Orders at t = 0, 2, 4, 6 arrive at t = 1, 3, 5, 7; cycles [0], [1, 2], [3, 4], [5, 6], [7].
# Lost sales:
#   t0 pos 5 order 0, serve 2 -> 3 | t1 -> 1 | t2 pos 1 order 4, serve 1 short 1 -> 0 | t3 +4 -> 2
#   t4 pos 2 order 3, serve 2 -> 0 | t5 +3 -> 1 | t6 pos 1 order 4, serve 1 short 1 -> 0 | t7 +4 -> 2
#   fill 14/16, 2 short cycles of 5, on hand (3+1+0+2+0+1+0+2)/8 = 9/8
# Backorders:
#   t0 -> 3 | t1 -> 1 | t2 order 4, serve 1 short 1 -> -1 | t3 +4 -> 3, -> 1 | t4 order 4, short 1 -> -1
#   t5 +4 -> 1 | t6 order 4, short 1 -> -1 | t7 +4 -> 1; fill 13/16, 3 short cycles, on hand 7/8
CONSTANT = np.full((1, 8), 2.0)


@pytest.mark.parametrize(
    "unmet, fill, csl, on_hand, stockouts",
    [("lost", 14 / 16, 3 / 5, 9 / 8, 2), ("backorder", 13 / 16, 2 / 5, 7 / 8, 3)],
)
def test_constant_demand_solved_by_hand(unmet, fill, csl, on_hand, stockouts):
    res = simulate_order_up_to(CONSTANT, 5.0, review=2, lead_time=1, unmet=unmet)
    assert res.fill_rate[0] == pytest.approx(fill)
    assert res.cycle_service[0] == pytest.approx(csl)
    assert res.mean_on_hand[0] == pytest.approx(on_hand)
    assert res.stockout_periods[0] == stockouts
    assert res.cycles[0] == 5
    assert res.orders[0] == 3
    assert res.unmet[0] == pytest.approx(16 - 16 * fill)


def test_levels_per_review_are_used_in_turn():
    # R = 1, L = 0, demand 3 3 3, S = 3, 2, 4: serves 3, 2, 3 -> fill 8/9 (by hand)
    res = simulate_order_up_to([[3.0, 3.0, 3.0]], [[3.0, 2.0, 4.0]])
    assert res.fill_rate[0] == pytest.approx(8 / 9)
    # R = 2: one level per period given, the review periods' (t = 0, 2) are used: S = 6 then 2
    # t0 pos 6, serve 3 -> 3 | t1 -> 0 | t2 pos 0 order 2, serve 2 short 1 -> fill 8/9
    res = simulate_order_up_to([[3.0, 3.0, 3.0]], [[6.0, 99.0, 2.0]], review=2)
    assert res.fill_rate[0] == pytest.approx(8 / 9)


def test_unavailable_periods_are_skipped_in_scoring():
    # The lost-sales case above with t = 2 flagged out of stock: the stock still moves by the recorded 2,
    # so the flow is unchanged; scored demand 14 with 1 unit short (t = 6) -> fill 13/14; cycle [1, 2]
    # keeps t = 1 without shortage -> 1 short cycle of 5; on hand without t = 2: 9/7.
    ok = np.ones((1, 8), dtype=bool)
    ok[0, 2] = False
    res = simulate_order_up_to(CONSTANT, 5.0, review=2, lead_time=1, available=ok)
    assert res.fill_rate[0] == pytest.approx(13 / 14)
    assert res.cycle_service[0] == pytest.approx(4 / 5)
    assert res.mean_on_hand[0] == pytest.approx(9 / 7)
    assert res.skipped_periods[0] == 1 and res.scored_periods[0] == 7
    # An unknown (NaN) demand moves the stock by 0 instead:
    #   t2 pos 1 order 4, no demand -> 1 | t3 +4 -> 5, -> 3 | t4 pos 3 order 2, -> 1 | t5 +2 -> 3, -> 1
    #   t6 pos 1 order 4, serve 1 short 1 -> 0 | t7 +4 -> 2; on hand (3+1+3+1+1+0+2)/7 = 11/7
    nan = CONSTANT.copy()
    nan[0, 2] = np.nan
    res = simulate_order_up_to(nan, 5.0, review=2, lead_time=1)
    assert res.fill_rate[0] == pytest.approx(13 / 14)
    assert res.mean_on_hand[0] == pytest.approx(11 / 7)


def test_all_periods_skipped_gives_nan_scores():
    res = simulate_order_up_to([[1.0, 2.0]], 1.0, available=[[False, False]])
    assert np.isnan(res.fill_rate[0]) and np.isnan(res.cycle_service[0]) and np.isnan(res.mean_on_hand[0])
    assert res.cycles[0] == 0


def _expected_excess(lam: float, s: float) -> float:
    """E[(D - s)^+] for D ~ Poisson(lam)."""
    k = np.arange(0, 400)
    return float(np.sum(np.maximum(k - s, 0.0) * stats.poisson.pmf(k, lam)))


@pytest.mark.parametrize("review, lead, level, lam", [(3, 0, 4, 1.0), (1, 2, 4, 1.0), (2, 3, 6, 0.8)])
def test_backorder_fill_rate_matches_the_periodic_review_formula(review, lead, level, lam):
    # (R, S) with backorders: units short per cycle = E(D_{L+R} - S)^+ - E(D_L - S)^+, so
    # fill rate = 1 - that / E(D_R) (Hadley & Whitin 1963, "Analysis of Inventory Systems";
    # Silver, Pyke & Peterson 1998, ch. 7; from memory). Poisson demand, 400 x 1000 periods.
    rng = np.random.default_rng(42)
    demand = rng.poisson(lam, size=(400, 1000)).astype(float)
    res = simulate_order_up_to(demand, float(level), review=review, lead_time=lead, unmet="backorder")
    expected = 1 - (_expected_excess(lam * (lead + review), level) - _expected_excess(lam * lead, level)) / (
        lam * review
    )
    assert 1 - res.unmet.sum() / res.demand.sum() == pytest.approx(expected, abs=0.005)
    if lead == 0:
        # with L = 0 a cycle starts at S, so it is short exactly when D_R > S: CSL = P(D_R <= S)
        cycles = res.cycles.sum()
        assert (res.cycle_service * res.cycles).sum() / cycles == pytest.approx(
            stats.poisson.cdf(level, lam * review), abs=0.01
        )


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.integers(0, 5), min_size=1, max_size=30),
    st.integers(0, 12),
    st.integers(1, 4),
    st.integers(0, 3),
    st.sampled_from(["lost", "backorder"]),
)
def test_stock_accounting_properties(demand, level, review, lead, unmet):
    d = np.array([demand], dtype=float)
    res = simulate_order_up_to(d, float(level), review=review, lead_time=lead, unmet=unmet)
    assert 0 <= res.unmet[0] <= res.demand[0]
    if res.demand[0] > 0:
        assert 0 <= res.fill_rate[0] <= 1
    assert res.stockout_periods[0] <= res.scored_periods[0]
    # stock on hand never exceeds the order-up-to level when the run starts there (no order overshoots)
    assert res.mean_on_hand[0] <= level + 1e-12
    # more stock can only help: S + 1 fills at least as well (common practice)
    more = simulate_order_up_to(d, float(level + 1), review=review, lead_time=lead, unmet=unmet)
    assert more.unmet[0] <= res.unmet[0] + 1e-12


def test_items_are_independent():
    rng = np.random.default_rng(3)
    d = rng.poisson(0.7, size=(4, 25)).astype(float)
    s = rng.integers(0, 6, size=(4, 9)).astype(float)
    both = simulate_order_up_to(d, s, review=3, lead_time=2).to_frame()
    for i in range(4):
        one = simulate_order_up_to(d[i], s[i : i + 1], review=3, lead_time=2).to_frame()
        np.testing.assert_allclose(both.iloc[i].to_numpy(float), one.iloc[0].to_numpy(float))


def test_review_periods():
    assert review_periods(7, review=3).tolist() == [0, 3, 6]


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"unmet": "queue"}, "unmet"),
        ({"review": 0}, "review"),
        ({"lead_time": -1}, "lead_time"),
        ({"lead_time": 1.5}, "lead_time"),
        ({"order_up_to": [[1.0, 2.0]]}, "order_up_to: shape"),
        ({"order_up_to": [-1.0]}, "order_up_to: missing or negative"),
        ({"initial_stock": [np.nan]}, "initial_stock"),
        ({"available": [[True]]}, "available"),
        ({"demand": [[1.0, -1.0, 0.0]]}, "demand: negative"),
    ],
)
def test_bad_input_gets_a_clear_error(kwargs, message):
    args = {"demand": [[1.0, 2.0, 0.0]], "order_up_to": [2.0]}
    args.update(kwargs)
    with pytest.raises(InputError, match=message):
        simulate_order_up_to(args.pop("demand"), args.pop("order_up_to"), **args)

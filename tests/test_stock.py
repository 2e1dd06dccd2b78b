"""Stock targets checked against handbook values, reference libraries and inventory simulation."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

from sparsedemand.methods.forecasts import ItemForecasts, gather_forecasts
from sparsedemand.stock import (
    STOCK_CAUTION,
    normal_loss,
    stock_targets,
    stock_totals,
    totals_text,
)


def _fit(name, distribution, mean, **params):
    mean = np.asarray(mean, dtype=np.float64)
    return SimpleNamespace(name=name, mean=mean[:, None] if mean.ndim == 1 else mean,
                           distribution=distribution,
                           dist_params={k: np.asarray(v, dtype=np.float64) for k, v in params.items()})


def _compound_fit(p, size_mean, size_var):
    p, size_mean = np.asarray(p, float), np.asarray(size_mean, float)
    return _fit("croston", "compound", p * size_mean, p=p, size_mean=size_mean, size_var=size_var)


# ----------------------------------------------------------------------------- normal loss function
def test_normal_loss_matches_handbook_values():
    # Silver, Pyke & Thomas (2017), Inventory and Production Management in Supply Chains, 4th ed.,
    # table of the unit normal loss function G(z) (from memory): G(0) = 0.3989, G(1) = 0.0833,
    # G(2) = 0.0085
    np.testing.assert_allclose(normal_loss([0.0, 1.0, 2.0]), [0.3989, 0.0833, 0.0085], atol=5e-5)


def test_normal_loss_against_numerical_integration():
    # G(z) = E[(Z - z)^+] by numerical integration over the standard normal density (scipy)
    for z in [-1.5, -0.3, 0.7, 2.5]:
        ref, _ = integrate.quad(lambda x: (x - z) * stats.norm.pdf(x), z, np.inf)
        assert normal_loss(z) == pytest.approx(ref, abs=1e-9)
    # and the symmetry G(-z) = G(z) + z (common practice)
    assert normal_loss(-1.2) == pytest.approx(normal_loss(1.2) + 1.2)


# ----------------------------------------------------------------------------- textbook targets
def test_normal_reorder_point_is_mean_plus_k_sigma_rounded_up():
    # Silver, Pyke & Thomas (2017), ch. 6 (chapter from memory): s = x_L + k sigma_L with
    # k = Phi^-1(target); rounded up
    # to a whole unit (common practice); order-up-to on L + R likewise
    fit = _fit("ses", "normal", [[20.0, 20.0, 20.0]], sigma=[4.0])
    table = stock_targets(fit, lead_time=3, review_period=2, service_level=0.95)
    k = stats.norm.ppf(0.95)
    assert table.loc[0, "reorder_point"] == np.ceil(60 + k * 4 * np.sqrt(3))
    assert table.loc[0, "order_up_to"] == np.ceil(100 + k * 4 * np.sqrt(5))
    assert table.loc[0, "distribution"] == "normal approximation"
    assert table.loc[0, "safety_stock"] == pytest.approx(table.loc[0, "order_up_to"] - 100)


def test_normal_fill_rate_uses_the_loss_function():
    # Silver, Pyke & Thomas (2017), ch. 7 (chapter from memory): periodic review fill rate
    # 1 - sigma_{L+R} G(k) / (D R), with the exact backorder term sigma_L G(k_L) subtracted
    # (Hadley & Whitin 1963, from memory)
    mu, sigma, L, R = 30.0, 9.0, 2, 1
    fit = _fit("ses", "normal", [mu], sigma=[sigma])
    table = stock_targets(fit, lead_time=L, review_period=R, fill_rate=0.97)
    S = table.loc[0, "order_up_to"]

    def fill(level):
        short = (sigma * np.sqrt(L + R) * normal_loss((level - mu * (L + R)) / (sigma * np.sqrt(L + R)))
                 - sigma * np.sqrt(L) * normal_loss((level - mu * L) / (sigma * np.sqrt(L))))
        return 1 - short / (mu * R)

    assert fill(S) >= 0.97 > fill(S - 1)
    assert table.loc[0, "expected_fill_rate"] == pytest.approx(fill(S))


def test_poisson_targets_are_scipy_quantiles():
    # scipy.stats.poisson (reference library): with Poisson demand the reorder point for cycle
    # service a is the a-quantile of Poisson(L lam), the order-up-to level of Poisson((L+R) lam)
    lam = np.array([0.2, 1.0, 7.5])
    L = np.array([3, 5, 2])
    fit = _fit("zip", "zip", lam, pi=[0, 0, 0], lam=lam)
    table = stock_targets(fit, lead_time=L, review_period=2, service_level=0.9)
    np.testing.assert_array_equal(table["reorder_point"], stats.poisson.ppf(0.9, L * lam))
    np.testing.assert_array_equal(table["order_up_to"], stats.poisson.ppf(0.9, (L + 2) * lam))
    np.testing.assert_allclose(table["cycle_service_level"],
                               stats.poisson.cdf(table["order_up_to"], (L + 2) * lam))
    assert (table["distribution"] == "zero-inflated Poisson").all()


def test_negative_binomial_targets_are_scipy_quantiles():
    # scipy.stats.nbinom: sums of independent NB(r, q) are NB(n r, q)
    mu, r = 1.2, 0.7
    fit = _fit("zinb", "zinb", [mu], pi=[0.0], mu=[mu], r=[r])
    table = stock_targets(fit, lead_time=4, service_level=0.99)
    assert table.loc[0, "reorder_point"] == stats.nbinom.ppf(0.99, 4 * r, r / (r + mu))
    assert table.loc[0, "order_up_to"] == stats.nbinom.ppf(0.99, 5 * r, r / (r + mu))


def test_normal_approximation_is_close_to_poisson_for_large_volumes():
    # central limit theorem (common practice): at high volume Poisson and normal targets agree
    lam = 400.0
    poisson = stock_targets(_fit("zip", "zip", [lam], pi=[0.0], lam=[lam]), lead_time=3, service_level=0.95)
    normal = stock_targets(_fit("ses", "normal", [lam], sigma=[np.sqrt(lam)]), lead_time=3, service_level=0.95)
    assert abs(poisson.loc[0, "order_up_to"] - normal.loc[0, "order_up_to"]) <= 3


# ----------------------------------------------------------------------------- simulation
def test_achieved_cycle_service_on_simulated_bernoulli_poisson_items():
    # Items with Bernoulli(p) occurrence and 1 + Poisson(lam) sizes: the compound parameters are
    # estimated from a simulated history, then 20,000 lead times are simulated from the true process.
    # Achieved cycle service P(D_L <= s) must be at least the target and within 0.03 of the
    # predicted level (sampling error ~0.002 plus the error of estimating p and the sizes from
    # 2,000 periods).
    rng = np.random.default_rng(2024)
    n_items, history, draws, target = 24, 2000, 20_000, 0.9
    p = rng.uniform(0.05, 0.6, n_items)
    lam = rng.uniform(0.0, 4.0, n_items)
    L = rng.integers(1, 9, n_items)
    values = np.where(rng.random((n_items, history)) < p[:, None],
                      1 + rng.poisson(lam[:, None], (n_items, history)), 0).astype(float)
    sizes = [row[row > 0] for row in values]
    p_hat = np.array([len(s) for s in sizes]) / history
    fit = _compound_fit(p_hat, [s.mean() for s in sizes], [s.var() for s in sizes])
    table = stock_targets(fit, lead_time=L, service_level=target)
    s = table["reorder_point"].to_numpy()
    achieved = np.empty(n_items)
    for i in range(n_items):
        occurs = rng.random((draws, L[i])) < p[i]
        demand = (occurs * (1 + rng.poisson(lam[i], (draws, L[i])))).sum(axis=1)
        achieved[i] = (demand <= s[i]).mean()
    assert (achieved >= target - 0.03).all(), achieved.min()
    np.testing.assert_allclose(achieved, table["reorder_point_service_level"], atol=0.03)


def _simulate_order_up_to(rng, p, lam, S, L, R, periods):
    """Periodic review, order-up-to S, lead time L, backorders; Bernoulli(p) x (1 + Poisson(lam)) demand.

    Each review (every R periods, at the start of the period) orders S minus the inventory position;
    the order arrives L periods later before that period's demand (at once when L = 0).
    Returns (fill rate, share of cycles without a stock-out, mean end-of-period stock on hand).
    """
    n = len(p)
    demand = np.where(rng.random((periods, n)) < p, 1 + rng.poisson(lam, (periods, n)), 0).astype(float)
    net = S.astype(float).copy()
    on_order = np.zeros(n)
    arrivals = np.zeros((periods + L.max() + 1, n))
    met = np.zeros(n)
    ok_cycles = np.zeros(n)
    n_cycles = np.zeros(n)
    on_hand = np.zeros(n)
    warm = 200
    cols = np.arange(n)
    for t in range(periods):
        if t % R == 0:
            q = np.maximum(S - (net + on_order), 0.0)
            on_order += q
            arrivals[t + L, cols] += q
        net += arrivals[t]
        on_order -= arrivals[t]
        if t >= warm:
            met += np.minimum(demand[t], np.maximum(net, 0.0))
        net -= demand[t]
        if t >= warm:
            on_hand += np.maximum(net, 0.0)
            # the end of a cycle: the last period before the next order's arrival
            end = (t - L + 1) % R == 0
            ok_cycles += end & (net >= 0)
            n_cycles += end
    counted = periods - warm
    return met / demand[warm:].sum(axis=0), ok_cycles / np.maximum(n_cycles, 1), on_hand / counted


def test_order_up_to_policy_meets_its_expected_fill_rate_and_service_in_simulation():
    # Inventory simulation of the periodic-review order-up-to policy with backorders (common
    # practice): the simulated fill rate, cycle service and average stock on hand must match
    # the expected values within the simulation's error
    rng = np.random.default_rng(77)
    p = np.array([0.1, 0.3, 0.6, 0.25, 0.45])
    lam = np.array([0.0, 2.0, 0.5, 5.0, 1.0])
    L = np.array([2, 4, 1, 3, 0])
    R = 3
    fit = _compound_fit(p, 1 + lam, lam)
    for target in ({"fill_rate": 0.95}, {"service_level": 0.8}):
        table = stock_targets(fit, lead_time=L, review_period=R, **target)
        S = table["order_up_to"].to_numpy()
        fill, service, on_hand = _simulate_order_up_to(rng, p, lam, S, L, R, periods=24_000)
        np.testing.assert_allclose(fill, table["expected_fill_rate"], atol=0.015)
        np.testing.assert_allclose(service, table["cycle_service_level"], atol=0.02)
        np.testing.assert_allclose(on_hand, table["expected_on_hand"], rtol=0.03)
        if "fill_rate" in target:
            assert (fill >= 0.95 - 0.02).all()


def test_fill_rate_target_gives_the_smallest_level_that_meets_it():
    # unit sizes: D_L ~ Binomial(L, p) and D_{L+R} ~ Binomial(L+R, p) (scipy.stats.binom); the fill
    # rate 1 - (E[(D_{L+R} - S)^+] - E[(D_L - S)^+]) / E[D_R] (Silver, Pyke & Thomas 2017,
    # ch. 7 from memory; exact backorder form) must meet the target at S and miss it at S - 1
    p, L, R, target = np.array([0.2, 0.5, 0.05]), np.array([3, 6, 10]), 2, 0.9
    table = stock_targets(_compound_fit(p, [1.0] * 3, [0.0] * 3), lead_time=L, review_period=R,
                          fill_rate=target)
    k = np.arange(60)

    def fill(i, level):
        short_c = (np.maximum(k - level, 0) * stats.binom.pmf(k, L[i] + R, p[i])).sum()
        short_l = (np.maximum(k - level, 0) * stats.binom.pmf(k, L[i], p[i])).sum()
        return 1 - (short_c - short_l) / (R * p[i])

    for i, S in enumerate(table["order_up_to"]):
        assert fill(i, S) >= target > fill(i, S - 1)
        assert table.loc[i, "expected_fill_rate"] == pytest.approx(fill(i, S), abs=1e-9)


def test_reorder_point_fill_rate_with_a_lot_size():
    # continuous review (s, Q): fill rate 1 - (E[(D_L - s)^+] - E[(D_L - s - Q)^+]) / Q (Silver,
    # Pyke & Thomas 2017, ch. 7 from memory; exact backorder form); Poisson lead-time demand from scipy
    lam, L, Q = 2.0, 3, 4.0
    table = stock_targets(_fit("zip", "zip", [lam], pi=[0.0], lam=[lam]), lead_time=L, fill_rate=0.95,
                          lot_size=Q)
    k = np.arange(100)
    pmf = stats.poisson.pmf(k, lam * L)

    def fill(s):
        return 1 - ((np.maximum(k - s, 0) - np.maximum(k - s - Q, 0)) * pmf).sum() / Q

    s = table.loc[0, "reorder_point"]
    assert fill(s) >= 0.95 > fill(s - 1)
    assert table.loc[0, "reorder_point_fill_rate"] == pytest.approx(fill(s), abs=1e-9)
    assert table.loc[0, "lot_size"] == Q


# ----------------------------------------------------------------------------- table and totals
def test_order_quantity_values_and_totals():
    fit = _compound_fit([0.1, 0.4], [2.0, 3.0], [1.0, 2.0])
    table = stock_targets(fit, lead_time=2, service_level=0.95, on_hand=[1, 50], on_order=[2, 0],
                          unit_price=[10.0, np.nan], items=["bolt", "gear"])
    assert table["item"].tolist() == ["bolt", "gear"]
    expected_order = np.maximum(0, table["order_up_to"] - [1, 50] - [2, 0])
    np.testing.assert_allclose(table["order_quantity"], expected_order)
    assert table.loc[1, "order_quantity"] == 0
    assert table.loc[0, "order_up_to_value"] == 10 * table.loc[0, "order_up_to"]
    assert np.isnan(table.loc[1, "order_up_to_value"])
    for column in ["item", "method", "mean_lead_time_demand", "reorder_point", "order_up_to", "safety_stock",
                   "expected_fill_rate", "distribution", "expected_on_hand", "cycle_service_level"]:
        assert column in table.columns
    totals = stock_totals(table)
    assert totals.at["units", "order_up_to"] == table["order_up_to"].sum()
    assert totals.at["value", "order_up_to"] == 10 * table.loc[0, "order_up_to"]
    text = totals_text(table)
    assert "order-up-to levels" in text and "1 of 2 items" in text and text.endswith(STOCK_CAUTION)
    assert table.attrs["caution"] == STOCK_CAUTION


def test_no_demand_gives_zero_targets_and_undefined_fill_rate():
    fit = _fit("zeros", "point", [0.0, 0.0])
    table = stock_targets(fit, lead_time=5, service_level=0.99)
    assert table["order_up_to"].tolist() == [0, 0] and table["reorder_point"].tolist() == [0, 0]
    assert table["expected_fill_rate"].isna().all()
    assert (table["cycle_service_level"] == 1.0).all()


def test_groups_of_methods_give_the_same_targets_as_separate_calls():
    a = _compound_fit([0.2, 0.3], [2.0, 4.0], [1.0, 9.0])
    b = _fit("zip", "zip", [0.8], pi=[0.6], lam=[2.0])
    c = _fit("ses", "normal", [[5.0, 6.0]], sigma=[1.5])
    merged = gather_forecasts([([0, 2], a), ([3], b), ([1], c)], 4)
    assert isinstance(merged, ItemForecasts)
    items = ["w", "x", "y", "z"]
    together = stock_targets(merged, lead_time=[2, 3, 4, 5], review_period=2, fill_rate=0.95, items=items)
    assert together["method"].tolist() == ["croston", "ses", "croston", "zip"]
    alone_a = stock_targets(a, lead_time=[2, 4], review_period=2, fill_rate=0.95, items=["w", "y"])
    alone_c = stock_targets(c, lead_time=3, review_period=2, fill_rate=0.95, items=["x"])
    cols = ["reorder_point", "order_up_to", "expected_fill_rate", "expected_on_hand"]
    pd.testing.assert_frame_equal(together.iloc[[0, 2]][cols].reset_index(drop=True), alone_a[cols])
    pd.testing.assert_frame_equal(together.iloc[[1]][cols].reset_index(drop=True), alone_c[cols])


def test_bootstrap_items_use_the_history_and_do_not_depend_on_order():
    rng = np.random.default_rng(9)
    values = np.where(rng.random((3, 300)) < 0.25, rng.integers(1, 6, (3, 300)), 0).astype(float)
    fit = _fit("mean_recent", "empirical", values.mean(axis=1))
    items = ["p", "q", "r"]
    first = stock_targets(fit, lead_time=3, service_level=0.9, history=values, items=items, seed=4)
    flipped = stock_targets(_fit("mean_recent", "empirical", values[::-1].mean(axis=1)), lead_time=3,
                            service_level=0.9, history=values[::-1], items=items[::-1], seed=4)
    cols = ["reorder_point", "order_up_to", "expected_fill_rate"]
    pd.testing.assert_frame_equal(first[cols], flipped[cols].iloc[::-1].reset_index(drop=True))
    assert (first["distribution"] == "bootstrap (Willemain et al. 2004)").all()


# ----------------------------------------------------------------------------- bad options
def test_options_are_validated_with_one_line_messages(input_error):
    fit = _compound_fit([0.2], [2.0], [1.0])
    input_error(lambda: stock_targets(fit, lead_time=2, service_level=1.2),
                "--service-level must be between 0 and 1 exclusive, got 1.2")
    input_error(lambda: stock_targets(fit, lead_time=2, fill_rate=0.0), "--fill-rate", "exclusive")
    input_error(lambda: stock_targets(fit, lead_time=2, service_level=0.9, fill_rate=0.9), "exactly one")
    input_error(lambda: stock_targets(fit, lead_time=2), "exactly one")
    input_error(lambda: stock_targets(fit, lead_time=-1, service_level=0.9), "--lead-time", ">= 0")
    input_error(lambda: stock_targets(fit, lead_time=2.5, service_level=0.9, items=["A"]),
                "--lead-time", "whole number", "'A'")
    input_error(lambda: stock_targets(fit, lead_time=[1, 2], service_level=0.9), "--lead-time has 2 values")
    input_error(lambda: stock_targets(fit, lead_time=1, review_period=0, service_level=0.9), "--review-period")
    input_error(lambda: stock_targets(fit, lead_time=1, service_level=0.9, on_hand=-3), "--on-hand")
    input_error(lambda: stock_targets(fit, lead_time=1, service_level=0.9, lot_size=0), "--lot-size", "> 0")
    input_error(lambda: stock_targets(fit, lead_time=1, service_level="high"), "--service-level")
    input_error(lambda: stock_targets(_fit("x", "empirical", [1.0]), lead_time=1, service_level=0.9),
                "bootstrap", "history")


def test_bootstrap_history_from_a_panel_skips_stock_out_zeros():
    # zeros recorded while out of stock are not demand: with them masked the item sells 4 units
    # every period, so any lead time of 2 periods needs exactly 8
    from sparsedemand.panel import DemandPanel

    values = np.array([[4, 0, 4, 0, 4, 4, 0, 4], [1, 0, 0, 0, 1, 0, 0, 0]], dtype=float)
    available = np.array([[1, 0, 1, 0, 1, 1, 0, 1], [1] * 8], dtype=bool)
    panel = DemandPanel(values, items=pd.Index(["valve", "seal"]), periods=pd.RangeIndex(8),
                        available=available)
    fit = _fit("mean_recent", "empirical", [4.0, 0.25])
    table = stock_targets(fit, lead_time=2, service_level=0.99, history=panel, jitter=False)
    assert table["item"].tolist() == ["valve", "seal"]
    assert table.loc[0, "reorder_point"] == 8 and table.loc[0, "order_up_to"] == 12
    assert table.loc[0, "lot_size"] == pytest.approx(4.0)  # the in-stock demand rate per period


def test_history_keeps_size_spread_in_proportion_to_a_smoothed_size():
    # sizes 1, 1, 4, 12, 39 (mean 11.4, variance 206.64) but a smoothed size of 1.5: with the
    # history the variance is carried to 1.5 at the history's CV, without it the raw variance
    # implies orders of hundreds of units
    values = np.zeros((1, 60))
    values[0, [3, 15, 30, 45, 58]] = [39, 12, 4, 1, 1]
    fit = _fit("sba", "compound", [0.15], p=[0.1], size_mean=[1.5], size_var=[206.64])
    with_history = stock_targets(fit, lead_time=5, review_period=7, fill_rate=0.97, history=values)
    without = stock_targets(fit, lead_time=5, review_period=7, fill_rate=0.97)
    assert with_history.loc[0, "order_up_to"] < 40 < without.loc[0, "order_up_to"]

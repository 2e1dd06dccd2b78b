"""Forecast metrics against published definitions, hand-worked numbers and reference libraries."""

from __future__ import annotations

import math

import numpy as np
import properscoring
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from sparsedemand import metrics as M
from sparsedemand.errors import InputError

# Shared hand-worked case.
# insample 0 0 3 0 1 2: first demand at offset 2, naive differences |0-3|, |1-0|, |2-1| = 3, 1, 1
# MASE scale 5/3, RMSSE scale (9 + 1 + 1) / 3 = 11/3.
INSAMPLE = [0.0, 0.0, 3.0, 0.0, 1.0, 2.0]
ACTUAL = [2.0, 0.0, 1.0]
FORECAST = [1.0, 1.0, 1.0]  # errors forecast - actual: -1, 1, 0


# --------------------------------------------------------------------------- scale
def test_scale_trimmed_to_first_demand_by_hand():
    s = M.naive_scale(INSAMPLE)
    assert s.start.tolist() == [2]
    assert s.differences.tolist() == [3]
    assert s.mean_abs[0] == pytest.approx(5 / 3)
    assert s.mean_sq[0] == pytest.approx(11 / 3)
    assert s.mean_demand[0] == pytest.approx(6 / 4)  # (3 + 0 + 1 + 2) / 4


def test_scale_without_leading_zeros_is_the_hyndman_koehler_scale():
    # Hyndman & Koehler 2006, IJF 22:679-688, eq. for q_t: scale = 1/(n-1) * sum_{t=2..n} |Y_t - Y_{t-1}|
    rng = np.random.default_rng(1)
    y = rng.poisson(3.0, size=40).astype(float)
    y[0] = 2.0
    expected = sum(abs(y[t] - y[t - 1]) for t in range(1, len(y))) / (len(y) - 1)
    assert M.naive_scale(y).mean_abs[0] == pytest.approx(expected)


def test_scale_uses_only_differences_with_both_periods_available():
    # insample 0 2 X 1 3 with X unavailable: first demand at 1; differences at t=2 (X) and
    # t=3 (after X) dropped; only |3 - 1| = 2 is left.
    s = M.naive_scale([0, 2, 7, 1, 3], insample_available=[True, True, False, True, True])
    assert s.differences.tolist() == [1]
    assert s.mean_abs[0] == pytest.approx(2.0)
    assert s.excluded.tolist() == [1]
    # NaN in the history means the same as a False flag.
    nan = M.naive_scale([0, 2, np.nan, 1, 3])
    assert nan.mean_abs[0] == pytest.approx(2.0) and nan.excluded.tolist() == [1]


def test_undefined_scales_give_nan():
    insample = [[0, 0, 0, 0], [0, 2, 2, 2], [0, 0, 0, 5]]  # never sold, flat, one period after start
    assert np.isnan(M.mase(insample, [[1, 0]] * 3, [[0, 0]] * 3)).all()
    assert np.isnan(M.rmsse(insample, [[1, 0]] * 3, [[0, 0]] * 3)).all()


# --------------------------------------------------------------------------- point metrics
def test_point_metrics_by_hand():
    assert M.mae(None, ACTUAL, FORECAST) == pytest.approx(2 / 3)  # (1 + 1 + 0) / 3
    assert M.mse(None, ACTUAL, FORECAST) == pytest.approx(2 / 3)  # (1 + 1 + 0) / 3
    # Hyndman & Koehler 2006 MASE: MAE / scale = (2/3) / (5/3)
    assert M.mase(INSAMPLE, ACTUAL, FORECAST) == pytest.approx(0.4)
    # RMSSE (Makridakis, Spiliotis & Assimakopoulos 2022, IJF 38:1346-1364): sqrt(MSE / scale) = sqrt(2/11)
    assert M.rmsse(INSAMPLE, ACTUAL, FORECAST) == pytest.approx(math.sqrt(2 / 11))
    # scaled bias: mean(forecast - actual) = 0 here; with forecast 3,3,3: mean error (1+3+2)/3 = 2, / (5/3)
    assert M.scaled_bias(INSAMPLE, ACTUAL, FORECAST) == pytest.approx(0.0)
    assert M.scaled_bias(INSAMPLE, ACTUAL, [3.0, 3.0, 3.0]) == pytest.approx(1.2)


def test_two_dimensional_input_gives_one_value_per_item_equal_to_each_row():
    rng = np.random.default_rng(7)
    x = rng.poisson(1.0, size=(5, 30)).astype(float)
    y = rng.poisson(1.0, size=(5, 6)).astype(float)
    f = rng.random((5, 6)) * 2
    for fn in (M.mae, M.mse, M.mase, M.rmsse, M.scaled_bias, M.pis, M.shortages):
        both = fn(x, y, f)
        assert both.shape == (5,)
        rows = [fn(x[i], y[i], f[i]) for i in range(5)]
        assert isinstance(rows[0], float)
        np.testing.assert_allclose(both, rows)


def test_item_scale_can_be_reused():
    s = M.naive_scale([INSAMPLE])
    assert M.mase(s, [ACTUAL], [FORECAST])[0] == pytest.approx(0.4)
    with pytest.raises(InputError, match="insample_available"):
        M.mase(s, [ACTUAL], [FORECAST], insample_available=[[True] * 6])


def test_stockout_periods_are_dropped_from_errors():
    # actual 2 0 1 with the middle period out of stock: errors -1 and 0 are left.
    avail = [True, False, True]
    assert M.mae(None, ACTUAL, FORECAST, available=avail) == pytest.approx(0.5)
    assert M.mase(INSAMPLE, ACTUAL, FORECAST, available=avail) == pytest.approx(0.5 / (5 / 3))
    assert M.excluded_periods(ACTUAL, available=avail) == 1
    # a NaN actual is also an excluded period, whatever the forecast there
    assert M.mae(None, [2.0, np.nan, 1.0], [1.0, np.nan, 1.0]) == pytest.approx(0.5)
    assert np.isnan(M.mae(None, ACTUAL, FORECAST, available=[False] * 3))


# Hypothesis strategy: small panels of counts with a random availability mask.
@st.composite
def panels(draw):
    n = draw(st.integers(1, 3))
    t_in = draw(st.integers(2, 12))
    h = draw(st.integers(1, 6))
    counts = st.integers(0, 6).map(float)
    x = np.array(draw(st.lists(counts, min_size=n * t_in, max_size=n * t_in))).reshape(n, t_in)
    y = np.array(draw(st.lists(counts, min_size=n * h, max_size=n * h))).reshape(n, h)
    f = np.array(draw(st.lists(st.floats(0, 6), min_size=n * h, max_size=n * h))).reshape(n, h)
    mask = np.array(draw(st.lists(st.booleans(), min_size=n * h, max_size=n * h))).reshape(n, h)
    return x, y, f, mask


@settings(max_examples=60, deadline=None)
@given(panels())
def test_masked_equals_dropping_the_periods(case):
    x, y, f, mask = case
    for fn in (M.mae, M.mse, M.mase, M.rmsse, M.scaled_bias, M.pis, M.shortages):
        masked = fn(x, y, f, available=mask)
        for i in range(len(x)):
            dropped = fn(x[i], y[i][mask[i]], f[i][mask[i]])
            np.testing.assert_allclose(masked[i], dropped, rtol=1e-12, atol=1e-12, err_msg=fn.__name__)
    levels = [0.1, 0.5, 0.9]
    q = np.stack([f * 0.5, f, f * 2.0], axis=2)
    for fn in (M.pinball, M.scaled_pinball, M.coverage, M.quantile_crps):
        masked = fn(x, y, q, levels=levels, available=mask)
        for i in range(len(x)):
            dropped = fn(x[i], y[i][mask[i]], q[i][mask[i]], levels=levels)
            np.testing.assert_allclose(masked[i], dropped, rtol=1e-12, atol=1e-12, err_msg=fn.__name__)


@settings(max_examples=60, deadline=None)
@given(panels(), st.floats(0.01, 1000.0))
def test_scaled_errors_do_not_depend_on_the_unit(case, c):
    # Hyndman & Koehler 2006: MASE is scale-free; the same holds for RMSSE, scaled bias and SPL.
    x, y, f, _ = case
    for fn in (M.mase, M.rmsse, M.scaled_bias):
        np.testing.assert_allclose(fn(c * x, c * y, c * f), fn(x, y, f), rtol=1e-9, atol=1e-12)
    q = np.stack([f, 2 * f], axis=2)
    np.testing.assert_allclose(
        M.scaled_pinball(c * x, c * y, c * q, levels=[0.3, 0.8]),
        M.scaled_pinball(x, y, q, levels=[0.3, 0.8]),
        rtol=1e-9,
        atol=1e-12,
    )


@settings(max_examples=40, deadline=None)
@given(panels())
def test_mase_of_the_in_sample_naive_errors_is_one(case):
    # Hyndman & Koehler 2006: the scale is the in-sample MAE of the one-step naive forecast, so scoring
    # that forecast on the in-sample periods themselves gives MASE = 1 (where defined).
    x, _, _, _ = case
    for i in range(len(x)):
        s = M.naive_scale(x[i]).start[0]
        seg = x[i][s:]
        if len(seg) < 2 or np.all(seg == seg[0]):
            continue
        assert M.mase(x[i], seg[1:], seg[:-1]) == pytest.approx(1.0)


# --------------------------------------------------------------------------- quantile metrics
def test_pinball_loss_matches_the_check_function():
    # Koenker & Bassett 1978, Econometrica 46:33-50: rho_tau(u) = tau*u if u >= 0 else (tau - 1)*u, u = y - q
    rng = np.random.default_rng(3)
    y = rng.poisson(2.0, 200).astype(float)
    q = rng.random(200) * 5
    tau = rng.random(200)
    u = y - q
    expected = np.where(u >= 0, tau * u, (tau - 1) * u)
    np.testing.assert_allclose(M.pinball_loss(y, q, tau), expected)
    # By hand: y = 3, q = 1, tau = 0.9 -> 0.9 * 2 = 1.8; y = 0, q = 1, tau = 0.9 -> 0.1 * 1 = 0.1
    assert M.pinball_loss(3.0, 1.0, 0.9) == pytest.approx(1.8)
    assert M.pinball_loss(0.0, 1.0, 0.9) == pytest.approx(0.1)


def test_mean_and_scaled_pinball_by_hand():
    q = [[1.0, 2.0], [1.0, 2.0], [1.0, 2.0]]
    # actual 2 0 1; level 0.5 with q = 1: 0.5*1, 0.5*1, 0 -> 1/3; level 0.9 with q = 2: 0, 0.1*2, 0.1*1 -> 0.1
    np.testing.assert_allclose(M.pinball(None, ACTUAL, q, levels=[0.5, 0.9]), [1 / 3, 0.1])
    # scaled by the MASE scale 5/3 (SPL of Makridakis et al. 2022, IJF 38:1365-1385; from memory)
    np.testing.assert_allclose(M.scaled_pinball(INSAMPLE, ACTUAL, q, levels=[0.5, 0.9]), [0.2, 0.06])


def test_coverage_by_hand():
    # actual 2 0 1 against quantiles 1 and 2: y <= 1 in 2 of 3 periods, y <= 2 in all 3
    q = [[1.0, 2.0]] * 3
    np.testing.assert_allclose(M.coverage(None, ACTUAL, q, levels=[0.5, 0.9]), [2 / 3, 1.0])
    # interval [1, 2] holds 2 and 1 but not 0
    assert M.interval_coverage(None, ACTUAL, [1.0] * 3, [2.0] * 3) == pytest.approx(2 / 3)


def test_coverage_of_true_quantiles_is_near_the_level():
    # A quantile of the distribution that generated the data covers about tau of it (definition of a
    # quantile); 20,000 normal draws give a standard error below 0.004.
    rng = np.random.default_rng(11)
    y = rng.normal(10.0, 2.0, size=(1, 20000))
    levels = np.array([0.05, 0.5, 0.8, 0.95])
    q = np.broadcast_to(stats.norm.ppf(levels, 10.0, 2.0), (1, 20000, 4))
    got = M.coverage(None, y, q, levels=levels)[0]
    np.testing.assert_allclose(got, levels, atol=0.015)


def test_quantile_crps_matches_the_normal_closed_form_and_properscoring():
    # CRPS of N(mu, sigma^2) at y (Gneiting & Raftery 2007, JASA 102:359-378; equation from memory),
    # checked against properscoring as well:
    # sigma * (z (2 Phi(z) - 1) + 2 phi(z) - 1/sqrt(pi)), z = (y - mu) / sigma
    mu, sigma = 4.0, 1.5
    y = np.array([1.0, 4.0, 4.7, 9.0])
    z = (y - mu) / sigma
    closed = sigma * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z) - 1 / math.sqrt(math.pi))
    np.testing.assert_allclose(properscoring.crps_gaussian(y, mu=mu, sig=sigma), closed, rtol=1e-9)
    levels = (np.arange(4000) + 0.5) / 4000
    q = np.broadcast_to(stats.norm.ppf(levels, mu, sigma), (4, 1, levels.size))
    got = M.quantile_crps(None, y[:, None], q, levels=levels)
    np.testing.assert_allclose(got, closed, rtol=2e-3)


def test_quantile_crps_matches_the_discrete_crps_of_a_poisson():
    # For integer-valued forecasts CRPS = sum_k (F(k) - 1{y <= k})^2 over the integers, the CDF being a
    # step function (Gneiting & Raftery 2007, JASA 102:359-378, CRPS as the integral of the Brier score).
    lam = 0.8
    y = np.array([0.0, 1.0, 4.0])
    k = np.arange(60)
    exact = np.array([np.sum((stats.poisson.cdf(k, lam) - (yy <= k)) ** 2) for yy in y])
    levels = (np.arange(4000) + 0.5) / 4000
    q = np.broadcast_to(stats.poisson.ppf(levels, lam), (3, 1, levels.size))
    np.testing.assert_allclose(M.quantile_crps(None, y[:, None], q, levels=levels), exact, rtol=2e-3)


# --------------------------------------------------------------------------- stock-flavoured
def test_pis_and_shortages_by_hand():
    # Wallström & Segerstedt 2010, IJPE 128:625-636: PIS = sum_t sum_{j<=t} (F_j - Y_j).
    # actual 0 3 0 0, forecast 1 each period: running stock 1, -1, 0, 1 -> PIS 1, one shortage period.
    assert M.pis(None, [0, 3, 0, 0], [1, 1, 1, 1]) == pytest.approx(1.0)
    assert M.shortages(None, [0, 3, 0, 0], [1, 1, 1, 1]) == 1.0
    # Forecasting zero for demand 2 at the first period: running stock -2, -2, -2 -> PIS -6, 3 shortages
    assert M.pis(None, [2, 0, 0], [0, 0, 0]) == pytest.approx(-6.0)
    assert M.shortages(None, [2, 0, 0], [0, 0, 0]) == 3.0
    # scaled by the mean in-sample demand from the first demand on: (3 + 0 + 1 + 2) / 4 = 1.5
    assert M.pis(INSAMPLE, [0, 3, 0, 0], [1, 1, 1, 1], scaled=True) == pytest.approx(1 / 1.5)


def test_shortages_ignore_rounding_of_fractional_forecasts():
    # ten periods of 0.1 supply exactly cover a demand of 1 at the end: no shortage (common practice)
    assert M.shortages(None, [0.0] * 9 + [1.0], [0.1] * 10) == 0.0


def test_relative_mae_and_its_geometric_mean_by_hand():
    # item MAE 1/3 vs zero-forecast MAE 4/3 -> 0.25 (Davydenko & Fildes 2013, IJF 29:510-522)
    assert M.relative_mae(None, [1, 0, 3], [1, 0, 2], baseline=[0, 0, 0]) == pytest.approx(0.25)
    # AvgRelMAE = (prod r_i^n_i)^(1 / sum n_i): (0.5^2 * 2^1 * 0.25^1)^(1/4) = 0.125^(1/4)
    assert M.avg_rel_mae([0.5, 2.0, 0.25], weights=[2, 1, 1]) == pytest.approx(0.125**0.25)
    # ratios without a finite logarithm are left out
    assert M.avg_rel_mae([0.5, np.nan, 0.0, np.inf, 2.0]) == pytest.approx(1.0)
    assert np.isnan(M.relative_mae(None, [1, 1], [0, 0], baseline=[1, 1]))


# --------------------------------------------------------------------------- aggregation
def test_item_weights_and_weighted_mean_by_hand():
    # last 2 periods: volumes 3 and 2 -> 0.6, 0.4; with prices 1 and 4: values 3 and 8 -> 3/11, 8/11
    hist = [[5, 1, 2], [0, 0, 2]]
    np.testing.assert_allclose(M.item_weights(hist, last=2), [0.6, 0.4])
    np.testing.assert_allclose(M.item_weights(hist, last=2, unit_price=[1, 4]), [3 / 11, 8 / 11])
    # unavailable periods add no volume: item 0 keeps only its 2 -> 2/4, 2/4
    np.testing.assert_allclose(M.item_weights(hist, last=2, available=[[1, 0, 1], [1, 1, 1]]), [0.5, 0.5])
    assert M.weighted_mean([1.0, np.nan, 3.0], [0.5, 0.3, 0.2]) == pytest.approx(1.1 / 0.7)
    with pytest.raises(InputError, match="no sales"):
        M.item_weights([[0, 0], [0, 0]], last=1)


def test_bottom_up_sums_available_members():
    values = [[1, 2], [3, 4], [5, 6]]
    sums, ok, names = M.bottom_up(values, ["a", "b", "a"], available=[[True, False], [False, False], [True, True]])
    assert names.tolist() == ["a", "b"]
    assert sums.tolist() == [[6.0, 6.0], [0.0, 0.0]]  # a: 1+5, 6 (item 0 out at t=1); b: never available
    assert ok.tolist() == [[True, True], [False, False]]


# Two-item hierarchy worked by hand.
# A: insample 0 1 0 2 (start 1; differences -1, 2 -> scale (1 + 4) / 2 = 2.5); actual 1 1, forecast 0 2 -> MSE 1
# B: insample 1 1 0 0 (start 0; differences 0, -1, 0 -> scale 1/3);           actual 0 0, forecast 1 0 -> MSE 1/2
# total: insample 1 2 0 2 (differences 1, -2, 2 -> scale 3); actual 1 1, forecast 1 2 -> MSE 1/2
H_INSAMPLE = np.array([[0, 1, 0, 2], [1, 1, 0, 0]], dtype=float)
H_ACTUAL = np.array([[1, 1], [0, 0]], dtype=float)
H_FORECAST = np.array([[0, 2], [1, 0]], dtype=float)
H_GROUPS = {"item": ["A", "B"], "total": "all"}


def test_hierarchical_rmsse_by_hand():
    # Weighted RMSSE (Makridakis, Spiliotis & Assimakopoulos 2022, IJF 38:1346-1364): per-level weighted
    # mean, then the plain mean over levels.
    res = M.hierarchical_rmsse(H_INSAMPLE, H_ACTUAL, H_FORECAST, H_GROUPS, weights=[0.75, 0.25])
    item_level = 0.75 * math.sqrt(1 / 2.5) + 0.25 * math.sqrt(0.5 / (1 / 3))
    total_level = math.sqrt(0.5 / 3)
    assert res.levels.loc["item", "score"] == pytest.approx(item_level)
    assert res.levels.loc["total", "score"] == pytest.approx(total_level)
    assert res.value == pytest.approx((item_level + total_level) / 2)
    # item level agrees with the per-item RMSSE
    np.testing.assert_allclose(
        res.groups.query("level == 'item'")["rmsse"], M.rmsse(H_INSAMPLE, H_ACTUAL, H_FORECAST)
    )


def test_hierarchical_rmsse_with_stockouts_by_hand():
    # A's in-sample period 2 out of stock: A has no usable difference (NaN, left out of the item level).
    # Total differences: t=1 A(1-0) + B(1-1) = 1; t=2 B only: -1; t=3 B only: 0 -> scale 2/3.
    ins_ok = np.ones_like(H_INSAMPLE, dtype=bool)
    ins_ok[0, 2] = False
    res = M.hierarchical_rmsse(H_INSAMPLE, H_ACTUAL, H_FORECAST, H_GROUPS, insample_available=ins_ok)
    assert res.levels.loc["item", "undefined"] == 1
    assert res.levels.loc["item", "score"] == pytest.approx(math.sqrt(1.5))
    assert res.levels.loc["total", "score"] == pytest.approx(math.sqrt(0.5 / (2 / 3)))
    # B's first evaluation period out of stock: total errors t=0 A only 0 - 1 = -1; t=1 (2 + 0) - (1 + 0) = 1
    ok = np.ones_like(H_ACTUAL, dtype=bool)
    ok[1, 0] = False
    res = M.hierarchical_rmsse(H_INSAMPLE, H_ACTUAL, H_FORECAST, H_GROUPS, available=ok)
    assert res.levels.loc["total", "score"] == pytest.approx(math.sqrt(1.0 / 3))


def test_hierarchical_total_equals_scoring_the_summed_series():
    # Without stock-outs, the total level is plain RMSSE of the aggregated series (Makridakis et al. 2022).
    rng = np.random.default_rng(5)
    x = rng.poisson(0.7, size=(6, 40)).astype(float)
    x[:, :3] = 0.0
    y = rng.poisson(0.7, size=(6, 8)).astype(float)
    f = rng.random((6, 8))
    loc = np.array(["north", "north", "south", "south", "south", "west"])
    res = M.hierarchical_rmsse(x, y, f, {"location": loc, "total": "all"})
    assert res.levels.loc["total", "score"] == pytest.approx(M.rmsse(x.sum(0), y.sum(0), f.sum(0)))
    south = loc == "south"
    got = res.groups.set_index("group").loc["south", "rmsse"]
    assert got == pytest.approx(M.rmsse(x[south].sum(0), y[south].sum(0), f[south].sum(0)))


# --------------------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: M.mae(None, [1, 2], [1, 2, 3]), "forecast: shape"),
        (lambda: M.mae(None, [1, 2], [1, np.nan]), "forecast: missing"),
        (lambda: M.mae(None, [1, -2], [1, 1]), "actual: negative"),
        (lambda: M.mase([0, -1, 2], [1], [1]), "insample: negative"),
        (lambda: M.mase(None, [1], [1]), "insample: this metric needs"),
        (lambda: M.mase([[1, 2]], [[1], [2]], [[1], [2]]), "insample: 1 items"),
        (lambda: M.mae(None, [1, 2], [1, 2], available=[1, 2]), "boolean"),
        (lambda: M.pinball(None, [1], [[1, 2]], levels=[0.5, 1.0]), "levels"),
        (lambda: M.pinball(None, [1], [[1, 2]], levels=[0.5]), "quantiles: shape"),
        (lambda: M.interval_coverage(None, [1], [2], [1]), "lower: above upper"),
        (lambda: M.item_weights([[1, 2]], last=3), "last"),
        (lambda: M.hierarchical_rmsse([[1, 2]], [[1]], [[1]], {"x": [None]}), "missing label"),
        (lambda: M.hierarchical_rmsse([[1, 2]], [[1]], [[1]], {}), "groups"),
    ],
)
def test_bad_input_gets_a_clear_error(call, message):
    with pytest.raises(InputError, match=message):
        call()

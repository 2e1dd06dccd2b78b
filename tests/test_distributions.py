"""Predictive demand distributions checked against reference libraries and closed forms."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from sparsedemand.errors import InputError
from sparsedemand.methods import distributions as dist

LEVELS = [0.05, 0.25, 0.5, 0.8, 0.9, 0.95, 0.99, 0.999]


def _compound(p, size_mean, size_var):
    return {"p": np.asarray(p, float), "size_mean": np.asarray(size_mean, float),
            "size_var": np.asarray(size_var, float)}


# ----------------------------------------------------------------------------- reference libraries
def test_poisson_pmf_and_quantiles_match_scipy():
    # scipy.stats.poisson (reference library); a ZIP with pi = 0 is a plain Poisson, and a sum of
    # n independent Poisson(lam) is Poisson(n lam)
    lam = np.array([0.05, 0.7, 3.0, 40.0])
    n = np.array([1, 4, 3, 6])
    pmf = dist.demand_pmf("zip", {"pi": np.zeros(4), "lam": lam}, lam, periods=n)
    k = np.arange(pmf.shape[1])
    for i in range(4):
        np.testing.assert_allclose(pmf[i], stats.poisson.pmf(k, n[i] * lam[i]), atol=1e-12)
    expected = np.array([[stats.poisson.ppf(q, n[i] * lam[i]) for q in LEVELS] for i in range(4)])
    np.testing.assert_array_equal(dist.pmf_quantiles(pmf, LEVELS), expected)


def test_negative_binomial_pmf_and_quantiles_match_scipy():
    # scipy.stats.nbinom (reference library): NB(size r, prob r/(r+mu)) has mean mu, variance
    # mu + mu^2/r, and a sum of n independent copies is NB(n r, same prob)
    mu = np.array([0.4, 2.0, 10.0])
    r = np.array([0.3, 1.5, 25.0])
    n = np.array([5, 3, 2])
    pmf = dist.demand_pmf("zinb", {"pi": np.zeros(3), "mu": mu, "r": r}, mu, periods=n)
    k = np.arange(pmf.shape[1])
    for i in range(3):
        ref = stats.nbinom(n[i] * r[i], r[i] / (r[i] + mu[i]))
        np.testing.assert_allclose(pmf[i], ref.pmf(k), atol=1e-12)
        np.testing.assert_array_equal(dist.pmf_quantiles(pmf[i : i + 1], LEVELS)[0], ref.ppf(LEVELS))


def test_unit_size_compound_is_binomial():
    # scipy.stats.binom (reference library): Bernoulli occurrences with every size 1 sum to
    # Binomial(n, p)
    p = np.array([0.03, 0.3, 0.9])
    n = np.array([10, 7, 4])
    pmf = dist.demand_pmf("compound", _compound(p, [1, 1, 1], [0, 0, 0]), p, periods=n)
    k = np.arange(pmf.shape[1])
    for i in range(3):
        np.testing.assert_allclose(pmf[i], stats.binom.pmf(k, n[i], p[i]), atol=1e-13)


def test_compound_over_periods_equals_repeated_convolution_of_one_period():
    # one period built by hand from scipy.stats.nbinom (size 1 + NB), then convolved n times with
    # numpy: the n-period total must agree with the closed-form mixture
    p, size_mean, size_var, n = 0.25, 4.0, 9.0, 6
    m = size_mean - 1
    r = m * m / (size_var - m)
    width = 400
    one = np.zeros(width)
    one[0] = 1 - p
    one[1:] = p * stats.nbinom.pmf(np.arange(width - 1), r, r / (r + m))
    total = np.array([1.0])
    for _ in range(n):
        total = np.convolve(total, one)[:width]
    pmf = dist.demand_pmf("compound", _compound([p], [size_mean], [size_var]), [p * size_mean], periods=n)
    k = min(width, pmf.shape[1])
    np.testing.assert_allclose(pmf[0, :k], total[:k], atol=1e-12)


def test_zip_over_periods_equals_repeated_convolution():
    # single-period ZIP from scipy.stats.poisson, convolved with numpy
    pi, lam, n = 0.6, 2.5, 5
    width = 120
    one = (1 - pi) * stats.poisson.pmf(np.arange(width), lam)
    one[0] += pi
    total = np.array([1.0])
    for _ in range(n):
        total = np.convolve(total, one)[:width]
    pmf = dist.demand_pmf("zip", {"pi": [pi], "lam": [lam]}, [(1 - pi) * lam], periods=n)
    np.testing.assert_allclose(pmf[0], total[: pmf.shape[1]], atol=1e-13)


def test_normal_approximation_matches_scipy_quantiles():
    # scipy.stats.norm (reference library); the discretised normal (continuity correction) gives
    # the smallest whole k with Phi((k + 0.5 - mu) / sd) >= level, censored at 0
    mean = np.array([[3.0, 5.0], [50.0, 50.0]])
    sigma = np.array([2.0, 6.0])
    n = np.array([2, 4])
    pmf = dist.demand_pmf("normal", {"sigma": sigma}, mean, periods=n)
    total = np.array([8.0, 200.0])
    sd = sigma * np.sqrt(n)
    for i in range(2):
        ref = np.maximum(np.ceil(stats.norm.ppf(LEVELS, total[i], sd[i]) - 0.5), 0)
        np.testing.assert_array_equal(dist.pmf_quantiles(pmf[i : i + 1], LEVELS)[0], ref)
    # mass below zero is put on zero
    assert pmf[0, 0] == pytest.approx(stats.norm.cdf(0.5, 8.0, 2.0 * np.sqrt(2)), abs=1e-12)


# ----------------------------------------------------------------------------- closed forms
def _one_period_pmf(p, size_pmf):
    """Demand of one period: 0 with probability 1 - p, else a size drawn from ``size_pmf`` (k = 0, 1, ...)."""
    out = p * np.asarray(size_pmf, float)
    out[0] += 1 - p
    return out


def _n_fold(pmf, n):
    out = np.array([1.0])
    for _ in range(n):
        out = np.convolve(out, pmf)
    return out


def test_compound_mean_and_variance_closed_forms():
    # A period's demand is B x S with B ~ Bernoulli(p) independent of the size S: E = p mu,
    # Var = p sigma^2 + p (1 - p) mu^2 (law of total variance; Ross 2014, Introduction to
    # Probability Models, 11th ed., ch. 3, from memory); over n independent periods both are
    # multiplied by n.
    p = np.array([0.1, 0.35, 0.05, 0.6])
    size_mean = np.array([3.0, 1.0, 2.0, 4.0])
    size_var = np.array([10.0, 0.0, 1.0, 3.0])  # overdispersed, unit sizes, 1 + Poisson(1), 1 + Poisson(3)
    n = np.array([4, 12, 26, 3])
    pmf = dist.demand_pmf("compound", _compound(p, size_mean, size_var), p * size_mean, periods=n)
    np.testing.assert_allclose(dist.pmf_mean(pmf), n * p * size_mean, rtol=1e-9)
    np.testing.assert_allclose(dist.pmf_var(pmf), n * (p * size_var + p * (1 - p) * size_mean**2), rtol=1e-8)


def test_compound_pmf_equals_the_convolution_of_known_period_distributions():
    # Known truth built from scipy.stats: sizes 1 + Poisson(lam) (mean 1 + lam, variance lam) and
    # 1 + NB (scipy.stats.nbinom, size r, prob q: mean r (1-q)/q, variance r (1-q)/q^2); total
    # demand over n periods is the n-fold convolution of the one-period PMF.
    k = np.arange(200)
    cases = [
        (0.3, stats.poisson.pmf(k - 1, 1.5), 2.5, 1.5, 4),
        (0.15, stats.nbinom.pmf(k - 1, 0.5, 0.2), 1 + 0.5 * 0.8 / 0.2, 0.5 * 0.8 / 0.04, 3),
    ]
    for p, size_pmf, mu, var, n in cases:
        exact = _n_fold(_one_period_pmf(p, size_pmf), n)
        got = dist.demand_pmf("compound", _compound([p], [mu], [var]), [p * mu], periods=n)[0]
        m = min(got.size, exact.size)
        np.testing.assert_allclose(got[:m], exact[:m], atol=1e-10)
        assert 1 - got.sum() < 1e-9 and 1 - exact[:m].sum() < 1e-6


def test_compound_with_underdispersed_sizes_stays_within_one_unit_of_size_variance():
    # Sizes with variance below mean - 1 (here mean 6.5, variance 4) are not in the size family;
    # the documented stand-in keeps the size mean and a size variance in [size_var, size_var + 1).
    # Textbook moments (Ross 2014, ch. 3, from memory) with that allowance:
    p, mu, var, n = 0.8, 6.5, 4.0, 3
    pmf = dist.demand_pmf("compound", _compound([p], [mu], [var]), [p * mu], periods=n)
    assert dist.pmf_mean(pmf)[0] == pytest.approx(n * p * mu, rel=1e-9)
    low = n * (p * var + p * (1 - p) * mu**2)
    assert low - 1e-8 <= dist.pmf_var(pmf)[0] < low + n * p * 1.0


def test_zip_mean_and_variance_closed_forms():
    # ZIP: E = (1 - pi) lam, Var = (1 - pi) lam (1 + pi lam) per period (Lambert 1992,
    # Technometrics 34:1-14; from memory), times n for n independent periods
    pi = np.array([0.0, 0.4, 0.9])
    lam = np.array([1.5, 3.0, 12.0])
    n = np.array([3, 5, 8])
    pmf = dist.demand_pmf("zip", {"pi": pi, "lam": lam}, (1 - pi) * lam, periods=n)
    np.testing.assert_allclose(dist.pmf_mean(pmf), n * (1 - pi) * lam, rtol=1e-9)
    np.testing.assert_allclose(dist.pmf_var(pmf), n * (1 - pi) * lam * (1 + pi * lam), rtol=1e-8)
    m, v = dist.total_moments("zip", {"pi": pi, "lam": lam}, (1 - pi) * lam, periods=n)
    np.testing.assert_allclose(v, n * (1 - pi) * lam * (1 + pi * lam))


def test_zinb_mean_and_variance_closed_forms():
    # ZINB with NB(mu, r): E = (1 - pi) mu, Var = (1 - pi) mu (1 + mu / r + pi mu) per period
    # (law of total variance on the zero-inflation mixture)
    pi, mu, r, n = 0.3, 2.0, 0.8, 6
    pmf = dist.demand_pmf("zinb", {"pi": [pi], "mu": [mu], "r": [r]}, [(1 - pi) * mu], periods=n)
    assert dist.pmf_mean(pmf)[0] == pytest.approx(n * (1 - pi) * mu, rel=1e-9)
    assert dist.pmf_var(pmf)[0] == pytest.approx(n * (1 - pi) * mu * (1 + mu / r + pi * mu), rel=1e-8)


def test_shortage_and_on_hand_against_direct_sums():
    # E[(D - s)^+] and E[(s - D)^+] by direct summation over scipy.stats.poisson, including the
    # identity E[(s - D)^+] = s - E[D] + E[(D - s)^+]
    lam = 6.0
    pmf = dist.demand_pmf("zip", {"pi": [0.0], "lam": [lam]}, [lam], periods=1)
    k = np.arange(200)
    ref = stats.poisson.pmf(k, lam)
    for s in [0, 3, 6, 11]:
        assert dist.expected_shortage(pmf, float(s))[0] == pytest.approx((np.maximum(k - s, 0) * ref).sum(), abs=1e-10)
        assert dist.expected_on_hand(pmf, float(s))[0] == pytest.approx((np.maximum(s - k, 0) * ref).sum(), abs=1e-10)
    # a negative level: all demand is short, plus the gap below zero
    assert dist.expected_shortage(pmf, -2.0)[0] == pytest.approx(lam + 2.0)


def test_point_keeps_the_mean_and_zero_means_nothing():
    pmf = dist.demand_pmf("point", None, [[0.0], [0.25], [2.0]], periods=np.array([5, 2, 3]))
    np.testing.assert_allclose(dist.pmf_mean(pmf), [0.0, 0.5, 6.0])
    assert pmf[0, 0] == 1.0 and pmf[2, 6] == 1.0


def test_zero_periods_and_no_demand_give_all_mass_on_zero():
    pmf = dist.demand_pmf("compound", _compound([0.3, 0.0], [2.0, np.nan], [1.0, np.nan]), [0.6, 0.0],
                          periods=np.array([0, 5]))
    np.testing.assert_array_equal(pmf[:, 0], [1.0, 1.0])


# ----------------------------------------------------------------------------- properties
@settings(max_examples=40, deadline=None)
@given(p=st.floats(0.0, 1.0), size_mean=st.floats(1.0, 30.0), ratio=st.floats(0.0, 20.0),
       n=st.integers(0, 30))
def test_compound_rows_are_distributions_with_the_right_mean(p, size_mean, ratio, n):
    size_var = ratio * size_mean
    pmf = dist.demand_pmf("compound", _compound([p], [size_mean], [size_var]), [p * size_mean], periods=n)
    assert (pmf >= 0).all()
    assert pmf.sum() == pytest.approx(1.0, abs=1e-9)
    # the grid leaves at most TAIL_TOLERANCE (1e-10) of probability beyond it, a few hundred units
    # out at most here, so the mean may be short by ~1e-7
    assert dist.pmf_mean(pmf)[0] == pytest.approx(n * p * size_mean, rel=1e-6, abs=1e-6)


def test_grid_grows_for_heavy_tails_and_respects_the_cap():
    # sizes mostly 1 with rare very large orders: the tail reaches far beyond mean + 12 sd
    prm = _compound([0.5], [1.01], [50.0])
    pmf = dist.demand_pmf("compound", prm, [0.505], periods=1)
    assert 1.0 - dist.pmf_cdf(pmf)[0, -1] < 1e-9
    assert pmf.shape[1] > 12 * np.sqrt(0.5 * 50.0 + 0.25 * 1.01**2)
    capped = dist.demand_pmf("compound", prm, [0.505], periods=1, max_units=64)
    assert capped.shape[1] == 64 and capped.sum() == pytest.approx(1.0)
    ragged = dist.demand_pmfs("compound", _compound([0.5, 0.1], [1.01, 2.0], [50.0, 1.0]), [0.5, 0.2],
                              periods=[1], ragged=True)[0]
    assert len(ragged[1]) < len(ragged[0])  # each row only as long as it needs


# ----------------------------------------------------------------------------- bootstrap
def _bernoulli_poisson_history(rng, n_periods, p, lam):
    occurs = rng.random(n_periods) < p
    return np.where(occurs, 1 + rng.poisson(lam, n_periods), 0).astype(np.float64)


def test_bootstrap_converges_to_the_analytic_distribution_on_a_long_iid_history():
    # The bootstrap of Willemain, Smart & Schwarz (2004, IJF 20:375-387): demand occurrence from a
    # two-state Markov chain fitted to the history, sizes resampled from the observed demands
    # (jitter turned off here). The paper states no convergence result; ours: on a long i.i.d.
    # history both transition probabilities tend to p and the resampled sizes to the size law,
    # so the n-period total tends to the compound Bernoulli distribution. Known truth: the
    # n-fold convolution of the one-period PMF, sizes 1 + Poisson(1.5) from scipy.stats.
    rng = np.random.default_rng(11)
    p, lam, n = 0.3, 1.5, 4
    values = _bernoulli_poisson_history(rng, 40_000, p, lam)[None, :]
    boot = dist.demand_pmf("empirical", None, [0.0], periods=n, values=values, seed=3,
                           n_samples=40_000, jitter=False)[0]
    k = np.arange(60)
    exact = _n_fold(_one_period_pmf(p, stats.poisson.pmf(k - 1, lam)), n)
    m = max(boot.size, exact.size)
    gap = np.abs(np.cumsum(np.pad(boot, (0, m - boot.size))) - np.cumsum(np.pad(exact, (0, m - exact.size))))
    assert gap.max() < 0.015  # sampling error ~ 1 / sqrt(40,000) plus history noise


def test_bootstrap_follows_the_markov_chain_from_the_last_state():
    # strictly alternating history: after a demand period the chain must go to zero, so one
    # period ahead is zero demand for certain; two periods ahead it is one of the observed sizes
    values = np.array([[0, 2, 0, 5] * 50], dtype=np.float64)
    one, two = dist.demand_pmfs("empirical", None, [0.0], periods=[1, 2], values=values, seed=1,
                                n_samples=4000, jitter=False)
    assert one[0, 0] == 1.0
    assert two[0, 0] == 0.0 and two[0, 2] + two[0, 5] == pytest.approx(1.0)
    assert two[0, 2] == pytest.approx(0.5, abs=0.05)


def test_bootstrap_ignores_stock_out_periods_and_leading_zeros():
    # zeros while out of stock are censored: with them skipped the history is all demand
    values = np.array([[0, 0, 0, 3, 0, 3, 0, 3]], dtype=np.float64)
    available = np.array([[True, True, True, True, False, True, False, True]])
    pmf = dist.demand_pmf("empirical", None, [0.0], periods=2, values=values, available=available,
                          seed=0, n_samples=500, jitter=False)
    assert pmf[0, 6] == 1.0


def test_bootstrap_is_seeded_and_jitter_keeps_large_sizes_near_their_mean():
    rng = np.random.default_rng(5)
    values = np.where(rng.random((2, 3000)) < 0.2, rng.integers(15, 26, (2, 3000)), 0).astype(float)
    kw = dict(periods=3, values=values, n_samples=5000)
    a = dist.demand_pmf("empirical", None, [0.0, 0.0], seed=7, **kw)
    b = dist.demand_pmf("empirical", None, [0.0, 0.0], seed=7, **kw)
    c = dist.demand_pmf("empirical", None, [0.0, 0.0], seed=8, **kw)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)
    plain = dist.demand_pmf("empirical", None, [0.0, 0.0], seed=7, jitter=False, **kw)
    np.testing.assert_allclose(dist.pmf_mean(a), dist.pmf_mean(plain), rtol=0.03)
    assert (dist.pmf_var(a) > dist.pmf_var(plain)).all()  # jitter spreads the sizes


def test_bootstrap_seed_per_item_does_not_depend_on_neighbours():
    rng = np.random.default_rng(2)
    values = np.where(rng.random((3, 400)) < 0.3, rng.integers(1, 5, (3, 400)), 0).astype(float)
    seeds = np.array([101, 202, 303])
    full = dist.demand_pmf("empirical", None, np.zeros(3), periods=4, values=values, seed=seeds)
    alone = dist.demand_pmf("empirical", None, [0.0], periods=4, values=values[1:2], seed=seeds[1:2])
    np.testing.assert_array_equal(full[1, : alone.shape[1]], alone[0])


# ----------------------------------------------------------------------------- bad input
def test_bad_input_gets_one_line_errors(input_error):
    prm = _compound([0.2], [3.0], [1.0])
    input_error(lambda: dist.demand_pmf("gamma", prm, [0.6], periods=1), "unknown distribution kind", "gamma")
    input_error(lambda: dist.demand_pmf("compound", {"p": [0.2]}, [0.6], periods=1), "size_mean")
    input_error(lambda: dist.demand_pmf("compound", _compound([1.2], [3.0], [1.0]), [0.6], periods=1),
                "p must be between 0 and 1", "1.2")
    input_error(lambda: dist.demand_pmf("compound", _compound([0.2], [0.5], [0.0]), [0.1], periods=1),
                "size_mean must be >= 1")
    input_error(lambda: dist.demand_pmf("compound", prm, [0.6], periods=2.5), "periods", "whole number")
    input_error(lambda: dist.demand_pmf("zinb", {"pi": [0.1], "mu": [1.0], "r": [0.0]}, [0.9], periods=1),
                "r must be > 0")
    input_error(lambda: dist.demand_pmf("compound", _compound([np.nan], [3.0], [1.0]), [0.6], periods=1),
                "NaN", "item 0")
    input_error(lambda: dist.demand_pmf("empirical", None, [0.0], periods=1), "history")
    input_error(lambda: dist.pmf_quantiles(np.array([[1.0]]), [1.5]), "levels")
    with pytest.raises(InputError):
        dist.demand_pmf("zip", {"pi": [0.1, 0.2], "lam": [1.0]}, [1.0, 1.0], periods=1)


def test_large_counts_keep_an_exact_grid():
    # scipy.stats.poisson at a high volume: the log-probability of the mode is large, yet the grid
    # must stay near mean + 12 sd and the quantiles exact
    pmf = dist.demand_pmf("zip", {"pi": [0.0], "lam": [2.0e4]}, [2.0e4], periods=5)
    assert pmf.shape[1] < 1e5 + 12 * np.sqrt(1e5) + 10
    np.testing.assert_array_equal(dist.pmf_quantiles(pmf, LEVELS)[0], stats.poisson.ppf(LEVELS, 1e5))
    # NB with a very large size is Poisson-like; mean and variance mu + mu^2 / r still hold
    nb = dist.demand_pmf("zinb", {"pi": [0.0], "mu": [50.0], "r": [1e9]}, [50.0], periods=20)
    assert dist.pmf_mean(nb)[0] == pytest.approx(1000.0, rel=1e-10)
    assert dist.pmf_var(nb)[0] == pytest.approx(1000.0 + 20 * 2500 / 1e9, rel=1e-8)


def test_bootstrap_history_rows_read_a_subset_in_place():
    rng = np.random.default_rng(4)
    values = np.where(rng.random((5, 200)) < 0.3, rng.integers(1, 4, (5, 200)), 0).astype(float)
    seeds = np.array([11, 12])
    by_row = dist.demand_pmf("empirical", None, [0.0, 0.0], periods=3, values=values,
                             history_rows=[4, 1], seed=seeds)
    copied = dist.demand_pmf("empirical", None, [0.0, 0.0], periods=3, values=values[[4, 1]], seed=seeds)
    np.testing.assert_array_equal(by_row, copied)


def test_size_variance_follows_the_forecast_size_mean_at_the_history_cv():
    # a size variance measured on sizes averaging 8 is carried to a forecast size mean of 4 at the
    # same coefficient of variation: variance / 4 (constant CV scaling, common practice)
    base = _compound([0.2], [4.0], [12.0])
    scaled = dict(base, size_hist_mean=np.array([8.0]))
    np.testing.assert_allclose(
        dist.demand_pmf("compound", scaled, [0.8], periods=3),
        dist.demand_pmf("compound", _compound([0.2], [4.0], [3.0]), [0.8], periods=3))
    same = dict(base, size_hist_mean=np.array([4.0]))
    np.testing.assert_allclose(dist.demand_pmf("compound", same, [0.8], periods=3),
                               dist.demand_pmf("compound", base, [0.8], periods=3))


def test_compound_takes_the_historical_size_mean_from_a_history():
    values = np.array([[0, 8, 0, 0, 8, 0, 8, 8]], dtype=float)  # sizes average 8
    base = _compound([0.2], [4.0], [12.0])
    from_history = dist.demand_pmf("compound", base, [0.8], periods=3, values=values)
    given = dist.demand_pmf("compound", dict(base, size_hist_mean=np.array([8.0])), [0.8], periods=3)
    np.testing.assert_allclose(from_history, given)

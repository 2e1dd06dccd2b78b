"""Zero-inflated Poisson and negative binomial fits against statsmodels and closed forms."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from sparsedemand import methods as M


def _zip_sample(rng, n, pi, lam):
    return np.where(rng.random(n) < pi, 0, rng.poisson(lam, n)).astype(float)


def _zinb_sample(rng, n, pi, mu, r):
    counts = rng.negative_binomial(r, r / (r + mu), n)
    return np.where(rng.random(n) < pi, 0, counts).astype(float)


def _trimmed(y):
    return y[np.argmax(y > 0):]


def test_zip_matches_statsmodels_maximum_likelihood():
    # reference: statsmodels ZeroInflatedPoisson (Seabold & Perktold 2010), intercept-only logit
    from statsmodels.discrete.count_model import ZeroInflatedPoisson

    rng = np.random.default_rng(8)
    y = _zip_sample(rng, 3000, 0.6, 2.5)
    y[0] = 3.0
    _, params, cost = M.zip(y, return_params=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ZeroInflatedPoisson(y, np.ones((len(y), 1)), exog_infl=np.ones((len(y), 1))).fit(
            method="bfgs", maxiter=500, disp=0)
    sm_pi = 1 / (1 + np.exp(-res.params[0]))
    sm_lam = np.exp(res.params[1])
    assert params["pi"] == pytest.approx(sm_pi, rel=1e-4)
    assert params["lam"] == pytest.approx(sm_lam, rel=1e-4)
    assert -cost * len(y) == pytest.approx(res.llf, rel=1e-7)


def test_zinb_matches_statsmodels_maximum_likelihood():
    # reference: statsmodels ZeroInflatedNegativeBinomialP with p=2 (NB2: var = mu + alpha mu^2,
    # alpha = 1/r), intercept-only logit inflation
    from statsmodels.discrete.count_model import ZeroInflatedNegativeBinomialP

    rng = np.random.default_rng(9)
    y = _zinb_sample(rng, 3000, 0.5, 3.0, 1.5)
    y[0] = 2.0
    _, params, cost = M.zinb(y, return_params=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ZeroInflatedNegativeBinomialP(y, np.ones((len(y), 1)), exog_infl=np.ones((len(y), 1)),
                                            p=2).fit(method="bfgs", maxiter=1000, disp=0)
    sm_pi = 1 / (1 + np.exp(-res.params[0]))
    sm_mu = np.exp(res.params[1])
    sm_r = 1 / res.params[2]
    assert params["pi"] == pytest.approx(sm_pi, rel=2e-3)
    assert params["mu"] == pytest.approx(sm_mu, rel=2e-3)
    assert params["r"] == pytest.approx(sm_r, rel=1e-2)
    # a maximum at least as high as the reference optimiser's
    assert -cost * len(y) >= res.llf - 1e-6


def test_zip_moments_closed_form():
    # ZIP mean (1 - pi) lam and variance (1 - pi) lam (1 + pi lam) (Lambert 1992, Technometrics
    # 34:1-14): the maximum likelihood fit reproduces the sample mean exactly and the variance
    # of a large ZIP sample closely
    rng = np.random.default_rng(10)
    y = _zip_sample(rng, 40000, 0.7, 3.0)
    y[0] = 1.0
    _, params, _ = M.zip(y, return_params=True)
    pi, lam = params["pi"], params["lam"]
    t = _trimmed(y)
    assert (1 - pi) * lam == pytest.approx(t.mean(), rel=1e-10)
    assert (1 - pi) * lam * (1 + pi * lam) == pytest.approx(t.var(), rel=0.03)
    assert pi == pytest.approx(0.7, abs=0.02) and lam == pytest.approx(3.0, rel=0.03)


def test_zinb_recovers_its_parameters_and_mean():
    rng = np.random.default_rng(11)
    y = _zinb_sample(rng, 40000, 0.4, 2.0, 0.8)
    y[0] = 1.0
    _, params, _ = M.zinb(y, return_params=True)
    assert (1 - params["pi"]) * params["mu"] == pytest.approx(_trimmed(y).mean(), rel=1e-8)
    assert params["pi"] == pytest.approx(0.4, abs=0.05)
    assert params["r"] == pytest.approx(0.8, rel=0.15)


def test_too_few_zeros_fall_back_to_plain_poisson():
    # Poisson data with no excess zeros: the constrained maximum has pi = 0 and lam = mean
    y = np.array([3.0, 4, 2, 5, 3, 4, 1, 3, 2, 4])
    _, params, cost = M.zip(y, return_params=True)
    assert params["pi"] == 0.0 and params["lam"] == pytest.approx(y.mean())
    from scipy.stats import poisson

    assert -cost * len(y) == pytest.approx(poisson.logpmf(y, y.mean()).sum(), rel=1e-12)


def test_never_sold_item_is_a_point_at_zero():
    y = np.zeros((2, 10))
    y[1, 4] = 2.0
    res = M.fit("zinb", y, np.array([10, 4]), None, horizon=2)
    assert res.mean[0].tolist() == [0.0, 0.0]
    assert res.dist_params["pi"][0] == 1.0

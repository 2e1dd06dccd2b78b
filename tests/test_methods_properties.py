"""Shape, masking, trimming and registry behaviour shared by every method, plus the bias check."""

from __future__ import annotations

import numpy as np
import pytest

from sparsedemand import methods as M
from sparsedemand.errors import InputError

# every public method with options that make it deterministic and cheap
CALLS = {
    "croston": dict(alpha=None), "sba": dict(alpha=0.2, beta=None), "sbj": dict(alpha=0.3),
    "tsb": dict(alpha=None, beta=None), "ses": dict(alpha=None, cost="mar"),
    "moving_average": dict(window=None, max_window=6), "adida": dict(alpha=None),
    "imapa": dict(method="croston"), "zip": {}, "zinb": {}, "zeros": {}, "mean_all": {},
    "mean_since_first": {}, "mean_recent": dict(window=5), "repeat_last": {},
    "seasonal_mean": dict(season_length=7),
}


def _panel(seed=0, n_items=15, n_periods=70):
    rng = np.random.default_rng(seed)
    y = (rng.random((n_items, n_periods)) < rng.uniform(0.05, 0.5, (n_items, 1))) * \
        rng.integers(1, 7, (n_items, n_periods))
    y[:, : rng.integers(0, 20)] = 0  # leading zeros to trim
    y[3] = 0  # an item that never sold
    y[4, :-1] = 0  # an item whose only demand is the last period
    y[4, -1] = 2
    return y.astype(float)


def test_registry_lists_every_public_method():
    assert set(M.METHODS) == set(CALLS)
    for name in M.METHODS:
        assert callable(getattr(M, name))


@pytest.mark.parametrize("name", sorted(CALLS))
def test_two_d_equals_row_by_row_and_shapes(name):
    y = _panel(1)
    f = getattr(M, name)
    out = f(y, 3, **CALLS[name])
    assert out.shape == (y.shape[0], 3)
    assert np.all(out >= 0) and np.all(np.isfinite(out))
    assert np.all(out[3] == 0)  # never sold
    for i in range(y.shape[0]):
        row = f(y[i], 3, **CALLS[name])
        assert row.shape == (3,)
        np.testing.assert_allclose(row, out[i], rtol=1e-12, atol=0)


@pytest.mark.parametrize("name", sorted(set(CALLS) - {"seasonal_mean", "mean_all"}))
def test_unavailable_periods_behave_as_if_dropped(name):
    rng = np.random.default_rng(2)
    y = _panel(2, n_items=6)
    mask = rng.random(y.shape) > 0.25
    f = getattr(M, name)
    masked = f(y, 2, available=mask, **CALLS[name])
    as_nan = f(np.where(mask, y, np.nan), 2, **CALLS[name])
    np.testing.assert_allclose(as_nan, masked, rtol=1e-12)
    for i in range(y.shape[0]):
        np.testing.assert_allclose(f(y[i][mask[i]], 2, **CALLS[name]), masked[i], rtol=1e-12)


def test_mean_all_counts_only_available_periods():
    y = np.array([0.0, 0.0, 5.0, 0.0, 3.0])
    mask = np.array([True, False, True, False, True])
    assert M.mean_all(y, available=mask)[0] == pytest.approx(8 / 3)
    assert M.mean_all(y)[0] == pytest.approx(8 / 5)


def test_seasonal_mean_skips_unavailable_same_season_periods():
    y = np.array([2.0, 0, 0, 9.0, 0, 0, 4.0, 0, 0])
    mask = np.ones(9, bool)
    mask[3] = False
    assert M.seasonal_mean(y, 1, season_length=3, available=mask)[0] == pytest.approx(3.0)


def test_leading_zeros_are_trimmed():
    y = np.array([1.0, 0, 2, 0, 1, 0])
    for name in ("croston", "tsb", "ses", "moving_average", "zinb", "mean_since_first"):
        f = getattr(M, name)
        assert f(np.r_[np.zeros(30), y])[0] == pytest.approx(f(y)[0], rel=1e-12)


@pytest.mark.parametrize("name", sorted(CALLS))
def test_fit_contract(name):
    y = _panel(4)
    start = np.argmax(y > 0, axis=1).astype(np.int64)
    start[~(y > 0).any(axis=1)] = y.shape[1]
    events = M.extract_events(y, start)
    res = M.fit(name, y, start, None, horizon=4, events=events, **CALLS[name])
    assert res.name == name and res.mean.shape == (y.shape[0], 4)
    np.testing.assert_allclose(res.mean, getattr(M, name)(y, 4, **CALLS[name]), rtol=1e-12)
    assert res.cost.shape == (y.shape[0],)
    for value in list(res.params.values()) + list(res.dist_params.values()):
        assert value.shape == (y.shape[0],)
    kinds = {"compound": {"p", "size_mean", "size_var"}, "zip": {"pi", "lam"},
             "zinb": {"pi", "mu", "r"}, "normal": {"sigma"}, "empirical": set(), "point": set()}
    assert set(res.dist_params) == kinds[res.distribution]
    d = res.dist_params
    if res.distribution == "compound":
        np.testing.assert_allclose(d["p"] * d["size_mean"], res.mean[:, 0], rtol=1e-12, atol=1e-15)
        assert np.all((d["p"] >= 0) & (d["p"] <= 1))
        sold = y[y > 0]
        assert d["size_var"][0] == pytest.approx(np.var(y[0][y[0] > 0])) or sold.size == 0
    if res.distribution == "zip":
        np.testing.assert_allclose((1 - d["pi"]) * d["lam"], res.mean[:, 0], rtol=1e-12)
    if res.distribution == "zinb":
        np.testing.assert_allclose((1 - d["pi"]) * d["mu"], res.mean[:, 0], rtol=1e-12)
    if res.distribution == "normal":
        assert np.all(d["sigma"] >= 0) and np.all(np.isfinite(d["sigma"]))


def test_fit_extracts_events_when_not_given():
    y = _panel(5)
    start = np.zeros(y.shape[0], np.int64)
    a = M.fit("tsb", y, start, None, horizon=2)
    b = M.fit("tsb", y, start, None, horizon=2, events=M.extract_events(y))
    np.testing.assert_array_equal(a.mean, b.mean)


@pytest.mark.parametrize("call,message", [
    (lambda: M.croston([1, 0, 2], alpha=1.5), "alpha must be in (0, 1], got 1.5"),
    (lambda: M.tsb([1, 0, 2], beta=0), "beta must be in (0, 1], got 0"),
    (lambda: M.sba([1, 0, 2], beta="other"), "beta must be a number in (0, 1], None or 'same'"),
    (lambda: M.ses([1, 0, 2], cost="rmse"), "cost must be one of mse, mae, mar, msr, got 'rmse'"),
    (lambda: M.ses([1, 0, 2], bounds=(0.5, 0.1)), "bounds must satisfy 0 < low < high <= 1"),
    (lambda: M.croston([1, 0, 2], horizon=0), "horizon must be a positive integer, got 0"),
    (lambda: M.croston([1, -1, 2]), "negative demand -1 at item 0, period 1"),
    (lambda: M.croston([[[1.0]]]), "y must be 1-D (one series) or 2-D"),
    (lambda: M.croston([1, 0], available=[True]), "available must have the shape of y"),
    (lambda: M.moving_average([1, 0], window=0), "window must be an integer >= 1 or None, got 0"),
    (lambda: M.adida([1, 0], method="naive"), "method must be one of sba, croston, sbj, ses"),
    (lambda: M.seasonal_mean([1, 0]), "season_length is required for seasonal_mean"),
    (lambda: M.fit("croston", np.ones((1, 3)), np.zeros(1, np.int64), None, horizon=1, gamma=1),
     "unknown option 'gamma' for method croston; options: alpha, beta, cost, bounds"),
    (lambda: M.fit("prophecy", np.ones((1, 3)), np.zeros(1, np.int64), None, horizon=1),
     "unknown method 'prophecy'"),
    (lambda: M.fit("zip", np.ones((2, 3)), np.zeros(1, np.int64), None, horizon=1),
     "start must have shape (2,)"),
])
def test_bad_options_raise_one_line_input_errors(call, message):
    with pytest.raises(InputError) as err:
        call()
    assert message in str(err.value)
    assert "\n" not in str(err.value)


def test_croston_biased_upwards_and_sba_less_on_bernoulli_poisson_demand():
    # Syntetos & Boylan (2005, IJF 21:303-314): on stationary intermittent demand Croston's
    # forecast overestimates the mean demand per period; the 1 - alpha/2 factor removes most of it.
    rng = np.random.default_rng(2024)
    n_items, n_periods, p, lam, alpha = 4000, 240, 0.2, 3.0, 0.3
    occurs = rng.random((n_items, n_periods)) < p
    sizes = 1 + rng.poisson(lam - 1, (n_items, n_periods))  # positive sizes, mean lam
    y = (occurs * sizes).astype(float)
    true_mean = p * lam
    c = M.croston(y, alpha=alpha)[:, 0]
    s = M.sba(y, alpha=alpha)[:, 0]
    se = c.std() / np.sqrt(n_items)
    assert c.mean() - true_mean > 5 * se
    assert abs(s.mean() - true_mean) < abs(c.mean() - true_mean) / 2


def test_panel_input_is_accepted():
    from sparsedemand.panel import as_panel

    y = _panel(6)
    y_nan = y.copy()
    y_nan[0, 30] = np.nan
    panel = as_panel(y_nan)
    np.testing.assert_allclose(M.tsb(panel), M.tsb(y_nan))


@pytest.mark.parametrize("method", ["sba", "croston", "sbj", "ses"])
def test_imapa_is_the_equal_weight_mean_of_adida_over_levels(method):
    # IMAPA (Petropoulos & Kourentzes 2015, JORS 66:914-924) averages the ADIDA forecasts at
    # levels 1 .. max_level; the fixed-constant kernel runs the levels side by side, so check it
    # against one ADIDA fit per level (unequal sizes, gaps, unavailable periods, alpha up to 1).
    rng = np.random.default_rng(11)
    for trial in range(60):
        n = int(rng.integers(1, 90))
        y = (rng.random(n) < rng.uniform(0.05, 0.8)) * rng.uniform(0.5, 40.0, n)
        if trial % 3 == 0:
            y[rng.random(n) < 0.15] = np.nan
        alpha = float(rng.uniform(0.01, 1.0))
        for max_level in (None, 1, 3, 6, 200):
            f, params, _ = M.imapa(y, max_level=max_level, method=method, alpha=alpha,
                                   return_params=True)
            top = params["max_level"]
            if np.isnan(top):
                assert f[0] == 0.0
                continue
            per_level = [M.adida(y, level=lv, method=method, alpha=alpha)[0]
                         for lv in range(1, int(top) + 1)]
            assert f[0] == pytest.approx(np.mean(per_level), rel=1e-12, abs=1e-300)

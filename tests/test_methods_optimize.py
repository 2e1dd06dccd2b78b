"""Per-item optimisation: never worse than a fine grid; closed-form run costs equal brute force."""

from __future__ import annotations

import zlib

import numpy as np
import pytest

from sparsedemand import methods as M


def _panel(seed, n_items=12, n_periods=80):
    rng = np.random.default_rng(seed)
    p = rng.uniform(0.08, 0.6, n_items)[:, None]
    y = (rng.random((n_items, n_periods)) < p) * (1 + rng.poisson(rng.uniform(0.5, 6, n_items)[:, None],
                                                                 (n_items, n_periods)))
    y[:, 0] = 1 + rng.poisson(2, n_items)
    return y.astype(float)


FINE = np.linspace(0.01, 0.5, 246)  # step 0.002


@pytest.mark.parametrize("method,cost", [
    ("croston", "mse"), ("croston", "mae"), ("croston", "mar"), ("croston", "msr"),
    ("ses", "mse"), ("ses", "mae"), ("ses", "mar"), ("ses", "msr"),
    ("sba", "mse"), ("sbj", "msr"),
])
def test_one_constant_never_worse_than_fine_grid(method, cost):
    y = _panel(zlib.crc32(f"{method}-{cost}".encode()) % 1000)  # stable across processes
    f = getattr(M, method)
    _, params, best = f(y, alpha=None, cost=cost, return_params=True)
    grid = np.array([f(y, alpha=a, cost=cost, return_params=True)[2] for a in FINE])
    assert np.all(best <= grid.min(axis=0) * (1 + 1e-9) + 1e-12)
    assert np.all((params["alpha"] >= 0.01) & (params["alpha"] <= 0.5))


def test_tsb_one_free_constant_never_worse_than_fine_grid():
    y = _panel(7)
    _, params, best = M.tsb(y, alpha=0.2, beta=None, return_params=True)
    grid = np.array([M.tsb(y, alpha=0.2, beta=b, return_params=True)[2] for b in FINE])
    assert np.all(best <= grid.min(axis=0) * (1 + 1e-9))
    assert np.all(params["alpha"] == 0.2)


SEEDS = range(80)  # 80 panels of 6 items: 480 items per method
OWN_GRID = np.linspace(0.01, 0.5, 5)  # the documented GRID_2D x GRID_2D start on the bounds
FINE_2D = np.linspace(0.01, 0.5, 50)


def _cost_grid(f, y, grid):
    return np.array([[f(y, alpha=a, beta=b, return_params=True)[2] for b in grid]
                     for a in grid]).reshape(-1, y.shape[0]).min(axis=0)


@pytest.fixture(scope="module", params=["tsb", "croston"])
def two_free(request):
    """Optimised cost, best cost on its own 5 x 5 start grid and on a 50 x 50 grid, per item."""
    f = getattr(M, request.param)
    y = np.vstack([_panel(seed, n_items=6) for seed in SEEDS])  # items are fitted one by one
    _, _, best = f(y, alpha=None, beta=None, return_params=True)
    return best, _cost_grid(f, y, OWN_GRID), _cost_grid(f, y, FINE_2D)


def test_two_free_constants_never_worse_than_their_start_grid(two_free):
    # What the search guarantees: it keeps the best point ever evaluated, and it evaluates the
    # whole 5 x 5 grid first, so on every item it is no worse than that grid.
    best, own, _ = two_free
    assert np.all(best <= own * (1 + 1e-12))


def test_two_free_constants_close_to_a_fine_grid_over_many_seeds(two_free):
    # The line searches after the grid are local: on a multimodal cost (MSE of TSB or Croston on
    # short intermittent series) they can stop in a shallower dip, so no per-item bound follows
    # from the method. What it meets over 480 items x 2 methods (measured on seeds 0-79 and
    # 100-139): the median item is within 1e-5 of the 50 x 50 grid, 95% or more within 0.5%,
    # and the worst within 3.1%. The bounds below leave room for other seeds.
    best, _, fine = two_free
    ratio = best / fine
    assert np.median(ratio) <= 1.0 + 1e-3
    assert np.mean(ratio <= 1.005) >= 0.9
    assert ratio.max() <= 1.05


@pytest.mark.xfail(strict=True, reason="two-constant search is local: worst item 3.0% (TSB) and 2.4% "
                                       "(Croston) above a 50 x 50 grid on seeds 0-79, aim is 0.5%")
def test_two_free_constants_within_half_a_percent_of_a_fine_grid_on_every_item(two_free):
    # the stated aim: every item within 0.5% of the best point of a 50 x 50 grid
    best, _, fine = two_free
    assert np.all(best <= fine * 1.005)


def _brute_costs(y, forecasts):
    e = y[1:] - forecasts[1:]
    cum = np.cumsum(e)
    return {"mse": np.mean(e**2), "mae": np.mean(np.abs(e)), "mar": np.mean(np.abs(cum)),
            "msr": np.mean(cum**2)}


def _tsb_reference(y, a, b):
    # period by period, exactly as the recurrence is written; the start values (z = first size,
    # p = 1 / first interval) are our convention, not fixed by Teunter, Syntetos & Babai (2011)
    t = np.flatnonzero(y > 0)
    z, p = y[t[0]], 1.0 / (t[1] - t[0] if len(t) > 1 else 1)
    f = np.empty(len(y))
    f[0] = p * z
    for i in range(1, len(y)):
        f[i] = p * z
        p += b * ((y[i] > 0) - p)
        if y[i] > 0:
            z += a * (y[i] - z)
    return f


def _croston_reference(y, a):
    # start values z = first size, x = first interval: our convention
    t = np.flatnonzero(y > 0)
    z, x = y[t[0]], float(t[1] - t[0] if len(t) > 1 else 1)
    f = np.empty(len(y))
    last = 0
    for i in range(len(y)):
        f[i] = z / x
        if i > 0 and y[i] > 0:
            z += a * (y[i] - z)
            x += a * ((i - last) - x)
        if y[i] > 0:
            last = i
    return f


def _moving_average_reference(y, w):
    # forecast for t: mean of the min(w, t) periods before it (common practice)
    f = np.empty(len(y))
    f[0] = y[0]
    for t in range(1, len(y)):
        f[t] = y[max(0, t - w):t].mean()
    return f


@pytest.mark.parametrize("cost", ["mse", "mae", "mar", "msr"])
def test_event_costs_equal_period_by_period_costs(cost):
    # the kernels sum whole runs of zeros in closed form; a plain loop over periods must agree
    rng = np.random.default_rng(5)
    for _ in range(20):
        y = (rng.random(90) < rng.uniform(0.05, 0.7)) * rng.integers(1, 9, 90).astype(float)
        y[0] = 5.0
        y[1] = 1.0
        a, b = rng.uniform(0.01, 1.0, 2)
        want = _brute_costs(y, _tsb_reference(y, a, b))[cost]
        got = M.tsb(y, alpha=a, beta=b, cost=cost, return_params=True)[2]
        assert got == pytest.approx(want, rel=1e-9, abs=1e-12)
        want = _brute_costs(y, _croston_reference(y, a))[cost]
        got = M.croston(y, alpha=a, cost=cost, return_params=True)[2]
        assert got == pytest.approx(want, rel=1e-9, abs=1e-12)
        w = int(rng.integers(1, 12))
        want = _brute_costs(y, _moving_average_reference(y, w))[cost]
        got = M.moving_average(y, window=w, cost=cost, return_params=True)[2]
        assert got == pytest.approx(want, rel=1e-9, abs=1e-12)


def test_long_gaps_use_the_closed_form_beyond_the_tables():
    # gaps longer than the power tables (64 periods) go through exp and the closed sums
    y = np.zeros(400)
    y[[0, 150, 151, 390]] = [3, 2, 5, 1]
    for cost in ("mse", "mar", "msr"):
        want = _brute_costs(y, _tsb_reference(y, 0.3, 0.05))[cost]
        assert M.tsb(y, alpha=0.3, beta=0.05, cost=cost, return_params=True)[2] == pytest.approx(
            want, rel=1e-9)


def test_moving_average_window_search_is_exhaustive():
    y = _panel(2, n_items=5)
    _, params, best = M.moving_average(y, window=None, max_window=10, return_params=True)
    grid = np.array([M.moving_average(y, window=w, return_params=True)[2] for w in range(1, 11)])
    assert np.allclose(best, grid.min(axis=0))
    assert np.array_equal(params["window"], grid.argmin(axis=0) + 1.0)


def _line_search(fn, lo, hi, n_grid, tol):
    from sparsedemand.methods.optimize import STATE_SIZE, line_ask, line_start, line_tell

    st = np.empty(STATE_SIZE)
    line_start(st, 0, lo, hi, n_grid, tol)
    calls = []
    while True:
        x = line_ask(st, 0)
        if x != x:
            break
        calls.append(x)
        line_tell(st, 0, fn(x))
    best = min(calls, key=fn)
    return best, len(calls)


@pytest.mark.parametrize("fn", [
    lambda x: (x - 0.2137) ** 2 + 0.3 * (x - 0.2137) ** 4,
    lambda x: np.exp(x) - 3.0 * x,  # minimum at log 3
    lambda x: abs(x - 0.3711) + 0.1 * x,  # not smooth at the minimum
])
def test_line_search_agrees_with_scipy_bounded_brent(fn):
    # reference: scipy.optimize.minimize_scalar(method="bounded"), Brent's (1973) method as
    # implemented in scipy (fminbound); both must find the same minimiser to the tolerance
    from scipy.optimize import minimize_scalar

    ref = minimize_scalar(fn, bounds=(0.01, 1.5), method="bounded",
                          options={"xatol": 1e-9}).x
    for n_grid in (0, 24):
        best, calls = _line_search(fn, 0.01, 1.5, n_grid, 1e-6)
        assert best == pytest.approx(ref, abs=2e-6)
        assert calls <= n_grid + 60


def test_line_search_refines_a_smooth_cost_in_few_steps():
    # the grid's best point and its neighbours seed the parabola: a quadratic needs a handful of
    # steps after the grid, where golden section alone would need about 23 to reach 1e-6
    best, calls = _line_search(lambda x: (x - 0.2137) ** 2, 0.01, 0.5, 24, 1e-6)
    assert best == pytest.approx(0.2137, abs=1e-6)
    assert calls - 24 <= 12

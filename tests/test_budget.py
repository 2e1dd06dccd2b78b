"""Budget allocation, frontier, packs and uncertain lead times, checked against brute force, hand
computations, scipy and simulations with known truth."""

from __future__ import annotations

import doctest
import itertools

import numpy as np
import pytest
from scipy import stats

from sparsedemand import budget as bd
from sparsedemand.budget import allocate, curves as curves_mod, lead_time
from sparsedemand.errors import InputError
from sparsedemand.methods import distributions as dist


# ----------------------------------------------------------------------------- helpers
def _random_instance(rng, *, concave: bool, n_items: int):
    """Curves over S = 0 .. K-1 with positive on-hand steps; concave or lumpy filled curves."""
    filled, on_hand, csl = [], [], []
    for _ in range(n_items):
        k = int(rng.integers(4, 7))
        if concave:
            gains = np.sort(rng.uniform(0.0, 1.0, k - 1))[::-1]
        else:  # plateaus then jumps, as lumpy demand gives
            gains = rng.uniform(0.0, 1.0, k - 1) * (rng.uniform(size=k - 1) < 0.5)
            gains[rng.integers(1, k - 1)] += 1.5
        filled.append(np.concatenate([[0.0], np.cumsum(gains)]))
        on_hand.append(np.concatenate([[0.0], np.cumsum(rng.uniform(0.2, 1.0, k - 1))]))
        csl.append(np.linspace(rng.uniform(0, 0.3), 1.0, k))
    prices = rng.uniform(0.5, 3.0, n_items)
    curves = bd.service_curves(filled, on_hand, cycle_service=csl)
    return curves, prices


def _brute_force(curves, prices, budget, floor):
    """Best total filled over every combination of levels within the budget (exhaustive)."""
    ranges = [range(int(f), int(n)) for f, n in zip(floor, curves.sizes)]
    best = -np.inf
    for combo in itertools.product(*ranges):
        at = curves.indptr[:-1] + np.array(combo)
        if (curves.on_hand[at] * prices).sum() <= budget + 1e-9:
            best = max(best, curves.filled[at].sum())
    return best


def _largest_envelope_step(curves, prices, floor):
    path = allocate._path(curves, prices, floor)
    return float(path.df.max(initial=0.0))


# ----------------------------------------------------------------------------- greedy vs brute force
@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("concave", [True, False])
def test_greedy_against_brute_force(seed, concave):
    # Exhaustive search over all combinations is the reference. Marginal analysis is optimal for
    # separable concave allocation at the points it reaches (Fox 1966, Management Science 13:210-216;
    # from memory); in between, and on non-concave curves, it misses by at most one envelope step.
    rng = np.random.default_rng(seed)
    curves, prices = _random_instance(rng, concave=concave, n_items=int(rng.integers(3, 5)))
    floor = rng.integers(0, 2, curves.n_items)
    frontier = bd.budget_frontier(curves, unit_price=prices, floor=floor, up_to_service=1.0, max_rows=10_000)
    # every point of the greedy path is optimal for its own stock value, concave or not
    for value, rate in zip(frontier["stock_value"], frontier["fill_rate"]):
        best = _brute_force(curves, prices, value, floor)
        assert rate * curves.mean_demand.sum() == pytest.approx(best, abs=1e-9)
    step = _largest_envelope_step(curves, prices, floor)
    base = frontier["stock_value"].iloc[0]
    top = (curves.on_hand[curves.indptr[1:] - 1] * prices).sum()
    for budget in np.linspace(base, top, 17):
        a = bd.allocate_budget(curves, unit_price=prices, budget=budget, floor=floor)
        best = _brute_force(curves, prices, budget, floor)
        assert a.total_value <= budget + 1e-9
        assert (a.level >= floor).all()
        assert a.total_filled <= best + 1e-9
        assert best <= a.upper_bound + 1e-9
        assert best - a.total_filled <= step + 1e-9
        if concave:
            assert a.upper_bound - a.total_filled <= step + 1e-9


def test_plateau_does_not_hide_a_later_gain():
    # Hand-worked: item A gains nothing from S = 0 to 1 and 1.0 unit from 1 to 2; item B gains 0.3
    # then 0.1. With 2 units of value, A at 2 fills 1.0, every other choice at most 0.4. Stepping
    # by the next level's own gain would put both units into B.
    c = bd.service_curves([[0.0, 0.0, 1.0], [0.0, 0.3, 0.4]], [[0.0, 1.0, 2.0], [0.0, 1.0, 2.0]],
                          items=["A", "B"])
    a = bd.allocate_budget(c, unit_price=[1.0, 1.0], budget=2.0)
    assert a.level.tolist() == [2, 0]
    assert a.total_filled == pytest.approx(1.0)
    assert a.at_floor.tolist() == [False, True]


def test_fill_up_takes_smaller_steps_after_a_large_one_does_not_fit():
    # Hand-worked: A's one step (gain 1.0 for value 2) ranks first but does not fit in 1.5;
    # B's step (gain 0.2 for value 1) still fits.
    c = bd.service_curves([[0.0, 1.0], [0.0, 0.2]], [[0.0, 2.0], [0.0, 1.0]])
    assert bd.allocate_budget(c, unit_price=1.0, budget=1.5).level.tolist() == [0, 1]
    assert bd.allocate_budget(c, unit_price=1.0, budget=1.5, fill_up=False).level.tolist() == [0, 0]


# ----------------------------------------------------------------------------- frontier and ladder
def _pmf_curves(n_items=40, seed=3):
    """Curves from compound-Bernoulli lead-time demand PMFs of invented items (L = 2, R = 1)."""
    rng = np.random.default_rng(seed)
    p = rng.uniform(0.05, 0.6, n_items)
    size_mean = rng.uniform(1.0, 6.0, n_items)
    size_var = rng.uniform(0.0, 8.0, n_items)
    params = {"p": p, "size_mean": size_mean, "size_var": size_var}
    mean = p * size_mean
    p_lead, p_cover = dist.demand_pmfs("compound", params, mean, periods=[2, 3])
    width = max(p_lead.shape[1], p_cover.shape[1])
    pad = lambda a: np.pad(a, ((0, 0), (0, width - a.shape[1])))  # noqa: E731
    c = bd.order_up_to_curves(pad(p_lead), [pad(p_cover)], review_period=1)
    return c, rng.uniform(1.0, 200.0, n_items)


def test_frontier_is_monotone_and_stops_at_the_uniform_cost():
    c, prices = _pmf_curves()
    f = bd.budget_frontier(c, unit_price=prices, up_to_service=0.995, max_rows=50)
    assert 2 <= len(f) <= 51
    for col in ("stock_value", "fill_rate", "cycle_service_level"):
        assert (np.diff(f[col]) >= -1e-12).all(), col
    assert (np.diff(f["items_at_floor"]) <= 0).all()
    uniform = bd.uniform_ladder(c, unit_price=prices, levels=[0.995]).iloc[0]
    assert f["stock_value"].iloc[-1] <= uniform["stock_value"] * (1 + 1e-9)
    assert f.attrs["uniform_value"] == pytest.approx(uniform["stock_value"])
    # consistency check within the package: rows agree with the allocation without fill-up
    for _, row in f.iloc[[0, len(f) // 2, -1]].iterrows():
        a = bd.allocate_budget(c, unit_price=prices, budget=row["stock_value"], fill_up=False)
        assert a.fill_rate == pytest.approx(row["fill_rate"], abs=1e-9)


def test_allocation_beats_a_uniform_target_at_the_same_value():
    # With prices spread over two orders of magnitude, one service target for all is not the
    # cheapest way to a fill rate (common practice); the gap bound allows at most one step less.
    c, prices = _pmf_curves()
    ladder = bd.uniform_ladder(c, unit_price=prices, levels=[0.8, 0.9, 0.95, 0.99])
    assert (np.diff(ladder["stock_value"]) >= 0).all()
    step = _largest_envelope_step(c, prices, 0) / c.mean_demand.sum()
    assert (ladder["allocated_fill_rate"] >= ladder["fill_rate"] - step).all()
    assert (ladder["allocated_fill_rate"] > ladder["fill_rate"]).sum() >= 3


def test_curves_agree_with_the_stock_table():
    # Consistency check within the package: the curves at the stock stage's own targets give its
    # fill rate, cycle service level and expected on hand.
    from types import SimpleNamespace

    from sparsedemand.stock import stock_targets

    params = {"p": np.array([0.3, 0.1]), "size_mean": np.array([2.0, 4.0]), "size_var": np.array([1.0, 6.0])}
    mean = params["p"] * params["size_mean"]
    fit = SimpleNamespace(name="sba", mean=mean[:, None], distribution="compound", dist_params=params)
    table = stock_targets(fit, lead_time=2, review_period=3, service_level=0.9)
    steps = dist.demand_pmfs("compound", params, mean, periods=[2, 3, 4, 5])
    width = max(s.shape[1] for s in steps)
    steps = [np.pad(s, ((0, 0), (0, width - s.shape[1]))) for s in steps]
    c = bd.order_up_to_curves(steps[0], steps[1:], review_period=3)
    v = bd.curve_values(c, table["order_up_to"].to_numpy())
    np.testing.assert_allclose(v["fill_rate"], table["expected_fill_rate"], atol=1e-9)
    np.testing.assert_allclose(v["cycle_service"], table["cycle_service_level"], atol=1e-9)
    np.testing.assert_allclose(v["on_hand"], table["expected_on_hand"], atol=1e-9)
    assert (bd.levels_for_service(c, 0.9) == table["order_up_to"].to_numpy()).all()


# ----------------------------------------------------------------------------- packs
def test_order_quantity_hand_worked():
    # Hand-worked with the stated rule (common practice): S = 10, packs of 4, minimum 6.
    q = bd.order_quantity([10, 10, 10, 10, 10], [12, 10, 9, 7, -3], pack_size=4, minimum_order=6)
    assert q.tolist() == [0.0, 0.0, 8.0, 8.0, 16.0]  # need 1 -> min 6 -> 2 packs; need 13 -> 4 packs
    assert bd.order_quantity(10, 9.5).tolist() == 1.0
    assert bd.order_quantity([5, 8], [1, 0], pack_size=[1, 3]).tolist() == [4.0, 9.0]
    with pytest.raises(InputError, match="pack-size"):
        bd.order_quantity(10, 0, pack_size=2.5)


def _simulate_packs(S, pack, lam, lead, periods, seed):
    """Periodic review (R = 1), Poisson demand, backorders, orders in whole packs: an independent replay.

    An order placed at the start of period t arrives at the start of t + lead, before that
    period's demand; fill counts demand met from stock when it occurs.
    """
    rng = np.random.default_rng(seed)
    demand = rng.poisson(lam, periods)
    net, pipeline = S, [0] * lead
    filled = on_hand = no_short = 0
    for t in range(periods):
        position = net + sum(pipeline)
        q = 0 if position >= S else -(-(S - position) // pack) * pack
        pipeline.append(q)
        net += pipeline.pop(0)
        filled += min(demand[t], max(net, 0))
        net -= demand[t]
        on_hand += max(net, 0)
        no_short += net >= 0
    return filled / demand.sum(), on_hand / periods, no_short / periods


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_pack_averaging_against_simulation(seed):
    # The position after ordering is uniform on S .. S + P - 1 (Hadley & Whitin 1963, Analysis of
    # Inventory Systems; from memory): the pack curves must match a replay with known Poisson demand.
    lam, lead, S, pack = 1.5, 2, 5, 4
    grid = np.arange(60)
    p_lead = stats.poisson.pmf(grid, lam * lead)[None, :]
    p_cover = stats.poisson.pmf(grid, lam * (lead + 1))[None, :]
    plain = bd.order_up_to_curves(p_lead, [p_cover])
    packed = bd.packed_curves(plain, pack_size=pack)
    want = bd.curve_values(packed, [S])
    fill, hand, csl = _simulate_packs(S, pack, lam, lead, 60_000, seed)
    assert fill == pytest.approx(want["fill_rate"][0], abs=0.01)
    assert hand == pytest.approx(want["on_hand"][0], rel=0.03)
    assert csl == pytest.approx(want["cycle_service"][0], abs=0.01)
    # packs change the answer by far more than the tolerance
    assert abs(bd.curve_values(plain, [S])["on_hand"][0] - want["on_hand"][0]) > 0.5


# ----------------------------------------------------------------------------- lead times
def test_mixture_hand_computation():
    # Hand-worked: lead times 1, 1, 2 (weights 2/3, 1/3), demand per period 0 or 1 with
    # probability 1/2 each: P(0) = 2/3 * 1/2 + 1/3 * 1/4, P(1) = 2/3 * 1/2 + 1/3 * 1/2, P(2) = 1/12.
    table = lambda n: stats.binom.pmf(np.arange(4)[None, :], n[:, None], 0.5)  # noqa: E731
    pmf = bd.lead_time_mixture([[1, 1, 2]], table)
    np.testing.assert_allclose(pmf[0], [5 / 12, 6 / 12, 1 / 12, 0.0], atol=1e-12)
    # weights given as a pair give the same
    pmf2 = bd.lead_time_mixture([(np.array([1, 2]), np.array([2.0, 1.0]))], table)
    np.testing.assert_allclose(pmf2, pmf, atol=1e-12)


@pytest.mark.parametrize("seed", [4, 5])
def test_mixture_against_monte_carlo_and_closed_form(seed):
    # Known truth: lead time from {1, 3, 4} with weights .5/.3/.2, zero-inflated Poisson demand.
    # Mean and variance against E[L] mu and E[L] sigma^2 + mu^2 Var(L) (Silver, Pyke & Thomas 2017,
    # ch. 6; from memory); the PMF against a Monte Carlo sample.
    pi, lam = 0.4, 2.5
    prm = {"pi": np.array([pi]), "lam": np.array([lam])}
    mean = np.array([(1 - pi) * lam])
    pmf_for = lambda n: dist.demand_pmf("zip", prm, mean, periods=n)  # noqa: E731
    values, weights = np.array([1, 3, 4]), np.array([0.5, 0.3, 0.2])
    pmf = bd.lead_time_mixture([(values, weights)], pmf_for)[0]
    mu, var = (1 - pi) * lam, (1 - pi) * lam * (1 + pi * lam)
    lm, ls = bd.lead_time_moments(values, weights)
    m_ref, sd_ref = bd.lead_time_demand_moments(lead_mean=lm, lead_sd=ls, period_mean=mu, period_sd=np.sqrt(var))
    k = np.arange(pmf.size)
    assert pmf @ k == pytest.approx(float(m_ref), rel=1e-9)
    assert np.sqrt(pmf @ k**2 - (pmf @ k) ** 2) == pytest.approx(float(sd_ref), rel=1e-9)
    rng = np.random.default_rng(seed)
    n = 200_000
    L = rng.choice(values, size=n, p=weights)
    active = rng.binomial(L, 1 - pi)
    sample = rng.poisson(lam * active)
    freq = np.bincount(sample, minlength=pmf.size)[: pmf.size] / n
    assert np.abs(freq - pmf).max() < 5 * np.sqrt(pmf.max() / n)


@pytest.mark.parametrize("mean, sd", [(4.0, 2.0), (6.5, 1.5), (0.8, 1.2), (10.0, 4.0)])
def test_lead_time_distribution_negative_binomial_against_scipy(mean, sd):
    # The stated family: shifted negative binomial; mass and moments against scipy.stats.nbinom.
    values, weights = bd.lead_time_distribution(mean, sd)
    c = int(values[0])
    m = mean - c
    p, r = m / sd**2, m * m / (sd**2 - m)
    ref = stats.nbinom(r, p, loc=c)
    assert ref.mean() == pytest.approx(mean) and ref.std() == pytest.approx(sd)
    np.testing.assert_allclose(weights, ref.pmf(values), atol=1e-9)
    got_mean, got_sd = bd.lead_time_moments(values, weights)
    assert got_mean == pytest.approx(mean, rel=1e-6) and got_sd == pytest.approx(sd, rel=1e-6)
    assert c >= 0 and (np.diff(values) == 1).all()


def test_lead_time_distribution_small_spread():
    # Hand-worked: three points around round(mean) carry the mean and variance exactly; below the
    # least spread whole numbers allow (two neighbours: f (1 - f) for fraction f) sd is raised.
    values, weights = bd.lead_time_distribution(4.3, 0.6)
    assert bd.lead_time_moments(values, weights) == pytest.approx((4.3, 0.6))
    values, weights = bd.lead_time_distribution(4.5, 0.1)
    assert values.tolist() == [4, 5]
    assert bd.lead_time_moments(values, weights) == pytest.approx((4.5, 0.5))
    assert bd.lead_time_distribution(3.0, 0.0)[0].tolist() == [3]
    with pytest.raises(InputError, match="lead time"):
        bd.lead_time_distribution(-1.0, 1.0)


# ----------------------------------------------------------------------------- bad input
def test_missing_or_zero_prices_are_refused_naming_the_item():
    c = bd.service_curves([[0.0, 1.0], [0.0, 1.0]], [[0.0, 1.0], [0.0, 1.0]], items=["bolt", "gasket"])
    with pytest.raises(InputError, match=r"--budget needs unit prices.*'gasket' has no unit price"):
        bd.allocate_budget(c, unit_price=[2.0, np.nan], budget=5.0)
    with pytest.raises(InputError, match=r"'bolt' has unit price 0"):
        bd.allocate_budget(c, unit_price=[0.0, 1.0], budget=5.0)
    with pytest.raises(InputError, match="--budget needs unit prices"):
        bd.budget_frontier(c, unit_price=None)
    with pytest.raises(InputError, match="below"):
        bd.allocate_budget(c, unit_price=1.0, budget=1.0, floor=1)
    with pytest.raises(InputError, match="'gasket'"):
        bd.allocate_budget(c, unit_price=1.0, budget=5.0, floor=[0, 2])


def test_curve_checks_name_the_item():
    with pytest.raises(InputError, match="'b' decreases"):
        bd.service_curves([[0.0, 1.0], [0.0, 1.0]], [[0.0, 1.0], [1.0, 0.5]], items=["a", "b"])
    with pytest.raises(InputError, match="'a' is empty or not as long"):
        bd.service_curves([[0.0, 1.0]], [[0.0]], items=["a"])


def test_docstring_examples():
    for mod in (bd, allocate, curves_mod, lead_time):
        result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.failed == 0 and result.attempted > 0, mod.__name__


def test_levels_for_service_hand_worked():
    # Hand-worked on ragged curves: the smallest level reaching the target, the last level when
    # the grid never reaches it, never below the floor.
    c = bd.service_curves([[0.0, 1.0, 1.0], [0.0, 1.0]], [[0.0, 1.0, 2.0], [0.0, 1.0]],
                          cycle_service=[[0.2, 0.95, 1.0], [0.5, 0.9]])
    assert bd.levels_for_service(c, 0.95).tolist() == [1, 1]
    assert bd.levels_for_service(c, 0.5).tolist() == [1, 0]
    assert bd.levels_for_service(c, 0.1, floor=[2, 1]).tolist() == [2, 1]

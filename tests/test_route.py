"""The router: default table, policy and override files, holdout selection, output contract,
quantiles against scipy, and the quality bar on non-stationary slow movers with known means."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from sparsedemand import methods as M
from sparsedemand import route
from sparsedemand.classify import classify
from sparsedemand.io import from_frame
from sparsedemand.metrics import rmsse
from sparsedemand.panel import DemandPanel
from sparsedemand.route import (
    DEFAULT_POLICY,
    INTERMITTENT_BOUNDS,
    Rule,
    forecast,
    load_overrides,
    load_policy,
    rate_change,
)

LEVELS = (0.5, 0.8, 0.9, 0.95)
QCOLS = ["q50", "q80", "q90", "q95"]
N = 60


def _series() -> dict[str, np.ndarray]:
    """One hand-made series per pattern and status, 60 periods each."""
    s = {}
    s["smooth"] = np.tile([5.0, 6, 4, 5], N // 4)
    s["erratic"] = np.tile([1.0, 12, 2, 15, 1, 9], N // 6)
    s["intermittent"] = np.tile([0.0, 0, 2], N // 3)
    s["lumpy"] = np.tile([0.0, 0, 1, 0, 0, 10, 0, 0, 3, 0, 0, 20], N // 12)
    quiet = np.tile([0.0, 0, 2], N // 3)
    quiet[40:] = 0.0
    s["gone-quiet"] = quiet
    short = np.zeros(N)
    short[-3] = 4.0
    s["too-short"] = short
    s["never-sold"] = np.zeros(N)
    # every other period for 40 periods, then only twice in the last 20
    change = np.zeros(N)
    change[0:40:2] = 3.0
    change[[50, 59]] = 3.0
    s["rate-change"] = change
    return s


SERIES = _series()
NAMES = list(SERIES)
VALUES = np.vstack([SERIES[k] for k in NAMES])


def _panel(values: np.ndarray, names=None) -> DemandPanel:
    names = names if names is not None else [f"item{i}" for i in range(len(values))]
    return DemandPanel(values, items=pd.Index(names), periods=pd.RangeIndex(values.shape[1]))


@pytest.fixture(scope="module")
def routed():
    return forecast(_panel(VALUES, NAMES), 6)


# ---------------------------------------------------------------- default routing


def test_hand_made_series_fall_in_their_patterns(routed):
    expected = [k if k != "rate-change" else "intermittent" for k in NAMES]
    assert routed.audit["pattern"].tolist() == expected


# Syntetos, Boylan & Croston (2005, JORS 56:495-503): SBA in the erratic, intermittent and lumpy
# regions (they favour Croston's method in the smooth one, from memory; SES there is our
# convention); Syntetos & Boylan (2005, IJF 21:303-314): SBA over Croston on intermittent demand;
# Teunter, Syntetos & Babai (2011, EJOR 214:606-615): TSB for demand that stops (its probability
# decays every period without demand). TSB for a change in demand frequency, and the fallbacks
# for too-short and never-sold items: our convention.
EXPECTED_METHOD = {
    "smooth": "ses",
    "erratic": "sba",
    "intermittent": "sba",
    "lumpy": "sba",
    "gone-quiet": "tsb",
    "rate-change": "tsb",
    "too-short": "mean_since_first",
    "never-sold": "zeros",
}


@pytest.mark.parametrize("name", NAMES)
def test_default_policy_sends_each_pattern_to_its_published_method(routed, name):
    row = routed.audit.set_index("item").loc[name]
    assert DEFAULT_POLICY[name].method == EXPECTED_METHOD[name]
    assert row["method"] == EXPECTED_METHOD[name]
    assert f"default policy row '{name}' -> {EXPECTED_METHOD[name]}" in row["reason"]


def test_never_sold_forecasts_zero_and_gone_quiet_decays_with_fixed_probability_constant(routed):
    point = routed.point
    assert (point.loc["never-sold"] == 0).all()
    params = routed.audit.set_index("item").loc["gone-quiet", "parameters"]
    assert "beta=0.1," in params + "," and "beta=0.1 (optimised)" not in params
    # TSB (Teunter, Syntetos & Babai 2011): after 20 periods without demand the probability has
    # decayed by (1 - beta)^20 from what it was at the last demand, so the forecast is far below
    # the 2/3 per period the item sold at while active.
    assert point.loc["gone-quiet"].iloc[0] < 2 / 3 * 0.9**20 * 1.5


def test_smoothing_constants_of_the_intermittent_methods_stay_in_the_narrow_range(routed):
    fitted = [(rule, fit) for rows, rule, fit in routed.groups if rule.method in ("sba", "tsb")]
    assert fitted
    lo, hi = INTERMITTENT_BOUNDS
    for rule, fit in fitted:
        for key in ("alpha", "beta"):
            if key in fit.params and key not in rule.params:
                assert np.all((fit.params[key] >= lo - 1e-12) & (fit.params[key] <= hi + 1e-12))


def test_rate_change_test_equals_fisher_exact_from_scipy():
    panel = _panel(VALUES, NAMES)
    classes = classify(panel)
    table = rate_change(panel, classes)
    for name in ("rate-change", "intermittent", "lumpy"):
        r = table.loc[name]
        a, b = int(r.recent_demands), int(r.recent_periods - r.recent_demands)
        c, d = int(r.earlier_demands), int(r.earlier_periods - r.earlier_demands)
        # Fisher's exact test: the two one-sided tails come from scipy.stats.fisher_exact. The
        # two-sided p as twice the smaller tail (capped at 1) is our convention; scipy's
        # "two-sided" sums the tables no more likely than the observed one and can differ.
        less = stats.fisher_exact([[a, b], [c, d]], alternative="less").pvalue
        greater = stats.fisher_exact([[a, b], [c, d]], alternative="greater").pvalue
        assert r.p_value == pytest.approx(min(1.0, 2 * min(less, greater)), rel=1e-9)
    assert table.loc["rate-change", ["recent_periods", "recent_demands", "earlier_demands"]].tolist() == [20, 2, 20]
    # the stopped item changed too, but keeps its own row (gone-quiet): only steady patterns move
    assert table["changed"].tolist() == [name in ("rate-change", "gone-quiet") for name in NAMES]


def test_change_test_can_be_turned_off():
    result = forecast(_panel(VALUES, NAMES), 3, change_level=None)
    assert result.audit.set_index("item").loc["rate-change", "method"] == "sba"


# ---------------------------------------------------------------- policy and override files


def test_policy_file_replaces_one_row_and_keeps_the_others(tmp_path):
    path = tmp_path / "policy.toml"
    path.write_text('# lumpy items get TSB\n\n[patterns.lumpy]\nmethod = "tsb"\nalpha = 0.15\n', encoding="utf-8")
    policy = load_policy(path)
    assert policy["lumpy"] == Rule("tsb", {"alpha": 0.15}, source=f"policy file {path}, line 3")
    assert {k: v for k, v in policy.items() if k != "lumpy"} == {k: v for k, v in DEFAULT_POLICY.items() if k != "lumpy"}
    result = forecast(_panel(VALUES, NAMES), 4, policy=path)
    audit = result.audit.set_index("item")
    assert audit.loc["lumpy", "method"] == "tsb"
    assert audit.loc["lumpy", "parameters"].startswith("alpha=0.15, beta=")  # alpha fixed, beta optimised
    assert "policy.toml, line 3" in audit.loc["lumpy", "reason"]
    assert audit.loc["intermittent", "method"] == "sba"


def test_override_file_wins_over_the_table(tmp_path):
    path = tmp_path / "overrides.csv"
    path.write_text("item,method,alpha\nintermittent,zeros,\n\nsmooth,ses,0.3\n", encoding="utf-8")
    result = forecast(_panel(VALUES, NAMES), 4, overrides=path)
    audit = result.audit.set_index("item")
    assert audit.loc["intermittent", "method"] == "zeros"
    assert "overrides.csv, line 2" in audit.loc["intermittent", "reason"]
    assert (result.point.loc["intermittent"] == 0).all()
    assert audit.loc["smooth", "parameters"] == "alpha=0.3"  # blank line skipped: still line 4
    assert "overrides.csv, line 4" in audit.loc["smooth", "rule"]
    assert audit.loc["lumpy", "method"] == "sba"


def test_overrides_match_item_labels_given_as_text(tmp_path):
    path = tmp_path / "overrides.csv"
    path.write_text("item,method\n1,zeros\n", encoding="utf-8")
    result = forecast(VALUES, 2, overrides=path)  # integer item labels 0, 1, ...
    assert result.audit["method"].tolist()[1] == "zeros"


POLICY_ERRORS = [
    ('[patterns.lumpy]\nmethod = "holt"\n', 2, "unknown method 'holt'"),
    ('[patterns.bumpy]\nmethod = "tsb"\n', 1, "unknown pattern 'bumpy'"),
    ('[patterns.lumpy]\nmethod = "tsb"\ngamma = 0.2\n', 3, "unknown parameter 'gamma'"),
    ('\n[patterns.lumpy]\nmethod = "tsb"\nalpha = 2\n', 4, "alpha"),
    ('[patterns]\nlumpy = { method = "tsb", alpha = 2 }\n', 2, "alpha"),
    ('[patterns.lumpy]\nmethod = "tsb"\nalpha = \n', 3, "not valid TOML"),
    ('[patterns.lumpy]\nalpha = 0.1\n', 1, "needs a method"),
    ('[routing.lumpy]\nmethod = "tsb"\n', 1, "unknown section 'routing'"),
    ("patterns = 3\n", 1, "must hold tables"),
]


@pytest.mark.parametrize("text, line, part", POLICY_ERRORS)
def test_policy_file_errors_name_file_and_line(tmp_path, input_error, text, line, part):
    path = tmp_path / "policy.toml"
    path.write_text(text, encoding="utf-8")
    input_error(lambda: load_policy(path), "policy.toml", f"line {line}:", part)


OVERRIDE_ERRORS = [
    ("item,method\nlumpy,holt\n", 2, "unknown method 'holt'"),
    ("item,method,gamma\nlumpy,tsb,0.2\n", 2, "unknown parameter 'gamma'"),
    ("item,method,alpha\nlumpy,tsb,\nsmooth,ses,2\n", 3, "alpha"),
    ("item,method\nlumpy,tsb\nsmooth,ses\nlumpy,zeros\n", 4, "overridden twice"),
    ("item,method,alpha\nlumpy,tsb,0.1,9\n", 2, "4 cells where the header has 3"),
    ("item,method,alpha\n,tsb,0.1\n", 2, "empty item"),
]


@pytest.mark.parametrize("text, line, part", OVERRIDE_ERRORS)
def test_override_file_errors_name_file_and_line(tmp_path, input_error, text, line, part):
    path = tmp_path / "overrides.csv"
    path.write_text(text, encoding="utf-8")
    input_error(lambda: load_overrides(path), "overrides.csv", f"line {line}", part)


def test_override_for_an_unknown_item_names_file_and_line(tmp_path, input_error):
    path = tmp_path / "overrides.csv"
    path.write_text("item,method\nlumpy,tsb\nNO-SUCH-PART,zeros\n", encoding="utf-8")
    input_error(lambda: forecast(_panel(VALUES, NAMES), 3, overrides=path),
                "overrides.csv", "line 3", "unknown item 'NO-SUCH-PART'")


def test_override_file_without_method_column_lists_the_columns(tmp_path, input_error):
    path = tmp_path / "overrides.csv"
    path.write_text("item,model\nlumpy,tsb\n", encoding="utf-8")
    input_error(lambda: load_overrides(path), "overrides.csv", "missing column 'method'", "item, model")


def test_rules_given_from_python_are_checked_too(input_error):
    panel = _panel(VALUES, NAMES)
    input_error(lambda: forecast(panel, 3, policy={"lumpy": Rule("holt")}), "policy row 'lumpy'", "unknown method")
    input_error(lambda: forecast(panel, 3, overrides={"smooth": Rule("ses", {"alpha": 2})}), "'smooth'", "alpha")
    input_error(lambda: forecast(panel, 3, overrides={"nope": Rule("ses")}), "unknown item 'nope'")


# ---------------------------------------------------------------- holdout selection


def _holdout_panel() -> DemandPanel:
    rng = np.random.default_rng(11)
    n, t = 36, 80
    p = np.repeat([0.15, 0.35, 0.9], n // 3)[:, None]
    sizes = np.where(np.arange(n)[:, None] % 2 == 0, 1 + rng.poisson(2.0, (n, t)), 1 + rng.geometric(0.2, (n, t)))
    values = np.where(rng.random((n, t)) < p, sizes, 0).astype(float)
    values[:6, 60:] = np.where(values[:6, 60:] > 0, values[:6, 60:] * 3, 0)  # a few items jump
    return _panel(values)


HOLDOUT_CANDIDATES = ("zeros", "mean_since_first", "mean_all", "repeat_last", "sba")
# the router optimises SBA's constant within the intermittent range, by in-sample MSE
CANDIDATE_OPTIONS = {"sba": {"alpha": None, "cost": "mse", "bounds": INTERMITTENT_BOUNDS}}


def test_holdout_selection_picks_lowest_mean_rmsse_and_refits_on_full_history():
    panel, holdout = _holdout_panel(), 10
    result = forecast(panel, 5, selection="holdout", holdout=holdout, candidates=HOLDOUT_CANDIDATES,
                      change_level=None)
    table = result.selection
    assert list(table.columns) == ["pattern", "method", "mean_rmsse", "items", "scored_items", "chosen"]
    cut = panel.n_periods - holdout
    train, actual = panel.values[:, :cut], panel.values[:, cut:]
    start = np.array([np.flatnonzero(r > 0)[0] if (r > 0).any() else cut for r in train])
    patterns = result.classes["pattern"].to_numpy()
    assert set(table["pattern"]) == set(patterns) - {"too-short", "never-sold", "gone-quiet"}
    for pattern, rows in table.groupby("pattern"):
        items = np.flatnonzero(patterns == pattern)
        expected = {}
        for name in HOLDOUT_CANDIDATES:
            fit = M.fit(name, train[items], start[items], None, horizon=holdout, **CANDIDATE_OPTIONS.get(name, {}))
            # RMSSE of Makridakis, Spiliotis & Assimakopoulos (2022, IJF 38:1346-1364), via metrics.rmsse
            scores = np.asarray(rmsse(train[items], actual[items], fit.mean), dtype=float)
            expected[name] = np.nanmean(scores)
        got = rows.set_index("method")["mean_rmsse"]
        assert got.to_dict() == pytest.approx(expected, rel=1e-9)
        best = min(expected, key=expected.get)
        assert rows.set_index("method")["chosen"].to_dict() == {m: m == best for m in HOLDOUT_CANDIDATES}
        # the pick is refitted on the whole history
        full = M.fit(best, panel.values[items], panel.start[items], None, horizon=5, **CANDIDATE_OPTIONS.get(best, {}))
        np.testing.assert_allclose(result.point.to_numpy()[items], full.mean, rtol=1e-12)
        assert (result.audit["method"].to_numpy()[items] == best).all()
        assert all("holdout selection (10 periods" in r for r in result.audit["rule"].to_numpy()[items])


# ---------------------------------------------------------------- output contract


@pytest.fixture(scope="module")
def demo_result():
    from sparsedemand.demo import DemoSpec, make_demo

    frame = make_demo(DemoSpec(parts=40, days=200))
    return forecast(frame, 7), from_frame(frame)


def test_forecast_table_columns_steps_and_calendar(demo_result):
    result, panel = demo_result
    table = result.table()
    assert list(table.columns) == ["item", "step", "period", "forecast", *QCOLS]
    assert len(table) == 7 * panel.n_items
    assert table.groupby("item", sort=False)["step"].apply(list).map(lambda s: s == list(range(1, 8))).all()
    expected = pd.period_range(panel.periods[-1] + 1, periods=7, freq=panel.periods.freq)
    assert (table.groupby("item", sort=False)["period"].apply(list).map(lambda s: s == list(expected))).all()
    assert table["item"].unique().tolist() == panel.items.tolist()


def test_quantiles_are_monotone_and_nothing_is_negative(demo_result):
    table = demo_result[0].table()
    q = table[QCOLS].to_numpy()
    assert (np.diff(q, axis=1) >= 0).all()
    assert (q >= 0).all() and (table["forecast"] >= 0).all()
    assert np.isfinite(table["forecast"]).all()


AUDIT_COLUMNS = ["item", "pattern", "adi", "cv2", "n_demands", "method", "parameters", "in_sample_cost",
                 "reason", "warnings"]


def test_audit_has_one_row_per_item_with_reason_and_warnings(demo_result):
    result, panel = demo_result
    audit = result.audit
    assert set(AUDIT_COLUMNS) <= set(audit.columns)
    assert audit["item"].tolist() == panel.items.tolist()
    assert audit["reason"].map(lambda r: isinstance(r, str) and "->" in r).all()
    out = result.classes["unavailable_periods"].to_numpy() > 0
    assert out.any()  # the demo records stock-outs
    assert audit["warnings"][out].str.contains("out-of-stock periods left out").all()
    assert not audit["warnings"][~out].str.contains("out-of-stock").any()
    short = audit["pattern"] == "too-short"
    assert short.any() and audit["warnings"][short].str.contains("short history").all()


def test_failed_fit_falls_back_with_a_warning_and_a_matching_distribution(monkeypatch):
    real = M.fit

    def flaky(name, values, start, available, **options):
        fit = real(name, values, start, available, **options)
        if name == "sba":
            mean = fit.mean.copy()
            mean[0] = np.nan
            fit = M.MethodFit(fit.name, mean, fit.params, fit.cost, fit.distribution, fit.dist_params)
        return fit

    monkeypatch.setattr(route._methods, "fit", flaky)
    panel = _panel(VALUES, NAMES)
    result = forecast(panel, 3)
    audit = result.audit.set_index("item")
    first_sba = "erratic"  # the first item routed to SBA
    assert audit.loc[first_sba, "method"] == "mean_since_first"
    assert "sba could not be fitted: fell back to mean since first demand" in audit.loc[first_sba, "warnings"]
    assert audit.loc["intermittent", "method"] == "sba" and audit.loc["intermittent", "warnings"] == ""
    assert result.point.loc[first_sba].tolist() == pytest.approx([SERIES["erratic"].mean()] * 3)
    fc = result.item_forecasts()
    pos = NAMES.index(first_sba)
    assert fc.distribution[pos] == "empirical" and fc.distribution[NAMES.index("intermittent")] == "compound"


def _bootstrap_overrides(items):
    return {items[0]: Rule("mean_since_first"), items[1]: Rule("repeat_last"), items[2]: Rule("mean_all")}


def test_deterministic_for_a_seed_including_the_bootstrap_path(demo_result):
    panel = demo_result[1]
    items = panel.items.tolist()
    one = forecast(panel, 5, overrides=_bootstrap_overrides(items), seed=3)
    two = forecast(panel, 5, overrides=_bootstrap_overrides(items), seed=3)
    pd.testing.assert_frame_equal(one.table(), two.table())
    pd.testing.assert_frame_equal(one.audit, two.audit)
    assert (one.audit["distribution"].iloc[:3] == "empirical").all()


def test_bootstrap_quantiles_do_not_depend_on_the_other_items(demo_result):
    panel = demo_result[1]
    items = panel.items.tolist()
    whole = forecast(panel, 2, overrides={i: Rule("mean_since_first") for i in items}, seed=5)
    alone = forecast(panel.subset([7]), 2, overrides={items[7]: Rule("mean_since_first")}, seed=5)
    got = whole.table().query("item == @items[7]")[QCOLS].to_numpy()
    np.testing.assert_array_equal(got, alone.table()[QCOLS].to_numpy())


def test_panel_long_wide_and_array_give_the_same_forecast():
    rng = np.random.default_rng(4)
    values = np.where(rng.random((5, 30)) < 0.4, 1 + rng.poisson(2, (5, 30)), 0).astype(float)
    values[3] = 0.0
    values[4, :20] = 0.0
    items = [f"P{i}" for i in range(5)]
    months = pd.period_range("2022-01", periods=30, freq="M")
    panel = DemandPanel(values, items=pd.Index(items), periods=months)
    wide = pd.DataFrame(values, columns=[str(m) for m in months]).assign(item=items)
    long = wide.melt(id_vars="item", var_name="period", value_name="quantity")
    # one bootstrap item too; a bare array labels its items 0, 1, ...
    runs = [forecast(x, 4, overrides={"P0": Rule("mean_since_first")}) for x in (panel, long, wide)]
    runs.append(forecast(values, 4, overrides={0: Rule("mean_since_first")}))
    ref = runs[0]
    for other in runs[1:]:
        np.testing.assert_array_equal(other.point.to_numpy(), ref.point.to_numpy())
        np.testing.assert_array_equal(other.table()[QCOLS].to_numpy(), ref.table()[QCOLS].to_numpy())
        assert other.audit["method"].tolist() == ref.audit["method"].tolist()
    assert runs[1].table()["period"].tolist() == list(pd.period_range("2024-07", periods=4, freq="M")) * 5


def test_bad_options_are_one_line_errors(input_error):
    y = VALUES
    input_error(lambda: forecast(y, 0), "--horizon")
    input_error(lambda: forecast(y, 2, levels=(0.5, 1.0)), "--quantiles")
    input_error(lambda: forecast(y, 2, levels=(0.5, 0.5)), "--quantiles", "twice")
    input_error(lambda: forecast(y, 2, levels=("a",)), "--quantiles")
    input_error(lambda: forecast(y, 2, selection="best"), "--selection")
    input_error(lambda: forecast(y, 2, selection="holdout", holdout=59), "--holdout")
    input_error(lambda: forecast(y, 2, selection="holdout", candidates=("holt",)), "unknown method 'holt'")


# ---------------------------------------------------------------- quantiles against scipy


def _one_item_result(series: np.ndarray, rule: Rule, horizon: int = 2):
    panel = _panel(series[None, :], ["X"])
    result = forecast(panel, horizon, overrides={"X": rule})
    (rows, _, fit), = result.groups
    return result, fit


def test_zip_quantiles_equal_the_zero_inflated_poisson_mixture_from_scipy():
    rng = np.random.default_rng(8)
    y = np.where(rng.random(120) < 0.45, rng.poisson(4.0, 120), 0).astype(float)
    y[0] = 3.0
    result, fit = _one_item_result(y, Rule("zip"))
    pi, lam = fit.dist_params["pi"][0], fit.dist_params["lam"][0]
    assert 0.3 < pi < 0.75 and 3.0 < lam < 5.0
    # P(D <= k) = pi + (1 - pi) * Poisson(lam).cdf(k); the quantile is the smallest k reaching the level
    k = np.arange(60)
    cdf = pi + (1 - pi) * stats.poisson.cdf(k, lam)
    expected = [int(k[np.argmax(cdf >= level)]) for level in LEVELS]
    assert result.table()[QCOLS].iloc[0].tolist() == expected
    assert len(set(expected)) >= 3  # the levels are told apart
    assert result.point.iloc[0, 0] == pytest.approx((1 - pi) * lam)


@pytest.mark.parametrize("method, p", [
    # Croston (1972, ORQ 23:289-303) with alpha = 1: last size (1) over the last interval (8 periods)
    ("croston", 1 / 8),
    # SBA (Syntetos & Boylan 2005) multiplies by 1 - alpha / 2 = 0.5
    ("sba", 0.5 / 8),
])
def test_compound_bernoulli_with_unit_sizes_gives_bernoulli_quantiles(method, p):
    y = np.zeros(40)
    y[[3, 9, 14, 22, 30]] = 1.0
    result, fit = _one_item_result(y, Rule(method, {"alpha": 1.0}))
    assert fit.distribution == "compound"
    assert fit.dist_params["p"][0] == pytest.approx(p)
    assert result.point.iloc[0].tolist() == pytest.approx([p, p])
    expected = stats.bernoulli.ppf(LEVELS, p).astype(int).tolist()
    assert result.table()[QCOLS].iloc[0].tolist() == expected
    assert result.table()[QCOLS].iloc[1].tolist() == expected


# ---------------------------------------------------------------- quality bar


def _slow_movers(n: int, seed: int, history: int = 156, horizon: int = 12):
    """Non-stationary slow movers with known means (weekly periods, three years of history).

    Each item has a demand probability and a mean size; a fifth of the items keep both, the rest
    change: the probability jumps up or down at a random time in the second half, declines
    linearly to zero, or drops to zero at once. Sizes are 1 + Poisson (steady) or 1 + negative
    binomial (lumpy) with the item's mean. The true mean of a future period is probability x mean
    size.
    """
    rng = np.random.default_rng(seed)
    t = history + horizon
    kinds = rng.choice(["steady", "up", "down", "declining", "stopped"], size=n)
    p0 = np.where(rng.random(n) < 0.75, rng.uniform(0.03, 0.3, n), rng.uniform(0.3, 0.9, n))
    size = rng.uniform(1.5, 8.0, n)
    prob = np.repeat(p0[:, None], t, axis=1)
    for i, kind in enumerate(kinds):
        at = int(rng.integers(history // 2, history - 8))
        if kind == "up":
            prob[i, at:] = min(0.95, p0[i] * rng.uniform(1.5, 3.0))
        elif kind == "down":
            prob[i, at:] = p0[i] * rng.uniform(0.2, 0.5)
        elif kind == "declining":
            begin = int(rng.integers(history // 3, history - 30))
            end = int(rng.integers(begin + 20, t))
            prob[i, begin:end] = np.linspace(p0[i], 0.0, end - begin)
            prob[i, end:] = 0.0
        elif kind == "stopped":
            prob[i, at:] = 0.0
    extra = (size - 1.0)[:, None] * np.ones((1, t))
    lumpy = (rng.random(n) < 0.4)[:, None]
    shape = 0.7
    sizes = 1 + np.where(lumpy, rng.negative_binomial(shape, shape / (shape + extra)), rng.poisson(extra))
    demand = np.where(rng.random((n, t)) < prob, sizes, 0).astype(float)
    truth = prob[:, history:] * size[:, None]
    return demand[:, :history], truth


def test_routed_forecast_beats_naive_baselines_and_stays_near_the_best_single_method():
    # Enough items that a few lumpy ones cannot decide the comparison on their own.
    values, truth = _slow_movers(1000, seed=2026)
    horizon = truth.shape[1]
    panel = _panel(values)
    routed = forecast(panel, horizon).point.to_numpy()
    assert (routed >= 0).all()

    def mse(f):
        return float(np.mean((f - truth) ** 2))

    singles = {}
    for name in M.METHODS:
        options = M.method_options(name)
        free = {k: None for k in ("alpha", "beta", "window") if k in options and options[k] != "same"}
        free = free if "cost" in options else {}
        if name == "seasonal_mean":
            free["season_length"] = 52
        singles[name] = mse(M.fit(name, values, panel.start, None, horizon=horizon, **free).mean)
        if "bounds" in options:  # also as the router tunes them
            fit = M.fit(name, values, panel.start, None, horizon=horizon, bounds=INTERMITTENT_BOUNDS, **free)
            singles[f"{name} (router's range)"] = mse(fit.mean)
    got = mse(routed)
    # naive baselines: zeros, the mean since first demand, and the last 12 periods repeated
    for baseline in ("zeros", "mean_since_first", "repeat_last"):
        assert got < singles[baseline], (got, baseline, singles[baseline])
    best = min(singles, key=singles.get)
    tolerance = 1.15
    assert got <= tolerance * singles[best], (got, best, singles[best])


def test_hypergeometric_tails_match_scipy():
    # The rate-change test's exact tails against scipy.stats.hypergeom (general-purpose reference).
    from scipy.stats import hypergeom

    from sparsedemand.route import _hypergeom_tails

    rng = np.random.default_rng(3)
    population = rng.integers(16, 3000, 2000)
    successes = (rng.random(2000) * population).astype(np.int64)
    draws = np.maximum(population // 3, 8)
    lo = np.maximum(0, draws + successes - population)
    hi = np.minimum(draws, successes)
    x = (lo + rng.random(2000) * (hi - lo + 1)).astype(np.int64)
    low, high = _hypergeom_tails(x, population, successes, draws, np.ones(2000, dtype=bool))
    np.testing.assert_allclose(low, hypergeom.cdf(x, population, successes, draws), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(high, hypergeom.sf(x - 1, population, successes, draws), rtol=1e-10, atol=1e-300)

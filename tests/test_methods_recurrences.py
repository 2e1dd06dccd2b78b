"""Forecasting recurrences against hand-worked series and statsmodels."""

from __future__ import annotations

import numpy as np
import pytest

from sparsedemand import methods as M

# leading zeros are trimmed: the series the recurrences see is [4, 0, 0, 0, 2, 0, 6, 0]
SERIES = np.array([0, 0, 4, 0, 0, 0, 2, 0, 6, 0], dtype=float)


def test_croston_sba_sbj_hand_worked():
    # Croston (1972, Operational Research Quarterly 23:289-303), alpha = 0.2. Start values
    # z = first size 4, x = first interval 4: our convention. Demand 2 after 4 periods: z = 4 + .2(2-4) = 3.6,
    # x = 4 + .2(4-4) = 4. Demand 6 after 2: z = 3.6 + .2(6-3.6) = 4.08, x = 4 + .2(2-4) = 3.6.
    # Croston = 4.08 / 3.6 = 1.133333...
    assert M.croston(SERIES, 3, alpha=0.2) == pytest.approx([4.08 / 3.6] * 3, rel=1e-12)
    # SBA, Syntetos & Boylan (2005, IJF 21:303-314): times (1 - .2/2) = 0.9 -> 1.02
    assert M.sba(SERIES, alpha=0.2)[0] == pytest.approx(4.08 / 3.6 * 0.9, rel=1e-12)
    # SBJ, Shale, Boylan & Johnston (2006, JORS 57:588-592): times (1 - .2/1.8) -> 1.007407...
    assert M.sbj(SERIES, alpha=0.2)[0] == pytest.approx(4.08 / 3.6 * (1 - 0.2 / 1.8), rel=1e-12)


def test_croston_separate_constants_hand_worked():
    # size constant .5, interval constant .1 (separate constants as in Kourentzes 2014, IJPE
    # 156:180-190; from memory):
    # z: 4 -> 3 -> 4.5; x: 4 -> 4 -> 4 + .1(2-4) = 3.8; SBA factor uses the interval one: .95
    assert M.croston(SERIES, alpha=0.5, beta=0.1)[0] == pytest.approx(4.5 / 3.8, rel=1e-12)
    assert M.sba(SERIES, alpha=0.5, beta=0.1)[0] == pytest.approx(4.5 / 3.8 * 0.95, rel=1e-12)


def test_croston_in_sample_mse_hand_worked():
    # one-step forecasts over t = 1..7: 1, 1, 1 (errors -1), 1 at the demand of 2 (error +1),
    # then 3.6/4 = .9 (error -.9), .9 at the demand of 6 (error 5.1), then 4.08/3.6 (error -1.1333)
    errors = [-1, -1, -1, 1, -0.9, 5.1, -4.08 / 3.6]
    _, params, cost = M.croston(SERIES, alpha=0.2, return_params=True)
    assert cost == pytest.approx(np.mean(np.square(errors)), rel=1e-12)
    assert params == {"alpha": 0.2, "beta": 0.2}


def test_tsb_hand_worked():
    # TSB recurrence of Teunter, Syntetos & Babai (2011, EJOR 214:606-615), alpha = .2,
    # beta = .1. Start values z = first size 4, p = 1 / first interval = 1/4: our convention
    # (not fixed by the paper). Three zeros: p = .25 * .9**3 = .18225. Demand 2: p = .18225 + .1(1-.18225)
    # = .264025, z = 3.6. Zero: p = .2376225. Demand 6: p = .31386025, z = 4.08.
    # Zero: p = .282474225. Forecast p z = 1.1524948...
    assert M.tsb(SERIES, 2, alpha=0.2, beta=0.1) == pytest.approx([0.282474225 * 4.08] * 2, rel=1e-12)


def test_ses_matches_statsmodels_with_known_initial_level():
    # reference: statsmodels SimpleExpSmoothing (Seabold & Perktold 2010), initial level y[0]
    from statsmodels.tsa.holtwinters import SimpleExpSmoothing

    rng = np.random.default_rng(3)
    y = rng.poisson(0.8, 60) * (rng.random(60) < 0.4)
    y[0] = 3.0
    for alpha in (0.05, 0.3, 0.9):
        res = SimpleExpSmoothing(y.astype(float), initialization_method="known",
                                 initial_level=y[0]).fit(smoothing_level=alpha, optimized=False)
        ours, _, mse = M.ses(y, 2, alpha=alpha, return_params=True)
        assert ours == pytest.approx(res.forecast(2), rel=1e-10)
        errors = y[1:] - res.fittedvalues[1:]
        assert mse == pytest.approx(np.mean(errors**2), rel=1e-10)
        _, _, mae = M.ses(y, alpha=alpha, cost="mae", return_params=True)
        assert mae == pytest.approx(np.mean(np.abs(errors)), rel=1e-10)
        # the rate costs (MAR, MSR) of Kourentzes (2014, IJPE 156:180-190; from memory) on the
        # cumulative error
        _, _, msr = M.ses(y, alpha=alpha, cost="msr", return_params=True)
        assert msr == pytest.approx(np.mean(np.cumsum(errors) ** 2), rel=1e-9)
        _, _, mar = M.ses(y, alpha=alpha, cost="mar", return_params=True)
        assert mar == pytest.approx(np.mean(np.abs(np.cumsum(errors))), rel=1e-9)


def test_moving_average_hand_worked():
    # trimmed [4, 0, 0, 0, 2, 0, 6, 0]; order 3: (0 + 6 + 0) / 3 = 2 (common practice)
    assert M.moving_average(SERIES, window=3)[0] == pytest.approx(2.0)
    # in sample, order 2: forecasts for t=1..7 are 4, 2, 0, 0, 1, 1, 3 (partial window at t=1)
    actual = np.array([0, 0, 0, 2, 0, 6, 0])
    fc = np.array([4, 2, 0, 0, 1, 1, 3])
    _, params, cost = M.moving_average(SERIES, window=2, return_params=True)
    assert cost == pytest.approx(np.mean((actual - fc) ** 2))
    assert params == {"window": 2.0}


def test_adida_hand_worked():
    # ADIDA (Nikolopoulos et al. 2011, JORS 62:544-554), buckets of 4 aligned to the end:
    # [4,0,0,0] [2,0,6,0] -> bucket series 4, 8; SES .5: 4 -> 6; per period 6/4 = 1.5
    assert M.adida(SERIES, level=4, method="ses", alpha=0.5)[0] == pytest.approx(1.5)
    # IMAPA (Petropoulos & Kourentzes 2015, JORS 66:914-924): mean over levels 1 and 2.
    # level 1 SES .5 on [4,0,0,0,2,0,6,0]: 4,2,1,.5,1.25,.625,3.3125,1.65625
    # level 2 buckets [4,0] [0,0] [2,0] [6,0] -> 4, 0, 2, 6: 4, 2, 2, 4 -> per period 2
    assert M.imapa(SERIES, max_level=2, method="ses", alpha=0.5)[0] == pytest.approx(
        (1.65625 + 2.0) / 2
    )


def test_baselines_hand_worked():
    y = np.array([0, 0, 3, 0, 1, 2, 0, 4], dtype=float)
    assert M.zeros(y, 2).tolist() == [0.0, 0.0]
    assert M.mean_all(y)[0] == pytest.approx(10 / 8)
    assert M.mean_since_first(y)[0] == pytest.approx(10 / 6)
    assert M.mean_recent(y, window=3)[0] == pytest.approx(2.0)
    assert M.repeat_last(y, 3).tolist() == [2.0, 0.0, 4.0]
    assert M.repeat_last(y, 4, window=1).tolist() == [4.0] * 4
    # same period one and two seasons back (season 3): next period <- y[5], y[2]
    assert M.seasonal_mean(y, 3, season_length=3).tolist() == pytest.approx([2.5, 0.0, 2.5])

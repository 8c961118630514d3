"""Tests of swimlab.protocols.endurance against published tables, statsmodels and lifelines."""

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.duration.survfunc import SurvfuncRight
from statsmodels.tools import numdiff

from swimlab.errors import InputError
from swimlab.protocols import endurance as E

DATA = Path(__file__).parent / "data"


# --- Kaplan–Meier -----------------------------------------------------------------------------


@pytest.mark.parametrize("row", pd.read_csv(DATA / "protocols_km_bewick2004.csv").to_dict("records"))
def test_kaplan_meier_bewick2004_table2(row):
    # Bewick, Cheek & Ball (2004), Table 2: times 1, 1, 4, 5, 6+, 9, 9+, 22 (+ = censored).
    times = [1, 1, 4, 5, 6, 9, 9, 22]
    fatigued = [1, 1, 1, 1, 0, 1, 0, 1]
    table = E.kaplan_meier(times, fatigued).set_index("time_s")
    assert table.loc[row["time_days"], "share_swimming"] == pytest.approx(row["expected"], abs=row["tolerance"])


def test_kaplan_meier_hand_worked_with_greenwood():
    # Worked by hand. Six fish; times [s] 2, 3, 3+, 5, 6+, 8 (+ = still swimming).
    #   t=2: 6 at risk, 1 fatigued -> S = 5/6          = 0.8333
    #   t=3: 5 at risk, 1 fatigued (1 censored at 3) -> S = 5/6 · 4/5 = 0.6667
    #   t=5: 3 at risk (5, 6+, 8), 1 fatigued -> S = 0.6667 · 2/3 = 0.4444
    #   t=6: censored, S unchanged;  t=8: 1 at risk, 1 fatigued -> S = 0
    # Greenwood at t=5: Σ d/(n(n−d)) = 1/30 + 1/20 + 1/6 = 0.25 -> se = 0.4444 · 0.5 = 0.2222
    table = E.kaplan_meier([2, 3, 3, 5, 6, 8], [True, True, False, True, False, True]).set_index("time_s")
    assert table["share_swimming"].to_list() == pytest.approx([5 / 6, 2 / 3, 4 / 9, 4 / 9, 0.0], abs=1e-12)
    assert table.loc[3, "at_risk"] == 5 and table.loc[3, "censored"] == 1
    assert table.loc[5, "share_swimming_se"] == pytest.approx(4 / 9 * 0.5, abs=1e-12)
    assert table.loc[8, "share_swimming_se"] == 0.0


def test_kaplan_meier_matches_statsmodels_survfuncright():
    # Reference: statsmodels SurvfuncRight (Kaplan–Meier with Greenwood standard errors).
    rng = np.random.default_rng(11)
    times = np.round(rng.exponential(3000.0, 60), -1)  # rounding makes ties
    fatigued = rng.random(60) < 0.7
    ours = E.kaplan_meier(times, fatigued)
    ours = ours[ours["fatigued"] > 0].reset_index(drop=True)
    ref = SurvfuncRight(times, fatigued.astype(int))
    np.testing.assert_allclose(ours["time_s"], ref.surv_times, rtol=0, atol=0)
    np.testing.assert_allclose(ours["share_swimming"], ref.surv_prob, rtol=1e-12)
    np.testing.assert_allclose(ours["at_risk"], ref.n_risk)
    finite = np.isfinite(ref.surv_prob_se) & (ref.surv_prob > 0)
    np.testing.assert_allclose(ours["share_swimming_se"][finite], ref.surv_prob_se[finite], rtol=1e-10)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 50), st.booleans()), min_size=1, max_size=40))
def test_kaplan_meier_is_a_non_increasing_share(sample):
    times, fatigued = zip(*sample, strict=True)
    table = E.kaplan_meier(list(times), list(fatigued))
    share = table["share_swimming"].to_numpy()
    assert np.all(np.diff(share) <= 1e-15)
    assert np.all((share >= 0) & (share <= 1))
    assert np.all(np.diff(table["at_risk"].to_numpy()) < 0)
    assert table["fatigued"].sum() + table["censored"].sum() == len(sample)


def test_kaplan_meier_by_speed_groups():
    table = E.kaplan_meier_by_speed([0.5, 0.5, 0.7, 0.7], [100, 200, 50, 60], [1, 0, 1, 1])
    assert list(table["speed_m_s"]) == [0.5, 0.5, 0.7, 0.7]
    assert table.groupby("speed_m_s")["share_swimming"].last().to_list() == [0.5, 0.0]


def test_kaplan_meier_bad_input_names_the_field():
    with pytest.raises(InputError) as err:
        E.kaplan_meier([10, 20], [1, 2])
    assert err.value.field == "fatigued" and err.value.row == 2
    with pytest.raises(InputError) as err:
        E.kaplan_meier([10, -1], [1, 1])
    assert "times_s" in str(err.value)
    with pytest.raises(InputError):
        E.kaplan_meier([10, 20, 30], [1, 1])


# --- outcomes and time limit ------------------------------------------------------------------


def test_endurance_outcomes_censor_at_the_limit():
    time, fatigued = E.endurance_outcomes([600.0, None, np.nan, 7200.0], 7200.0)
    assert time.tolist() == [600.0, 7200.0, 7200.0, 7200.0]
    assert fatigued.tolist() == [True, False, False, True]


def test_endurance_without_time_limit_is_an_input_error():
    with pytest.raises(InputError) as err:
        E.endurance_outcomes([600.0], None)
    assert err.value.field == "time_limit_s"
    with pytest.raises(InputError) as err:
        E.max_sustained_speed([0.5], [600.0], [True], None)
    assert err.value.field == "time_limit_s"


def test_fatigue_time_beyond_limit_is_an_input_error():
    with pytest.raises(InputError) as err:
        E.endurance_outcomes([600.0, 9000.0], 7200.0)
    assert err.value.field == "fatigue_time_s" and err.value.row == 2


# --- censored fatigue curve -------------------------------------------------------------------


def _sample():
    return pd.read_csv(DATA / "protocols_endurance_sample.csv")


@pytest.mark.parametrize("row", pd.read_csv(DATA / "protocols_lognormal_aft_lifelines.csv").to_dict("records"))
def test_fatigue_curve_matches_lifelines_lognormal_aft(row):
    # Reference: lifelines LogNormalAFTFitter on the stored sample (tests/data/protocols_lifelines_reference.py).
    data = _sample()
    fit = E.fatigue_curve(data.speed_m_s, data.time_s, data.fatigued.astype(bool), time_limit_s=7200.0)
    if row["parameter"] == "log_likelihood_ln":
        # lifelines' log-likelihood is of natural-log times with the Jacobian of t:
        # ll_ln = ll_log10 − n_fatigued · ln(ln 10) − Σ_fatigued ln t
        e = data.fatigued.astype(bool)
        ll_ln = fit.log_likelihood - e.sum() * math.log(math.log(10)) - np.log(data.time_s[e]).sum()
        assert ll_ln == pytest.approx(row["expected"], abs=row["tolerance"])
        return
    value = getattr(fit, row["parameter"])
    se = getattr(fit, row["parameter"] + "_se")
    assert value == pytest.approx(row["expected"], abs=row["tolerance"])
    assert se == pytest.approx(row["expected_se"], rel=1e-3)  # two numerical Hessians agree to ~1e-5


def test_fatigue_curve_without_censoring_is_least_squares():
    # Reference: statsmodels OLS. With no censored fish the Tobit MLE is the least-squares line;
    # its SEs use σ² = RSS/n rather than RSS/(n − 2), so they are OLS's × sqrt((n − 2)/n).
    rng = np.random.default_rng(5)
    u = np.repeat([0.4, 0.6, 0.8], 7)
    t = 10 ** (5.0 - 2.0 * u + 0.2 * rng.standard_normal(u.size))
    fit = E.fatigue_curve(u, t, np.ones(u.size, bool))
    ols = sm.OLS(np.log10(t), sm.add_constant(u)).fit()
    assert fit.intercept == pytest.approx(ols.params[0], abs=1e-7)
    assert fit.slope == pytest.approx(ols.params[1], abs=1e-7)
    assert fit.sigma == pytest.approx(math.sqrt(ols.ssr / u.size), rel=1e-6)
    shrink = math.sqrt((u.size - 2) / u.size)
    assert fit.intercept_se == pytest.approx(ols.bse[0] * shrink, rel=1e-4)
    assert fit.slope_se == pytest.approx(ols.bse[1] * shrink, rel=1e-4)
    assert not any(f["code"] == "ENDURANCE_CENSORED" for f in fit.flags)


def _simulate(seed, a=5.4, b=-3.0, s=0.25, limit=7200.0, per_speed=10):
    rng = np.random.default_rng(seed)
    u = np.repeat([0.45, 0.55, 0.65, 0.75, 0.85], per_speed)
    t = 10 ** (a + b * u + s * rng.standard_normal(u.size))
    fatigued = t <= limit
    return u, np.where(fatigued, t, limit), fatigued


def test_fatigue_curve_recovers_simulated_truth_with_censoring():
    # Simulation with known truth: log10 T = 5.4 − 3.0 U + 0.25 ε, limit 2 h (about 30 % censored).
    u, t, e = _simulate(2026)
    assert 0.15 < (~e).mean() < 0.5
    fit = E.fatigue_curve(u, t, e, time_limit_s=7200.0)
    assert fit.converged and fit.n_censored == int((~e).sum())
    # within 3 standard errors (a 3-sigma band fails by chance about 0.3 % of the time; seeded)
    assert abs(fit.intercept - 5.4) < 3 * fit.intercept_se
    assert abs(fit.slope + 3.0) < 3 * fit.slope_se
    assert abs(fit.sigma - 0.25) < 3 * fit.sigma_se
    assert any(f["code"] == "ENDURANCE_CENSORED" for f in fit.flags)
    # Ignoring censoring (least squares on the limit as if it were fatigue) is biased shallow:
    naive = np.polyfit(u, np.log10(t), 1)[0]
    assert naive > fit.slope


def test_tobit_slope_interval_coverage():
    # Simulation: 95 % Wald intervals for the slope should cover the truth in about 95 % of
    # samples. 60 replicates: binomial sd of the coverage is 2.8 %, so 0.85–1.0 is a 3.5-sd band.
    hits = 0
    for seed in range(60):
        u, t, e = _simulate(seed, per_speed=8)
        fit = E.fatigue_curve(u, t, e)
        hits += abs(fit.slope + 3.0) <= 1.96 * fit.slope_se
    assert 0.85 <= hits / 60 <= 1.0


def test_speed_half_fatigued_truth_and_consistency():
    u, t, e = _simulate(77, per_speed=16)
    fit = E.fatigue_curve(u, t, e)
    res = E.speed_half_fatigued(fit, 7200.0)
    truth = (math.log10(7200.0) - 5.4) / -3.0
    assert res.protocol == "endurance"
    assert abs(res.speed_m_s - truth) < 3 * res.se_m_s
    # by construction the model gives half fatigued at that speed
    assert fit.share_fatigued(res.speed_m_s, 7200.0) == pytest.approx(0.5, abs=1e-12)
    assert fit.median_time_s(res.speed_m_s) == pytest.approx(7200.0, rel=1e-10)
    res90 = E.speed_half_fatigued(fit, 7200.0, share=0.9)
    assert fit.share_fatigued(res90.speed_m_s, 7200.0) == pytest.approx(0.9, abs=1e-12)
    assert res90.speed_m_s > res.speed_m_s


def test_speed_half_fatigued_delta_gradient_matches_numerical():
    # The delta-method gradient of U_p = (log10 L − a − σ z)/b, checked by statsmodels' numdiff.
    u, t, e = _simulate(3)
    fit = E.fatigue_curve(u, t, e)
    z = 1.2815515655446004  # Φ⁻¹(0.9)

    def speed(theta):
        a, b, s = theta
        return (math.log10(7200.0) - a - s * z) / b

    theta = np.array([fit.intercept, fit.slope, fit.sigma])
    grad = numdiff.approx_fprime(theta, speed, centered=True)
    cov = np.asarray(fit.covariance)
    se_numeric = math.sqrt(grad @ cov @ grad)
    assert E.speed_half_fatigued(fit, 7200.0, share=0.9).se_m_s == pytest.approx(se_numeric, rel=1e-6)


def test_fatigue_curve_needs_two_fatigued_fish_and_two_speeds():
    with pytest.raises(InputError) as err:
        E.fatigue_curve([0.5, 0.6, 0.7], [100, 7200, 7200], [True, False, False])
    assert err.value.field == "fatigued"
    with pytest.raises(InputError) as err:
        E.fatigue_curve([0.5, 0.5, 0.5], [100, 200, 300], [True, True, True])
    assert err.value.field == "speed_m_s"
    with pytest.raises(InputError) as err:
        E.fatigue_curve([0.5, 0.6, 0.7], [100, 200, 8000], [True, True, False], time_limit_s=7200)
    assert err.value.field == "time_s" and err.value.row == 3


def test_speed_half_fatigued_with_rising_endurance_gives_none_and_flag():
    fit = E.fatigue_curve([0.4, 0.4, 0.8, 0.8], [100, 120, 900, 1000], [True] * 4)
    res = E.speed_half_fatigued(fit, 600.0)
    assert res.speed_m_s is None and res.flags[0]["code"] == "FIT_POORLY_CONSTRAINED"


# --- maximum sustained speed ------------------------------------------------------------------


def test_max_sustained_speed_hand_worked():
    # Limit 200 min. 0.4 and 0.5 m/s: all fish lasted; 0.6: one of three fatigued; 0.8: none
    # fatigued (small sample) -> listed, not used. Maximum sustained speed 0.5 m/s.
    limit = 12000.0
    speed = [0.4, 0.4, 0.5, 0.5, 0.6, 0.6, 0.6, 0.8]
    time = [limit, limit, limit, limit, 5000.0, limit, limit, limit]
    fatigued = [False, False, False, False, True, False, False, False]
    res = E.max_sustained_speed(speed, time, fatigued, limit)
    assert res.protocol == "endurance"
    assert res.speed_m_s == 0.5
    assert res.faster_without_fatigue_m_s == (0.8,)
    assert res.table["n_fatigued"].to_list() == [0, 0, 1, 0]


def test_max_sustained_speed_none_when_slowest_fails():
    res = E.max_sustained_speed([0.4, 0.5], [100.0, 50.0], [True, True], 600.0)
    assert res.speed_m_s is None


# --- fatigue curves per gait --------------------------------------------------------------------


def _gait_sample():
    return pd.read_csv(DATA / "protocols_endurance_gait_sample.csv")


@pytest.mark.parametrize("row", pd.read_csv(DATA / "protocols_lognormal_aft_by_gait_lifelines.csv").to_dict("records"))
def test_fatigue_curve_per_gait_matches_lifelines(row):
    # Reference: lifelines LogNormalAFTFitter on each gait's fish alone
    # (tests/data/protocols_gait_lifelines_reference.py); 15 of the 24 steady fish are censored.
    data = _gait_sample()
    res = E.fatigue_curves_by_gait(data.speed_m_s, data.time_s, data.fatigued.astype(bool), data.gait,
                                   time_limit_s=7200.0)
    fit = res.curves[row["gait"]]
    if row["parameter"] == "log_likelihood_ln":
        own = data[data.gait == row["gait"]]
        e = own.fatigued.astype(bool)
        ll_ln = fit.log_likelihood - e.sum() * math.log(math.log(10)) - np.log(own.time_s[e]).sum()
        assert ll_ln == pytest.approx(row["expected"], abs=row["tolerance"])
        return
    assert getattr(fit, row["parameter"]) == pytest.approx(row["expected"], abs=row["tolerance"])
    assert getattr(fit, row["parameter"] + "_se") == pytest.approx(row["expected_se"], rel=1e-3)


def _two_gaits(seed, per_speed=10, same_curve=False):
    """Simulation with known truth: steady caudal below 0.75 m/s, burst-and-coast above."""
    rng = np.random.default_rng(seed)
    u_s = np.repeat([0.40, 0.50, 0.60, 0.70], per_speed)
    u_b = np.repeat([0.75, 0.85, 0.95], per_speed)
    a_b, b_b = (5.6, -2.8) if same_curve else (8.9, -7.2)
    t = np.r_[10 ** (5.6 - 2.8 * u_s + 0.25 * rng.standard_normal(u_s.size)),
              10 ** (a_b + b_b * u_b + 0.20 * rng.standard_normal(u_b.size))]
    u = np.r_[u_s, u_b]
    gait = np.r_[["steady_caudal"] * u_s.size, ["burst_and_coast"] * u_b.size]
    done = t <= 7200.0
    return u, np.where(done, t, 7200.0), done, gait


def test_fatigue_curves_per_gait_recover_simulated_truth_and_their_break():
    u, t, e, g = _two_gaits(404)
    res = E.fatigue_curves_by_gait(u, t, e, g, time_limit_s=7200.0)
    steady, burst = res.curves["steady_caudal"], res.curves["burst_and_coast"]
    # within 3 standard errors of the truth (seeded)
    assert abs(steady.slope + 2.8) < 3 * steady.slope_se and abs(burst.slope + 7.2) < 3 * burst.slope_se
    assert abs(steady.intercept - 5.6) < 3 * steady.intercept_se
    # one pooled line through both domains is rejected (Wilks 1938 likelihood ratio, 3 df)
    assert res.lr_df == 3 and res.lr_p < 1e-3
    assert res.lr_statistic == pytest.approx(
        2 * (steady.log_likelihood + burst.log_likelihood - res.pooled.log_likelihood), rel=1e-12)
    # the lines meet where 5.6 − 2.8 U = 8.9 − 7.2 U, U = 0.75 m/s
    assert res.break_speed_m_s == pytest.approx(0.75, abs=0.04)
    assert res.n_fish == {"steady_caudal": 40, "burst_and_coast": 30} and res.not_recorded == 0


def test_one_curve_across_gaits_is_rarely_rejected():
    # Simulation: both gaits on the same line. The LR test at 5 % should reject about 1 in 20;
    # 40 replicates: binomial mean 2, sd 1.4, so at most 7 (3.6 sd) rejections.
    rejected = 0
    for seed in range(40):
        u, t, e, g = _two_gaits(seed, per_speed=6, same_curve=True)
        rejected += E.fatigue_curves_by_gait(u, t, e, g).lr_p < 0.05
    assert rejected <= 7


def test_a_gait_with_too_few_trials_gets_no_curve_and_says_why():
    u, t, e, g = _two_gaits(9)
    keep = np.r_[np.arange(40), 40, 50, 60]  # three burst fish only
    g = g.astype(object)
    g[5] = None  # one steady fish without a recorded gait
    res = E.fatigue_curves_by_gait(u[keep], t[keep], e[keep], g[keep])
    assert set(res.curves) == {"steady_caudal"}
    assert "3 fish (3 fatigued) at 3 speed(s)" in res.too_few["burst_and_coast"]
    assert "at least 4 fish" in res.too_few["burst_and_coast"]
    assert res.not_recorded == 1 and res.lr_p is None and res.break_speed_m_s is None


def test_gait_of_the_wrong_length_names_the_field():
    u, t, e, g = _two_gaits(1)
    with pytest.raises(InputError) as err:
        E.fatigue_curves_by_gait(u, t, e, g[:-1])
    assert err.value.field == "gait"

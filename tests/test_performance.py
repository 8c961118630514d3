"""Tests of swimlab.performance against outside sources and simulations whose truth is known.

Each check names its source. "Worked by hand" means the expected value was computed by hand from
the published formula because no published worked case could be read.
"""

from __future__ import annotations

import math
import statistics
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.constants
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize
from scipy import stats as sps

from swimlab import performance as perf
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings

DATA = Path(__file__).parent / "data"


def codes(flags) -> list[str]:
    return [f["code"] for f in flags]


# --------------------------------------------------------------------------------------------
# Ucrit (Brett 1964)
# --------------------------------------------------------------------------------------------

UCRIT_CASES = pd.read_csv(DATA / "performance_ucrit_worked.csv")


@pytest.mark.parametrize("row", UCRIT_CASES.to_dict("records"), ids=list(UCRIT_CASES["case"]))
def test_ucrit_worked_cases(row):
    # Source: worked by hand from Brett (1964), see the CSV's source column.
    speeds = [float(v) for v in str(row["step_speeds_m_s"]).split(";")]
    durations = [float(v) for v in str(row["step_durations_s"]).split(";")]
    length = None if pd.isna(row["body_length_m"]) else row["body_length_m"]
    result = perf.ucrit(speeds, durations if len(durations) > 1 else durations[0],
                        row["fatigue_time_s"], body_length_m=length)
    assert result.method == "brett1964"
    assert result.ucrit_m_s == pytest.approx(row["expected_ucrit_m_s"], abs=row["tolerance"])
    if length is not None:
        assert result.ucrit_bl_s == pytest.approx(row["expected_ucrit_bl_s"], abs=row["tolerance"])
    else:
        assert result.ucrit_bl_s is None


def test_ucrit_reports_the_terms_of_brett_formula():
    # Worked by hand: steps 0.1…0.5 m/s of 1200 s, fatigue at 4200 s → final step 4 (0.40 m/s).
    r = perf.ucrit([0.1, 0.2, 0.3, 0.4, 0.5], 1200, 4200)
    assert r.last_completed_speed_m_s == pytest.approx(0.3)
    assert r.increment_m_s == pytest.approx(0.1)
    assert r.step_duration_s == 1200
    assert r.time_in_final_step_s == pytest.approx(600)
    assert r.n_completed_steps == 3
    assert r.final_step == 4
    assert r.flags == ()


@settings(max_examples=60, deadline=None)
@given(
    n_steps=st.integers(3, 12),
    increment=st.floats(0.02, 0.3),
    start=st.floats(0.05, 0.5),
    duration=st.floats(300, 3600),
    position=st.floats(0.0, 1.0),
    frac=st.floats(0.001, 0.999),
)
def test_ucrit_recovers_simulated_critical_speed_within_one_percent(n_steps, increment, start, duration,
                                                                    position, frac):
    # Simulation with known truth: a fish whose critical speed is U* fatigues in the step above
    # U*, after the share (U* − U_i)/U_ii of the step (the interpolation Brett 1964 assumes).
    # Acceptance: Ucrit within 1 %.
    speeds = start + increment * np.arange(n_steps)
    k = int(round(position * (n_steps - 2)))  # index of the last completed step
    truth = speeds[k] + frac * increment
    fatigue = (k + 1) * duration + frac * duration
    result = perf.ucrit(speeds, duration, fatigue)
    assert result.ucrit_m_s == pytest.approx(truth, rel=0.01)
    assert abs(result.ucrit_m_s - truth) <= 1e-9 * truth  # in fact exact to rounding
    assert result.n_completed_steps == k + 1


@settings(max_examples=40, deadline=None)
@given(
    incs=st.lists(st.floats(0.02, 0.3), min_size=3, max_size=8),
    durs=st.lists(st.floats(120, 3600), min_size=4, max_size=9),
    step=st.integers(1, 7),
)
def test_ucrit_is_continuous_at_step_boundaries_and_rises_with_time(incs, durs, step):
    # Property of Brett's formula with each step's own increment and duration: at the end of a
    # step Ucrit equals that step's speed from either side, and it rises with fatigue time.
    n = min(len(incs) + 1, len(durs))
    speeds = 0.1 + np.concatenate([[0.0], np.cumsum(incs)])[:n]
    durations = np.array(durs[:n])
    k = min(step, n - 2)
    boundary = float(np.cumsum(durations)[k])
    at = perf.ucrit(speeds, durations, boundary).ucrit_m_s
    after = perf.ucrit(speeds, durations, boundary * (1 + 1e-12) + 1e-9).ucrit_m_s
    assert at == pytest.approx(speeds[k], rel=1e-9)
    assert after == pytest.approx(speeds[k], rel=1e-6)
    times = np.linspace(durations[0] * 1.001, np.cumsum(durations)[-1], 25)
    values = [perf.ucrit(speeds, durations, t).ucrit_m_s for t in times]
    assert np.all(np.diff(values) >= -1e-12)


def test_ucrit_fatigue_not_recorded_gives_no_value_and_a_flag():
    for missing in (None, float("nan")):
        r = perf.ucrit([0.1, 0.2, 0.3], 1200, missing)
        assert r.ucrit_m_s is None and r.ucrit_bl_s is None
        assert codes(r.flags) == ["FATIGUE_NOT_RECORDED"]


def test_ucrit_fatigue_before_first_step_is_flagged_or_refused():
    r = perf.ucrit([0.1, 0.2, 0.3], 1200, -30)
    assert r.ucrit_m_s is None
    assert codes(r.flags) == ["FATIGUE_OUTSIDE_STEP"]
    assert "before the first step" in r.flags[0]["message"]
    with pytest.raises(InputError, match="before the first step") as info:
        perf.ucrit([0.1, 0.2, 0.3], 1200, 0.0, strict=True)
    assert info.value.field == "fatigue_time_s"


def test_ucrit_fatigue_after_schedule_is_flagged_or_refused():
    r = perf.ucrit([0.1, 0.2, 0.3], 1200, 3601)
    assert r.ucrit_m_s is None and codes(r.flags) == ["FATIGUE_OUTSIDE_STEP"]
    assert "after the end of the schedule" in r.flags[0]["message"]
    with pytest.raises(InputError, match="after the end"):
        perf.ucrit([0.1, 0.2, 0.3], 1200, 3601, strict=True)


def test_ucrit_fatigue_within_first_step_has_no_completed_step():
    r = perf.ucrit([0.1, 0.2, 0.3], 1200, 600)
    assert r.ucrit_m_s is None
    assert codes(r.flags) == ["NO_STEP_COMPLETED"]
    assert r.n_completed_steps == 0
    with pytest.raises(InputError, match="first step"):
        perf.ucrit([0.1, 0.2, 0.3], 1200, 600, strict=True)


def test_ucrit_flags_uneven_and_short_steps():
    lab = DEFAULT_SETTINGS
    # Durations 1200, 1200, 600: spread 50 % of the median > 10 %; 600 s ≥ 300 s is not short.
    r = perf.ucrit([0.1, 0.2, 0.3, 0.4], [1200, 1200, 600, 1200], 2700)
    assert codes(r.flags) == ["STEPS_UNEVEN"]
    assert "durations" in r.flags[0]["message"]
    # Increments 0.1, 0.1, 0.2: uneven increments.
    r = perf.ucrit([0.1, 0.2, 0.3, 0.5], 1200, 4000)
    assert codes(r.flags) == ["STEPS_UNEVEN"] and "increments" in r.flags[0]["message"]
    # The final step's actual increment is used: 0.3 + (400/1200)·0.2.
    assert r.ucrit_m_s == pytest.approx(0.3 + 400 / 1200 * 0.2)
    # Steps of 120 s are shorter than the lab's 300 s minimum.
    r = perf.ucrit([0.1, 0.2, 0.3], 120, 300)
    assert codes(r.flags).count("STEPS_TOO_SHORT") == 3
    assert r.flags[0]["step"] == 1
    # The thresholds are lab settings.
    relaxed = LabSettings(step_duration_min_s=60.0, step_unevenness_max=1.0)
    assert perf.ucrit([0.1, 0.2, 0.3], 120, 300, settings=relaxed).flags == ()
    assert lab.step_duration_min_s == 300.0


def test_ucrit_bad_schedules_raise_clear_errors():
    with pytest.raises(InputError, match="must rise"):
        perf.ucrit([0.1, 0.3, 0.2], 1200, 2000)
    with pytest.raises(InputError, match="3 values but step_speeds_m_s has 4"):
        perf.ucrit([0.1, 0.2, 0.3, 0.4], [1200, 1200, 1200], 2000)
    with pytest.raises(InputError, match="step_durations_s must be greater than zero"):
        perf.ucrit([0.1, 0.2], [1200, 0], 2000)
    with pytest.raises(InputError, match="body_length_m"):
        perf.ucrit([0.1, 0.2], 1200, 2000, body_length_m=-0.2)


# --------------------------------------------------------------------------------------------
# Speed–MO2 fits
# --------------------------------------------------------------------------------------------

SPEEDS_8X3 = np.repeat(np.linspace(0.2, 0.9, 8), 3)  # 8 steps, 3 measure phases each [m/s]
POWER_TRUTH = {"a": 80.0, "b": 300.0, "c": 2.2}  # invented, fish-like [mg O2 kg⁻¹ h⁻¹, -]
EXP_TRUTH = {"a": 80.0, "b": 2.0}


def simulate(model: str, seed: int, speeds=SPEEDS_8X3, cv=0.05) -> np.ndarray:
    """MO2 with proportional (log-normal) scatter of coefficient ``cv`` about a known curve."""
    rng = np.random.default_rng(seed)
    if model == "power":
        mean = POWER_TRUTH["a"] + POWER_TRUTH["b"] * speeds ** POWER_TRUTH["c"]
    else:
        mean = EXP_TRUTH["a"] * np.exp(EXP_TRUTH["b"] * speeds)
    return mean * np.exp(rng.normal(0.0, cv, speeds.size))


def test_noise_free_curves_return_their_parameters():
    # Simulation with known truth, no scatter: both fits return the generating parameters.
    u = np.linspace(0.1, 1.0, 10)
    expo = perf.fit_speed_metabolism(u, 80 * np.exp(2.0 * u), n_boot=0).exponential
    assert expo.params["a"] == pytest.approx(80, rel=1e-10)
    assert expo.params["b"] == pytest.approx(2.0, rel=1e-10)
    power = perf.fit_speed_metabolism(u, 80 + 300 * u**2.2, n_boot=0).power
    for key, value in POWER_TRUTH.items():
        assert power.params[key] == pytest.approx(value, rel=1e-6)  # optimiser tolerance


def test_exponential_fit_matches_polyfit_and_statsmodels_on_the_log_linear_form():
    # Reference: numpy.polyfit and statsmodels OLS of ln MO2 on U (outside implementations).
    y = simulate("exponential", 7)
    fit = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0).exponential
    slope, intercept = np.polyfit(SPEEDS_8X3, np.log(y), 1)
    assert fit.params["b"] == pytest.approx(slope, rel=1e-10)
    assert fit.params["a"] == pytest.approx(math.exp(intercept), rel=1e-10)
    ols = sm.OLS(np.log(y), sm.add_constant(SPEEDS_8X3)).fit()
    lo, hi = ols.conf_int()[1]
    assert fit.ci95["b"] == pytest.approx((lo, hi), rel=1e-10)
    assert fit.se["b"] == pytest.approx(ols.bse[1], rel=1e-10)
    np.testing.assert_allclose(fit.residuals, y - fit.predict(SPEEDS_8X3), rtol=1e-12)


def test_power_fit_matches_scipy_curve_fit():
    # Reference: scipy.optimize.curve_fit (Levenberg–Marquardt, unbounded) on the same data, on
    # MO2 for the additive error model and on ln MO2 for the proportional one.
    y = simulate("power", 11)
    fit = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0, scatter="additive").power
    popt, pcov = optimize.curve_fit(lambda u, a, b, c: a + b * u**c, SPEEDS_8X3, y, p0=[50, 200, 2])
    for i, key in enumerate("abc"):
        assert fit.params[key] == pytest.approx(popt[i], rel=1e-5)  # two optimisers' tolerances
        assert fit.se[key] == pytest.approx(math.sqrt(pcov[i, i]), rel=1e-3)
    fit = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0).power
    assert fit.scatter == "proportional"
    popt, pcov = optimize.curve_fit(lambda u, a, b, c: np.log(a + b * u**c), SPEEDS_8X3, np.log(y),
                                    p0=[50, 200, 2])
    for i, key in enumerate("abc"):
        assert fit.params[key] == pytest.approx(popt[i], rel=1e-5)
        assert fit.se[key] == pytest.approx(math.sqrt(pcov[i, i]), rel=1e-3)


def test_power_profile_intervals_against_scipy_refits():
    # Reference: at each end of the profile interval, refitting the other two parameters with
    # scipy.optimize.least_squares must give RSS equal to the F threshold (Bates & Watts 1988):
    # RSS_min (1 + F(0.95; 1, n − 3) / (n − 3)).
    y = simulate("power", 13)
    fit = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0).power
    n = y.size
    rss_min = float(np.sum((np.log(y) - np.log(fit.predict(SPEEDS_8X3))) ** 2))
    thr = rss_min * (1 + sps.f.ppf(0.95, 1, n - 3) / (n - 3))
    names = ["a", "b", "c"]
    start = np.array([fit.params[k] for k in names])
    bounds = ([0, 0, 0.3], [np.inf, np.inf, 6.0])
    for i, key in enumerate(names):
        for end in fit.ci95[key]:
            free = [j for j in range(3) if j != i]

            def resid(x, end=end, i=i, free=free):
                p = start.copy()
                p[i] = end
                p[free] = x
                return np.log(p[0] + p[1] * SPEEDS_8X3 ** p[2]) - np.log(y)

            sol = optimize.least_squares(resid, start[free], bounds=([bounds[0][j] for j in free],
                                                                     [bounds[1][j] for j in free]))
            assert float(np.sum(sol.fun**2)) == pytest.approx(thr, rel=1e-4)  # root tolerance


def test_vectorised_bootstrap_fitter_agrees_with_least_squares():
    # The grid-profile fitter used for bootstrap replicates against scipy.optimize.least_squares.
    for seed in range(5):
        y = simulate("power", 100 + seed)
        grid = perf._power_grid_fit(SPEEDS_8X3, y[None, :], np.ones((1, y.size)))[0]
        ref = optimize.least_squares(lambda p, y=y: p[0] + p[1] * SPEEDS_8X3 ** p[2] - y,
                                     [50, 200, 2], bounds=([0, 0, 0.3], [np.inf, np.inf, 6])).x
        np.testing.assert_allclose(grid, ref, rtol=2e-4)  # grid + parabola resolution


def test_aicc_is_on_the_original_scale_for_both_models():
    # Reference: log-likelihoods from scipy.stats (lognorm for the exponential fit on ln MO2,
    # norm for the power fit), AICc by Hurvich & Tsai (1989).
    y = simulate("power", 3)
    fits = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0)
    n = y.size

    def aicc(ll, k):
        return -2 * ll + 2 * k + 2 * k * (k + 1) / (n - k - 1)

    e = fits.exponential
    ln_fit = np.log(e.params["a"]) + e.params["b"] * SPEEDS_8X3
    sigma = np.sqrt(np.mean((np.log(y) - ln_fit) ** 2))
    ll_e = sps.lognorm.logpdf(y, s=sigma, scale=np.exp(ln_fit)).sum()
    assert e.aicc == pytest.approx(aicc(ll_e, 3), rel=1e-10)
    p = fits.power  # proportional scatter: log-normal likelihood too
    ln_fit = np.log(p.predict(SPEEDS_8X3))
    sigma = np.sqrt(np.mean((np.log(y) - ln_fit) ** 2))
    ll_p = sps.lognorm.logpdf(y, s=sigma, scale=np.exp(ln_fit)).sum()
    assert p.aicc == pytest.approx(aicc(ll_p, 4), rel=1e-10)
    assert fits.delta_aicc == pytest.approx(p.aicc - e.aicc)
    additive = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0, scatter="additive").power
    sigma = np.sqrt(np.mean(additive.residuals**2))
    ll_a = sps.norm.logpdf(additive.residuals, scale=sigma).sum()
    assert additive.aicc == pytest.approx(aicc(ll_a, 4), rel=1e-10)


def test_model_choice_by_aicc_and_the_tie_rule():
    # Simulations with known truth: strongly power-shaped data choose the power model; the rule
    # for |ΔAICc| < 2 picks the exponential and says so.
    u = np.repeat(np.linspace(0.1, 1.0, 10), 3)
    y = (80 + 300 * u**3.5) * np.exp(np.random.default_rng(5).normal(0, 0.02, u.size))
    fits = perf.fit_speed_metabolism(u, y, n_boot=0)
    assert fits.best == "power" and fits.delta_aicc < -2
    y = simulate("exponential", 21)
    fits = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0)
    assert abs(fits.delta_aicc) < 2  # this seeded sample falls in the tie (ΔAICc ≈ 1.7)
    assert fits.best == "exponential" and "< 2" in fits.best_rule
    assert fits.get() is fits.get(fits.best)


def coverage(model: str, keys, n_rep: int = 50, speeds=SPEEDS_8X3):
    truth = POWER_TRUTH if model == "power" else EXP_TRUTH
    hits = dict.fromkeys(keys, 0)
    estimates = {k: [] for k in keys}
    widths = {k: [] for k in keys}
    for rep in range(n_rep):
        fit = perf.fit_speed_metabolism(speeds, simulate(model, 5000 + rep, speeds), models=(model,),
                                        n_boot=0).get(model)
        for k in keys:
            lo, hi = fit.ci95[k]
            hits[k] += lo <= truth[k] <= hi
            estimates[k].append(fit.params[k])
            widths[k].append(hi - lo)
    return ({k: hits[k] / n_rep for k in keys}, {k: np.std(estimates[k]) for k in keys},
            {k: np.median(widths[k]) for k in keys})


def test_interval_coverage_of_smr_and_power_exponent():
    # Acceptance (simulation with known truth): the true SMR (a) and exponent c lie inside their
    # 95 % intervals near 95 % of the time. Over these 100 seeded replicates (8 speeds × 3
    # phases, 5 % scatter) the measured coverage is a 0.91, c 0.95 (exponential a 0.94,
    # b 0.93); over 1000 other replicates a 0.937, c 0.946 (docs/references.md).
    # Binomial(100, 0.95) gives ≥ 88 hits with probability 0.9985.
    cover, spread, width = coverage("power", ("a", "c"), n_rep=100)
    for k in ("a", "c"):
        assert cover[k] >= 0.88, (k, cover)
        # Calibrated, not merely wide: the median width is close to ±1.96 sd of the estimates
        # across replicates (measured 0.90 for a, 1.01 for c); intervals twice too wide would
        # cover 100 % and fail here.
        assert 0.7 < width[k] / (2 * 1.96 * spread[k]) < 1.4, (k, width[k], spread[k])
    cover_e, spread_e, width_e = coverage("exponential", ("a", "b"), n_rep=100)
    assert cover_e["a"] >= 0.88 and cover_e["b"] >= 0.88, cover_e
    assert 0.7 < width_e["a"] / (2 * 1.96 * spread_e["a"]) < 1.4


@pytest.mark.slow
def test_coverage_study(capsys):
    # The coverage study behind docs/references.md at a smaller size: 400 seeded
    # replicates of the power model, 8 speeds × 3 phases (the exponential's t interval is exact
    # and checked against statsmodels above). Binomial(400, 0.95) lies in [0.92, 0.98] with
    # probability 0.99. Prints the figures (run with -m slow -s).
    lines = []
    for model, keys in (("power", ("a", "b", "c")),):
        cover, _, _ = coverage(model, keys, n_rep=400)
        lines.append(f"{model}: " + ", ".join(f"{k} {v:.3f}" for k, v in cover.items()))
        for k in keys:
            assert 0.92 <= cover[k] <= 0.98, (model, k, cover[k])
    with capsys.disabled():
        print("\ncoverage of 95 % intervals, 400 replicates:", "; ".join(lines))


def test_smr_extrapolated_within_ten_percent_at_three_percent_scatter():
    # Acceptance: SMR within 10 % where the scatter between phases is ≤ 3 %.
    for seed in range(10):
        for model in ("power", "exponential"):
            y = simulate(model, 900 + seed, cv=0.03)
            fits = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0)
            smr = perf.smr_from_fit(fits, model)
            assert smr.value == pytest.approx(80.0, rel=0.10)
            assert smr.method == f"extrapolation_{model}"
            assert smr.ci95[0] <= smr.value <= smr.ci95[1]


def test_fit_from_a_published_parameter_set():
    # Source: Sepulveda, Dickson & Graham (2003), Table 1 (exponential fits per bonito, speed in
    # cm/s). The authors' raw MO2 values could not be read, so points are regenerated on each
    # published curve at 10 cm/s steps over its tested range; the fit, with speeds in m/s, must
    # return the published a and b (b per cm/s = b per m/s / 100) within their rounding, and
    # Uopt = 1/b must be flagged as below the tested speeds.
    for row in pd.read_csv(DATA / "performance_published_exponential.csv").to_dict("records"):
        speed_cm = np.arange(row["speed_low_cm_s"], row["speed_high_cm_s"] + 1, 10.0)
        mo2 = row["a_mg_kg_h"] * np.exp(row["b_per_cm_s"] * speed_cm)
        fit = perf.fit_speed_metabolism(speed_cm / 100.0, mo2, n_boot=0).exponential
        assert fit.params["a"] == pytest.approx(row["a_mg_kg_h"], abs=row["tolerance_a_mg_kg_h"])
        assert fit.params["b"] / 100.0 == pytest.approx(row["b_per_cm_s"], abs=row["tolerance_b_per_cm_s"])
        uopt = perf.optimal_speed(fit)
        assert uopt.uopt_m_s * 100 == pytest.approx(row["expected_uopt_cm_s"], abs=row["tolerance_uopt_cm_s"])
        assert uopt.outside_tested and codes(uopt.flags) == ["UOPT_OUTSIDE_TESTED"]


def test_band_and_bootstrap_replicates():
    y = simulate("power", 17)
    fits = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=300, seed=4)
    again = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=300, seed=4)
    for model in ("power", "exponential"):
        fit = fits.get(model)
        assert fit.boot_params.shape == (300, len(fit.params))
        np.testing.assert_array_equal(fit.boot_params, again.get(model).boot_params)  # seeded
        grid = np.linspace(0.2, 0.9, 15)
        lo, hi = fit.band(grid)
        mid = fit.predict(grid)
        assert np.all(lo < mid) and np.all(mid < hi)
        # The bootstrap band agrees with the delta-method band to within a fraction of its width
        # (two approximations of one interval; 35 % allows for 300 resamples).
        no_boot = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=0).get(model)
        dlo, dhi = no_boot.band(grid)
        width = dhi - dlo
        assert np.all(np.abs(lo - dlo) < 0.35 * width) and np.all(np.abs(hi - dhi) < 0.35 * width)
    assert "residuals" in fits.power.boot_method
    cases = perf.fit_speed_metabolism(SPEEDS_8X3, y, n_boot=200, bootstrap="cases")
    assert "cases" in cases.power.boot_method
    with pytest.raises(ValueError, match="valid choices are 'cases', 'residuals'"):
        perf.fit_speed_metabolism(SPEEDS_8X3, y, bootstrap="jackknife")


def test_predict_keeps_a_series_index():
    fit = perf.fit_speed_metabolism(SPEEDS_8X3, simulate("exponential", 1), n_boot=0).exponential
    speeds = pd.Series([0.3, 0.6], index=["slow", "fast"])
    out = fit.predict(speeds)
    assert isinstance(out, pd.Series) and list(out.index) == ["slow", "fast"]
    assert isinstance(fit.predict(0.5), float)


# --- bad input to the fits: flags, never tracebacks ------------------------------------------


def test_fit_with_fewer_than_three_speeds_is_not_possible():
    fits = perf.fit_speed_metabolism([0.3, 0.3, 0.6, 0.6], [100, 105, 150, 160])
    assert fits.exponential is None and fits.power is None and fits.best is None
    assert codes(fits.flags) == ["FIT_NOT_POSSIBLE"]
    assert "2 distinct speed(s)" in fits.flags[0]["message"]
    assert perf.smr_from_fit(fits) is None


def test_fit_with_all_mo2_equal_is_not_possible():
    fits = perf.fit_speed_metabolism([0.2, 0.4, 0.6, 0.8], [120, 120, 120, 120])
    assert fits.best is None and codes(fits.flags) == ["FIT_NOT_POSSIBLE"]
    assert "all 4 MO2 values are equal" in fits.flags[0]["message"]


def test_fit_with_negative_or_missing_mo2_is_not_possible():
    fits = perf.fit_speed_metabolism([0.2, 0.4, 0.6, 0.8], [120, -5, 150, 200])
    assert fits.best is None and codes(fits.flags) == ["FIT_NOT_POSSIBLE"]
    assert "point 2 is -5" in fits.flags[0]["message"]
    fits = perf.fit_speed_metabolism([0.2, 0.4, 0.6, 0.8], [120, 0.0, 150, 200])
    assert "point 2 is 0" in fits.flags[0]["message"]
    fits = perf.fit_speed_metabolism([0.2, 0.4, 0.6, 0.8], [120, 130, float("nan"), 200])
    assert "point 3 is not a number" in fits.flags[0]["message"]


def test_power_needs_four_points_and_mismatched_inputs_raise():
    fits = perf.fit_speed_metabolism([0.2, 0.5, 0.8], [100, 140, 230], n_boot=0)
    assert fits.exponential is not None and fits.power is None
    assert codes(fits.flags)[0] == "FIT_NOT_POSSIBLE" and "at least four" in fits.flags[0]["message"]
    assert fits.best == "exponential"
    with pytest.raises(InputError, match="one speed per MO2"):
        perf.fit_speed_metabolism([0.2, 0.5, 0.8], [100, 140])
    with pytest.raises(ValueError, match="unknown model 'cubic'"):
        perf.fit_speed_metabolism([0.2, 0.5, 0.8], [100, 140, 200], models=("cubic",))


def test_poorly_constrained_fit_is_flagged():
    # Few, noisy points over a narrow range: the power model's a and c are not pinned down.
    u = np.array([0.50, 0.55, 0.60, 0.65, 0.70])
    y = np.array([210.0, 190.0, 240.0, 215.0, 260.0])
    fits = perf.fit_speed_metabolism(u, y, n_boot=0)
    assert "FIT_POORLY_CONSTRAINED" in codes(fits.flags)
    assert any("power model" in f["message"] for f in fits.flags)
    # A well-constrained fit is not flagged.
    good = perf.fit_speed_metabolism(SPEEDS_8X3, simulate("exponential", 2, cv=0.02), models=("exponential",))
    assert good.flags == ()


# --------------------------------------------------------------------------------------------
# SMR from resting data (Chabot, Steffensen & Farrell 2016)
# --------------------------------------------------------------------------------------------


def resting_mo2(seed: int, n: int = 400, smr: float = 100.0, cv: float = 0.03) -> np.ndarray:
    """Resting MO2: 65 % of phases at SMR with scatter ``cv``, the rest raised by activity."""
    rng = np.random.default_rng(seed)
    calm = rng.normal(smr, cv * smr, int(0.65 * n))
    active = rng.normal(1.4 * smr, 0.12 * smr, n - calm.size)
    return rng.permutation(np.concatenate([calm, active]))


def test_low_quantile_matches_the_hyndman_fan_type7_definition():
    # Reference: Python's statistics.quantiles(method="inclusive") is Hyndman & Fan (1996)
    # definition 7 (R's default, used by Chabot et al. 2016).
    x = resting_mo2(1, n=97)
    est = perf.smr_low_quantile(x)
    ref = statistics.quantiles(x.tolist(), n=5, method="inclusive")[0]  # the 0.2 quantile
    assert est.value == pytest.approx(ref, rel=1e-12)
    assert est.method == "quantile_0.2" and est.n == 97
    assert perf.smr_low_quantile(x, 0.25).value == pytest.approx(
        statistics.quantiles(x.tolist(), n=4, method="inclusive")[0], rel=1e-12)


def test_quantile_interval_covers_the_true_quantile():
    # Simulation with known truth: order-statistic interval of the 0.2 quantile of N(100, 3²).
    true_q = sps.norm.ppf(0.2, loc=100, scale=3)
    hits = 0
    for seed in range(200):
        x = np.random.default_rng(seed).normal(100, 3, 60)
        lo, hi = perf.smr_low_quantile(x).ci95
        hits += lo <= true_q <= hi
    assert 0.92 <= hits / 200 <= 0.995  # exact method has coverage ≥ 95 %; binomial spread


def test_mlnd_and_quantile_recover_a_simulated_smr():
    # Acceptance (simulation with known truth): SMR within 10 % at 3 % scatter; the MLND is
    # within 2 % here because the calm phases form a clear lowest normal distribution.
    for seed in range(5):
        x = resting_mo2(seed)
        mlnd = perf.smr_mlnd(x)
        assert mlnd.method == "mlnd"
        assert mlnd.value == pytest.approx(100.0, rel=0.02)
        assert mlnd.details["n_components"] >= 2
        assert mlnd.details["cv_mlnd"] == pytest.approx(3.0, rel=0.3)
        assert "recommend the MLND" in mlnd.notes
        q = perf.smr_low_quantile(x)
        assert q.value == pytest.approx(100.0, rel=0.10)


def test_em_reaches_the_maximum_likelihood_of_a_general_optimiser():
    # Reference: the two-component mixture's negative log-likelihood minimised by
    # scipy.optimize.minimize (Nelder–Mead) from the truth; EM must reach at least as high.
    x = resting_mo2(3, n=300)
    mix = perf._em_mixture(x, 2, np.random.default_rng(0), n_starts=5)

    def nll(t):
        w = 1 / (1 + math.exp(-t[0]))
        return -np.log(w * sps.norm.pdf(x, t[1], math.exp(t[2]))
                       + (1 - w) * sps.norm.pdf(x, t[3], math.exp(t[4]))).sum()

    ref = optimize.minimize(nll, [0.6, 100, math.log(3), 140, math.log(12)], method="Nelder-Mead",
                            options={"maxiter": 20000, "xatol": 1e-8, "fatol": 1e-10})
    assert mix.loglik >= -ref.fun - 1e-6
    assert mix.loglik == pytest.approx(-ref.fun, abs=1e-3)


def test_mlnd_on_a_single_normal_chooses_one_component():
    x = np.random.default_rng(8).normal(90, 2.5, 300)
    est = perf.smr_mlnd(x)
    assert est.details["n_components"] == 1
    assert est.value == pytest.approx(np.mean(x), rel=1e-9)


def test_smr_methods_refuse_bad_values():
    with pytest.raises(InputError, match="value 2 is -3"):
        perf.smr_low_quantile([90, -3, 95])
    with pytest.raises(InputError, match="at least 10"):
        perf.smr_mlnd([90, 91, 92])
    with pytest.raises(InputError, match="strictly between 0 and 1"):
        perf.smr_low_quantile([90, 91, 92], q=1.5)


# --------------------------------------------------------------------------------------------
# MMR and aerobic scope
# --------------------------------------------------------------------------------------------


def test_mmr_is_the_highest_value_labelled_by_method():
    est = perf.mmr([210.0, 340.0, 325.0], method="swimming_peak", window_s=60)
    assert est.value == 340.0 and est.method == "swimming_peak" and est.n == 3
    assert "60 s window" in est.notes
    assert perf.mmr([400.0, 380.0], method="recovery_peak").notes.startswith("highest MO2 in the first")
    with pytest.raises(ValueError, match="valid choices are 'recovery_peak', 'swimming_peak'"):
        perf.mmr([1.0], method="peak")
    with pytest.raises(InputError, match="mo2_values"):
        perf.mmr([200.0, float("nan")])


def test_aerobic_scope():
    # Worked by hand: Fry (1947) scope = MMR − SMR; factorial = MMR / SMR.
    scope = perf.aerobic_scope(80.0, 400.0)
    assert scope.absolute_mg_kg_h == 320.0 and scope.factorial == 5.0
    absolute, factorial = perf.aerobic_scope(perf.RateEstimate(80.0, "mlnd", None, 10, ""),
                                             perf.mmr([300.0, 400.0]))
    assert (absolute, factorial) == (320.0, 5.0)
    with pytest.raises(InputError, match="below smr"):
        perf.aerobic_scope(200.0, 150.0)


# --------------------------------------------------------------------------------------------
# Cost of transport, Uopt, power, efficiency
# --------------------------------------------------------------------------------------------


def test_cost_of_transport_units_against_scipy_constants():
    # Reference: scipy.constants (hour = 3600 s, kilo = 1000) for the unit changes; worked by
    # hand: 360 mg O2 kg⁻¹ h⁻¹ at 1 m/s (3.6 km/h) is 100 mg O2 kg⁻¹ km⁻¹ and, at 13.6 J/mg,
    # 1.36 J kg⁻¹ m⁻¹.
    mo2 = np.array([360.0, 200.0, 500.0])
    speed = np.array([1.0, 0.4, 1.2])
    table = perf.cost_of_transport(mo2, speed, smr_mg_kg_h=80.0)
    km_per_h = speed * scipy.constants.hour / scipy.constants.kilo
    np.testing.assert_allclose(table["cot_gross_mg_kg_km"], mo2 / km_per_h, rtol=1e-14)
    np.testing.assert_allclose(table["cot_net_mg_kg_km"], (mo2 - 80) / km_per_h, rtol=1e-14)
    np.testing.assert_allclose(table["cot_gross_j_kg_m"],
                               mo2 * 13.6 / (speed * scipy.constants.hour), rtol=1e-14)
    assert table["cot_gross_mg_kg_km"].iloc[0] == pytest.approx(100.0)
    assert table["cot_gross_j_kg_m"].iloc[0] == pytest.approx(1.36)
    assert not table["below_smr"].any()
    series = perf.cost_of_transport(pd.Series([360.0, 50.0], index=[3, 4]), 1.0, smr_mg_kg_h=80.0)
    assert list(series.index) == [3, 4] and series["below_smr"].tolist() == [False, True]
    assert "cot_net_mg_kg_km" not in perf.cost_of_transport(mo2, speed).columns
    with pytest.raises(InputError, match="speed_m_s must be greater than zero"):
        perf.cost_of_transport(mo2, [1.0, 0.0, 1.0])


@settings(max_examples=50, deadline=None)
@given(a=st.floats(20, 300), b=st.floats(0.5, 6.0))
def test_exponential_uopt_closed_form_matches_numerical_minimum(a, b):
    # Reference: scipy.optimize.minimize_scalar (bounded) on COT(U) = a e^(bU) / (3.6 U).
    fit = perf.SpeedMetabolismFit("exponential", {"a": a, "b": b}, {}, {}, "", None, 0,
                                  np.array([]), (0.1, 1.0))
    res = perf.optimal_speed(fit)
    num = optimize.minimize_scalar(lambda u: a * math.exp(b * u) / (3.6 * u),
                                   bounds=(1e-3, 20), method="bounded", options={"xatol": 1e-10})
    assert res.closed_form
    assert res.uopt_m_s == pytest.approx(num.x, rel=1e-5)  # minimiser's tolerance on a flat minimum
    assert res.cotmin_mg_kg_km == pytest.approx(num.fun, rel=1e-9)


@settings(max_examples=50, deadline=None)
@given(a=st.floats(20, 300), b=st.floats(20, 800), c=st.floats(1.2, 4.0))
def test_power_uopt_closed_form_matches_numerical_minimum(a, b, c):
    # Reference: scipy.optimize.minimize_scalar (bounded) on COT(U) = (a + b U^c) / (3.6 U).
    fit = perf.SpeedMetabolismFit("power", {"a": a, "b": b, "c": c}, {}, {}, "", None, 0,
                                  np.array([]), (0.1, 1.0))
    res = perf.optimal_speed(fit)
    num = optimize.minimize_scalar(lambda u: (a + b * u**c) / (3.6 * u),
                                   bounds=(1e-4, 50), method="bounded", options={"xatol": 1e-12})
    assert res.uopt_m_s == pytest.approx(num.x, rel=1e-4)
    assert res.cotmin_mg_kg_km == pytest.approx(num.fun, rel=1e-9)
    assert res.outside_tested == (not 0.1 <= res.uopt_m_s <= 1.0)


def test_uopt_interval_from_bootstrap_and_no_optimum_case():
    # Simulation with known truth: power curve 80 + 300 U^2.2 has Uopt = (80/(300·1.2))^(1/2.2).
    # Its bootstrap interval covers the truth in most of 40 seeded replicates (measured 38/40;
    # Binomial(40, 0.95) gives ≥ 34 hits with probability 0.99).
    true_uopt = (80 / (300 * 1.2)) ** (1 / 2.2)
    hits = 0
    for rep in range(40):
        fit = perf.fit_speed_metabolism(SPEEDS_8X3, simulate("power", 700 + rep), models=("power",),
                                        n_boot=300, seed=rep).power
        res = perf.optimal_speed(fit)
        assert res.uopt_ci95[0] < res.uopt_m_s < res.uopt_ci95[1]
        assert res.cotmin_ci95[0] < res.cotmin_mg_kg_km < res.cotmin_ci95[1]
        assert not res.outside_tested and res.flags == ()
        hits += res.uopt_ci95[0] <= true_uopt <= res.uopt_ci95[1]
    assert hits >= 34
    flat = perf.SpeedMetabolismFit("power", {"a": 80.0, "b": 100.0, "c": 0.9}, {}, {}, "", None, 0,
                                   np.array([]), (0.1, 1.0))
    none = perf.optimal_speed(flat)
    assert none.uopt_m_s is None and codes(none.flags) == ["UOPT_OUTSIDE_TESTED"]
    assert "no cost-of-transport minimum" in none.flags[0]["message"]
    with pytest.raises(InputError, match="SpeedMetabolismFit"):
        perf.optimal_speed({"a": 1})


def test_metabolic_power_and_efficiency():
    # Worked by hand and with scipy.constants.hour: 360 mg O2 kg⁻¹ h⁻¹ × 1 kg × 13.6 J/mg per
    # 3600 s = 1.36 W.
    assert perf.metabolic_power_w(360.0, 1.0) == pytest.approx(360 * 13.6 / scipy.constants.hour)
    assert perf.metabolic_power_w(360.0, 1.0) == pytest.approx(1.36)
    mass = pd.Series([0.5, 2.0], index=["f1", "f2"])
    out = perf.metabolic_power_w(200.0, mass, 14.1)
    assert list(out.index) == ["f1", "f2"] and out["f2"] == pytest.approx(200 * 2 * 14.1 / 3600)
    assert perf.efficiency(0.05, 0.25) == pytest.approx(0.2)
    assert "rigid-body" in perf.EFFICIENCY_METHOD
    with pytest.raises(InputError, match="net_metabolic_power_w"):
        perf.efficiency(0.05, 0.0)
    with pytest.raises(InputError, match="mass_kg"):
        perf.metabolic_power_w(100.0, 0.0)


# --------------------------------------------------------------------------------------------
# Group curves (mixed-effects model)
# --------------------------------------------------------------------------------------------


def group_table(n_fish: int, seed: int, slope_sd: float = 0.25, speeds=None) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    speeds = np.repeat(np.linspace(0.2, 0.9, 6), 2) if speeds is None else speeds
    rows = []
    for i in range(n_fish):
        ln_a = math.log(80) + rng.normal(0, 0.15)
        b = 2.0 + rng.normal(0, slope_sd)
        for u in speeds:
            rows.append({"fish_id": f"F{i + 1:02d}", "speed_m_s": u,
                         "mo2_mg_kg_h": math.exp(ln_a + b * u + rng.normal(0, 0.04))})
    return pd.DataFrame(rows)


def test_group_curve_recovers_population_parameters_with_random_slopes():
    # Simulation with known truth: population a = 80, b = 2.0, between-fish SD of ln a 0.15.
    table = group_table(10, seed=1)
    curve = perf.group_curve(table)
    assert curve.random_slopes and curve.converged
    assert "random slopes" in curve.notes
    assert curve.a_ci95[0] <= 80 <= curve.a_ci95[1]
    assert curve.b_ci95[0] <= 2.0 <= curve.b_ci95[1]
    assert curve.sd_between_ln_a == pytest.approx(0.15, rel=0.6)  # 10 fish: SD estimate is rough
    assert len(curve.per_fish) == 10 and curve.n == len(table)
    # Each fish's own curve, against statsmodels OLS (an outside implementation).
    one = table[table["fish_id"] == "F03"]
    ols = sm.OLS(np.log(one["mo2_mg_kg_h"]), sm.add_constant(one["speed_m_s"])).fit()
    row = curve.per_fish.set_index("fish_id").loc["F03"]
    assert row["b_own"] == pytest.approx(ols.params["speed_m_s"], rel=1e-9)
    assert row["a_own"] == pytest.approx(math.exp(ols.params["const"]), rel=1e-9)


def test_each_fish_curve_of_the_group_model_equals_statsmodels_fitted_values():
    # statsmodels' MixedLM fitted values include each fish's predicted random effects (an outside
    # implementation, fitted here with the same model and call as group_curve).
    from statsmodels.regression.mixed_linear_model import MixedLM

    table = group_table(10, seed=1)
    curve = perf.group_curve(table)
    data = table.assign(ln_mo2=np.log(table["mo2_mg_kg_h"]))
    result = MixedLM.from_formula("ln_mo2 ~ speed_m_s", data=data, groups=data["fish_id"],
                                  re_formula="~speed_m_s").fit(reml=True, method=["lbfgs", "powell"])
    one = data["fish_id"] == "F03"
    expected = np.exp(np.asarray(result.fittedvalues)[one.to_numpy()])
    got = curve.predict_fish("F03", data.loc[one, "speed_m_s"].to_numpy())
    np.testing.assert_allclose(got, expected, rtol=1e-6)
    with pytest.raises(InputError, match="not in the group curve"):
        curve.predict_fish("F99", 0.5)


def test_balanced_random_intercept_slope_equals_pooled_ols():
    # Known result (e.g. Searle, Casella & McCulloch 1992, from memory): with random intercepts
    # and the same speeds for every fish, the GLS slope equals the pooled OLS slope.
    table = group_table(6, seed=4, slope_sd=0.0)
    curve = perf.group_curve(table, random_slopes=False)
    slope, _ = np.polyfit(table["speed_m_s"], np.log(table["mo2_mg_kg_h"]), 1)
    assert not curve.random_slopes and curve.sd_between_b is None
    assert curve.b == pytest.approx(slope, rel=1e-6)  # REML optimiser tolerance


def test_group_curve_uses_intercepts_only_when_data_do_not_support_slopes():
    table = group_table(2, seed=2)
    curve = perf.group_curve(table)
    assert not curve.random_slopes
    assert "random intercepts only: 2 fish" in curve.notes


def test_group_curve_bad_tables():
    table = group_table(3, seed=3)
    with pytest.raises(InputError, match="lacks column") as info:
        perf.group_curve(table.drop(columns="mo2_mg_kg_h"))
    assert info.value.column == "mo2_mg_kg_h"
    bad = table.copy()
    bad.loc[4, "mo2_mg_kg_h"] = -1.0
    with pytest.raises(InputError) as info:
        perf.group_curve(bad)
    assert info.value.row == 5 and info.value.column == "mo2_mg_kg_h"
    with pytest.raises(InputError, match="at least two"):
        perf.group_curve(table[table["fish_id"] == "F01"])


def test_efficiency_with_rigid_body_drag_power_is_plausible():
    # Cross-check with swimlab.hydrodynamics.drag_power for an invented 0.30 m, 0.30 kg fish at
    # 0.6 m/s in fresh water at about 15 °C (ρ 999.1 kg/m³, ν 1.14e-6 m²/s), net MO2 from the
    # curve 80 e^(2U). Overall swimming efficiencies of fish are of order 0.1–0.2 (Webb 1975,
    # from memory); the bounds below only catch a unit slip of 10× or more.
    from swimlab import hydrodynamics

    drag = hydrodynamics.drag_power(0.6, 0.30, 0.06, 0.035, 999.1, 1.14e-6)
    net = perf.metabolic_power_w(80 * math.exp(2.0 * 0.6) - 80, 0.30)
    eta = perf.efficiency(drag, net)
    assert 0.02 < eta < 0.6

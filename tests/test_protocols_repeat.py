"""Tests of swimlab.protocols.repeat: the recovery ratio of a repeat swim."""

import math
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from swimlab.errors import InputError
from swimlab.protocols import repeat as RP


def test_recovery_ratio_hand_worked():
    # By hand: Ucrit₁ = 2.00, Ucrit₂ = 1.96 m/s, se 0.05 each.
    #   RR = 1.96 / 2.00 = 0.98
    #   Var = 0.98² · ((0.05/2.00)² + (0.05/1.96)²) = 0.9604 · (0.000625 + 0.00065077) = 0.00122525
    #   se = 0.035004; 95 % interval 0.98 ± 1.95996 · 0.035004 = 0.9114 to 1.0486
    res = RP.recovery_ratio(2.00, 1.96, 0.05, 0.05, fish_id_1="A1", fish_id_2="A1")
    assert res.protocol == "repeat_ucrit"
    assert res.ratio == pytest.approx(0.98, abs=1e-12)
    assert res.se == pytest.approx(0.035004, abs=5e-7)
    assert (res.ci_low, res.ci_high) == pytest.approx((0.91139, 1.04861), abs=5e-5)
    assert res.below_unity is False and res.flags == ()
    assert res.fish_id == "A1"


def test_delta_method_se_matches_monte_carlo():
    # Simulation: independent normal Ucrit estimates; the sd of the simulated ratio agrees with
    # the delta-method se to within 2 % (first-order error ~ (se/U)² ≈ 0.1 %, Monte Carlo error
    # with 200 000 draws ≈ 0.2 %).
    rng = np.random.default_rng(8)
    u1 = rng.normal(0.80, 0.02, 200_000)
    u2 = rng.normal(0.74, 0.025, 200_000)
    res = RP.recovery_ratio(0.80, 0.74, 0.02, 0.025)
    assert res.se == pytest.approx(np.std(u2 / u1), rel=0.02)


def test_covariance_term_matches_monte_carlo():
    rng = np.random.default_rng(9)
    cov = 0.6 * 0.02 * 0.025
    draws = rng.multivariate_normal([0.80, 0.74], [[0.02**2, cov], [cov, 0.025**2]], 200_000)
    res = RP.recovery_ratio(0.80, 0.74, 0.02, 0.025, covariance=cov)
    assert res.se == pytest.approx(np.std(draws[:, 1] / draws[:, 0]), rel=0.02)


def test_ratio_like_jain1998_impaired_group_is_flagged():
    # Jain, Birtwell & Farrell (1998) report impaired fish at 0.92 ± 0.02 against controls near 1
    # (abstract). A fish at 0.92 with a tight interval lies wholly below one -> flagged.
    res = RP.recovery_ratio(2.10, 1.932, 0.02, 0.02)
    assert res.ratio == pytest.approx(0.92)
    assert res.below_unity is True
    assert res.flags[0]["code"] == "REPEAT_RATIO_BELOW_UNITY"


def test_without_standard_errors_there_is_no_interval():
    res = RP.recovery_ratio(2.0, 1.9)
    assert res.se is None and res.ci_low is None and res.below_unity is None


def test_two_different_fish_is_an_input_error():
    with pytest.raises(InputError) as err:
        RP.recovery_ratio(2.0, 1.9, fish_id_1="A1", fish_id_2="B7")
    assert err.value.field == "fish_id_2"
    assert "A1" in str(err.value) and "B7" in str(err.value)


def test_accepts_step_test_results_and_refuses_missing_ucrit():
    first = SimpleNamespace(ucrit_m_s=0.9)
    second = SimpleNamespace(ucrit_m_s=0.81)
    assert RP.recovery_ratio(first, second).ratio == pytest.approx(0.9)
    with pytest.raises(InputError) as err:
        RP.recovery_ratio(first, SimpleNamespace(ucrit_m_s=None))
    assert err.value.field == "ucrit_2"
    with pytest.raises(InputError) as err:
        RP.recovery_ratio(None, 0.8)
    assert err.value.field == "ucrit_1"
    with pytest.raises(InputError):
        RP.recovery_ratio(0.9, -0.1)


@given(
    st.floats(0.1, 5.0), st.floats(0.1, 5.0), st.floats(0.0, 0.2), st.floats(0.0, 0.2), st.floats(0.01, 100.0)
)
def test_ratio_and_relative_se_do_not_depend_on_units(u1, u2, s1, s2, scale):
    a = RP.recovery_ratio(u1, u2, s1, s2)
    b = RP.recovery_ratio(u1 * scale, u2 * scale, s1 * scale, s2 * scale)
    assert b.ratio == pytest.approx(a.ratio, rel=1e-9)
    assert b.se == pytest.approx(a.se, rel=1e-9, abs=1e-12)
    assert math.isclose(RP.recovery_ratio(u1, u1).ratio, 1.0)


# --- a single pair: the measurement model, Fieller (1954) and the delta method ----------------------


def test_measurement_model_worked_by_hand_shared_calibration():
    # One fish swum twice in one tunnel, 20 min steps of 0.10 m/s (the BW-26 repeat pair):
    #   first swim fatigued 70 % into the 0.60→0.70 m/s step: Ucrit₁ = 0.60 + 0.7 · 0.10 = 0.670 m/s
    #   second swim 35 % into it:                            Ucrit₂ = 0.635 m/s,  RR = 0.947761
    # Fatigue times known to within a 30 s span, uniform: sd = 30/√12 = 8.660254 s, so
    #   se_timing = (0.10 / 1200) · 8.660254 = 7.216878e-4 m/s for each swim.
    # One shared calibration cancels; by the delta method
    #   se(RR) = 0.947761 · √((7.216878e-4/0.670)² + (7.216878e-4/0.635)²)
    #          = 0.947761 · √(1.160244e-6 + 1.291669e-6) = 0.947761 · 1.565858e-3 = 1.48406e-3
    # Fieller (1954), z = 1.959964, v = (7.216878e-4)² = 5.208333e-7, c = 0:
    #   A = 0.670² − z² v = 0.448898,  B = 0.670 · 0.635 = 0.42545,  C = 0.635² − z² v = 0.403223
    #   θ = (B ± √(B² − A C)) / A = 0.944857 … 0.950674
    m1 = RP.ucrit_measurement_uncertainty(0.670, 0.10, 1200.0, 30.0, 0.02)
    m2 = RP.ucrit_measurement_uncertainty(0.635, 0.10, 1200.0, 30.0, 0.02)
    assert m1.se_timing_m_s == pytest.approx(7.216878e-4, rel=1e-6)
    assert m1.se_calibration_m_s == pytest.approx(0.670 * 0.02)
    res = RP.recovery_ratio_from_measurement(m1, m2, shared_calibration=True, fish_id="P1")
    assert res.ratio == pytest.approx(0.947761, abs=5e-7)
    assert res.se == pytest.approx(1.48406e-3, rel=1e-5)  # the calibration terms cancel exactly
    assert res.ci_method == "fieller1954"
    assert (res.ci_low, res.ci_high) == pytest.approx((0.944857, 0.950674), abs=2e-6)
    assert "measurement only" in res.uncertainty and "cancels" in res.uncertainty
    delta = RP.recovery_ratio_from_measurement(m1, m2, shared_calibration=True, method="delta")
    # the delta interval, 0.947761 ± 1.959964 · 1.48406e-3 = 0.944852 … 0.950670, nearly Fieller's here
    assert (delta.ci_low, delta.ci_high) == pytest.approx((0.944852, 0.950670), abs=2e-6)


def test_measurement_model_worked_by_hand_two_calibrations():
    # Two separate calibrations of 2 % each: Var(U_k) = se_t² + (0.02 U_k)², no covariance:
    #   Var(U₁) = 5.208333e-7 + 1.7956e-4 = 1.800808e-4,  Var(U₂) = 5.208333e-7 + 1.6129e-4 = 1.618108e-4
    #   se(RR) = 0.947761 · √(1.800808e-4/0.4489 + 1.618108e-4/0.403225) = 0.0268478
    #   Fieller: A = 0.4489 − z² 1.800808e-4 = 0.448208,  C = 0.403225 − z² 1.618108e-4 = 0.402603
    #   θ = 0.896542 … 1.001906 — the interval now reaches one: the calibrations alone could explain it
    m1 = RP.ucrit_measurement_uncertainty(0.670, 0.10, 1200.0, 30.0, 0.02)
    m2 = RP.ucrit_measurement_uncertainty(0.635, 0.10, 1200.0, 30.0, 0.02)
    res = RP.recovery_ratio_from_measurement(m1, m2, shared_calibration=False)
    assert res.se == pytest.approx(0.0268478, rel=1e-5)
    assert (res.ci_low, res.ci_high) == pytest.approx((0.896542, 1.001906), abs=2e-6)
    assert res.below_unity is False and res.flags == ()


def _simulated_ratios(n, *, w, s_cal, shared, seed):
    """The physical process: true fatigue times, recorded within a span of width w; calibration factors."""
    rng = np.random.default_rng(seed)
    step, du, u_i = 1200.0, 0.10, 0.60
    t_true = np.array([0.7, 0.35]) * step
    recorded = t_true + rng.uniform(-w / 2, w / 2, size=(n, 2))
    cal = rng.normal(0.0, s_cal, size=(n, 1 if shared else 2))
    measured = (1.0 + cal) * (u_i + recorded / step * du)
    return measured, (u_i + t_true[1] / step * du) / (u_i + t_true[0] / step * du)


@pytest.mark.parametrize("shared", [True, False])
def test_measurement_interval_against_monte_carlo(shared):
    # Monte-Carlo of the process the model describes (uniform fatigue-time error, Gaussian
    # calibration factor, shared or not). 40 000 draws: the sd of the simulated ratio agrees with
    # the delta SE within 2 % (its sampling error is 0.35 %; 2 % allows for first-order terms),
    # and Fieller's 95 % interval, computed from each draw, covers the true ratio in 93–97 % of
    # draws (binomial sd 0.11 %; the triangular timing error gives slightly more than 95 %).
    measured, truth = _simulated_ratios(40_000, w=30.0, s_cal=0.02, shared=shared, seed=3 + shared)
    ratios = measured[:, 1] / measured[:, 0]
    m1 = RP.ucrit_measurement_uncertainty(0.670, 0.10, 1200.0, 30.0, 0.02)
    m2 = RP.ucrit_measurement_uncertainty(0.635, 0.10, 1200.0, 30.0, 0.02)
    res = RP.recovery_ratio_from_measurement(m1, m2, shared_calibration=shared)
    assert ratios.std(ddof=1) == pytest.approx(res.se, rel=0.02)
    hits = 0
    sample = measured[:4000]
    for u1, u2 in sample:
        a = RP.ucrit_measurement_uncertainty(u1, 0.10, 1200.0, 30.0, 0.02)
        b = RP.ucrit_measurement_uncertainty(u2, 0.10, 1200.0, 30.0, 0.02)
        r = RP.recovery_ratio_from_measurement(a, b, shared_calibration=shared)
        hits += r.ci_low <= truth <= r.ci_high
    assert 0.93 <= hits / len(sample) <= 0.975


def test_fieller_matches_delta_when_the_denominator_is_precise_and_is_asymmetric_otherwise():
    # Fieller (1954): with g = z² v_b / b² → 0 the interval tends to the delta interval; with a
    # noisy denominator it is longer on the high side (a ratio's skew).
    lo, hi = RP.fieller_interval(1.0, 2.0, 1e-8, 1e-8)
    d = RP.recovery_ratio(2.0, 1.0, 1e-4, 1e-4)
    assert (lo, hi) == pytest.approx((d.ci_low, d.ci_high), abs=1e-7)
    lo, hi = RP.fieller_interval(1.0, 1.0, 0.01, 0.04)
    assert hi - 1.0 > 1.0 - lo > 0


def test_fieller_unbounded_when_the_denominator_is_not_clear_of_zero():
    with pytest.raises(InputError) as err:
        RP.fieller_interval(1.0, 0.1, 0.01, 0.01)
    assert err.value.field == "denominator"


def test_unknown_interval_method_lists_the_valid_ones():
    with pytest.raises(ValueError, match="fieller1954"):
        RP.recovery_ratio(1.0, 0.9, 0.01, 0.01, method="bootstrap")

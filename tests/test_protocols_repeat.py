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

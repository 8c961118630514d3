"""Tests of swimlab.protocols.recovery: EPOC by trapezoids and fitted decays."""

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.tools import eval_measures

from swimlab.errors import InputError
from swimlab.protocols import recovery as R

DATA = Path(__file__).parent / "data"
S_PER_MIN = 60.0


def _silurus_rows():
    table = pd.read_csv(DATA / "protocols_epoc_silurus.csv")
    return [group for _, group in table.groupby("group")]


@pytest.mark.parametrize("group", _silurus_rows(), ids=lambda g: f"group{int(g['group'].iloc[0])}")
@pytest.mark.parametrize("baseline_method", ["pre_exercise", "fitted_asymptote"])
def test_epoc_reproduces_published_silurus_curves(group, baseline_method):
    # Published curves VO2 = a + b e^{−c t} [mg O2 kg⁻¹ min⁻¹, t in min] and the EPOC, t50 and t95
    # the authors computed from them (tests/data/protocols_epoc_silurus.csv). We sample the curve
    # every 2 min for 2 h, fit it, and compare.
    a, b, c = (float(group[k].iloc[0]) for k in ("a_mg_kg_min", "b_mg_kg_min", "c_per_min"))
    t_min = np.arange(2.0, 121.0, 2.0)
    mo2_mg_kg_h = (a + b * np.exp(-c * t_min)) * 60.0
    baseline = a * 60.0 if baseline_method == "pre_exercise" else None
    res = R.epoc(t_min * S_PER_MIN, mo2_mg_kg_h, baseline, baseline_method=baseline_method)
    assert res.protocol == "recovery" and res.model == "one_phase"
    got = {"epoc_mg_kg": res.epoc_fit_mg_kg, "t50_min": res.t50_s / 60, "t95_min": res.t95_s / 60}
    for row in group.to_dict("records"):
        assert got[row["quantity"]] == pytest.approx(row["expected"], abs=row["tolerance"]), row["quantity"]
    assert res.baseline_mg_kg_h == pytest.approx(a * 60.0, rel=1e-6)


def test_fitted_and_trapezoid_areas_against_the_analytic_integral():
    # ∫ A e^{−kt} dt = A/k (analytic). Exact one-phase data, sampled every 5 min from 2 to 240 min.
    amp, k = 300.0, 1.0 / 1800.0  # [mg O2 kg⁻¹ h⁻¹], [1/s]
    base = 90.0
    t = np.arange(120.0, 240 * 60 + 1, 300.0)
    y = base + amp * np.exp(-k * t)
    res = R.epoc(t, y, base, baseline_method="smr")
    assert res.epoc_fit_mg_kg == pytest.approx(amp / k / 3600.0, rel=1e-8)
    recorded = amp / k * (math.exp(-k * t[0]) - math.exp(-k * t[-1])) / 3600.0
    assert res.epoc_fit_recorded_mg_kg == pytest.approx(recorded, rel=1e-8)
    # Trapezoids over-estimate a convex curve; the leading error term is
    # h²/12 · (f'(t_end) − f'(t0)) = h²/12 · A k (e^{−k t0} − e^{−k t_end}); allow 1 % above it.
    h = 300.0
    bound = h**2 / 12.0 * amp * k * (math.exp(-k * t[0]) - math.exp(-k * t[-1])) / 3600.0
    error = res.epoc_trapezoid_mg_kg - recorded
    assert 0 < error < 1.01 * bound
    assert res.t50_s == pytest.approx(math.log(2) / k, rel=1e-8)
    assert res.t95_s == pytest.approx(math.log(20) / k, rel=1e-8)


def test_two_phase_decay_chosen_and_recovered_from_noisy_simulation():
    # Simulated truth: fast phase 300 e^{−t/10 min} + slow phase 150 e^{−t/2 h} above 100.
    rng = np.random.default_rng(42)
    t = np.arange(5, 480, 10.0) * 60.0
    truth = 100 + 300 * np.exp(-t / 600.0) + 150 * np.exp(-t / 7200.0)
    y = truth + rng.normal(0.0, 4.0, t.size)
    res = R.epoc(t, y, 100.0, baseline_method="smr")
    assert res.model == "two_phase"
    aiccs = {f.model: f.aicc for f in res.candidates}
    assert aiccs["two_phase"] < aiccs["one_phase"] - 10
    true_epoc = (300 * 600 + 150 * 7200) / 3600.0
    # tolerance 3 %: noise sd 4 on a 47-phase record gives an EPOC sd of about 1 % (seeded)
    assert res.epoc_fit_mg_kg == pytest.approx(true_epoc, rel=0.03)
    fast, slow = res.fit.rates_per_s
    assert fast > slow
    assert 1 / fast == pytest.approx(600.0, rel=0.15)
    assert 1 / slow == pytest.approx(7200.0, rel=0.15)
    # the fitted t95 is where the true excess has fallen to 5 % of its start (within 5 %)
    excess = lambda s: 300 * math.exp(-s / 600.0) + 150 * math.exp(-s / 7200.0)  # noqa: E731
    assert excess(res.t95_s) / excess(0.0) == pytest.approx(0.05, rel=0.05)


def test_one_phase_chosen_for_one_phase_data():
    rng = np.random.default_rng(7)
    t = np.arange(3, 240, 6.0) * 60.0
    y = 80 + 250 * np.exp(-t / 1500.0) + rng.normal(0, 3.0, t.size)
    res = R.epoc(t, y, 80.0, baseline_method="pre_exercise")
    assert res.model == "one_phase"
    assert res.epoc_fit_mg_kg == pytest.approx(250 * 1500 / 3600.0, rel=0.03)


def test_aicc_matches_statsmodels():
    # Reference: statsmodels.tools.eval_measures.aicc with the Gaussian log-likelihood.
    rss, n, p = 12.5, 20, 3
    llf = -0.5 * n * (math.log(2 * math.pi) + math.log(rss / n) + 1)
    assert R.aicc(rss, n, p) == pytest.approx(eval_measures.aicc(llf, n, p + 1), rel=1e-12)
    assert R.aicc(rss, 5, 3) is None


def test_recovery_incomplete_flag_when_record_is_short():
    t = np.arange(2, 31, 4.0) * 60.0  # half an hour
    y = 100 + 200 * np.exp(-t / 1800.0)  # t95 = 1.5 h
    res = R.epoc(t, y, 100.0, baseline_method="smr")
    assert any(f["code"] == "RECOVERY_INCOMPLETE" for f in res.flags)
    assert res.epoc_fit_recorded_mg_kg < res.epoc_fit_mg_kg


def test_three_phases_are_enough_and_two_are_not():
    res = R.epoc([60.0, 600.0, 1800.0], [400.0, 250.0, 130.0], 100.0, baseline_method="pre_exercise")
    assert res.n_phases == 3 and res.model == "one_phase"
    with pytest.raises(InputError) as err:
        R.epoc([60.0, 600.0], [400.0, 250.0], 100.0, baseline_method="pre_exercise")
    assert err.value.field == "time_s"


def test_bad_input_is_named():
    with pytest.raises(ValueError, match="fitted_asymptote.*pre_exercise.*smr"):
        R.epoc([60, 600, 1800], [400, 250, 130], 100.0, baseline_method="resting")
    with pytest.raises(InputError) as err:
        R.epoc([60, 600, 600], [400, 250, 130], 100.0, baseline_method="smr")
    assert err.value.field == "time_s" and err.value.row == 3
    with pytest.raises(InputError) as err:
        R.epoc([60, 600, 1800], [400, 250, 130], None, baseline_method="smr")
    assert err.value.field == "baseline_mg_kg_h"
    with pytest.raises(InputError) as err:
        R.epoc([60, 600, 1800], [400, -1, 130], 100.0, baseline_method="smr")
    assert "mo2_mg_kg_h" in str(err.value)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.floats(0.0, 500.0), min_size=3, max_size=25),
    st.floats(10.0, 300.0),
    st.lists(st.floats(10.0, 900.0), min_size=25, max_size=25),
)
def test_trapezoid_epoc_non_negative_when_mo2_at_or_above_baseline(excess, baseline, gaps):
    t = np.cumsum(gaps[: len(excess)])
    y = baseline + np.asarray(excess)
    res = R.epoc(t, y, baseline, baseline_method="smr", models=())
    assert res.epoc_trapezoid_mg_kg >= 0
    assert res.fit is None and res.flags == ()


@settings(max_examples=15, deadline=None)
@given(st.lists(st.floats(1.0, 500.0), min_size=4, max_size=12), st.floats(10.0, 300.0))
def test_fitted_epoc_non_negative_when_mo2_above_baseline(excess, baseline):
    t = np.arange(1, len(excess) + 1) * 600.0
    res = R.epoc(t, baseline + np.asarray(excess), baseline, baseline_method="smr", models=("one_phase",))
    assert res.epoc_fit_mg_kg is None or res.epoc_fit_mg_kg >= 0


def test_total_oxygen_cost_and_cot_with_epoc_hand_worked():
    # By hand: three 20-min steps at MO2 200, 300, 400 mg O2 kg⁻¹ h⁻¹ -> aerobic cost
    # (200 + 300 + 400) · 1/3 h = 300 mg O2 kg⁻¹; EPOC 100 -> total 400, EPOC share 0.25.
    # Distance 0.3, 0.4, 0.5 m/s × 1200 s = 1440 m -> COT_total = 400 / 1.44 km = 277.78
    # mg O2 kg⁻¹ km⁻¹, and × 13.6 J/mg / 1000 m/km = 3.7778 J kg⁻¹ m⁻¹.
    aerobic = R.aerobic_oxygen_cost([200.0, 300.0, 400.0], [1200.0] * 3)
    assert aerobic == pytest.approx(300.0)
    assert R.aerobic_oxygen_cost([200.0, 300.0, 400.0], [1200.0] * 3, baseline_mg_kg_h=100.0) == pytest.approx(200.0)
    cost = R.total_oxygen_cost(aerobic, 100.0)
    assert cost.protocol == "recovery"
    assert (cost.total_mg_kg, cost.epoc_share) == pytest.approx((400.0, 0.25))
    cot = R.cost_of_transport_with_epoc(aerobic, 100.0, 1440.0, oxycaloric_j_per_mg_o2=13.6)
    assert cot.cot_total_mg_kg_km == pytest.approx(277.7778, rel=1e-6)
    assert cot.cot_aerobic_mg_kg_km == pytest.approx(208.3333, rel=1e-6)
    assert cot.cot_total_j_kg_m == pytest.approx(3.777778, rel=1e-6)
    with pytest.raises(InputError):
        R.cost_of_transport_with_epoc(aerobic, 100.0, 0.0)

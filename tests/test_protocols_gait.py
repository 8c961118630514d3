"""Tests of swimlab.protocols.gait: gait transition, burst-and-coast and bursts per minute."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from swimlab.errors import InputError
from swimlab.protocols import gait
from swimlab.session import Event

STEP_S = 1200.0


def _steps(n=8, first=0.10, increment=0.05, start=300.0):
    return pd.DataFrame({
        "start_s": start + STEP_S * np.arange(n),
        "end_s": start + STEP_S * np.arange(1, n + 1),
        "speed_m_s": first + increment * np.arange(n),
    })


def _simulated_log(seed, steps, upc_step, burst_step, fatigue_step, burst_rate_per_min):
    """Simulated event log with known truth: the transition in ``upc_step``, bursts from
    ``burst_step`` at a Poisson rate rising by ``burst_rate_per_min`` per step, fatigue halfway
    through ``fatigue_step`` (steps 1-based)."""
    rng = np.random.default_rng(seed)
    rows = [{"time_s": 10.0, "kind": "note", "description": "fish in, habituation"}]
    s = steps.iloc[upc_step - 1]
    rows.append({"time_s": s.start_s + 400.0, "kind": "gait_change", "description": "Pectoral to caudal (Up-c)"})
    truth = {}
    for j in range(burst_step - 1, fatigue_step):
        s = steps.iloc[j]
        end = s.start_s + STEP_S / 2 if j == fatigue_step - 1 else s.end_s
        rate = burst_rate_per_min * (j - burst_step + 2)
        minutes = int((end - s.start_s) // 60)
        counts = rng.poisson(rate, minutes)
        counts[0] = max(counts[0], 1)  # a burst in the onset step, so the truth is exact
        for m, c in enumerate(counts):
            rows.append({"time_s": s.start_s + 60.0 * m + 30.0, "kind": "burst", "count": int(c)})
        truth[j + 1] = counts.sum() / ((end - s.start_s) / 60.0)
    fat = steps.iloc[fatigue_step - 1].start_s + STEP_S / 2
    rows.append({"time_s": fat, "kind": "fatigue", "description": "rests on the grid 10 s"})
    rows.append({"time_s": fat + 5.0, "kind": "burst", "count": 4})  # after fatigue: not counted
    return pd.DataFrame(rows), truth


def test_simulated_log_recovers_transition_onset_and_rates():
    steps = _steps()
    log, truth = _simulated_log(3, steps, upc_step=3, burst_step=5, fatigue_step=7, burst_rate_per_min=0.8)
    res = gait.gait_summary(log, steps, ucrit_m_s=0.40)
    assert res.protocol == "step_ucrit"
    assert res.upc_m_s == pytest.approx(0.20) and res.upc_step == 3
    assert res.burst_onset_m_s == pytest.approx(0.30) and res.burst_onset_step == 5
    table = res.steps.set_index("step")
    for step, rate in truth.items():
        assert table.loc[step, "bursts_per_min"] == pytest.approx(rate, rel=1e-12)
    assert table.loc[7, "swum_s"] == pytest.approx(STEP_S / 2)
    assert pd.isna(table.loc[8, "bursts_per_min"])  # never swum
    assert table.loc[4, "bursts_per_min"] == 0.0
    assert table.loc[5, "share_of_ucrit"] == pytest.approx(0.30 / 0.40)
    assert table.loc[5, "share_of_upc"] == pytest.approx(0.30 / 0.20)


@pytest.mark.parametrize("text, expected", [
    ("pectoral to caudal", True), ("Upc reached", True), ("Up–c", True), ("U_pc", True),
    ("pectoral → pectoral + caudal", True), ("caudal to pectoral", False), ("burst", False), ("", False),
    ("picked up cadence", False),
])
def test_transition_description_rule(text, expected):
    assert gait.is_pectoral_caudal_transition(text) is expected


def test_first_matching_gait_change_wins_and_others_are_ignored():
    steps = _steps(4)
    log = [
        {"time_s": 400.0, "kind": "gait_change", "description": "station holding to swimming"},
        {"time_s": 1700.0, "kind": "gait_change", "description": "pectoral to caudal"},
        {"time_s": 3000.0, "kind": "gait_change", "description": "pectoral to caudal"},
    ]
    res = gait.gait_summary(log, steps)
    assert res.upc_step == 2 and res.upc_time_s == 1700.0


def test_session_events_and_step_table_are_accepted_and_filtered_by_fish():
    steps = [{"step": 1, "start_s": 0.0, "end_s": 600.0, "set_speed_m_s": 0.2},
             {"step": 2, "start_s": 600.0, "end_s": 1200.0, "set_speed_m_s": 0.3}]
    events = [Event(time_s=100, kind="burst", fish_id="F2", count=5),
              Event(time_s=700, kind="burst", fish_id="F1", count=3),
              Event(time_s=800, kind="burst", count=None)]
    res = gait.gait_summary(events, steps, speed_column="set_speed_m_s", fish_id="F1")
    table = res.steps.set_index("step")
    assert table.loc[1, "bursts"] == 0 and table.loc[2, "bursts"] == 4  # 3 + one without a count
    assert res.burst_onset_m_s == pytest.approx(0.3)
    assert res.upc_m_s is None and pd.isna(table.loc[1, "share_of_upc"])


def test_events_outside_steps_are_not_counted():
    res = gait.gait_summary([{"time_s": 5.0, "kind": "burst", "count": 2}], _steps(2))
    assert res.events_outside_steps == 1 and res.burst_onset_step is None


def test_bad_rows_are_named():
    steps = _steps(2)
    with pytest.raises(InputError) as err:
        gait.gait_summary([{"time_s": 400.0, "kind": "sprint"}], steps)
    assert (err.value.row, err.value.column) == (1, "kind")
    with pytest.raises(InputError) as err:
        gait.gait_summary([{"time_s": 400.0, "kind": "burst", "count": -2}], steps)
    assert (err.value.row, err.value.column) == (1, "count")
    with pytest.raises(InputError) as err:
        gait.gait_summary([], steps.drop(columns="speed_m_s"))
    assert err.value.column == "speed_m_s"
    overlapping = steps.copy()
    overlapping.loc[1, "start_s"] = overlapping.loc[0, "end_s"] - 10
    with pytest.raises(InputError) as err:
        gait.gait_summary([], overlapping)
    assert (err.value.row, err.value.column) == (2, "start_s")
    with pytest.raises(InputError) as err:
        gait.gait_summary([{"time_s": "late", "kind": "burst"}], steps)
    assert err.value.column == "time_s"
    with pytest.raises(ValueError, match="step_ucrit"):
        gait.gait_summary([], steps, protocol="sprint")


@given(st.lists(st.tuples(st.floats(300.0, 2700.0), st.integers(0, 9)), max_size=30))
def test_bursts_are_conserved(bursts):
    steps = _steps(2)
    log = [{"time_s": t, "kind": "burst", "count": c} for t, c in bursts]
    res = gait.gait_summary(log, steps)
    assert res.steps["bursts"].sum() == sum(c for _, c in bursts)

"""AppTest tests of the Protocols page, on the demo trials of each protocol in a temporary lab book."""

from __future__ import annotations

import json

import pytest
from browser_support import ROOT
from streamlit.testing.v1 import AppTest

TIMEOUT = 90
DEMO = ROOT / "demo_sessions"
NAMES = ("bw26-r01-ramp", "bw26-v01-recovery-epoc", "bw26-p01-first-swim", "bw26-p02-second-swim",
         "bw26-w01-gait-kinematics", "bw26-g01-group", *(f"bw26-e{i:02d}-endurance" for i in range(1, 13)))


@pytest.fixture
def lab(tmp_path, monkeypatch):
    """A fresh lab book holding the protocol demo bundles; returns the open LabBook."""
    from swimlab.io.bundle import read_bundle
    from swimlab.store import LabBook

    url = f"sqlite:///{tmp_path / 'labbook.sqlite'}"
    monkeypatch.setenv("SWIMLAB_DATABASE_URL", url)
    monkeypatch.chdir(ROOT)
    book = LabBook.open(url)
    for name in NAMES:
        contents = read_bundle(DEMO / name)
        book.create_session(contents.session, dict(contents.raw_files), who="test loader", reason="demo session")
    yield book
    book.close()


def _texts(elements) -> str:
    return "\n".join(str(e.value) for e in elements)


def _protocols(book, session_id: str) -> AppTest:
    """The Protocols page with a session open, as the Lab book page leaves it."""
    stored = book.get_session(session_id)
    at = AppTest.from_file(str(ROOT / "app_pages" / "protocols.py"), default_timeout=TIMEOUT)
    doc = stored.session.to_json_dict()
    at.session_state["app_work"] = doc
    at.session_state["app_session_id"] = session_id
    at.session_state["app_version"] = stored.version
    at.session_state["app_status"] = stored.status
    at.session_state["app_saved_json"] = json.dumps(doc, sort_keys=True, default=str)
    at.session_state["app_gen"] = 1
    at.run()
    assert not at.exception, at.exception
    assert at.title[0].value == "Protocols"
    return at


def _quantities(at: AppTest) -> set[str]:
    """Quantities of every results table on the page (the tables with a Quantity column)."""
    return {q for d in at.dataframe if "Quantity" in d.value.columns for q in d.value["Quantity"]}


def test_ramp_session_shows_umax_under_its_protocol_name(lab):
    at = _protocols(lab, "bw26-r01-ramp")
    assert "Protocol: Ramp / constant acceleration (Umax)" in _texts(at.subheader)
    assert "Ramp test (Umax)" in _texts(at.subheader)
    labels = _quantities(at)
    assert "Ramp Umax (set speed)" in labels and not any(q.startswith("Ucrit") for q in labels)
    assert len(at.get("plotly_chart")) == 1  # MO2 along the ramp
    assert "Animal care" in _texts(at.warning)


def test_recovery_session_shows_epoc_and_refuses_too_short_a_recovery(lab):
    at = _protocols(lab, "bw26-v01-recovery-epoc")
    assert "Post-exercise recovery (EPOC)" in _texts(at.subheader)
    quantities = _quantities(at)
    assert "Recovery EPOC (fitted decay, to full recovery)" in quantities
    assert "pre_exercise" in _texts(at.caption)
    # exhaustion moved to 20 min before the record ends: fewer than three recovery phases, no EPOC
    at.number_input(key=f"pr_exhaustion_{at.session_state['pr_epoch']}").set_value(22800.0).run()
    assert not at.exception, at.exception
    assert at.session_state["app_work"]["protocol"]["fatigue_time_s"] == 22800.0
    assert "EPOC needs at least three measure phases after exhaustion; got 2" in _texts(at.error)
    assert "Recovery EPOC (fitted decay, to full recovery)" not in _quantities(at)


def test_endurance_session_shows_the_survival_across_fish(lab):
    at = _protocols(lab, "bw26-e04-endurance")
    assert "Endurance across fish" in _texts(at.header)
    assert "**12** fish, **3** still swimming" in _texts(at.markdown)
    assert len(at.get("plotly_chart")) == 2  # Kaplan–Meier and the fatigue curve
    assert at.metric[0].value == "50.0 cm/s"  # the demo's maximum sustained speed
    # one censored fatigue curve per gait the trials ended in
    assert "Endurance: fatigue curves per gait" in _texts(at.subheader)
    gaits = next(d.value for d in at.dataframe if "label" in d.value.columns)
    assert list(gaits["gait"]) == ["steady_caudal", "burst_and_coast"] and gaits["fitted"].all()
    assert "likelihood ratio" in _texts(at.markdown)


def test_group_trial_shows_its_warning_and_per_capita_values(lab):
    at = _protocols(lab, "bw26-g01-group")
    assert "Group trial (fish swum together; MO2 per capita)" in _texts(at.subheader)
    warning = _texts(at.warning)
    assert "Group BW26-G01" in warning and "not comparable with fish swum alone" in warning
    assert "half group" in warning
    assert "Group trial: highest step-mean MO2 per fish" in _quantities(at)


def test_group_trial_results_page_warns(lab):
    stored = lab.get_session("bw26-g01-group")
    at = AppTest.from_file(str(ROOT / "app_pages" / "results.py"), default_timeout=TIMEOUT)
    doc = stored.session.to_json_dict()
    at.session_state["app_work"] = doc
    at.session_state["app_session_id"] = "bw26-g01-group"
    at.session_state["app_version"] = stored.version
    at.session_state["app_status"] = stored.status
    at.session_state["app_saved_json"] = json.dumps(doc, sort_keys=True, default=str)
    at.run()
    assert not at.exception, at.exception
    assert "Schooling changes the cost of swimming" in _texts(at.warning)
    assert at.metric[0].label == "Ucrit"
    # the step table: no drag columns of None for a group, and a caption saying why
    steps = next(d.value for d in at.dataframe if "mo2_per_fish_mg_h" in d.value)
    assert "drag_mn" not in steps and not steps.isna().all().any()
    assert "not computed here (several fish swam together" in _texts(at.caption)


def test_repeat_swim_is_analysed_with_its_first_swim(lab):
    at = _protocols(lab, "bw26-p02-second-swim")
    first = at.selectbox(key=f"pr_first_{at.session_state['pr_epoch']}")
    assert first.value == "bw26-p01-first-swim"
    assert "Repeat swim (recovery ratio)" in _texts(at.subheader)
    assert "Repeat-swim recovery ratio" in _quantities(at)
    assert "covers measurement uncertainty only" in _texts(at.caption)
    assert "Repeat swims across fish" in _texts(at.header)
    # unlinking the first swim: the page says the ratio needs it
    first.set_value("").run()
    assert not at.exception, at.exception
    assert "protocol.first_swim_session_id" in _texts(at.error)


def test_tail_beat_count_without_a_window_is_refused(lab):
    at = _protocols(lab, "bw26-w01-gait-kinematics")
    assert {"Gait (from the event log)", "Kinematics (tail beats)"} <= set(_texts(at.subheader).split("\n"))
    assert len(at.get("plotly_chart")) == 2
    key = f"pr_kinematics_{at.session_state['pr_epoch']}"
    at.session_state[key] = {"edited_rows": {}, "deleted_rows": [],
                             "added_rows": [{"Step [-]": 4, "Tail beats [count]": 40}]}
    at.run()
    assert not at.exception, at.exception
    assert "Tail beats, row 7, Counting window [s]: a tail-beat count needs its counting window" in _texts(at.error)
    assert "pr_save" not in [b.key for b in at.button]  # nothing can be saved while it is wrong


def test_protocols_page_is_in_the_navigation(lab, tmp_path, monkeypatch):
    monkeypatch.setenv("SWIMLAB_DEMO_DIR", str(tmp_path / "no-demo"))  # the lab book already holds the demos
    at = AppTest.from_file(str(ROOT / "app.py"), default_timeout=TIMEOUT)
    at.run()
    assert not at.exception, at.exception
    at.selectbox(key="lb_open_id").set_value("bw26-r01-ramp").run()
    at.button(key="lb_open").click().run()
    assert not at.exception, at.exception
    at.switch_page("app_pages/protocols.py").run()
    assert not at.exception, at.exception
    assert at.title[0].value == "Protocols"
    assert "Ramp Umax" in _quantities(at)

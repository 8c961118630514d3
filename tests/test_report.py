"""Tests of swimlab.report: methods text, checklist states, tables, HTML and PDF.

Sessions come from an invented scenario, simulated with swimlab.sim (truth known): the *Tarn
Beck field lab* (invented) swims two grayling, TB-A1 and TB-B2, in two chambers of a 12.5 L
tunnel at 13.5 °C; lab, study and fish labels are made up for these tests. Every demo bundle in
demo_sessions/ is reported too.
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import math
import re
import shutil
import subprocess
import types
import zlib
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from swimlab import checks, report
from swimlab.analysis import analyse
from swimlab.errors import InputError
from swimlab.session import Session
from swimlab.sim import simulate_trial

# --------------------------------------------------------------------------------------------
# The invented scenario
# --------------------------------------------------------------------------------------------

CYCLE = {"flush_s": 240.0, "wait_s": 60.0, "measure_s": 600.0}
STEP_S = 1800.0
FISH = (
    {"fish_id": "TB-A1", "chamber": "A", "mass_g": 180.0, "total_length_cm": 26.0, "body_depth_cm": 4.8,
     "body_width_cm": 2.6},
    {"fish_id": "TB-B2", "chamber": "B", "mass_g": 205.0, "total_length_cm": 27.5, "body_depth_cm": 5.0,
     "body_width_cm": 2.7},
)
SETTINGS = {"r2_min": 0.97, "min_points_per_phase": 45, "blocking_ratio_limit": 0.08, "oxygen_floor_pct_air_sat": 82.5}


def make_trial(*, seed: int = 71, speeds_m_s=(0.2, 0.3, 0.4, 0.5), fish=FISH, mo2_params=(80.0, 2.0),
               temperature_c: float = 13.5, fatigue_fraction: float = 0.5, session_id: str | None = None,
               **doc_overrides: Any) -> tuple[Session, dict[str, bytes]]:
    """Simulate a step trial and return its session document (validated) and raw files."""
    channels = [f["chamber"] for f in fish]
    sim = simulate_trial(
        seed=seed, channels=channels, speeds_m_s=speeds_m_s, step_duration_s=STEP_S,
        respirometer_volume_l=12.5, fish_mass_g={f["chamber"]: f["mass_g"] for f in fish},
        mo2_model="exponential", mo2_params=mo2_params, temperature_c=temperature_c,
        temperature_drift_c_h=0.02, sensor_noise_pct=0.05, **CYCLE,
    )
    raw = sim.csv_bytes
    sha = hashlib.sha256(raw).hexdigest()
    n = len(speeds_m_s)
    doc: dict[str, Any] = {
        "title": "TB-7 grayling step test (invented)",
        "study": "TB-7 grayling swimming (invented test study)",
        "lab": "Tarn Beck field lab (invented)",
        "operator": "R. Tester",
        "trial_date": "2031-06-02",
        "water": {"temperature_c": temperature_c, "salinity": 0.0, "barometric_pressure_kpa": 100.8},
        "flume": {
            "name": "TB tunnel 1", "section_shape": "rectangular", "section_width_cm": 12.0,
            "section_height_cm": 12.0, "section_length_cm": 45.0, "respirometer_volume_l": 12.5,
            "calibration": [{"motor_setting": m, "speed_cm_s": 1.5 * m} for m in (4, 14, 24, 34, 44)],
            "characterisation": {"date": "2031-01-20", "instrument": "vane flow meter"},
        },
        "fish": [{**f, "species": "Thymallus thymallus", "sex": "female"} for f in fish],
        "protocol": {
            "type": "step_ucrit", "start_s": 0.0,
            "steps": [{"speed_cm_s": round(u * 100, 1), "duration_min": STEP_S / 60} for u in speeds_m_s],
            "cycle": {"source": "schedule", **CYCLE, "start_s": 0.0},
            "fatigue_criterion": {"description": "Fish held against the rear grid for 15 s", "rest_on_grid_s": 15},
            "fatigue_time_s": (n - 1 + fatigue_fraction) * STEP_S,
        },
        "conditions": {"acclimation_temperature_c": 13.0, "acclimation_days": 14.0, "fasting_h": 36.0,
                       "habituation_min": 75.0, "habituation_speed_cm_s": 6.5, "time_of_day": "09:30",
                       "photoperiod": "14L:10D"},
        "sensor": {"sensor": "fibre-optic oxygen sensor TB-2", "date": "2031-06-01", "zero_point_pct": 0.0,
                   "span_point_pct": 100.0, "temperature_c": 13.5, "drift_check_pct": 99.2},
        "blanks": [{"channel": b.channel, "when": "before" if b.time_s < 0 else "after", "time_s": b.time_s,
                    "slope_mg_l_h": b.slope_mg_l_s * 3600.0} for b in sim.truth.blanks],
        "background_method": "linear",
        "events": [{"time_s": (n - 1 + fatigue_fraction) * STEP_S, "kind": "fatigue", "fish_id": fish[0]["fish_id"],
                    "description": "held on the grid 15 s"}],
        "raw_files": [{"sha256": sha, "name": "tb7-oxygen.csv", "role": "trial"}],
        "settings": dict(SETTINGS),
    }
    if session_id:
        doc["session_id"] = session_id
    doc.update(doc_overrides)
    return Session.from_json_dict(doc), {sha: raw}


def with_changes(session: Session, **updates: Any) -> Session:
    """A copy of ``session`` with top-level fields replaced (validated again)."""
    doc = copy.deepcopy(session.to_json_dict())
    doc.update(updates)
    return Session.from_json_dict(doc)


def analysed(session: Session, raw: dict[str, bytes]):
    return analyse(session, raw, n_boot=100, seed=1)


ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_sessions"
NBSP = "\u00a0"

ITEM_NUMBERS = (
    [f"K{i}" for i in range(1, 25)] + [f"S{i}" for i in range(1, 7)] + ["3a", "3b", "3c", "14", "16a", "16b", "16c"]
)


def text(value: str) -> str:
    """Report text with no-break spaces as plain spaces, for comparing with what a person reads."""
    return value.replace(NBSP, " ")


def pdf_pages(data: bytes) -> list[tuple[float, ...]]:
    """MediaBox of every page of a PDF, reading its (zlib-compressed) object streams."""
    chunks = [data]
    for match in re.finditer(rb"stream\r?\n(.*?)\r?\nendstream", data, re.S):
        try:
            chunks.append(zlib.decompress(match.group(1)))
        except zlib.error:
            pass
    body = b"\n".join(chunks)
    pages = re.findall(rb"/Type\s*/Page(?![s\w])", body)
    boxes = [tuple(float(x) for x in m.split()) for m in re.findall(rb"/MediaBox\s*\[([^\]]*)\]", body)]
    assert len(boxes) >= len(pages)
    return boxes[: len(pages)]


def external_urls(html: str) -> list[str]:
    """Every reference the browser would fetch from elsewhere (namespace URIs are not fetched)."""
    found = re.findall(r"""(?:src|href|action|poster|data)\s*=\s*["']?\s*((?:https?:|ftp:|file:)?//[^"'\s>]+)""", html, re.I)
    found += re.findall(r"""url\(\s*["']?\s*((?:https?:|ftp:|file:)?//[^)"']+)""", html, re.I)
    found += re.findall(r"@import", html)
    found += [m for m in re.findall(r"""\b(?:src|href)\s*=\s*["']([^"']+)""", html, re.I)
              if not m.startswith(("data:", "#"))]
    return found


# --------------------------------------------------------------------------------------------
# Fixtures
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def trial():
    session, raw = make_trial(mo2_params=(80.0, 2.5))
    return session, raw, analysed(session, raw)


@pytest.fixture(scope="module")
def audit():
    return pd.DataFrame({
        "id": [1, 2, 3],
        "session_id": ["x"] * 3,
        "at": ["2031-06-02T10:00:00Z", "2031-06-03T08:15:00Z", "2031-06-04T16:40:00Z"],
        "who": ["r.tester", "r.tester", "p.lead"],
        "action": ["created", "submitted", "approved"],
        "changes": [[], [], []],
        "reason": ["", "ready for review", "checked against the lab notebook"],
        "version": [1, 1, 1],
    })


@pytest.fixture(scope="module")
def full(trial, audit):
    session, _, analysis = trial
    rep = report.session_report(session, analysis, status={"status": "approved", "by": "p.lead",
                                                           "at": "2031-06-04T16:40:00Z"}, audit=audit)
    return rep, rep.pdf(page_size="A4")


# --------------------------------------------------------------------------------------------
# Numbers and units
# --------------------------------------------------------------------------------------------

# Expected strings follow the usual rules for significant figures (e.g. Taylor 1997, An
# Introduction to Error Analysis, §2.2; from memory) and the SI Brochure (BIPM 2019, §5.4.3:
# a space between number and unit, also before °C and %). Hand-written, not generated.
FORMAT_CASES = [
    (12.345, "cm/s", 3, "12.3 cm/s"),
    (15.0, "°C", 3, "15.0 °C"),
    (0.0004567, "mg/L", 3, "4.57 × 10⁻⁴ mg/L"),
    (1234.5, "", 3, "1230"),
    (9.996, "s", 3, "10.0 s"),
    (0.95, "", 2, "0.95"),
    (-0.0283, "mg/L/h", 3, "−0.0283 mg/L/h"),
    (2_500_000.0, "J", 2, "2.5 × 10⁶ J"),
    (100.0, "%", 3, "100 %"),
    (73.9356, "mg O2 kg-1 h-1", 3, "73.9 mg O₂ kg⁻¹ h⁻¹"),
    (1.5, "-", 3, "1.50"),
    (30, "", 3, "30"),
    (0.0, "cm/s", 3, "0 cm/s"),
    (None, "cm/s", 3, "—"),
    (float("nan"), "cm/s", 3, "—"),
]


@pytest.mark.parametrize(("value", "unit", "sig", "expected"), FORMAT_CASES)
def test_format_quantity_cases(value, unit, sig, expected):
    assert text(report.format_quantity(value, unit, sig)) == expected


@pytest.mark.parametrize("bad", ["12", float("inf"), True, [1.0]])
def test_format_quantity_refuses_what_is_not_a_number(bad):
    with pytest.raises(InputError):
        report.format_quantity(bad, "cm/s")


@pytest.mark.parametrize("sig", [0, -1, 2.5])
def test_format_quantity_refuses_bad_sig(sig):
    with pytest.raises(InputError, match="sig"):
        report.format_quantity(1.0, "", sig)


def _parse(shown: str) -> float:
    shown = shown.replace("−", "-")
    if "×" in shown:
        mantissa, power = shown.split(" × 10")
        power = power.translate(str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻", "0123456789-"))
        return float(mantissa) * 10.0 ** int(power)
    return float(shown)


@given(st.floats(min_value=-1e9, max_value=1e9, allow_nan=False, allow_infinity=False).filter(lambda v: abs(v) > 1e-9),
       st.integers(min_value=1, max_value=6))
def test_format_number_rounds_to_sig_figures(value, sig):
    shown = report.format_number(value, sig)
    back = _parse(shown)
    # rounding to sig figures moves the value by at most half a unit in the last place kept
    assert abs(back - value) <= 0.5 * 10 ** (math.floor(math.log10(abs(value))) - sig + 1) * (1 + 1e-9) + 1e-300
    digits = re.sub(r"[^0-9]", "", shown.split(" × ")[0]).lstrip("0")
    if abs(value) >= 1 and "×" not in shown and abs(value) >= 10 ** (sig - 1):
        assert len(digits.rstrip("0")) <= sig  # whole numbers: trailing zeros are placeholders
    else:
        assert len(digits) == sig


def test_format_entered_keeps_the_value_as_entered():
    assert text(report.format_entered(12.0, "°C")) == "12 °C"
    assert text(report.format_entered(101.325, "kPa")) == "101.325 kPa"
    assert text(report.format_entered(0.95)) == "0.95"
    assert report.format_entered(None) == "—"
    with pytest.raises(InputError):
        report.format_entered("twelve")


def test_format_range_and_units():
    assert text(report.format_range(20, 80, "cm/s")) == "20–80 cm/s"
    assert report.format_range(None, 3.0) == "—"
    assert report.pretty_unit("mg O2 kg-1 km-1") == "mg O₂ kg⁻¹ km⁻¹"
    assert report.pretty_unit("kg/m3") == "kg/m³"


# --------------------------------------------------------------------------------------------
# Methods text and checklist
# --------------------------------------------------------------------------------------------


def test_methods_carry_the_sessions_values(trial):
    session, _, analysis = trial
    methods = {h: text(t) for h, t in report.methods_paragraphs(session, analysis)}
    whole = " ".join(methods.values())
    # values typed into the scenario (tests/report_py), written as entered
    for expected in ("13.5 °C", "100.8 kPa", "12.5 L", "12 cm wide and 12 cm high", "45 cm long",
                     "a flush of 240 s, a wait of 60 s and a measure phase of 600 s",
                     "R² was at least 0.97", "at least 45 readings", "at most 5 % of the slope",
                     "limit of 8 %", "above 82.5 % air saturation", "14 d", "36 h", "75 min at 6.5 cm/s",
                     "fibre-optic oxygen sensor TB-2", "2031-06-01", "read 99.2 %", "09:30", "14L:10D",
                     "4 speed steps of set speed from 20 to 50 cm/s in increments of 10 cm/s, each lasting 30 min",
                     "Fish held against the rear grid for 15 s", "Thymallus thymallus", "TB-A1", "TB-B2",
                     "Brett (1964)", "Bell & Terhune 1970", "Garcia & Gordon 1992", "Rodgers et al. 2016"):
        assert expected in whole, expected
    # the volume ratio is the analysis' value, not a recomputation
    ratio = float(analysis.fish.set_index("fish_id").loc["TB-A1", "volume_ratio"])
    assert text(report.format_number(ratio)) in methods["Respirometer and swim tunnel"]
    assert "interpolated linearly in time between the blanks" in methods["Background respiration"]
    assert f"{len(session.blanks)} blank runs" in methods["Background respiration"]


def test_checklist_has_every_item_with_a_valid_state(trial):
    session, _, analysis = trial
    cl = report.reporting_checklist(session, analysis)
    assert list(cl.columns) == report.CHECKLIST_COLUMNS
    assert list(cl["number"]) == ITEM_NUMBERS
    assert set(cl["state"]) <= set(report.STATES)
    assert (cl["where"].str.len() > 0).all()
    # the scenario records everything a session can hold except the animal-care approval
    not_stated = cl.loc[cl["state"] != "stated", "number"].tolist()
    assert not_stated == ["14"]


def _states(session, analysis):
    cl = report.reporting_checklist(session, analysis)
    return dict(zip(cl["number"], cl["state"], strict=True)), cl


def test_removed_settings_turn_items_missing(trial):
    session, raw, _ = trial
    cases = {
        "sensor": ({"sensor": None}, ["K15", "K16"]),
        "blanks": ({"blanks": [], "background_method": "none"}, ["K17", "K18"]),
        "conditions": ({"conditions": {}}, ["K3", "K4", "K9", "K11"]),
        "species": ({"fish": [{**f, "species": ""} for f in session.to_json_dict()["fish"]]}, ["K1"]),
        "calibration": ({"flume": {**session.to_json_dict()["flume"], "calibration": []}}, ["S1"]),
    }
    for name, (update, items) in cases.items():
        reduced = with_changes(session, **update)
        states, cl = _states(reduced, analysed(reduced, raw))
        for item in items:
            assert states[item] == "missing", (name, item, cl.set_index("number").loc[item, "detail"])
        others = [n for n in ITEM_NUMBERS if n not in items and n != "14"]
        assert all(states[n] == "stated" for n in others), (name, [n for n in others if states[n] != "stated"])


def test_missing_values_are_said_in_the_methods(trial):
    session, raw, _ = trial
    reduced = with_changes(session, sensor=None, blanks=[], background_method="none")
    methods = dict(report.methods_paragraphs(reduced, analysed(reduced, raw)))
    assert "(not recorded)" in methods["Oxygen sensor"]
    assert "No background (blank) run was recorded" in methods["Background respiration"]


def test_fatigue_time_missing_and_recovery_not_applicable(trial):
    session, raw, _ = trial
    protocol = session.to_json_dict()["protocol"]
    no_fatigue = with_changes(session, protocol={**protocol, "fatigue_time_s": None})
    states, _ = _states(no_fatigue, analysed(no_fatigue, raw))
    assert states["S4"] == "missing"
    assert states["S5"] == "missing"  # Ucrit cannot be computed without the fatigue time
    recovery = with_changes(session, protocol={**protocol, "type": "recovery"})
    states, _ = _states(recovery, analysed(recovery, raw))
    assert states["S4"] == "not applicable"
    assert states["S5"] == "not applicable"


def test_arrive_items_come_from_the_event_log_and_exclusions(trial):
    session, raw, _ = trial
    doc = session.to_json_dict()
    events = doc["events"] + [
        {"time_s": 2500.0, "kind": "impingement", "fish_id": "TB-B2", "description": "tail on the grid, flow lowered"},
        {"time_s": 4000.0, "kind": "adverse_event", "fish_id": "TB-A1", "description": "loss of equilibrium for 5 s"},
    ]
    exclusions = [{"channel": "A", "cycle": 3, "reason": "fish turned round in the working section", "by": "r.tester"}]
    changed = with_changes(session, events=events, exclusions=exclusions)
    analysis = analysed(changed, raw)
    cl = report.reporting_checklist(changed, analysis).set_index("number")
    assert "2 events" in cl.loc["16b", "detail"] and "loss of equilibrium" in cl.loc["16b", "detail"]
    assert "1 phase(s) excluded by a person" in cl.loc["3b", "detail"]
    care = " ".join(report.animal_care_statement(changed, analysis))
    assert "2 adverse events or impingements recorded" in care
    rep = report.session_report(changed, analysis)
    html = rep.html(figures=False)
    assert "fish turned round in the working section" in html
    assert "loss of equilibrium for 5 s" in html
    excl = rep.tables()["exclusions"]
    assert ((excl["channel"] == "A") & (excl["cycle"] == 3) & excl["by_rule_or_person"].str.startswith("person")).any()


def test_animal_care_statement_defers_to_the_approved_protocol(trial):
    session, _, analysis = trial
    care = text(" ".join(report.animal_care_statement(session, analysis)))
    assert "protocol approved by the institution's animal-care committee" in care
    assert "not approval" in care and "local rules decide" in care
    assert "oxygen floor 82.5 % air saturation" in care  # the session's own setting


# --------------------------------------------------------------------------------------------
# Claims the data must support
# --------------------------------------------------------------------------------------------


def test_uopt_outside_the_tested_speeds_is_said_so():
    # exponential MO2 = a e^(bU) has its COT minimum at U = 1/b = 0.5 m/s, above every speed swum
    session, raw = make_trial(seed=72, speeds_m_s=(0.15, 0.2, 0.25, 0.3), mo2_params=(80.0, 2.0))
    analysis = analysed(session, raw)
    rep = report.session_report(session, analysis)
    results = " ".join(b["text"] for s in rep.sections if s["key"] == "results" for b in s["blocks"] if b["kind"] == "p")
    assert "outside the tested speeds" in results and "not supported by the data" in results
    assert report.study_table([(session, analysis)])["uopt_outside_tested"].all()


def test_uopt_inside_the_tested_speeds_is_not_called_an_extrapolation(trial):
    session, _, analysis = trial  # 1/b = 0.4 m/s lies inside 0.2–0.5 m/s
    rep = report.session_report(session, analysis)
    results = " ".join(b["text"] for s in rep.sections if s["key"] == "results" for b in s["blocks"] if b["kind"] == "p")
    assert "Uopt was" in results and "outside the tested speeds" not in results


def test_poorly_constrained_chosen_fit_is_said_so(trial):
    session, _, analysis = trial
    best = analysis.fits["TB-A1"].best
    extra = checks.flag("FIT_POORLY_CONSTRAINED", f"{best} model: relative standard error of b is 80% > 50%",
                        scope="fish", where="fish TB-A1")
    flagged = dataclasses.replace(analysis, flags=checks.flags_table([*analysis.flags.to_dict("records"), extra]))
    rep = report.session_report(session, flagged)
    results = " ".join(b["text"] for s in rep.sections if s["key"] == "results" for b in s["blocks"] if b["kind"] == "p")
    a1 = next(s for s in results.split("Fish ") if s.startswith("TB-A1"))
    b2 = next(s for s in results.split("Fish ") if s.startswith("TB-B2"))
    assert "poorly constrained" in a1 and "uncertain" in a1
    assert "poorly constrained" not in b2
    fits = rep.tables()["fits"]
    assert fits.loc[(fits["fish_id"] == "TB-A1") & (fits["model"] == best), "poorly_constrained"].all()
    assert not fits.loc[fits["fish_id"] == "TB-B2", "poorly_constrained"].any()


def test_report_refuses_an_analysis_of_another_session(trial):
    session, _, analysis = trial
    other = with_changes(session, session_id="another01")
    with pytest.raises(InputError, match="analyse this session"):
        report.session_report(other, analysis)


# --------------------------------------------------------------------------------------------
# Outputs
# --------------------------------------------------------------------------------------------


def test_pdf_is_a4_with_pages(full):
    _, pdf = full
    assert pdf.startswith(b"%PDF")
    boxes = pdf_pages(pdf)
    assert len(boxes) >= 1
    # A4 is 210 × 297 mm = 595.3 × 841.9 pt (ISO 216)
    assert all(abs(b[2] - 595.28) < 0.5 and abs(b[3] - 841.89) < 0.5 for b in boxes)


def test_pdf_letter(trial):
    session, _, analysis = trial
    pdf = report.session_report(session, analysis).pdf(page_size="Letter", figures=False)
    boxes = pdf_pages(pdf)
    # US Letter is 8.5 × 11 in = 612 × 792 pt
    assert boxes and all(abs(b[2] - 612) < 0.5 and abs(b[3] - 792) < 0.5 for b in boxes)
    with pytest.raises(ValueError, match="page_size"):
        report.session_report(session, analysis).pdf(page_size="A5")


def test_pdf_pages_render_as_images(full, tmp_path):
    if shutil.which("pdftoppm") is None:
        pytest.skip("pdftoppm (Debian's poppler-utils) is not installed")
    _, pdf = full
    path = tmp_path / "r.pdf"
    path.write_bytes(pdf)
    subprocess.run(["pdftoppm", "-png", "-r", "30", "-f", "1", "-l", "2", str(path), str(tmp_path / "p")], check=True)
    pngs = sorted(tmp_path.glob("p-*.png"))
    assert len(pngs) == 2 and all(p.stat().st_size > 2000 for p in pngs)


def test_html_is_self_contained_with_inline_svg(full):
    rep, _ = full
    html = rep.html()
    assert external_urls(html) == []
    assert html.startswith("<!DOCTYPE html>") and "<style>" in html
    n_figures = len(rep.figures)
    assert n_figures == 1 + 2 * 2  # trace, and per fish MO2–speed and COT–speed
    if report.browser_path() is None:
        assert html.count("Figure could not be rendered") == n_figures
    else:
        assert rep.figure_problems == []
        assert html.count("<svg") >= n_figures
        assert "Figure could not be rendered" not in html


def test_html_holds_every_checklist_item_and_the_sign_off(full):
    rep, _ = full
    html = text(rep.html())
    for number in ITEM_NUMBERS:
        assert f"<td class=\" nowrap\">{number}</td>" in html, number
    assert "from memory" in html and "to be checked against the paper" in html
    assert "Status: approved, by p.lead" in html
    assert "The audit trail holds 3 entries" in html and "Approved by p.lead at 2031-06-04T16:40:00Z" in html
    assert "checked against the lab notebook" in html


def test_figure_that_cannot_be_rendered_says_why(trial, monkeypatch):
    session, _, analysis = trial
    monkeypatch.setenv("BROWSER_PATH", "/nonexistent/chromium")
    rep = report.session_report(session, analysis)
    html = rep.html()
    assert html.count("Figure could not be rendered") == len(rep.figures)
    assert len(rep.figure_problems) == len(rep.figures)


def test_tables_are_csv_ready(full, tmp_path):
    rep, _ = full
    tables = rep.tables()
    assert {"fish", "steps", "results", "fits", "phases", "flags", "exclusions", "events", "checklist", "audit"} <= set(tables)
    results = tables["results"]
    assert {"fish_id", "quantity", "value", "unit", "method", "ci_low", "ci_high"} <= set(results.columns)
    paths = report.write_tables(rep, tmp_path / "csv")
    back = pd.read_csv(tmp_path / "csv" / "results.csv")
    assert len(paths) == len(tables)
    np.testing.assert_allclose(back["value"], results["value"], rtol=1e-12)  # unrounded numbers
    tables["results"].loc[0, "value"] = -1.0
    assert rep.tables()["results"].loc[0, "value"] != -1.0  # copies


def test_write_report(trial, tmp_path):
    session, _, analysis = trial
    out = report.write_report(session, analysis, tmp_path / "out" / "report.html", fmt="html", status="submitted",
                              figures=False)
    assert out.read_text("utf-8").startswith("<!DOCTYPE html>")
    assert "Status: submitted" in out.read_text("utf-8")
    assert list((tmp_path / "out").iterdir()) == [out]  # no temporary file left behind
    with pytest.raises(ValueError, match="fmt"):
        report.write_report(session, analysis, tmp_path / "x.doc", fmt="doc")
    assert not (tmp_path / "x.doc").exists()


# --------------------------------------------------------------------------------------------
# Study
# --------------------------------------------------------------------------------------------


def test_study_table_and_group_curve(trial):
    session, _, analysis = trial
    second, raw2 = make_trial(seed=73, mo2_params=(95.0, 2.3), session_id="tb7second",
                                       fish=({**FISH[0], "fish_id": "TB-C3"},))
    items = [(session, analysis), (second, analysed(second, raw2))]
    table = report.study_table(items)
    assert list(table["fish_id"]) == ["TB-A1", "TB-B2", "TB-C3"]
    assert table["session_id"].tolist() == [session.session_id] * 2 + ["tb7second"]
    for column in ("ucrit_cm_s", "smr_mg_kg_h", "mmr_mg_kg_h", "uopt_cm_s", "fit_a", "fit_b"):
        assert table[column].notna().all(), column
    row = table.set_index("fish_id").loc["TB-A1"]
    assert row["ucrit_cm_s"] == pytest.approx(analysis.result("TB-A1", "ucrit"))
    rep = report.study_report(items)
    curve = rep.tables()["group_curve"]
    assert len(curve) == 1 and curve["n_fish"].iloc[0] == 3
    # the simulated fish share b = 2.0–2.5 s/m; the population b lies in that neighbourhood
    assert 1.5 < curve["b_s_m"].iloc[0] < 3.0
    spread = rep.tables()["spread"].set_index(["species", "quantity"]).loc["Thymallus thymallus"]
    assert spread.loc["ucrit", "n_fish"] == 3
    assert spread.loc["ucrit", "sd"] == pytest.approx(table["ucrit_cm_s"].std(ddof=1))
    cl = rep.checklist
    assert (cl[list(report.STATES)].sum(axis=1) == 2).all()
    html = rep.html(figures=False)
    assert external_urls(html) == []
    assert "population curve" in html


def test_study_refuses_bad_items(trial):
    session, _, analysis = trial
    with pytest.raises(InputError):
        report.study_table([])
    with pytest.raises(InputError, match="more than once"):
        report.study_table([(session, analysis), (session, analysis)])
    with pytest.raises(InputError, match="pair"):
        report.study_table([session])


# --------------------------------------------------------------------------------------------
# Demo sessions
# --------------------------------------------------------------------------------------------


def _demo_paths():
    return sorted(p for p in DEMO.iterdir() if (p / "session.json").is_file()) if DEMO.is_dir() else []


@pytest.mark.skipif(not _demo_paths(), reason="no demo bundles in demo_sessions/ (python -m swimlab.demo demo_sessions)")
def test_every_demo_session_reports():
    from swimlab.analysis import analyse
    from swimlab.io.bundle import read_bundle

    items = []
    for path in _demo_paths():
        contents = read_bundle(path)
        session = contents.session
        analysis = analyse(session, contents.raw_files, n_boot=100)
        items.append((session, analysis))
        cl = report.reporting_checklist(session, analysis)
        assert list(cl["number"]) == ITEM_NUMBERS, path.name
        assert set(cl["state"]) <= set(report.STATES)
        rep = report.session_report(session, analysis)
        html = text(rep.html(figures=False))
        assert external_urls(html) == [], path.name
        assert text(report.format_entered(session.water.temperature_c, "°C")) in html
        assert text(report.format_entered(session.flume.respirometer_volume_l, "L")) in html
        for code in set(analysis.flags["code"]):
            assert code in html, (path.name, code)
    table = report.study_table(items)
    assert len(table) == sum(len(s.units()) for s, _ in items)  # one row per fish alone or per group


def test_session_without_a_trace_reports_what_is_missing(trial):
    session, _, _ = trial
    bare = with_changes(session, raw_files=[], blanks=[], background_method="none")
    analysis = analyse(bare, {})
    status = types.SimpleNamespace(status="returned", updated_by="p.lead", updated_at="2031-06-05T10:00:00Z",
                                   return_comment="add the blanks")  # as the lab book's StoredSession
    rep = report.session_report(bare, analysis, status=status)
    assert rep.figure_problems == ["Figure 1 (trace): there are no data to draw"]
    html = rep.html(figures=False)
    assert "Status: returned (last change by p.lead at 2031-06-05T10:00:00Z) — “add the blanks”" in html
    assert "not approved; its numbers are not final" in html
    states, _ = _states(bare, analysis)
    assert {n for n, s in states.items() if s == "missing"} == {
        "K14", "K17", "K18", "K21", "K22", "K23", "S6", "3b", "3c", "14"}


def test_endurance_protocol_items(trial):
    session, _, _ = trial
    protocol = session.to_json_dict()["protocol"]
    endurance = with_changes(session, raw_files=[], protocol={**protocol, "type": "endurance", "steps": [],
                                                               "set_speed_cm_s": 40.0, "time_limit_min": 120.0})
    analysis = analyse(endurance, {})
    states, _ = _states(endurance, analysis)
    assert states["S5"] == states["S6"] == "not applicable"
    methods = text(dict(report.methods_paragraphs(endurance, analysis))["Swimming protocol"])
    assert "endurance test was used at 40 cm/s with a time limit of 120 min" in methods
    assert "not a Ucrit" in methods


def test_the_offline_check_finds_external_references():
    # the checker used above must see what a browser would fetch, and not namespace URIs
    assert external_urls('<img src="https://example.org/a.png">')
    assert external_urls('<script src="//cdn.example.org/x.js"></script>')
    assert external_urls('<link href="style.css" rel="stylesheet">')
    assert external_urls("<style>@import url(http://example.org/a.css);</style>")
    assert external_urls('<div style="background: url(https://example.org/b.png)"></div>')
    assert external_urls('<svg xmlns="http://www.w3.org/2000/svg"><use xlink:href="#clip1"/></svg>') == []
    assert external_urls('<img src="data:image/svg+xml;base64,AAAA">') == []


# --------------------------------------------------------------------------------------------
# Protocols beyond the step test (demo bundles of each protocol)
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def protocol_demos():
    from swimlab.io.bundle import read_bundle

    out = {}
    for name in ("bw26-r01-ramp", "bw26-e01-endurance", "bw26-e04-endurance", "bw26-e05-endurance",
                 "bw26-p01-first-swim", "bw26-p02-second-swim", "bw26-v01-recovery-epoc", "bw26-w01-gait-kinematics"):
        contents = read_bundle(DEMO / name)
        first = contents.session.protocol.first_swim_session_id
        first_analysis = next((a for s, a in out.values() if s.session_id == first), None) if first else None
        out[name] = (contents.session, analyse(contents.session, contents.raw_files, n_boot=50,
                                               first_swim=first_analysis))
    return out


def test_ramp_report_names_its_protocol_and_shows_no_ucrit(protocol_demos):
    session, analysis = protocol_demos["bw26-r01-ramp"]
    rep = report.session_report(session, analysis)
    section = next(s for s in rep.sections if s["key"] == "protocol")
    assert section["heading"] == "Protocol results: Ramp test (Umax)"
    tables = [b for b in section["blocks"] if b["kind"] == "table"]
    assert tables[0]["caption"].startswith("Table P1. Ramp test (Umax)")
    quantities = [row[1] for row in tables[0]["rows"]]
    assert quantities and all(q.startswith("Ramp") for q in quantities)
    results = next(s for s in rep.sections if s["key"] == "results")
    step_rows = [b for b in results["blocks"] if b["kind"] == "table" and b["caption"].startswith("Table 3")]
    assert all("Ucrit" not in row[1] for b in step_rows for row in b["rows"])  # no step Ucrit for a ramp
    exported = rep.tables()["protocol_results"]
    assert set(exported["protocol"]) == {"ramp"}
    # The demo's own record: the ramp starts at 15 cm/s at 3600 s and rises 1.5 cm/s per min until
    # fatigue at 6000 s, so the set speed at fatigue is 15 + 1.5 × 40 = 75 cm/s.
    assert exported.set_index("quantity").loc["ramp_umax_set", "value"] == pytest.approx(75.0)
    html = text(rep.html(figures=False))
    assert "the ramp Umax was 75.0 cm/s on set speed" in html and "Farrell, A. P. (2008)" in html
    assert "not comparable with a step-test Ucrit" in html


def test_recovery_report_states_its_baseline(protocol_demos):
    session, analysis = protocol_demos["bw26-v01-recovery-epoc"]
    methods = text(dict(report.methods_paragraphs(session, analysis))["Swimming protocol"])
    assert "EPOC was measured from the baseline “pre_exercise”: routine MO2 of the measure phases before the " \
           "exercise began" in methods
    rep = report.session_report(session, analysis)
    curve = rep.tables()["protocol_recovery_curve"]
    assert len(curve) == analysis.protocol.recovery["BW26-V01"].n_phases
    figure = rep.figures["epoc_BW26-V01"]
    assert figure.error is None
    # protocol figures are numbered on from the session's own figures
    assert [f.label for f in rep.figures.values()] == [f"Figure {i}" for i in range(1, len(rep.figures) + 1)]


def test_protocol_problem_is_reported_with_its_field(protocol_demos):
    import html as html_lib

    from swimlab.io.bundle import read_bundle

    second, _ = protocol_demos["bw26-p02-second-swim"]
    alone = analyse(second, read_bundle(DEMO / "bw26-p02-second-swim").raw_files, n_boot=20)  # no first swim given
    rep = report.session_report(second, alone)
    page = html_lib.unescape(text(rep.html(figures=False)))
    assert "Protocol results not computed" in page
    assert "field 'first_swim': the recovery ratio needs the analysis of the first swim" in page
    assert "PROTOCOL_RESULT_NOT_COMPUTED" in page
    assert set(rep.tables()["protocol_problems"]["field"]) == {"first_swim"}


def test_study_report_endurance_survival_and_repeat_pairs(protocol_demos):
    from swimlab.protocol_analysis import endurance_summary, repeat_pairs

    items = list(protocol_demos.values())
    rep = report.study_report(items)
    tables = rep.tables()
    summary = endurance_summary(items)
    pd.testing.assert_frame_equal(tables["endurance_kaplan_meier"], summary.kaplan_meier)
    assert tables["endurance_fish"]["fatigued"].tolist() == [False, True, True]
    pairs = tables["repeat_pairs"]
    assert pairs["recovery_ratio"].tolist() == pytest.approx(list(repeat_pairs(items).pairs["recovery_ratio"]))
    section = next(s for s in rep.sections if s["key"] == "protocols")
    headings = [b["text"] for b in section["blocks"] if b["kind"] == "h3"]
    assert headings == ["Fixed-speed endurance: survival across fish", "Repeat swims: recovery ratio across pairs"]
    # the study table names protocol results by their protocol; a ramp has no Ucrit there
    study = tables["study"].set_index("session_id")
    assert np.isnan(study.loc["bw26-r01-ramp", "ucrit_cm_s"])
    assert study.loc["bw26-r01-ramp", "ramp_umax_set_cm_s"] == pytest.approx(75.0)  # 15 + 1.5 × 40, as above
    assert study.loc["bw26-p02-second-swim", "repeat_recovery_ratio"] == pytest.approx(pairs["recovery_ratio"].iloc[0])
    # the fish swum twice counts once in the spread between fish (first swims only)
    spread = tables["spread"].set_index(["species", "quantity"])
    trout = "Oncorhynchus mykiss (hatchery)"
    assert spread.loc[(trout, "ucrit"), "n_fish"] == 1
    assert external_urls(rep.html(figures=False)) == []


def test_animal_care_approval_fills_arrive_item_14():
    # ARRIVE 2.0 item 14 (Percie du Sert et al. 2020): the approving committee and protocol number.
    from swimlab.io.bundle import read_bundle
    from swimlab.report import reporting_checklist

    demo = Path(__file__).resolve().parents[1] / "demo_sessions" / "bw26-t03-large-fish"
    contents = read_bundle(demo)
    session = contents.session
    analysis = analyse(session, contents.raw_files, n_boot=50)
    items = reporting_checklist(session, analysis).set_index("number")
    assert items.loc["14", "state"] == "stated"
    assert "BW-AC-2026-07" in items.loc["14", "detail"]
    bare = session.model_copy(update={"conditions": session.conditions.model_copy(update={"animal_care_approval": ""})})
    items = reporting_checklist(bare, analysis).set_index("number")
    assert items.loc["14", "state"] == "missing"

"""Tests of the command line (swimlab.cli, ``python -m swimlab``).

Exit status 0 on success and 2 on bad input, with one line on stderr and no traceback.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import types
from pathlib import Path

import pandas as pd
import pytest
from store_fixtures import TRACE, make_session, with_raw

from swimlab.cli import build_parser, main
from swimlab.io.bundle import SESSION_JSON, read_bundle, schema_path, write_bundle
from swimlab.store import LabBook

ROOT = Path(__file__).resolve().parent.parent
COMMANDS = ["import-bundle", "export", "analyse", "fatigue-curves", "report", "list", "check-bundle", "schema",
            "people"]


@pytest.fixture
def db(tmp_path) -> str:
    return f"sqlite:///{tmp_path / 'labbook.sqlite'}"


@pytest.fixture
def bundle(tmp_path):
    session, raw = with_raw(make_session(), ("run 1.txt", TRACE, "trial"))
    return write_bundle(session, raw, tmp_path / "bundle"), session, raw


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_line_error(err: str, *words: str) -> None:
    assert err.count("\n") == 1 and err.startswith("swimlab: error:"), err
    assert "Traceback" not in err
    for word in words:
        assert word in err, (word, err)


@pytest.mark.parametrize("command", [None, *COMMANDS])
def test_help_on_every_command(capsys, command):
    with pytest.raises(SystemExit) as info:
        main([command, "--help"] if command else ["--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: swimlab")
    if command is None:
        for name in COMMANDS:
            assert name in out


def test_every_command_is_documented_in_the_parser():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    assert sorted(sub.choices) == sorted(COMMANDS)


def test_import_list_export_round_trip(capsys, tmp_path, db, bundle):
    path, session, raw = bundle
    code, out, err = run(capsys, "--db", db, "--who", "ana", "import-bundle", str(path))
    assert (code, err) == (0, "")
    assert f"imported session {session.session_id}" in out and "version 1" in out

    code, out, _ = run(capsys, "--db", db, "list")
    assert code == 0 and session.session_id in out and "draft" in out
    code, out, _ = run(capsys, "--db", db, "list", "--status", "approved")
    assert code == 0 and "no sessions with status 'approved'" in out

    for as_zip in (False, True):
        target = tmp_path / ("out.zip" if as_zip else "out")
        code, out, err = run(
            capsys,
            "--db",
            db,
            "export",
            session.session_id,
            str(target),
            *(["--zip"] if as_zip else []),
        )
        assert (code, err) == (0, "")
        contents = read_bundle(target)
        assert contents.session == session and contents.raw_files == raw

    with LabBook.open(db) as book:
        trail = book.audit_trail(session.session_id)
    assert trail["who"].tolist() == ["ana"]
    assert trail["reason"].tolist() == ["imported from bundle bundle"]


def test_who_defaults_to_the_environment(capsys, monkeypatch, db, bundle):
    path, session, _ = bundle
    monkeypatch.setenv("SWIMLAB_USER", "R. Operator")
    assert run(capsys, "--db", db, "import-bundle", str(path))[0] == 0
    with LabBook.open(db) as book:
        assert book.get_session(session.session_id).updated_by == "R. Operator"


def test_db_from_the_environment(capsys, monkeypatch, tmp_path, bundle):
    path, session, _ = bundle
    monkeypatch.setenv("SWIMLAB_DATABASE_URL", f"sqlite:///{tmp_path / 'env.sqlite'}")
    assert run(capsys, "--who", "ana", "import-bundle", str(path))[0] == 0
    assert (tmp_path / "env.sqlite").is_file()


@pytest.mark.parametrize(
    "argv, words",
    [
        (["export", "nope", "x"], ["no session 'nope'"]),
        (["import-bundle", "/no/such/bundle"], ["no bundle folder or .zip"]),
        (["check-bundle", "/no/such/bundle"], ["no bundle folder or .zip"]),
        (["analyse", "--session", "nope"], ["no session 'nope'"]),
    ],
)
def test_bad_input_exits_2_with_one_line(capsys, db, argv, words):
    code, out, err = run(capsys, "--db", db, *argv)
    assert code == 2 and out == ""
    assert_one_line_error(err, *words)


def test_malformed_bundle_is_named(capsys, db, bundle):
    path, _, _ = bundle
    (path / "raw" / "run 1.txt").write_bytes(TRACE.replace(b"99,1", b"99,7"))
    code, _, err = run(capsys, "--db", db, "import-bundle", str(path))
    assert code == 2
    assert_one_line_error(err, "raw/run 1.txt", "checksum")
    with LabBook.open(db) as book:
        assert book.list_sessions().empty


def test_second_import_is_refused(capsys, db, bundle):
    path, _, _ = bundle
    assert run(capsys, "--db", db, "import-bundle", str(path))[0] == 0
    code, _, err = run(capsys, "--db", db, "import-bundle", str(path))
    assert code == 2
    assert_one_line_error(err, "already in the lab book")


def test_export_refuses_an_existing_path(capsys, tmp_path, db, bundle):
    path, session, _ = bundle
    run(capsys, "--db", db, "import-bundle", str(path))
    code, _, err = run(capsys, "--db", db, "export", session.session_id, str(path))
    assert code == 2
    assert_one_line_error(err, "already exists")
    assert run(capsys, "--db", db, "export", session.session_id, str(path), "--overwrite")[0] == 0


def test_unusable_database_url(capsys):
    code, _, err = run(capsys, "--db", "mysql://u@h/db", "list")
    assert code == 2
    assert_one_line_error(err, "'sqlite' or 'postgresql'")


def test_usage_errors_exit_2(capsys):
    for argv in (
        ["list", "--status", "finished"],
        ["frobnicate"],
        ["analyse"],
        ["analyse", "b", "--session", "x"],
    ):
        with pytest.raises(SystemExit) as info:
            main(argv)
        assert info.value.code == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "Traceback" not in err


def test_check_bundle_and_schema(capsys, bundle):
    path, session, _ = bundle
    code, out, _ = run(capsys, "check-bundle", str(path))
    assert code == 0 and f"ok: session {session.session_id}" in out
    code, out, _ = run(capsys, "schema")
    assert code == 0 and out == schema_path().read_text(encoding="utf-8")


def test_python_dash_m_swimlab(tmp_path, bundle):
    """The real entry point, in a fresh interpreter."""
    path, _, _ = bundle
    (path / SESSION_JSON).unlink()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "swimlab",
            "--db",
            f"sqlite:///{tmp_path / 'lb.sqlite'}",
            "import-bundle",
            str(path),
        ],
        capture_output=True,
        text=True,
        env=env,
        cwd=tmp_path,
        timeout=60,
    )
    assert done.returncode == 2 and done.stdout == ""
    assert_one_line_error(done.stderr, "session.json", "missing")
    done = subprocess.run(
        [sys.executable, "-m", "swimlab", "--help"],
        capture_output=True,
        text=True,
        env=env,
        timeout=60,
    )
    assert done.returncode == 0 and "import-bundle" in done.stdout


# --------------------------------------------------------------------------------------------
# analyse
# --------------------------------------------------------------------------------------------


class _StandInAnalysis:
    """Tables of a known content, to check what the command writes (not the science)."""

    def __init__(self, session, raw_files, lab_settings):
        self.steps = pd.DataFrame({"step": [1, 2], "mo2_mg_kg_h": [81.5, 97.25]})
        self.phases = pd.DataFrame({"cycle": [1, 1, 1], "phase": ["flush", "wait", "measure"]})
        self.measure = pd.DataFrame({"cycle": [1], "mo2_mg_kg_h": [81.5]})
        self.results = pd.DataFrame(
            {"fish_id": ["F1"], "quantity": ["ucrit"], "value": [61.25], "unit": ["cm/s"],
             "method": ["Brett (1964)"], "ci_low": [float("nan")], "ci_high": [float("nan")], "note": [""]}
        )
        self.flags = pd.DataFrame(
            {"code": ["PHASE_POOR_FIT", "BACKGROUND_MISSING"], "severity": ["invalid", "warning"]}
        )
        self.inputs = (session, raw_files, lab_settings)

    def to_json_dict(self):
        return {
            "session_id": self.inputs[0].session_id,
            "raw": sorted(self.inputs[1]),
            "lab": self.inputs[2],
        }


def test_analyse_writes_its_tables(capsys, monkeypatch, tmp_path, db, bundle):
    seen = []

    def analyse(session, raw_files, *, lab_settings=None):
        seen.append(_StandInAnalysis(session, raw_files, lab_settings))
        return seen[-1]

    monkeypatch.setitem(sys.modules, "swimlab.analysis", types.SimpleNamespace(analyse=analyse))
    path, session, raw = bundle
    out_dir = tmp_path / "results"
    code, out, err = run(capsys, "analyse", str(path), "--out", str(out_dir))
    assert (code, err) == (0, "")
    assert "3 phases, 2 steps, 2 flags (1 invalid, 1 warning)" in out
    assert "F1  ucrit         61.25 cm/s — Brett (1964)" in out
    assert sorted(p.name for p in out_dir.iterdir()) == [
        "analysis.json",
        "cycles.csv",
        "flags.csv",
        "phases.csv",
        "results.csv",
        "steps.csv",
    ]
    pd.testing.assert_frame_equal(pd.read_csv(out_dir / "steps.csv"), seen[0].steps)
    pd.testing.assert_frame_equal(pd.read_csv(out_dir / "phases.csv"), seen[0].measure)
    pd.testing.assert_frame_equal(pd.read_csv(out_dir / "cycles.csv"), seen[0].phases)
    pd.testing.assert_frame_equal(pd.read_csv(out_dir / "flags.csv"), seen[0].flags)
    assert json.loads((out_dir / "analysis.json").read_text(encoding="utf-8")) == {
        "session_id": session.session_id,
        "raw": sorted(raw),
        "lab": None,
    }

    # from the lab book: its settings overrides are passed on
    run(capsys, "--db", db, "import-bundle", str(path))
    with LabBook.open(db) as book:
        book.set_lab_settings({"r2_min": 0.9}, who="pi", reason="lab rule")
    code, _, _ = run(
        capsys, "--db", db, "analyse", "--session", session.session_id, "--out", str(out_dir)
    )
    assert code == 0
    assert seen[1].inputs[1] == raw and seen[1].inputs[2] == {"r2_min": 0.9}


def test_analyse_with_the_real_analysis(capsys, tmp_path):
    try:
        from swimlab.analysis import analyse
    except ImportError as exc:  # pragma: no cover - until swimlab.analysis and its readers exist
        pytest.skip(f"swimlab.analysis is not importable yet: {exc}")
    session = make_session()  # no raw trace: analysed as far as it can be (geometry, steps)
    path = write_bundle(session, {}, tmp_path / "bundle")
    out_dir = tmp_path / "results"
    code, out, err = run(capsys, "analyse", str(path), "--out", str(out_dir))
    assert (code, err) == (0, "")
    expected = analyse(session, {})
    assert f"{len(expected.steps)} steps" in out
    pd.testing.assert_frame_equal(
        pd.read_csv(out_dir / "steps.csv"),
        pd.read_csv(__import__("io").StringIO(expected.steps.to_csv(index=False))),
    )
    written = json.loads((out_dir / "analysis.json").read_text(encoding="utf-8"))
    assert written["session_id"] == session.session_id
    assert written == json.loads(json.dumps(expected.to_json_dict()))


def test_analyse_prints_the_results_of_a_demo_session(capsys, tmp_path):
    demo = Path(__file__).resolve().parents[1] / "demo_sessions" / "bw26-t01-clean-ucrit"
    code, out, err = run(capsys, "analyse", str(demo), "--out", str(tmp_path / "out"))
    assert (code, err) == (0, "")
    for quantity in ("ucrit", "smr", "mmr", "aas", "uopt", "cotmin"):
        assert f"BW26-T01  {quantity} " in out
    results = pd.read_csv(tmp_path / "out" / "results.csv")
    assert set(results["quantity"]) >= {"ucrit", "ucrit_set", "smr", "mmr"}


def test_report_writes_a_self_contained_html_report(capsys, tmp_path):
    demo = Path(__file__).resolve().parents[1] / "demo_sessions" / "bw26-t03-large-fish"
    out = tmp_path / "report.html"
    code, printed, err = run(capsys, "report", str(demo), "--out", str(out), "--no-figures")
    assert (code, err) == (0, "")
    assert "HTML report" in printed
    html = out.read_text(encoding="utf-8")
    assert "BW26-T03" in html and "Bell" in html  # the fish, and the blocking source in the methods
    assert "http://" not in html and "https://" not in html.replace("https://doi.org", "")


def test_report_of_a_missing_bundle_is_one_line_on_stderr(capsys, tmp_path):
    code, _, err = run(capsys, "report", str(tmp_path / "nothing"), "--out", str(tmp_path / "r.html"))
    assert code == 2
    assert err.count("\n") == 1 and "Traceback" not in err


def test_report_of_a_repeat_swim_states_its_recovery_ratio(capsys, tmp_path):
    # As `analyse` does, `report` analyses the first swim (the bundle beside this one) so that
    # the recovery ratio Ucrit2 / Ucrit1 is in the report.
    demo = Path(__file__).resolve().parents[1] / "demo_sessions" / "bw26-p02-second-swim"
    out = tmp_path / "report.html"
    code, _, err = run(capsys, "report", str(demo), "--out", str(out), "--no-figures")
    assert (code, err) == (0, "")
    html = out.read_text(encoding="utf-8")
    assert "the repeat-swim recovery ratio Ucrit₂ / Ucrit₁ was" in html
    assert "session bw26-p01-first-swim" in html

"""Tests of swimlab.io.bundle: the session bundle format (docs/bundle_format.md).

The format is our own; what it must do is checked here: round trips (folder and .zip) keep
every value and the raw bytes; the committed JSON Schema is the one the model generates and
JSON Schema draft 2020-12 (the published meta-schema, through ``jsonschema``) accepts it; every
malformed bundle is refused with the file and field/row/column named, and nothing is written.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import shutil
import zipfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from jsonschema import Draft202012Validator
from store_fixtures import TRACE, make_session, session_dict, with_raw

from swimlab.errors import InputError
from swimlab.io import bundle as bundle_module
from swimlab.io.bundle import (
    BUNDLE_FORMAT_VERSION,
    SESSION_JSON,
    TABLES,
    UPGRADES,
    bundle_json_schema,
    read_bundle,
    schema_path,
    schema_text,
    write_bundle,
)
from swimlab.session import Fish, Session

BLANK_TRACE = b"time_s,oxygen_pct_air_sat\n0,99.5\n60,99.4\n"


def _rich_session() -> tuple[Session, dict[str, bytes]]:
    """A session with every table non-empty and two raw files."""
    base = make_session(
        events=[
            {
                "time_s": 600.0,
                "kind": "gait_change",
                "fish_id": "NW-01",
                "description": 'burst-and-coast, "tail" beats',
            },
            {
                "time_s": 3500.0,
                "kind": "fatigue",
                "fish_id": "NW-01",
                "description": "rests on grid\nfor 10 s",
            },
        ],
        exclusions=[{"channel": "A", "cycle": 3, "reason": "bubbles on the sensor", "by": "ana"}],
    )
    session, raw = with_raw(
        base, ("run 1.txt", TRACE, "trial"), ("blank after.csv", BLANK_TRACE, "blank")
    )
    doc = session.to_json_dict()
    doc["blanks"] = [
        {"channel": "A", "when": "before", "time_s": -600.0, "slope_mg_l_h": -0.012},
        {
            "channel": "A",
            "when": "after",
            "time_s": 4000.0,
            "raw_file_sha256": hashlib.sha256(BLANK_TRACE).hexdigest(),
        },
    ]
    return Session.from_json_dict(doc), raw


def _listing(folder: Path) -> list[tuple[str, int]]:
    return sorted((p.relative_to(folder).as_posix(), p.stat().st_size) for p in folder.rglob("*"))


def _rewrite_json(bundle: Path, change) -> None:
    path = bundle / SESSION_JSON
    doc = json.loads(path.read_text(encoding="utf-8"))
    change(doc)
    path.write_text(json.dumps(doc, indent=2), encoding="utf-8")


@pytest.fixture
def written(tmp_path) -> tuple[Path, Session, dict[str, bytes]]:
    session, raw = _rich_session()
    return write_bundle(session, raw, tmp_path / "bundle"), session, raw


# --------------------------------------------------------------------------------------------
# Round trips
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("as_zip", [False, True])
def test_round_trip_keeps_session_and_raw_bytes(tmp_path, as_zip):
    session, raw = _rich_session()
    path = write_bundle(session, raw, tmp_path / ("b.zip" if as_zip else "b"), as_zip=as_zip)
    contents = read_bundle(path)
    assert contents.session == session
    assert contents.raw_files == raw
    assert contents.problems == []
    assert contents.format_version == BUNDLE_FORMAT_VERSION
    assert contents.generator.startswith("swimlab ")


def test_layout_on_disk(written):
    path, session, raw = written
    names = {p for p, _ in _listing(path)}
    assert {SESSION_JSON, "raw", "raw/run 1.txt", "raw/blank after.csv"} <= names
    assert {t.name for t in TABLES} <= names
    # raw files are byte for byte what was given (latin-1, decimal commas, header line)
    assert (path / "raw" / "run 1.txt").read_bytes() == TRACE
    doc = json.loads((path / SESSION_JSON).read_text(encoding="utf-8"))
    assert doc["bundle_format_version"] == BUNDLE_FORMAT_VERSION == 2
    manifest = {entry["path"]: entry for entry in doc["files"]}
    assert manifest["raw/run 1.txt"]["sha256"] == hashlib.sha256(TRACE).hexdigest()
    assert manifest["raw/run 1.txt"]["bytes"] == len(TRACE)
    assert manifest["raw/blank after.csv"]["role"] == "blank"
    assert manifest["fish.csv"]["role"] == "table"


def test_tables_hold_the_session_lists(written):
    path, session, _ = written
    import pandas as pd

    fish = pd.read_csv(path / "fish.csv")
    assert list(fish.columns) == list(Fish.model_fields)
    assert fish.loc[0, "mass_g"] == session.fish[0].mass_g
    steps = pd.read_csv(path / "steps.csv")
    assert steps["speed_cm_s"].tolist() == [s.speed_cm_s for s in session.protocol.steps]
    events = pd.read_csv(path / "events.csv", keep_default_na=False)
    assert events["description"].tolist() == [e.description for e in session.events]
    assert len(pd.read_csv(path / "blanks.csv")) == 2
    assert pd.read_csv(path / "exclusions.csv")["reason"].tolist() == ["bubbles on the sensor"]


def test_same_name_raw_files_are_kept_apart(tmp_path):
    other = TRACE + b"4;98,8;12,6\n"
    session, raw = with_raw(
        make_session(), ("C:\\logger\\run.txt", TRACE, "trial"), ("run.txt", other, "trial")
    )
    path = write_bundle(session, raw, tmp_path / "b")
    raw_names = sorted(p.name for p in (path / "raw").iterdir())
    assert raw_names == sorted(["run.txt", f"{hashlib.sha256(other).hexdigest()[:12]}_run.txt"])
    assert read_bundle(path).raw_files == raw


def test_zip_of_a_folder_is_read(tmp_path, written):
    path, session, raw = written
    archive = shutil.make_archive(
        str(tmp_path / "zipped"), "zip", root_dir=tmp_path, base_dir="bundle"
    )
    contents = read_bundle(archive)
    assert contents.session == session and contents.raw_files == raw


text = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc")) | st.sampled_from(",;\"'\n\r\t"),
    max_size=40,
)


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    title=text.filter(lambda s: s.strip() != ""),
    descriptions=st.lists(text, max_size=4),
    mass=st.floats(
        min_value=0.001, max_value=20000, allow_nan=False
    ),  # below the 30 L respirometer
)
def test_any_text_and_numbers_survive_a_round_trip(tmp_path_factory, title, descriptions, mass):
    base = session_dict(
        title=title,
        events=[
            {"time_s": 10.0 * i, "kind": "note", "description": d}
            for i, d in enumerate(descriptions)
        ],
    )
    base["fish"][0]["mass_g"] = mass
    session = Session.from_json_dict(base)
    folder = tmp_path_factory.mktemp("prop")
    contents = read_bundle(write_bundle(session, {}, folder / "b", as_zip=True))
    assert contents.session == session
    assert contents.problems == []


# --------------------------------------------------------------------------------------------
# The published JSON Schema
# --------------------------------------------------------------------------------------------


def test_committed_schema_equals_the_generated_one():
    committed = schema_path().read_text(encoding="utf-8")
    assert committed == schema_text(bundle_json_schema()), (
        "swimlab/schema/session-bundle-v2.schema.json is out of date with the session model; "
        "run `python -m swimlab schema --write` and commit it"
    )


def test_committed_schema_is_valid_draft_2020_12_and_accepts_written_bundles(written):
    schema = json.loads(schema_path().read_text(encoding="utf-8"))
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    Draft202012Validator.check_schema(schema)  # against the draft 2020-12 meta-schema
    path, _, _ = written
    doc = json.loads((path / SESSION_JSON).read_text(encoding="utf-8"))
    assert list(Draft202012Validator(schema).iter_errors(doc)) == []
    doc["session"]["fish"][0]["mass_g"] = "heavy"
    errors = list(Draft202012Validator(schema).iter_errors(doc))
    assert [list(e.absolute_path) for e in errors] == [["session", "fish", 0, "mass_g"]]


# --------------------------------------------------------------------------------------------
# Malformed bundles: refused with the exact problem, nothing written
# --------------------------------------------------------------------------------------------


def _refused(path: Path, **where) -> InputError:
    parent = path.parent
    before = _listing(parent)
    with pytest.raises(InputError) as info:
        read_bundle(path)
    assert _listing(parent) == before, "reading a bundle must write nothing"
    for key, value in where.items():
        assert getattr(info.value, key) == value, (key, str(info.value))
    return info.value


def test_missing_session_json(written):
    path, _, _ = written
    (path / SESSION_JSON).unlink()
    error = _refused(path, file=SESSION_JSON)
    assert "missing" in str(error)


def test_session_json_not_json(written):
    path, _, _ = written
    text = (path / SESSION_JSON).read_text(encoding="utf-8").splitlines()
    text[3] = text[3] + " oops"
    (path / SESSION_JSON).write_text("\n".join(text), encoding="utf-8")
    error = _refused(path, file=SESSION_JSON, row=4)
    assert "not valid JSON" in str(error)


def test_nan_is_not_json(written):
    path, _, _ = written
    raw = (path / SESSION_JSON).read_text(encoding="utf-8")
    (path / SESSION_JSON).write_text(
        raw.replace('"mass_g": 152.3', '"mass_g": NaN'), encoding="utf-8"
    )
    _refused(path, file=SESSION_JSON)


def test_wrong_type_names_the_field(written):
    path, _, _ = written
    _rewrite_json(path, lambda d: d["session"]["fish"][0].__setitem__("mass_g", "heavy"))
    error = _refused(path, file=SESSION_JSON, field="session.fish.0.mass_g")
    assert "'heavy' is not of type 'number'" in str(error)


def test_wrong_type_in_the_manifest(written):
    path, _, _ = written
    _rewrite_json(path, lambda d: d["files"][0].__setitem__("bytes", "many"))
    _refused(path, file=SESSION_JSON, field="files.0.bytes")


def test_cross_field_problem_names_the_field(written):
    path, _, _ = written
    _rewrite_json(path, lambda d: d["session"]["fish"][0].__setitem__("body_depth_cm", 30.0))
    error = _refused(path, file=SESSION_JSON)
    assert error.field == "session.fish.0.body_depth_cm"


def test_raw_file_checksum_mismatch(written):
    path, _, _ = written
    target = path / "raw" / "run 1.txt"
    data = bytearray(target.read_bytes())
    data[-3] = ord("7")  # same size, one digit changed
    target.write_bytes(bytes(data))
    doc = json.loads((path / SESSION_JSON).read_text(encoding="utf-8"))
    index = [e["path"] for e in doc["files"]].index("raw/run 1.txt")
    error = _refused(path, file="raw/run 1.txt", field=f"files.{index}.sha256")
    assert "checksum" in str(error)


def test_raw_file_size_mismatch(written):
    path, _, _ = written
    (path / "raw" / "run 1.txt").write_bytes(TRACE + b"\n")
    error = _refused(path, file="raw/run 1.txt")
    assert "bytes" in str(error)


def test_raw_file_listed_but_absent(written):
    path, _, _ = written
    (path / "raw" / "blank after.csv").unlink()
    error = _refused(path, file="raw/blank after.csv")
    assert "absent" in str(error)


def test_raw_file_referred_to_but_not_listed(written):
    path, session, _ = written
    _rewrite_json(
        path,
        lambda d: d.__setitem__("files", [e for e in d["files"] if e["path"] != "raw/run 1.txt"]),
    )
    _refused(path, file=SESSION_JSON, field="session.raw_files.0.sha256")


def test_csv_extra_column(written):
    path, _, _ = written
    lines = (path / "fish.csv").read_text(encoding="utf-8").splitlines()
    lines = [lines[0] + ",colour"] + [line + ",silver" for line in lines[1:]]
    (path / "fish.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    _refused(path, file="fish.csv", row=1, column="colour")


def test_csv_missing_column(written):
    path, _, _ = written
    import pandas as pd

    frame = pd.read_csv(path / "steps.csv").drop(columns=["duration_min"])
    frame.to_csv(path / "steps.csv", index=False)
    _refused(path, file="steps.csv", row=1, column="duration_min")


def test_csv_value_differs_from_the_json(written):
    path, _, _ = written
    text = (path / "steps.csv").read_text(encoding="utf-8")
    (path / "steps.csv").write_text(text.replace("30.0,20.0", "35.0,20.0"), encoding="utf-8")
    error = _refused(path, file="steps.csv", row=3, column="speed_cm_s")
    assert "authoritative" in str(error)


def test_csv_extra_row(written):
    path, _, _ = written
    with open(path / "steps.csv", "a", encoding="utf-8") as handle:
        handle.write("50.0,20.0,\r\n")
    _refused(path, file="steps.csv", row=5)


def test_csv_ragged_row(written):
    path, _, _ = written
    with open(path / "steps.csv", "a", encoding="utf-8") as handle:
        handle.write("50.0\r\n")
    _refused(path, file="steps.csv", row=5)


def test_csv_reformatted_with_the_same_values_is_accepted_with_a_note(written):
    path, session, _ = written
    text = (path / "fish.csv").read_text(encoding="utf-8")
    (path / "fish.csv").write_text(
        text.replace("152.3", "152.30").replace("\r\n", "\n"), encoding="utf-8", newline=""
    )
    contents = read_bundle(path)
    assert contents.session == session
    assert any(p.startswith("fish.csv: re-formatted") for p in contents.problems)


def test_unlisted_file_is_ignored_with_a_note(written):
    path, session, _ = written
    (path / "raw" / "notes.txt").write_text("scribbles", encoding="utf-8")
    contents = read_bundle(path)
    assert contents.session == session
    assert contents.problems == ["raw/notes.txt: not listed in session.json; ignored"]


def test_not_a_swimlab_bundle(written):
    path, _, _ = written
    _rewrite_json(path, lambda d: d.__setitem__("bundle_format", "something-else"))
    _refused(path, file=SESSION_JSON, field="bundle_format")


def test_newer_layout_is_refused(written):
    path, _, _ = written
    _rewrite_json(path, lambda d: d.__setitem__("bundle_format_version", BUNDLE_FORMAT_VERSION + 1))
    error = _refused(path, file=SESSION_JSON, field="bundle_format_version")
    assert "newer than this swimlab can read" in str(error)


def test_unsafe_zip_member_is_refused(tmp_path, written):
    path, _, _ = written
    archive = tmp_path / "evil.zip"
    with zipfile.ZipFile(archive, "w") as zf:
        for item in path.rglob("*"):
            if item.is_file():
                zf.write(item, item.relative_to(path).as_posix())
        zf.writestr("../outside.txt", b"x")
    _refused(archive, file=str(archive))
    assert not (tmp_path.parent / "outside.txt").exists()


def test_neither_folder_nor_zip(tmp_path):
    plain = tmp_path / "session.txt"
    plain.write_text("hello", encoding="utf-8")
    _refused(plain, file=str(plain))
    with pytest.raises(InputError, match="no bundle"):
        read_bundle(tmp_path / "absent")


# --------------------------------------------------------------------------------------------
# Older layouts
# --------------------------------------------------------------------------------------------


def _as_layout_0(path: Path) -> None:
    """Rewrite a bundle in the pre-release layout 0: mass in kg, no CSV tables."""

    def change(doc):
        doc["bundle_format_version"] = 0
        for fish in doc["session"]["fish"]:
            fish["mass_kg"] = fish.pop("mass_g") / 1000
        doc["files"] = [e for e in doc["files"] if e["role"] != "table"]

    _rewrite_json(path, change)
    for table in TABLES:
        (path / table.name).unlink()


def test_layout_0_is_upgraded(written):
    path, session, raw = written
    _as_layout_0(path)
    contents = read_bundle(path)
    assert contents.format_version == 0
    assert contents.session.fish[0].mass_g == 152.3  # 0.1523 kg, converted exactly in decimal
    assert contents.session == session
    assert contents.raw_files == raw
    assert any("upgraded from bundle layout 0 to 1" in p for p in contents.problems)


def _as_layout_1(path: Path) -> None:
    """Rewrite a bundle in layout 1: no groups, no gait on events, events.csv without its gait column."""

    def change(doc):
        doc["bundle_format_version"] = 1
        doc["session"]["schema_version"] = 1
        doc["session"].pop("groups", None)
        for event in doc["session"]["events"]:
            event.pop("gait", None)

    _rewrite_json(path, change)
    rows = list(csv.reader(io.StringIO((path / "events.csv").read_text(encoding="utf-8"), newline="")))
    assert rows[0][-1] == "gait"
    out = io.StringIO()
    csv.writer(out, lineterminator="\r\n").writerows([row[:-1] for row in rows])
    (path / "events.csv").write_text(out.getvalue(), encoding="utf-8", newline="")


def test_layout_1_is_upgraded_and_its_tables_checked_on_their_own_columns(written):
    path, session, raw = written
    _as_layout_1(path)
    contents = read_bundle(path)
    assert contents.format_version == 1
    assert contents.session == session  # nothing to convert: the new fields are empty by default
    assert any("upgraded from bundle layout 1 to 2" in p for p in contents.problems)
    assert not any("re-formatted" in p for p in contents.problems)


def test_layout_1_table_missing_one_of_its_own_columns_is_still_refused(written):
    path, session, raw = written
    _as_layout_1(path)
    text = (path / "events.csv").read_text(encoding="utf-8")
    (path / "events.csv").write_text(text.replace(",count", "", 1), encoding="utf-8", newline="")
    _refused(path, file="events.csv", column="count")


def test_layout_0_with_both_masses_is_refused(written):
    path, _, _ = written
    _as_layout_0(path)
    _rewrite_json(path, lambda d: d["session"]["fish"][0].__setitem__("mass_g", 152.3))
    _refused(path, file=SESSION_JSON, field="session.fish.0.mass_kg")


def test_upgrade_steps_cover_every_older_layout_in_order():
    versions = [from_version for from_version, _ in UPGRADES]
    assert versions == list(range(versions[0], BUNDLE_FORMAT_VERSION))


# --------------------------------------------------------------------------------------------
# Writing is atomic
# --------------------------------------------------------------------------------------------


def test_existing_path_is_refused_unless_overwriting(tmp_path, written):
    path, session, raw = written
    with pytest.raises(InputError, match="already exists"):
        write_bundle(session, raw, path)
    edited = Session.from_json_dict({**session.to_json_dict(), "notes": "second export"})
    write_bundle(edited, raw, path, overwrite=True)
    assert read_bundle(path).session.notes == "second export"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bundle"]


@pytest.mark.parametrize("as_zip", [False, True])
def test_failure_half_way_leaves_nothing(tmp_path, monkeypatch, as_zip):
    session, raw = _rich_session()
    calls = {"n": 0}
    real_write = bundle_module._write_file
    real_writestr = zipfile.ZipFile.writestr

    def failing_write(path, data):
        calls["n"] += 1
        if calls["n"] == 4:
            raise OSError(28, "No space left on device")
        real_write(path, data)

    def failing_writestr(self, info, data, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 4:
            raise OSError(28, "No space left on device")
        return real_writestr(self, info, data, *args, **kwargs)

    monkeypatch.setattr(bundle_module, "_write_file", failing_write)
    monkeypatch.setattr(zipfile.ZipFile, "writestr", failing_writestr)
    target = tmp_path / ("b.zip" if as_zip else "b")
    with pytest.raises(OSError):
        write_bundle(session, raw, target, as_zip=as_zip)
    assert list(tmp_path.iterdir()) == []


def test_failed_overwrite_keeps_the_previous_bundle(tmp_path, monkeypatch, written):
    path, session, raw = written
    before = _listing(path)
    monkeypatch.setattr(
        bundle_module, "read_bundle", lambda p: (_ for _ in ()).throw(InputError("check failed"))
    )
    with pytest.raises(InputError):
        write_bundle(session, raw, path, overwrite=True)
    assert _listing(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bundle"]


def test_raw_bytes_that_do_not_match_are_refused_before_writing(tmp_path):
    session, raw = _rich_session()
    sha = session.raw_files[0].sha256
    with pytest.raises(InputError) as info:
        write_bundle(session, {**raw, sha: raw[sha] + b"x"}, tmp_path / "b")
    assert info.value.field == f"raw_files.{sha}"
    with pytest.raises(InputError) as info:
        write_bundle(session, {k: v for k, v in raw.items() if k != sha}, tmp_path / "b")
    assert info.value.field == "raw_files.0.sha256"
    assert list(tmp_path.iterdir()) == []


def test_missing_parent_folder(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        write_bundle(make_session(), {}, tmp_path / "no" / "such" / "b")


def test_read_only_is_not_needed_for_reading(written):
    path, session, _ = written
    for item in path.rglob("*"):
        if item.is_file():
            os.chmod(item, 0o444)
    assert read_bundle(path).session == session


def test_the_format_page_lists_the_tables_columns():
    page = (Path(__file__).resolve().parent.parent / "docs" / "bundle_format.md").read_text(
        encoding="utf-8"
    )
    for table in TABLES:
        row = f"| `{table.name}` | `{table.field}` | `{', '.join(table.columns)}` |"
        assert row in page, f"docs/bundle_format.md: update the row for {table.name}: {row}"

"""Tests of swimlab.io.logger: reading oxygen logger exports.

Every fixture file is written by the tests into ``tmp_path`` and read back as bytes, so that the
bytes the reader sees are exactly those of a file on disk.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from swimlab.errors import InputError
from swimlab.io import (
    ColumnMapping,
    guess_mapping,
    header_fingerprint,
    read_logger,
    sha256_hex,
    sniff,
)
from swimlab.io import logger as lg

START = datetime(2026, 3, 14, 8, 0, 0)  # day 14 > 12, so a day-first or month-first date decides


# --- a small export writer -------------------------------------------------------------------


@dataclass
class Export:
    text: str
    oxygen: dict[str, np.ndarray]
    temperature: dict[str, np.ndarray]
    pump: np.ndarray
    time_s: np.ndarray
    columns: list[str]


def _num(value: float, decimals: int, decimal: str) -> str:
    text = f"{value:.{decimals}f}"
    return text.replace(".", ",") if decimal == "," else text


def _time_text(k: int, t: float, time_format: str, decimal: str) -> str:
    stamp = START + timedelta(seconds=t)
    if time_format == "iso":
        return stamp.strftime("%Y-%m-%d %H:%M:%S")
    if time_format == "iso_t":
        return stamp.strftime("%Y-%m-%dT%H:%M:%S")
    if time_format == "dayfirst":
        return stamp.strftime("%d.%m.%Y %H:%M:%S")
    if time_format == "monthfirst":
        return stamp.strftime("%m/%d/%Y %H:%M:%S")
    if time_format == "time_of_day":
        return stamp.strftime("%H:%M:%S")
    if time_format == "elapsed_s":
        return _num(t, 1, decimal)
    if time_format == "elapsed_min":
        return _num(t / 60.0, 6, decimal)
    if time_format == "elapsed_h":
        return _num(t / 3600.0, 8, decimal)
    raise AssertionError(time_format)


TIME_HEADERS = {
    "iso": "Date/Time", "iso_t": "Timestamp", "dayfirst": "Date/Time", "monthfirst": "Date Time",
    "time_of_day": "Time", "elapsed_s": "Elapsed time [s]", "elapsed_min": "Elapsed (min)",
    "elapsed_h": "Elapsed [h]",
}


def make_export(
    n: int = 40, channels: tuple[str, ...] = ("1", "2"), *, delimiter: str = ",",
    decimal: str = ".", time_format: str = "iso", unit_header: str = "% air sat.",
    shared_temperature: bool = False, preamble: bool = True, step_s: float = 1.0,
    oxygen_level: float = 90.0, seed: int = 0,
) -> Export:
    """Build a logger export as text, with the values it holds (as written, rounded)."""
    rng = np.random.default_rng(seed)
    time_s = np.arange(n) * step_s
    oxygen = {c: np.round(oxygen_level + rng.normal(0, 2, n), 2) for c in channels}
    temps = {c: np.round(15 + rng.normal(0, 0.05, n), 2) for c in channels}
    if shared_temperature:
        temps = {c: temps[channels[0]] for c in channels}
    pump = (np.arange(n) % 10) < 3
    names = [TIME_HEADERS[time_format]]
    names += [f"O2 CH{c} [{unit_header}]" for c in channels]
    names += ["Temp [°C]"] if shared_temperature else [f"Temp CH{c} [°C]" for c in channels]
    names += ["Flush pump"]
    lines = []
    if preamble:
        lines += ["# exported for the swimlab test suite", f"Operator{delimiter}R. Vale",
                  f"Sample interval{delimiter}1{delimiter}s", ""]
    lines.append(delimiter.join(names))
    for k in range(n):
        row = [_time_text(k, time_s[k], time_format, decimal)]
        row += [_num(oxygen[c][k], 2, decimal) for c in channels]
        temp_channels = channels[:1] if shared_temperature else channels
        row += [_num(temps[c][k], 2, decimal) for c in temp_channels]
        row += ["on" if pump[k] else "off"]
        lines.append(delimiter.join(row))
    return Export("\r\n".join(lines) + "\r\n", oxygen, temps, pump, time_s, names)


def write(tmp_path: Path, text: str | bytes, encoding: str = "utf-8", name: str = "export.csv") -> bytes:
    path = tmp_path / name
    path.write_bytes(text if isinstance(text, bytes) else text.encode(encoding))
    return path.read_bytes()


def expected_format(time_format: str) -> str:
    return "iso" if time_format == "iso_t" else time_format


# --- formats: delimiter × decimal × encoding × time format -----------------------------------

FORMATS = [(d, m) for d in (",", ";", "\t") for m in (".", ",") if d != m]
ENCODINGS = ["utf-8", "utf-8-sig", "latin-1"]
TIME_FORMATS = ["iso", "iso_t", "dayfirst", "monthfirst", "time_of_day", "elapsed_s",
                "elapsed_min", "elapsed_h"]


@pytest.mark.parametrize("time_format", TIME_FORMATS)
@pytest.mark.parametrize("encoding", ENCODINGS)
@pytest.mark.parametrize(("delimiter", "decimal"), FORMATS)
def test_reads_every_format_variant(tmp_path, delimiter, decimal, encoding, time_format):
    exp = make_export(delimiter=delimiter, decimal=decimal, time_format=time_format,
                      step_s=6.0 if time_format.startswith("elapsed") else 1.0)
    data = write(tmp_path, exp.text, encoding)
    trace = read_logger(data, name="export.csv")
    m = trace.mapping
    assert (m.delimiter, m.decimal, m.time_format) == (delimiter, decimal,
                                                      expected_format(time_format))
    assert m.encoding == ("latin-1" if encoding == "latin-1" else "utf-8")
    assert m.header_line == 4
    assert m.oxygen == {"1": exp.columns[1], "2": exp.columns[2]}
    assert m.temperature == {"1": exp.columns[3], "2": exp.columns[4]}
    assert m.oxygen_unit == "% air saturation" and m.pump == "Flush pump"
    assert trace.glitches.empty, trace.glitches
    assert trace.n_rows_read == 40
    # Tolerance: elapsed minutes and hours are written with 6 and 8 decimals (≤ 2e-5 s off).
    np.testing.assert_allclose(trace.time_s, exp.time_s, rtol=0, atol=1e-4)
    for c in ("1", "2"):
        np.testing.assert_array_equal(trace.oxygen[c], exp.oxygen[c])
        np.testing.assert_array_equal(trace.temperature_c[c], exp.temperature[c])
    np.testing.assert_array_equal(trace.pump, exp.pump)
    np.testing.assert_array_equal(trace.lines, np.arange(6, 46))
    if time_format in ("iso", "iso_t", "dayfirst", "monthfirst"):
        assert trace.start_time == START
    else:
        assert trace.start_time is None
    if time_format == "time_of_day":
        assert trace.start_time_of_day == START.time()


def test_sniff_reports_layout_and_preview(tmp_path):
    exp = make_export(delimiter=";", decimal=",")
    data = write(tmp_path, exp.text, "latin-1")
    result = sniff(data, name="export.csv")
    assert (result.encoding, result.delimiter, result.decimal, result.header_line) == \
        ("latin-1", ";", ",", 4)
    assert result.columns == exp.columns
    assert list(result.preview.columns) == exp.columns
    assert len(result.preview) == 20
    assert result.preview.iloc[0, 1] == _num(exp.oxygen["1"][0], 2, ",")
    assert not result.bom


def test_utf8_bom_is_seen_and_not_part_of_the_first_name(tmp_path):
    exp = make_export(preamble=False)
    data = write(tmp_path, exp.text, "utf-8-sig")
    assert data.startswith(b"\xef\xbb\xbf")
    result = sniff(data, name="export.csv")
    assert result.bom and result.columns[0] == "Date/Time" and result.header_line == 0
    assert read_logger(data, name="export.csv").mapping.time == "Date/Time"


def test_latin1_degree_sign_is_read(tmp_path):
    exp = make_export()
    data = write(tmp_path, exp.text, "latin-1")
    assert b"\xb0C" in data
    result = sniff(data, name="export.csv")
    assert result.encoding == "latin-1" and "Temp CH1 [°C]" in result.columns


def test_bytes_are_not_changed_and_checksum_matches_hashlib(tmp_path):
    exp = make_export(delimiter=";", decimal=",")
    data = write(tmp_path, exp.text, "latin-1")
    before = bytes(data)
    trace = read_logger(data, name="export.csv")
    assert data == before == (tmp_path / "export.csv").read_bytes()
    assert trace.sha256 == hashlib.sha256(before).hexdigest() == sha256_hex(before)


def test_readings_of_a_trace_are_read_only(tmp_path):
    # Columns with glitches (values set missing) and clean ones alike: the trace records the file.
    lines = make_export(preamble=False).text.split("\r\n")
    fields = lines[3].split(",")
    fields[1] = ""  # one empty oxygen cell in channel 1; channel 2 stays clean
    lines[3] = ",".join(fields)
    trace = read_logger("\r\n".join(lines).encode(), name="export.csv")
    assert list(trace.glitches.kind) == ["missing"]
    arrays = [trace.time_s, trace.pump, *trace.oxygen.values(), *trace.temperature_c.values()]
    assert all(a is not None and not a.flags.writeable for a in arrays)
    with pytest.raises(ValueError, match="read-only"):
        next(iter(trace.oxygen.values()))[0] = 1.0


def test_shared_temperature_column_appears_under_every_channel(tmp_path):
    exp = make_export(channels=("A", "B", "C"), shared_temperature=True)
    trace = read_logger(write(tmp_path, exp.text), name="export.csv")
    assert trace.mapping.temperature == {"A": "Temp [°C]", "B": "Temp [°C]", "C": "Temp [°C]"}
    for c in "ABC":
        np.testing.assert_array_equal(trace.temperature_c[c], exp.temperature["A"])


def test_single_channel_without_temperature_or_pump(tmp_path):
    text = "Elapsed time [s],Oxygen (mg/L)\n" + "".join(f"{k},{8 - k * 0.01:.2f}\n" for k in range(20))
    trace = read_logger(write(tmp_path, text), name="one.csv")
    assert trace.mapping.oxygen == {"1": "Oxygen (mg/L)"} and trace.oxygen_unit == "mg/L"
    assert trace.temperature_c == {} and trace.pump is None
    assert trace.elapsed_start_s == 0.0
    np.testing.assert_allclose(trace.oxygen["1"], 8 - np.arange(20) * 0.01, atol=1e-12)


def test_elapsed_start_is_kept_when_the_file_does_not_start_at_zero(tmp_path):
    text = "Time [min],O2 [%]\n" + "".join(f"{60 + k},{95 - k}\n" for k in range(10))
    trace = read_logger(write(tmp_path, text), name="late.csv")
    assert trace.mapping.time_format == "elapsed_min"
    assert trace.elapsed_start_s == 3600.0
    np.testing.assert_array_equal(trace.time_s, np.arange(10) * 60.0)


# --- guessing the mapping ----------------------------------------------------------------------


def _rows(header: list[str], rows: list[list[str]], delimiter: str = ",") -> str:
    return "\n".join(delimiter.join(r) for r in [header, *rows]) + "\n"


def _elapsed_rows(n: int, *columns) -> list[list[str]]:
    return [[str(k), *(f(k) for f in columns)] for k in range(n)]


@pytest.mark.parametrize(("header", "level", "unit"), [
    ("O2 [% air sat.]", 95.0, "% air saturation"),
    ("Oxygen (mg/L)", 8.5, "mg/L"),
    ("DO [mg l-1]", 8.5, "mg/L"),
    ("O2 (µmol/L)", 280.0, "µmol/L"),
    ("O2 (μmol/L)", 280.0, "µmol/L"),      # Greek mu instead of the micro sign
    ("O2 [umol/L]", 280.0, "µmol/L"),
    ("pO2 [hPa]", 200.0, "hPa"),
    ("pO2 [kPa]", 20.0, "kPa"),
    ("PO2 (Torr)", 150.0, "mmHg"),
    ("O2 [mmHg]", 150.0, "mmHg"),
])
def test_oxygen_unit_from_header(tmp_path, header, level, unit):
    text = _rows(["Time [s]", header], _elapsed_rows(10, lambda k: f"{level - k * 0.1:.2f}"))
    mapping = guess_mapping(write(tmp_path, text), name="u.csv")
    assert mapping.oxygen_unit == unit and list(mapping.oxygen.values()) == [header]


@pytest.mark.parametrize(("level", "unit"), [(8.2, "mg/L"), (96.0, "% air saturation"),
                                             (290.0, "µmol/L")])
def test_oxygen_unit_from_values_when_headers_have_none(tmp_path, level, unit):
    text = _rows(["Time [s]", "CH1", "CH2"],
                 _elapsed_rows(10, lambda k: f"{level:.2f}", lambda k: f"{level * 0.98:.2f}"))
    mapping = guess_mapping(write(tmp_path, text), name="v.csv")
    assert mapping.oxygen_unit == unit and mapping.oxygen == {"1": "CH1", "2": "CH2"}


@pytest.mark.parametrize(("headers", "labels"), [
    (["O2 CH1 [%]", "O2 CH2 [%]"], ["1", "2"]),
    (["O2 CH 1 [%]", "O2 CH 2 [%]"], ["1", "2"]),
    (["Oxygen chamber A (%)", "Oxygen chamber B (%)"], ["A", "B"]),
    (["DO1 [%]", "DO2 [%]"], ["1", "2"]),
    (["O2 A [%]", "O2 B [%]"], ["A", "B"]),
    (["channel 3 O2 sat [%]", "channel 4 O2 sat [%]"], ["3", "4"]),
    (["O2 [%]", "O2 [%]"], ["1", "2"]),                 # no labels: numbered in order
])
def test_channel_labels_from_headers(tmp_path, headers, labels):
    text = _rows(["Time [s]", *headers],
                 _elapsed_rows(10, lambda k: "95.00", lambda k: "94.00"))
    mapping = guess_mapping(write(tmp_path, text), name="l.csv")
    assert list(mapping.oxygen) == labels


def test_temperature_paired_by_label_pump_and_other_columns_left_out(tmp_path):
    header = ["Time [s]", "Pressure [hPa]", "T2 [°C]", "O2 CH1 [%]", "O2 CH2 [%]", "T1 [°C]",
              "Phase [°]", "Relay"]
    text = _rows(header, _elapsed_rows(
        10, lambda k: "1013.2", lambda k: "15.2", lambda k: "95.1", lambda k: "94.2",
        lambda k: "15.1", lambda k: "27.3", lambda k: str(k % 2)))
    mapping = guess_mapping(write(tmp_path, text), name="p.csv")
    assert mapping.oxygen == {"1": "O2 CH1 [%]", "2": "O2 CH2 [%]"}
    assert mapping.temperature == {"1": "T1 [°C]", "2": "T2 [°C]"}
    assert mapping.pump == "Relay"


def test_mixed_units_keep_the_most_common_unit(tmp_path):
    header = ["Time [s]", "O2 A [%]", "O2 A [mg/L]", "O2 B [%]", "O2 B [mg/L]"]
    text = _rows(header, _elapsed_rows(10, lambda k: "95.1", lambda k: "9.1",
                                       lambda k: "94.0", lambda k: "9.0"))
    mapping = guess_mapping(write(tmp_path, text), name="m.csv")
    assert mapping.oxygen == {"A": "O2 A [%]", "B": "O2 B [%]"}
    assert mapping.oxygen_unit == "% air saturation"


def test_separate_date_and_time_columns(tmp_path):
    rows = [["14.03.2026", f"08:00:{k:02d}", f"{95 - k * 0.1:.2f}", "15.0"] for k in range(30)]
    text = _rows(["Date", "Time", "Oxygen chamber A (%)", "Temperature (°C)"], rows, ";")
    trace = read_logger(write(tmp_path, text), name="d.csv")
    assert (trace.mapping.date, trace.mapping.time, trace.mapping.time_format) == \
        ("Date", "Time", "dayfirst")
    assert trace.start_time == START
    np.testing.assert_array_equal(trace.time_s, np.arange(30.0))
    assert trace.mapping.temperature == {"A": "Temperature (°C)"}


def _dated(dates: list[str]) -> str:
    return _rows(["Date/Time", "O2 [%]"], [[f"{d} 08:00:00", "95.0"] for d in dates])


@pytest.mark.parametrize(("dates", "decided"), [
    (["13/03/2026", "14/03/2026"], "dayfirst"),            # first field > 12
    (["03/13/2026", "03/14/2026"], "monthfirst"),          # second field > 12
    (["02.03.2026", "03.03.2026"], "dayfirst"),            # dots: written day-first
    (["01/03/2026", "02/03/2026", "03/03/2026"], "dayfirst"),    # the first field changes
    (["03/01/2026", "03/02/2026", "03/03/2026"], "monthfirst"),  # the second field changes
    (["03/04/2026", "03/04/2026"], "dayfirst"),            # nothing decides: day-first
])
def test_ambiguous_dates_are_decided_by_stated_rules(tmp_path, dates, decided):
    assert guess_mapping(write(tmp_path, _dated(dates)), name="a.csv").time_format == decided


def test_dates_over_12_in_both_fields_are_refused(tmp_path):
    with pytest.raises(InputError, match="neither day-first nor month-first") as info:
        guess_mapping(write(tmp_path, _dated(["13/03/2026", "03/14/2026"])), name="b.csv")
    assert info.value.file == "b.csv" and info.value.column == "Date/Time"


def test_large_ambiguous_file_is_decided_from_the_whole_column(tmp_path):
    # The first 600 lines all fall on 01/03; only later lines show the day changing.
    rows = [[f"{1 + k // 1000:02d}/03/2026 {k % 24:02d}:00:00", "95.0"] for k in range(3000)]
    text = _rows(["Date/Time", "O2 [%]"], rows)
    assert guess_mapping(write(tmp_path, text), name="w.csv").time_format == "dayfirst"


# --- glitch rules ----------------------------------------------------------------------------


def _glitch(trace, kind):
    return trace.glitches[trace.glitches["kind"] == kind]


def test_midnight_rollover_adds_a_day(tmp_path):
    rows = [[f"23:59:{s:02d}", "95.0"] for s in range(55, 60)]
    rows += [[f"00:00:{s:02d}", "94.9"] for s in range(0, 5)]
    trace = read_logger(write(tmp_path, _rows(["Time", "O2 [%]"], rows)), name="night.csv")
    np.testing.assert_array_equal(trace.time_s, np.arange(10.0))
    roll = _glitch(trace, "day_rollover")
    assert roll[["line", "value"]].values.tolist() == [[7, "00:00:00"]]
    assert "1 day added" in roll["action"].iloc[0]
    assert len(trace.glitches) == 1


def test_every_glitch_is_reported_where_it_was_found(tmp_path):
    lines = ["Time,O2 CH1 [%],O2 CH2 [%],Temp [°C],Pump"]
    body = [
        ("2026-03-14 08:00:00", "95.0", "94.0", "15.0", "on"),    # line 2
        ("2026-03-14 08:00:01", "94.9", "ERR", "15.0", "on"),     # 3 text
        ("2026-03-14 08:00:02", "-300", "93.8", "15.0", "on"),    # 4 error code
        ("", "", "", "", ""),                                     # 5 empty line of delimiters
        ("2026-03-14 08:00:03", "94.7", "---", "15.0", "off"),    # 6 text
        ("2026-03-14 08:00:03", "94.7", "93.6", "15.0", "off"),   # 7 duplicate
        ("2026-03-14 08:00:04", "9999", "NaN", "15.0", "off"),    # 8 error code, text
        ("2026-03-14 08:00:02", "94.6", "93.5", "15.0", "off"),   # 9 backwards
        ("2026-03-14 08:00:05", "94.5", "OVR", "", ""),           # 10 text, missing, pump missing
        ("2026-03-14 08:00:06", "94.4", "93.3", "-1", "off"),     # 11 -1 °C is a reading
        ("2026-03-14 08:00:07", "94.3", "93.2", "15.0", "off"),
        ("2026-03-14 08:00:30", "94.2", "93.1", "15.0", "off"),   # 13 gap (23 s vs 1 s)
        ("2026-03-14 08:00:31", "-1", "93.0", "15.0", "off"),     # 14 error code -1
    ]
    lines += [",".join(r) for r in body]
    trace = read_logger(write(tmp_path, "\n".join(lines) + "\n"), name="g.csv")
    got = {(r.line, r.column, r.kind, r.value) for r in trace.glitches.itertuples()}
    assert got == {
        (3, "O2 CH2 [%]", "text_value", "ERR"),
        (4, "O2 CH1 [%]", "error_code", "-300"),
        (5, "", "missing", ""),
        (6, "O2 CH2 [%]", "text_value", "---"),
        (7, "Time", "duplicate_time", "2026-03-14 08:00:03"),
        (8, "O2 CH1 [%]", "error_code", "9999"),
        (8, "O2 CH2 [%]", "text_value", "NaN"),
        (9, "Time", "backwards_time", "2026-03-14 08:00:02"),
        (10, "O2 CH2 [%]", "text_value", "OVR"),
        (10, "Temp [°C]", "missing", ""),
        (10, "Pump", "missing", ""),
        (13, "Time", "gap", "23 s step"),
        (14, "O2 CH1 [%]", "error_code", "-1"),
    }
    actions = dict(zip(trace.glitches["kind"], trace.glitches["action"], strict=False))
    assert actions["duplicate_time"].startswith("row dropped")
    assert actions["backwards_time"].startswith("row dropped")
    assert actions["error_code"] == "value set missing"
    np.testing.assert_array_equal(trace.lines, [2, 3, 4, 6, 8, 10, 11, 12, 13, 14])
    np.testing.assert_array_equal(trace.time_s, [0, 1, 2, 3, 4, 5, 6, 7, 30, 31])
    o1, o2 = trace.oxygen["1"], trace.oxygen["2"]
    assert np.isnan(o1[[2, 4, 9]]).all() and np.isnan(o2[[1, 3, 4, 5]]).all()
    assert np.isfinite(np.delete(o1, [2, 4, 9])).all()
    assert trace.temperature_c["1"][6] == -1.0 and np.isnan(trace.temperature_c["1"][5])
    # The missing pump state at line 10 takes the previous state (off).
    np.testing.assert_array_equal(trace.pump, [1, 1, 1, 0, 0, 0, 0, 0, 0, 0])
    assert np.all(np.diff(trace.time_s) > 0)


def test_blank_lines_are_reported_and_line_numbers_stay_right(tmp_path):
    text = "Time [s];O2 [%]\n0;95,0\n\n1;ERR\n\r\n2;94,8\n3;94,7\n"
    trace = read_logger(write(tmp_path, text), name="blank.csv")
    np.testing.assert_array_equal(trace.lines, [2, 4, 6, 7])
    assert trace.glitches[["line", "kind", "action"]].values.tolist() == [
        [3, "missing", "row dropped (empty line)"], [4, "text_value", "value set missing"],
        [5, "missing", "row dropped (empty line)"]]


def test_line_of_spaces_is_refused_with_its_line(tmp_path):
    text = "Time [s],O2 [%]\n0,95\n   \n1,94\n2,93\n"
    with pytest.raises(InputError, match="1 fields; expected 2") as info:
        read_logger(write(tmp_path, text), name="sp.csv", mapping=_mapping())
    assert info.value.row == 3


def test_incomplete_last_line_is_dropped_and_reported(tmp_path):
    exp = make_export(n=12, preamble=False)
    text = exp.text + "2026-03-14 08:00:12,95.1"
    trace = read_logger(write(tmp_path, text), name="cut.csv")
    assert trace.time_s.size == 12
    assert trace.glitches[["line", "kind"]].values.tolist() == [[14, "incomplete_row"]]


def test_gap_factor_is_a_parameter(tmp_path):
    text = "Time [s],O2 [%]\n" + "".join(f"{t},95\n" for t in [0, 1, 2, 3, 7, 8, 9])
    data = write(tmp_path, text)
    assert _glitch(read_logger(data, name="g.csv"), "gap").empty
    gaps = _glitch(read_logger(data, name="g.csv", gap_factor=3.0), "gap")
    assert gaps["line"].tolist() == [6]


def test_a_few_text_values_in_a_column_read_the_same_as_the_clean_file(tmp_path):
    exp = make_export(n=60, preamble=False)
    clean = read_logger(write(tmp_path, exp.text, name="clean.csv"), name="clean.csv")
    dirty_text = exp.text.replace(_num(exp.oxygen["2"][10], 2, "."), "ERR", 1)
    dirty = read_logger(write(tmp_path, dirty_text, name="dirty.csv"), name="dirty.csv")
    assert _glitch(dirty, "text_value")["line"].tolist() == [12]
    np.testing.assert_array_equal(dirty.oxygen["1"], clean.oxygen["1"])
    np.testing.assert_array_equal(np.delete(dirty.oxygen["2"], 10), np.delete(clean.oxygen["2"], 10))
    np.testing.assert_array_equal(dirty.time_s, clean.time_s)
    np.testing.assert_array_equal(dirty.pump, clean.pump)


def test_iso_times_with_an_offset_are_read_as_utc(tmp_path):
    rows = [[f"2026-03-14T09:00:{k:02d}+01:00", "95.0"] for k in range(10)]
    trace = read_logger(write(tmp_path, _rows(["Time", "O2 [%]"], rows)), name="tz.csv")
    assert trace.start_time.utcoffset() == timedelta(0)
    assert trace.start_time.replace(tzinfo=None) == START
    np.testing.assert_array_equal(trace.time_s, np.arange(10.0))


def test_user_error_codes_are_set_missing(tmp_path):
    text = "Time [s],O2 [mg/L]\n" + "".join(f"{k},{v}\n" for k, v in enumerate([8, 8, 0, 7.9]))
    data = write(tmp_path, text)
    mapping = guess_mapping(data, name="c.csv")
    plain = read_logger(data, name="c.csv", mapping=mapping)
    assert plain.oxygen["1"][2] == 0.0
    coded = ColumnMapping.from_dict({**mapping.to_dict(), "oxygen_error_codes": [0.0]})
    trace = read_logger(data, name="c.csv", mapping=coded)
    assert np.isnan(trace.oxygen["1"][2])
    assert _glitch(trace, "error_code")[["line", "value"]].values.tolist() == [[4, "0"]]


# --- bad input: each names the file, the line and the column ----------------------------------


@pytest.mark.parametrize("content", [b"", b"   \r\n\n", b"\n\n\n"])
def test_empty_file(tmp_path, content):
    data = write(tmp_path, content)
    for func in (sniff, guess_mapping, read_logger):
        with pytest.raises(InputError, match="empty") as info:
            func(data, name="empty.csv")
        assert info.value.file == "empty.csv"


def test_utf16_and_binary_files_are_refused(tmp_path):
    data = write(tmp_path, "Time,O2\n1,2\n".encode("utf-16"))
    with pytest.raises(InputError, match="UTF-16"):
        sniff(data, name="w.csv")
    with pytest.raises(InputError, match="NUL"):
        sniff(b"Time,O2\n\x00\x01,2\n", name="bin.csv")


def test_no_numeric_oxygen_column(tmp_path):
    text = _rows(["Time [s]", "Temp [°C]", "Comment"],
                 _elapsed_rows(10, lambda k: "15.0", lambda k: "ok"))
    with pytest.raises(InputError, match="no numeric oxygen column") as info:
        read_logger(write(tmp_path, text), name="no_o2.csv")
    assert info.value.file == "no_o2.csv"
    text = _rows(["Time [s]", "O2 [%]"], _elapsed_rows(10, lambda k: "ERR"))
    with pytest.raises(InputError, match="oxygen-like columns \\['O2 \\[%\\]'\\] hold no numbers"):
        guess_mapping(write(tmp_path, text), name="text_o2.csv")


def _mapping(**changes) -> ColumnMapping:
    base = dict(time="Time [s]", time_format="elapsed_s", oxygen={"1": "O2 [%]"},
                oxygen_unit="% air saturation", temperature={})
    return ColumnMapping(**{**base, **changes})


def test_mostly_text_oxygen_column_names_the_first_bad_line(tmp_path):
    values = ["95.0", "94.9", "ERR", "ERR", "---", "ERR", "94.2", "OVR"]
    text = _rows(["Time [s]", "O2 [%]"], [[str(k), v] for k, v in enumerate(values)])
    with pytest.raises(InputError, match="5 of 8 values are text") as info:
        read_logger(write(tmp_path, text), name="t.csv", mapping=_mapping())
    assert (info.value.file, info.value.row, info.value.column) == ("t.csv", 4, "O2 [%]")
    assert "'ERR'" in str(info.value)


def test_all_nan_channel(tmp_path):
    header = ["Time [s]", "O2 CH1 [%]", "O2 CH2 [%]"]
    text = _rows(header, _elapsed_rows(10, lambda k: "95.0", lambda k: "" if k % 2 else "-300"))
    with pytest.raises(InputError, match="no usable oxygen") as info:
        read_logger(write(tmp_path, text), name="nan.csv")
    assert (info.value.file, info.value.column, info.value.row) == ("nan.csv", "O2 CH2 [%]", 2)
    assert "5 error codes" in str(info.value) and "5 empty" in str(info.value)


@pytest.mark.parametrize(("unit", "value"), [("% air saturation", "450"), ("mg/L", "-0.5"),
                                             ("µmol/L", "2000"), ("kPa", "-2")])
def test_oxygen_value_impossible_in_its_unit(tmp_path, unit, value):
    values = ["9.0", "8.9", value, "8.8"]
    text = _rows(["Time [s]", "O2"], [[str(k), v] for k, v in enumerate(values)])
    with pytest.raises(InputError, match=f"value {float(value):g} cannot be oxygen") as info:
        read_logger(write(tmp_path, text), name="r.csv",
                    mapping=_mapping(oxygen={"1": "O2"}, oxygen_unit=unit))
    assert (info.value.file, info.value.row, info.value.column) == ("r.csv", 4, "O2")


def test_temperature_not_in_celsius_is_refused(tmp_path):
    text = _rows(["Time [s]", "O2 [%]", "Temp [°F]"],
                 _elapsed_rows(5, lambda k: "95.0", lambda k: "59.0"))
    with pytest.raises(InputError, match="cannot be temperature") as info:
        read_logger(write(tmp_path, text), name="f.csv",
                    mapping=_mapping(temperature={"1": "Temp [°F]"}))
    assert (info.value.row, info.value.column) == (2, "Temp [°F]")


def test_line_with_wrong_number_of_fields(tmp_path):
    text = "Time [s],O2 [%]\n0,95\n1,94,3\n2,93\n3,92\n"
    with pytest.raises(InputError, match="3 fields; expected 2") as info:
        read_logger(write(tmp_path, text), name="w.csv", mapping=_mapping())
    assert (info.value.file, info.value.row) == ("w.csv", 3)


def test_mapping_naming_a_missing_column(tmp_path):
    text = _rows(["Time [s]", "O2 [%]"], _elapsed_rows(5, lambda k: "95"))
    with pytest.raises(InputError, match="does not have") as info:
        read_logger(write(tmp_path, text), name="m.csv", mapping=_mapping(oxygen={"1": "O2 A"}))
    assert (info.value.file, info.value.row, info.value.column) == ("m.csv", 1, "O2 A")


def test_time_column_of_the_wrong_format(tmp_path):
    text = _rows(["Time", "O2 [%]"], [[f"08:00:{k:02d}", "95"] for k in range(5)])
    with pytest.raises(InputError, match="do not read as a number of seconds") as info:
        read_logger(write(tmp_path, text), name="tf.csv", mapping=_mapping(time="Time"))
    assert (info.value.row, info.value.column) == (2, "Time")


def test_fewer_than_two_readings(tmp_path):
    with pytest.raises(InputError, match="usable reading"):
        read_logger(write(tmp_path, "Time [s],O2 [%]\n0,95\n"), name="one.csv", mapping=_mapping())


def test_no_header_line(tmp_path):
    with pytest.raises(InputError, match="no line of column names") as info:
        sniff(write(tmp_path, "0,95\n1,94\n2,93\n"), name="nh.csv")
    assert info.value.row == 1


def test_wrong_encoding_in_mapping_names_the_line(tmp_path):
    exp = make_export(preamble=False)
    data = write(tmp_path, exp.text, "latin-1")
    mapping = guess_mapping(data, name="e.csv")
    utf8 = ColumnMapping.from_dict({**mapping.to_dict(), "encoding": "utf-8"})
    with pytest.raises(InputError, match="not valid utf-8") as info:
        read_logger(data, name="e.csv", mapping=utf8)
    assert info.value.row == 1


# --- the mapping, remembered -----------------------------------------------------------------


def test_mapping_round_trips_through_json(tmp_path):
    exp = make_export(delimiter=";", decimal=",", shared_temperature=True)
    mapping = guess_mapping(write(tmp_path, exp.text, "latin-1"), name="x.csv")
    restored = ColumnMapping.from_dict(json.loads(json.dumps(mapping.to_dict())))
    assert restored == mapping
    assert restored.to_dict() == mapping.to_dict()
    assert hash(restored) == hash(mapping)
    assert restored != ColumnMapping.from_dict({**mapping.to_dict(), "header_line": 0})


@pytest.mark.parametrize(("change", "field"), [
    ({"time_format": "clock"}, "mapping.time_format"),
    ({"oxygen_unit": "ppm"}, "mapping.oxygen_unit"),
    ({"delimiter": "|"}, "mapping.delimiter"),
    ({"decimal": ","}, "mapping.decimal"),            # same as the delimiter
    ({"oxygen": {}}, "mapping.oxygen"),
    ({"temperature": {"9": "T"}}, "mapping.temperature"),
    ({"header_line": -1}, "mapping.header_line"),
    ({"oxygen_error_codes": ["x"]}, "mapping.oxygen_error_codes"),
    ({"pump": "Time [s]"}, "mapping.time"),
])
def test_mapping_refuses_bad_values(change, field):
    with pytest.raises(InputError) as info:
        _mapping(**change)
    assert info.value.field == field


def test_mapping_from_dict_refuses_unknown_and_missing_keys():
    good = _mapping().to_dict()
    with pytest.raises(InputError, match="unknown keys \\['colour'\\]"):
        ColumnMapping.from_dict({**good, "colour": "red"})
    with pytest.raises(InputError, match="missing keys \\['oxygen_unit'\\]"):
        ColumnMapping.from_dict({k: v for k, v in good.items() if k != "oxygen_unit"})


def test_unknown_choice_lists_the_valid_ones():
    with pytest.raises(ValueError, match="'elapsed_s'"):
        _mapping(time_format="seconds")


def test_header_fingerprint_is_stable_and_tells_layouts_apart():
    cols = ["Date/Time", "O2 CH1 [% air sat.]", "Temp CH1 [°C]"]
    fp = header_fingerprint(cols)
    assert fp == header_fingerprint(list(cols))
    assert fp == header_fingerprint([" date/time ", "O2  CH1 [% AIR SAT.]", "temp ch1 [°c]"])
    assert fp != header_fingerprint(cols[::-1])
    assert fp != header_fingerprint(cols + ["Flush pump"])
    assert fp != header_fingerprint(["Date/Time", "O2 CH2 [% air sat.]", "Temp CH1 [°C]"])
    assert header_fingerprint(["O2 [µmol/L]"]) == header_fingerprint(["O2 [μmol/L]"])


def test_fingerprint_of_the_same_logger_on_two_days_is_the_same(tmp_path):
    a = make_export(seed=1)
    b = make_export(seed=2, n=25)
    fa = header_fingerprint(sniff(write(tmp_path, a.text, name="a.csv"), name="a.csv").columns)
    fb = header_fingerprint(sniff(write(tmp_path, b.text, name="b.csv"), name="b.csv").columns)
    assert fa == fb


# --- plausible ranges, checked against outside references ---------------------------------------


def test_oxygen_ranges_are_300_percent_air_saturation_at_0_c():
    """Each unit's upper limit is 300 % air saturation in fresh water at 0 °C, 1 atm.

    Solubility: Garcia & Gordon (1992) fit of Benson & Krause (1984), through
    ``gsw.O2sol_SP_pt``; water vapour pressure: IAPWS-IF97 saturation pressure through
    ``iapws.IAPWS97``; density of pure water: IAPWS-95 through ``iapws.IAPWS95``; O2 mole
    fraction in dry air 0.20946 (Glueckauf 1951, from memory); molar mass of O2 31.998 g/mol
    (IUPAC, from memory). The limits are rounded up by less than 5 %.
    """
    gsw = pytest.importorskip("gsw")
    iapws = pytest.importorskip("iapws")
    umol_kg = float(gsw.O2sol_SP_pt(0.0, 0.0))
    density_kg_l = iapws.IAPWS95(T=273.15, P=0.101325).rho / 1000.0
    umol_l = umol_kg * density_kg_l
    p_h2o_kpa = iapws.IAPWS97(T=273.15, x=0).P * 1000.0
    po2_kpa = 0.20946 * (101.325 - p_h2o_kpa)
    saturated = {
        "% air saturation": 100.0, "µmol/L": umol_l, "mg/L": umol_l * 31.998 / 1000.0,
        "kPa": po2_kpa, "hPa": po2_kpa * 10.0, "mmHg": po2_kpa * 760.0 / 101.325,
    }
    assert set(lg.OXYGEN_RANGES) == set(lg.OXYGEN_UNITS)
    for unit, (low, high) in lg.OXYGEN_RANGES.items():
        assert low == 0.0
        assert 3 * saturated[unit] <= high <= 1.05 * 3 * saturated[unit], unit


def test_units_are_the_oxygen_module_units():
    oxygen = pytest.importorskip("swimlab.oxygen")
    assert lg.OXYGEN_UNITS == oxygen.UNITS


# --- properties --------------------------------------------------------------------------------


@st.composite
def tables(draw):
    n = draw(st.integers(3, 40))
    k = draw(st.integers(1, 3))
    delimiter, decimal = draw(st.sampled_from(FORMATS))
    encoding = draw(st.sampled_from(ENCODINGS))
    iso = draw(st.booleans())
    steps = draw(st.lists(st.integers(1, 50), min_size=n - 1, max_size=n - 1))
    t = np.concatenate([[0], np.cumsum(steps)]) / 10.0  # tenths of a second
    hundredths = st.integers(0, 15000)
    oxygen = [np.array(draw(st.lists(hundredths, min_size=n, max_size=n))) / 100.0
              for _ in range(k)]
    return n, k, delimiter, decimal, encoding, iso, t, oxygen


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(tables())
def test_any_table_reads_back_equal(tmp_path, table):
    n, k, delimiter, decimal, encoding, iso, t, oxygen = table
    names = ["Time" if iso else "Elapsed [s]"] + [f"O2 CH{c + 1} [% air sat.]" for c in range(k)]
    lines = [delimiter.join(names)]
    for i in range(n):
        stamp = (START + timedelta(seconds=float(t[i]))).isoformat(sep=" ", timespec="milliseconds")
        row = [stamp if iso else _num(t[i], 1, decimal)]
        row += [_num(o[i], 2, decimal) for o in oxygen]
        lines.append(delimiter.join(row))
    data = write(tmp_path, "\n".join(lines) + "\n", encoding)
    trace = read_logger(data, name="h.csv")
    assert trace.mapping.delimiter == delimiter
    # Tolerance: values are written with two decimals and times in tenths; reading them back
    # must give the nearest float, so only float rounding (< 1e-9) remains.
    np.testing.assert_allclose(trace.time_s, t, rtol=0, atol=1e-9)
    for c in range(k):
        np.testing.assert_allclose(trace.oxygen[str(c + 1)], oxygen[c], rtol=0, atol=1e-9)
    assert trace.sha256 == hashlib.sha256(data).hexdigest()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.integers(-3, 5), min_size=5, max_size=60))
def test_time_order_rules_keep_a_strictly_increasing_trace(tmp_path, steps):
    """Whatever the steps (repeats, steps back), kept times increase and every drop is reported."""
    t = np.cumsum([0, *steps]) + 100
    assume(np.max(t) > t[0])  # at least two readings in time order
    text = "Time [s],O2 [%]\n" + "".join(f"{v},95\n" for v in t)
    trace = read_logger(write(tmp_path, text), name="o.csv")
    assert np.all(np.diff(trace.time_s) > 0)
    dropped = trace.glitches[trace.glitches["kind"].isin(["duplicate_time", "backwards_time"])]
    assert trace.time_s.size + len(dropped) == t.size
    kept_times = trace.time_s + trace.elapsed_start_s
    np.testing.assert_array_equal(kept_times, np.maximum.accumulate(t)[np.r_[True, np.diff(
        np.maximum.accumulate(t)) > 0]])


# --- more time and pump spellings ------------------------------------------------------------


@pytest.mark.parametrize(("texts", "time_format", "expected_s"), [
    (["14.03.2026 08:00:00.5", "14.03.2026 08:00:01,25", "14.03.2026 08:00:02"], "dayfirst",
     [0.0, 0.75, 1.5]),
    (["3/14/2026 8:00:00 AM", "3/14/2026 1:00:00 PM", "3/14/2026 11:59:59 PM"], "monthfirst",
     [0.0, 5 * 3600.0, 16 * 3600.0 - 1]),
    (["14.3.26 8:00", "14.3.26 8:01", "14.3.26 8:03"], "dayfirst", [0.0, 60.0, 180.0]),
    (["08:00", "08:01", "08:02"], "time_of_day", [0.0, 60.0, 120.0]),
    (["07:59:59.5", "08:00:00.0", "08:00:00.5"], "time_of_day", [0.0, 0.5, 1.0]),
    (["11:59:59 PM", "12:00:00 AM", "12:00:01 AM"], "time_of_day", [0.0, 1.0, 2.0]),
])
def test_time_spellings(tmp_path, texts, time_format, expected_s):
    text = _rows(["Time", "O2 [%]"], [[t, "95.0"] for t in texts], ";")
    trace = read_logger(write(tmp_path, text), name="ts.csv",
                        mapping=_mapping(time="Time", time_format=time_format, delimiter=";"))
    # Tolerance: times are exact to the nanosecond; 1e-6 s covers float rounding of seconds.
    np.testing.assert_allclose(trace.time_s, expected_s, rtol=0, atol=1e-6)


def test_a_stray_spelling_of_time_is_still_read(tmp_path):
    texts = ["14.03.2026 08:00:00", "14.03.2026  08:00:01", "2026-03-14 08:00:02", "x"]
    text = _rows(["Time", "O2 [%]"], [[t, "95.0"] for t in texts + ["14.03.2026 08:00:03"]])
    trace = read_logger(write(tmp_path, text), name="st.csv",
                        mapping=_mapping(time="Time", time_format="dayfirst"))
    np.testing.assert_array_equal(trace.time_s, [0.0, 1.0, 2.0, 3.0])
    assert trace.glitches[["line", "kind", "value"]].values.tolist() == [[5, "text_value", "x"]]


@pytest.mark.parametrize(("states", "expected"), [
    (["ON", "On", "OFF", "off"], [1, 1, 0, 0]),
    (["true", "TRUE", "False", "false"], [1, 1, 0, 0]),
    (["1", "1", "0", "0"], [1, 1, 0, 0]),
    (["yes", "?", "no", "no"], [1, 1, 0, 0]),     # '?' is text: the previous state is used
])
def test_pump_states(tmp_path, states, expected):
    rows = [[str(k), "95.0", s] for k, s in enumerate(states)]
    trace = read_logger(write(tmp_path, _rows(["Time [s]", "O2 [%]", "Pump"], rows)),
                        name="pump.csv", mapping=_mapping(pump="Pump"))
    np.testing.assert_array_equal(trace.pump, np.array(expected, dtype=bool))
    assert trace.pump.dtype == bool
    kinds = trace.glitches["kind"].tolist()
    assert kinds == (["text_value"] if "?" in states else [])


def test_pump_column_without_states_is_refused(tmp_path):
    rows = [[str(k), "95.0", "run"] for k in range(4)]
    with pytest.raises(InputError, match="no on/off states") as info:
        read_logger(write(tmp_path, _rows(["Time [s]", "O2 [%]", "Pump"], rows)),
                    name="p.csv", mapping=_mapping(pump="Pump"))
    assert info.value.column == "Pump"


_TOKENS = ["", "ERR", "-300", "9999", "NaN", "x", "1,5", "1.5", " ", "450", "-1", "on",
           "2026-03-14 08:00:00", "08:00:00", "14.03.2026 08:00:00", '"q"', "inf"]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.sampled_from(FORMATS), st.sampled_from(TIME_FORMATS), st.sampled_from(ENCODINGS),
       st.lists(st.tuples(st.integers(0, 29), st.integers(0, 8), st.sampled_from(_TOKENS),
                          st.sampled_from(["cell", "repeat", "delete", "blank", "swap"])),
                max_size=6))
def test_damaged_files_give_a_trace_or_an_input_error(tmp_path, fmt, time_format, encoding, damage):
    """Whatever is damaged, the reader returns a consistent trace or raises InputError."""
    delimiter, decimal = fmt
    lines = make_export(n=30, delimiter=delimiter, decimal=decimal,
                        time_format=time_format).text.split("\r\n")
    for row, col, token, kind in damage:
        i = 5 + row % max(len(lines) - 7, 1)   # a reading line (the last element is empty)
        if kind == "cell":
            parts = lines[i].split(delimiter)
            parts[col % len(parts)] = token
            lines[i] = delimiter.join(parts)
        elif kind == "repeat":
            lines.insert(i, lines[i])
        elif kind == "delete":
            del lines[i]
        elif kind == "blank":
            lines.insert(i, "")
        else:
            lines[i], lines[i + 1] = lines[i + 1], lines[i]
    data = write(tmp_path, "\r\n".join(lines), encoding)
    try:
        trace = read_logger(data, name="damaged.csv")
    except InputError as exc:
        assert exc.file == "damaged.csv"
        return
    assert np.all(np.diff(trace.time_s) > 0) and trace.time_s[0] == 0.0
    assert trace.lines.size == trace.time_s.size and np.all(np.diff(trace.lines) > 0)
    for values in [*trace.oxygen.values(), *trace.temperature_c.values()]:
        assert values.shape == trace.time_s.shape
    assert list(trace.glitches.columns) == list(lg.GLITCH_COLUMNS)
    assert set(trace.glitches["kind"]) <= set(lg.GLITCH_KINDS)


@pytest.mark.parametrize(("text", "columns"), [
    ('"Time","O2 CH1 [%]","Temp [°C]"\r\n'
     + "".join(f'"2026-03-14 08:00:{k:02d}","{95 - k / 10:.1f}","15.0"\r\n' for k in range(10)),
     ["Time", "O2 CH1 [%]", "Temp [°C]"]),                                    # quoted fields
    ("Time;O2 [%];\n" + "".join(f"{k};{95 - k / 10:.1f};\n" for k in range(10)).replace(".", ","),
     ["Time", "O2 [%]", "column 3"]),                                           # trailing ;
    ("Time [s]\tO2 [mg/L]\tT [°C]\n"
     + "".join(f"{k:>6}\t{8 - k / 100:>8.3f}\t{15:>6.2f}\n" for k in range(10)),
     ["Time [s]", "O2 [mg/L]", "T [°C]"]),                                      # padded with spaces
    ("Time;O2;Temp\ns;%;°C\n" + "".join(f"{k};{95 - k / 10:.1f};15,0\n" for k in range(10))
     .replace(".", ","), ["Time [s]", "O2 [%]", "Temp [°C]"]),                 # a line of units
])
def test_layout_variants(tmp_path, text, columns):
    data = write(tmp_path, text)
    assert sniff(data, name="v.csv").columns == columns
    trace = read_logger(data, name="v.csv")
    assert trace.glitches.empty and trace.time_s.size == 10
    np.testing.assert_allclose(next(iter(trace.oxygen.values()))[:2],
                               [95.0, 94.9] if "%" in columns[1] else [8.0, 7.99], atol=1e-12)


def test_remembered_mapping_follows_the_layout_of_a_new_export(tmp_path):
    first = make_export(preamble=False, seed=1)
    mapping = guess_mapping(write(tmp_path, first.text, name="a.csv"), name="a.csv")
    assert mapping.header_line == 0
    later = make_export(preamble=True, delimiter=";", decimal=",", seed=2)
    data = write(tmp_path, later.text, "latin-1", name="b.csv")
    layout = sniff(data, name="b.csv")
    assert header_fingerprint(layout.columns) == header_fingerprint(first.columns)
    with pytest.raises(InputError):
        read_logger(data, name="b.csv", mapping=mapping)
    trace = read_logger(data, name="b.csv", mapping=mapping.with_layout(layout))
    np.testing.assert_array_equal(trace.oxygen["2"], later.oxygen["2"])
    assert trace.mapping.header_line == 4 and trace.mapping.oxygen == mapping.oxygen


@settings(max_examples=200, deadline=None)
@given(st.lists(st.sampled_from([0.5, 1.0, 1.0, 1.0, 2.0, 7.5]), min_size=1, max_size=60))
def test_median_step_equals_numpy_median(steps):
    # numpy.median is the reference; the shortcut applies when one value holds the majority.
    steps = np.asarray(steps, dtype=float)
    assert lg._median_step(steps) == float(np.median(steps))

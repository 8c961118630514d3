"""Read an oxygen logger's raw export (delimited text) into a :class:`LoggerTrace`.

A logger export is a text table: optional comment or metadata lines, one line of column names,
then one line per reading. This module finds the layout (:func:`sniff`), proposes which column
is what (:func:`guess_mapping`), and reads the readings (:func:`read_logger`) with every glitch it
finds reported in a table, never fixed silently. The raw bytes are never changed; their SHA-256
checksum travels with the trace so that the lab book can store the file unchanged by checksum.

The rules (formats read, how a layout is guessed, what each glitch rule does) are described for
people in ``docs/logger_import.md``.

Speed: a file is parsed once by the Arrow CSV reader with the column types the mapping implies
(timestamps parsed during the read), and every check afterwards is a vectorised numpy operation.
Only a file whose columns hold text that is not a number falls back to reading those columns as
text and converting them with coercion.
"""

from __future__ import annotations

import codecs
import csv
import functools
import json
import math
import re
import unicodedata
from collections import Counter
from dataclasses import dataclass, field, fields, replace
from datetime import datetime, time
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from swimlab import oxygen
from swimlab._parallel import each_channel
from swimlab.errors import InputError
from swimlab.io.checksum import sha256_hex
from swimlab.oxygen import UNITS

__all__ = [
    "ColumnMapping",
    "DEFAULT_OXYGEN_ERROR_CODES",
    "DEFAULT_TEMPERATURE_ERROR_CODES",
    "GAP_FACTOR",
    "GLITCH_COLUMNS",
    "GLITCH_KINDS",
    "LoggerTrace",
    "OXYGEN_RANGES",
    "OXYGEN_UNITS",
    "SniffResult",
    "TEMPERATURE_RANGE_C",
    "TIME_FORMATS",
    "guess_mapping",
    "header_fingerprint",
    "read_logger",
    "sha256_hex",
    "sniff",
]

# --- vocabulary -------------------------------------------------------------------------------

OXYGEN_UNITS = UNITS
"""Canonical oxygen unit names (:data:`swimlab.oxygen.UNITS`)."""

TIME_FORMATS = (
    "iso", "dayfirst", "monthfirst", "time_of_day", "elapsed_s", "elapsed_min", "elapsed_h",
)
"""How a time column is written: ISO 8601 date-times; day-first or month-first date-times
(``02.03.2026 08:00:00``, ``03/02/2026 08:00:00``); clock time of day only (``08:00:00``);
elapsed seconds, minutes or hours."""

DELIMITERS = (",", ";", "\t")
DECIMALS = (".", ",")
ENCODINGS = ("utf-8", "latin-1")

_ELAPSED_FACTOR_S = {"elapsed_s": 1.0, "elapsed_min": 60.0, "elapsed_h": 3600.0}

GLITCH_KINDS = (
    "missing", "gap", "duplicate_time", "backwards_time", "error_code", "text_value",
    "day_rollover", "incomplete_row",
)
"""Kinds of finding in :attr:`LoggerTrace.glitches` (see ``docs/logger_import.md``)."""

GLITCH_COLUMNS = ("line", "column", "kind", "value", "action")

GAP_FACTOR = 5.0
"""A time step longer than this multiple of the file's median step is reported as a gap. [-]
Common practice."""

ROLLOVER_S = 12 * 3600.0
"""A clock time of day that goes backwards by more than this is taken as midnight passing and one
day is added. [s] Common practice (half a day: a logger's clock is never set back that far
within a trial)."""

TEXT_SHARE_MAX = 0.5
"""Largest share of a column's non-empty cells that may be text before the column is refused as
not numeric (below it, each text cell is a glitch and is set missing). [-] Common practice."""

DEFAULT_OXYGEN_ERROR_CODES = (-1.0, -99.0, -300.0, -999.0, -9999.0, 9999.0, 99999.0)
"""Numbers that oxygen loggers write in place of a reading when a sensor fails (negative
sentinels and runs of nines). They are set missing. A lab adds its own logger's codes to the
mapping. Common practice."""

DEFAULT_TEMPERATURE_ERROR_CODES = (-99.0, -300.0, -999.0, -9999.0, 9999.0, 99999.0)
"""As :data:`DEFAULT_OXYGEN_ERROR_CODES`, for temperature; -1 is left out because -1 °C is a
real seawater temperature. Common practice."""

def _round_up(value: float, digits: int = 3) -> float:
    scale = 10.0 ** (math.floor(math.log10(value)) - digits + 1)
    return round(math.ceil(value / scale) * scale, 9)


OXYGEN_RANGES: dict[str, tuple[float, float]] = {
    unit: (0.0, _round_up(float(oxygen.convert(oxygen.MAX_PERCENT_AIR_SATURATION, oxygen.PERCENT_AIR_SATURATION,
                                                unit, temperature=0.0))))
    for unit in UNITS
}
"""Readings a working oxygen sensor can give in each unit, [low, high]. The high end is
:data:`swimlab.oxygen.MAX_PERCENT_AIR_SATURATION` (300 % air saturation, hyperoxia well beyond
what fish trials use) converted by :func:`swimlab.oxygen.convert` for fresh water at 0 °C and
101.325 kPa, where oxygen is most soluble, rounded up to three significant figures. Negative
readings are impossible in every unit."""

TEMPERATURE_RANGE_C = (-3.0, 45.0)
"""Water temperatures a swim-tunnel trial can run at. [°C] Common practice: just below the
freezing point of seawater (about -1.9 °C at salinity 35) to above any fish's thermal limit."""

_SAMPLE_BYTES = 256 * 1024
_SAMPLE_LINES = 600     # lines of the file's head looked at for its layout
_TAIL_LINES = 60        # of which the last ones decide the delimiter
_GUESS_ROWS = 120       # reading lines whose values inform the guesses
_PREVIEW_ROWS = 20

_NUMBER = re.compile(r"^[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?$")
_NUMBER_POINT = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$"
_DATEISH = re.compile(r"^\d{1,4}[-/.]\d{1,2}[-/.]\d{1,4}|^\d{1,2}:\d{2}")
_ISO = re.compile(
    r"^\d{4}-\d{2}-\d{2}(?:[T ]\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?)?\s*(?:Z|[+-]\d{2}:?\d{2})?$"
)
_DMY = re.compile(
    r"^(\d{1,2})([./-])(\d{1,2})\2(\d{4}|\d{2})"
    r"(?:[ T]+(\d{1,2}):(\d{2})(?::(\d{2})([.,]\d+)?)?(?:\s*([AaPp][Mm]))?)?$"
)
_TOD = re.compile(r"^(\d{1,2}):(\d{2})(?::(\d{2})([.,]\d+)?)?(?:\s*([AaPp][Mm]))?$")

_PUMP_TRUE = ("1", "1.0", "1,0", "on", "true", "yes", "y", "t")
_PUMP_FALSE = ("0", "0.0", "0,0", "off", "false", "no", "n", "f")
_ARROW_TRUE = sorted({v for s in _PUMP_TRUE for v in (s, s.upper(), s.capitalize())})
_ARROW_FALSE = sorted({v for s in _PUMP_FALSE for v in (s, s.upper(), s.capitalize())})


# --- checksum and fingerprint -----------------------------------------------------------------




def _normalise_name(text: str) -> str:
    text = unicodedata.normalize("NFKC", text.replace("\ufeff", ""))
    return " ".join(text.split()).casefold()


def header_fingerprint(columns: list[str]) -> str:
    """Return a stable key of a file's column layout.

    The key is the same for the same column names in the same order, whatever the spacing,
    letter case or Unicode form of the names (``µ`` micro sign and Greek ``μ`` alike), and
    different when a column is added, removed, renamed or moved. A lab book stores
    ``{fingerprint: mapping.to_dict()}`` to remember the mapping of each logger's layout.

    Parameters
    ----------
    columns
        The column names of the file, in order (as :attr:`SniffResult.columns`).

    Returns
    -------
    str
        ``"cols1:"`` followed by 20 hex digits of a SHA-256 over the normalised names.
    """
    names = [_normalise_name(str(c)) for c in columns]
    digest = sha256_hex("\x1f".join([str(len(names)), *names]).encode("utf-8"))
    return f"cols1:{digest[:20]}"


# --- the mapping ------------------------------------------------------------------------------


@dataclass(frozen=True)
class ColumnMapping:
    """Which column of a logger file holds what, and how the file is written.

    Parameters
    ----------
    time
        Column holding the time of each reading.
    time_format
        One of :data:`TIME_FORMATS`.
    oxygen
        Channel label (``"A"``, ``"1"``) → column holding that channel's oxygen.
    oxygen_unit
        One of :data:`OXYGEN_UNITS`; the unit the file's oxygen columns are written in.
    temperature
        Channel label → column holding that channel's water temperature [°C]. A column shared
        by several chambers appears under each of their labels. Labels are a subset of
        ``oxygen``'s; may be empty.
    pump
        Column holding the flush pump's state (on/off, 1/0, true/false, yes/no), or None.
    delimiter, decimal, encoding
        Field delimiter (one of ``","``, ``";"``, tab), decimal mark (``"."`` or ``","``) and
        text encoding (``"utf-8"``, with or without byte-order mark, or ``"latin-1"``).
    header_line
        0-based index of the line holding the column names; lines before it are skipped.
    date
        Column holding the date when the file writes date and time of day in two columns, or
        None. Its text is joined to the time column's with a space before parsing;
        ``time_format`` then describes the joined text (``"iso"``, ``"dayfirst"``,
        ``"monthfirst"``).
    oxygen_error_codes, temperature_error_codes
        Numbers the logger writes instead of a reading when a sensor fails; they are set missing
        and reported (see :data:`DEFAULT_OXYGEN_ERROR_CODES`).
    """

    time: str
    time_format: str
    oxygen: dict[str, str]
    oxygen_unit: str
    temperature: dict[str, str]
    pump: str | None = None
    delimiter: str = ","
    decimal: str = "."
    encoding: str = "utf-8"
    header_line: int = 0
    date: str | None = None
    oxygen_error_codes: tuple[float, ...] = DEFAULT_OXYGEN_ERROR_CODES
    temperature_error_codes: tuple[float, ...] = DEFAULT_TEMPERATURE_ERROR_CODES

    def __post_init__(self) -> None:
        def bad(name: str, message: str) -> InputError:
            return InputError(message, field=f"mapping.{name}")

        for name in ("time",):
            if not isinstance(getattr(self, name), str) or not getattr(self, name):
                raise bad(name, f"must be a column name; got {getattr(self, name)!r}")
        for name in ("pump", "date"):
            value = getattr(self, name)
            if value is not None and (not isinstance(value, str) or not value):
                raise bad(name, f"must be a column name or None; got {value!r}")
        for name, valid in (
            ("time_format", TIME_FORMATS), ("oxygen_unit", OXYGEN_UNITS),
            ("delimiter", DELIMITERS), ("decimal", DECIMALS), ("encoding", ENCODINGS),
        ):
            value = getattr(self, name)
            if value not in valid:
                raise bad(name, f"unknown value {value!r}; valid choices are "
                                f"{', '.join(repr(v) for v in valid)}")
        if self.delimiter == self.decimal:
            raise bad("decimal", f"the decimal mark {self.decimal!r} cannot also be the delimiter")
        if self.date is not None and self.time_format not in ("iso", "dayfirst", "monthfirst"):
            raise bad("time_format", f"with a date column the time format must be 'iso', "
                                     f"'dayfirst' or 'monthfirst'; got {self.time_format!r}")
        if isinstance(self.header_line, bool) or not isinstance(self.header_line, int) \
                or self.header_line < 0:
            raise bad("header_line", f"must be a whole number of 0 or more; got {self.header_line!r}")
        for name in ("oxygen", "temperature"):
            value = getattr(self, name)
            if not isinstance(value, dict) or not all(
                isinstance(k, str) and k and isinstance(v, str) and v for k, v in value.items()
            ):
                raise bad(name, f"must map channel labels to column names; got {value!r}")
            object.__setattr__(self, name, dict(value))
        if not self.oxygen:
            raise bad("oxygen", "needs at least one channel")
        if len(set(self.oxygen.values())) != len(self.oxygen):
            raise bad("oxygen", f"two channels name the same column: {self.oxygen!r}")
        extra = sorted(set(self.temperature) - set(self.oxygen))
        if extra:
            raise bad("temperature", f"channels {extra} have no oxygen column; oxygen channels are "
                                     f"{sorted(self.oxygen)}")
        used = {self.time: "time"}
        if self.date is not None:
            used.setdefault(self.date, "date")
        if self.pump is not None:
            used.setdefault(self.pump, "pump")
        roles = [(c, "oxygen") for c in self.oxygen.values()]
        roles += [(c, "temperature") for c in set(self.temperature.values())]
        if self.date == self.time or (self.pump is not None and self.pump in (self.time, self.date)):
            raise bad("time", "time, date and pump must be different columns")
        for column, role in roles:
            if column in used:
                raise bad(role, f"column {column!r} is already used as {used[column]}")
            used[column] = role
        for name in ("oxygen_error_codes", "temperature_error_codes"):
            value = getattr(self, name)
            try:
                codes = tuple(float(v) for v in value)
            except (TypeError, ValueError):
                raise bad(name, f"must be a list of numbers; got {value!r}") from None
            if any(isinstance(v, bool) or not math.isfinite(c) for v, c in zip(value, codes, strict=True)):
                raise bad(name, f"must be a list of finite numbers; got {value!r}")
            object.__setattr__(self, name, codes)

    def __hash__(self) -> int:
        return hash(json.dumps(self.to_dict(), sort_keys=True, ensure_ascii=False))

    def to_dict(self) -> dict[str, Any]:
        """Return the mapping as a JSON-safe dict (lists for the error codes)."""
        out: dict[str, Any] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, dict):
                value = dict(value)
            elif isinstance(value, tuple):
                value = list(value)
            out[f.name] = value
        return out

    def with_layout(self, layout: SniffResult) -> ColumnMapping:
        """This mapping with the encoding, delimiter, decimal mark and column-name line of
        ``layout`` (a :func:`sniff` result of the file about to be read).

        A remembered mapping is found by :func:`header_fingerprint`, which looks at the column
        names only; the number of metadata lines above them may differ from export to export.
        """
        return replace(self, encoding=layout.encoding, delimiter=layout.delimiter,
                       decimal=layout.decimal, header_line=layout.header_line)

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> ColumnMapping:
        """Build a mapping from :meth:`to_dict`'s output, refusing unknown or missing keys."""
        if not isinstance(d, dict):
            raise InputError(f"a column mapping must be a dict; got {type(d).__name__}",
                             field="mapping")
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(d) - known)
        if unknown:
            raise InputError(f"unknown keys {unknown}; valid keys are {sorted(known)}",
                             field="mapping")
        required = ("time", "time_format", "oxygen", "oxygen_unit", "temperature")
        missing = [k for k in required if k not in d]
        if missing:
            raise InputError(f"missing keys {missing}", field="mapping")
        data = dict(d)
        for key in ("oxygen_error_codes", "temperature_error_codes"):
            if key in data and isinstance(data[key], list | tuple):
                data[key] = tuple(data[key])
        return cls(**data)


# --- sniffing ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class SniffResult:
    """The layout of a logger file as found by :func:`sniff`.

    Attributes
    ----------
    encoding
        ``"utf-8"`` or ``"latin-1"``.
    delimiter, decimal
        Field delimiter and decimal mark.
    header_line
        0-based index of the column-name line.
    columns
        Column names (blank names become ``"column N"``, repeated ones get ``" (2)"``).
    preview
        The first readings as text, one column per name (at most 20 rows).
    bom
        Whether the file starts with a UTF-8 byte-order mark.
    """

    encoding: str
    delimiter: str
    decimal: str
    header_line: int
    columns: list[str]
    preview: pd.DataFrame
    bom: bool = False


@dataclass(frozen=True)
class _Layout:
    encoding: str
    bom: bool
    delimiter: str
    decimal: str
    header_line: int
    columns: list[str]
    rows: list[list[str]]        # sampled reading lines after the header, split
    row_lines: list[int]         # their 1-based line numbers
    truncated: bool              # whether the sample stops before the end of the file


def _check_bytes(data: Any, name: str) -> bytes:
    if isinstance(data, bytearray | memoryview):
        data = bytes(data)
    if not isinstance(data, bytes):
        raise TypeError(f"data must be bytes; got {type(data).__name__}")
    if not isinstance(name, str) or not name:
        raise TypeError("name must be a non-empty str (the file name, used in messages)")
    return data


def _decode_head(data: bytes, name: str, encoding: str | None) -> tuple[str, str, bool, bool]:
    """Decode the first part of the file; return (text, encoding, bom, truncated)."""
    if not data[:4096].strip() and not data.strip():
        raise InputError("the file is empty; expected a delimited text export with a line of "
                         "column names and one line per reading", file=name)
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise InputError("the file is UTF-16 text; expected UTF-8 or Latin-1 (re-save the export "
                         "as UTF-8)", file=name)
    head = data[:_SAMPLE_BYTES]
    truncated = len(data) > _SAMPLE_BYTES
    if truncated:
        cut = head.rfind(b"\n")
        head = head[: cut + 1] if cut > 0 else head
    if b"\x00" in head:
        raise InputError("the file holds NUL bytes, so it is not a text export; expected "
                         "delimited text (UTF-8 or Latin-1)", file=name)
    bom = head.startswith(codecs.BOM_UTF8)
    if bom:
        head = head[len(codecs.BOM_UTF8):]
    if b"\n" not in head and b"\r" in head:
        raise InputError("lines end with a bare carriage return; expected line feeds "
                         "(LF or CRLF line ends)", file=name)
    if encoding is None:
        try:
            return head.decode("utf-8"), "utf-8", bom, truncated
        except UnicodeDecodeError:
            return head.decode("latin-1"), "latin-1", bom, truncated
    try:
        return head.decode(encoding), encoding, bom, truncated
    except UnicodeDecodeError as exc:
        line = head[: exc.start].count(b"\n") + 1
        raise InputError(f"byte 0x{head[exc.start]:02X} is not valid {encoding}; expected "
                         f"{encoding} text as the mapping says (try 'latin-1')",
                         file=name, row=line) from None


def _split_lines(text: str) -> list[str]:
    lines = text.split("\n", _SAMPLE_LINES)[:_SAMPLE_LINES]
    if lines and lines[-1] == "":
        lines.pop()
    return [line[:-1] if line.endswith("\r") else line for line in lines]


def _fields(line: str, delimiter: str) -> list[str]:
    return next(csv.reader([line], delimiter=delimiter), [])


def _is_value(text: str) -> bool:
    text = text.strip()
    return bool(_NUMBER.match(text) or _DATEISH.match(text))


def _is_data(parts: list[str], width: int) -> bool:
    if len(parts) != width:
        return False
    nonempty = [p for p in parts if p.strip()]
    n_values = sum(_is_value(p) for p in nonempty)
    return n_values >= 1 and n_values >= len(nonempty) / 2


def _is_header(parts: list[str], width: int) -> bool:
    if abs(len(parts) - width) > 1 or len(parts) < 2:
        return False
    nonempty = [p.strip() for p in parts if p.strip()]
    return bool(nonempty) and not any(_is_value(p) for p in nonempty) \
        and any(any(ch.isalpha() for ch in p) for p in nonempty)


def _mode(values: list[int]) -> tuple[int, float]:
    if not values:
        return 0, 0.0
    value, count = Counter(values).most_common(1)[0]
    return value, count / len(values)


def _column_names(parts: list[str], width: int, name: str, line: int) -> list[str]:
    names = [p.replace("\ufeff", "").strip() for p in parts]
    while len(names) > width and not names[-1]:
        names.pop()
    if len(names) > width:
        raise InputError(f"the column-name line has {len(names)} names but the readings have "
                         f"{width} fields; expected one name per field", file=name, row=line)
    names += [""] * (width - len(names))
    out: list[str] = []
    seen: Counter[str] = Counter()
    for i, n in enumerate(names):
        n = n or f"column {i + 1}"
        seen[n] += 1
        out.append(n if seen[n] == 1 else f"{n} ({seen[n]})")
    return out


_UNIT_CELL = re.compile(
    r"^[\[(]?\s*(?:s|sec|min|h|%|%\s*air\s*sat\.?|%\s*sat\.?|mg/l|µmol/l|μmol/l|umol/l|"
    r"hpa|kpa|mmhg|torr|mbar|ppm|°\s*c|degc|c|-)\s*[\])]?$",
    re.IGNORECASE,
)


def _header_names(lines: list[str], index: int, delimiter: str, width: int, name: str) -> list[str]:
    """Column names from line ``index``; a line of units under a line of names is merged.

    When line ``index`` holds only units (``s``, ``%``, ``[mg/L]``, ``°C``...) and the line
    before it has as many fields, the names are ``"<name> [<unit>]"``.
    """
    parts = _fields(lines[index], delimiter)
    cells = [p.strip() for p in parts]
    if index > 0 and any(cells) and all(_UNIT_CELL.match(c) for c in cells if c):
        above = _fields(lines[index - 1], delimiter)
        if len(above) == len(parts) and _is_header(above, len(above)):
            merged = []
            for n, u in zip(above, cells, strict=True):
                n = n.strip()
                u = u.strip("[]() ")
                merged.append(f"{n} [{u}]" if u and n else n or u)
            parts = merged
    return _column_names(parts, width, name, index + 1)


def _find_layout(data: bytes, name: str) -> _Layout:
    text, encoding, bom, truncated = _decode_head(data, name, None)
    lines = _split_lines(text)
    nonblank = [i for i, line in enumerate(lines) if line.strip()]
    if not nonblank:
        raise InputError("the file is empty; expected a delimited text export with a line of "
                         "column names and one line per reading", file=name)
    tail = [lines[i] for i in nonblank[len(nonblank) // 2:]][-_TAIL_LINES:]
    delimiter = None
    width = 0
    for d in ("\t", ";", ","):
        w, share = _mode([len(_fields(line, d)) for line in tail])
        if w >= 2 and share >= 0.8:
            delimiter, width = d, w
            break
    if delimiter is None:
        raise InputError("found no column delimiter: expected readings in columns separated by "
                         "commas, semicolons or tabs", file=name)
    parts: dict[int, list[str]] = {}
    is_data: dict[int, bool] = {}

    def part(i: int) -> list[str]:
        if i not in parts:
            parts[i] = _fields(lines[i], delimiter)
        return parts[i]

    def data_like(i: int) -> bool:
        if i not in is_data:
            is_data[i] = _is_data(part(i), width)
        return is_data[i]

    # The readings start at the first run of five reading-like lines (or fewer at the end).
    start = None
    first_data = None
    for pos, i in enumerate(nonblank):
        if not data_like(i):
            continue
        if first_data is None:
            first_data = i
        if all(data_like(j) for j in nonblank[pos + 1: pos + 5]):
            start = i
            break
    start = start if start is not None else first_data
    if start is None:
        raise InputError(f"found no readings: expected lines of numbers separated by "
                         f"{_delim_name(delimiter)}", file=name)
    header = next((i for i in reversed(nonblank) if i < start and _is_header(part(i), width)),
                  None)
    if header is None:
        raise InputError(f"found no line of column names before the first reading at line "
                         f"{start + 1}; expected a line of names separated by "
                         f"{_delim_name(delimiter)}", file=name, row=start + 1)
    columns = _header_names(lines, header, delimiter, width, name)
    after = [i for i in nonblank if i > header][:_GUESS_ROWS]
    rows = [part(i) for i in after]
    row_lines = [i + 1 for i in after]
    decimal = "."
    if delimiter != ",":
        comma = point = 0
        for r in rows:
            for p in r:
                p = p.strip()
                if _NUMBER.match(p):
                    comma += "," in p
                    point += "." in p
        if comma > point:
            decimal = ","
    sampled_all = not truncated and text.count("\n") <= len(lines) and len(after) == len(
        [i for i in nonblank if i > header])
    return _Layout(encoding, bom, delimiter, decimal, header, columns, rows, row_lines,
                   not sampled_all)


def _delim_name(delimiter: str) -> str:
    return {",": "commas", ";": "semicolons", "\t": "tabs"}[delimiter]


def _preview(layout: _Layout) -> pd.DataFrame:
    width = len(layout.columns)
    rows = [(r + [""] * width)[:width] for r in layout.rows[:_PREVIEW_ROWS]]
    return pd.DataFrame(rows, columns=layout.columns, dtype=object)


def sniff(data: bytes, *, name: str) -> SniffResult:
    """Find the layout of a logger export: encoding, delimiter, decimal mark, column names.

    Parameters
    ----------
    data
        The file's raw bytes (not changed).
    name
        The file's name, used in error messages.

    Returns
    -------
    SniffResult

    Notes
    -----
    The rules are in ``docs/logger_import.md``: UTF-8 unless the first 256 KiB are not valid
    UTF-8 (then Latin-1); the delimiter is the first of tab, semicolon, comma that splits the
    later lines of the sample into a constant number (≥ 2) of fields; the readings start at the
    first run of five lines of that width holding mostly numbers or dates; the column names are
    the last line before it with no numbers and some letters; the decimal mark is a comma when
    numbers with a comma outnumber numbers with a point (never with comma delimiters).

    Raises
    ------
    InputError
        An empty, UTF-16 or binary file, or one with no delimiter, readings or column names.
    """
    data = _check_bytes(data, name)
    layout = _find_layout(data, name)
    return SniffResult(layout.encoding, layout.delimiter, layout.decimal, layout.header_line,
                       list(layout.columns), _preview(layout), layout.bom)


# --- guessing the mapping ---------------------------------------------------------------------

_RE_TEMP = re.compile(r"temp|°\s*c\b|degc|deg\.? c\b|celsius|^t\s*[\[(]\s*°|^t\d*$|^t\d*\s*[\[(]\s*c")
_RE_PUMP = re.compile(r"pump|flush|relay|valve")
_RE_TIME = re.compile(
    r"time|date|datum|zeit|clock|elapsed|stamp|hh:mm|^t\s*[\[(]\s*(?:s|sec|min|h|hr)\s*[\])]|"
    r"^(?:s|sec|seconds|min|minutes|h|hours)$"
)
_RE_DATE_ONLY = re.compile(r"^\s*(?:date|datum|day)\s*(?:[\[(].*[\])])?\s*$")
_RE_NOT_OXYGEN = re.compile(
    r"press|baro|atm\b|salin|psu|phase|dphi|ampl|signal|batt|volt|status|error|flag|speed|flow|"
    r"rpm|light|intens|raw|\bph\b|cond|co2|humid|rh\b|depth|level"
)
_RE_OXYGEN = re.compile(
    r"(?<![a-z])p?o2|oxygen|oxy\b|(?<![a-z])do(?:\d|\b)|dissolved|sauerstoff|\bsat\b|saturation|"
    r"%|mg\s*/\s*l|mg\s*l-1|ppm|umol|μmol|micromol|hpa|kpa|torr|mmhg|mbar"
)
_RE_CHANNEL = re.compile(
    r"(?:^|[^a-z])(?:ch|chan|channel|chamber|cham|sensor|probe|port|resp|respirometer|tunnel|"
    r"kanal)\s*[-_#:.]?\s*([a-z]|\d{1,2})(?![a-z0-9])"
)
_UNIT_PATTERNS = (
    ("% air saturation", re.compile(r"%|air\s*sat|\bsat\b|saturation")),
    ("mg/L", re.compile(r"mg\s*/\s*l|mg\s*l-1|mg\s*·\s*l|ppm|mg\s*/\s*dm")),
    ("µmol/L", re.compile(r"umol|μmol|micromol")),
    ("hPa", re.compile(r"hpa|mbar")),
    ("kPa", re.compile(r"kpa")),
    ("mmHg", re.compile(r"mmhg|torr")),
)
_RE_UNIT_TEXT = re.compile(r"[\[(][^\])]*[\])]|%|°\s*c\b|mg\s*/\s*l|µmol\s*/\s*l|μmol\s*/\s*l")


def _oxygen_unit_from_name(norm: str) -> str | None:
    for unit, pattern in _UNIT_PATTERNS:
        if pattern.search(norm):
            return unit
    return None


def _channel_label(norm: str) -> str | None:
    m = _RE_CHANNEL.search(norm)
    if m:
        return m.group(1).upper()
    stripped = _RE_UNIT_TEXT.sub(" ", norm).strip(" _-.:")
    m = re.search(r"^(.*?[a-z].*?)(?:[\s_\-#.:]+|(?<=o2)|(?<=do)|(?<=temp)|(?<=^t))([a-z]|\d{1,2})$",
                  stripped)
    if m:
        return m.group(2).upper()
    return None


def _numeric_share(values: list[str], decimal: str) -> float:
    nonempty = [v.strip() for v in values if v.strip()]
    if not nonempty:
        return 0.0
    ok = sum(bool(_NUMBER.match(v)) and (decimal == "," or "," not in v) for v in nonempty)
    return ok / len(nonempty)


def _float_values(values: list[str], decimal: str) -> np.ndarray:
    out = []
    for v in values:
        v = v.strip()
        if _NUMBER.match(v):
            out.append(float(v.replace(",", ".") if decimal == "," else v))
    return np.asarray(out, dtype=float)


def _time_kind(values: list[str]) -> str | None:
    nonempty = [v.strip() for v in values if v.strip()]
    if not nonempty:
        return None
    patterns = (("iso", _ISO), ("dmy", _DMY), ("time_of_day", _TOD), ("number", _NUMBER))
    # Try first the patterns that the first values match, then the others.
    probe = nonempty[:5]
    order = sorted(patterns, key=lambda kp: not any(kp[1].match(v) for v in probe))
    for kind, pattern in order:
        if sum(bool(pattern.match(v)) for v in nonempty) >= 0.8 * len(nonempty):
            return kind
    return None


def _elapsed_format(norm: str) -> str:
    inner = " ".join(re.findall(r"[\[(]([^\])]*)[\])]", norm)) or norm
    if re.search(r"(?<![a-z])(?:h|hr|hrs|hour|hours|std)(?![a-z])", inner):
        return "elapsed_h"
    if re.search(r"(?<![a-z])(?:min|mins|minute|minutes)(?![a-z])", inner):
        return "elapsed_min"
    return "elapsed_s"


def _day_or_month_first(first: np.ndarray, second: np.ndarray, separator: str,
                        name: str, column: str) -> str:
    """Decide a d/m/y or m/d/y column; see docs/logger_import.md."""
    if first.size == 0:
        return "dayfirst"
    a_big = bool((first > 12).any())
    b_big = bool((second > 12).any())
    if a_big and b_big:
        raise InputError("dates have values above 12 in both the first and the second field, so "
                         "they are neither day-first nor month-first throughout; expected one "
                         "order for the whole column", file=name, column=column)
    if a_big:
        return "dayfirst"
    if b_big:
        return "monthfirst"
    if separator == ".":
        return "dayfirst"
    n_first, n_second = np.unique(first).size, np.unique(second).size
    if n_second > n_first:
        return "monthfirst"
    return "dayfirst"


def guess_mapping(data: bytes, *, name: str) -> ColumnMapping:
    """Propose a :class:`ColumnMapping` from a file's column names and first readings.

    Parameters
    ----------
    data
        The file's raw bytes (not changed).
    name
        The file's name, used in error messages.

    Returns
    -------
    ColumnMapping
        A proposal for a person to confirm; the rules are in ``docs/logger_import.md``.

    Raises
    ------
    InputError
        No numeric oxygen column, or no time column, or the layout cannot be found
        (see :func:`sniff`).
    """
    data = _check_bytes(data, name)
    layout = _find_layout(data, name)
    cols = layout.columns
    values = {c: [r[i] if i < len(r) else "" for r in layout.rows] for i, c in enumerate(cols)}
    norm = {c: _normalise_name(c) for c in cols}
    numeric = {c: _numeric_share(values[c], layout.decimal) >= 0.5 for c in cols}

    # time (and date) -----------------------------------------------------------------------
    kinds = {c: _time_kind(values[c]) for c in cols}
    named = [c for c in cols if _RE_TIME.search(norm[c]) and not _RE_TEMP.search(norm[c])]
    time_col: str | None = None
    date_col: str | None = None
    for c in cols:
        if kinds[c] in ("iso", "dmy") and not any(":" in v for v in values[c]):
            kinds[c] = kinds[c] + "_date"       # a date without a clock time
    for wanted in (("iso", "dmy"), ("time_of_day",), ("iso_date", "dmy_date"), ("number",)):
        found = [c for c in named if kinds[c] in wanted]
        if found:
            time_col = found[0]
            break
    if time_col is None:
        found = [c for c in cols if kinds[c] in ("iso", "dmy", "time_of_day")]
        if found:
            time_col = found[0]
    if time_col is None:
        raise InputError(f"found no time column; expected a column named like 'time', 'date' "
                         f"or 'elapsed' holding date-times, clock times or elapsed numbers; "
                         f"columns are {cols}", file=name)
    kind = kinds[time_col].removesuffix("_date")
    if kind == "time_of_day":
        dates = [c for c in cols if c != time_col and kinds[c] in ("iso_date", "dmy_date")
                 and _RE_DATE_ONLY.match(norm[c])]
        if dates:
            date_col = dates[0]
            kind = kinds[date_col].removesuffix("_date")
    if kind == "iso":
        time_format = "iso"
    elif kind == "dmy":
        time_format = _guess_dmy(data, layout, date_col or time_col, values[date_col or time_col],
                                 name)
    elif kind == "time_of_day":
        time_format = "time_of_day"
    else:
        time_format = _elapsed_format(norm[time_col])
    taken = {time_col, date_col}

    # pump ----------------------------------------------------------------------------------
    pump_col = None
    for c in cols:
        if c in taken or not _RE_PUMP.search(norm[c]):
            continue
        states = {v.strip().casefold() for v in values[c] if v.strip()}
        if states and states <= set(_PUMP_TRUE + _PUMP_FALSE):
            pump_col = c
            break
    taken.add(pump_col)

    # temperature ---------------------------------------------------------------------------
    temp_cols = [c for c in cols if c not in taken and numeric[c] and _RE_TEMP.search(norm[c])]
    taken.update(temp_cols)

    # oxygen --------------------------------------------------------------------------------
    candidates = [
        c for c in cols if c not in taken and numeric[c] and not _RE_NOT_OXYGEN.search(norm[c])
        and (_RE_OXYGEN.search(norm[c]) or _RE_CHANNEL.search(norm[c]))
    ]
    if not candidates:
        named_o2 = [c for c in cols if c not in taken and _RE_OXYGEN.search(norm[c])
                    and not _RE_NOT_OXYGEN.search(norm[c])]
        hint = (f"; the oxygen-like columns {named_o2} hold no numbers" if named_o2 else "")
        raise InputError(f"found no numeric oxygen column; expected a column of numbers named "
                         f"like 'O2', 'oxygen', 'DO' or 'CH1', or with an oxygen unit "
                         f"(%, mg/L, µmol/L, hPa, kPa, mmHg){hint}; columns are {cols}",
                         file=name)
    units = {c: _oxygen_unit_from_name(norm[c]) for c in candidates}
    named_units = [u for u in units.values() if u is not None]
    if named_units:
        counts = Counter(named_units)
        best = max(counts.values())
        unit = next(u for u in OXYGEN_UNITS if counts.get(u) == best)
        oxygen_cols = [c for c in candidates if units[c] == unit]
    else:
        oxygen_cols = candidates
        sample = np.concatenate([_float_values(values[c], layout.decimal) for c in oxygen_cols])
        sample = sample[(sample >= 0) & (sample < 9000)]
        median = float(np.median(sample)) if sample.size else 0.0
        unit = "mg/L" if median <= 25 else "% air saturation" if median <= 150 else "µmol/L"

    oxygen = _label_columns(oxygen_cols, norm)
    temperature: dict[str, str] = {}
    if len(temp_cols) == 1:
        temperature = {label: temp_cols[0] for label in oxygen}
    elif temp_cols:
        temp_labels = {c: _channel_label(norm[c]) for c in temp_cols}
        by_label = {lab: c for c, lab in temp_labels.items() if lab is not None}
        if all(label in by_label for label in oxygen):
            temperature = {label: by_label[label] for label in oxygen}
        elif len(temp_cols) == len(oxygen):
            temperature = dict(zip(oxygen, temp_cols, strict=True))
        else:
            temperature = {label: by_label.get(label, temp_cols[0]) for label in oxygen}
    return ColumnMapping(
        time=time_col, time_format=time_format, oxygen=oxygen, oxygen_unit=unit,
        temperature=temperature, pump=pump_col, delimiter=layout.delimiter,
        decimal=layout.decimal, encoding=layout.encoding, header_line=layout.header_line,
        date=date_col,
    )


def _label_columns(columns: list[str], norm: dict[str, str]) -> dict[str, str]:
    labels = [_channel_label(norm[c]) for c in columns]
    if all(lab is not None for lab in labels) and len(set(labels)) == len(labels):
        return dict(zip(labels, columns, strict=True))  # type: ignore[arg-type]
    return {str(i + 1): c for i, c in enumerate(columns)}


def _guess_dmy(data: bytes, layout: _Layout, column: str, sample: list[str], name: str) -> str:
    matches = [_DMY.match(v.strip()) for v in sample if v.strip()]
    matches = [m for m in matches if m]
    separator = matches[0].group(2) if matches else "/"
    first = np.array([int(m.group(1)) for m in matches])
    second = np.array([int(m.group(3)) for m in matches])
    decided = _day_or_month_first(first, second, separator, name, column)
    if not layout.truncated or (first > 12).any() or (second > 12).any() or separator == ".":
        return decided
    # The sample cannot decide: look at the whole column.
    idx = layout.columns.index(column)
    offset = _body_offset(data, layout.header_line, layout.bom, name)
    try:
        table = pacsv.read_csv(
            pa.BufferReader(pa.py_buffer(data).slice(offset)),
            read_options=pacsv.ReadOptions(column_names=layout.columns, encoding=_arrow_encoding(
                layout.encoding, data, offset)),
            parse_options=pacsv.ParseOptions(delimiter=layout.delimiter),
            convert_options=pacsv.ConvertOptions(include_columns=[layout.columns[idx]],
                                                 column_types={layout.columns[idx]: pa.string()}),
        )
    except pa.ArrowInvalid:
        return decided
    parts = pc.extract_regex(table.column(0), r"^\s*(?P<a>\d{1,2})[./-](?P<b>\d{1,2})")
    a = pc.cast(pc.struct_field(parts, [0]), pa.int64()).drop_null().to_numpy()
    b = pc.cast(pc.struct_field(parts, [1]), pa.int64()).drop_null().to_numpy()
    return _day_or_month_first(a, b, separator, name, column)


# --- reading ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class LoggerTrace:
    """The readings of one logger file, cleaned by stated rules, with what was found.

    Attributes
    ----------
    name
        The file's name.
    sha256
        SHA-256 checksum of the raw bytes (hex), computed on first use: the lab book, bundles
        and the app's upload hash a raw file once, when it is kept, and pass it here by that
        checksum, so reading it for an analysis need not hash it again.
    time_s
        Time of each kept reading since the first kept reading, strictly increasing. [s]
        This and the other arrays of readings are read-only: copy one before changing it.
    start_time
        Clock time of the first kept reading when the file has dates (ISO, day-first or
        month-first), else None.
    oxygen
        Channel label → oxygen of each kept reading, in :attr:`oxygen_unit` as written in the
        file; NaN where a value was empty, an error code or text (see :attr:`glitches`).
    oxygen_unit
        One of :data:`OXYGEN_UNITS`.
    temperature_c
        Channel label → water temperature of each kept reading [°C]; empty when not mapped.
    pump
        Flush pump running (True) per kept reading, or None when not mapped.
    glitches
        One row per finding, columns :data:`GLITCH_COLUMNS`: ``line`` (1-based line of the
        file), ``column``, ``kind`` (one of :data:`GLITCH_KINDS`), ``value`` (as read), and
        ``action`` (what was done).
    mapping
        The mapping used (guessed when none was given).
    n_rows_read
        Lines parsed after the column-name line (empty lines included; each one is reported
        in :attr:`glitches`).
    lines
        1-based line of the file of each kept reading.
    start_time_of_day
        Clock time of day of the first kept reading for files with clock times only, else None.
    elapsed_start_s
        For elapsed-time files, the file's elapsed time of the first kept reading [s], else None.
    """

    name: str
    raw: bytes = field(repr=False, compare=False)
    time_s: np.ndarray
    start_time: datetime | None
    oxygen: dict[str, np.ndarray]
    oxygen_unit: str
    temperature_c: dict[str, np.ndarray]
    pump: np.ndarray | None
    glitches: pd.DataFrame
    mapping: ColumnMapping
    n_rows_read: int
    lines: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    start_time_of_day: time | None = None
    elapsed_start_s: float | None = None

    @functools.cached_property
    def sha256(self) -> str:
        return sha256_hex(self.raw)


class _Glitches:
    """Collects findings as arrays, turned into one table at the end."""

    def __init__(self) -> None:
        # One entry per finding kind and column, appended in one step (columns may be checked
        # on two threads); the table is sorted by line and column, whatever the order.
        self.parts: list[tuple[np.ndarray, str, str, list[Any], str]] = []

    def add(self, lines: np.ndarray, column: str, kind: str, values: Any, action: str) -> None:
        lines = np.asarray(lines, dtype=np.int64)
        if lines.size == 0:
            return
        values = [values] * lines.size if isinstance(values, str) else list(values)
        self.parts.append((lines, column, kind, values, action))

    def table(self) -> pd.DataFrame:
        parts = sorted(self.parts, key=lambda p: (p[1], p[2], p[4]))  # same order on every run
        lines = np.concatenate([p[0] for p in parts]) if parts else np.zeros(0, dtype=np.int64)
        sizes = [p[0].size for p in parts]
        column = np.repeat(np.array([p[1] for p in parts], dtype=object), sizes)
        kind = np.repeat(np.array([p[2] for p in parts], dtype=object), sizes)
        action = np.repeat(np.array([p[4] for p in parts], dtype=object), sizes)
        value = np.empty(lines.size, dtype=object)
        value[:] = [v for p in parts for v in p[3]]
        out = pd.DataFrame({"line": lines, "column": column, "kind": kind, "value": value,
                            "action": action})
        for col in ("column", "kind", "value", "action"):
            out[col] = out[col].astype(object)
        return out.sort_values(["line", "column"], kind="stable").reset_index(drop=True)


def _body_offset(data: bytes, header_line: int, bom: bool, name: str) -> int:
    pos = len(codecs.BOM_UTF8) if bom else 0
    for _ in range(header_line + 1):
        j = data.find(b"\n", pos)
        if j < 0:
            raise InputError(f"the file has no readings after the column-name line "
                             f"{header_line + 1}; expected one line per reading", file=name)
        pos = j + 1
    return pos


def _arrow_encoding(encoding: str, data: bytes, offset: int) -> str:
    if encoding == "utf-8":
        return "utf8"
    body = np.frombuffer(data, dtype=np.uint8, offset=offset)
    return "utf8" if body.size == 0 or int(body.max()) < 128 else "latin1"


def _mapped_layout(data: bytes, name: str, mapping: ColumnMapping) -> tuple[list[str], bool]:
    """Column names of the file under ``mapping``'s encoding, delimiter and header line."""
    text, _, bom, _ = _decode_head(data, name, mapping.encoding)
    lines = _split_lines(text)
    if mapping.header_line >= len(lines):
        raise InputError(f"the mapping's column-name line {mapping.header_line + 1} is past the "
                         f"file's {len(lines)} lines", file=name, row=mapping.header_line + 1)
    following = [line for line in lines[mapping.header_line + 1:] if line.strip()][:50]
    width, _ = _mode([len(_fields(line, mapping.delimiter)) for line in following])
    width = width or len(_fields(lines[mapping.header_line], mapping.delimiter))
    columns = _header_names(lines, mapping.header_line, mapping.delimiter, max(width, 1), name)
    wanted = [mapping.time, mapping.date, mapping.pump, *mapping.oxygen.values(),
              *mapping.temperature.values()]
    for col in wanted:
        if col is not None and col not in columns:
            raise InputError(f"the mapping names column {col!r}, which the column-name line "
                             f"does not have; columns are {columns} (delimiter "
                             f"{mapping.delimiter!r})", file=name, row=mapping.header_line + 1,
                             column=col)
    return columns, bom


_CONVERSION_ERROR = re.compile(r"In CSV column #(\d+)")


def _read_table(data: bytes, name: str, mapping: ColumnMapping, columns: list[str],
                offset: int, used: list[str], types: dict[str, pa.DataType]) -> pa.Table:
    """Parse the readings once; columns whose text does not convert are re-read as text.

    Empty lines are kept as rows of empty cells, so that row k of the table is the k-th line
    after the column names (no line counting needed).
    """
    read_options = pacsv.ReadOptions(column_names=columns,
                                     encoding=_arrow_encoding(mapping.encoding, data, offset))
    parse_options = pacsv.ParseOptions(delimiter=mapping.delimiter,
                                       ignore_empty_lines=False)
    types = dict(types)
    retries = 0
    while True:
        convert = pacsv.ConvertOptions(
            include_columns=used, column_types=types, null_values=[""],
            strings_can_be_null=True, decimal_point=mapping.decimal,
            timestamp_parsers=[pacsv.ISO8601], true_values=_ARROW_TRUE, false_values=_ARROW_FALSE,
        )
        try:
            return pacsv.read_csv(pa.BufferReader(pa.py_buffer(data).slice(offset)),
                                  read_options=read_options, parse_options=parse_options,
                                  convert_options=convert)
        except pa.ArrowInvalid as exc:
            message = str(exc)
            if "CSV parse error" in message:
                raise _RowWidthError(message) from None
            m = _CONVERSION_ERROR.search(message)
            col = columns[int(m.group(1))] if m and int(m.group(1)) < len(columns) else None
            retries += 1
            if col is None or col not in types or types[col] == pa.string() or retries > 2:
                if all(t == pa.string() for t in types.values()):
                    raise InputError(f"the readings could not be read: {message}",
                                     file=name) from None
                types = {c: pa.string() for c in types}
            else:
                types[col] = pa.string()


class _RowWidthError(Exception):
    pass


def _bad_width_lines(data: bytes, mapping: ColumnMapping, offset: int,
                     width: int) -> list[tuple[int, int, int]]:
    """(1-based line, field count, byte start) of each reading line of the wrong width."""
    first_line = data.count(b"\n", 0, offset) + 1
    out = []
    pos = offset
    for k, raw in enumerate(data[offset:].split(b"\n")):
        line = raw.decode(mapping.encoding, errors="replace").rstrip("\r")
        if line:
            n = len(_fields(line, mapping.delimiter))
            if n != width:
                out.append((first_line + k, n, pos))
        pos += len(raw) + 1
    return out


@dataclass
class _Cells:
    """A numeric column's values with where it was empty or held text.

    ``values`` None means the column was read as numbers and its values are taken later for the
    kept readings only. ``empty`` None means no cell was empty; ``text`` None means a text cell
    is any non-finite value that is not empty (the Arrow reader turns the words NaN and inf into
    floats).
    """

    values: np.ndarray | None
    empty: np.ndarray | None
    text: np.ndarray | None
    text_of: Any

    def empty_at(self, idx: np.ndarray) -> np.ndarray:
        if self.empty is None:
            return np.zeros(len(idx), dtype=bool)
        return self.empty[idx]

    def text_at(self, idx: np.ndarray) -> np.ndarray:
        if self.text is not None:
            return self.text[idx]
        return ~np.isfinite(self.values[idx]) & ~self.empty_at(idx)

    def full_empty(self) -> np.ndarray:
        return self.empty if self.empty is not None else np.zeros(self.values.size, dtype=bool)

    def full_text(self) -> np.ndarray:
        return self.text_at(np.arange(self.values.size))


def _to_numpy(arr: pa.ChunkedArray) -> np.ndarray:
    """A writable numpy copy of a column (nulls of a float column become NaN)."""
    if arr.num_chunks == 1:
        return np.array(arr.chunk(0).to_numpy(zero_copy_only=False))
    if arr.num_chunks == 0:
        return np.zeros(0, dtype=arr.type.to_pandas_dtype())
    return np.concatenate([chunk.to_numpy(zero_copy_only=False) for chunk in arr.chunks])


def _numeric_column(arr: pa.ChunkedArray, decimal: str) -> _Cells:
    """Classify the cells of a column read as float (fast path) or as text (slow path)."""
    if pa.types.is_floating(arr.type) or pa.types.is_integer(arr.type):
        values = _to_numpy(arr).astype(float, copy=False)
        empty = pc.is_null(arr).to_numpy(zero_copy_only=False) if arr.null_count else None

        def text_of(idx: np.ndarray) -> list[str]:
            return [repr(float(v)).replace("nan", "NaN") for v in values[idx]]

        return _Cells(values, empty, None, text_of)
    if pa.types.is_null(arr.type):
        n = len(arr)
        return _Cells(np.full(n, np.nan), np.ones(n, dtype=bool), np.zeros(n, dtype=bool),
                      lambda idx: [""] * len(idx))
    strings = pc.utf8_trim_whitespace(arr)
    if decimal == ",":
        strings = pc.replace_substring(strings, ",", ".")
    ok = pc.match_substring_regex(strings, _NUMBER_POINT)
    values = pc.cast(pc.if_else(ok, strings, pa.scalar(None, pa.string())), pa.float64())
    values = np.array(values.to_numpy(), dtype=float)
    empty = pc.fill_null(pc.equal(pc.utf8_length(strings), 0), True).to_numpy(zero_copy_only=False)
    text = ~pc.fill_null(ok, False).to_numpy(zero_copy_only=False) & ~empty

    def text_of_str(idx: np.ndarray) -> list[str]:
        return [str(v) for v in arr.take(pa.array(idx)).to_pylist()]

    return _Cells(values, empty, text, text_of_str)


def _float_text_of(arr: pa.ChunkedArray) -> Any:
    """The text of rows of a column read as numbers (for glitch reports)."""
    def text_of(idx: np.ndarray) -> list[str]:
        values = arr.take(pa.array(np.asarray(idx, dtype=np.int64))).to_pylist()
        return ["" if v is None else repr(float(v)).replace("nan", "NaN") for v in values]

    return text_of


def _kept_rows(table: pa.Table, columns: list[str], kept: np.ndarray | None) -> pa.Table:
    """The kept rows of number columns, without copying.

    Dropped readings are few: the runs of kept rows are sliced and stacked as chunks.
    """
    part = table.select(columns)
    if kept is None or not columns:
        return part
    breaks = np.flatnonzero(np.diff(kept) != 1) + 1
    firsts = kept[np.concatenate([[0], breaks])]
    lasts = kept[np.concatenate([breaks, [kept.size]]) - 1]
    return pa.concat_tables([part.slice(int(a), int(b) - int(a) + 1)
                             for a, b in zip(firsts, lasts, strict=True)])


def _float_values_of(arr: pa.ChunkedArray) -> np.ndarray:
    """A number column as one read-only numpy array, empty cells as NaN.

    Arrow fills the empty cells and joins the chunks in its own memory pool, so the values are
    copied once and numpy views them without a further copy.
    """
    if arr.null_count:
        arr = pc.fill_null(arr, np.nan)
    arr = arr.combine_chunks() if arr.num_chunks != 1 else arr.chunk(0)
    return arr.to_numpy(zero_copy_only=True)


def _time_seconds(arr: pa.ChunkedArray, mapping: ColumnMapping) -> tuple[Any, ...]:
    """Read the time column.

    Returns (seconds from an origin with NaN where unusable, origin info, empty mask,
    unreadable-text mask, function giving the text of rows, what was expected).
    """
    fmt = mapping.time_format
    if fmt in _ELAPSED_FACTOR_S:
        cells = _numeric_column(arr, mapping.decimal)
        empty, text = cells.full_empty(), cells.full_text()
        seconds = cells.values * _ELAPSED_FACTOR_S[fmt]
        seconds[empty | text] = np.nan
        return (seconds, ("elapsed", None), empty, text, cells.text_of,
                "a number of " + {"s": "seconds", "min": "minutes", "h": "hours"}[fmt[8:]])
    if pa.types.is_timestamp(arr.type):
        ns = _to_numpy(arr).astype("datetime64[ns]", copy=False).view(np.int64)
        bad = ns == np.iinfo(np.int64).min
        return (_ns_to_seconds(ns, bad), ("clock", ns, bad, None), bad, np.zeros_like(bad),
                None, "an ISO 8601 date-time")
    strings = pc.utf8_trim_whitespace(arr)
    empty = pc.fill_null(pc.equal(pc.utf8_length(strings), 0), True).to_numpy(zero_copy_only=False)

    def text_of(idx: np.ndarray) -> list[str]:
        return [str(v) for v in arr.take(pa.array(idx, type=pa.int64())).to_pylist()]

    nonempty = np.flatnonzero(~empty)
    first = str(strings[int(nonempty[0])].as_py()) if nonempty.size else ""
    if fmt == "iso":
        series = pd.Series(strings.to_numpy(zero_copy_only=False), dtype=object)
        aware = bool(series.str.contains(r"(?:Z|[+-]\d{2}:?\d{2})\s*$", regex=True, na=False).any())
        parsed = pd.to_datetime(series, format="ISO8601", errors="coerce", utc=aware)
        tz = getattr(parsed.dt, "tz", None)
        if tz is not None:
            parsed = parsed.dt.tz_convert("UTC").dt.tz_localize(None)
        ns = parsed.to_numpy(dtype="datetime64[ns]").view(np.int64)
        bad = ns == _NAT
        return (_ns_to_seconds(ns, bad), ("clock", ns, bad, tz), empty, bad & ~empty, text_of,
                "an ISO 8601 date-time such as 2026-03-14 08:00:00")
    ns = _strptime_ns(strings, _strptime_format(first, fmt))
    failed = np.flatnonzero((ns == _NAT) & ~empty)
    if failed.size:
        # Values the one format did not read (other spacing, hours past 24, ...): parse each.
        ns[failed] = _parse_each(strings.take(pa.array(failed)), fmt)
    bad = ns == _NAT
    if fmt == "time_of_day":
        seconds = (ns - _NS_1900).astype(float) / 1e9
        seconds[bad] = np.nan
        return (seconds, ("time_of_day", None), empty, bad & ~empty, text_of,
                "a clock time of day such as 08:00:00")
    expected = ("a day-first date-time such as 14.03.2026 08:00:00" if fmt == "dayfirst"
                else "a month-first date-time such as 03/14/2026 08:00:00")
    return (_ns_to_seconds(ns, bad), ("clock", ns, bad, None), empty, bad & ~empty, text_of,
            expected)


_NAT = np.iinfo(np.int64).min
_NS_1900 = int(np.datetime64("1900-01-01T00:00:00", "ns").view(np.int64))
_FRACTION = r"[.,]\d+\s*(?:[AaPp][Mm])?\s*$"


def _strptime_format(first: str, fmt: str) -> tuple[str, bool] | None:
    """A strptime format for values written like ``first`` (without the fraction of a second),
    and whether it reads seconds; None when ``first`` is not in ``fmt`` at all."""
    if fmt == "time_of_day":
        m = _TOD.match(first)
        if m is None:
            return None
        seconds, ampm = m.group(3), m.group(5)
        clock = ("%I" if ampm else "%H") + ":%M" + (":%S" if seconds else "")
        return clock + (" %p" if ampm else ""), seconds is not None
    m = _DMY.match(first)
    if m is None:
        return None
    sep = m.group(2)
    year = "%Y" if len(m.group(4)) == 4 else "%y"
    date = f"%d{sep}%m{sep}{year}" if fmt == "dayfirst" else f"%m{sep}%d{sep}{year}"
    if m.group(5) is None:
        return date, False
    ampm = m.group(9)
    clock = ("%I" if ampm else "%H") + ":%M" + (":%S" if m.group(7) else "")
    return f"{date} {clock}" + (" %p" if ampm else ""), m.group(7) is not None


def _strptime_ns(strings: pa.ChunkedArray, form: tuple[str, bool] | None) -> np.ndarray:
    """Parse with one format, vectorised; int64 nanoseconds, NaT where a value did not read."""
    if form is None:
        return np.full(len(strings), _NAT, dtype=np.int64)
    fmt, has_seconds = form
    work = strings
    fraction = None
    if has_seconds and pc.any(pc.match_substring_regex(strings, _FRACTION)).as_py():
        parts = pc.extract_regex(strings, r"^(?P<a>.*?)(?P<f>[.,]\d+)?(?P<b>\s*(?:[AaPp][Mm])?\s*)$")
        head, frac, tail = (pc.struct_field(parts, [k]) for k in range(3))
        work = pc.binary_join_element_wise(head, tail, "")
        frac = pc.replace_substring(frac, ",", ".")
        frac = pc.binary_join_element_wise(pa.scalar("0"), frac, "")
        fraction = _to_numpy(pc.cast(pc.if_else(pc.equal(frac, "0"), "0.0", frac), pa.float64()))
    stamps = pc.strptime(work, format=fmt, unit="ns", error_is_null=True)
    ns = _to_numpy(stamps).astype("datetime64[ns]", copy=False).view(np.int64)
    if fraction is not None:
        ok = (ns != _NAT) & np.isfinite(fraction)
        ns[ok] += np.round(fraction[ok] * 1e9).astype(np.int64)
    return ns


def _parse_each(strings: pa.ChunkedArray | pa.Array, fmt: str) -> np.ndarray:
    """Slow path for the few values one format did not read; int64 ns, NaT where unreadable."""
    series = pd.Series(strings.to_pylist(), dtype=object).str.replace(r"\s+", " ", regex=True)
    series = series.str.replace(",", ".", regex=False)
    if fmt == "time_of_day":
        text = series.where(~series.str.fullmatch(r"\d{1,2}:\d{2}", na=False), series + ":00")
        delta = pd.to_timedelta(text, errors="coerce")
        out = delta.to_numpy(dtype="timedelta64[ns]").view(np.int64).copy()
        good = out != _NAT
        out[good] += _NS_1900
        return out
    parsed = pd.to_datetime(series, dayfirst=fmt == "dayfirst", format="mixed", errors="coerce")
    return parsed.to_numpy(dtype="datetime64[ns]").view(np.int64)


def _ns_to_seconds(ns: np.ndarray, bad: np.ndarray) -> np.ndarray:
    any_bad = bool(bad.any())
    origin = 0 if any_bad and bad.all() else ns[int(np.argmin(bad))]  # the first good reading
    seconds = np.divide(np.subtract(ns, origin), 1e9)
    if any_bad:
        seconds[bad] = np.nan
    return seconds


def _time_glitches(empty: np.ndarray, text: np.ndarray, text_of: Any, lines: np.ndarray,
                   mapping: ColumnMapping, name: str, glitches: _Glitches, expected: str,
                   blank_rows: np.ndarray) -> None:
    column = mapping.time
    n_text = int(text.sum())
    n_nonempty = int((~empty).sum())
    if n_nonempty == 0:
        raise InputError("the time column is empty; expected a time for each reading",
                         file=name, column=column)
    idx_text = np.flatnonzero(text)
    if n_text > TEXT_SHARE_MAX * n_nonempty:
        first = idx_text[0]
        raise InputError(f"{n_text} of {n_nonempty} times do not read as {expected} (time "
                         f"format {mapping.time_format!r}); the first is "
                         f"{text_of(np.array([first]))[0]!r}; check the mapping's time format",
                         file=name, row=int(lines[first]), column=column)
    glitches.add(lines[empty & ~blank_rows], column, "missing", "", "row dropped (no time)")
    if n_text:
        glitches.add(lines[idx_text], column, "text_value", text_of(idx_text),
                     "row dropped (time not readable)")


def _empty_mask(arr: pa.ChunkedArray) -> np.ndarray:
    """True where a cell is empty (null, or only spaces for text)."""
    if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
        lengths = pc.utf8_length(pc.utf8_trim_whitespace(arr))
        return pc.fill_null(pc.equal(lengths, 0), True).to_numpy(zero_copy_only=False)
    if arr.null_count == 0:
        return np.zeros(len(arr), dtype=bool)
    return pc.is_null(arr).to_numpy(zero_copy_only=False)


def _pump_states(arr: pa.ChunkedArray, kept: np.ndarray, row_lines: np.ndarray, column: str,
                 name: str, glitches: _Glitches) -> np.ndarray:
    """Pump state of each kept reading; unknown states take the previous known state."""
    if pa.types.is_boolean(arr.type):
        on = pc.fill_null(arr, False).to_numpy(zero_copy_only=False)[kept]
        known = ~_empty_mask(arr)[kept]
    else:
        strings = pc.utf8_lower(pc.utf8_trim_whitespace(arr))
        on = pc.fill_null(pc.is_in(strings, value_set=pa.array(_PUMP_TRUE)), False)
        off = pc.fill_null(pc.is_in(strings, value_set=pa.array(_PUMP_FALSE)), False)
        on = on.to_numpy(zero_copy_only=False)[kept]
        known = on | off.to_numpy(zero_copy_only=False)[kept]
    if not known.any():
        raise InputError("the pump column holds no on/off states; expected on/off, 1/0, "
                         "true/false or yes/no", file=name, column=column)
    unknown = np.flatnonzero(~known)
    if unknown.size:
        empty = _empty_mask(arr)[kept][unknown]
        glitches.add(row_lines[unknown[empty]], column, "missing", "", "previous pump state used")
        if (~empty).any():
            raw = arr.take(pa.array(kept[unknown[~empty]])).to_pylist()
            glitches.add(row_lines[unknown[~empty]], column, "text_value",
                         [str(v) for v in raw], "previous pump state used")
        # Forward-fill from the last known state (leading unknowns: the first known state).
        pos = np.maximum.accumulate(np.where(known, np.arange(known.size), -1))
        pos[pos < 0] = np.flatnonzero(known)[0]
        on = on[pos]
    return on.astype(bool, copy=False)


def read_logger(data: bytes, *, name: str, mapping: ColumnMapping | None = None,
                gap_factor: float = GAP_FACTOR) -> LoggerTrace:
    """Read an oxygen logger's raw export into a :class:`LoggerTrace`.

    Parameters
    ----------
    data
        The file's raw bytes. They are not changed, and are kept with the trace (with their
        SHA-256, computed when first asked for).
    name
        The file's name, used in every error message and kept with the trace.
    mapping
        Which column is what; None guesses it with :func:`guess_mapping`.
    gap_factor
        A time step longer than this multiple of the median step is reported as a gap. [-]

    Returns
    -------
    LoggerTrace

    Notes
    -----
    Glitch rules (``docs/logger_import.md``), applied in this order:

    1. A reading with no readable time is dropped.
    2. A reading whose every mapped value is empty is dropped.
    3. Clock times of day only: a step back of more than 12 h is midnight; one day is added to
       that reading and all later ones.
    4. A time equal to the latest kept time is a duplicate, one earlier than it goes backwards:
       the later reading is dropped in both cases (the first one written is kept).
    5. In a kept reading, an empty value, an error code of the mapping or text is set missing
       (NaN); a column with more than half of its non-empty values text is refused. A missing
       pump state takes the previous state.
    6. A step longer than ``gap_factor`` × the median step is reported (nothing is filled in).

    Raises
    ------
    InputError
        For an unusable file (empty, no readings, columns missing), a channel with no usable
        readings, a column that is mostly text, or an oxygen or temperature value that cannot
        be a reading in its unit; the message names the file, line and column.
    """
    data = _check_bytes(data, name)
    if not (isinstance(gap_factor, int | float) and gap_factor > 1):
        raise ValueError(f"gap_factor must be a number greater than 1; got {gap_factor!r}")
    if mapping is None:
        mapping = guess_mapping(data, name=name)
    elif not isinstance(mapping, ColumnMapping):
        raise TypeError(f"mapping must be a ColumnMapping or None; got {type(mapping).__name__}")
    return LoggerTrace(raw=data, **_read(data, name, mapping, gap_factor))


def _read(data: bytes, name: str, mapping: ColumnMapping, gap_factor: float) -> dict[str, Any]:
    columns, bom = _mapped_layout(data, name, mapping)
    offset = _body_offset(data, mapping.header_line, bom, name)
    oxygen_cols = list(mapping.oxygen.values())
    temp_cols = list(dict.fromkeys(mapping.temperature.values()))
    used = [mapping.time] + ([mapping.date] if mapping.date else []) + oxygen_cols + temp_cols \
        + ([mapping.pump] if mapping.pump else [])
    types: dict[str, pa.DataType] = {c: pa.float64() for c in oxygen_cols + temp_cols}
    if mapping.time_format in _ELAPSED_FACTOR_S:
        types[mapping.time] = pa.float64()
    elif mapping.time_format == "iso" and mapping.date is None:
        types[mapping.time] = pa.timestamp("ns")
    else:
        types[mapping.time] = pa.string()
    if mapping.date:
        types[mapping.date] = pa.string()
    if mapping.pump:
        types[mapping.pump] = pa.bool_()
    glitches = _Glitches()
    try:
        table = _read_table(data, name, mapping, columns, offset, used, types)
    except _RowWidthError:
        # Slow path: find the lines of the wrong width (empty lines are rows of empty cells).
        bad = _bad_width_lines(data, mapping, offset, len(columns))
        last_nonblank = data.rstrip(b"\r\n \t").rfind(b"\n") + 1
        if len(bad) == 1 and bad[0][2] == last_nonblank:
            line, n, start = bad[0]
            glitches.add(np.array([line]), "", "incomplete_row",
                         f"{n} of {len(columns)} fields", "row dropped (last line incomplete)")
            data = data[:start]
        elif bad:
            line, n, _ = bad[0]
            raise InputError(f"this line has {n} fields; expected {len(columns)} fields separated "
                             f"by {_delim_name(mapping.delimiter)}, as in the column-name line "
                             f"{mapping.header_line + 1}", file=name, row=line) from None
        table = _read_table(data, name, mapping, columns, offset, used, types)
    n_rows = table.num_rows
    if n_rows == 0:
        raise InputError(f"the file has no readings after the column-name line "
                         f"{mapping.header_line + 1}; expected one line per reading", file=name)
    # Blank lines are read as rows of empty cells, so row k is line first + k.
    lines = data.count(b"\n", 0, offset) + 1 + np.arange(n_rows, dtype=np.int64)

    # 1. time ---------------------------------------------------------------------------------
    time_arr = table.column(mapping.time)
    if mapping.date:
        time_arr = pc.binary_join_element_wise(
            pc.utf8_trim_whitespace(table.column(mapping.date)),
            pc.utf8_trim_whitespace(time_arr), " ")
    seconds, origin, time_empty, time_text, time_text_of, expected = _time_seconds(time_arr,
                                                                                   mapping)
    keep = ~np.isnan(seconds)

    # 2. value columns: classify every cell once ---------------------------------------------
    cells: dict[str, _Cells] = {}
    for col in oxygen_cols + temp_cols:
        arr = table.column(col)
        if pa.types.is_floating(arr.type):
            # Values are taken later, for the kept readings only (:func:`_float_values_of`).
            empty = pc.is_null(arr).to_numpy(zero_copy_only=False) if arr.null_count else None
            cells[col] = _Cells(None, empty, None, _float_text_of(arr))
        else:
            cells[col] = _numeric_column(arr, mapping.decimal)
    all_empty = np.ones(n_rows, dtype=bool)
    empties = [cell.empty for cell in cells.values()]
    if mapping.pump:
        empties.append(_empty_mask(table.column(mapping.pump)))
    for empty in empties:
        if empty is None or not empty.any():
            all_empty = np.zeros(n_rows, dtype=bool)
            break
        all_empty &= empty
    _time_glitches(time_empty, time_text, time_text_of, lines, mapping, name, glitches, expected,
                   all_empty & time_empty)
    glitches.add(lines[all_empty & time_empty], "", "missing", "", "row dropped (empty line)")
    glitches.add(lines[all_empty & keep], "", "missing", "", "row dropped (every value empty)")
    keep &= ~all_empty

    # 3. midnight for clock times of day -------------------------------------------------------
    kept = np.arange(n_rows) if keep.all() else np.flatnonzero(keep)
    if kept.size < 2:
        raise InputError(f"the file has {kept.size} usable reading(s); expected at least two "
                         f"with a time and a value", file=name)
    t = seconds if kept.size == n_rows else seconds[kept]
    if mapping.time_format == "time_of_day":
        steps = np.diff(t)
        roll = np.flatnonzero(steps < -ROLLOVER_S) + 1
        if roll.size:
            add = np.zeros(t.size)
            add[roll] = 86400.0
            t = t + np.cumsum(add)
            glitches.add(lines[kept[roll]], mapping.time, "day_rollover",
                         [_clock_text(s) for s in seconds[kept[roll]]],
                         "1 day added to this and later readings (clock passed midnight)")

    # 4. duplicated and backwards times -------------------------------------------------------
    # A reading not later than the latest before it is dropped; such readings are few, so they
    # are found in one comparison with the running maximum and classified alone.
    latest = np.maximum.accumulate(t)
    late = np.flatnonzero(t[1:] <= latest[:-1]) + 1
    if late.size:
        dup = t[late] == latest[late - 1]
        for rows, kind, action in ((late[dup], "duplicate_time", "row dropped (later duplicate)"),
                                   (late[~dup], "backwards_time",
                                    "row dropped (time earlier than a previous reading)")):
            glitches.add(lines[kept[rows]], mapping.time, kind,
                         _time_texts(t[rows], origin, kept[rows], mapping), action)
        kept, t = np.delete(kept, late), np.delete(t, late)
    if kept.size < 2:
        raise InputError(f"the file has {kept.size} usable reading(s) in time order; expected at "
                         f"least two", file=name)
    all_kept = kept.size == n_rows

    # 5. values of kept readings ---------------------------------------------------------------
    row_lines = lines[0] + kept  # lines are consecutive: row k is on line lines[0] + k
    oxygen: dict[str, np.ndarray] = {}
    temperature: dict[str, np.ndarray] = {}
    lo, hi = OXYGEN_RANGES[mapping.oxygen_unit]
    part = _kept_rows(table, [c for c in cells if cells[c].values is None], None if all_kept else kept)

    def column_values(col: str) -> np.ndarray:
        is_oxygen = col in oxygen_cols
        codes = mapping.oxygen_error_codes if is_oxygen else mapping.temperature_error_codes
        what = f"oxygen [{mapping.oxygen_unit}]" if is_oxygen else "temperature [°C]"
        low, high = (lo, hi) if is_oxygen else TEMPERATURE_RANGE_C
        kept_values = _float_values_of(part.column(col)) if cells[col].values is None else None
        return _clean_values(col, cells[col], kept_values, kept, all_kept, row_lines, codes, what,
                             low, high, name, glitches, mapping)

    value_cols = oxygen_cols + temp_cols
    clean = dict(zip(value_cols, each_channel(column_values, value_cols), strict=True))
    for values in clean.values():
        values.flags.writeable = False  # the trace is a record of the file: read-only throughout
    for label, col in mapping.oxygen.items():
        oxygen[label] = clean[col]
    for label, col in mapping.temperature.items():
        temperature[label] = clean[col]
    pump = None
    if mapping.pump:
        pump = _pump_states(table.column(mapping.pump), kept, row_lines, mapping.pump, name,
                            glitches)
        pump.flags.writeable = False

    # 6. gaps --------------------------------------------------------------------------------
    steps = np.diff(t)
    median = _median_step(steps)
    gaps = np.flatnonzero(steps > gap_factor * median) + 1
    if gaps.size:
        glitches.add(row_lines[gaps], mapping.time, "gap",
                     [f"{s:g} s step" for s in steps[gaps - 1]],
                     f"kept; no readings in between (median step {median:g} s, gap rule "
                     f"{gap_factor:g} × median)")

    start_time = None
    start_tod = None
    elapsed_start = None
    if origin[0] == "clock":
        ns = origin[1]
        first_ns = int(ns[kept[0]])
        stamp = pd.Timestamp(first_ns - first_ns % 1000, unit="ns")  # datetime keeps µs
        if len(origin) > 3 and origin[3] is not None:
            stamp = stamp.tz_localize("UTC")
        start_time = stamp.to_pydatetime()
    elif origin[0] == "time_of_day":
        s = float(seconds[kept[0]]) % 86400.0
        start_tod = (datetime.min + pd.Timedelta(seconds=s).to_pytimedelta()).time()
    else:
        elapsed_start = float(t[0])
    time_s = t - t[0]
    time_s.flags.writeable = False
    return {
        "name": name, "time_s": time_s, "start_time": start_time, "oxygen": oxygen,
        "oxygen_unit": mapping.oxygen_unit, "temperature_c": temperature, "pump": pump,
        "glitches": glitches.table(), "mapping": mapping, "n_rows_read": int(n_rows),
        "lines": row_lines, "start_time_of_day": start_tod, "elapsed_start_s": elapsed_start,
    }


def _median_step(steps: np.ndarray) -> float:
    """Median of the time steps; a logger's steps are mostly one value, which is then the median
    (a value held by more than half of them spans the middle of their sorted order)."""
    candidate = steps[steps.size // 2]
    if 2 * np.count_nonzero(steps == candidate) > steps.size:
        return float(candidate)
    return float(np.median(steps))


def _clock_text(seconds: float) -> str:
    s = float(seconds) % 86400.0
    h, rem = divmod(s, 3600.0)
    m, sec = divmod(rem, 60.0)
    text = f"{int(h):02d}:{int(m):02d}:{int(sec):02d}"
    frac = f"{sec - int(sec):.6f}"[1:].rstrip("0")
    return text + frac if frac != "." else text


def _time_texts(t: np.ndarray, origin: Any, rows: np.ndarray, mapping: ColumnMapping) -> list[str]:
    if origin[0] == "clock":
        stamps = origin[1][rows].astype("datetime64[ns]")
        return [str(np.datetime_as_string(s, unit="auto")).replace("T", " ") for s in stamps]
    if origin[0] == "time_of_day":
        return [_clock_text(s) for s in t]
    factor = _ELAPSED_FACTOR_S[mapping.time_format]
    return [f"{v / factor:g}" for v in t]


def _clean_values(col: str, cells: _Cells, kept_values: np.ndarray | None, kept: np.ndarray,
                  all_kept: bool, row_lines: np.ndarray, codes: tuple[float, ...], what: str,
                  low: float, high: float, name: str, glitches: _Glitches,
                  mapping: ColumnMapping) -> np.ndarray:
    """Values of the kept readings with empty cells, error codes and text set missing.

    ``kept_values`` are the kept readings of a column the Arrow reader read as numbers (read
    only; copied here only if a value must be set missing), or None to take them from
    ``cells``. One pass over the values finds every cell that is not a plausible reading (NaN
    compares False); only those few cells are classified further.
    """
    if kept_values is not None:
        values = kept_values
    else:
        values = cells.values if all_kept else cells.values[kept]
    inner_codes = [c for c in codes if low <= c <= high]
    idx = None
    if not inner_codes and values.size:
        # Reading passes without temporaries: fmin and fmax skip NaN, which min and max return.
        if cells.empty is None and values.min() >= low and values.max() <= high:
            return values
        if np.fmin.reduce(values) >= low and np.fmax.reduce(values) <= high:
            idx = np.flatnonzero(np.isnan(values))  # every finite value is plausible
    if idx is None:
        idx = np.flatnonzero(~((values >= low) & (values <= high)))
    if inner_codes:
        inside_code = np.zeros(values.size, dtype=bool)
        for c in inner_codes:
            inside_code |= values == c
        idx = np.union1d(idx, np.flatnonzero(inside_code))
    if idx.size == 0:
        return values
    rows = idx if all_kept else kept[idx]
    empty = cells.empty_at(rows)
    # A number column's text cells are the words NaN and inf, read as non-finite numbers.
    text = ~np.isfinite(values[idx]) & ~empty if cells.values is None else cells.text_at(rows)
    code = np.isin(values[idx], codes) & ~empty & ~text
    impossible = ~(empty | text | code)
    n = values.size
    n_empty, n_text, n_code = int(empty.sum()), int(text.sum()), int(code.sum())
    if n_empty + n_text + n_code == n:
        parts = []
        if n_text:
            i = int(np.flatnonzero(text)[0])
            parts.append(f"{n_text} text values (first {cells.text_of(rows[[i]])[0]!r} at line "
                         f"{row_lines[idx[i]]})")
        if n_code:
            parts.append(f"{n_code} error codes")
        if n_empty:
            parts.append(f"{n_empty} empty")
        raise InputError(f"no usable {what} readings ({', '.join(parts)}); expected numbers",
                         file=name, row=int(row_lines[0]), column=col)
    if n_text > TEXT_SHARE_MAX * (n - n_empty):
        i = int(np.flatnonzero(text)[0])
        raise InputError(f"{n_text} of {n - n_empty} values are text, not numbers; expected "
                         f"{what} numbers with decimal mark {mapping.decimal!r}; the first is "
                         f"{cells.text_of(rows[[i]])[0]!r}", file=name,
                         row=int(row_lines[idx[i]]), column=col)
    if impossible.any():
        i = int(np.flatnonzero(impossible)[0])
        raise InputError(f"value {float(values[idx[i]]):g} cannot be {what}: expected {low:g} to "
                         f"{high:g}; check the unit in the mapping, or add the value to the "
                         f"mapping's error codes if the logger writes it for a failed reading",
                         file=name, row=int(row_lines[idx[i]]), column=col)
    glitches.add(row_lines[idx[empty]], col, "missing", "", "value set missing")
    if n_text:
        glitches.add(row_lines[idx[text]], col, "text_value", cells.text_of(rows[text]),
                     "value set missing")
    if n_code:
        glitches.add(row_lines[idx[code]], col, "error_code",
                     [f"{v:g}" for v in values[idx[code]]], "value set missing")
    change = idx[~np.isnan(values[idx])]  # empty cells of a number column are NaN already
    if change.size:
        if not values.flags.writeable:
            values = values.copy()
        values[change] = np.nan
    return values

"""Methods-and-results reports for one session and for a study of several sessions.

A report is built from the recorded session and its :class:`~swimlab.analysis.Analysis`; it
computes no science of its own. It holds

- a methods section written from the recorded settings (respirometer and flume, volumes and
  their ratio, cycle timing, sensor and its calibration, water, background correction, slope
  acceptance rules, MO2, blocking correction, protocol and Ucrit, curve fits, SMR and MMR, units
  and the sources of each method);
- results tables and figures (oxygen trace with its phases, MO2 against speed with both fits and
  their bands, cost of transport against speed with Uopt);
- the flags and the excluded phases with their reasons;
- a reporting checklist after Killen et al. (2021) and the ARRIVE 2.0 items on exclusions and
  animal care (Percie du Sert et al. 2020), each item *stated*, *missing* or *not applicable*
  with the session field it comes from;
- the sign-off status, a summary of the lab book's audit trail and an animal-care statement
  that defers to the approved protocol.

:meth:`Report.html` gives one self-contained HTML document (styles inline, figures as inline
SVG, no external URL); :meth:`Report.pdf` prints it with WeasyPrint on A4 or US Letter;
:meth:`Report.tables` gives the tables as DataFrames ready for CSV. Figures are exported to SVG
with plotly and kaleido, which drives a Chromium (``BROWSER_PATH`` or ``chromium`` on the
``PATH``); when that fails, the figure's place holds a box saying why, and
:attr:`Report.figure_problems` lists it.

Sources are listed in ``docs/references.md``.
"""

from __future__ import annotations

import asyncio
import datetime as dt
import math
import numbers
import os
import re
import shutil
import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from markupsafe import Markup

from swimlab import __version__, checks
from swimlab.constants import PA_PER_KPA
from swimlab.errors import InputError
from swimlab.session import PROTOCOL_LABELS, Session

__all__ = [
    "CHECKLIST_COLUMNS",
    "PAGE_SIZES",
    "STATES",
    "Report",
    "animal_care_statement",
    "format_quantity",
    "format_range",
    "methods_paragraphs",
    "reporting_checklist",
    "session_report",
    "study_report",
    "study_table",
    "write_report",
    "write_tables",
]

STATES = ("stated", "missing", "not applicable")
"""States of a checklist item."""

PAGE_SIZES = {"A4": "A4", "Letter": "letter"}
"""Paper sizes of :meth:`Report.pdf`, as CSS ``@page size`` values."""

FORMATS = ("html", "pdf")
"""Output formats of :func:`write_report`."""

CHECKLIST_COLUMNS = ["guideline", "number", "topic", "item", "state", "detail", "where"]
"""Columns of the checklist table."""

KILLEN = "Killen et al. (2021)"
SWIM = "Swim tunnel (common practice)"
ARRIVE = "ARRIVE 2.0"

CHECKLIST_NOTES = {
    KILLEN: (
        "Items paraphrased from memory of the reporting checklist in Killen et al. (2021, J Exp "
        "Biol 224: jeb242522); to be checked against the paper's checklist before submission."
    ),
    SWIM: (
        "Items a swim-tunnel study is expected to report beyond the intermittent-flow checklist "
        "(common practice; Brett 1964 for Ucrit, Bell & Terhune 1970 for solid blocking)."
    ),
    ARRIVE: (
        "Items 3a–3c (Essential 10) and 14, 16a–16c (Recommended Set) of the ARRIVE guidelines "
        "2.0 (Percie du Sert et al. 2020, PLoS Biol 18: e3000410), paraphrased."
    ),
}

_TEMPLATES = Path(__file__).with_name("templates")
_FONT = "DejaVu Sans, Liberation Sans, Arial, sans-serif"
_PRINT_WIDTH_PX = 680
"""Width of an exported figure: the A4 text block (about 178 mm) at 96 px per inch."""

NBSP = "\u00a0"
MINUS = "\u2212"
EM_DASH = "\u2014"
EN_DASH = "\u2013"
_SUPERSCRIPTS = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")

REFERENCES = {
    "Bell & Terhune 1970": (
        "Bell, W. H. & Terhune, L. D. B. (1970). Water tunnel design for fisheries research. "
        "Fisheries Research Board of Canada Technical Report 195."
    ),
    "Brett 1964": (
        "Brett, J. R. (1964). The respiratory metabolism and swimming performance of young "
        "sockeye salmon. Journal of the Fisheries Research Board of Canada 21, 1183–1226."
    ),
    "Chabot et al. 2016": (
        "Chabot, D., Steffensen, J. F. & Farrell, A. P. (2016). The determination of standard "
        "metabolic rate in fishes. Journal of Fish Biology 88, 81–121."
    ),
    "Garcia & Gordon 1992": (
        "Garcia, H. E. & Gordon, L. I. (1992). Oxygen solubility in seawater: better fitting "
        "equations. Limnology and Oceanography 37, 1307–1312."
    ),
    "Hurvich & Tsai 1989": (
        "Hurvich, C. M. & Tsai, C.-L. (1989). Regression and time series model selection in "
        "small samples. Biometrika 76, 297–307."
    ),
    "Killen et al. 2021": (
        "Killen, S. S., Christensen, E. A. F., Cortese, D., Závorka, L., Norin, T., Cotgrove, L., "
        "Crespel, A., Munson, A., Nati, J. J. H., Papatheodoulou, M. & McKenzie, D. J. (2021). "
        "Guidelines for reporting methods to estimate metabolic rates by aquatic intermittent-flow "
        "respirometry. Journal of Experimental Biology 224, jeb242522."
    ),
    "Percie du Sert et al. 2020": (
        "Percie du Sert, N. et al. (2020). The ARRIVE guidelines 2.0: updated guidelines for "
        "reporting animal research. PLoS Biology 18, e3000410."
    ),
    "Rodgers et al. 2016": (
        "Rodgers, G. G., Tenzing, P. & Clark, T. D. (2016). Experimental methods in aquatic "
        "respirometry: the importance of mixing devices and accounting for background "
        "respiration. Journal of Fish Biology 88, 65–80."
    ),
    "Laird & Ware 1982": (
        "Laird, N. M. & Ware, J. H. (1982). Random-effects models for longitudinal data. "
        "Biometrics 38, 963–974."
    ),
    "Farrell 2008": (
        "Farrell, A. P. (2008). Comparisons of swimming performance in rainbow trout using constant acceleration "
        "and critical swimming speed tests. Journal of Fish Biology 72, 693–710."
    ),
    "Kaplan & Meier 1958": (
        "Kaplan, E. L. & Meier, P. (1958). Nonparametric estimation from incomplete observations. Journal of the "
        "American Statistical Association 53, 457–481."
    ),
    "Tobin 1958": (
        "Tobin, J. (1958). Estimation of relationships for limited dependent variables. Econometrica 26, 24–36."
    ),
    "Jain et al. 1998": (
        "Jain, K. E., Birtwell, I. K. & Farrell, A. P. (1998). Repeat swimming performance of mature sockeye salmon "
        "following a brief recovery period: a proposed measure of fish health and water quality. Canadian Journal "
        "of Zoology 76, 1488–1496."
    ),
    "Lee et al. 2003": (
        "Lee, C. G., Farrell, A. P., Lotto, A., Hinch, S. G. & Healey, M. C. (2003). Excess post-exercise oxygen "
        "consumption in adult sockeye (Oncorhynchus nerka) and coho (O. kisutch) salmon following critical speed "
        "swimming. Journal of Experimental Biology 206, 3253–3260."
    ),
    "Drucker & Jensen 1996": (
        "Drucker, E. G. & Jensen, J. S. (1996). Pectoral fin locomotion in the striped surfperch. I. Kinematic "
        "effects of swimming speed and body size. Journal of Experimental Biology 199, 2235–2242."
    ),
    "Bainbridge 1958": (
        "Bainbridge, R. (1958). The speed of swimming of fish as related to size and to the frequency and amplitude "
        "of the tail beat. Journal of Experimental Biology 35, 109–133."
    ),
    "Taylor et al. 2003": (
        "Taylor, G. K., Nudds, R. L. & Thomas, A. L. R. (2003). Flying and swimming animals cruise at a Strouhal "
        "number tuned for high power efficiency. Nature 425, 707–711."
    ),
    "Herskin & Steffensen 1998": (
        "Herskin, J. & Steffensen, J. F. (1998). Energy savings in sea bass swimming in a school: measurements of "
        "tail beat frequency and oxygen consumption at different swimming speeds. Journal of Fish Biology 53, "
        "366–376."
    ),
    "Zhang & Lauder 2023": (
        "Zhang, Y. & Lauder, G. V. (2023). Energy conservation by collective movement in schooling fish. eLife 12, "
        "RP90352."
    ),
    "Wilks 1938": (
        "Wilks, S. S. (1938). The large-sample distribution of the likelihood ratio for testing composite "
        "hypotheses. Annals of Mathematical Statistics 9, 60–62."
    ),
    "Fieller 1954": (
        "Fieller, E. C. (1954). Some problems in interval estimation. Journal of the Royal Statistical Society, "
        "Series B 16, 175–185."
    ),
    "Beamish 1978": (
        "Beamish, F. W. H. (1978). Swimming capacity. In Fish Physiology, vol. 7 (ed. W. S. Hoar & D. J. Randall), "
        "pp. 101–187. Academic Press."
    ),
    "Welch 1947": (
        "Welch, B. L. (1947). The generalization of 'Student's' problem when several different population variances "
        "are involved. Biometrika 34, 28–35."
    ),
}


# =================================================================================================
# Numbers and units in words
# =================================================================================================


def _is_missing(value: Any) -> bool:
    if value is None:
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def format_number(value: Any, sig: int = 3) -> str:
    """Return ``value`` with ``sig`` significant figures, as a person writes it.

    Integers are written whole; floats are rounded to ``sig`` significant figures and keep
    trailing zeros that are significant (``15.0``); magnitudes of 10⁶ and above or below 10⁻³ are
    written as ``1.23 × 10⁻⁴``. Negative numbers carry a true minus sign (U+2212). A missing
    value (None or NaN) is written as an em dash, never as ``nan``.

    Parameters
    ----------
    value
        The number. [any unit]
    sig
        Significant figures, at least 1. [-]
    """
    if isinstance(sig, bool) or not isinstance(sig, numbers.Integral) or sig < 1:
        raise InputError(f"sig must be a whole number of at least 1; got {sig!r}", field="sig")
    if _is_missing(value):
        return EM_DASH
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(f"a number is expected; got {value!r}", field="value")
    if isinstance(value, numbers.Integral):
        text = f"{int(value):d}"
        return text.replace("-", MINUS)
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"a finite number is expected; got {value!r}", field="value")
    if number == 0.0:
        return "0"
    mantissa, exponent = f"{number:.{sig - 1}e}".split("e")
    exponent_value = int(exponent)
    rounded = float(f"{mantissa}e{exponent}")
    if exponent_value >= 6 or exponent_value < -3:
        text = f"{mantissa} × 10{str(exponent_value).translate(_SUPERSCRIPTS)}"
    else:
        decimals = sig - 1 - exponent_value
        text = f"{rounded:.{decimals}f}" if decimals > 0 else f"{rounded:.0f}"
    return text.replace("-", MINUS)


def pretty_unit(unit: str) -> str:
    """Return a unit as it is printed: ``"mg O2 kg-1 h-1"`` → ``"mg O₂ kg⁻¹ h⁻¹"``; ``"-"`` → ``""``."""
    text = (unit or "").strip()
    if text in ("", "-"):
        return ""
    text = re.sub(r"\bO2\b", "O₂", text)
    return re.sub(r"(?<=[A-Za-z])(-?\d+)\b", lambda m: m.group(1).translate(_SUPERSCRIPTS), text)


def format_quantity(value: Any, unit: str = "", sig: int = 3) -> str:
    """Return a value with ``sig`` significant figures and its unit, e.g. ``"12.3 cm/s"``.

    The number is written by :func:`format_number`; the unit by :func:`pretty_unit`, joined by a
    no-break space (SI Brochure, 9th edition, 2019, §5.4.3: a space separates the number and the
    unit, including °C and %). A missing value gives an em dash without a unit.

    Parameters
    ----------
    value
        The number. [``unit``]
    unit
        Unit as the analysis tables write it (``"cm/s"``, ``"mg O2 kg-1 h-1"``, ``"-"``).
    sig
        Significant figures. [-]
    """
    text = format_number(value, sig)
    shown = pretty_unit(unit)
    if text == EM_DASH or not shown:
        return text
    return f"{text}{NBSP}{shown}"


def format_entered(value: Any, unit: str = "") -> str:
    """Return a value a person entered as it was entered: up to six significant figures, trailing
    zeros dropped (``12.0`` → ``"12 °C"``, ``101.325`` → ``"101.325 kPa"``), so that the text
    claims no precision the record does not hold. Derived values use :func:`format_quantity`."""
    if _is_missing(value):
        return EM_DASH
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(f"a number is expected; got {value!r}", field="value")
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"a finite number is expected; got {value!r}", field="value")
    text = f"{number:.6g}"
    if "e" in text:
        return format_quantity(number, unit, 6)
    text = text.replace("-", MINUS)
    shown = pretty_unit(unit)
    return f"{text}{NBSP}{shown}" if shown else text


def _entered_range(low: Any, high: Any, unit: str = "") -> str:
    shown = pretty_unit(unit)
    text = f"{format_entered(low)} to {format_entered(high)}"
    return f"{text}{NBSP}{shown}" if shown else text


def _sentence(text: str) -> str:
    """Upper-case the first letter only (str.capitalize lowers the rest)."""
    return text[:1].upper() + text[1:]


_WORDS = ("no", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten")


def _count_word(count: int) -> str:
    return _WORDS[count] if 0 <= count < len(_WORDS) else str(count)


def format_range(low: Any, high: Any, unit: str = "", sig: int = 3) -> str:
    """Return ``"low–high unit"`` (one unit at the end), or an em dash when either is missing."""
    if _is_missing(low) or _is_missing(high):
        return EM_DASH
    shown = pretty_unit(unit)
    text = f"{format_number(low, sig)}{EN_DASH}{format_number(high, sig)}"
    return f"{text}{NBSP}{shown}" if shown else text


def _n(count: int, noun: str, plural: str | None = None) -> str:
    return f"{count} {noun if count == 1 else (plural or noun + 's')}"


def _join(items: Sequence[str]) -> str:
    items = [i for i in items if i]
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _duration(seconds: Any) -> str:
    """A duration in the unit a person would use (s below 2 min, min below 2 h, else h)."""
    if _is_missing(seconds):
        return EM_DASH
    s = float(seconds)
    if abs(s) < 120:
        return format_quantity(s, "s")
    if abs(s) < 7200:
        return format_quantity(s / 60.0, "min")
    return format_quantity(s / 3600.0, "h")


# =================================================================================================
# Facts: what the session and its analysis say, gathered once
# =================================================================================================


class _Facts:
    """Everything the report's text, tables and checklist read, taken from one session."""

    def __init__(self, session: Session, analysis: Any):
        if not isinstance(session, Session):
            raise InputError(f"session must be a swimlab Session; got {type(session).__name__}", field="session")
        if getattr(analysis, "session_id", None) != session.session_id:
            raise InputError(
                f"the analysis is of session {getattr(analysis, 'session_id', None)!r}, not of "
                f"{session.session_id!r}; analyse this session first",
                field="analysis",
            )
        self.session = session
        self.analysis = analysis
        self.settings = analysis.settings
        self.fish_ids = session.unit_ids()  # fish, and groups of fish swum together
        self.groups = _frame(getattr(analysis, "groups", None))
        self.results = _frame(analysis.results)
        self.steps = _frame(analysis.steps)
        self.measure = _frame(analysis.measure)
        self.phases = _frame(analysis.phases)
        self.flags = _frame(analysis.flags, checks.FLAG_COLUMNS)
        self.fish_table = _frame(analysis.fish)
        self.protocol = getattr(analysis, "protocol", None)

    # --- per-fish lookups -----------------------------------------------------------------------
    def result(self, fish_id: str, quantity: str) -> dict[str, Any] | None:
        r = self.results
        if r.empty:
            return None
        hit = r[(r["fish_id"].astype(str) == str(fish_id)) & (r["quantity"] == quantity)]
        if hit.empty or _is_missing(hit["value"].iloc[0]):
            return None
        return hit.iloc[0].to_dict()

    def fish_flags(self, fish_id: str) -> pd.DataFrame:
        f = self.flags
        if f.empty:
            return f
        where = f["where"].fillna("").astype(str)
        return f[where.str.fullmatch(rf"(fish|group) {re.escape(str(fish_id))}(\b.*)?")]

    def has_flag(self, code: str, fish_id: str | None = None) -> bool:
        f = self.flags if fish_id is None else self.fish_flags(fish_id)
        return bool(not f.empty and (f["code"] == code).any())

    def poorly_constrained(self, fish_id: str) -> set[str]:
        """Models whose fit was flagged as poorly constrained ("" when the flag names no model)."""
        f = self.fish_flags(fish_id)
        if f.empty:
            return set()
        out = set()
        for message in f.loc[f["code"] == "FIT_POORLY_CONSTRAINED", "message"].astype(str):
            named = [m for m in ("exponential", "power") if message.lower().startswith(m)]
            out.add(named[0] if named else "")
        return out

    def chosen_fit_poor(self, fish_id: str) -> bool:
        """Whether the chosen speed–MO2 fit (or a fit the flag does not name) is poorly constrained."""
        best = getattr(self.fits(fish_id), "best", None)
        poor = self.poorly_constrained(fish_id)
        return bool(poor & {best, ""})

    def fits(self, fish_id: str) -> Any:
        return (self.analysis.fits or {}).get(fish_id)

    def is_group(self, unit_id: str) -> bool:
        """Whether ``unit_id`` names a group of fish swum together."""
        g = self.groups
        return bool(not g.empty and "group_id" in g and (g["group_id"].astype(str) == str(unit_id)).any())

    def group_row(self, group_id: str) -> dict[str, Any]:
        g = self.groups
        if g.empty or "group_id" not in g:
            return {}
        hit = g[g["group_id"].astype(str) == str(group_id)]
        return {} if hit.empty else hit.iloc[0].to_dict()

    def who(self, unit_id: str) -> str:
        """"Fish X", or "Group X (n fish swum together; MO₂ per capita)"."""
        if self.is_group(unit_id):
            return f"Group {unit_id} ({int(self.group_row(unit_id)['n_fish'])} fish swum together; MO₂ per capita)"
        return f"Fish {unit_id}"

    def fish_row(self, fish_id: str) -> dict[str, Any]:
        if self.is_group(fish_id):  # a group's chamber: summed volume and blocking
            return self.group_row(fish_id)
        t = self.fish_table
        if t.empty or "fish_id" not in t:
            return {}
        hit = t[t["fish_id"].astype(str) == str(fish_id)]
        return {} if hit.empty else hit.iloc[0].to_dict()

    def volume_ratio(self, fish_id: str) -> float | None:
        value = self.fish_row(fish_id).get("volume_ratio")
        return None if _is_missing(value) else float(value)

    # --- phases ------------------------------------------------------------------------------
    def phase_counts(self, fish_id: str | None = None) -> dict[str, int]:
        """Measure phases: total, used, excluded by a person, rejected by a rule, outside steps."""
        m = self.measure
        if m.empty:
            return {"total": 0, "used": 0, "excluded": 0, "rejected": 0, "unassigned": 0}
        if fish_id is not None and "fish_id" in m:
            m = m[m["fish_id"].astype(str) == str(fish_id)]
        used = _bool_col(m, "used", True)
        excluded = _bool_col(m, "excluded", False)
        rejected = ~used & ~excluded
        unassigned = used & (m["step"] < 0) if "step" in m else pd.Series(False, index=m.index)
        return {
            "total": int(len(m)),
            "used": int(used.sum()),
            "excluded": int(excluded.sum()),
            "rejected": int(rejected.sum()),
            "unassigned": int(unassigned.sum()),
        }

    def rejection_reasons(self, fish_id: str | None = None) -> dict[str, int]:
        m = self.measure
        if m.empty or "rejected_by" not in m:
            return {}
        if fish_id is not None and "fish_id" in m:
            m = m[m["fish_id"].astype(str) == str(fish_id)]
        m = m[~_bool_col(m, "used", True) & ~_bool_col(m, "excluded", False)]
        counts: dict[str, int] = {}
        for value in m["rejected_by"]:
            codes = value if isinstance(value, list | tuple) else str(value or "").replace(";", ",").split(",")
            for code in (c.strip() for c in codes):
                if code and code.lower() != "nan":
                    counts[code] = counts.get(code, 0) + 1
        return counts

    def phase_durations(self) -> dict[str, float]:
        """Median duration of each phase kind found in the trace. [s]"""
        p = self.phases
        if p.empty or not {"phase", "start_s", "end_s"} <= set(p.columns):
            return {}
        p = p.sort_values("start_s", kind="stable")
        start = p["start_s"].to_numpy(dtype=float)
        # a phase lasts until the next one starts (its end_s is its last reading)
        span = np.append(start[1:] - start[:-1], float(p["end_s"].iloc[-1]) - start[-1])
        d = pd.Series(span, index=p.index).groupby(p["phase"]).median()
        return {str(k): float(v) for k, v in d.items()}

    def trace_time(self) -> np.ndarray | None:
        for logged in (self.analysis.traces or {}).values():
            t = getattr(logged, "time_s", None)
            if t is not None:
                return np.asarray(t, dtype=float)
        return None

    def trial_span_s(self) -> float | None:
        t = self.trace_time()
        if t is not None and t.size:
            return float(np.nanmax(t) - np.nanmin(t))
        return None

    def oxygen_minimum(self) -> tuple[float, float | None] | None:
        """Lowest oxygen recorded over all fish channels: (mg/L, % air saturation or None)."""
        conc = self.analysis.concentration or {}
        lows = [float(np.nanmin(v)) for v in conc.values() if np.size(v) and np.isfinite(v).any()]
        if not lows:
            return None
        low = min(lows)
        return low, self.percent_from_mg_l(low)

    def mg_l_from_percent(self, pct: float) -> float | None:
        return self._oxygen(pct, "% air saturation", "mg/L")

    def percent_from_mg_l(self, mg_l: float) -> float | None:
        return self._oxygen(mg_l, "mg/L", "% air saturation")

    def _oxygen(self, value: float, source: str, target: str) -> float | None:
        """``value`` of oxygen in unit ``source`` converted to ``target`` in the session's water,
        or ``None`` when the water's record does not allow it."""
        from swimlab import oxygen

        w = self.session.water
        try:
            return float(oxygen.convert(value, source, target, w.temperature_c, w.salinity,
                                        w.barometric_pressure_kpa * PA_PER_KPA))
        except (InputError, ValueError):
            return None

    def events(self, *kinds: str) -> list[Any]:
        return [e for e in self.session.events if e.kind in kinds]

    def step_protocol(self) -> bool:
        return self.session.protocol.type in ("step_ucrit", "repeat_ucrit")


def _frame(value: Any, columns: Sequence[str] | None = None) -> pd.DataFrame:
    if isinstance(value, pd.DataFrame):
        return value
    return pd.DataFrame(columns=list(columns or []))


def _bool_col(frame: pd.DataFrame, name: str, default: bool) -> pd.Series:
    if name not in frame:
        return pd.Series(default, index=frame.index, dtype=bool)
    return frame[name].fillna(default).astype(bool)


# =================================================================================================
# Methods section
# =================================================================================================

_BACKGROUND_WORDS = {
    "constant": "the mean background slope of the blanks was subtracted from every phase's slope",
    "linear": "the background slope was interpolated linearly in time between the blanks and subtracted "
              "from each phase's slope",
    "exponential": "an exponential growth curve was fitted to the blanks' slopes against time and its value "
                   "at each phase was subtracted from that phase's slope",
}


def methods_paragraphs(session: Session, analysis: Any) -> list[tuple[str, str]]:
    """Return the methods section as (heading, paragraph) pairs, written from the recorded settings.

    Values absent from the session are written as "(not recorded)", so that a gap in the
    record shows in the draft; the checklist marks the same items *missing*.
    """
    facts = analysis if isinstance(analysis, _Facts) else _Facts(session, analysis)
    out = [
        ("Animals", _m_animals(facts)),
        ("Respirometer and swim tunnel", _m_respirometer(facts)),
        ("Water", _m_water(facts)),
        ("Measurement cycle", _m_cycle(facts)),
        ("Oxygen sensor", _m_sensor(facts)),
        ("Background respiration", _m_background(facts)),
        ("Slopes and their acceptance", _m_slopes(facts)),
        ("Oxygen uptake", _m_mo2(facts)),
        ("Water speed", _m_speed(facts)),
        ("Swimming protocol", _m_protocol(facts)),
        ("Protocol analysis", _m_protocol_analysis(facts)),
        ("Speed–MO₂ curves, SMR, MMR and cost of transport", _m_curves(facts)),
        ("Software", _m_software(facts)),
    ]
    return [(h, t) for h, t in out if t]


NOT_RECORDED = "(not recorded)"

_METHOD_WORDS = {
    "swimming_peak": "the highest MO₂ over a sliding window within the swimming phases",
    "mlnd": "the mean of the lowest normal distribution (Chabot et al. 2016)",
}


def method_words(code: str) -> str:
    """A result's method code in words (``"extrapolation_exponential"`` → words)."""
    code = str(code or "")
    if code in _METHOD_WORDS:
        return _METHOD_WORDS[code]
    if code.startswith("extrapolation_"):
        return f"extrapolation of the {code.split('_', 1)[1]} fit to zero speed"
    if code.startswith("quantile_"):
        return f"the {code.split('_', 1)[1]} quantile of resting MO₂ (Chabot et al. 2016)"
    return code.replace("_", " ")


def _m_animals(f: _Facts) -> str:
    s = f.session
    species = sorted({fish.species for fish in s.fish if fish.species})
    described = []
    for fish in s.fish:
        bits = [format_entered(fish.mass_g, "g"), f"total length {format_entered(fish.total_length_cm, 'cm')}",
                f"body depth {format_entered(fish.body_depth_cm, 'cm')}",
                f"body width {format_entered(fish.body_width_cm, 'cm')}"]
        if fish.fork_length_cm is not None:
            bits.insert(2, f"fork length {format_entered(fish.fork_length_cm, 'cm')}")
        if fish.sex:
            bits.append(f"sex {fish.sex}" if fish.sex == "unknown" else fish.sex)
        described.append(f"{fish.fish_id} ({', '.join(bits)}; chamber {fish.chamber})")
    n = len(s.fish)
    of = f"of {_join(species)}" if species else f"(species {NOT_RECORDED})"
    text = f"{_sentence(_count_word(n))} fish {of} {'was' if n == 1 else 'were'} used: {_join(described)}."
    c = s.conditions
    if c.acclimation_temperature_c is not None or c.acclimation_days is not None:
        accl = "acclimated"
        accl += (f" to {format_entered(c.acclimation_temperature_c, '°C')}" if c.acclimation_temperature_c is not None
                 else f" (temperature {NOT_RECORDED})")
        accl += (f" for {format_entered(c.acclimation_days, 'd')}" if c.acclimation_days is not None
                 else f" (duration {NOT_RECORDED})")
    else:
        accl = f"acclimated {NOT_RECORDED}"
    fast = (f"fasted for {format_entered(c.fasting_h, 'h')}" if c.fasting_h is not None else f"fasted {NOT_RECORDED}")
    text += f" Before the trial, {'the fish was' if n == 1 else 'fish were'} {accl} and {fast}."
    if c.habituation_min is not None:
        at = (f" at {format_entered(c.habituation_speed_cm_s, 'cm/s')}" if c.habituation_speed_cm_s is not None else "")
        text += (f" {'It' if n == 1 else 'Each fish'} was habituated in the swim tunnel for "
                 f"{format_entered(c.habituation_min, 'min')}{at} before the first measurement.")
    else:
        text += f" Habituation in the swim tunnel was {NOT_RECORDED}."
    when = []
    if c.time_of_day:
        when.append(f"the trial started at {c.time_of_day}")
    if c.photoperiod:
        when.append(f"the photoperiod was {c.photoperiod}")
    if when:
        text += " " + _sentence(_join(when)) + "."
    for g in s.groups:
        definition = {"first_fish": "when the first fish met the fatigue criterion",
                      "half_group": "when half the fish (rounded up) had met the fatigue criterion",
                      "last_fish": "when the last fish met the fatigue criterion",
                      "stated": f"as stated: {g.fatigue_description}"}.get(g.fatigue_definition or "", NOT_RECORDED)
        members = [x for x in s.fish if x.fish_id in g.fish_ids]
        text += (f" Fish {_join(g.fish_ids)} were swum together as group {g.group_id} in chamber {g.chamber} "
                 f"({_n(len(members), 'fish', 'fish')}, {format_entered(sum(x.mass_g for x in members), 'g')} in all); "
                 f"the group's fatigue was called {definition}. Its MO₂ was computed with the fish's summed mass and "
                 "volume, and is given as group MO₂ and per capita (per fish, and per kg of the summed mass). "
                 + checks.GROUP_CAVEAT)
    return text


def _m_respirometer(f: _Facts) -> str:
    fl = f.session.flume
    if fl.section_shape == "circular":
        section = f"a circular working section {format_entered(fl.section_diameter_cm, 'cm')} in diameter"
    else:
        section = (f"a rectangular working section {format_entered(fl.section_width_cm, 'cm')} wide and "
                   f"{format_entered(fl.section_height_cm, 'cm')} high")
    if fl.section_length_cm is not None:
        section += f" ({format_entered(fl.section_length_cm, 'cm')} long)"
    text = (f"Trials were run in the swim-tunnel respirometer “{fl.name}”, with {section}; its total closed volume "
            f"was {format_entered(fl.respirometer_volume_l, 'L')}. Water in the respirometer was mixed by the tunnel's "
            "own flow.")
    ratios = [(fid, f.volume_ratio(fid)) for fid in f.fish_ids]
    ratios = [(fid, r) for fid, r in ratios if r is not None]
    if ratios:
        parts = [format_number(r, 3) + (f" (fish {fid})" if len(ratios) > 1 else "") for fid, r in ratios]
        text += (f" The respirometer-to-fish volume ratio, (respirometer volume − fish volume) / fish volume with the "
                 f"fish's volume from its mass at a body density of {format_entered(f.settings.fish_density_kg_m3, 'kg/m3')}, "
                 f"was {_join(parts)} (the lab's guidance range: "
                 f"{_entered_range(f.settings.volume_ratio_min, f.settings.volume_ratio_max)}).")
        if f.has_flag("VOLUME_RATIO_OUTSIDE_GUIDANCE"):
            text += " The ratio lay outside that range (see flags)."
    return text


def _m_water(f: _Facts) -> str:
    w = f.session.water
    text = (f"Water temperature was {format_entered(w.temperature_c, '°C')}, practical salinity "
            f"{format_entered(w.salinity)} and barometric pressure {format_entered(w.barometric_pressure_kpa, 'kPa')}.")
    sol = (f.analysis.water or {}).get("o2_solubility_mg_l")
    if not _is_missing(sol):
        text += (" Oxygen solubility at air saturation under these conditions was "
                 f"{format_quantity(sol, 'mg/L')} (Garcia & Gordon 1992).")
    floor = f.settings.oxygen_floor_pct_air_sat
    floor_mg = f.mg_l_from_percent(floor)
    text += (f" Oxygen was to stay above {format_entered(floor, '%')} air saturation"
             + (f" ({format_quantity(floor_mg, 'mg/L')})" if floor_mg is not None else "")
             + f", and each flush was to restore at least {format_entered(f.settings.flush_restore_pct_air_sat, '%')}.")
    low = f.oxygen_minimum()
    if low is not None:
        mg, pct = low
        text += (f" The lowest oxygen recorded was {format_quantity(mg, 'mg/L')}"
                 + (f" ({format_quantity(pct, '%')} air saturation at the trial's temperature)" if pct is not None else "")
                 + ".")
    n_low = int((f.flags["code"] == "OXYGEN_BELOW_FLOOR").sum()) if not f.flags.empty else 0
    if n_low:
        text += f" Oxygen fell below the floor in {_n(n_low, 'phase')} (see flags)."
    text += (" Temperature drift was checked against "
             f"{format_entered(f.settings.temperature_drift_trial_max_c, '°C')} over the trial and "
             f"{format_entered(f.settings.temperature_drift_phase_max_c, '°C')} within a measure phase"
             + ("; the trial limit was exceeded (see flags)." if f.has_flag("TEMPERATURE_DRIFT_TRIAL") else "."))
    return text


def _m_cycle(f: _Facts) -> str:
    c = f.session.protocol.cycle
    found = f.phase_durations()
    if c.source == "schedule":
        text = ("Oxygen uptake was measured by intermittent-flow respirometry on a fixed cycle: a flush of "
                f"{format_entered(c.flush_s, 's')}, a wait of {format_entered(c.wait_s, 's')} and a measure phase of "
                f"{format_entered(c.measure_s, 's')}, the first flush starting at {format_entered(c.start_s, 's')} on the "
                "logger's clock.")
    else:
        how = "the flush pump's signal" if c.source == "pump" else "the shape of the oxygen trace"
        text = ("Oxygen uptake was measured by intermittent-flow respirometry. Flush and closed periods were found "
                f"from {how}; the first {format_entered(c.wait_s, 's')} of each closed period were discarded as a wait "
                "phase, and the rest was the measure phase.")
        if found:
            parts = [f"{kind} {_duration(found[kind])}" for kind in ("flush", "wait", "measure") if kind in found]
            text += f" Median durations found: {', '.join(parts)}."
    n_cycles = f.phase_counts()["total"]
    span = f.trial_span_s()
    if n_cycles and span is not None:
        text += f" The trace covered {_duration(span)} with {_n(n_cycles, 'measure phase')}."
    return text


def _m_sensor(f: _Facts) -> str:
    sensor = f.session.sensor
    if sensor is None:
        return f"Oxygen sensor and its calibration: {NOT_RECORDED}."
    name = sensor.sensor or f"an oxygen sensor (type {NOT_RECORDED})"
    text = (f"Oxygen was recorded with {name}, calibrated at {format_entered(sensor.zero_point_pct, '%')} and "
            f"{format_entered(sensor.span_point_pct, '%')} air saturation")
    text += f" on {sensor.date.isoformat()}" if sensor.date else f" (calibration date {NOT_RECORDED})"
    at = []
    if sensor.temperature_c is not None:
        at.append(format_entered(sensor.temperature_c, "°C"))
    if sensor.barometric_pressure_kpa is not None:
        at.append(format_entered(sensor.barometric_pressure_kpa, "kPa"))
    if sensor.salinity is not None:
        at.append(f"salinity {format_entered(sensor.salinity)}")
    text += (f" at {_join(at)}" if at else "") + "."
    if sensor.drift_check_pct is not None:
        text += (f" At the end of the trial it read {format_entered(sensor.drift_check_pct, '%')} in air-saturated "
                 "water.")
    else:
        text += f" A drift check at the end of the trial was {NOT_RECORDED}."
    text += (f" The sensor's noise was taken as {format_entered(f.settings.sensor_noise_mg_l, 'mg/L')} "
             "(standard deviation of one reading).")
    return text


_WHEN_ORDER = {"before": 0, "during": 1, "after": 2}


def _m_background(f: _Facts) -> str:
    s = f.session
    blanks = s.blanks
    if not blanks:
        return ("No background (blank) run was recorded; background respiration was not subtracted and is "
                "included in the fish's MO₂.")
    when: dict[str, int] = {}
    for b in sorted(blanks, key=lambda b: _WHEN_ORDER[b.when]):
        when[b.when] = when.get(b.when, 0) + 1
    parts = [f"{n} {w} the trial" for w, n in when.items()]
    slopes = [b.slope_mg_l_h for b in blanks if b.slope_mg_l_h is not None]
    text = (f"Background (microbial) respiration was measured in {_n(len(blanks), 'blank run')} of the empty "
            f"respirometer ({_join(parts)})")
    if slopes:
        text += f", with oxygen slopes of {_join([format_quantity(v, 'mg/L/h') for v in slopes])}"
    text += "."
    method = s.background_method
    if method == "none":
        text += " No background correction was applied."
    else:
        text += f" For the correction, {_BACKGROUND_WORDS[method]} (Rodgers et al. 2016)."
    text += (f" Phases whose background exceeded {format_entered(f.settings.background_share_max * 100, '%')} of the "
             "fish's oxygen decline were flagged.")
    return text


def _m_slopes(f: _Facts) -> str:
    st = f.settings
    text = ("The oxygen slope of each measure phase was fitted by ordinary least squares, after every reading had been "
            "converted to concentration at its own logged temperature. A phase was accepted when it held at least "
            f"{format_entered(st.min_points_per_phase)} readings, the slope's standard error was at most "
            f"{format_entered(st.slope_relative_se_max * 100, '%')} of the slope, and either the fit's R² was at least "
            f"{format_entered(st.r2_min)} or the residual standard deviation was at most {format_entered(st.noise_ratio_max)} "
            f"times the sensor's noise ({format_entered(st.sensor_noise_mg_l, 'mg/L')}); R² alone was not used because it "
            "rejects phases whose total decline is small against the sensor noise. Phases whose residual scatter exceeded "
            "that multiple of the noise, whose decline was curved, or whose temperature changed by more than "
            f"{format_entered(st.temperature_drift_phase_max_c, '°C')} were flagged for review.")
    counts = f.phase_counts()
    if counts["total"]:
        text += (f" Of {_n(counts['total'], 'measure phase')}, {counts['used']} {'was' if counts['used'] == 1 else 'were'} "
                 f"accepted, {counts['rejected']} rejected by these rules and {counts['excluded']} excluded by a person "
                 "with a recorded reason (listed under Flags and exclusions).")
    return text


def _m_mo2(f: _Facts) -> str:
    st = f.settings
    text = ("MO₂ was calculated as MO₂ = −(s − s_b) · (V_r − V_f) / M, where s is the phase's oxygen slope, s_b the "
            "background slope, V_r the respirometer volume, V_f the fish's volume (its mass over a body density of "
            f"{format_entered(st.fish_density_kg_m3, 'kg/m3')}) and M its mass; MO₂ is given in mg O₂ kg⁻¹ h⁻¹.")
    if st.reference_mass_kg is not None:
        text += (f" Values were scaled to a reference mass of {format_entered(st.reference_mass_kg, 'kg')} with "
                 f"MO₂,ref = MO₂ · (M / M_ref)^(1 − b), b = {format_entered(st.mass_exponent)}.")
    else:
        text += " MO₂ was not scaled to a reference mass."
    return text


def _m_speed(f: _Facts) -> str:
    fl = f.session.flume
    st = f.settings
    cal = f.analysis.calibration
    if len(fl.calibration) >= 2:
        speeds = [p.speed_cm_s for p in fl.calibration]
        text = (f"Water speed was set from the tunnel's speed calibration ({_n(len(fl.calibration), 'point')}, motor "
                f"setting against measured water speed from {_entered_range(min(speeds), max(speeds), 'cm/s')}")
        ch = fl.characterisation
        extra = [x for x in (f"instrument: {ch.instrument}" if ch.instrument else "",
                             f"characterised on {ch.date.isoformat()}" if ch.date else "") if x]
        text += ("; " + "; ".join(extra) if extra else "") + ")."
        r2 = getattr(cal, "r2", None)
        degree = getattr(cal, "degree", None)
        if r2 is not None and not _is_missing(r2):
            shape = {1: "straight-line", 2: "quadratic", 3: "cubic"}.get(degree, "least-squares")
            text += f" The calibration's {shape} least-squares fit had R² = {format_number(float(r2), 4)}."
    else:
        text = f"Water speeds are the set speeds; the tunnel's speed calibration was {NOT_RECORDED}."
    parts = []
    for fid in f.fish_ids:
        row = f.fish_row(fid)
        ratio, eps = row.get("blocking_ratio"), row.get("blocking_epsilon")
        if not _is_missing(ratio):
            bit = format_quantity(float(ratio) * 100, "%") + (f" for fish {fid}" if len(f.fish_ids) > 1 else "")
            if not _is_missing(eps):
                bit += f" (the correction raised the speed by {format_quantity(float(eps) * 100, '%', 2)})"
            parts.append(bit)
    text += (" Speeds were corrected for solid blocking (Bell & Terhune 1970), with the fish's frontal area from its "
             "body depth and width; the blocking ratio (frontal area over working-section area) was "
             + (_join(parts) if parts else NOT_RECORDED)
             + f", against a limit of {format_entered(st.blocking_ratio_limit * 100, '%')} for the correction.")
    if f.has_flag("BLOCKING_BEYOND_LIMIT"):
        text += " The limit was exceeded, so the corrected speeds are uncertain (see flags)."
    text += " Speeds are given in cm/s and in body lengths per second (BL/s, on total length)."
    return text


def _m_protocol(f: _Facts) -> str:
    p = f.session.protocol
    label = PROTOCOL_LABELS.get(p.type, p.type)
    text = f"Protocol: {label}."
    if p.type in ("step_ucrit", "repeat_ucrit") and p.steps:
        speeds = [s.speed_cm_s for s in p.steps]
        durations = [s.duration_min for s in p.steps]
        incs = np.diff(speeds)
        text = (f"A step test was used: {_n(len(p.steps), 'speed step')} of set speed from "
                f"{_entered_range(speeds[0], speeds[-1], 'cm/s')}")
        if len(incs):
            text += (f" in increments of {format_entered(float(incs[0]), 'cm/s')}" if np.ptp(incs) < 1e-9
                     else f" in increments of {_entered_range(float(incs.min()), float(incs.max()), 'cm/s')}")
        text += (f", each lasting {format_entered(durations[0], 'min')}" if len(set(durations)) == 1
                 else f", lasting {_entered_range(min(durations), max(durations), 'min')}")
        text += f"; the first step began at {_duration(p.start_s)} on the logger's clock."
        if p.type == "repeat_ucrit":
            text += (f" It was a second swim, {format_entered(p.rest_interval_min, 'min')} after the first"
                     + (f" (session {p.first_swim_session_id})" if p.first_swim_session_id else "") + ".")
    elif p.type == "ramp":
        text = (f"A ramp protocol was used: speed rose at {format_entered(p.ramp_rate_cm_s_per_min, 'cm/s/min')}"
                + (f" from {format_entered(p.ramp_start_speed_cm_s, 'cm/s')}" if p.ramp_start_speed_cm_s is not None else "")
                + " until fatigue; its result is a maximum speed, not a step Ucrit.")
    elif p.type == "endurance":
        text = (f"A fixed-speed endurance test was used at {format_entered(p.set_speed_cm_s, 'cm/s')} with a time limit "
                f"of {format_entered(p.time_limit_min, 'min')}; its result is a time to fatigue, not a Ucrit.")
    elif p.type == "recovery":
        from swimlab.session import RECOVERY_BASELINES

        text = "MO₂ was followed during recovery after exercise (excess post-exercise oxygen consumption)."
        text += (f" The exercise began at {_duration(p.start_s)} and exhaustion was reached at "
                 f"{_duration(p.fatigue_time_s)} on the logger's clock." if p.fatigue_time_s is not None
                 else f" The time of exhaustion was {NOT_RECORDED}.")
        text += (f" EPOC was measured from the baseline “{p.recovery_baseline}”: {RECOVERY_BASELINES[p.recovery_baseline]}"
                 + (f", entered as {format_entered(p.recovery_baseline_mg_kg_h, 'mg O2 kg-1 h-1')}"
                    if p.recovery_baseline_mg_kg_h is not None else "") + "."
                 if p.recovery_baseline else f" The baseline of the EPOC was {NOT_RECORDED}.")
    fc = p.fatigue_criterion
    if p.type != "recovery":
        crit = f"“{fc.description}”" if fc.description else NOT_RECORDED
        extra = []
        if fc.rest_on_grid_s is not None:
            extra.append(f"resting on the rear grid for {format_entered(fc.rest_on_grid_s, 's')}")
        if fc.stimulus:
            extra.append(f"stimulus: {fc.stimulus}" + (f", at most {fc.stimulus_limit}" if fc.stimulus_limit is not None else ""))
        text += f" Fatigue was defined as {crit}" + (f" ({'; '.join(extra)})" if extra else "") + "."
        text += (f" Fatigue was reached at {_duration(p.fatigue_time_s)} on the logger's clock." if p.fatigue_time_s is not None
                 else f" The fatigue time was {NOT_RECORDED}.")
    if f.step_protocol():
        corrected = any(f.result(fid, "ucrit") is not None for fid in f.fish_ids)
        on_set = any(f.result(fid, "ucrit_set") is not None for fid in f.fish_ids)
        given = ("it is given on blocking-corrected and on set speeds" if corrected and on_set
                 else "it is given on blocking-corrected speeds" if corrected
                 else "it is given on set speeds only (no blocking-corrected value)" if on_set
                 else "it could not be calculated for this session (see flags)")
        text += (" Ucrit was calculated after Brett (1964) as Ucrit = U_i + U_ii · (t_i / t_ii), where U_i is the highest "
                 "speed completed, U_ii the speed increment, t_i the time swum at the speed of fatigue and t_ii the step "
                 f"duration; {given}.")
    return text


def _m_protocol_analysis(f: _Facts) -> str:
    """Methods of the protocol parts that gave results in this session (empty when none did)."""
    pr = f.protocol
    if pr is None or (pr.results.empty and not pr.problems):
        return ""
    parts = set(pr.results["part"]) if not pr.results.empty else set()
    text = []
    if "ramp" in parts:
        text.append("Ramp Umax = U₀ + a·t, with U₀ the speed at the ramp's start, a the ramp rate and t the time from "
                    "the start to fatigue (constant acceleration; Farrell 2008), on set speed and after the solid-blocking "
                    "correction; MO₂ of each measure phase on the ramp is given at the speed of its mid-time. A ramp Umax "
                    "depends on the rate and is not a step-test Ucrit.")
    if "endurance" in parts:
        text.append("Endurance time is the time from the start of the set speed to fatigue; a fish still swimming when "
                    "the time limit ended is kept as censored at the limit (a lower bound), never dropped. Across fish, "
                    "the share still swimming is estimated by Kaplan–Meier (Kaplan & Meier 1958) per set speed, and log₁₀ "
                    "endurance time is regressed on speed by a censored normal likelihood (Tobin 1958).")
    if "repeat" in parts:
        st = f.settings
        rr = next(iter(pr.repeat.values()), None)
        shared = rr is not None and "cancels" in (rr.uncertainty or "")
        text.append("The recovery ratio is Ucrit₂ / Ucrit₁ of the same fish, both on blocking-corrected speed where both "
                    "have it, else both on set speed (Jain, Birtwell & Farrell 1998). Its 95 % interval for this one "
                    "pair is Fieller's (1954) interval from a stated measurement model, not from repeated swims: each "
                    "fatigue time is taken as known only within a span of "
                    f"{format_entered(st.fatigue_time_uncertainty_s, 's')} (uniform; SD = span/√12), which moves Ucrit by "
                    "ΔU/t_ii per second (Brett 1964), and "
                    + ("the two swims shared one flume calibration, whose error is one factor on both speeds and so "
                       "cancels in the ratio" if shared else
                       f"the two swims' speeds carry independent calibration errors of "
                       f"{format_entered(st.speed_calibration_uncertainty_pct, '%')} each (an assumed value)")
                    + ". The interval covers that measurement uncertainty only, not how much a fish's Ucrit varies "
                    "from one swim to the next; the spread between fish comes from the group summary.")
    if "recovery" in parts:
        text.append("EPOC is the oxygen taken up above the baseline after exhaustion, by trapezoids through the accepted "
                    "phases over the recorded span, and as the area under a one- or two-phase exponential decay fitted "
                    "by least squares (the lower AICc chosen; Hurvich & Tsai 1989), integrated from exhaustion to full "
                    "recovery; recovery times to 50 % and 95 % come from the fitted decay. The total oxygen cost is the "
                    "aerobic cost of the exercise plus EPOC (Lee et al. 2003).")
    if "gait" in parts:
        text.append("From the event log, the pectoral–caudal gait transition speed Up–c is the speed of the step holding "
                    "the first gait change named so (Drucker & Jensen 1996), burst-and-coast onset the speed of the first "
                    "step with bursts, and bursts per minute the bursts over the time swum in each step.")
    if "kinematics" in parts:
        text.append("Tail-beat frequency is the count over its counting window (or video frames over the frame rate); "
                    "stride length is U/f and the Strouhal number f·A/U with A the peak-to-peak amplitude (Taylor, Nudds "
                    "& Thomas 2003); the frequency–speed line is fitted by least squares and Bainbridge's (1958) relation "
                    "U = ¼ L (3f − 4) is given for comparison.")
    if pr.problems:
        text.append("Some protocol results were not computed because an entry was missing or contradictory; they are "
                    "listed with the field concerned in the protocol results.")
    return " ".join(text)


def _m_curves(f: _Facts) -> str:
    st = f.settings
    text = ("MO₂ of single accepted phases was related to blocking-corrected speed U by an exponential model, "
            "MO₂ = a · e^(b·U), and a power model, MO₂ = a + b · U^c. The model with the lower small-sample Akaike "
            "information criterion (AICc; Hurvich & Tsai 1989) was chosen; when the two differed by less than 2, they "
            "were taken as equally supported and the exponential, with fewer parameters, was chosen. The 95 % "
            "intervals of the parameters are given with their method in the fits table. A fit with a parameter whose "
            f"relative standard error exceeded {format_entered(st.fit_relative_se_max * 100, '%')} was flagged as "
            "poorly constrained.")
    smr_methods = sorted({method_words(r["method"]) for _, r in f.results.iterrows() if r["quantity"] == "smr"}) \
        if not f.results.empty else []
    text += " SMR was estimated as the chosen curve's value at zero speed, the parameter a"
    if smr_methods:
        text += f" (recorded method: {_join(smr_methods)})"
    if not f.results.empty and f.results["quantity"].isin(["smr_quantile", "smr_mlnd"]).any():
        text += (f" and, from the resting phases before the first step, as their {format_entered(st.smr_quantile)} "
                 "quantile and as the mean of the lowest normal distribution (Chabot et al. 2016)")
    mmr = f.results[f.results["quantity"] == "mmr"] if not f.results.empty else f.results
    if len(mmr):
        how = []
        for _, row in mmr.iterrows():
            note = "" if _is_missing(row.get("note")) or not str(row.get("note")) else f"; {row['note']}"
            how.append(f"{method_words(row['method'])}" + (f" (fish {row['fish_id']}{note})" if len(mmr) > 1 or note else ""))
        text += (f". MMR was estimated as {_join(how)}; the window for a peak was "
                 f"{format_entered(st.mmr_window_s, 's')} long")
    else:
        text += ". No MMR was estimated"
    text += ". Absolute aerobic scope was MMR − SMR and factorial aerobic scope MMR / SMR."
    text += (" Gross cost of transport was MO₂ / U and net cost of transport (MO₂ − SMR) / U, in mg O₂ kg⁻¹ km⁻¹; the "
             "optimal speed Uopt was the speed of the minimum gross cost of transport on the chosen curve (COTmin). "
             f"Energy was taken as {format_entered(st.oxycaloric_j_per_mg_o2, 'J/mg')} of oxygen consumed.")
    return text


def _m_software(f: _Facts) -> str:
    return (f"Data were analysed with swimlab {__version__}, which keeps the raw logger files unchanged with their "
            "SHA-256 checksums and records every setting used; the sources of each method are listed below.")


# =================================================================================================
# Reporting checklist
# =================================================================================================


def reporting_checklist(session: Session, analysis: Any) -> pd.DataFrame:
    """Return the reporting checklist: one row per item with its state and where it comes from.

    Three groups: the intermittent-flow items after Killen et al. (2021) — paraphrased from
    memory, to be checked against the paper —, swim-tunnel items (common practice), and the
    ARRIVE 2.0 items on exclusions (3a–3c), ethics (14) and animal care (16a–16c). Columns are
    :data:`CHECKLIST_COLUMNS`; ``state`` is one of :data:`STATES`.
    """
    f = analysis if isinstance(analysis, _Facts) else _Facts(session, analysis)
    rows: list[dict[str, str]] = []

    def add(guideline, number, topic, item, state, detail, where):
        if state not in STATES:
            raise ValueError(f"unknown checklist state {state!r}; valid states are {STATES}")
        rows.append({"guideline": guideline, "number": number, "topic": topic, "item": item,
                     "state": state, "detail": detail, "where": where})

    s = f.session
    st = f.settings
    fish = s.fish
    c = s.conditions

    # --- Killen et al. (2021), from memory -------------------------------------------------------
    species = [x.species for x in fish]
    add(KILLEN, "K1", "Animals", "Species of each animal",
        "stated" if all(species) else "missing",
        _join(sorted(set(filter(None, species)))) or "species not entered", "fish[].species")
    add(KILLEN, "K2", "Animals", "Body mass (and size) of each animal", "stated",
        "; ".join(f"{x.fish_id}: {format_entered(x.mass_g, 'g')}, {format_entered(x.total_length_cm, 'cm')}" for x in fish),
        "fish[].mass_g, fish[].total_length_cm")
    have_accl = c.acclimation_temperature_c is not None and c.acclimation_days is not None
    add(KILLEN, "K3", "Animals", "Acclimation to holding conditions (temperature and duration)",
        "stated" if have_accl else "missing",
        (f"{format_entered(c.acclimation_temperature_c, '°C')} for {format_entered(c.acclimation_days, 'd')}"
         if have_accl else "temperature or duration not entered"),
        "conditions.acclimation_temperature_c, conditions.acclimation_days")
    add(KILLEN, "K4", "Animals", "Fasting period before the trial",
        "stated" if c.fasting_h is not None else "missing",
        format_entered(c.fasting_h, "h") if c.fasting_h is not None else "not entered", "conditions.fasting_h")
    add(KILLEN, "K5", "Respirometer", "Respirometer volume (whole closed circuit)", "stated",
        format_entered(s.flume.respirometer_volume_l, "L"), "flume.respirometer_volume_l")
    ratios = [(x.fish_id, f.volume_ratio(x.fish_id)) for x in fish]
    add(KILLEN, "K6", "Respirometer", "Respirometer-to-animal volume ratio",
        "stated" if all(r is not None for _, r in ratios) else "missing",
        "; ".join(f"{fid}: {format_number(r)}" for fid, r in ratios if r is not None) or "not derived",
        "flume.respirometer_volume_l and fish[].mass_g (analysis.fish.volume_ratio)")
    add(KILLEN, "K7", "Respirometer", "How water in the respirometer was mixed", "stated",
        "by the swim tunnel's own flow (taken from the kind of apparatus; state any other mixing)",
        "flume (swim-tunnel respirometer)")
    cyc = s.protocol.cycle
    if cyc.source == "schedule":
        cyc_state = "stated" if cyc.flush_s and cyc.measure_s else "missing"
        cyc_detail = f"flush {_duration(cyc.flush_s)}, wait {_duration(cyc.wait_s)}, measure {_duration(cyc.measure_s)}"
    else:
        found = f.phase_durations()
        cyc_state = "stated" if {"flush", "measure"} <= set(found) else "missing"
        cyc_detail = (f"from the {cyc.source}: " + ", ".join(f"{k} {_duration(v)}" for k, v in found.items())
                      if found else f"phases from the {cyc.source}, none found in a trace")
    add(KILLEN, "K8", "Protocol", "Durations of flush, wait and measure phases", cyc_state, cyc_detail,
        "protocol.cycle (analysis.phases)")
    add(KILLEN, "K9", "Protocol", "Time in the respirometer before measurements (habituation)",
        "stated" if c.habituation_min is not None else "missing",
        format_entered(c.habituation_min, "min") if c.habituation_min is not None else "not entered",
        "conditions.habituation_min")
    span = f.trial_span_s()
    add(KILLEN, "K10", "Protocol", "Total duration of the trial",
        "stated" if span is not None or s.protocol.steps else "missing",
        _duration(span) if span is not None else (
            _duration(sum(x.duration_min for x in s.protocol.steps) * 60) + " scheduled" if s.protocol.steps else "no trace"),
        "raw trial file (trace clock), protocol.steps")
    when = _join([x for x in (c.time_of_day, c.photoperiod) if x])
    add(KILLEN, "K11", "Protocol", "Time of day and photoperiod", "stated" if c.time_of_day and c.photoperiod else "missing",
        when or "not entered", "conditions.time_of_day, conditions.photoperiod")
    add(KILLEN, "K12", "Water", "Water temperature (and its control or drift)", "stated",
        format_entered(s.water.temperature_c, "°C")
        + ("; trial drift above limit" if f.has_flag("TEMPERATURE_DRIFT_TRIAL") else ""),
        "water.temperature_c, logger temperature channel")
    add(KILLEN, "K13", "Water", "Salinity and barometric pressure", "stated",
        f"salinity {format_number(s.water.salinity)}, {format_entered(s.water.barometric_pressure_kpa, 'kPa')}",
        "water.salinity, water.barometric_pressure_kpa")
    low = f.oxygen_minimum()
    add(KILLEN, "K14", "Water", "Oxygen levels during trials (range or minimum; limit kept)",
        "stated" if low is not None else "missing",
        (f"lowest {format_quantity(low[0], 'mg/L')}" + (f" ({format_quantity(low[1], '%')})" if low[1] is not None else "")
         + f"; floor {format_entered(st.oxygen_floor_pct_air_sat, '%')}") if low is not None else "no oxygen trace analysed",
        "raw trial file (analysis.concentration), settings.oxygen_floor_pct_air_sat")
    sensor = s.sensor
    add(KILLEN, "K15", "Oxygen sensor", "Type of oxygen sensor",
        "stated" if sensor is not None and sensor.sensor else "missing",
        sensor.sensor if sensor is not None and sensor.sensor else "not entered", "sensor.sensor")
    cal_ok = sensor is not None and sensor.date is not None
    add(KILLEN, "K16", "Oxygen sensor", "Sensor calibration (points and when)",
        "stated" if cal_ok else "missing",
        (f"{format_entered(sensor.zero_point_pct, '%')} and {format_entered(sensor.span_point_pct, '%')} on {sensor.date.isoformat()}"
         if cal_ok else ("no calibration record" if sensor is None else "calibration date not entered")),
        "sensor.date, sensor.zero_point_pct, sensor.span_point_pct")
    add(KILLEN, "K17", "Background", "How and when background respiration was measured",
        "stated" if s.blanks else "missing",
        f"{_n(len(s.blanks), 'blank')} ({_join(sorted({b.when for b in s.blanks}, key=_WHEN_ORDER.get))})" if s.blanks else "no blank recorded",
        "blanks[]")
    add(KILLEN, "K18", "Background", "How MO2 was corrected for background respiration",
        "stated" if s.blanks else "missing",
        (s.background_method if s.background_method != "none" else "not corrected") if s.blanks else "no blank to correct with",
        "background_method")
    add(KILLEN, "K19", "Analysis", "How MO2 was calculated (equation, volume, mass, units)", "stated",
        "MO₂ = −(s − s_b)·(V_r − V_f)/M in mg O₂ kg⁻¹ h⁻¹"
        + ("" if st.reference_mass_kg is None else f", scaled to {format_entered(st.reference_mass_kg, 'kg')} with b = {st.mass_exponent:g}"),
        "settings.fish_density_kg_m3, settings.reference_mass_kg, settings.mass_exponent")
    add(KILLEN, "K20", "Analysis", "Criteria for accepting slopes (e.g. R² threshold)", "stated",
        f"≥ {format_entered(st.min_points_per_phase)} readings, SE ≤ {st.slope_relative_se_max * 100:g} % of slope, and "
        f"R² ≥ {st.r2_min:g} or residual SD ≤ {st.noise_ratio_max:g} × sensor noise",
        "settings.r2_min, settings.min_points_per_phase, settings.slope_relative_se_max")
    smr_rows = f.results[f.results["quantity"] == "smr"] if not f.results.empty else f.results
    add(KILLEN, "K21", "Analysis", "How SMR was estimated",
        "stated" if len(smr_rows) else "missing",
        _join(sorted({method_words(x) for x in smr_rows["method"]})) if len(smr_rows) else "no SMR estimate (no curve fitted)",
        "analysis.results (quantity smr, method)")
    mmr_rows = f.results[f.results["quantity"] == "mmr"] if not f.results.empty else f.results
    add(KILLEN, "K22", "Analysis", "How MMR was estimated (and when)",
        "stated" if len(mmr_rows) else "missing",
        (_join(sorted({method_words(x) for x in mmr_rows["method"]})) if len(mmr_rows) else "no MMR estimate"),
        "analysis.results (quantity mmr), settings.mmr_window_s")
    counts = f.phase_counts()
    add(KILLEN, "K23", "Analysis", "Number of MO2 measurements used and excluded",
        "stated" if counts["total"] else "missing",
        (f"{counts['used']} used, {counts['rejected']} rejected, {counts['excluded']} excluded of {counts['total']}"
         if counts["total"] else "no measure phase"),
        "analysis.measure (used, excluded, rejected_by)")
    add(KILLEN, "K24", "Analysis", "Software used for analysis", "stated", f"swimlab {__version__}", "report")

    # --- swim tunnel -------------------------------------------------------------------------------
    npts = len(s.flume.calibration)
    add(SWIM, "S1", "Speed", "Speed calibration of the working section",
        "stated" if npts >= 2 else "missing",
        f"{_n(npts, 'point')}" + (f", {s.flume.characterisation.instrument}" if s.flume.characterisation.instrument else ""),
        "flume.calibration, flume.characterisation")
    ratios_b = [f.fish_row(x.fish_id).get("blocking_ratio") for x in fish]
    add(SWIM, "S2", "Speed", "Solid-blocking correction, blocking ratio and its limit",
        "stated" if all(not _is_missing(r) for r in ratios_b) else "missing",
        "; ".join(f"{x.fish_id}: {format_quantity(float(r) * 100, '%')}" for x, r in zip(fish, ratios_b, strict=True) if not _is_missing(r))
        + f" (limit {st.blocking_ratio_limit * 100:g} %)",
        "fish[].body_depth_cm, fish[].body_width_cm, flume section, settings.blocking_ratio_limit")
    p = s.protocol
    if p.type in ("step_ucrit", "repeat_ucrit"):
        proto_state = "stated" if p.steps else "missing"
        proto_detail = f"{_n(len(p.steps), 'step')}" + (
            f", {_entered_range(min(x.speed_cm_s for x in p.steps), max(x.speed_cm_s for x in p.steps), 'cm/s')}" if p.steps else "")
    elif p.type == "ramp":
        proto_state, proto_detail = "stated", f"ramp {format_entered(p.ramp_rate_cm_s_per_min, 'cm/s/min')}"
    elif p.type == "endurance":
        proto_state, proto_detail = "stated", f"{format_entered(p.set_speed_cm_s, 'cm/s')} for ≤ {format_entered(p.time_limit_min, 'min')}"
    else:
        proto_state, proto_detail = "stated", "post-exercise recovery"
    add(SWIM, "S3", "Protocol", "Swimming protocol (speeds, step durations or ramp rate)", proto_state, proto_detail,
        "protocol.type, protocol.steps")
    if p.type == "recovery":
        add(SWIM, "S4", "Protocol", "Fatigue criterion and fatigue time", "not applicable",
            "recovery trial", "protocol.fatigue_criterion")
    else:
        ok = bool(p.fatigue_criterion.description) and p.fatigue_time_s is not None
        add(SWIM, "S4", "Protocol", "Fatigue criterion and fatigue time", "stated" if ok else "missing",
            (p.fatigue_criterion.description or "no criterion") + "; "
            + (f"fatigue at {_duration(p.fatigue_time_s)}" if p.fatigue_time_s is not None else "fatigue time not entered"),
            "protocol.fatigue_criterion, protocol.fatigue_time_s")
    if f.step_protocol():
        have_u = all(f.result(x.fish_id, "ucrit") or f.result(x.fish_id, "ucrit_set") for x in fish)
        add(SWIM, "S5", "Analysis", "Ucrit formula and the speeds it used", "stated" if have_u else "missing",
            "Brett (1964) on corrected and set speeds" if have_u else "Ucrit not computed (see flags)", "analysis.ucrit")
    else:
        add(SWIM, "S5", "Analysis", "Ucrit formula and the speeds it used", "not applicable",
            f"{p.type} protocol", "protocol.type")
    have_fit = any(getattr(f.fits(x.fish_id), "best", None) for x in fish)
    if p.type in ("endurance", "recovery"):
        add(SWIM, "S6", "Analysis", "Speed–MO2 model, its fitting and model selection", "not applicable",
            f"{p.type} protocol (one speed or none)", "protocol.type")
    else:
        add(SWIM, "S6", "Analysis", "Speed–MO2 model, its fitting and model selection", "stated" if have_fit else "missing",
            "exponential and power models, AICc" if have_fit else "no curve fitted", "analysis.fits")

    # --- ARRIVE 2.0 --------------------------------------------------------------------------------
    add(ARRIVE, "3a", "Inclusion and exclusion criteria", "Criteria for including and excluding animals and data points",
        "stated", f"slope rules (R² ≥ {st.r2_min:g}, ≥ {format_entered(st.min_points_per_phase)} readings, SE ≤ {st.slope_relative_se_max * 100:g} %) "
        "set as lab settings before analysis; phase exclusions by a person with reasons",
        "settings, exclusions[]")
    reasons = f.rejection_reasons()
    add(ARRIVE, "3b", "Inclusion and exclusion criteria", "Animals or data points not included, and why",
        "stated" if counts["total"] else "missing",
        (f"{counts['excluded']} phase(s) excluded by a person, {counts['rejected']} rejected by rules"
         + (f" ({', '.join(f'{k}: {v}' for k, v in sorted(reasons.items()))})" if reasons else "")
         if counts["total"] else "no measure phase analysed"),
        "exclusions[], analysis.measure.rejected_by")
    add(ARRIVE, "3c", "Inclusion and exclusion criteria", "Exact n in each analysis",
        "stated" if counts["total"] else "missing",
        "; ".join(f"{x.fish_id}: {f.phase_counts(x.fish_id)['used']} phases" for x in fish) if counts["total"] else "no analysis",
        "analysis.measure")
    approval = f.session.conditions.animal_care_approval.strip()
    add(ARRIVE, "14", "Ethical statement", "Ethics committee and licence or protocol number",
        "stated" if approval else "missing",
        approval or "not recorded; enter the approving committee and protocol or licence number",
        "conditions.animal_care_approval")
    add(ARRIVE, "16a", "Animal care and monitoring", "Steps taken to reduce pain, suffering and distress", "stated",
        f"oxygen floor {format_entered(st.oxygen_floor_pct_air_sat, '%')}, at most {format_entered(st.max_time_at_exhaustion_s, 's')} "
        f"at exhaustion, at most {format_entered(st.max_temperature_change_c, '°C')} change from acclimation",
        "settings.oxygen_floor_pct_air_sat, settings.max_time_at_exhaustion_s, settings.max_temperature_change_c")
    adverse = f.events("adverse_event", "impingement")
    add(ARRIVE, "16b", "Animal care and monitoring", "Expected or unexpected adverse events", "stated",
        (f"{_n(len(adverse), 'event')}: " + "; ".join(f"{e.kind.replace('_', ' ')} at {_duration(e.time_s)}"
                                                       + (f" ({e.description})" if e.description else "") for e in adverse))
        if adverse else "none recorded in the event log",
        "events[] (kinds adverse_event, impingement)")
    fc = p.fatigue_criterion
    if p.type == "recovery":
        add(ARRIVE, "16c", "Animal care and monitoring", "Humane endpoints, signs monitored, frequency",
            "stated", f"welfare limits above; events logged: {len(s.events)}", "settings, events[]")
    else:
        monitored = sorted({e.kind.replace("_", " ") for e in s.events if e.kind not in ("note",)})
        add(ARRIVE, "16c", "Animal care and monitoring", "Humane endpoints, signs monitored, frequency",
            "stated" if fc.description else "missing",
            (f"endpoint: fatigue — {fc.description}" if fc.description else "no fatigue criterion")
            + (f"; signs logged: {_join(monitored)}" if monitored else "; no signs logged")
            + "; monitoring frequency not recorded",
            "protocol.fatigue_criterion, settings.max_time_at_exhaustion_s, events[]")
    return pd.DataFrame(rows, columns=CHECKLIST_COLUMNS)


# =================================================================================================
# Animal care, approval and audit
# =================================================================================================


def animal_care_statement(session: Session, analysis: Any) -> list[str]:
    """Return the animal-care statement: it defers to the approved protocol and local rules."""
    f = analysis if isinstance(analysis, _Facts) else _Facts(session, analysis)
    st = f.settings
    lines = [
        ("Swim-tunnel trials are experiments on live animals. They must follow the protocol approved by the "
         "institution's animal-care committee and local law, and be run by people trained and licensed as those "
         "rules require."
         + (f" This trial was recorded as covered by: {session.conditions.animal_care_approval.strip()}."
            if session.conditions.animal_care_approval.strip()
            else " No animal-care approval reference was recorded for this trial.")),
        (f"Welfare limits recorded for this session: oxygen floor {format_entered(st.oxygen_floor_pct_air_sat, '%')} air "
         f"saturation; at most {format_entered(st.max_time_at_exhaustion_s, 's')} held against the rear grid after fatigue "
         f"before the flow is reduced; at most {format_entered(st.max_temperature_change_c, '°C')} change from the "
         "acclimation temperature. An impinged fish is released at once by reducing the flow. These are lab settings "
         "and reminders, not approval: the approved protocol and local rules decide, and the numbers in this report "
         "do not replace them."),
    ]
    observed = []
    welfare = f.flags[f.flags["welfare"].fillna(False).astype(bool)] if not f.flags.empty else f.flags
    if len(welfare):
        counts = welfare["code"].value_counts()
        observed.append("welfare flags raised: " + ", ".join(f"{checks.RULES[c].title.lower()} ({n})" if c in checks.RULES
                                                             else f"{c} ({n})" for c, n in counts.items()))
    accl = session.conditions.acclimation_temperature_c
    if accl is not None:
        change = abs(session.water.temperature_c - accl)
        if change > st.max_temperature_change_c:
            observed.append(f"the trial temperature differed from acclimation by {format_quantity(change, '°C')}, "
                            f"above the {format_entered(st.max_temperature_change_c, '°C')} limit")
    adverse = f.events("adverse_event", "impingement")
    if adverse:
        observed.append(_n(len(adverse), "adverse event or impingement", "adverse events or impingements")
                        + " recorded in the event log (listed under Flags and exclusions)")
    lines.append(("In this session: " + "; ".join(observed) + ".") if observed
                 else "In this session no welfare flag was raised and no adverse event was recorded.")
    return lines


_AUDIT_COLUMNS = {
    "who": ("who", "user", "actor", "by", "person", "username"),
    "when": ("when", "at", "timestamp", "time", "created_at", "datetime"),
    "what": ("what", "action", "event", "kind", "change"),
    "why": ("why", "reason", "comment", "note"),
}


def _audit_columns(audit: pd.DataFrame) -> dict[str, str]:
    lower = {str(c).lower(): c for c in audit.columns}
    found = {}
    for role, names in _AUDIT_COLUMNS.items():
        for name in names:
            if name in lower:
                found[role] = lower[name]
                break
    return found


def _status_dict(status: Any) -> dict[str, Any]:
    if status is None:
        return {}
    if isinstance(status, str):
        return {"status": status}
    if isinstance(status, Mapping):
        return dict(status)
    data = {k: getattr(status, k) for k in ("status", "by", "at", "comment") if hasattr(status, k)}
    # the lab book's StoredSession: status with the last change's person and time
    for source, target in (("updated_by", "last_by"), ("updated_at", "last_at"), ("return_comment", "comment")):
        if getattr(status, source, None):
            data.setdefault(target, getattr(status, source))
    if "status" not in data:
        raise InputError(f"status must be a word, a mapping or a record with .status; got {type(status).__name__}",
                         field="status")
    return data


def _approval_blocks(session: Session, status: Any, audit: pd.DataFrame | None) -> tuple[list[dict], pd.DataFrame | None]:
    blocks: list[dict] = []
    st = _status_dict(status)
    word = st.get("status")
    if word is None:
        blocks.append(_box("warning", "Sign-off", ["The session's sign-off status was not given to the report; the record "
                                                    "may not be final."]))
    else:
        line = f"Status: {word}"
        by = st.get("by") or st.get("approved_by")
        at = st.get("at") or st.get("approved_at")
        if by:
            line += f", by {by}"
        if at:
            line += f", at {_when(at)}"
        if st.get("last_by") or st.get("last_at"):
            line += (" (last change" + (f" by {st['last_by']}" if st.get("last_by") else "")
                     + (f" at {_when(st['last_at'])}" if st.get("last_at") else "") + ")")
        if st.get("comment"):
            line += f" — “{st['comment']}”"
        style = "info" if word == "approved" else "warning"
        lines = [line + "."]
        if word != "approved":
            lines.append("The session is not approved; its numbers are not final.")
        blocks.append(_box(style, "Sign-off", lines))
    table = None
    if audit is not None:
        if not isinstance(audit, pd.DataFrame):
            raise InputError(f"audit must be the lab book's audit trail as a DataFrame; got {type(audit).__name__}",
                             field="audit")
        cols = _audit_columns(audit)
        if audit.empty:
            blocks.append({"kind": "p", "text": "The audit trail holds no entry for this session."})
        else:
            order = audit.sort_values(cols["when"], kind="stable") if "when" in cols else audit
            first = order.iloc[0]
            summary = [f"The audit trail holds {_n(len(order), 'entry', 'entries')}."]
            if "who" in cols:
                summary.append(f"First entry by {first[cols['who']]}"
                               + (f" at {_when(first[cols['when']])}" if "when" in cols else "") + ".")
                people = sorted({str(x) for x in order[cols["who"]].dropna()})
                summary.append(f"People who changed the record: {_join(people)}.")
            if "what" in cols:
                what = order[cols["what"]].astype(str).str.lower()
                approvals = order[what.str.contains("approv")]
                if len(approvals):
                    last = approvals.iloc[-1]
                    summary.append("Approved" + (f" by {last[cols['who']]}" if "who" in cols else "")
                                   + (f" at {_when(last[cols['when']])}" if "when" in cols else "") + ".")
            blocks.append({"kind": "p", "text": " ".join(summary)})
            shown = [cols[k] for k in ("when", "who", "what", "why") if k in cols] or list(audit.columns)[:4]
            table = order[shown]
    else:
        blocks.append({"kind": "p", "text": "No audit trail was given to the report."})
    entered = [x for x in (f"operator {session.operator}" if session.operator else "",
                           f"trial date {session.trial_date.isoformat()}" if session.trial_date else "") if x]
    if entered:
        blocks.append({"kind": "p", "text": "Recorded in the session: " + _join(entered) + "."})
    return blocks, table


def _when(value: Any) -> str:
    if isinstance(value, dt.datetime):
        return value.strftime("%Y-%m-%d %H:%M")
    if isinstance(value, pd.Timestamp):
        return value.strftime("%Y-%m-%d %H:%M")
    return str(value)


# =================================================================================================
# Tables
# =================================================================================================

QUANTITY_LABELS = {
    "ucrit": "Ucrit",
    "ucrit_bl": "Ucrit",
    "ucrit_set": "Ucrit (set speed)",
    "smr": "SMR (extrapolated)",
    "smr_quantile": "SMR (low quantile)",
    "smr_mlnd": "SMR (MLND)",
    "mmr": "MMR",
    "aas": "Absolute aerobic scope",
    "fas": "Factorial aerobic scope",
    "uopt": "Uopt",
    "uopt_bl": "Uopt",
    "cotmin": "COTmin",
}


def _fits_table(f: _Facts) -> pd.DataFrame:
    rows = []
    for fid in f.fish_ids:
        fits = f.fits(fid)
        if fits is None:
            continue
        for model in ("exponential", "power"):
            fit = getattr(fits, model, None)
            if fit is None:
                continue
            for name, value in fit.params.items():
                ci = (fit.ci95 or {}).get(name, (np.nan, np.nan))
                rows.append({
                    "fish_id": fid, "model": model, "chosen": fits.best == model, "parameter": name,
                    "value": value, "se": (fit.se or {}).get(name, np.nan), "ci_low": ci[0], "ci_high": ci[1],
                    "ci_method": fit.ci_method, "aicc": fit.aicc, "n": fit.n,
                    "delta_aicc_power_minus_exponential": getattr(fits, "delta_aicc", None),
                    "poorly_constrained": bool(f.poorly_constrained(fid) & {model, ""}),
                })
    return pd.DataFrame(rows, columns=["fish_id", "model", "chosen", "parameter", "value", "se", "ci_low", "ci_high",
                                       "ci_method", "aicc", "n", "delta_aicc_power_minus_exponential",
                                       "poorly_constrained"])


def _exclusions_table(f: _Facts) -> pd.DataFrame:
    rows = []
    chambers = {fish.chamber: fish.fish_id for fish in f.session.fish}
    for e in f.session.exclusions:
        rows.append({"fish_id": chambers.get(e.channel, ""), "channel": e.channel, "cycle": e.cycle,
                     "by_rule_or_person": f"person{(' (' + e.by + ')') if e.by else ''}", "reason": e.reason,
                     "at": e.at.isoformat() if e.at else ""})
    m = f.measure
    if not m.empty:
        rejected = m[~_bool_col(m, "used", True) & ~_bool_col(m, "excluded", False)]
        for _, r in rejected.iterrows():
            why = r.get("rejected_by", "")
            why = ", ".join(map(str, why)) if isinstance(why, list | tuple) else str(why if not _is_missing(why) else "")
            rows.append({"fish_id": r.get("fish_id", chambers.get(r.get("channel"), "")), "channel": r.get("channel", ""),
                         "cycle": r.get("cycle", ""), "by_rule_or_person": "rule", "reason": why or "not accepted",
                         "at": ""})
    return pd.DataFrame(rows, columns=["fish_id", "channel", "cycle", "by_rule_or_person", "reason", "at"])


def _events_table(session: Session) -> pd.DataFrame:
    return pd.DataFrame([e.model_dump() for e in session.events],
                        columns=["time_s", "kind", "fish_id", "description", "count"])


def _tables(f: _Facts, checklist: pd.DataFrame, audit: pd.DataFrame | None) -> dict[str, pd.DataFrame]:
    out = {
        "fish": f.fish_table.copy(),
        "steps": f.steps.copy(),
        "results": f.results.copy(),
        "fits": _fits_table(f),
        "phases": f.measure.copy(),
        "flags": f.flags.copy(),
        "exclusions": _exclusions_table(f),
        "events": _events_table(f.session),
        "checklist": checklist.copy(),
    }
    if f.protocol is not None and (not f.protocol.results.empty or f.protocol.problems):
        out["protocol_results"] = _protocol_results_table(f)
        for name, frame in f.protocol.tables.items():
            out[f"protocol_{name}"] = frame.copy()
        if f.protocol.problems:
            out["protocol_problems"] = pd.DataFrame(
                [{"part": x.part, "fish_id": x.fish_id, "field": x.field, "message": x.message} for x in f.protocol.problems],
                columns=["part", "fish_id", "field", "message"])
    if audit is not None:
        out["audit"] = audit.copy()
    return out


def _display(frame: pd.DataFrame, columns: Sequence[tuple[str, str, Any]], caption: str, *, style: str = "",
             note: str = "", state_columns: Sequence[str] = (), severity_columns: Sequence[str] = (),
             nowrap: Sequence[str] = ()) -> dict:
    """A table block: ``columns`` are (header, source column or callable(row), formatter or None)."""
    headers = [c[0] for c in columns]
    numeric = {c[0] for c in columns if c[2] is not None and c[2] is not str}
    rows = []
    for _, row in frame.iterrows():
        cells = []
        for _, source, fmt in columns:
            value = source(row) if callable(source) else row.get(source)
            if fmt is None or fmt is str:
                cells.append("" if _is_missing(value) else str(value))
            else:
                cells.append(fmt(value))
        rows.append(cells)
    return {"kind": "table", "caption": caption, "columns": headers, "rows": rows, "numeric": numeric,
            "style": style, "note": note, "state_columns": set(state_columns), "severity_columns": set(severity_columns),
            "nowrap": set(nowrap)}


def _num(sig: int = 3):
    def fmt(value):
        return format_number(value, sig) if not isinstance(value, str) else value
    return fmt


def _int_fmt(value):
    return EM_DASH if _is_missing(value) else str(int(value))


def _box(style: str, label: str, lines: Sequence[str]) -> dict:
    return {"kind": "box", "style": style, "label": label, "lines": list(lines)}


def _list(entries: Sequence[str], style: str = "") -> dict:
    return {"kind": "list", "style": style, "entries": list(entries)}


# =================================================================================================
# Figures
# =================================================================================================


@dataclass
class ReportFigure:
    """One figure of a report and its caption; the plotly figure is built when first asked for.

    :attr:`figure` is the print-ready plotly figure, or None when it could not be built; then
    :attr:`error` says why.
    """

    name: str
    label: str
    caption: str
    builder: Any = field(default=None, repr=False)
    height_px: int = 360
    _built: bool = field(default=False, repr=False)
    _figure: Any = field(default=None, repr=False)
    _error: str | None = field(default=None, repr=False)

    def _ensure(self) -> None:
        if self._built:
            return
        self._built = True
        try:
            fig = self.builder() if self.builder is not None else None
        except Exception as exc:  # noqa: BLE001 — a figure that cannot be built is shown as a box saying why
            self._error = f"the figure could not be built ({type(exc).__name__}: {exc})"
            return
        if fig is None:
            self._error = "there are no data to draw"
            return
        _print_axis_titles(fig)
        self._figure = _for_print(fig, self.height_px)

    @property
    def figure(self) -> Any:
        self._ensure()
        return self._figure

    @property
    def error(self) -> str | None:
        self._ensure()
        return self._error


def _for_print(fig: Any, height: int) -> Any:
    fig.update_layout(
        title={"text": ""}, template="plotly_white", width=_PRINT_WIDTH_PX, height=height,
        font={"family": _FONT, "size": 12, "color": "#111"},
        margin={"l": 66, "r": 14, "t": 10, "b": 46, "autoexpand": True},
        legend={"orientation": "h", "x": 0, "xanchor": "left", "y": 1.02, "yanchor": "bottom",
                "font": {"size": 10.5}, "bgcolor": "rgba(255,255,255,0)"},
        paper_bgcolor="white", plot_bgcolor="white",
    )
    fig.update_xaxes(showline=True, linecolor="#333", ticks="outside", gridcolor="#e6e6e6", title_font={"size": 12})
    fig.update_yaxes(showline=True, linecolor="#333", ticks="outside", gridcolor="#e6e6e6", title_font={"size": 12})
    return fig


_PRINT_AXIS_TITLES = {
    "MO2 [mg O2/kg/h]": "MO₂ [mg O₂ kg⁻¹ h⁻¹]",
    "Cost of transport [mg O2/kg/km]": "Cost of transport [mg O₂ kg⁻¹ km⁻¹]",
}


def _print_axis_titles(fig: Any) -> None:
    for axis in ("xaxis", "yaxis"):
        title = getattr(getattr(fig.layout, axis), "title", None)
        text = getattr(title, "text", None)
        if text in _PRINT_AXIS_TITLES:
            fig.layout[axis].title.text = _PRINT_AXIS_TITLES[text]


def _build(name: str, label: str, caption: str, builder, height: int) -> ReportFigure:
    return ReportFigure(name, label, caption, builder, height)


def _session_figures(f: _Facts, number_from: int = 1) -> list[ReportFigure]:
    from swimlab import plots

    figs: list[ReportFigure] = []
    n = number_from
    t = f.trace_time()
    conc = f.analysis.concentration or {}
    floor_mg = f.mg_l_from_percent(f.settings.oxygen_floor_pct_air_sat)

    def trace():
        if t is None or not conc:
            return None
        series = {ch: np.asarray(v, dtype=float) for ch, v in conc.items()}
        return plots.trace_figure(t, series, unit="mg/L", phases=f.phases, measure=f.measure, floor=floor_mg,
                                  max_points=1500)

    figs.append(_build(
        "trace", f"Figure {n}",
        "Oxygen over the trial in each chamber, with flush (blue), wait (grey) and measure (amber) phases shaded; "
        "fitted slopes of accepted phases are solid, those rejected or excluded dotted; the dashed line is the oxygen "
        f"floor ({format_entered(f.settings.oxygen_floor_pct_air_sat, '%')} air saturation"
        + (f", {format_quantity(floor_mg, 'mg/L')}" if floor_mg is not None else "") + ").",
        trace, 340))
    n += 1
    for fid in f.fish_ids:
        fits = f.fits(fid)
        own_steps = f.steps[f.steps["fish_id"].astype(str) == str(fid)] if not f.steps.empty else f.steps
        if own_steps.empty or not own_steps["mo2_mg_kg_h"].notna().any():
            continue  # no MO2 at any speed: nothing to draw against speed
        best = getattr(fits, "best", None)
        cap = (f"Fish {fid}: MO₂ of single accepted phases (grey) and step means ± SD (black) against blocking-corrected "
               "speed, with the exponential (solid) and power (dashed) fits and their 95 % bands")
        cap += f"; the {best} model was chosen by AICc." if best else "; no curve could be fitted."
        if f.chosen_fit_poor(fid):
            cap += " The chosen fit is poorly constrained: its curve and the values taken from it are uncertain."
        other = sorted(f.poorly_constrained(fid) - {best, ""})
        if other:
            cap += f" The {_join(other)} fit is poorly constrained and was not chosen."
        figs.append(_build(f"mo2_speed_{fid}", f"Figure {n}", cap,
                           lambda fid=fid, fits=fits: _mo2_speed_for_print(f, fid, fits), 330))
        n += 1
        has_cot = "cot_gross_mg_kg_km" in own_steps and own_steps["cot_gross_mg_kg_km"].notna().any()
        if has_cot:
            uopt = f.result(fid, "uopt")
            cap = f"Fish {fid}: gross (solid) and net (dotted) cost of transport against blocking-corrected speed"
            if uopt is not None:
                cap += f"; the dashed line marks Uopt, {format_quantity(uopt['value'], uopt['unit'])}"
                if _uopt_outside(f, fid):
                    cap += ", which lies outside the tested speeds and is an extrapolation of the fitted curve"
            cap += "."
            figs.append(_build(f"cot_speed_{fid}", f"Figure {n}", cap,
                               lambda fid=fid: plots.cot_figure(f.steps, f.results, fid), 300))
            n += 1
    return figs


def _mo2_speed_for_print(f: _Facts, fid: str, fits: Any) -> Any:
    """The MO2–speed figure of swimlab.plots with its MO2 axis held to the data.

    A wide band of a poorly constrained fit would otherwise set the axis and flatten the data;
    the axis ends 30 % above the highest MO2 measured (step mean + SD or a single phase).
    """
    from swimlab import plots

    fig = plots.speed_mo2_figure(f.steps, fits, fid, measure=f.measure)
    own = f.steps[f.steps["fish_id"].astype(str) == str(fid)]
    tops = [own["mo2_mg_kg_h"] + own["mo2_sd_mg_kg_h"].fillna(0)] if "mo2_sd_mg_kg_h" in own else [own["mo2_mg_kg_h"]]
    m = f.measure
    if not m.empty and {"fish_id", "mo2_mg_kg_h"} <= set(m.columns):
        tops.append(m.loc[(m["fish_id"].astype(str) == str(fid)) & _bool_col(m, "used", True), "mo2_mg_kg_h"])
    values = pd.concat(tops).to_numpy(dtype=float)
    values = values[np.isfinite(values)]
    if values.size:
        fig.update_yaxes(range=[0.0, 1.3 * float(values.max())], rangemode=None)
    return fig


def _uopt_outside(f: _Facts, fid: str) -> bool:
    row = f.result(fid, "uopt")
    if row is not None and "outside" in str(row.get("note", "")):
        return True
    return f.has_flag("UOPT_OUTSIDE_TESTED", fid)


def browser_path() -> str | None:
    """The Chromium kaleido uses: ``BROWSER_PATH`` if set, else the first Chromium on the PATH."""
    env = os.environ.get("BROWSER_PATH")
    if env:
        return env
    for name in ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable", "chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


def render_svgs(figures: Sequence[Any], *, timeout_s: float = 90.0) -> list[tuple[str | None, str | None]]:
    """Export plotly figures to SVG text in one browser session; return (svg, error) per figure.

    Uses kaleido 1.x (which drives Chromium through the DevTools protocol) with MathJax off, so
    nothing is fetched from the network. A figure that fails gets its error and no SVG; the
    others are still rendered. Runs in a thread of its own so that it also works where an event
    loop is already running.
    """
    figures = list(figures)
    if not figures:
        return []
    try:
        import kaleido
    except ImportError as exc:
        return [(None, f"kaleido is not installed ({exc})")] * len(figures)
    path = browser_path()
    if path is None:
        return [(None, "no Chromium was found for kaleido (install Debian's chromium or set BROWSER_PATH)")] * len(figures)

    async def run():
        out: list[tuple[str | None, str | None]] = []
        async with kaleido.Kaleido(n=1, timeout=timeout_s, mathjax=False, path=path) as k:
            for fig in figures:
                try:
                    layout = fig.layout
                    data = await k.calc_fig(fig.to_dict(), opts={"format": "svg", "width": layout.width or _PRINT_WIDTH_PX,
                                                                 "height": layout.height or 360})
                    out.append((_clean_svg(data.decode("utf-8")), None))
                except Exception as exc:  # noqa: BLE001 — one figure's failure is shown in its own box
                    out.append((None, f"{type(exc).__name__}: {exc}"))
        return out

    box: dict[str, Any] = {}

    def target():
        try:
            box["value"] = asyncio.run(run())
        except BaseException as exc:  # noqa: BLE001 — reported in every figure's box
            box["error"] = exc

    thread = threading.Thread(target=target, name="swimlab-report-figures", daemon=True)
    thread.start()
    thread.join(timeout_s * (len(figures) + 1))
    if thread.is_alive():
        return [(None, f"figure export did not finish within {timeout_s * (len(figures) + 1):.0f} s")] * len(figures)
    if "error" in box:
        exc = box["error"]
        return [(None, f"figure export failed ({type(exc).__name__}: {exc})")] * len(figures)
    return box["value"]


def _svg_img(svg: str, alt: str) -> Markup:
    import base64
    import html as html_lib

    data = base64.b64encode(svg.encode("utf-8")).decode("ascii")
    return Markup(f'<img class="figure-image" alt="{html_lib.escape(alt)}" src="data:image/svg+xml;base64,{data}">')


def _clean_svg(svg: str) -> str:
    svg = re.sub(r"^<\?xml[^>]*>\s*", "", svg.strip())
    return svg


# =================================================================================================
# The report
# =================================================================================================


@dataclass
class Report:
    """A rendered-on-demand report.

    Attributes
    ----------
    kind
        ``"session"`` or ``"study"``.
    title
        The report's title.
    meta
        (label, value) pairs shown under the title.
    sections
        Sections in order: dicts with ``key``, ``heading`` and ``blocks``.
    figures
        The report's figures by name.
    table_data
        CSV-ready tables (see :meth:`tables`).
    checklist
        The reporting checklist (see :func:`reporting_checklist`); for a study, one row per item
        with the count of sessions in each state.
    """

    kind: str
    title: str
    meta: list[tuple[str, str]]
    sections: list[dict]
    figures: dict[str, ReportFigure]
    table_data: dict[str, pd.DataFrame]
    checklist: pd.DataFrame
    _svgs: dict[str, tuple[str | None, str | None]] | None = field(default=None, repr=False)

    # --- figures -----------------------------------------------------------------------------------
    def render_figures(self) -> dict[str, tuple[str | None, str | None]]:
        """Export every figure to SVG once (cached); return name → (svg, error)."""
        if self._svgs is None:
            todo = [f for f in self.figures.values() if f.figure is not None]
            rendered = dict(zip([f.name for f in todo], render_svgs([f.figure for f in todo]), strict=True))
            self._svgs = {name: rendered.get(name, (None, fig.error)) for name, fig in self.figures.items()}
        return self._svgs

    @property
    def figure_problems(self) -> list[str]:
        """Figures that could not be built or rendered, with the reason (renders the figures)."""
        return [f"{self.figures[name].label} ({name}): {err}" for name, (svg, err) in self.render_figures().items()
                if svg is None]

    # --- outputs -----------------------------------------------------------------------------------
    def tables(self) -> dict[str, pd.DataFrame]:
        """Return the report's tables (copies), ready for ``DataFrame.to_csv``.

        Numbers are unrounded, with units in the column names or a ``unit`` column.
        """
        return {name: frame.copy() for name, frame in self.table_data.items()}

    def html(self, *, page_size: str = "A4", figures: bool = True, svg_as_image: bool = False) -> str:
        """Return the report as one self-contained HTML document.

        Parameters
        ----------
        page_size
            ``"A4"`` or ``"Letter"``, for printing. [-]
        figures
            Whether to render the figures (False leaves a box in their place; quicker).
        svg_as_image
            Embed each figure as an ``<img>`` with a ``data:`` URL holding its SVG instead of
            inline ``<svg>`` (what :meth:`pdf` uses: WeasyPrint then draws it with its SVG
            renderer rather than reading the figure's style attributes as page CSS).
        """
        size = _page_size(page_size)
        svgs = self.render_figures() if figures else {
            name: (None, "figures were left out of this copy") for name in self.figures}
        sections = []
        for section in self.sections:
            blocks = []
            for block in section["blocks"]:
                if block["kind"] == "figure":
                    fig = self.figures[block["name"]]
                    svg, err = svgs[fig.name]
                    if svg is not None and svg_as_image:
                        svg = _svg_img(svg, fig.caption)
                    blocks.append({**block, "label": fig.label, "caption": fig.caption, "svg": svg, "error": err})
                else:
                    blocks.append(block)
            sections.append({**section, "blocks": blocks})
        env = _jinja_env()
        template = env.get_template("report.html.j2")
        return template.render(
            title=self.title, meta=self.meta, sections=sections, css=(_TEMPLATES / "report.css").read_text("utf-8"),
            page_size=size, generator=f"swimlab {__version__}",
            footer=(f"Generated by swimlab {__version__} on {dt.date.today().isoformat()} from the recorded session"
                    f"{'s' if self.kind == 'study' else ''} and {'their analyses' if self.kind == 'study' else 'its analysis'}. "
                    "Check every value against the record before publication."),
        )

    def pdf(self, *, page_size: str = "A4", figures: bool = True) -> bytes:
        """Return the report printed to PDF by WeasyPrint (``page_size`` ``"A4"`` or ``"Letter"``).

        ``figures=False`` leaves a box in each figure's place (quicker, for drafts).

        Nothing is fetched while printing: the document is self-contained and the URL fetcher
        accepts only ``data:`` URLs.
        """
        import weasyprint
        from weasyprint.urls import URLFetcher

        html = self.html(page_size=page_size, figures=figures, svg_as_image=True)
        fetcher = URLFetcher(allowed_protocols=("data",))
        return weasyprint.HTML(string=html, url_fetcher=fetcher).write_pdf()


def _page_size(page_size: str) -> str:
    if page_size not in PAGE_SIZES:
        raise ValueError(f"unknown page_size {page_size!r}; valid choices are {sorted(PAGE_SIZES)}")
    return PAGE_SIZES[page_size]


_ENV = None


def _jinja_env():
    global _ENV
    if _ENV is None:
        import jinja2

        _ENV = jinja2.Environment(
            loader=jinja2.FileSystemLoader(str(_TEMPLATES)),
            autoescape=jinja2.select_autoescape(["html", "j2"]),
            trim_blocks=True, lstrip_blocks=True, undefined=jinja2.StrictUndefined,
        )
    return _ENV


# =================================================================================================
# Protocol results (ramp, endurance, repeat swim, recovery, gait, kinematics)
# =================================================================================================

PROTOCOL_SOURCES = {
    "ramp": "Farrell 2008",
    "endurance": "Kaplan & Meier 1958; Tobin 1958",
    "repeat": "Jain et al. 1998",
    "recovery": "Lee et al. 2003",
    "gait": "Drucker & Jensen 1996",
    "kinematics": "Bainbridge 1958; Taylor et al. 2003",
    "group": "Herskin & Steffensen 1998; Zhang & Lauder 2023",
}
"""References of each protocol part (keys of :data:`REFERENCES`)."""


def _protocol_results_table(f: _Facts) -> pd.DataFrame:
    pr = f.protocol
    if pr is None or pr.results.empty:
        from swimlab.protocol_analysis import PROTOCOL_RESULT_COLUMNS

        return pd.DataFrame(columns=PROTOCOL_RESULT_COLUMNS)
    return pr.results.copy()


def _presult(f: _Facts, fish_id: str, quantity: str) -> dict[str, Any] | None:
    pr = f.protocol
    if pr is None or pr.results.empty:
        return None
    r = pr.results
    hit = r[(r["fish_id"].astype(str) == str(fish_id)) & (r["quantity"] == quantity)]
    if hit.empty or _is_missing(hit["value"].iloc[0]):
        return None
    return hit.iloc[0].to_dict()


def _q(f: _Facts, fish_id: str, quantity: str, sig: int = 3) -> str | None:
    r = _presult(f, fish_id, quantity)
    return None if r is None else format_quantity(r["value"], r["unit"], sig)


def _protocol_sentences(f: _Facts) -> dict[str, list[str]]:
    """Result sentences of each protocol part, each naming its protocol."""
    pr = f.protocol
    out: dict[str, list[str]] = {}
    if pr is None:
        return out
    p = f.session.protocol
    for fid in f.fish_ids:
        if fid in pr.ramp:
            txt = f"Fish {fid}: the ramp Umax was {_q(f, fid, 'ramp_umax_set')} on set speed"
            if _q(f, fid, "ramp_umax"):
                txt += f" and {_q(f, fid, 'ramp_umax')} ({_q(f, fid, 'ramp_umax_bl')}) on blocking-corrected speed"
            txt += (f", reached {_q(f, fid, 'ramp_time_to_fatigue')} after the ramp began at "
                    f"{format_entered(p.ramp_rate_cm_s_per_min, 'cm/s')} per min. It is a ramp result and not comparable "
                    "with a step-test Ucrit.")
            out.setdefault("ramp", []).append(txt)
        if fid in pr.endurance:
            o = pr.endurance[fid]
            speed = _q(f, fid, "endurance_speed")
            at = format_entered(p.set_speed_cm_s, "cm/s") + (f" ({speed} corrected)" if speed else "")
            txt = (f"Fish {fid} swam {_q(f, fid, 'endurance_time')} at {at} before fatigue." if o.fatigued else
                   f"Fish {fid} was still swimming at {at} when the {format_entered(p.time_limit_min, 'min')} limit ended: "
                   "its endurance time is censored (a lower bound).")
            out.setdefault("endurance", []).append(txt)
        if fid in pr.repeat:
            rr = pr.repeat[fid]
            out.setdefault("repeat", []).append(
                f"Fish {fid}: the repeat-swim recovery ratio Ucrit₂ / Ucrit₁ was {format_number(rr.ratio)} "
                + (f"(95 % measurement interval {format_range(rr.ci_low, rr.ci_high)}, Fieller 1954) "
                   if rr.ci_low is not None else "")
                + f"(second swim {_q(f, fid, 'repeat_ucrit_second')}"
                + (f" after {format_entered(p.rest_interval_min, 'min')} of rest" if p.rest_interval_min is not None else "")
                + f"; first swim {_q(f, fid, 'repeat_ucrit_first')}, session {pr.first_swim_session_id}).")
        if fid in pr.recovery:
            res = pr.recovery[fid]
            parts = []
            if res.epoc_fit_mg_kg is not None:
                parts.append(f"the EPOC was {_q(f, fid, 'recovery_epoc_fit')} from the fitted "
                             f"{res.model.replace('_', '-')} decay and {_q(f, fid, 'recovery_epoc_trapezoid')} by "
                             "trapezoids over the recorded span")
                parts.append(f"recovery to 50 % took {_q(f, fid, 'recovery_t50', 2)} and to 95 % "
                             f"{_q(f, fid, 'recovery_t95', 3)}")
            else:
                parts.append(f"the EPOC was {_q(f, fid, 'recovery_epoc_trapezoid')} by trapezoids over the recorded span "
                             "(no decay could be fitted)")
            base = _presult(f, fid, "recovery_baseline")
            parts.append(f"the baseline was {format_quantity(base['value'], base['unit'])} ({base['method']})")
            if _q(f, fid, "recovery_total_o2_cost"):
                parts.append(f"the total oxygen cost (aerobic + EPOC) was {_q(f, fid, 'recovery_total_o2_cost')} and the "
                             f"cost of transport including EPOC {_q(f, fid, 'recovery_cot_total')}")
            out.setdefault("recovery", []).append(f"Fish {fid}: " + "; ".join(parts) + ".")
        if fid in pr.gait:
            parts = []
            if _q(f, fid, "gait_upc"):
                share = _presult(f, fid, "gait_upc_share_ucrit")
                parts.append(f"the pectoral–caudal gait transition Up–c was at {_q(f, fid, 'gait_upc')}"
                             + (f" ({format_quantity(share['value'] * 100, '%', 2)} of Ucrit)" if share else ""))
            if _q(f, fid, "gait_burst_onset"):
                parts.append(f"burst-and-coast swimming began at {_q(f, fid, 'gait_burst_onset')}")
            if parts:
                out.setdefault("gait", []).append(f"Fish {fid}: " + "; ".join(parts) + ".")
        if fid in pr.kinematics:
            line = pr.kinematics[fid].line
            if line is not None:
                out.setdefault("kinematics", []).append(
                    f"Fish {fid}: tail-beat frequency rose with speed as f = {format_number(line.intercept_hz)} Hz + "
                    f"{format_number(line.slope_hz_per_m_s * 0.01)} Hz per cm/s × U (R² {format_number(line.r2, 3)}, "
                    f"{_n(line.n, 'record')}); the stride length it implies is "
                    f"{_q(f, fid, 'kinematics_stride_length_line')}.")
    return out


_PART_TABLES: dict[str, tuple[str, list[tuple[str, Any, Any]], str]] = {
    "ramp": ("ramp_phases", [
        ("Fish", "fish_id", str), ("Cycle", "cycle", _int_fmt),
        ("On the ramp\n[min]", lambda r: r["time_from_ramp_start_s"] / 60.0, _num()),
        ("U set\n[cm/s]", "set_speed_cm_s", _num()), ("U corrected\n[cm/s]", "corrected_speed_cm_s", _num()),
        ("MO₂", "mo2_mg_kg_h", _num()), ("Used", lambda r: "yes" if r["used"] else "no", str)],
        "Ramp test: MO₂ [mg O₂ kg⁻¹ h⁻¹] of each measure phase on the ramp, at the speed of its mid-time."),
    "endurance": ("endurance", [
        ("Fish", "fish_id", str), ("U set\n[cm/s]", "set_speed_cm_s", _num()),
        ("U corrected\n[cm/s]", "corrected_speed_cm_s", _num()), ("Time\n[min]", "time_min", _num()),
        ("Outcome", lambda r: "fatigued" if r["fatigued"] else "censored (still swimming)", str),
        ("Limit\n[min]", "time_limit_min", format_entered), ("Fatigue from", "fatigue_from", str)],
        "Fixed-speed endurance: time at the set speed; a censored time is the limit, a lower bound."),
    "recovery": ("recovery_curve", [
        ("Fish", "fish_id", str), ("Cycle", "cycle", _int_fmt),
        ("After exhaustion\n[min]", "time_after_exhaustion_min", _num()), ("MO₂", "mo2_mg_kg_h", _num()),
        ("Baseline", "baseline_mg_kg_h", _num()), ("Excess", "excess_mg_kg_h", _num())],
        "Post-exercise recovery (EPOC): MO₂ of each accepted phase after exhaustion, the baseline and the excess "
        "over it [mg O₂ kg⁻¹ h⁻¹]."),
    "gait": ("gait_steps", [
        ("Fish", "fish_id", str), ("Step", "step", _int_fmt), ("U\n[cm/s]", "speed_cm_s", _num()),
        ("Swum\n[min]", lambda r: r["swum_s"] / 60.0, _num()), ("Bursts", "bursts", _int_fmt),
        ("Bursts\n[1/min]", "bursts_per_min", _num()), ("U / Ucrit", "share_of_ucrit", _num(2)),
        ("U / Up–c", "share_of_upc", _num(2))],
        "Gait from the event log: bursts per minute of swimming at each step (none counted after fatigue), and "
        "blocking-corrected speed as shares of Ucrit and of the gait transition speed Up–c."),
    "group": ("group_steps", [
        ("Group", "fish_id", str), ("Step", "step", _int_fmt), ("U set\n[cm/s]", "set_speed_cm_s", _num()),
        ("U corrected\n[cm/s]", "corrected_speed_cm_s", _num()), ("Fish", "n_fish", _int_fmt), ("n", "n_phases", _int_fmt),
        ("Group MO₂\n[mg O₂ h⁻¹]", "mo2_group_mg_h", _num()), ("Per fish\n[mg O₂ h⁻¹]", "mo2_per_fish_mg_h", _num()),
        ("Per kg\n[mg O₂ kg⁻¹ h⁻¹]", "mo2_per_capita_mg_kg_h", _num())],
        "Group trial: MO₂ of the group at each step (mean of the accepted phases), per fish and per kg of the summed "
        "mass. Per-capita values of fish swum together are not comparable with fish swum alone: schooling changes "
        "the cost of swimming (Herskin & Steffensen 1998; Zhang & Lauder 2023)."),
    "kinematics": ("kinematics", [
        ("Fish", "fish_id", str), ("Step", "step", _int_fmt), ("U\n[cm/s]", "speed_cm_s", _num()),
        ("Beats", "tail_beat_count", _int_fmt), ("Window\n[s]", "window_s", _num()), ("f\n[Hz]", "frequency_hz", _num()),
        ("A\n[cm]", "amplitude_cm", _num()), ("Stride\n[BL]", "stride_length_bl", _num()), ("St", "strouhal", _num(2)),
        ("Bainbridge U\n[cm/s]", "bainbridge_speed_cm_s", _num()),
        ("f ≥ 5 Hz", lambda r: "yes" if r["bainbridge_in_range"] else "no", str)],
        "Kinematics: tail-beat frequency f (count / window), peak-to-peak amplitude A, stride length U/f, Strouhal "
        "number St = f·A/U (usually 0.2–0.4 when cruising efficiently), and the speed Bainbridge's (1958) relation "
        "U = ¼ L (3f − 4) gives, which he established above 5 Hz."),
}


def _protocol_blocks(f: _Facts, figure_names: dict[str, list[str]], table_from: int) -> list[dict]:
    """Blocks of the protocol section: per part a heading, sentences, its results, its table, its figures."""
    from swimlab.protocol_analysis import PART_LABELS

    pr = f.protocol
    blocks: list[dict] = []
    if pr is None:
        return blocks
    sentences = _protocol_sentences(f)
    n = table_from
    for part in PART_LABELS:
        rows = pr.results[pr.results["part"] == part] if not pr.results.empty else pr.results
        if rows.empty and part not in figure_names:
            continue
        blocks.append({"kind": "h3", "text": PART_LABELS[part]})
        blocks += [{"kind": "p", "text": s} for s in sentences.get(part, [])]
        if not rows.empty:
            blocks.append(_display(
                rows,
                [("Fish", "fish_id", str), ("Quantity", "label", str), ("Value", "value", _num()),
                 ("95 % interval", lambda r: format_range(r.get("ci_low"), r.get("ci_high")), str),
                 ("Unit", lambda r: pretty_unit(str(r.get("unit", ""))), str), ("Method", "method", str),
                 ("Note", "note", str)],
                f"Table P{n}. {PART_LABELS[part]}: results per fish ({pr.label} session).",
                nowrap=["Fish", "Unit", "95 % interval"]))
            n += 1
        spec = _PART_TABLES.get(part)
        if spec is not None and spec[0] in pr.tables and not pr.tables[spec[0]].empty:
            blocks.append(_display(pr.tables[spec[0]], spec[1], f"Table P{n}. {spec[2]}", nowrap=["Fish"]))
            n += 1
        blocks += [{"kind": "figure", "name": name} for name in figure_names.get(part, [])]
    if pr.problems:
        blocks.append(_box("warning", "Protocol results not computed",
                           [f"{p}. Nothing was computed from it." for p in pr.problems]))
    return blocks


def _plot(name: str):
    """A protocol figure builder of :mod:`swimlab.plots` (imported when a figure is built)."""
    from swimlab import plots

    return getattr(plots, name)


def _protocol_figures(f: _Facts, number_from: int) -> tuple[list[ReportFigure], dict[str, list[str]]]:
    pr = f.protocol
    figs: list[ReportFigure] = []
    names: dict[str, list[str]] = {}
    if pr is None:
        return figs, names
    n = number_from

    def add(part: str, name: str, caption: str, builder, height: int = 320) -> None:
        nonlocal n
        figs.append(_build(name, f"Figure {n}", caption, builder, height))
        names.setdefault(part, []).append(name)
        n += 1

    for fid in f.fish_ids:
        table = pr.tables.get("ramp_phases")
        if fid in pr.ramp and table is not None and (table["fish_id"] == fid).any():
            add("ramp", f"ramp_mo2_{fid}",
                f"Ramp test, fish {fid}: MO₂ of each measure phase on the ramp against the blocking-corrected speed at its "
                "mid-time; the dashed line marks the ramp Umax (not a step-test Ucrit).",
                lambda fid=fid: _plot("ramp_mo2_figure")(pr, fid))
        if fid in pr.recovery:
            add("recovery", f"epoc_{fid}",
                f"Post-exercise recovery, fish {fid}: MO₂ after exhaustion (points), the fitted decay (line) and the "
                "baseline (dashed); the shaded area between them is the EPOC.",
                lambda fid=fid: _plot("epoc_figure")(pr, fid))
        if fid in pr.gait:
            add("gait", f"gait_{fid}",
                f"Gait, fish {fid}: bursts per minute at each step against blocking-corrected speed; the dashed line marks "
                "the pectoral–caudal gait transition speed Up–c where one was recorded.",
                lambda fid=fid: _plot("gait_figure")(pr, fid))
        if fid in pr.kinematics and pr.kinematics[fid].line is not None:
            add("kinematics", f"tail_beats_{fid}",
                f"Kinematics, fish {fid}: tail-beat frequency against blocking-corrected speed with its least-squares line "
                "(solid) and Bainbridge's (1958) relation for this fish's length (dotted).",
                lambda fid=fid: _plot("frequency_speed_figure")(pr, fid))
    return figs, names



# =================================================================================================
# Session report
# =================================================================================================


def _result_sentences(f: _Facts) -> list[str]:
    out = []
    for fid in f.fish_ids:
        parts = []
        u, ubl, uset = f.result(fid, "ucrit"), f.result(fid, "ucrit_bl"), f.result(fid, "ucrit_set")
        if u is not None:
            parts.append(f"Ucrit was {format_quantity(u['value'], u['unit'])}"
                         + (f" ({format_quantity(ubl['value'], ubl['unit'])})" if ubl else "")
                         + " on blocking-corrected speed"
                         + (f" and {format_quantity(uset['value'], uset['unit'])} on set speed" if uset else ""))
        elif uset is not None:
            parts.append(f"Ucrit was {format_quantity(uset['value'], uset['unit'])} on set speed (no corrected value)")
        elif f.step_protocol():
            parts.append("Ucrit could not be calculated (see flags)")
        fits = f.fits(fid)
        best = getattr(fits, "best", None)
        if best:
            d = getattr(fits, "delta_aicc", None)
            parts.append(f"the {best} model described MO₂ against speed best"
                         + (f" (AICc of the power model minus that of the exponential: {format_number(d, 2)})" if d is not None else ""))
            if f.chosen_fit_poor(fid):
                parts.append("this fit is poorly constrained, so SMR, Uopt and COTmin taken from it are uncertain")
            other = sorted(f.poorly_constrained(fid) - {best, ""})
            if other:
                parts.append(f"the {_join(other)} fit, not chosen, is poorly constrained")
        elif not f.steps.empty:
            parts.append("no speed–MO₂ curve could be fitted")
        for q in ("smr", "mmr", "aas", "fas"):
            r = f.result(fid, q)
            if r is not None:
                ci = (f" (95 % CI {format_range(r['ci_low'], r['ci_high'], r['unit'])})"
                      if not _is_missing(r.get("ci_low")) and not _is_missing(r.get("ci_high")) else "")
                parts.append(f"{QUANTITY_LABELS[q]} was {format_quantity(r['value'], r['unit'])}{ci}")
        uo = f.result(fid, "uopt")
        if uo is not None:
            txt = f"Uopt was {format_quantity(uo['value'], uo['unit'])}"
            cm = f.result(fid, "cotmin")
            if cm is not None:
                txt += f" with COTmin {format_quantity(cm['value'], cm['unit'])}"
            if _uopt_outside(f, fid):
                tested = _tested_speeds(f, fid)
                txt += (", but it lies outside the tested speeds" + (f" ({tested})" if tested else "")
                        + "; it is an extrapolation of the curve, not supported by the data")
            parts.append(txt)
        elif best and f.has_flag("UOPT_OUTSIDE_TESTED", fid):
            parts.append("the fitted curve gives no optimal speed within the tested speeds")
        if parts:
            text = "; ".join(parts)
            out.append(f"{f.who(fid)}: {text}.")
    return out


def _tested_speeds(f: _Facts, fid: str) -> str:
    s = f.steps
    if s.empty:
        return ""
    own = s[(s["fish_id"].astype(str) == str(fid)) & s["mo2_mg_kg_h"].notna()]
    if own.empty:
        return ""
    speed = own["corrected_speed_cm_s"].fillna(own["set_speed_cm_s"])
    return format_range(float(speed.min()), float(speed.max()), "cm/s")


def session_report(session: Session, analysis: Any, *, status: Any = None, audit: pd.DataFrame | None = None) -> Report:
    """Build the report of one session.

    Parameters
    ----------
    session
        The recorded session.
    analysis
        ``analyse(session, raw_files)`` of that session.
    status
        Its sign-off status from the lab book: a word (``"approved"``), or a mapping or record
        with ``status`` and optionally ``by``, ``at``, ``comment``.
    audit
        The lab book's audit trail of the session as a DataFrame (columns such as who / when /
        action / reason are recognised by name).

    Returns
    -------
    Report
    """
    f = _Facts(session, analysis)
    checklist = reporting_checklist(session, f)
    approval, audit_view = _approval_blocks(session, status, audit)
    figures = _session_figures(f)

    sections: list[dict] = []
    sections.append({"key": "care", "heading": "Animal care", "blocks": [_box("care", "Animal care", animal_care_statement(session, f))]})
    sections.append({"key": "methods", "heading": "Methods",
                     "blocks": [b for h, t in methods_paragraphs(session, f) for b in ({"kind": "h3", "text": h}, {"kind": "p", "text": t})]})

    results_blocks: list[dict] = []
    if session.groups:
        results_blocks.append(_box("warning", "Group trial", [
            f"{_join([g.group_id for g in session.groups])}: several fish swum together in one respirometer. The "
            "chamber's MO₂ is the group's; the values per kg and per fish are per capita. " + checks.GROUP_CAVEAT]))
    sentences = _result_sentences(f)
    if sentences:
        results_blocks += [{"kind": "p", "text": s} for s in sentences]
    elif f.protocol is not None and not f.protocol.results.empty:
        results_blocks.append({"kind": "p", "text": (
            f"This {PROTOCOL_LABELS.get(session.protocol.type, session.protocol.type)} session has no step-test "
            "result; its results are given under its protocol's name in the protocol results below.")})
    else:
        results_blocks.append({"kind": "p", "text": "No derived result is available for this session (see flags)."})
    results_blocks.append(_display(
        f.fish_table if not f.fish_table.empty else pd.DataFrame({"fish_id": f.fish_ids}),
        [("Fish", "fish_id", str), ("Chamber", "chamber", str), ("Mass\n[g]", "mass_g", format_entered),
         ("Total length\n[cm]", "total_length_cm", format_entered),
         ("Frontal area\n[cm²]", "frontal_area_cm2", _num()),
         ("Blocking\nratio [%]", lambda r: r.get("blocking_ratio") * 100 if not _is_missing(r.get("blocking_ratio")) else None, _num(2)),
         ("Volume\nratio", "volume_ratio", _num())],
        "Table 1. Fish and their geometry in the working section; the volume ratio is (respirometer − fish volume) / "
        "fish volume.", nowrap=["Fish"]))
    if not f.groups.empty:
        results_blocks.append(_display(
            f.groups,
            [("Group", "group_id", str), ("Chamber", "chamber", str), ("Fish", "fish_ids", str),
             ("Mass\n[g]", "mass_g", format_entered), ("Water\n[L]", "water_volume_l", _num()),
             ("Volume\nratio", "volume_ratio", _num()),
             ("Blocking\nratio [%]", lambda r: r.get("blocking_ratio") * 100 if not _is_missing(r.get("blocking_ratio")) else None, _num(2)),
             ("Fatigue definition", lambda r: str(r.get("fatigue_definition") or "").replace("_", " "), str)],
            "Table 1b. Group trials: fish swum together in one chamber. Mass is the sum of the fish's masses; the "
            "water volume is the respirometer's minus the summed fish volumes; the blocking ratio sums the fish's "
            "frontal areas (their solid-blocking corrections are added, to first order).", nowrap=["Group"]))
    if not f.steps.empty:
        results_blocks.append(_display(
            f.steps,
            [("Fish", "fish_id", str), ("Step", "step", _int_fmt), ("U set\n[cm/s]", "set_speed_cm_s", _num()),
             ("U corrected\n[cm/s]", "corrected_speed_cm_s", _num()), ("U\n[BL/s]", "speed_bl_s", _num()),
             ("Re", "reynolds", _num(2)), ("MO₂", "mo2_mg_kg_h", _num()),
             ("SD", "mo2_sd_mg_kg_h", _num(2)), ("n", "n_phases", _int_fmt),
             ("COT\ngross", "cot_gross_mg_kg_km", _num()),
             ("COT\nnet", "cot_net_mg_kg_km", _num())],
            "Table 2. Speed steps: set and blocking-corrected speed U, Reynolds number Re on total length, MO₂ "
            "[mg O₂ kg⁻¹ h⁻¹] as mean, SD and number n of accepted phases, and gross and net cost of transport "
            "[mg O₂ kg⁻¹ km⁻¹]." + (" For a group trial (the row's “Fish” is the group) MO₂ and COT are per capita, "
                                    "U in BL/s and Re use the fish's mean length, and the blocking correction sums the "
                                    "fish's; not comparable with fish swum alone." if session.groups else ""),
            nowrap=["Fish"]))
    if not f.results.empty:
        results_blocks.append(_display(
            f.results,
            [("Fish", "fish_id", str), ("Quantity", lambda r: QUANTITY_LABELS.get(r["quantity"], r["quantity"]), str),
             ("Value", "value", _num()), ("95 % interval", lambda r: format_range(r.get("ci_low"), r.get("ci_high")), str),
             ("Unit", lambda r: pretty_unit(str(r.get("unit", ""))), str), ("Method", "method", str), ("Note", "note", str)],
            "Table 3. Results per fish with their method and 95 % interval where the method gives one.",
            nowrap=["Fish", "Unit", "95 % interval"]))
    fits_table = _fits_table(f)
    if not fits_table.empty:
        results_blocks.append(_display(
            fits_table,
            [("Fish", "fish_id", str), ("Model", "model", str), ("Chosen", lambda r: "yes" if r["chosen"] else "", str),
             ("Parameter", "parameter", str), ("Value", "value", _num()), ("SE", "se", _num(2)),
             ("95 % interval", lambda r: format_range(r["ci_low"], r["ci_high"]), str), ("AICc", "aicc", _num(4)),
             ("n", "n", _int_fmt), ("Poorly constrained", lambda r: "yes" if r["poorly_constrained"] else "", str)],
            "Table 4. Speed–MO₂ fits: exponential MO₂ = a·e^(b·U) and power MO₂ = a + b·U^c, U in m/s, MO₂ and a in "
            "mg O₂ kg⁻¹ h⁻¹. Interval methods: see the note below.", nowrap=["Fish", "95 % interval"],
            note=_join(sorted(set(fits_table["ci_method"].dropna().astype(str))))))
    sections.append({"key": "results", "heading": "Results", "blocks": results_blocks})
    sections.append({"key": "figures", "heading": "Figures", "blocks": [{"kind": "figure", "name": fig.name} for fig in figures]})
    protocol_figures, protocol_figure_names = _protocol_figures(f, len(figures) + 1)
    protocol_blocks = _protocol_blocks(f, protocol_figure_names, 1)
    if protocol_blocks:
        figures += protocol_figures
        from swimlab.protocol_analysis import PART_LABELS

        shown = [PART_LABELS[part] for part in PART_LABELS if part in f.protocol.parts]
        heading = "Protocol results" + (f": {_join(shown)}" if shown else "")
        sections.append({"key": "protocol", "heading": heading, "blocks": protocol_blocks})

    flag_blocks: list[dict] = []
    if f.flags.empty:
        flag_blocks.append({"kind": "p", "text": "No rule of the catalogue was raised."})
    else:
        flag_blocks.append(_display(
            f.flags,
            [("Severity", "severity", str), ("Rule", "code", str), ("Where", "where", str), ("What was found", "message", str),
             ("What to do", "advice", str), ("Source", "source", str)],
            "Table 5. Flags raised by the rule catalogue (welfare first, then by severity).", severity_columns=["Severity"]))
    excl = _exclusions_table(f)
    flag_blocks.append(_display(excl, [("Fish", "fish_id", str), ("Chamber", "channel", str), ("Cycle", "cycle", str),
                                       ("By", "by_rule_or_person", str), ("Reason", "reason", str)],
                                "Table 6. Measure phases not used, with the reason.", nowrap=["Fish"])
                       if not excl.empty else {"kind": "p", "text": "No measure phase was excluded or rejected."})
    adverse = f.events("adverse_event", "impingement")
    if adverse:
        flag_blocks.append(_display(_events_table(session).query("kind in ['adverse_event', 'impingement']"),
                                    [("Time", lambda r: _duration(r["time_s"]), str), ("Kind", lambda r: r["kind"].replace("_", " "), str),
                                     ("Fish", "fish_id", str), ("Description", "description", str)],
                                    "Table 7. Adverse events and impingements from the event log."))
    sections.append({"key": "flags", "heading": "Flags and exclusions", "blocks": flag_blocks})

    sections.append({"key": "checklist", "heading": "Reporting checklist", "blocks": _checklist_blocks(checklist)})
    record_blocks = list(approval)
    if audit_view is not None and not audit_view.empty:
        record_blocks.append(_display(audit_view, [(str(c), c, str) for c in audit_view.columns],
                                      "Audit trail of the session (from the lab book)."))
    sections.append({"key": "record", "heading": "Sign-off and record", "blocks": record_blocks})
    sections.append({"key": "references", "heading": "References",
                     "blocks": [_list(REFERENCES.values(), "refs")]})

    meta = [("Session", session.session_id)]
    meta += [(label, value) for label, value in (("Study", session.study), ("Lab", session.lab),
                                                  ("Trial date", session.trial_date.isoformat() if session.trial_date else ""),
                                                  ("Operator", session.operator)) if value]
    meta.append(("Status", _status_dict(status).get("status", "not given")))
    return Report(
        kind="session", title=session.title, meta=meta, sections=sections,
        figures={fig.name: fig for fig in figures}, table_data=_tables(f, checklist, audit), checklist=checklist,
    )


def _checklist_blocks(checklist: pd.DataFrame, counts: bool = False) -> list[dict]:
    blocks = []
    for guideline in (KILLEN, SWIM, ARRIVE):
        part = checklist[checklist["guideline"] == guideline]
        if part.empty:
            continue
        blocks.append({"kind": "h3", "text": guideline})
        if guideline == KILLEN:
            blocks.append(_box("warning", "Item list from memory", [CHECKLIST_NOTES[KILLEN]]))
        note = "" if guideline == KILLEN else CHECKLIST_NOTES[guideline]
        if counts:
            cols = [("No.", "number", str), ("Item", "item", str)] + [(s, s, _int_fmt) for s in STATES]
            blocks.append(_display(part, cols, "Number of sessions in each state.", note=note))
        else:
            blocks.append(_display(part, [("No.", "number", str), ("Topic", "topic", str), ("Item", "item", str),
                                          ("State", "state", str), ("In this session", "detail", str),
                                          ("From", "where", str)],
                                   "", note=note, state_columns=["State"], nowrap=["No.", "State"]))
    return blocks


# =================================================================================================
# Study
# =================================================================================================

_STUDY_QUANTITIES = {
    "ucrit": ("ucrit_cm_s", "cm/s"),
    "ucrit_bl": ("ucrit_bl_s", "BL/s"),
    "ucrit_set": ("ucrit_set_cm_s", "cm/s"),
    "smr": ("smr_mg_kg_h", "mg O2 kg-1 h-1"),
    "smr_quantile": ("smr_quantile_mg_kg_h", "mg O2 kg-1 h-1"),
    "smr_mlnd": ("smr_mlnd_mg_kg_h", "mg O2 kg-1 h-1"),
    "mmr": ("mmr_mg_kg_h", "mg O2 kg-1 h-1"),
    "aas": ("aas_mg_kg_h", "mg O2 kg-1 h-1"),
    "fas": ("fas", "-"),
    "uopt": ("uopt_cm_s", "cm/s"),
    "uopt_bl": ("uopt_bl_s", "BL/s"),
    "cotmin": ("cotmin_mg_kg_km", "mg O2 kg-1 km-1"),
}


_STUDY_PROTOCOL_QUANTITIES = {
    "ramp_umax": ("ramp_umax_cm_s", "cm/s"),
    "ramp_umax_set": ("ramp_umax_set_cm_s", "cm/s"),
    "endurance_time": ("endurance_time_min", "min"),
    "endurance_fatigued": ("endurance_fatigued", "-"),
    "repeat_recovery_ratio": ("repeat_recovery_ratio", "-"),
    "recovery_epoc_fit": ("recovery_epoc_fit_mg_kg", "mg O2 kg-1"),
    "recovery_epoc_trapezoid": ("recovery_epoc_trapezoid_mg_kg", "mg O2 kg-1"),
    "recovery_t50": ("recovery_t50_min", "min"),
    "gait_upc": ("gait_upc_cm_s", "cm/s"),
}
"""Protocol results in the study table: each column is named after its protocol."""

SPREAD_PROTOCOLS = ("step_ucrit",)
"""Protocols whose fish enter the spread between fish and the group curve: first step tests only
(a repeat swim's fish is already there from its first swim; a recovery's exercise steps are not a
step test)."""


def _check_items(items: Any) -> list[tuple[Session, Any]]:
    if isinstance(items, tuple) and len(items) == 2 and isinstance(items[0], Session):
        items = [items]
    out = []
    for i, item in enumerate(list(items)):
        if not (isinstance(item, tuple | list) and len(item) == 2 and isinstance(item[0], Session)):
            raise InputError(f"item {i + 1} must be a (session, analysis) pair; got {type(item).__name__}", field=f"items.{i}")
        out.append((item[0], item[1]))
    if not out:
        raise InputError("a study needs at least one (session, analysis) pair", field="items")
    ids = [s.session_id for s, _ in out]
    dup = sorted({x for x in ids if ids.count(x) > 1})
    if dup:
        raise InputError(f"session(s) {dup} appear more than once in the study", field="items")
    return out


def study_table(items: Sequence[tuple[Session, Any]]) -> pd.DataFrame:
    """Return one row per fish across sessions, ready for statistics elsewhere.

    Columns: session and fish identifiers, morphometrics, water and protocol, phase counts, each
    derived value in a column named with its unit (``ucrit_cm_s``, ``smr_mg_kg_h``, …) with the
    SMR's method and interval, the chosen curve's parameters, whether the fit is poorly
    constrained or Uopt lies outside the tested speeds, and the count of flags by severity.
    """
    rows = []
    for session, analysis in _check_items(items):
        f = _Facts(session, analysis)
        for unit in session.units():
            fid = unit.unit_id
            fish = unit.fish[0]
            row: dict[str, Any] = {
                "session_id": session.session_id, "study": session.study, "title": session.title,
                "trial_date": session.trial_date.isoformat() if session.trial_date else "",
                "fish_id": fid, "unit": "group" if unit.is_group else "fish", "n_fish": unit.n_fish,
                "group_fish_ids": ", ".join(x.fish_id for x in unit.fish) if unit.is_group else "",
                "species": ", ".join(sorted({x.species for x in unit.fish})), "sex": "" if unit.is_group else fish.sex,
                "chamber": unit.chamber, "mass_g": unit.mass_g, "total_length_cm": unit.total_length_cm,
                "temperature_c": session.water.temperature_c, "salinity": session.water.salinity,
                "protocol": session.protocol.type,
                "n_phases": f.phase_counts(fid)["total"], "n_phases_used": f.phase_counts(fid)["used"],
            }
            for quantity, (column, unit) in _STUDY_QUANTITIES.items():
                r = f.result(fid, quantity)
                if r is not None and str(r.get("unit", unit)) != unit:
                    raise ValueError(f"session {session.session_id}, fish {fid}: {quantity} is in {r.get('unit')!r}, "
                                     f"the study table expects {unit!r}")
                row[column] = np.nan if r is None else float(r["value"])
            smr = f.result(fid, "smr")
            row["smr_method"] = "" if smr is None else str(smr.get("method", ""))
            row["smr_ci_low"] = np.nan if smr is None else smr.get("ci_low", np.nan)
            row["smr_ci_high"] = np.nan if smr is None else smr.get("ci_high", np.nan)
            fits = f.fits(fid)
            best = getattr(fits, "best", None)
            fit = getattr(fits, best, None) if best else None
            row["fit_model"] = best or ""
            for p in ("a", "b", "c"):
                row[f"fit_{p}"] = float(fit.params[p]) if fit is not None and p in fit.params else np.nan
            row["fit_poorly_constrained"] = f.chosen_fit_poor(fid)
            row["uopt_outside_tested"] = _uopt_outside(f, fid) if f.result(fid, "uopt") is not None else False
            for quantity, (column, unit) in _STUDY_PROTOCOL_QUANTITIES.items():
                r = _presult(f, fid, quantity)
                row[column] = np.nan if r is None or str(r.get("unit")) != unit else float(r["value"])
            own = f.fish_flags(fid)
            session_level = f.flags[~f.flags["where"].fillna("").astype(str).str.startswith("fish ")] if not f.flags.empty else f.flags
            both = pd.concat([own, session_level]) if len(own) or len(session_level) else own
            for sev in checks.SEVERITIES:
                row[f"n_flags_{sev}"] = int((both["severity"] == sev).sum()) if len(both) else 0
            rows.append(row)
    return pd.DataFrame(rows)


def _spread_table(table: pd.DataFrame) -> pd.DataFrame:
    """Spread between fish of each derived value, per species (sample SD, ddof = 1)."""
    rows = []
    if len(table) and "protocol" in table:
        table = table[table["protocol"].isin(SPREAD_PROTOCOLS)]
    if len(table) and "unit" in table:  # a group trial's per-capita values are not one fish's
        table = table[table["unit"] != "group"]
    species = table["species"].replace("", "species not recorded") if len(table) else pd.Series(dtype=str)
    for sp, part in table.groupby(species, sort=True):
        for quantity, (column, unit) in _STUDY_QUANTITIES.items():
            if quantity in ("ucrit_bl", "uopt_bl", "smr_quantile", "smr_mlnd", "ucrit_set"):
                continue
            values = part[column].dropna().to_numpy(dtype=float) if column in part else np.array([])
            if values.size == 0:
                continue
            sd = float(values.std(ddof=1)) if values.size > 1 else np.nan
            mean = float(values.mean())
            rows.append({"species": sp, "quantity": quantity, "unit": unit, "n_fish": int(values.size), "mean": mean,
                         "sd": sd, "cv": sd / mean if values.size > 1 and mean != 0 else np.nan,
                         "min": float(values.min()), "max": float(values.max())})
    return pd.DataFrame(rows, columns=["species", "quantity", "unit", "n_fish", "mean", "sd", "cv", "min", "max"])


def group_curve_data(items: Sequence[tuple[Session, Any]]) -> pd.DataFrame:
    """Accepted single-phase MO2 against corrected speed for every fish (the group curve's data).

    Fish ids are prefixed with their session id so that the same label in two sessions stays two
    fish. Columns ``fish_id``, ``species``, ``speed_m_s`` [m/s], ``mo2_mg_kg_h``. Group trials are
    left out (their per-capita MO2 is not one fish's, and schooling changes cost); see
    :func:`group_trials_left_out`.
    """
    parts = []
    for session, analysis in _check_items(items):
        if session.protocol.type not in SPREAD_PROTOCOLS:
            continue
        f = _Facts(session, analysis)
        m, s = f.measure, f.steps
        if m.empty or s.empty or "step" not in m:
            continue
        species = {fish.fish_id: fish.species for fish in session.fish}
        for fid in f.fish_ids:
            if f.is_group(fid):
                continue
            own = m[(m["fish_id"].astype(str) == str(fid)) & _bool_col(m, "used", True) & (m["step"] > 0)]
            steps = s[s["fish_id"].astype(str) == str(fid)]
            speed = dict(zip(steps["step"], steps["corrected_speed_cm_s"].fillna(steps["set_speed_cm_s"]) / 100.0, strict=True))
            u = own["step"].map(speed)
            frame = pd.DataFrame({"fish_id": f"{session.session_id}/{fid}", "species": species[fid],
                                  "speed_m_s": u.to_numpy(dtype=float),
                                  "mo2_mg_kg_h": own["mo2_mg_kg_h"].to_numpy(dtype=float)})
            parts.append(frame[np.isfinite(frame["speed_m_s"]) & (frame["mo2_mg_kg_h"] > 0)])
    if not parts:
        return pd.DataFrame(columns=["fish_id", "species", "speed_m_s", "mo2_mg_kg_h"])
    return pd.concat(parts, ignore_index=True)


def group_trials_left_out(items: Sequence[tuple[Session, Any]]) -> list[str]:
    """Group trials of ``items`` that the spread and the group curve leave out, one phrase each."""
    out = []
    for session, _ in _check_items(items):
        for g in session.groups:
            out.append(f"group {g.group_id} of session {session.session_id} ({len(g.fish_ids)} fish swum together)")
    return out


def _group_figure(data: pd.DataFrame, curve: Any):
    """MO2 against speed for every fish with each fish's model curve and the population curve.

    A private builder: swimlab.plots has no group-curve figure.
    """
    import plotly.graph_objects as go

    from swimlab import plots

    fig = go.Figure()
    top = float(data["speed_m_s"].max()) * 1.05
    grid = np.linspace(0.0, top, 80)
    for i, (fid, grp) in enumerate(data.groupby("fish_id", sort=True)):
        colour = plots.CHANNEL_COLOURS[i % len(plots.CHANNEL_COLOURS)]
        fig.add_trace(go.Scatter(x=grp["speed_m_s"] * 100, y=grp["mo2_mg_kg_h"], mode="markers", name=fid,
                                 marker={"size": 5, "color": colour, "opacity": 0.6}, legendgroup=fid))
        if (curve.per_fish["fish_id"] == fid).any():
            fig.add_trace(go.Scatter(x=grid * 100, y=np.asarray(curve.predict_fish(fid, grid)), mode="lines",
                                     showlegend=False, line={"color": colour, "width": 1}, legendgroup=fid))
    fig.add_trace(go.Scatter(x=grid * 100, y=np.asarray(curve.predict(grid)), mode="lines", name="population curve",
                             line={"color": "#111", "width": 3}))
    fig.update_layout(xaxis={"title": "Corrected speed [cm/s]", "rangemode": "tozero"},
                      yaxis={"title": "MO₂ [mg O₂ kg⁻¹ h⁻¹]", "rangemode": "tozero"})
    return fig


def study_report(items: Sequence[tuple[Session, Any]], *, title: str | None = None) -> Report:
    """Build the report of a study: several sessions with their analyses.

    Holds the per-fish table (:func:`study_table`), the spread between fish, the population
    speed–MO2 curve by a mixed-effects model (:func:`swimlab.performance.group_curve`) with
    between-fish standard deviations, a figure of every fish's data and curves, the checklist
    counted over sessions, the flags counted over sessions, and the animal-care statement.
    """
    items = _check_items(items)
    facts = [_Facts(s, a) for s, a in items]
    table = study_table(items)
    spread = _spread_table(table)
    studies = sorted({s.study for s, _ in items if s.study})
    title = title or (f"Study report: {_join(studies)}" if studies else "Study report")

    # checklist counted over sessions
    lists = [reporting_checklist(s, f) for (s, _), f in zip(items, facts, strict=True)]
    allc = pd.concat(lists, ignore_index=True)
    counted = (allc.groupby(["guideline", "number", "topic", "item", "state"], sort=False).size()
               .unstack("state", fill_value=0).reindex(columns=list(STATES), fill_value=0).reset_index())
    order = {k: i for i, k in enumerate(lists[0]["number"])}
    counted = counted.sort_values("number", key=lambda c: c.map(order)).reset_index(drop=True)

    flags = pd.concat([f.flags.assign(session_id=s.session_id) for (s, _), f in zip(items, facts, strict=True)
                       if not f.flags.empty], ignore_index=True) if any(not f.flags.empty for f in facts) else pd.DataFrame(
        columns=[*checks.FLAG_COLUMNS, "session_id"])
    flag_counts = (flags.groupby(["severity", "code"]).agg(sessions=("session_id", "nunique"), flags=("code", "size"))
                   .reset_index() if not flags.empty else pd.DataFrame(columns=["severity", "code", "sessions", "flags"]))

    # group curves, one per species (a curve across species would not be a population's)
    from swimlab import performance

    data = group_curve_data(items)
    curves: list[tuple[str, Any, str | None]] = []
    figures: list[ReportFigure] = []
    for species, part in data.groupby(data["species"].replace("", "species not recorded"), sort=True):
        try:
            curve, error = performance.group_curve(part[["fish_id", "speed_m_s", "mo2_mg_kg_h"]]), None
        except (InputError, ValueError, np.linalg.LinAlgError) as exc:
            curve, error = None, str(exc)
        curves.append((str(species), curve, error))
        if curve is not None:
            n = len(figures) + 1
            cap = (f"{species}: accepted single-phase MO₂ of every fish against blocking-corrected speed, with each fish's "
                   "curve from the mixed-effects model (thin lines) and the population curve (thick line).")
            figures.append(_build(f"group_curve_{n}", f"Figure {n}", cap,
                                  lambda part=part, curve=curve: _group_figure(part, curve), 360))
    if data.empty:
        curves.append(("all fish", None, "no accepted phase at a speed step in any session"))

    blocks_summary = []
    temps = [s.water.temperature_c for s, _ in items]
    protocols = sorted({PROTOCOL_LABELS.get(s.protocol.type, s.protocol.type) for s, _ in items})
    blocks_summary.append({"kind": "p", "text": (
        f"The study holds {_n(len(items), 'session')} with {_n(len(table), 'fish', 'fish')} "
        f"({_join(sorted({x for x in table['species'] if x})) or 'species not recorded'}), swum at "
        f"{_entered_range(min(temps), max(temps), '°C') if len(set(temps)) > 1 else format_entered(temps[0], '°C')}, "
        f"protocol: {_join(protocols)}. The methods of each session are given in its own report.")})
    settings_differ = [name for name in facts[0].settings.to_dict()
                       if len({repr(f.settings.to_dict()[name]) for f in facts}) > 1]
    if not settings_differ:
        blocks_summary.append({"kind": "p", "text": "The same lab settings were used in every session."})
    else:
        blocks_summary.append(_box("warning", "Settings differ between sessions",
                                   [f"These lab settings were not the same in every session: {', '.join(settings_differ)}. "
                                    "Results depending on them are not strictly comparable."]))
    blocks_summary.append(_display(
        pd.DataFrame([{"session_id": s.session_id, "title": s.title,
                       "date": s.trial_date.isoformat() if s.trial_date else "",
                       "fish": ", ".join(x.fish_id for x in s.fish), "protocol": s.protocol.type,
                       "temperature": s.water.temperature_c} for s, _ in items]),
        [("Session", "session_id", str), ("Title", "title", str), ("Date", "date", str), ("Fish", "fish", str),
         ("Protocol", "protocol", str), ("Temperature [°C]", "temperature", format_entered)],
        "Table 1. Sessions of the study."))

    left_out = group_trials_left_out(items)
    results_blocks = [_box("warning", "Group trials kept apart", [
        f"{_sentence(_join(left_out))}: per-capita values of fish swum together. They are listed in Table 2 as "
        "groups, but left out of the spread between fish and of the group curves, which hold fish swum alone. "
        + checks.GROUP_CAVEAT])] if left_out else []
    results_blocks += [_display(
        table,
        [("Fish", lambda r: r["fish_id"] + (f" (group of {int(r['n_fish'])})" if r.get("unit") == "group" else ""), str),
         ("Protocol", "protocol", str), ("Mass\n[g]", "mass_g", format_entered),
         ("T\n[°C]", "temperature_c", format_entered),
         ("Ucrit\n[cm/s]", "ucrit_cm_s", _num()), ("Ucrit\n[BL/s]", "ucrit_bl_s", _num()),
         ("SMR", "smr_mg_kg_h", _num()), ("MMR", "mmr_mg_kg_h", _num()),
         ("AAS", "aas_mg_kg_h", _num()), ("Uopt\n[cm/s]", "uopt_cm_s", _num()),
         ("Model", "fit_model", str),
         ("Notes", lambda r: "; ".join(x for x in ("fit poorly constrained" if r["fit_poorly_constrained"] else "",
                                                   "Uopt outside tested speeds" if r["uopt_outside_tested"] else "") if x), str)],
        "Table 2. One row per fish; SMR, MMR and absolute aerobic scope (AAS) in mg O₂ kg⁻¹ h⁻¹. The full table, "
        "with sessions, methods and every value, is in the CSV export.", nowrap=["Fish"])]
    if not spread.empty:
        results_blocks.append(_display(
            spread, [("Species", "species", str), ("Quantity", lambda r: QUANTITY_LABELS.get(r["quantity"], r["quantity"]), str),
                     ("Unit", lambda r: pretty_unit(r["unit"]), str), ("n", "n_fish", _int_fmt), ("Mean", "mean", _num()),
                     ("SD", "sd", _num(2)), ("CV", "cv", _num(2)), ("Min", "min", _num()), ("Max", "max", _num())],
            "Table 3. Spread between fish of one species (SD with n − 1; CV = SD / mean), from first step tests "
            "only, so that a fish swum twice counts once.", nowrap=["Unit"]))
    n_fig = 0
    for species, curve, error in curves:
        results_blocks.append({"kind": "h3", "text": f"Group curve: {species}"})
        if curve is None:
            results_blocks.append(_box("warning", "No group curve", [f"No group curve was fitted: {error}"]))
            continue
        n_fig += 1
        txt = (f"A population curve MO₂ = a·e^(b·U) was fitted to {_n(curve.n, 'accepted phase')} of "
               f"{_n(curve.n_fish, 'fish', 'fish')} by a linear mixed-effects model on ln MO₂ (Laird & Ware 1982): "
               f"a = {format_quantity(curve.a, 'mg O2 kg-1 h-1')} (95 % CI {format_range(*curve.a_ci95)}), "
               f"b = {format_quantity(curve.b, 's/m')} (95 % CI {format_range(*curve.b_ci95)}). Between fish, the SD of "
               f"ln a was {format_number(curve.sd_between_ln_a, 2)}"
               + (f" and that of b {format_quantity(curve.sd_between_b, 's/m', 2)}" if curve.sd_between_b is not None else "")
               + f"; the residual SD on the ln scale was {format_number(curve.sd_residual_ln, 2)}. Model: {curve.notes}.")
        if not curve.converged:
            txt += " The optimiser did not report convergence; the curve is doubtful."
        results_blocks.append({"kind": "p", "text": txt})
        results_blocks.append({"kind": "figure", "name": f"group_curve_{n_fig}"})

    protocol_blocks, protocol_tables, protocol_figures = _study_protocol_blocks(items, len(figures) + 1)
    figures += protocol_figures

    flag_blocks = ([_display(flag_counts, [("Severity", "severity", str), ("Rule", "code", str),
                                           ("Sessions", "sessions", _int_fmt), ("Flags", "flags", _int_fmt)],
                             "Flags over all sessions.", severity_columns=["Severity"])]
                   if not flag_counts.empty else [{"kind": "p", "text": "No rule of the catalogue was raised in any session."}])

    st = facts[0].settings
    care = [
        ("Swim-tunnel trials are experiments on live animals. They must follow the protocol approved by the "
         "institution's animal-care committee and local law, and be run by people trained and licensed as those rules "
         "require. The welfare limits recorded in the sessions (e.g. oxygen floor "
         f"{format_entered(st.oxygen_floor_pct_air_sat, '%')} air saturation) are lab settings, not approval; the "
         "approved protocol and local rules decide, and the numbers in this report do not replace them."),
    ]
    n_adverse = sum(len(f.events("adverse_event", "impingement")) for f in facts)
    care.append(f"Adverse events or impingements recorded over the study: {n_adverse}.")

    sections = [
        {"key": "care", "heading": "Animal care", "blocks": [_box("care", "Animal care", care)]},
        {"key": "summary", "heading": "Study", "blocks": blocks_summary},
        {"key": "results", "heading": "Results across fish", "blocks": results_blocks},
        *([{"key": "protocols", "heading": "Protocols across sessions", "blocks": protocol_blocks}]
          if protocol_blocks else []),
        {"key": "flags", "heading": "Flags", "blocks": flag_blocks},
        {"key": "checklist", "heading": "Reporting checklist over sessions", "blocks": _checklist_blocks(counted, counts=True)},
        {"key": "references", "heading": "References",
         "blocks": [_list(REFERENCES.values(), "refs")]},
    ]
    tables = {"study": table, "spread": spread, "group_curve_data": data, "flags": flags, "checklist": counted,
              **protocol_tables}
    fitted = [(sp, c) for sp, c, _ in curves if c is not None]
    tables["group_curve"] = pd.DataFrame([{
        "species": sp, "a_mg_kg_h": c.a, "a_ci_low": c.a_ci95[0], "a_ci_high": c.a_ci95[1],
        "b_s_m": c.b, "b_ci_low": c.b_ci95[0], "b_ci_high": c.b_ci95[1],
        "sd_between_ln_a": c.sd_between_ln_a, "sd_between_b_s_m": c.sd_between_b,
        "sd_residual_ln": c.sd_residual_ln, "random_slopes": c.random_slopes,
        "n_fish": c.n_fish, "n": c.n, "converged": c.converged, "notes": c.notes} for sp, c in fitted],
        columns=["species", "a_mg_kg_h", "a_ci_low", "a_ci_high", "b_s_m", "b_ci_low", "b_ci_high", "sd_between_ln_a",
                 "sd_between_b_s_m", "sd_residual_ln", "random_slopes", "n_fish", "n", "converged", "notes"])
    tables["group_curve_per_fish"] = (pd.concat([c.per_fish.assign(species=sp) for sp, c in fitted], ignore_index=True)
                                      if fitted else pd.DataFrame(columns=["species", "fish_id"]))
    meta = [("Sessions", str(len(items))), ("Fish", str(len(table)))]
    return Report(kind="study", title=title, meta=meta, sections=sections, figures={x.name: x for x in figures},
                  table_data=tables, checklist=counted)


def _study_protocol_blocks(items: Sequence[tuple[Session, Any]], figure_from: int
                           ) -> tuple[list[dict], dict[str, pd.DataFrame], list[ReportFigure]]:
    """The endurance survival summary and the repeat-swim pairs across sessions."""
    from swimlab.protocol_analysis import endurance_summary, repeat_pairs

    blocks: list[dict] = []
    tables: dict[str, pd.DataFrame] = {}
    figures: list[ReportFigure] = []
    es = endurance_summary(items)
    if es is not None:
        fish = es.fish
        n_cens = int((~fish["fatigued"].astype(bool)).sum())
        blocks.append({"kind": "h3", "text": "Fixed-speed endurance: survival across fish"})
        txt = (f"{_n(len(fish), 'fish', 'fish')} swam at {_n(fish['set_speed_cm_s'].nunique(), 'set speed')} "
               f"({_join([format_entered(u, 'cm/s') for u in sorted(fish['set_speed_cm_s'].unique())])}) with a time "
               f"limit of {format_entered(es.time_limit_s / 60.0, 'min')}; {_n(n_cens, 'fish', 'fish')} "
               f"{'was' if n_cens == 1 else 'were'} still swimming at the limit and "
               f"{'is' if n_cens == 1 else 'are'} kept as censored (Kaplan & Meier 1958). ")
        mss = es.max_sustained
        txt += (f"The maximum sustained speed for this limit, the highest set speed at which no fish fatigued, was "
                f"{format_quantity(mss.speed_m_s * 100, 'cm/s')}." if mss.speed_m_s is not None else
                "Some fish fatigued at the slowest speed tested: no maximum sustained speed can be given for this limit.")
        fit = es.fatigue_curve
        if fit is not None:
            txt += (f" The censored fatigue curve (Tobin 1958) was log₁₀ T [s] = {format_number(fit.intercept)} "
                    f"{MINUS if fit.slope < 0 else '+'} {format_number(abs(fit.slope) * 0.01)} × U [cm/s] "
                    f"(SE of the slope {format_number((fit.slope_se or float('nan')) * 0.01, 2)}; residual SD "
                    f"{format_number(fit.sigma, 2)} in log₁₀ T).")
            half = es.half_fatigued
            if half is not None and half.speed_m_s is not None:
                txt += (f" Half the fish fatigue within the limit at {format_quantity(half.speed_m_s * 100, 'cm/s')}"
                        + (f" (SE {format_quantity(half.se_m_s * 100, 'cm/s', 2)})" if half.se_m_s is not None else "")
                        + ("" if half.within_tested else ", outside the tested speeds (an extrapolation)") + ".")
        blocks.append({"kind": "p", "text": txt})
        if es.problems:
            blocks.append(_box("warning", "Endurance summary", [_sentence(x) + "." for x in es.problems]))
        if es.by_gait is not None:
            from swimlab.protocol_analysis import gait_curve_sentences, gait_curve_table

            blocks.append({"kind": "p", "text": (
                "Fatigue curves per gait: each trial is sorted by the gait it ended in (the last gait change with a "
                "recorded gait at or before fatigue or the time limit), and each gait with at least four fish, three "
                "of them fatigued, at two or more speeds gets its own censored fit (Tobin 1958), since steady and "
                "burst-assisted swimming are separate endurance domains (Brett 1964; Beamish 1978). "
                + " ".join(_sentence(x) + "." for x in gait_curve_sentences(es)))})
            gt = gait_curve_table(es)
            blocks.append(_display(
                gt, [("Gait at the end", "label", str), ("Fish", "n_fish", _int_fmt), ("Censored", "n_censored", _int_fmt),
                     ("Intercept\n[log₁₀ s]", "intercept_log10_s", _num(4)),
                     ("Slope\n[log₁₀ s per cm/s]", lambda r: r["slope_log10_s_per_m_s"] / 100.0, _num()),
                     ("SE", lambda r: r["slope_se"] / 100.0, _num(2)), ("Residual SD", "sigma_log10_s", _num(2)),
                     ("Own curve", lambda r: "yes" if r["fitted"] else "too few trials", str)],
                "Endurance: censored fatigue curves per gait, log₁₀ T [s] = intercept + slope × U."))
            tables["endurance_fatigue_curves_by_gait"] = gt
        blocks.append(_display(
            es.kaplan_meier,
            [("U set\n[cm/s]", "set_speed_cm_s", format_entered), ("Time\n[min]", "time_min", _num()),
             ("At risk", "at_risk", _int_fmt), ("Fatigued", "fatigued", _int_fmt), ("Censored", "censored", _int_fmt),
             ("Still swimming", "share_swimming", _num(2)), ("SE", "share_swimming_se", _num(2))],
            "Endurance: Kaplan–Meier share of fish still swimming at each set speed, with Greenwood's standard error."))
        blocks.append(_display(
            fish, [("Session", "session_id", str), ("Fish", "fish_id", str), ("U set\n[cm/s]", "set_speed_cm_s", format_entered),
                   ("U corrected\n[cm/s]", "corrected_speed_cm_s", _num()), ("Time\n[min]", "time_min", _num()),
                   ("Outcome", lambda r: "fatigued" if r["fatigued"] else "censored", str)],
            "Endurance: every fish, its time at the set speed and its outcome.", nowrap=["Fish"]))
        n = figure_from
        for name, builder, caption in (
                ("endurance_km", "kaplan_meier_figure",
                 "Endurance: share of fish still swimming against time at each set speed (Kaplan–Meier); crosses mark "
                 "fish still swimming at the limit."),
                ("endurance_fatigue_curve", "fatigue_curve_figure",
                 "Endurance: time to fatigue against speed on a log scale, censored fish as open triangles at the limit, "
                 "and the median endurance of the censored fit.")):
            if builder == "fatigue_curve_figure" and fit is None:
                continue
            figures.append(_build(name, f"Figure {n}", caption, lambda b=builder: _plot(b)(es), 330))
            blocks.append({"kind": "figure", "name": name})
            n += 1
        tables["endurance_fish"] = fish.copy()
        tables["endurance_kaplan_meier"] = es.kaplan_meier.copy()
        if fit is not None:
            tables["endurance_fatigue_curve"] = pd.DataFrame([{
                "intercept_log10_s": fit.intercept, "slope_log10_s_per_m_s": fit.slope, "sigma_log10_s": fit.sigma,
                "intercept_se": fit.intercept_se, "slope_se": fit.slope_se, "sigma_se": fit.sigma_se,
                "n_fish": fit.n_fish, "n_fatigued": fit.n_fatigued, "n_censored": fit.n_censored,
                "converged": fit.converged, "method": fit.method, "time_limit_s": es.time_limit_s,
                "max_sustained_speed_m_s": mss.speed_m_s,
                "speed_half_fatigued_m_s": None if es.half_fatigued is None else es.half_fatigued.speed_m_s,
                "speed_half_fatigued_se_m_s": None if es.half_fatigued is None else es.half_fatigued.se_m_s}])
    rp = repeat_pairs(items)
    if rp is not None:
        blocks.append({"kind": "h3", "text": "Repeat swims: recovery ratio across pairs"})
        if rp.pairs.empty:
            blocks.append({"kind": "p", "text": "No repeat swim could be paired with its first swim."})
        else:
            blocks.append({"kind": "p", "text": (
                f"{_n(len(rp.pairs), 'fish', 'fish')} {'was' if len(rp.pairs) == 1 else 'were'} swum twice; the recovery "
                "ratio Ucrit₂ / Ucrit₁ (Jain, Birtwell & Farrell 1998) is given per pair and summarised per treatment "
                "with a 95 % t interval and a t test of ratio = 1; two treatments are compared by Welch's (1947) test.")})
            blocks.append(_display(
                rp.pairs, [("Fish", "fish_id", str), ("Treatment", "treatment", str), ("First swim", "first_session_id", str),
                           ("Second swim", "second_session_id", str), ("Rest\n[min]", "rest_interval_min", format_entered),
                           ("Ucrit₁\n[cm/s]", "ucrit_first_cm_s", _num()), ("Ucrit₂\n[cm/s]", "ucrit_second_cm_s", _num()),
                           ("Recovery ratio", "recovery_ratio", _num())],
                "Repeat swims: Ucrit of each swim (both on the speed basis named in the CSV export) and their ratio.",
                nowrap=["Fish"]))
            blocks.append(_display(
                rp.groups, [("Treatment", "treatment", str), ("Pairs", "n_pairs", _int_fmt),
                            ("Mean ratio", "mean_ratio", _num()), ("SD", "sd", _num(2)), ("SE", "se", _num(2)),
                            ("95 % interval", lambda r: format_range(r["ci_low"], r["ci_high"]), str),
                            ("p (ratio = 1)", "p_ratio_equals_1", _num(2))],
                "Repeat swims: recovery ratio per treatment (one pair gives no spread)."))
            c = rp.comparison
            if c is not None:
                blocks.append({"kind": "p", "text": (
                    f"The mean recovery ratio of {c['groups'][0]} minus that of {c['groups'][1]} was "
                    f"{format_number(c['difference'])} (Welch's t = {format_number(c['t'])}, df = {format_number(c['df'])}, "
                    f"p = {format_number(c['p'], 2)}).")})
        if rp.problems:
            blocks.append(_box("warning", "Repeat swims not paired", [_sentence(x) + "." for x in rp.problems]))
        tables["repeat_pairs"] = rp.pairs.copy()
        tables["repeat_groups"] = rp.groups.copy()
    return blocks, tables, figures


# =================================================================================================
# Files
# =================================================================================================


def write_report(session: Session, analysis: Any, out_path: str | os.PathLike, *, fmt: str = "html",
                 status: Any = None, audit: pd.DataFrame | None = None, page_size: str = "A4",
                 figures: bool = True) -> Path:
    """Write the session's report to ``out_path`` as HTML or PDF; return the path written.

    The file is written to a temporary file beside the target and moved into place, so an
    existing report is never left half-written. Parameters as :func:`session_report`; ``fmt``
    is ``"html"`` or ``"pdf"``, ``page_size`` ``"A4"`` or ``"Letter"``; ``figures=False`` leaves a
    box in each figure's place (a quick draft without Chromium).
    """
    if fmt not in FORMATS:
        raise ValueError(f"unknown fmt {fmt!r}; valid choices are {list(FORMATS)}")
    _page_size(page_size)
    report = session_report(session, analysis, status=status, audit=audit)
    data = (report.pdf(page_size=page_size, figures=figures) if fmt == "pdf"
            else report.html(page_size=page_size, figures=figures).encode("utf-8"))
    return _atomic_write(Path(out_path), data)


def write_tables(report: Report, folder: str | os.PathLike) -> list[Path]:
    """Write each of the report's tables as ``<name>.csv`` (UTF-8) into ``folder``; return the paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, frame in report.tables().items():
        paths.append(_atomic_write(folder / f"{name}.csv", frame.to_csv(index=False).encode("utf-8")))
    return paths


def _atomic_write(target: Path, data: bytes) -> Path:
    from swimlab.io.bundle import atomic_write_bytes

    target.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_bytes(target, data)
    return target

"""Gait from the event log: the pectoral–caudal transition speed, burst-and-coast, bursts per minute.

Inputs are the session's event-log rows (``time_s``, ``kind``, ``count``, ``description``;
optionally ``fish_id``) and the step schedule (``start_s``, ``end_s`` and a speed column), both on
the trace clock. Plain rules, stated once here and in :func:`gait_summary`:

- An event belongs to the step whose interval [start, end) holds its time (the last step's end is
  included); events outside every step (habituation, recovery) are not counted.
- The pectoral–caudal gait transition speed, Up–c (Drucker & Jensen 1996), is the speed of the
  step holding the first ``gait_change`` event whose description names that transition: it
  contains "upc", "up-c", "up–c" or "u_pc", or it names "pectoral" before "caudal" (e.g.
  "pectoral to caudal", "pectoral → caudal+pectoral").
- Burst-and-coast onset is the speed of the first step with a ``burst`` event whose count is
  not zero (a burst row without a count is one burst; a count of 0 records that none were seen).
- Bursts per minute at a step are its bursts over the time swum in it: the whole step, or up to
  the first ``fatigue`` event if the fish fatigued within it; bursts after fatigue are not
  counted.
- Speeds are also given as a share of Ucrit (if given) and of Up–c (if found); Drucker & Jensen
  (1996) recommend comparing fish of different sizes at speeds as a percentage of Up–c.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from swimlab import _validate
from swimlab.errors import InputError
from swimlab.session import EVENT_KINDS, PROTOCOL_TYPES

__all__ = ["GaitResult", "gait_summary", "is_pectoral_caudal_transition", "STEP_COLUMNS"]

_S_PER_MIN = 60.0
"""Seconds in one minute. [s/min] Definition."""

STEP_COLUMNS = [
    "step", "start_s", "end_s", "speed_m_s", "swum_s", "bursts", "bursts_per_min",
    "share_of_ucrit", "share_of_upc",
]
"""Columns of :attr:`GaitResult.steps`."""

_UPC_LABEL = re.compile(r"\bu[\s_]*p[\s_]*[-–—]?[\s_]*c\b")


def is_pectoral_caudal_transition(description: str) -> bool:
    """True when an event description names the pectoral-to-caudal gait transition (see module rules)."""
    text = (description or "").lower()
    if _UPC_LABEL.search(text) or "u_pc" in text:
        return True
    pec, caud = text.find("pectoral"), text.find("caudal")
    return pec >= 0 and caud > pec


@dataclass(frozen=True)
class GaitResult:
    """Gait measures of one fish in a step protocol.

    Attributes
    ----------
    protocol
        The protocol the steps belong to (``"step_ucrit"`` by default).
    upc_m_s
        Pectoral–caudal gait transition speed, or None if no such event. [m/s]
    upc_time_s
        Time of the event that gave it. [s]
    upc_step
        1-based step number holding it.
    burst_onset_m_s
        Speed of the first step with bursts, or None. [m/s]
    burst_onset_step
        Its 1-based step number.
    ucrit_m_s
        Ucrit passed in for the shares, or None. [m/s]
    fish_id
        The fish, if the events were filtered by one.
    steps
        Per step, the columns of :data:`STEP_COLUMNS` (shares None where the reference is
        missing).
    events_outside_steps
        Events of kind ``gait_change`` or ``burst`` that fell outside every step (not counted).
    flags
        Flags raised (none at present; kept for a uniform result).
    """

    protocol: str
    upc_m_s: float | None
    upc_time_s: float | None
    upc_step: int | None
    burst_onset_m_s: float | None
    burst_onset_step: int | None
    ucrit_m_s: float | None
    fish_id: str | None
    steps: pd.DataFrame = field(repr=False, compare=False)
    events_outside_steps: int
    flags: tuple[dict, ...]


def _as_frame(name: str, rows: Any) -> pd.DataFrame:
    if isinstance(rows, pd.DataFrame):
        return rows.reset_index(drop=True)
    try:
        rows = [r.model_dump() if hasattr(r, "model_dump") else dict(r) for r in rows]
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be a table or a list of rows; got {type(rows).__name__}", field=name) from exc
    return pd.DataFrame(rows)


def _column(frame: pd.DataFrame, table: str, column: str) -> pd.Series:
    if column not in frame.columns:
        raise InputError(f"{table} has no column {column!r}; columns are {list(frame.columns)}", field=table,
                         column=column)
    return frame[column]


def _numeric_column(frame: pd.DataFrame, table: str, column: str, *, positive: bool = False) -> np.ndarray:
    values = _column(frame, table, column)
    out = np.empty(len(values))
    for i, v in enumerate(values):
        try:
            x = float(v)
        except (TypeError, ValueError):
            x = float("nan")
        if not np.isfinite(x) or x < 0 or (positive and x == 0):
            need = "a number greater than zero" if positive else "a number, zero or more"
            raise InputError(f"must be {need}; got {v!r}", field=table, row=i + 1, column=column)
        out[i] = x
    return out


def gait_summary(
    events: Any,
    steps: Any,
    *,
    ucrit_m_s: float | None = None,
    speed_column: str = "speed_m_s",
    fish_id: str | None = None,
    protocol: str = "step_ucrit",
) -> GaitResult:
    """Gait transition speed, burst-and-coast onset and bursts per minute from the event log.

    Parameters
    ----------
    events
        Event-log rows (a DataFrame, dicts or :class:`swimlab.session.Event`) with ``time_s``
        [s], ``kind`` (one of :data:`swimlab.session.EVENT_KINDS`), ``count`` and
        ``description``; ``fish_id`` optional.
    steps
        Step schedule rows with ``start_s`` and ``end_s`` [s] and a speed column [m/s] (set or
        corrected speeds), in order.
    ucrit_m_s
        The fish's Ucrit for speeds as a share of it, or None. [m/s]
    speed_column
        Name of the speed column in ``steps`` (``"set_speed_m_s"`` for
        :func:`swimlab.session.step_table`).
    fish_id
        Keep only events of this fish (and events with no fish given).
    protocol
        The protocol the steps belong to, from :data:`swimlab.session.PROTOCOL_TYPES`.

    Returns
    -------
    GaitResult

    Raises
    ------
    InputError
        A missing column, a time or speed that is not a number, steps that overlap or end before
        they start, an unknown event kind, a negative count (row and column named).
    """
    _validate.choice("protocol", protocol, PROTOCOL_TYPES)
    ev = _as_frame("events", events)
    st = _as_frame("steps", steps)
    if st.empty:
        raise InputError("the step schedule has no steps", field="steps")
    start = _numeric_column(st, "steps", "start_s")
    end = _numeric_column(st, "steps", "end_s")
    speed = _numeric_column(st, "steps", speed_column)
    for i in range(len(st)):
        if end[i] <= start[i]:
            raise InputError(f"a step must end after it starts; got {start[i]:g} s to {end[i]:g} s",
                             field="steps", row=i + 1, column="end_s")
        if i and start[i] < end[i - 1]:
            raise InputError(f"steps overlap: this step starts at {start[i]:g} s, before the previous ends at "
                             f"{end[i - 1]:g} s", field="steps", row=i + 1, column="start_s")
    ucrit = None
    if ucrit_m_s is not None:
        ucrit = float(_validate.positive("ucrit_m_s", ucrit_m_s, "m/s").reshape(()))

    if ev.empty:
        ev = pd.DataFrame(columns=["time_s", "kind", "count", "description"])
    times = _numeric_column(ev, "events", "time_s") if len(ev) else np.array([])
    kinds = _column(ev, "events", "kind").astype(str).to_numpy() if len(ev) else np.array([], dtype=str)
    for i, kind in enumerate(kinds):
        if kind not in EVENT_KINDS:
            raise InputError(f"unknown event kind {kind!r}; valid kinds are {list(EVENT_KINDS)}",
                             field="events", row=i + 1, column="kind")
    descriptions = (ev["description"].fillna("").astype(str).to_numpy() if "description" in ev.columns
                    else np.full(len(ev), ""))
    counts = np.ones(len(ev))
    if "count" in ev.columns:
        for i, c in enumerate(ev["count"]):
            if c is None or (isinstance(c, float) and np.isnan(c)):
                continue
            try:
                value = float(c)
            except (TypeError, ValueError):
                value = float("nan")
            if not np.isfinite(value) or value < 0 or value != int(value):
                raise InputError(f"count must be a whole number, zero or more; got {c!r}",
                                 field="events", row=i + 1, column="count")
            counts[i] = value
    keep = np.ones(len(ev), dtype=bool)
    if fish_id is not None and "fish_id" in ev.columns:
        ids = ev["fish_id"].fillna("").astype(str).to_numpy()
        keep = (ids == str(fish_id)) | (ids == "")
    order = np.argsort(times, kind="stable")

    def step_of(time: float) -> int | None:
        for j in range(len(st)):
            if start[j] <= time < end[j] or (j == len(st) - 1 and time == end[j]):
                return j
        return None

    upc = upc_time = upc_step = None
    bursts = np.zeros(len(st))
    swum = end - start
    outside = 0
    fatigue_seen = False
    for i in order:
        if not keep[i]:
            continue
        j = step_of(times[i])
        if kinds[i] in ("gait_change", "burst") and j is None:
            outside += 1
            continue
        if kinds[i] == "gait_change" and upc is None and is_pectoral_caudal_transition(descriptions[i]):
            upc, upc_time, upc_step = float(speed[j]), float(times[i]), j + 1
        elif kinds[i] == "burst" and not fatigue_seen:
            bursts[j] += counts[i]
        elif kinds[i] == "fatigue" and j is not None and not fatigue_seen:
            fatigue_seen = True
            swum[j] = times[i] - start[j]
            swum[j + 1:] = 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        per_min = np.where(swum > 0, bursts / (swum / _S_PER_MIN), np.nan)
    first_burst = np.flatnonzero(bursts > 0)
    onset_step = int(first_burst[0]) + 1 if first_burst.size else None
    table = pd.DataFrame({
        "step": np.arange(1, len(st) + 1),
        "start_s": start,
        "end_s": end,
        "speed_m_s": speed,
        "swum_s": swum,
        "bursts": bursts.astype(int),
        "bursts_per_min": pd.array([None if not np.isfinite(v) else float(v) for v in per_min], dtype="Float64"),
        "share_of_ucrit": pd.array([None if ucrit is None else float(u / ucrit) for u in speed], dtype="Float64"),
        "share_of_upc": pd.array([None if upc is None else float(u / upc) for u in speed], dtype="Float64"),
    }, columns=STEP_COLUMNS)
    # steps never swum (after fatigue) have no rate: shown as missing, never as 0 or NaN silently
    return GaitResult(
        protocol=protocol,
        upc_m_s=upc,
        upc_time_s=upc_time,
        upc_step=upc_step,
        burst_onset_m_s=None if onset_step is None else float(speed[onset_step - 1]),
        burst_onset_step=onset_step,
        ucrit_m_s=ucrit,
        fish_id=None if fish_id is None else str(fish_id),
        steps=table,
        events_outside_steps=outside,
        flags=(),
    )

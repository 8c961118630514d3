"""The one orchestration point: ``analyse(session, raw_files) -> Analysis``.

The app, the command line and the report all call :func:`analyse`; none recomputes. It is pure:
the raw logger files come in as bytes (keyed by SHA-256), nothing is read from or written to disk,
and every resampling is seeded, so the same session gives the same analysis.

Flow (DESIGN.md §2, step 4): water properties → flume geometry and blocking per fish → the
oxygen trace read with its stored column mapping → readings converted to mg/L with their own
temperature → phases → slopes per measure phase → background correction and MO2 → phases
assigned to speed steps → step table with corrected speed, Reynolds number, drag and cost of
transport → Ucrit, speed–MO2 fits, SMR, MMR, aerobic scope, Uopt → one table of flags.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from swimlab import (
    __version__,
    checks,
    flume,
    hydrodynamics,
    oxygen,
    performance,
    protocol_analysis,
    trace,
    uptake,
    water,
)
from swimlab._tables import json_records
from swimlab.constants import CM_PER_M, G_PER_KG
from swimlab.errors import InputError, OutOfRangeError
from swimlab.io import logger
from swimlab.session import Session, step_table
from swimlab.settings import LabSettings

CM = 1.0 / CM_PER_M  # metres per centimetre
G = 1.0 / G_PER_KG  # kilograms per gram


@dataclass(frozen=True)
class Analysis:
    """Everything :func:`analyse` derives from one session. Nothing here is stored as truth."""

    session_id: str
    settings: LabSettings
    water: dict[str, float]
    fish: pd.DataFrame
    phases: pd.DataFrame
    measure: pd.DataFrame
    steps: pd.DataFrame
    results: pd.DataFrame
    fits: dict[str, Any]
    ucrit: dict[str, dict[str, Any]]
    flags: pd.DataFrame
    traces: dict[str, Any] = field(default_factory=dict, repr=False)
    concentration: dict[str, np.ndarray] = field(default_factory=dict, repr=False)
    import_report: pd.DataFrame = field(default_factory=pd.DataFrame)
    calibration: Any = None
    flume_name: str = ""
    """The swim tunnel's name (to tell whether two swims shared one flume and its calibration)."""
    groups: pd.DataFrame = field(default_factory=pd.DataFrame)
    """Group trials: one row per group of fish swum together in one chamber (see :func:`_groups`)."""
    protocol: Any = None
    """Per-protocol results (:class:`swimlab.protocol_analysis.ProtocolResults`): ramp Umax,
    endurance times, recovery ratio, EPOC, gait and kinematics, each row named by its protocol."""

    def result(self, fish_id: str, quantity: str) -> float | None:
        """Return one derived value (e.g. ``"ucrit"``) for one fish, or ``None``."""
        rows = self.results[(self.results["fish_id"] == fish_id) & (self.results["quantity"] == quantity)]
        if rows.empty or pd.isna(rows["value"].iloc[0]):
            return None
        return float(rows["value"].iloc[0])

    def to_json_dict(self) -> dict[str, Any]:
        """Return a JSON-safe summary: tables as records, fits as parameters, flags."""
        fits = {}
        for fish_id, fit_set in self.fits.items():
            fits[fish_id] = {"best": getattr(fit_set, "best", None)}
            for model in ("exponential", "power"):
                fit = getattr(fit_set, model, None) if fit_set is not None else None
                fits[fish_id][model] = None if fit is None else {
                    "params": fit.params,
                    "se": fit.se,
                    "ci95": {k: list(v) for k, v in fit.ci95.items()},
                    "ci_method": fit.ci_method,
                    "aicc": fit.aicc,
                    "n": fit.n,
                }
        return {
            "generator": f"swimlab {__version__}",
            "session_id": self.session_id,
            "settings": self.settings.to_dict(),
            "water": self.water,
            "fish": json_records(self.fish),
            "groups": json_records(self.groups),
            "steps": json_records(self.steps),
            "measure_phases": json_records(self.measure),
            "results": json_records(self.results),
            "fits": fits,
            "flags": json_records(self.flags),
            "import_report": json_records(self.import_report),
            "protocol": None if self.protocol is None else self.protocol.to_json_dict(),
        }


def effective_settings(session: Session, lab_settings: Mapping[str, Any] | None = None) -> LabSettings:
    """Lab defaults, overridden by the lab book's settings, overridden by the session's."""
    merged = dict(lab_settings or {})
    merged.update(session.settings)
    return LabSettings.from_dict(merged)


def analyse(
    session: Session,
    raw_files: Mapping[str, bytes] | None = None,
    *,
    lab_settings: Mapping[str, Any] | None = None,
    n_boot: int = 500,
    seed: int = 0,
    first_swim: Analysis | None = None,
) -> Analysis:
    """Analyse one session.

    Parameters
    ----------
    session
        The validated session.
    raw_files
        Raw logger files keyed by SHA-256 (as the lab book and bundles keep them). A session
        without a trial file is analysed as far as it can be (planning values, geometry).
    lab_settings
        The lab book's settings overrides; the session's own ``settings`` win over them.
    n_boot
        Bootstrap replicates for the speed–MO2 fits' intervals. [-]
    seed
        Seed of every resampling, so results are reproducible. [-]
    first_swim
        For a repeat swim (``protocol.type == "repeat_ucrit"``), the analysis of the first swim
        of the same fish, for the recovery ratio; None otherwise.

    Returns
    -------
    Analysis
    """
    raw_files = dict(raw_files or {})
    settings = effective_settings(session, lab_settings)
    flags: list[dict] = []

    water_props = _water(session, flags)
    fish_table, section_area = _fish_geometry(session, settings, flags)
    calibration = _calibration(session, flags)

    phases = pd.DataFrame(columns=trace.PHASE_COLUMNS)
    measure = pd.DataFrame()
    traces: dict[str, Any] = {}
    concentration: dict[str, np.ndarray] = {}
    import_report = pd.DataFrame(columns=["file", "line", "column", "kind", "value", "action"])
    windows = pd.DataFrame()

    if session.sensor is None:
        flags.append(checks.flag("SENSOR_CALIBRATION_MISSING", "No oxygen sensor calibration recorded."))
    groups = _groups(session, settings, fish_table, section_area, flags)
    if session.protocol.type in ("ramp", "endurance"):
        flags.append(checks.flag(
            "PROTOCOL_NOT_COMPARABLE",
            f"This is a {session.protocol.type} trial; its results are not step Ucrit values.",
        ))

    trial_refs = session.trial_files()
    if len(trial_refs) > 1:
        raise InputError(
            f"the session holds {len(trial_refs)} trial logger files; one trial file per session is "
            "supported — merge them or split the session",
            field="raw_files",
        )
    if trial_refs:
        ref = trial_refs[0]
        if ref.sha256 not in raw_files:
            raise InputError(f"the raw file {ref.name!r} ({ref.sha256[:12]}…) is not available", field="raw_files")
        mapping = logger.ColumnMapping.from_dict(ref.mapping) if ref.mapping else None
        logged = logger.read_logger(raw_files[ref.sha256], name=ref.name, mapping=mapping)
        traces[ref.sha256] = logged
        if not logged.glitches.empty:
            import_report = logged.glitches.assign(file=ref.name)
            flags.append(checks.flag(
                "TRACE_GLITCH",
                f"{len(logged.glitches)} glitch(es) found and handled in {ref.name!r}; see the import report.",
                where=ref.name,
            ))
        phases, measure, concentration, windows = _uptake(session, settings, logged, flags)

    steps_sched = pd.DataFrame(step_table(session), columns=["step", "start_s", "end_s", "set_speed_m_s"])
    group_fatigue = {} if groups.empty else dict(zip(groups["group_id"], groups["fatigue_time_s"], strict=True))
    measure = _assign_steps(measure, steps_sched, session, group_fatigue)
    steps = _steps(session, steps_sched, measure, water_props, section_area, calibration, flags)
    sample_interval_s = _sample_interval(traces)
    results, fits, ucrits, steps = _performance(
        session, settings, steps_sched, steps, measure, windows, flags, n_boot, seed, sample_interval_s, group_fatigue,
    )

    base = Analysis(
        session_id=session.session_id,
        settings=settings,
        water=water_props,
        fish=fish_table,
        phases=phases,
        measure=measure,
        steps=steps,
        results=results,
        fits=fits,
        ucrit=ucrits,
        flags=checks.flags_table(flags),
        traces=traces,
        concentration=concentration,
        import_report=import_report,
        calibration=calibration,
        flume_name=session.flume.name,
        groups=groups,
    )
    # the protocol stage: ramp, endurance, repeat swim, recovery, gait and kinematics
    protocol, protocol_flags = protocol_analysis.analyse_protocol(session, base, first_swim=first_swim)
    return replace(base, protocol=protocol, flags=checks.flags_table(flags + protocol_flags))


# --------------------------------------------------------------------------------------------
# Stages
# --------------------------------------------------------------------------------------------


def _water(session: Session, flags: list[dict]) -> dict[str, float]:
    w = session.water
    pressure_pa = w.barometric_pressure_kpa * 1000.0
    props: dict[str, float] = {
        "temperature_c": w.temperature_c,
        "salinity": w.salinity,
        "barometric_pressure_kpa": w.barometric_pressure_kpa,
    }
    try:
        props["density_kg_m3"] = float(water.density(w.temperature_c, w.salinity, pressure_pa))
        props["kinematic_viscosity_m2_s"] = float(water.kinematic_viscosity(w.temperature_c, w.salinity, pressure_pa))
        props["o2_solubility_mg_l"] = float(oxygen.solubility(w.temperature_c, w.salinity, pressure_pa))
    except OutOfRangeError as exc:
        flags.append(checks.flag("WATER_OUTSIDE_CORRELATION", str(exc)))
    return props


def _section_area(session: Session) -> float:
    f = session.flume
    if f.section_shape == "circular":
        return float(flume.section_area("circular", diameter=f.section_diameter_cm * CM))
    return float(flume.section_area("rectangular", width=f.section_width_cm * CM, height=f.section_height_cm * CM))


def _fish_geometry(session, settings, flags):
    area = _section_area(session)
    rows = []
    for fish in session.fish:
        group = session.group_of(fish.fish_id)
        length, depth, width = fish.total_length_cm * CM, fish.body_depth_cm * CM, fish.body_width_cm * CM
        frontal = float(flume.frontal_area(depth, width))
        volume_fish_l = fish.mass_g * G / settings.fish_density_kg_m3 * 1000.0
        row = {
            "fish_id": fish.fish_id,
            "chamber": fish.chamber,
            "species": fish.species,
            "mass_g": fish.mass_g,
            "total_length_cm": fish.total_length_cm,
            "body_depth_cm": fish.body_depth_cm,
            "body_width_cm": fish.body_width_cm,
            "frontal_area_cm2": frontal / CM**2,
            "section_area_cm2": area / CM**2,
            "blocking_ratio": np.nan,
            "blocking_epsilon": np.nan,
            "blocking_within_limit": False,
            "volume_ratio": (session.flume.respirometer_volume_l - volume_fish_l) / volume_fish_l,
            "wetted_area_cm2": float(hydrodynamics.wetted_area(length, depth, width)) / CM**2,
            "group_id": "" if group is None else group.group_id,
        }
        try:
            ratio = float(flume.blocking_ratio(frontal, area))
            eps = float(flume.solid_blocking(length, depth, width, area))
            row.update(blocking_ratio=ratio, blocking_epsilon=eps, blocking_within_limit=ratio <= settings.blocking_ratio_limit)
            if ratio > settings.blocking_ratio_limit:
                flags.append(checks.flag(
                    "BLOCKING_BEYOND_LIMIT",
                    f"Blocking ratio {ratio:.1%} exceeds the limit {settings.blocking_ratio_limit:.0%}.",
                    scope="fish", where=f"fish {fish.fish_id}",
                ))
        except InputError as exc:
            flags.append(checks.flag("FISH_LARGER_THAN_SECTION", str(exc), scope="fish", where=f"fish {fish.fish_id}"))
        vr = row["volume_ratio"]
        if group is not None:
            row["volume_ratio"] = np.nan  # a shared chamber's ratio is the group's (see _groups)
        elif not settings.volume_ratio_min <= vr <= settings.volume_ratio_max:
            flags.append(checks.flag(
                "VOLUME_RATIO_OUTSIDE_GUIDANCE",
                f"Respirometer-to-fish volume ratio {vr:.0f} is outside "
                f"{settings.volume_ratio_min:g}–{settings.volume_ratio_max:g}.",
                scope="fish", where=f"fish {fish.fish_id}",
            ))
        rows.append(row)
    return pd.DataFrame(rows), area


GROUP_COLUMNS = [
    "group_id", "chamber", "n_fish", "fish_ids", "mass_g", "fish_volume_l", "water_volume_l", "volume_ratio",
    "mean_total_length_cm", "frontal_area_cm2", "blocking_ratio", "blocking_epsilon", "fatigue_definition",
    "fatigue_time_s", "fatigue_from",
]
"""Columns of :attr:`Analysis.groups`."""


def _groups(session: Session, settings: LabSettings, fish_table: pd.DataFrame, section_area: float,
            flags: list[dict]) -> pd.DataFrame:
    """One row per group trial: summed mass and volume, the chamber's water, blocking, fatigue.

    The fish's volumes add (V_fish = Σ M_i / ρ_fish), so the water the group's uptake falls in is
    V_resp − Σ V_fish. Solid blocking of several bodies in one section is taken as additive to
    first order, ε = Σ ε_i (the usual wind-tunnel treatment of several small bodies; from memory),
    and the blocking ratio as Σ A_i / A_section. The group's fatigue time is
    ``protocol.fatigue_time_s`` or, when it is not entered, the fish's fatigue events read by the
    group's definition (:meth:`swimlab.session.Session.group_fatigue_from_events`).
    """
    rows = []
    p = session.protocol
    for unit in session.units():
        if not unit.is_group:
            continue
        group = unit.group
        own = fish_table[fish_table["fish_id"].isin([f.fish_id for f in unit.fish])]
        volume_fish_l = unit.mass_g * G / settings.fish_density_kg_m3 * 1000.0
        water_l = session.flume.respirometer_volume_l - volume_fish_l
        ratio = float(own["blocking_ratio"].sum()) if own["blocking_ratio"].notna().all() else np.nan
        eps = float(own["blocking_epsilon"].sum()) if own["blocking_epsilon"].notna().all() else np.nan
        if p.fatigue_time_s is not None:
            fatigue, source = p.fatigue_time_s, "protocol.fatigue_time_s"
        else:
            group_events = [e.time_s for e in session.events if e.kind == "fatigue" and e.fish_id == group.group_id]
            fatigue = session.group_fatigue_from_events(group)
            source = f"fish fatigue events ({group.fatigue_definition})" if fatigue is not None else "none recorded"
            if fatigue is None and group_events:
                fatigue, source = min(group_events), "group fatigue event"
        rows.append({
            "group_id": group.group_id, "chamber": group.chamber, "n_fish": unit.n_fish,
            "fish_ids": ", ".join(f.fish_id for f in unit.fish), "mass_g": unit.mass_g,
            "fish_volume_l": volume_fish_l, "water_volume_l": water_l,
            "volume_ratio": water_l / volume_fish_l, "mean_total_length_cm": unit.total_length_cm,
            "frontal_area_cm2": float(own["frontal_area_cm2"].sum()), "blocking_ratio": ratio,
            "blocking_epsilon": eps, "fatigue_definition": group.fatigue_definition,
            "fatigue_time_s": np.nan if fatigue is None else float(fatigue), "fatigue_from": source,
        })
        where = f"group {group.group_id}"
        flags.append(checks.flag(
            "GROUP_TRIAL",
            f"Chamber {group.chamber} holds group {group.group_id} of {unit.n_fish} fish "
            f"({rows[-1]['fish_ids']}; {unit.mass_g:g} g in all): MO2 is the group's, computed with the summed mass "
            f"and volume, and given per capita. {checks.GROUP_CAVEAT}",
            scope="channel", where=where, channel=group.chamber))
        if np.isfinite(ratio) and ratio > settings.blocking_ratio_limit:
            flags.append(checks.flag(
                "BLOCKING_BEYOND_LIMIT",
                f"Group {group.group_id}: the fish's summed blocking ratio {ratio:.1%} exceeds the limit "
                f"{settings.blocking_ratio_limit:.0%}.", scope="fish", where=where))
        vr = rows[-1]["volume_ratio"]
        if not settings.volume_ratio_min <= vr <= settings.volume_ratio_max:
            flags.append(checks.flag(
                "VOLUME_RATIO_OUTSIDE_GUIDANCE",
                f"Group {group.group_id}: respirometer-to-fish volume ratio {vr:.0f} (summed fish volume) is outside "
                f"{settings.volume_ratio_min:g}–{settings.volume_ratio_max:g}.", scope="fish", where=where))
    return pd.DataFrame(rows, columns=GROUP_COLUMNS)


def _calibration(session, flags):
    points = session.flume.calibration
    if len(points) < 2:
        return None
    settings_ = np.array([p.motor_setting for p in points])
    speeds = np.array([p.speed_cm_s for p in points]) * CM
    try:
        return flume.fit_speed_calibration(settings_, speeds)
    except InputError as exc:
        flags.append(checks.flag("SPEED_OUTSIDE_CALIBRATION", f"Speed calibration could not be fitted: {exc}"))
        return None


def _uptake(session: Session, settings: LabSettings, logged, flags: list[dict]):
    w = session.water
    pressure_pa = w.barometric_pressure_kpa * 1000.0
    time_s = logged.time_s
    units = {u.chamber: u for u in session.units()}
    chambers = list(units)
    missing = sorted(set(chambers) - set(logged.oxygen))
    if missing:
        raise InputError(
            f"fish chamber(s) {missing} have no oxygen channel in {logged.name!r}; "
            f"the file's channels are {sorted(logged.oxygen)}",
            field="fish.chamber",
        )
    temps = {}
    for channel in chambers:
        if channel in logged.temperature_c:
            temps[channel] = logged.temperature_c[channel]
        else:
            temps[channel] = np.full(time_s.shape, w.temperature_c)
    oxy = {ch: logged.oxygen[ch] for ch in chambers}
    conc = trace.concentration_from_trace(oxy, logged.oxygen_unit, temps, w.salinity, pressure_pa)
    pct = {ch: _percent_air_saturation(conc[ch], temps[ch], w.salinity, pressure_pa) for ch in chambers}

    cycle = session.protocol.cycle
    if cycle.source == "pump":
        if logged.pump is None:
            raise InputError(
                f"the cycle source is the pump channel, but {logged.name!r} has no pump column",
                field="protocol.cycle.source",
            )
        phases = trace.phases_from_pump(time_s, logged.pump, cycle.wait_s)
    elif cycle.source == "schedule":
        phases = trace.phases_from_schedule(time_s, cycle.flush_s, cycle.wait_s, cycle.measure_s, cycle.start_s)
    else:
        first = next(iter(chambers))
        phases = trace.phases_from_shape(time_s, conc[first], cycle.wait_s)

    slopes = trace.fit_slopes(time_s, conc, phases, temperature_c=temps, oxygen_pct=pct, settings=settings)
    flags.extend(trace.phase_flags(slopes, phases, time_s=time_s, oxygen_pct=pct, temperature_c=temps, settings=settings))

    for channel, t in temps.items():
        drift = float(np.nanmax(t) - np.nanmin(t))
        if drift > settings.temperature_drift_trial_max_c:
            flags.append(checks.flag(
                "TEMPERATURE_DRIFT_TRIAL",
                f"Temperature ranged over {drift:.2f} °C during the trial (limit {settings.temperature_drift_trial_max_c:g} °C).",
                scope="channel", where=f"chamber {channel}", channel=channel,
            ))

    blanks = []
    for blank in session.blanks:
        if blank.slope_mg_l_h is not None:
            blanks.append(uptake.BlankRun(blank.channel, blank.time_s, blank.slope_mg_l_h / 3600.0, "entered"))
    # a group's uptake falls in the water left by all its fish: its summed mass gives the summed volume
    chamber_setup = {
        ch: {"respirometer_volume_l": session.flume.respirometer_volume_l, "fish_mass_g": u.mass_g,
             "fish_id": u.unit_id}
        for ch, u in units.items()
    }
    exclusions = {(e.channel, e.cycle): e.reason for e in session.exclusions}
    measure, uptake_flags = uptake.phase_uptake(
        slopes,
        chambers=chamber_setup,
        blanks=blanks,
        background_method=session.background_method if blanks else "none",
        exclusions=exclusions,
        settings=settings,
    )
    # the volume-ratio flag is raised once per fish or group, by _fish_geometry and _groups, with it named
    flags.extend(f for f in uptake_flags if f["code"] != "VOLUME_RATIO_OUTSIDE_GUIDANCE")
    if not measure.empty:
        n_fish = measure["channel"].astype(str).map({ch: u.n_fish for ch, u in units.items()}).fillna(1).astype(int)
        measure = measure.assign(n_fish=n_fish.to_numpy(),
                                 mo2_per_fish_mg_h=measure["mo2_mg_h"].to_numpy(dtype=float) / n_fish.to_numpy())
    windows = trace.steepest_window_slopes(time_s, conc, phases, settings.mmr_window_s)
    return phases, measure, conc, windows


def _sample_interval(traces: Mapping[str, Any]) -> float:
    """Median time between readings of the trial trace. [s]"""
    for logged in traces.values():
        if logged.time_s.size > 1:
            return float(np.median(np.diff(logged.time_s)))
    return 1.0


def _percent_air_saturation(conc: np.ndarray, temp: np.ndarray, salinity: float, pressure_pa: float) -> np.ndarray:
    """% air saturation of every finite reading; missing readings stay missing."""
    out = np.full(conc.shape, np.nan)
    ok = np.isfinite(conc) & np.isfinite(temp)
    out[ok] = oxygen.convert(conc[ok], "mg/L", "% air saturation", temp[ok], salinity, pressure_pa)
    return out


def _window_mo2(windows, phases_used, session, settings, mass_kg, sample_interval_s) -> np.ndarray:
    """MO2 of each phase's steepest window whose slope is well determined.

    A window's relative standard error follows from its R² and number of readings n,
    SE/|b| = √((1 − R²) / (R² (n − 2))) (the t statistic of a regression slope); windows above
    ``settings.slope_relative_se_max`` are left out, because the steepest of many noisy windows
    is biased upwards by the noise itself.
    """
    if windows.empty or phases_used.empty:
        return np.array([])
    w = windows.merge(phases_used[["channel", "cycle", "background_slope_mg_l_s"]], on=["channel", "cycle"])
    n = np.floor(settings.mmr_window_s / sample_interval_s) + 1
    r2 = w["r2"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel_se = np.sqrt((1.0 - r2) / (r2 * (n - 2)))
    ok = np.isfinite(rel_se) & (rel_se <= settings.slope_relative_se_max) & np.isfinite(w["slope_mg_l_s"].to_numpy(dtype=float))
    if not ok.any():
        return np.array([])
    w = w[ok]
    mo2_h = uptake.mo2(w["slope_mg_l_s"].to_numpy(), w["background_slope_mg_l_s"].to_numpy(),
                       session.flume.respirometer_volume_l * 1e-3, mass_kg, settings.fish_density_kg_m3)
    return np.asarray(uptake.mass_specific(mo2_h, mass_kg), dtype=float)


def _assign_steps(measure: pd.DataFrame, steps_sched: pd.DataFrame, session: Session,
                  group_fatigue_s: Mapping[str, float] | None = None) -> pd.DataFrame:
    """Label each measure phase with the speed step it lies in (0 = before the first step).

    A phase belongs to a step when its mid-time falls inside the step; a phase after fatigue
    (or after the last step) is labelled ``-1`` and is not used for the speed–MO2 curve. The
    fatigue time is ``protocol.fatigue_time_s``; a group's is its own, ``group_fatigue_s`` by
    group id (:attr:`Analysis.groups`: the entered time, or read from its fish's events).
    """
    if measure.empty:
        return measure
    mid = (measure["start_s"].to_numpy() + measure["end_s"].to_numpy()) / 2.0
    step = np.zeros(mid.shape, dtype=int)
    if not steps_sched.empty:
        starts = steps_sched["start_s"].to_numpy()
        ends = steps_sched["end_s"].to_numpy()
        idx = np.searchsorted(starts, mid, side="right") - 1
        inside = (idx >= 0) & (mid < ends[np.clip(idx, 0, None)])
        step = np.where(inside, steps_sched["step"].to_numpy()[np.clip(idx, 0, None)], np.where(mid >= ends[-1], -1, 0))
    entered = session.protocol.fatigue_time_s
    fatigue = measure["fish_id"].map(dict(group_fatigue_s or {})).to_numpy(dtype=float)
    fatigue = np.where(np.isnan(fatigue), np.nan if entered is None else entered, fatigue)  # NaN: no fatigue
    step = np.where(measure["end_s"].to_numpy() > fatigue, np.where(mid > fatigue, -1, step), step)
    return measure.assign(step=step.astype(int))


def _steps(session, steps_sched, measure, water_props, section_area, calibration, flags):
    columns = [
        "fish_id", "step", "start_s", "end_s", "set_speed_cm_s", "corrected_speed_cm_s", "speed_bl_s",
        "reynolds", "flow_regime", "drag_mn", "drag_power_mw", "mo2_mg_kg_h", "mo2_sd_mg_kg_h",
        "mo2_se_mg_kg_h", "n_phases", "n_fish", "mo2_mg_h", "mo2_per_fish_mg_h",
    ]
    if steps_sched.empty:
        return pd.DataFrame(columns=columns)
    rows = []
    nu = water_props.get("kinematic_viscosity_m2_s")
    rho = water_props.get("density_kg_m3")
    set_speed = steps_sched["set_speed_m_s"].to_numpy()
    if calibration is not None:
        outside = (set_speed < calibration.speed_min) | (set_speed > calibration.speed_max)
        for number in steps_sched["step"].to_numpy()[outside]:
            flags.append(checks.flag(
                "SPEED_OUTSIDE_CALIBRATION",
                f"Step {number} set speed {set_speed[number - 1] / CM:.1f} cm/s lies outside the calibrated "
                f"{calibration.speed_min / CM:.1f}–{calibration.speed_max / CM:.1f} cm/s.",
                scope="step", where=f"step {number}", step=int(number),
            ))
    for unit in session.units():
        fish = unit.fish[0]
        length, depth, width = fish.total_length_cm * CM, fish.body_depth_cm * CM, fish.body_width_cm * CM
        try:
            if unit.is_group:  # solid blocking of several bodies, additive to first order (see _groups)
                eps = sum(float(flume.solid_blocking(f.total_length_cm * CM, f.body_depth_cm * CM,
                                                     f.body_width_cm * CM, section_area)) for f in unit.fish)
                corrected = np.asarray(flume.speed_at_fish(set_speed, eps), dtype=float)
                length = unit.total_length_cm * CM
            else:
                corrected = np.asarray(flume.corrected_speed(set_speed, length, depth, width, section_area), dtype=float)
        except InputError:
            corrected = np.full(set_speed.shape, np.nan)
        re = drag = power = np.full(set_speed.shape, np.nan)
        regime = np.full(set_speed.shape, "", dtype=object)
        if nu is not None:  # _water gives the viscosity only with the density
            speed_for_hydro = np.where(np.isfinite(corrected), corrected, set_speed)
            re = np.asarray(hydrodynamics.reynolds_number(length, speed_for_hydro, nu), dtype=float)
            regime = np.asarray(hydrodynamics.flow_regime(re), dtype=object)
            # the drag of fish in a school is not that of each fish alone: not computed for a group
            if not unit.is_group:
                drag = np.asarray(hydrodynamics.drag(speed_for_hydro, length, depth, width, rho, nu), dtype=float)
                power = np.asarray(hydrodynamics.drag_power(speed_for_hydro, length, depth, width, rho, nu), dtype=float)
        own = measure[(measure["fish_id"] == unit.unit_id) & measure["used"]] if not measure.empty else measure
        for i, number in enumerate(steps_sched["step"].to_numpy()):
            in_step = own[own["step"] == number] if not own.empty else own
            values = in_step["mo2_mg_kg_h"].to_numpy(dtype=float) if not in_step.empty else np.array([])
            absolute = in_step["mo2_mg_h"].to_numpy(dtype=float) if not in_step.empty else np.array([])
            n = values.size
            rows.append({
                "fish_id": unit.unit_id,
                "step": int(number),
                "start_s": float(steps_sched["start_s"].iloc[i]),
                "end_s": float(steps_sched["end_s"].iloc[i]),
                "set_speed_cm_s": set_speed[i] / CM,
                "corrected_speed_cm_s": corrected[i] / CM,
                "speed_bl_s": (corrected[i] if np.isfinite(corrected[i]) else set_speed[i]) / length,
                "reynolds": re[i],
                "flow_regime": regime[i],
                "drag_mn": drag[i] * 1e3,
                "drag_power_mw": power[i] * 1e3,
                "mo2_mg_kg_h": float(values.mean()) if n else np.nan,
                "mo2_sd_mg_kg_h": float(values.std(ddof=1)) if n > 1 else np.nan,
                "mo2_se_mg_kg_h": float(values.std(ddof=1) / np.sqrt(n)) if n > 1 else np.nan,
                "n_phases": n,
                "n_fish": unit.n_fish,
                "mo2_mg_h": float(absolute.mean()) if n else np.nan,
                "mo2_per_fish_mg_h": float(absolute.mean()) / unit.n_fish if n else np.nan,
            })
        if np.any(regime == "transitional"):
            flags.append(checks.flag(
                "FLOW_TRANSITIONAL",
                "Reynolds number lies in the transitional range at one or more steps.",
                scope="fish", where=f"{'group' if unit.is_group else 'fish'} {unit.unit_id}",
            ))
    return pd.DataFrame(rows, columns=columns)


def _note_group(rows: list[dict], start: int, note: str) -> None:
    """Add a group trial's caveat to the notes of the result rows from ``start`` on."""
    if not note:
        return
    for row in rows[start:]:
        row["note"] = f"{row['note']}; {note}" if row["note"] else note


def _performance(session, settings, steps_sched, steps, measure, windows, flags, n_boot, seed, sample_interval_s,
                 group_fatigue=None):
    result_rows: list[dict] = []
    fits: dict[str, Any] = {}
    ucrits: dict[str, dict[str, Any]] = {}
    protocol = session.protocol
    step_protocol = protocol.type in ("step_ucrit", "repeat_ucrit")
    extra_cols = {"cot_gross_mg_kg_km": np.nan, "cot_net_mg_kg_km": np.nan, "cot_gross_j_kg_m": np.nan,
                  "net_metabolic_power_mw": np.nan, "efficiency": np.nan}
    steps = steps.assign(**extra_cols)

    def add(fish_id, quantity, value, unit, method, ci=None, note=""):
        result_rows.append({
            "fish_id": fish_id, "quantity": quantity,
            "value": np.nan if value is None else float(value), "unit": unit, "method": method,
            "ci_low": np.nan if ci is None else float(ci[0]), "ci_high": np.nan if ci is None else float(ci[1]),
            "note": note,
        })

    group_fatigue = group_fatigue or {}
    for unit in session.units():
        fid = unit.unit_id
        length = unit.total_length_cm * CM
        mass_kg = unit.mass_g * G
        own_steps = steps[steps["fish_id"] == fid]
        group_note = "" if not unit.is_group else (
            f"group trial of {unit.n_fish} fish ({unit.mass_g:g} g summed; MO2 per capita): not comparable with fish swum alone")
        result_start = len(result_rows)

        # Ucrit on corrected and on set speeds (Brett 1964).
        if step_protocol and not steps_sched.empty:
            durations = (steps_sched["end_s"] - steps_sched["start_s"]).to_numpy()
            fatigue_at = protocol.fatigue_time_s
            if unit.is_group and fatigue_at is None and np.isfinite(group_fatigue.get(fid, np.nan)):
                fatigue_at = float(group_fatigue[fid])
            fatigue = None if fatigue_at is None else fatigue_at - protocol.start_s
            corrected = own_steps["corrected_speed_cm_s"].to_numpy() * CM
            set_speeds = own_steps["set_speed_cm_s"].to_numpy() * CM
            res_set = performance.ucrit(set_speeds, durations, fatigue, body_length_m=length, settings=settings)
            res_cor = (
                performance.ucrit(corrected, durations, fatigue, body_length_m=length, settings=settings)
                if np.all(np.isfinite(corrected)) else None
            )
            ucrits[fid] = {"corrected": res_cor, "set": res_set}
            for f in res_set.flags:
                flags.append({**f, "where": f.get("where") or f"fish {fid}"})
            basis = "" if not unit.is_group else (
                f"; group fatigue: {unit.group.fatigue_definition.replace('_', ' ')}, mean body length")
            if res_cor is not None and res_cor.ucrit_m_s is not None:
                add(fid, "ucrit", res_cor.ucrit_m_s / CM, "cm/s", f"Brett (1964), blocking-corrected speed{basis}")
                add(fid, "ucrit_bl", res_cor.ucrit_bl_s, "BL/s", f"Brett (1964), blocking-corrected speed{basis}")
            if res_set.ucrit_m_s is not None:
                add(fid, "ucrit_set", res_set.ucrit_m_s / CM, "cm/s", f"Brett (1964), set speed (uncorrected){basis}")

        # Speed–MO2 fits on per-phase MO2 against corrected speed.
        own_measure = measure[(measure["fish_id"] == fid) & measure["used"] & (measure["step"] > 0)] if not measure.empty else pd.DataFrame()
        if own_measure.empty or own_steps.empty:
            fits[fid] = None
            _note_group(result_rows, result_start, group_note)
            continue
        speed_of_step = dict(zip(own_steps["step"], own_steps["corrected_speed_cm_s"].fillna(own_steps["set_speed_cm_s"]) * CM, strict=True))
        u = own_measure["step"].map(speed_of_step).to_numpy(dtype=float)
        mo2 = own_measure["mo2_mg_kg_h"].to_numpy(dtype=float)
        fit_set = performance.fit_speed_metabolism(u, mo2, n_boot=n_boot, seed=seed, settings=settings)
        fits[fid] = fit_set
        for f in fit_set.flags:
            flags.append({**f, "where": f.get("where") or f"fish {fid}"})
        best = getattr(fit_set, fit_set.best) if fit_set.best else None

        # SMR: extrapolated, and from resting phases where they exist (Chabot et al. 2016).
        smr_value = None
        if best is not None:
            smr = performance.smr_from_fit(fit_set)
            add(fid, "smr", smr.value, "mg O2 kg-1 h-1", f"speed–MO2 fit extrapolated to zero speed ({best.model})", smr.ci95)
            smr_value = smr.value
        resting = measure[(measure["fish_id"] == fid) & measure["used"] & (measure["step"] == 0)]
        if len(resting) >= 10:
            q = performance.smr_low_quantile(resting["mo2_mg_kg_h"].to_numpy(), q=settings.smr_quantile)
            add(fid, "smr_quantile", q.value, "mg O2 kg-1 h-1",
                f"low quantile (q = {settings.smr_quantile:g}) of {len(resting)} resting phases; Chabot et al. (2016)", q.ci95)
            m = performance.smr_mlnd(resting["mo2_mg_kg_h"].to_numpy())
            add(fid, "smr_mlnd", m.value, "mg O2 kg-1 h-1",
                f"mean of the lowest normal distribution of {len(resting)} resting phases; Chabot et al. (2016)", m.ci95)

        # MMR: the steepest window inside the swimming phases, where the window's slope is
        # well determined; otherwise the highest whole-phase MO2 (labelled as such).
        mmr_value = None
        swimming = own_measure
        window_mo2 = _window_mo2(windows, swimming, session, settings, mass_kg, sample_interval_s)
        if window_mo2.size:
            mmr = performance.mmr(window_mo2, method="swimming_peak", window_s=settings.mmr_window_s)
            add(fid, "mmr", mmr.value, "mg O2 kg-1 h-1",
                f"highest MO2 over a {settings.mmr_window_s:g} s sliding window in the swimming phases")
            mmr_value = mmr.value
        elif not swimming.empty:
            mmr = performance.mmr(swimming["mo2_mg_kg_h"].to_numpy(dtype=float), method="swimming_peak")
            add(fid, "mmr", mmr.value, "mg O2 kg-1 h-1", "highest whole-phase MO2 in the swimming phases",
                note=f"no {settings.mmr_window_s:g} s window had a slope with relative SE ≤ "
                f"{settings.slope_relative_se_max:g}; whole phases used (this underestimates a short peak)")
            mmr_value = mmr.value
        if smr_value is not None and mmr_value is not None and mmr_value >= smr_value:
            aas, fas = performance.aerobic_scope(smr_value, mmr_value)
            add(fid, "aas", aas, "mg O2 kg-1 h-1", "MMR − SMR")
            add(fid, "fas", fas, "-", "MMR / SMR")

        # Cost of transport, Uopt, efficiency per step.
        sel = steps["fish_id"] == fid
        u_steps = (steps.loc[sel, "corrected_speed_cm_s"].fillna(steps.loc[sel, "set_speed_cm_s"]) * CM).to_numpy()
        mo2_steps = steps.loc[sel, "mo2_mg_kg_h"].to_numpy(dtype=float)
        ok = np.isfinite(mo2_steps) & (u_steps > 0)
        if ok.any():
            cot = performance.cost_of_transport(
                mo2_steps[ok], u_steps[ok], smr_mg_kg_h=smr_value,
                oxycaloric_j_per_mg_o2=settings.oxycaloric_j_per_mg_o2,
            )
            idx = steps.index[sel][ok]
            steps.loc[idx, "cot_gross_mg_kg_km"] = cot["cot_gross_mg_kg_km"].to_numpy()
            steps.loc[idx, "cot_gross_j_kg_m"] = cot["cot_gross_j_kg_m"].to_numpy()
            if smr_value is not None:
                steps.loc[idx, "cot_net_mg_kg_km"] = cot["cot_net_mg_kg_km"].to_numpy()
                above = mo2_steps[ok] > smr_value  # net power below SMR has no meaning
                if above.any():
                    idx_above = idx[above]
                    net_w = np.asarray(performance.metabolic_power_w(
                        mo2_steps[ok][above] - smr_value, mass_kg, settings.oxycaloric_j_per_mg_o2))
                    steps.loc[idx_above, "net_metabolic_power_mw"] = net_w * 1e3
                    drag_w = steps.loc[idx_above, "drag_power_mw"].to_numpy(dtype=float) * 1e-3
                    has_drag = np.isfinite(drag_w) & (drag_w > 0)
                    if has_drag.any():
                        steps.loc[idx_above[has_drag], "efficiency"] = np.asarray(
                            performance.efficiency(drag_w[has_drag], net_w[has_drag]))
        if best is not None:
            tested = (float(np.nanmin(u)), float(np.nanmax(u)))
            uopt = performance.optimal_speed(best, tested_range=tested)
            note = "outside the tested speeds" if uopt.outside_tested else ""
            if uopt.uopt_m_s is not None:
                add(fid, "uopt", uopt.uopt_m_s / CM, "cm/s", f"minimum gross COT of the {best.model} fit",
                    None if uopt.uopt_ci95 is None else tuple(np.asarray(uopt.uopt_ci95) / CM), note)
                add(fid, "uopt_bl", uopt.uopt_m_s / length, "BL/s", f"minimum gross COT of the {best.model} fit", None, note)
                add(fid, "cotmin", uopt.cotmin_mg_kg_km, "mg O2 kg-1 km-1", f"gross COT at Uopt ({best.model} fit)",
                    uopt.cotmin_ci95, note)
            for f in uopt.flags:
                flags.append({**f, "where": f.get("where") or f"fish {fid}"})
        _note_group(result_rows, result_start, group_note)

    results = pd.DataFrame(
        result_rows, columns=["fish_id", "quantity", "value", "unit", "method", "ci_low", "ci_high", "note"]
    )
    return results, fits, ucrits, steps

"""Background (blank) correction and oxygen uptake (MO2) of the measure phases.

The slope of a measure phase includes the respiration of microbes in the respirometer
(background). Blank runs — the respirometer without the fish, before and after the trial, or
entered from a separate record — give the background slope at their times; it is carried to each
phase's time by one of the methods of :func:`background_slope` and subtracted before MO2 is
computed (Svendsen, Bushnell & Steffensen 2016; Rodgers, Tenzing & Clark 2016).

The background slope is taken as a rate of decline in the respirometer (mg L⁻¹ s⁻¹) that is the
same with and without the fish, the usual practice; the small change of water volume when the
fish is in (a share V_fish / V_resp) is not corrected.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from swimlab import _validate, checks
from swimlab.constants import G_PER_KG, MOLAR_MASS_O2, SECONDS_PER_HOUR
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings

__all__ = [
    "BACKGROUND_METHODS",
    "BlankRun",
    "background_slope",
    "blank_slopes_from_trace",
    "mass_specific",
    "mo2",
    "phase_uptake",
    "scale_to_reference_mass",
    "step_means",
    "steps_of_phases",
    "umol_g_h_from_mg_kg_h",
]


LITRES_PER_M3 = 1000.0
"""Litres in one cubic metre. [L/m³] Definition."""

BACKGROUND_METHODS = ("none", "constant", "linear", "exponential")
"""Valid ``method`` values of :func:`background_slope`."""


@dataclass(frozen=True)
class BlankRun:
    """One background (blank) slope.

    Attributes
    ----------
    channel
        Respirometer channel the blank belongs to.
    time_s
        Mid-time of the blank on the trial's trace clock; negative = before the trace start. [s]
    slope_mg_l_s
        Slope of oxygen in the empty respirometer; negative = decline. [mg L⁻¹ s⁻¹]
    source
        ``"entered"`` (typed in from a record) or ``"trace"`` (fitted from a logged trace).
    """

    channel: str
    time_s: float
    slope_mg_l_s: float
    source: str = "entered"

    def __post_init__(self) -> None:
        for name in ("time_s", "slope_mg_l_s"):
            value = getattr(self, name)
            if isinstance(value, bool) or not np.isfinite(float(value)):
                raise InputError(f"a blank's {name} must be a finite number; got {value!r}",
                                 field=f"blanks.{self.channel}.{name}")
        if self.source not in ("entered", "trace"):
            raise InputError(f"a blank's source must be 'entered' or 'trace'; got {self.source!r}",
                             field=f"blanks.{self.channel}.source")


def blank_slopes_from_trace(slopes: pd.DataFrame, channel: str, *, cycles: Sequence[int] | None = None,
                            time_offset_s: float = 0.0,
                            settings: LabSettings = DEFAULT_SETTINGS) -> list[BlankRun]:
    """Blank runs from the measure phases of a trace logged without the fish.

    Parameters
    ----------
    slopes
        Table from :func:`swimlab.trace.fit_slopes` on the blank trace (or on a trial trace whose
        first or last cycles ran without the fish).
    channel
        Channel whose blanks are wanted.
    cycles
        Cycles that are blanks; None takes every cycle of the channel.
    time_offset_s
        Start of the blank trace on the trial's trace clock (negative when the blank was logged
        before the trial). [s]
    settings
        Lab settings (``min_points_per_phase``, ``noise_ratio_max``, ``r2_min``).

    Returns
    -------
    list of :class:`BlankRun`, source ``"trace"``, one per usable phase, at its mid-time.

    Notes
    -----
    A blank's slope is expected to be near zero, so the relative-SE and R² tests of a fish phase
    would reject good blanks; a blank phase is used when it has enough readings and its scatter
    is no more than ``noise_ratio_max`` times the sensor noise or its R² passes (i.e. it was not
    rejected for PHASE_TOO_FEW_POINTS or for PHASE_POOR_FIT with PHASE_EXCESS_SCATTER).
    """
    rows = slopes[slopes["channel"].astype(str) == str(channel)]
    if cycles is not None:
        wanted = {int(c) for c in cycles}
        found = set(rows["cycle"].astype(int))
        lost = sorted(wanted - found)
        if lost:
            raise InputError(f"channel {channel!r} has no measure phase in cycles {lost}; its cycles "
                             f"are {sorted(found)}", field="blanks.cycles")
        rows = rows[rows["cycle"].astype(int).isin(wanted)]
    codes = rows["rejected_by"].astype(str)
    usable = ~codes.str.contains("PHASE_TOO_FEW_POINTS") & ~codes.str.contains("PHASE_EXCESS_SCATTER")
    rows = rows[usable.to_numpy() & (rows["n_points"].to_numpy() >= settings.min_points_per_phase)]
    offset = float(_validate.finite("time_offset_s", time_offset_s, "s"))
    mid = (rows["start_s"].to_numpy() + rows["end_s"].to_numpy()) / 2.0 + offset
    return [BlankRun(str(channel), float(m), float(b), "trace")
            for m, b in zip(mid, rows["slope_mg_l_s"].to_numpy(), strict=True)]


def _blank_points(blanks: Sequence[BlankRun], channel: str) -> tuple[np.ndarray, np.ndarray]:
    own = [b for b in blanks if str(b.channel) == str(channel)]
    times = np.array([b.time_s for b in own], dtype=float)
    slopes = np.array([b.slope_mg_l_s for b in own], dtype=float)
    order = np.argsort(times, kind="stable")
    return times[order], slopes[order]


def background_slope(time_s: Any, blanks: Sequence[BlankRun], channel: str, method: str = "linear") -> Any:
    """Background slope at given times, from a channel's blank runs.

    Parameters
    ----------
    time_s
        Times at which the background is wanted (e.g. each phase's mid-time). [s]
    blanks
        Blank runs; only those of ``channel`` are used.
    channel
        Respirometer channel.
    method
        ``"none"``: zero (no correction). ``"constant"``: the mean of the blank slopes.
        ``"linear"``: interpolated linearly in time between blanks, and held at the first or
        last blank's value outside them (no trend is extrapolated). ``"exponential"``: the
        least-squares line through ln(−slope) against time, b(t) = −exp(a + k t), fitted to three
        or more blanks that all decline, and extrapolated along the curve.

    Returns
    -------
    Background slope at each time (negative = decline), same kind as ``time_s``. [mg L⁻¹ s⁻¹]

    Notes
    -----
    Background respiration is microbial and tends to grow over a long trial; Rodgers, Tenzing &
    Clark (2016) found it changed non-linearly (sigmoidally) over days, so a single blank or a
    straight line between a blank before and one after may misstate it. The exponential form is
    the growing part of such a curve (microbial growth); with blanks spread over the trial it is
    the closer description, and a flat or linear carry is the cautious choice with two blanks.
    Where blanks were not measured, ``"none"`` leaves the fish charged with the microbes'
    uptake. Linear interpolation as :func:`numpy.interp`. Several blanks at one time are
    averaged.
    """
    _validate.choice("background method", method, BACKGROUND_METHODS)
    t = _validate.finite("time_s", time_s, "s")
    if method == "none":
        return _validate.like_input(np.zeros(t.shape), time_s)
    times, slopes = _blank_points(blanks, channel)
    if times.size == 0:
        raise InputError(f"no blank run for channel {channel!r}; background method {method!r} needs "
                         f"at least one (or use 'none')", field=f"blanks.{channel}")
    if method == "constant":
        return _validate.like_input(np.full(t.shape, slopes.mean()), time_s)
    if method == "linear":
        unique_t, inverse = np.unique(times, return_inverse=True)
        mean_b = np.bincount(inverse, weights=slopes) / np.bincount(inverse)
        return _validate.like_input(np.interp(t, unique_t, mean_b), time_s)
    if times.size < 3:
        raise InputError(f"background method 'exponential' needs at least 3 blank runs for channel "
                         f"{channel!r}; got {times.size} (use 'linear' or 'constant')",
                         field=f"blanks.{channel}")
    if (slopes >= 0).any():
        bad = float(slopes[slopes >= 0][0])
        raise InputError(f"background method 'exponential' needs every blank of channel {channel!r} "
                         f"to decline (slope < 0); one is {bad!r} mg/L/s (use 'linear')",
                         field=f"blanks.{channel}")
    if np.ptp(times) == 0:
        raise InputError(f"the blanks of channel {channel!r} are all at one time; the exponential "
                         f"growth of background cannot be fitted", field=f"blanks.{channel}")
    centre = times.mean()
    x = times - centre
    ln_b = np.log(-slopes)
    k = np.sum(x * (ln_b - ln_b.mean())) / np.sum(x * x)
    a = ln_b.mean()
    return _validate.like_input(-np.exp(a + k * (t - centre)), time_s)


def _fish_volume_m3(fish_mass_kg: np.ndarray, fish_density_kg_m3: float) -> np.ndarray:
    density = _validate.positive("fish_density_kg_m3", fish_density_kg_m3, "kg/m³")
    return fish_mass_kg / density


def mo2(slope_mg_l_s: Any, background_slope_mg_l_s: Any, respirometer_volume_m3: Any,
        fish_mass_kg: Any, fish_density_kg_m3: float = 1000.0) -> Any:
    """Oxygen uptake of the fish in a measure phase.

    Parameters
    ----------
    slope_mg_l_s
        Slope of oxygen in the measure phase; negative = decline. [mg L⁻¹ s⁻¹]
    background_slope_mg_l_s
        Background slope at the phase's time; negative = decline. [mg L⁻¹ s⁻¹]
    respirometer_volume_m3
        Volume of the whole closed respirometer (swim section, pipes and pump). [m³]
    fish_mass_kg
        Mass of the fish. [kg]
    fish_density_kg_m3
        Density of the fish, to get its volume. [kg/m³]

    Returns
    -------
    MO2 of the fish, same kind as the slope. [mg O2 h⁻¹]

    Notes
    -----
    MO2 = −(b − b_bg) · (V_resp − V_fish) · 3600, with V in litres and V_fish = M / ρ_fish:
    the rate of fall of concentration times the volume of water it falls in. This is equation 1
    of Svendsen, Bushnell & Steffensen (2016), MO2 = (V_re − V_f) ΔC/Δt M_f⁻¹, before its
    division by mass (equation as recalled, from memory; the same form is in Steffensen 1989).
    """
    b = _validate.finite("slope_mg_l_s", slope_mg_l_s, "mg/L/s")
    bg = _validate.finite("background_slope_mg_l_s", background_slope_mg_l_s, "mg/L/s")
    v = _validate.positive("respirometer_volume_m3", respirometer_volume_m3, "m³")
    m = _validate.positive("fish_mass_kg", fish_mass_kg, "kg")
    v_fish = _fish_volume_m3(m, fish_density_kg_m3)
    water = v - v_fish
    if (water <= 0).any():
        raise InputError(
            f"the fish's volume ({float(np.max(v_fish)) * LITRES_PER_M3:g} L from its mass and density) "
            f"is not smaller than the respirometer's ({float(np.min(v)) * LITRES_PER_M3:g} L)",
            field="respirometer_volume_m3")
    result = -(b - bg) * water * LITRES_PER_M3 * SECONDS_PER_HOUR
    return _validate.like_input(result, slope_mg_l_s, background_slope_mg_l_s,
                                respirometer_volume_m3, fish_mass_kg)


def mass_specific(mo2_mg_h: Any, fish_mass_kg: Any) -> Any:
    """MO2 per kilogram of fish.

    Parameters
    ----------
    mo2_mg_h
        MO2 of the fish. [mg O2 h⁻¹]
    fish_mass_kg
        Mass of the fish. [kg]

    Returns
    -------
    Mass-specific MO2. [mg O2 kg⁻¹ h⁻¹]
    """
    value = _validate.finite("mo2_mg_h", mo2_mg_h, "mg/h")
    m = _validate.positive("fish_mass_kg", fish_mass_kg, "kg")
    return _validate.like_input(value / m, mo2_mg_h, fish_mass_kg)


def scale_to_reference_mass(mo2_mg_kg_h: Any, mass_kg: Any, reference_mass_kg: float,
                            exponent: float) -> Any:
    """Mass-specific MO2 scaled to a reference body mass.

    Parameters
    ----------
    mo2_mg_kg_h
        Mass-specific MO2 of a fish of ``mass_kg``. [mg O2 kg⁻¹ h⁻¹]
    mass_kg
        Mass of the fish. [kg]
    reference_mass_kg
        Mass to scale to. [kg]
    exponent
        Mass-scaling exponent b of whole-animal MO2 ∝ M^b. [-]

    Returns
    -------
    MO2 of a fish of the reference mass. [mg O2 kg⁻¹ h⁻¹]

    Notes
    -----
    Whole-animal MO2 = a M^b, so mass-specific MO2 = a M^(b − 1) and
    MO2_ref = MO2 · (M / M_ref)^(1 − b) (allometric scaling; b near 0.8 for fish, Clarke &
    Johnston 1999).
    """
    value = _validate.finite("mo2_mg_kg_h", mo2_mg_kg_h, "mg/kg/h")
    m = _validate.positive("mass_kg", mass_kg, "kg")
    ref = _validate.positive("reference_mass_kg", reference_mass_kg, "kg")
    b = _validate.finite("exponent", exponent)
    return _validate.like_input(value * (m / ref) ** (1.0 - b), mo2_mg_kg_h, mass_kg)


def umol_g_h_from_mg_kg_h(mo2_mg_kg_h: Any) -> Any:
    """Mass-specific MO2 in µmol O2 g⁻¹ h⁻¹ from mg O2 kg⁻¹ h⁻¹.

    Parameters
    ----------
    mo2_mg_kg_h
        Mass-specific MO2. [mg O2 kg⁻¹ h⁻¹]

    Returns
    -------
    Mass-specific MO2. [µmol O2 g⁻¹ h⁻¹]

    Notes
    -----
    1 mg O2 = 1000 / M(O2) µmol with M(O2) = 31.9988 g/mol (:data:`swimlab.constants.MOLAR_MASS_O2`);
    1 kg = 1000 g. So µmol g⁻¹ h⁻¹ = mg kg⁻¹ h⁻¹ / 31.9988.
    """
    value = _validate.finite("mo2_mg_kg_h", mo2_mg_kg_h, "mg/kg/h")
    return _validate.like_input(value * (1000.0 / MOLAR_MASS_O2) / G_PER_KG, mo2_mg_kg_h)


UPTAKE_COLUMNS = [
    "fish_id", "respirometer_volume_l", "fish_mass_g", "background_slope_mg_l_s", "background_share",
    "mo2_mg_h", "mo2_mg_kg_h", "mo2_se_mg_kg_h", "excluded", "exclusion_reason", "used",
]
"""Columns that :func:`phase_uptake` adds to the slopes table."""


def _chamber(chambers: Mapping[str, Mapping[str, Any]], channel: str) -> tuple[float, float, Any]:
    if channel not in chambers:
        raise InputError(f"channel {channel!r} has measure phases but no chamber set-up; set-ups are "
                         f"given for {sorted(chambers)}", field=f"chambers.{channel}")
    setup = chambers[channel]
    for key in ("respirometer_volume_l", "fish_mass_g"):
        if key not in setup:
            raise InputError(f"the set-up of channel {channel!r} lacks {key}", field=f"chambers.{channel}.{key}")
    volume_l = float(_validate.positive(f"chambers[{channel!r}].respirometer_volume_l",
                                        setup["respirometer_volume_l"], "L"))
    mass_g = float(_validate.positive(f"chambers[{channel!r}].fish_mass_g", setup["fish_mass_g"], "g"))
    return volume_l, mass_g, setup.get("fish_id", channel)


def phase_uptake(
    slopes: pd.DataFrame,
    *,
    chambers: Mapping[str, Mapping[str, Any]],
    blanks: Sequence[BlankRun] = (),
    background_method: str = "linear",
    exclusions: Mapping[tuple[str, int], str] | None = None,
    settings: LabSettings = DEFAULT_SETTINGS,
) -> tuple[pd.DataFrame, list[dict]]:
    """Background-corrected MO2 of every measure phase, with the uptake checks.

    Parameters
    ----------
    slopes
        Table from :func:`swimlab.trace.fit_slopes`.
    chambers
        Per channel: ``respirometer_volume_l`` [L], ``fish_mass_g`` [g] and optionally ``fish_id``.
    blanks
        Blank runs of any channel.
    background_method
        Method of :func:`background_slope`; a channel without blanks gets no correction and a
        BACKGROUND_MISSING flag.
    exclusions
        Phases a person excluded: (channel, cycle) -> reason.
    settings
        Lab settings: ``fish_density_kg_m3``, ``background_share_max``, ``volume_ratio_min``,
        ``volume_ratio_max``, ``reference_mass_kg``, ``mass_exponent``.

    Returns
    -------
    (table, flags): the slopes table with the columns of :data:`UPTAKE_COLUMNS` added (and
    ``mo2_ref_mg_kg_h`` when ``settings.reference_mass_kg`` is set), and a list of flag dicts.

    Notes
    -----
    ``background_slope_mg_l_s`` is the background at the phase's mid-time;
    ``background_share`` = background slope / phase slope, the share of the decline that the
    correction removes. MO2 by :func:`mo2`, per kg by :func:`mass_specific`.
    ``mo2_se_mg_kg_h`` = SE(slope) · (V_resp − V_fish) · 3600 / M, the slope's own standard
    error carried through the linear formula; the blanks' uncertainty is not included.
    ``used`` = accepted and not excluded and MO2 > 0. BACKGROUND_HIGH is raised for used
    phases only (a phase whose background exceeds its decline gets MO2_NOT_POSITIVE). The volume
    ratio is (V_resp − V_fish) / V_fish (``volume_ratio`` in docs/nomenclature.md), checked against ``volume_ratio_min`` … ``volume_ratio_max`` (common
    practice; Svendsen et al. 2016 discuss the choice).
    """
    _validate.choice("background method", background_method, BACKGROUND_METHODS)
    exclusions = dict(exclusions or {})
    table = slopes.copy().reset_index(drop=True)
    flags: list[dict] = []
    n = len(table)
    keys = set(zip(table["channel"].astype(str), table["cycle"].astype(int), strict=True)) if exclusions else set()
    for key, reason in exclusions.items():
        try:
            channel, cycle = str(key[0]), int(key[1])
        except (TypeError, ValueError, IndexError) as exc:
            raise InputError(f"an exclusion must be keyed by (channel, cycle); got {key!r}",
                             field="exclusions") from exc
        if (channel, cycle) not in keys:
            raise InputError(f"excluded phase (channel {channel!r}, cycle {cycle}) is not a measure "
                             f"phase of this trace", field="exclusions")
        if not isinstance(reason, str) or not reason.strip():
            raise InputError(f"the exclusion of channel {channel!r}, cycle {cycle} needs a reason",
                             field="exclusions")
    density = float(settings.fish_density_kg_m3)
    cols = {name: np.full(n, np.nan) for name in ("respirometer_volume_l", "fish_mass_g",
                                                  "background_slope_mg_l_s", "mo2_mg_h", "mo2_mg_kg_h",
                                                  "mo2_se_mg_kg_h")}
    fish_id = np.empty(n, dtype=object)
    channels = table["channel"].astype(str).to_numpy()
    mid = (table["start_s"].to_numpy() + table["end_s"].to_numpy()) / 2.0
    slope = table["slope_mg_l_s"].to_numpy(dtype=float)
    slope_se = table["slope_se_mg_l_s"].to_numpy(dtype=float)
    for channel in dict.fromkeys(channels):
        rows = channels == channel
        volume_l, mass_g, fid = _chamber(chambers, channel)
        mass_kg = mass_g / G_PER_KG
        v_fish_l = mass_kg / density * LITRES_PER_M3
        if v_fish_l >= volume_l:
            raise InputError(f"the fish in channel {channel!r} ({mass_g:g} g, {v_fish_l:g} L) does not "
                             f"fit the {volume_l:g} L respirometer",
                             field=f"chambers.{channel}.respirometer_volume_l")
        water_l = volume_l - v_fish_l
        ratio = water_l / v_fish_l
        if not settings.volume_ratio_min <= ratio <= settings.volume_ratio_max:
            flags.append(checks.flag(
                "VOLUME_RATIO_OUTSIDE_GUIDANCE",
                f"Respirometer-to-fish volume ratio {ratio:.0f} lies outside "
                f"{settings.volume_ratio_min:g}–{settings.volume_ratio_max:g}.",
                scope="channel", where=f"chamber {channel}", channel=channel))
        own_blanks = [b for b in blanks if str(b.channel) == channel]
        method = background_method
        if not own_blanks:
            flags.append(checks.flag(
                "BACKGROUND_MISSING",
                f"No blank run for chamber {channel}; MO2 includes microbial respiration.",
                scope="channel", where=f"chamber {channel}", channel=channel))
            method = "none"
        bg = np.asarray(background_slope(mid[rows], own_blanks, channel, method), dtype=float)
        ok = np.isfinite(slope[rows])
        value = np.full(rows.sum(), np.nan)
        if ok.any():
            value[ok] = mo2(slope[rows][ok], bg[ok], volume_l / LITRES_PER_M3, mass_kg, density)
        cols["respirometer_volume_l"][rows] = volume_l
        cols["fish_mass_g"][rows] = mass_g
        cols["background_slope_mg_l_s"][rows] = bg
        cols["mo2_mg_h"][rows] = value
        cols["mo2_mg_kg_h"][rows] = value / mass_kg
        cols["mo2_se_mg_kg_h"][rows] = slope_se[rows] * water_l * SECONDS_PER_HOUR / mass_kg
        fish_id[rows] = fid
    with np.errstate(invalid="ignore", divide="ignore"):
        share = cols["background_slope_mg_l_s"] / slope
    if exclusions:
        pairs = list(zip(channels, table["cycle"].astype(int), strict=True))
        excluded = np.array([p in exclusions for p in pairs], dtype=bool)
        reason = np.array([exclusions.get(p, "") for p in pairs], dtype=object)
    else:
        excluded = np.zeros(n, dtype=bool)
        reason = np.full(n, "", dtype=object)
    accepted = table["accepted"].to_numpy().astype(bool)
    with np.errstate(invalid="ignore"):
        positive = cols["mo2_mg_h"] > 0
    used = accepted & ~excluded & positive
    added = {"fish_id": fish_id, **cols, "background_share": share, "excluded": excluded,
             "exclusion_reason": reason, "used": used}
    table = pd.concat([table.drop(columns=[c for c in added if c in table.columns]),
                       pd.DataFrame({c: added[c] for c in UPTAKE_COLUMNS}, index=table.index)], axis=1)
    if settings.reference_mass_kg is not None:
        masses = cols["fish_mass_g"] / G_PER_KG
        ok = np.isfinite(cols["mo2_mg_kg_h"])
        scaled = np.full(n, np.nan)
        scaled[ok] = scale_to_reference_mass(cols["mo2_mg_kg_h"][ok], masses[ok],
                                             settings.reference_mass_kg, settings.mass_exponent)
        table["mo2_ref_mg_kg_h"] = scaled
        flags.append(checks.flag(
            "MASS_SCALED",
            f"MO2 scaled to {settings.reference_mass_kg:g} kg with exponent {settings.mass_exponent:g}.",
            scope="session"))
    cycles = table["cycle"].to_numpy()

    def add(code: str, mask: np.ndarray, text) -> None:
        for k in np.flatnonzero(mask):
            flags.append(checks.flag(code, text(k), scope="phase",
                                     where=f"chamber {channels[k]}, cycle {int(cycles[k])}",
                                     channel=str(channels[k]), cycle=int(cycles[k])))

    with np.errstate(invalid="ignore"):
        high = accepted & ~excluded & positive & (share > settings.background_share_max)
        not_positive = accepted & ~excluded & ~positive
    add("BACKGROUND_HIGH", high,
        lambda k: f"Background is {100 * share[k]:.0f} % of the phase's decline (limit "
                  f"{100 * settings.background_share_max:g} %).")
    add("MO2_NOT_POSITIVE", not_positive,
        lambda k: f"MO2 is {cols['mo2_mg_h'][k]:.3g} mg/h after background correction; the phase is "
                  f"not used.")
    add("PHASE_EXCLUDED", excluded, lambda k: f"Excluded: {reason[k]}")
    return table, flags


def steps_of_phases(start_s: Any, end_s: Any, step_start_s: Any, step_end_s: Any) -> np.ndarray:
    """Step (1-based) that each phase lies in, or 0 for a phase in no step.

    Parameters
    ----------
    start_s, end_s
        First and last reading time of each phase. [s]
    step_start_s, step_end_s
        Start and end of each step, in order and not overlapping. [s]

    Returns
    -------
    int ndarray, one per phase: the step that holds the whole phase, 0 where none does (before
    or after the steps, or across a change of speed).
    """
    start = _validate.finite("start_s", start_s, "s")
    end = _validate.finite("end_s", end_s, "s")
    s0 = _validate.finite("step_start_s", step_start_s, "s")
    s1 = _validate.finite("step_end_s", step_end_s, "s")
    if s0.shape != s1.shape or (s1 < s0).any() or (s0[1:] < s1[:-1]).any():
        raise InputError("steps must be given in order, each ending after it starts and before the "
                         "next starts", field="steps")
    k = np.searchsorted(s0, start, side="right") - 1
    kk = np.clip(k, 0, None)
    inside = (k >= 0) & (end <= s1[kk]) if s0.size else np.zeros(start.shape, dtype=bool)
    return np.where(inside, kk + 1, 0).astype(np.int64)


def step_means(phase_table: pd.DataFrame, step_of_phase: Any, *, value: str = "mo2_mg_kg_h") -> pd.DataFrame:
    """Mean MO2 of the used phases of each (channel, step).

    Parameters
    ----------
    phase_table
        Table from :func:`phase_uptake`.
    step_of_phase
        Step of each row (Series aligned on the table's index, or an array in its order); 0 or
        a negative number = in no step. [-]
    value
        Column to average. [mg O2 kg⁻¹ h⁻¹ for the default]

    Returns
    -------
    DataFrame with columns channel, fish_id, step, n_phases, mean, sd (sample, ddof 1), se
    (sd / √n), named after ``value`` (``mo2_mg_kg_h``, ``mo2_sd_mg_kg_h``, ``mo2_se_mg_kg_h``).
    A step with one used phase has sd and se NaN (undefined from one value).
    """
    if value not in phase_table.columns:
        raise InputError(f"the phase table has no column {value!r}", field="phase_table")
    if isinstance(step_of_phase, pd.Series):
        steps = step_of_phase.reindex(phase_table.index).to_numpy()
    else:
        steps = np.asarray(step_of_phase)
        if steps.shape != (len(phase_table),):
            raise InputError(f"step_of_phase has {steps.size} entries for {len(phase_table)} phases",
                             field="step_of_phase")
    steps = pd.to_numeric(pd.Series(steps), errors="coerce").to_numpy()
    use = phase_table["used"].to_numpy().astype(bool) & np.isfinite(steps) & (np.nan_to_num(steps) > 0)
    frame = pd.DataFrame({
        "channel": phase_table["channel"].to_numpy()[use],
        "fish_id": phase_table["fish_id"].to_numpy()[use] if "fish_id" in phase_table else
        phase_table["channel"].to_numpy()[use],
        "step": steps[use].astype(np.int64),
        "v": phase_table[value].to_numpy(dtype=float)[use],
    })
    sd_name = value.replace("mo2_", "mo2_sd_", 1) if value.startswith("mo2_") else f"{value}_sd"
    se_name = value.replace("mo2_", "mo2_se_", 1) if value.startswith("mo2_") else f"{value}_se"
    if frame.empty:
        return pd.DataFrame(columns=["channel", "fish_id", "step", "n_phases", value, sd_name, se_name])
    grouped = frame.groupby(["channel", "fish_id", "step"], sort=True)["v"]
    out = grouped.agg(n_phases="count", mean="mean", sd="std").reset_index()
    out[se_name] = out["sd"] / np.sqrt(out["n_phases"])
    return out.rename(columns={"mean": value, "sd": sd_name})[
        ["channel", "fish_id", "step", "n_phases", value, sd_name, se_name]]

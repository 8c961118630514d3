"""The rule catalogue and the flags it produces (DESIGN.md §6).

One table of rules: each has a code, a severity (``info`` / ``warning`` / ``invalid``), the lab
setting that holds its threshold, what it protects, its source, and what to do. Stages of the
analysis raise flags with :func:`flag`; :func:`flags_table` turns them into one DataFrame with
the columns of :data:`FLAG_COLUMNS`.

``invalid`` means the value it concerns is not used (a phase's MO2, a fit); ``warning`` means
the value is used but needs a person's judgement; ``info`` is for the record.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

SEVERITIES = ("invalid", "warning", "info")


@dataclass(frozen=True)
class Rule:
    """One entry of the rule catalogue."""

    code: str
    severity: str
    title: str
    protects: str
    advice: str
    source: str
    setting: str | None = None
    welfare: bool = False


RULES: dict[str, Rule] = {
    rule.code: rule
    for rule in [
        # --- flume and hydrodynamics --------------------------------------------------------
        Rule("BLOCKING_BEYOND_LIMIT", "warning", "Blocking ratio beyond the correction's range",
             "Corrected speed: the solid-blocking correction is not trusted for large fish.",
             "Use a larger working section or a smaller fish; report speeds as uncertain.",
             "Bell & Terhune (1970); common practice limit about 10 %", "blocking_ratio_limit"),
        Rule("FISH_LARGER_THAN_SECTION", "invalid", "Fish larger than the working section",
             "Geometry: a fish's frontal area cannot exceed the section.",
             "Check the fish's depth and width and the working-section dimensions.",
             "Geometry", None),
        Rule("SPEED_OUTSIDE_CALIBRATION", "warning", "Speed outside the calibrated range",
             "Water speed: the calibration is extrapolated outside its measured points.",
             "Extend the flume's speed calibration to cover this setting.",
             "Common practice", None),
        Rule("WATER_OUTSIDE_CORRELATION", "warning", "Water conditions outside a correlation's range",
             "Density, viscosity and oxygen solubility are extrapolated.",
             "Check temperature and salinity; results depend on an extrapolated correlation.",
             "IAPWS (2008); Sharqawy et al. (2010); Garcia & Gordon (1992)", None),
        Rule("FLOW_TRANSITIONAL", "info", "Reynolds number in the transitional range",
             "Drag: neither the laminar nor the turbulent friction line applies exactly.",
             "Treat drag estimates as approximate.", "Schlichting & Gersten (2017)", None),
        # --- trace and slopes ---------------------------------------------------------------
        Rule("PHASE_POOR_FIT", "invalid", "Measure phase fits a straight line poorly",
             "MO2: a slope with low R² is not a rate of uptake.",
             "Look at the trace: fish activity, bubbles, or a sensor fault; exclude or re-run.",
             "Common practice (R² ≥ 0.95)", "r2_min"),
        Rule("PHASE_NOISY_SLOPE", "invalid", "Slope too uncertain",
             "MO2: the slope's standard error is a large share of the slope.",
             "Lengthen measure phases or reduce the respirometer-to-fish volume ratio.",
             "Common practice", "slope_relative_se_max"),
        Rule("PHASE_EXCESS_SCATTER", "warning", "Residual scatter above the sensor's noise",
             "MO2: scatter beyond sensor noise means the decline is not steady.",
             "Check for fish activity, mixing or a sensor fault in this phase.",
             "Common practice", "noise_ratio_max"),
        Rule("PHASE_TOO_FEW_POINTS", "invalid", "Too few readings in the measure phase",
             "MO2: a slope from few points is unreliable.",
             "Lengthen the measure phase or log more often.",
             "Common practice", "min_points_per_phase"),
        Rule("PHASE_CURVED", "warning", "Oxygen decline is curved",
             "MO2: a curved decline (mixing lag, changing activity) biases a linear slope.",
             "Lengthen the wait phase or check mixing in the respirometer.",
             "Common practice", None),
        Rule("OXYGEN_BELOW_FLOOR", "warning", "Oxygen below the floor",
             "Welfare and data: low oxygen stresses the fish and can depress MO2.",
             "Shorten measure phases or lengthen flushes; follow the approved protocol's limit.",
             "Common practice (about 80 % air saturation)", "oxygen_floor_pct_air_sat", True),
        Rule("FLUSH_NOT_RESTORED", "warning", "Oxygen not restored after a flush",
             "Welfare and data: the next phase starts from depleted water.",
             "Lengthen flushes or check the flush pump.",
             "Common practice", "flush_restore_pct_air_sat", True),
        Rule("TEMPERATURE_DRIFT_PHASE", "warning", "Temperature drift within a measure phase",
             "MO2: temperature changes metabolism and oxygen solubility within the phase.",
             "Check the temperature control of the tunnel.",
             "Common practice", "temperature_drift_phase_max_c"),
        Rule("TEMPERATURE_DRIFT_TRIAL", "warning", "Temperature drift over the trial",
             "Comparability: MO2 at different speeds was measured at different temperatures.",
             "Check the temperature control of the tunnel.",
             "Common practice", "temperature_drift_trial_max_c", True),
        Rule("TRACE_GLITCH", "info", "Glitches in the logger file",
             "Data: gaps, error codes or repeated timestamps were found and handled.",
             "Read the import report; check the logger's clock and sensor.",
             "Common practice", None),
        Rule("PHASE_EXCLUDED", "info", "Phase excluded by a person",
             "Record: a person removed this phase from the analysis, with a reason.",
             "No action; the reason is kept in the record.", "Record keeping", None),
        # --- uptake -------------------------------------------------------------------------
        Rule("BACKGROUND_HIGH", "warning", "Background respiration is a large share of uptake",
             "MO2: the correction dominates the fish's own signal.",
             "Clean and disinfect the respirometer; run blanks before and after.",
             "Common practice; Rodgers et al. (2016)", "background_share_max"),
        Rule("BACKGROUND_MISSING", "warning", "No background (blank) measurement",
             "MO2: microbial respiration is included in the fish's uptake.",
             "Run a blank before and after the fish.", "Common practice; Rodgers et al. (2016)", None),
        Rule("VOLUME_RATIO_OUTSIDE_GUIDANCE", "warning", "Respirometer-to-fish volume ratio outside guidance",
             "MO2: a large ratio gives small slopes against sensor noise; a small one, fast falls.",
             "Choose a respirometer sized to the fish.", "Common practice", "volume_ratio_min"),
        Rule("MO2_NOT_POSITIVE", "invalid", "MO2 is zero or negative after background correction",
             "MO2: a fish cannot produce oxygen; the blank or the slope is wrong.",
             "Check the blank runs and the phase's trace.", "Physical plausibility", None),
        # --- performance --------------------------------------------------------------------
        Rule("FATIGUE_NOT_RECORDED", "warning", "Fatigue not recorded",
             "Ucrit: without the fatigue time the last step cannot be credited.",
             "Enter the time the fish met the fatigue criterion.", "Brett (1964)", None),
        Rule("FATIGUE_OUTSIDE_STEP", "invalid", "Fatigue time outside the final step",
             "Ucrit: the fatigue time must fall within the last step swum.",
             "Check the fatigue time against the step schedule.", "Brett (1964)", None),
        Rule("NO_STEP_COMPLETED", "invalid", "Fatigue within the first step",
             "Ucrit: Brett's formula needs a last completed speed; none was completed.",
             "Check the fatigue time and the first step's speed; start lower or re-test.",
             "Brett (1964)", None),
        Rule("STEPS_TOO_SHORT", "warning", "Speed steps too short",
             "Ucrit and MO2: short steps do not reach a steady state.",
             "Use longer steps (Brett 1964 used up to 60 min; 10–30 min is usual).",
             "Common practice", "step_duration_min_s"),
        Rule("STEPS_UNEVEN", "warning", "Speed steps uneven",
             "Ucrit: Brett's formula assumes equal step durations and increments.",
             "Use equal steps, or report Ucrit with this caveat.", "Brett (1964)", "step_unevenness_max"),
        Rule("FIT_POORLY_CONSTRAINED", "warning", "Speed–MO2 fit poorly constrained",
             "SMR, Uopt and COTmin depend on the fit's parameters.",
             "Add speeds, especially low ones; report intervals.", "Common practice", "fit_relative_se_max"),
        Rule("FIT_NOT_POSSIBLE", "invalid", "Speed–MO2 curve not fitted",
             "Fits need at least three distinct speeds with varying, positive MO2.",
             "Add accepted phases at more speeds.", "Common practice", None),
        Rule("UOPT_OUTSIDE_TESTED", "warning", "Uopt outside the tested speeds",
             "Uopt and COTmin: an extrapolated optimum is not supported by the data.",
             "Report Uopt as beyond the tested range; test more speeds.", "Common practice", None),
        Rule("MASS_SCALED", "info", "MO2 scaled to a reference mass",
             "Comparability: scaled values depend on the stated exponent.",
             "State the reference mass and exponent when reporting.", "Common practice", None),
        Rule("SENSOR_CALIBRATION_MISSING", "warning", "Oxygen sensor calibration not recorded",
             "MO2: the sensor's 0 % and 100 % points set every reading.",
             "Enter the calibration record.", "Killen et al. (2021)", None),
        Rule("PROTOCOL_NOT_COMPARABLE", "info", "Protocol result not comparable with a step Ucrit",
             "Comparability: ramp Umax and endurance times are not step Ucrit values.",
             "Report each result with its protocol.", "Farrell (2008)", None),
        Rule("ENDURANCE_CENSORED", "info", "Fish still swimming at the time limit",
             "Endurance: these times are lower bounds (right-censored), not fatigue times.",
             "Keep them in the analysis as censored; do not drop them or treat them as fatigue.",
             "Kaplan & Meier (1958); Tobin (1958)", None),
        Rule("STROUHAL_OUTSIDE_EFFICIENT", "info", "Strouhal number outside the usual efficient range",
             "Kinematics: cruising swimmers are usually reported at St 0.2–0.4.",
             "Check tail-beat frequency, amplitude (peak to peak) and speed; note the gait.",
             "Taylor, Nudds & Thomas (2003)", None),
        Rule("RECOVERY_INCOMPLETE", "warning", "Recovery record ends before MO2 is back near baseline",
             "EPOC: the area beyond the last measure phase is extrapolated from the fitted decay.",
             "Record recovery for longer; report EPOC as extrapolated.", "Common practice", None),
        Rule("REPEAT_RATIO_BELOW_UNITY", "info", "Second swim's Ucrit below the first",
             "Repeat swim: a recovery ratio below one means incomplete recovery.",
             "Report the ratio with its interval; compare with control fish.",
             "Jain, Birtwell & Farrell (1998)", None),
        Rule("GROUP_TRIAL", "warning", "Several fish swum together (group trial)",
             "Comparability: the chamber's MO2 is the group's; per-capita values (per fish, per kg of the summed "
             "mass) average fish that swam in each other's wake, and schooling changes the cost of swimming.",
             "Report group and per-capita MO2 as a group trial, with the group size and its fatigue definition; "
             "never pool them with fish swum alone.",
             "Herskin & Steffensen (1998); Zhang & Lauder (2023)", None),
        Rule("PROTOCOL_RESULT_NOT_COMPUTED", "invalid", "Protocol result not computed from incomplete input",
             "Protocol results: a value computed from missing or contradictory entries would mislead.",
             "Enter what the message names (the field is given), then analyse again.", "Record keeping", None),
    ]
}

GROUP_CAVEAT = (
    "Group trial: fish swum together. Schooling changes the cost of swimming (sea bass at the rear of a school "
    "beat their tails 9–14 % slower, corresponding to 9–23 % less oxygen, Herskin & Steffensen 1998; schools of "
    "giant danio had a total cost of transport up to 53 % lower than solitary fish, Zhang & Lauder 2023), so "
    "per-capita MO2 is not comparable with fish swum alone."
)
"""The warning shown wherever a group trial's MO2 appears (tables, plots, report, command line)."""

FLAG_COLUMNS = [
    "code", "severity", "scope", "where", "channel", "cycle", "step",
    "message", "advice", "source", "welfare",
]


def flag(
    code: str,
    message: str,
    *,
    scope: str = "session",
    where: str = "",
    channel: str | None = None,
    cycle: int | None = None,
    step: int | None = None,
) -> dict:
    """Make one flag of rule ``code``.

    Parameters
    ----------
    code
        A key of :data:`RULES`.
    message
        What was found, with the value and the threshold (e.g. ``"R² 0.91 < 0.95"``).
    scope
        ``"session"``, ``"fish"``, ``"channel"``, ``"phase"`` or ``"step"``.
    where
        A label a person reads (``"chamber A, cycle 12"``).
    channel, cycle, step
        Identifiers of what the flag concerns, for linking.
    """
    rule = RULES.get(code)
    if rule is None:
        raise ValueError(f"unknown rule code {code!r}; valid codes are {sorted(RULES)}")
    return {
        "code": code,
        "severity": rule.severity,
        "scope": scope,
        "where": where,
        "channel": channel,
        "cycle": cycle,
        "step": step,
        "message": message,
        "advice": rule.advice,
        "source": rule.source,
        "welfare": rule.welfare,
    }


def flags_table(flags: list[dict]) -> pd.DataFrame:
    """Return flags as one DataFrame, welfare first, then by severity."""
    table = pd.DataFrame(flags, columns=FLAG_COLUMNS)
    if table.empty:
        return table
    order = {s: i for i, s in enumerate(SEVERITIES)}
    table = table.assign(_w=~table["welfare"].astype(bool), _s=table["severity"].map(order))
    return table.sort_values(["_w", "_s"], kind="stable").drop(columns=["_w", "_s"]).reset_index(drop=True)


def catalogue() -> pd.DataFrame:
    """Return the rule catalogue as a table (for the app and the report)."""
    return pd.DataFrame([vars(rule) for rule in RULES.values()])

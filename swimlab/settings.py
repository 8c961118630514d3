"""Lab settings: QA thresholds and conventions that a lab may change.

These are data with defaults, not constants buried in code (DESIGN.md §4). A lab keeps its own
values in the lab book; :class:`LabSettings` is the validated value every analysis receives.
Each field says its unit and where its default comes from ("common practice" where there is no
single source).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace
from typing import Any

from swimlab.errors import InputError


@dataclass(frozen=True)
class LabSettings:
    """Thresholds and conventions of one lab. All fields have defaults."""

    # --- flume and hydrodynamics -------------------------------------------------------------
    blocking_ratio_limit: float = 0.10
    """Largest fish frontal area / working-section area for which the solid-blocking
    correction is trusted. [-] Common practice (about 10 %; Bell & Terhune 1970 tested up to
    about this range)."""

    # --- trace and slopes ---------------------------------------------------------------------
    r2_min: float = 0.95
    """Lowest R² of a measure-phase slope that is accepted. [-] Common practice."""
    slope_relative_se_max: float = 0.05
    """Largest standard error of a slope as a share of the slope itself. [-] Common practice."""
    min_points_per_phase: int = 30
    """Fewest oxygen readings in a measure phase for a slope. [-] Common practice."""
    sensor_noise_mg_l: float = 0.02
    """Oxygen sensor's noise floor (standard deviation of one reading). [mg/L] Typical of
    optical oxygen sensors; set from the lab's own sensor."""
    noise_ratio_max: float = 1.5
    """Largest residual standard deviation of a phase's fit as a multiple of the sensor noise.
    [-] Common practice. Steady phases sit near 1; a two-minute burst of activity in an 11-minute
    phase gave 1.5–1.9 in simulated trials, so 1.5 catches struggling that R² misses. It relies
    on ``sensor_noise_mg_l`` being the lab's own sensor noise."""
    curvature_t_max: float = 5.0
    """Largest |t| of the quadratic term of a measure phase's decline before it counts as curved
    (with :attr:`curvature_slope_change_max`). [-] Common practice (a t of 5 is far beyond chance
    for white sensor noise)."""
    curvature_slope_change_max: float = 0.25
    """Largest change of the slope across a measure phase, as a share of the slope, under a
    quadratic fit, before the decline counts as curved. [-] Common practice."""
    oxygen_floor_pct_air_sat: float = 80.0
    """Oxygen below which the fish must not be held and a phase's MO2 is suspect (welfare and
    data). [% air saturation] Common practice (intermittent-flow guidance keeps oxygen above
    about 80 %)."""
    flush_restore_pct_air_sat: float = 95.0
    """Oxygen a flush must restore before the next measure phase. [% air saturation] Common
    practice."""
    temperature_drift_phase_max_c: float = 0.2
    """Largest temperature change within one measure phase. [°C] Common practice."""
    temperature_drift_trial_max_c: float = 1.0
    """Largest temperature change over a whole trial. [°C] Common practice."""

    # --- uptake -------------------------------------------------------------------------------
    background_share_max: float = 0.20
    """Largest share of a phase's oxygen decline that background respiration may remove before a
    warning. [-] Common practice."""
    volume_ratio_min: float = 20.0
    """Smallest respirometer-to-fish volume ratio in guidance. [-] Common practice."""
    volume_ratio_max: float = 500.0
    """Largest respirometer-to-fish volume ratio before slopes become small against sensor noise.
    [-] Common practice (swim tunnels run far higher ratios than static chambers)."""
    fish_density_kg_m3: float = 1000.0
    """Fish body density used for fish volume. [kg/m³] Common practice (1 kg/L)."""
    reference_mass_kg: float | None = None
    """Reference mass to which MO2 is scaled, or None for no scaling. [kg]"""
    mass_exponent: float = 0.8
    """Mass-scaling exponent b in MO2_ref = MO2 × (M / M_ref)^(1 − b). [-] Common practice
    (values near 0.8 are usual for fish; Clarke & Johnston 1999 report a mean near 0.8)."""

    # --- performance --------------------------------------------------------------------------
    oxycaloric_j_per_mg_o2: float = 13.6
    """Energy released per mg of oxygen consumed. [J/mg] Elliott & Davison (1975), about
    13.6 J/mg O2 for mixed substrates (from memory)."""
    step_duration_min_s: float = 300.0
    """Shortest step of a Ucrit protocol before a warning. [s] Common practice."""
    step_unevenness_max: float = 0.10
    """Largest relative spread of step durations or speed increments before a warning. [-]
    Common practice."""
    mmr_window_s: float = 60.0
    """Length of the sliding window for maximum MO2 within a phase. [s] Common practice."""
    smr_quantile: float = 0.2
    """Quantile of resting MO2 taken as SMR by the low-quantile method. [-] Chabot et al. (2016)
    recommend q = 0.2."""
    fit_relative_se_max: float = 0.5
    """Largest relative standard error of a fitted curve parameter before the fit is flagged as
    poorly constrained. [-] Common practice."""
    fatigue_time_uncertainty_s: float = 30.0
    """Width of the span within which a recorded fatigue time could lie: the recording's
    resolution together with the judgement of the fatigue call (e.g. 10 s on the rear grid and
    three taps). Treated as a uniform error of this width in the recovery ratio's measurement
    interval. [s] An assumption of this lab, stated in the report (common practice; no single
    source)."""
    speed_calibration_uncertainty_pct: float = 2.0
    """Relative standard uncertainty of water speeds from the flume's calibration, used for the
    recovery ratio only when the two swims did not share one flume calibration (a shared
    calibration cancels in the ratio). [%] An assumption of this lab (common practice for a
    calibrated flow meter; no single source, from memory)."""

    # --- welfare ------------------------------------------------------------------------------
    max_time_at_exhaustion_s: float = 60.0
    """Longest time a fatigued fish may be held against the rear grid before the flow is
    reduced. [s] Common practice; local animal-care protocols decide."""
    max_temperature_change_c: float = 2.0
    """Largest temperature change from acclimation allowed in a trial. [°C] Common practice;
    local animal-care protocols decide."""

    # --- people and login (lab-server mode) ---------------------------------------------------
    login_attempts_max: int = 5
    """Failed logins in a row after which a local account is locked. [-] Common practice (OWASP
    Authentication Cheat Sheet leaves the number to the site; NIST SP 800-63B §5.2.2 allows at
    most 100)."""
    login_lockout_min: float = 15.0
    """How long a locked account stays locked; an admin may unlock it sooner. [min] Common
    practice."""

    def to_dict(self) -> dict[str, Any]:
        """Return the settings as a plain dict (for JSON)."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any] | None) -> LabSettings:
        """Build settings from a dict, refusing unknown keys and non-numeric values."""
        data = dict(data or {})
        known = {f.name: f for f in fields(cls)}
        unknown = sorted(set(data) - set(known))
        if unknown:
            raise InputError(f"unknown lab settings {unknown}; valid names are {sorted(known)}")
        for key, value in data.items():
            if value is None and key == "reference_mass_kg":
                continue
            if isinstance(value, bool) or not isinstance(value, int | float):
                raise InputError(f"must be a number; got {value!r}", field=f"settings.{key}")
        return replace(cls(), **data)


DEFAULT_SETTINGS = LabSettings()

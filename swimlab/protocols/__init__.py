"""Protocols beyond the step test: ramp, endurance, repeat swim, recovery, gait and kinematics.

Each module is a set of plain functions on numbers, arrays and tables (SI inside: speed [m/s],
time [s], mass [kg]; MO2 in mg O2 kg⁻¹ h⁻¹ as it comes from :mod:`swimlab.uptake`). Results are
small frozen dataclasses that carry ``protocol``, the protocol's name as in
:data:`swimlab.session.PROTOCOL_TYPES`, so that a ramp Umax is never shown where a step Ucrit is
expected, and ``flags`` raised through :func:`swimlab.checks.flag`.

- :mod:`~swimlab.protocols.ramp` — constant-acceleration test, Umax.
- :mod:`~swimlab.protocols.endurance` — fixed-speed endurance: Kaplan–Meier curves, a censored
  fatigue curve (log10 time on speed), maximum sustained speed, speed at which half fatigue.
- :mod:`~swimlab.protocols.repeat` — repeat step test, recovery ratio Ucrit₂/Ucrit₁.
- :mod:`~swimlab.protocols.recovery` — post-exercise recovery: EPOC, recovery times, total
  oxygen cost and a cost of transport that includes EPOC.
- :mod:`~swimlab.protocols.gait` — gait transition speed, burst-and-coast onset, bursts per
  minute, from the event log and the step schedule.
- :mod:`~swimlab.protocols.kinematics` — tail-beat frequency, stride length, Strouhal number,
  frequency–speed line, Bainbridge (1958) relation.

Sources are listed in ``docs/references.md``.
"""

from swimlab.protocols import endurance, gait, kinematics, ramp, recovery, repeat

__all__ = ["endurance", "gait", "kinematics", "ramp", "recovery", "repeat"]

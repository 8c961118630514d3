"""Make the per-gait endurance reference tables used by tests/test_protocols_endurance.py.

Run once, by hand, in a separate environment that has lifelines (a test-only reference, not a
swimlab dependency; see protocols_lifelines_reference.py for why it has its own environment):

    python -m venv /tmp/ref_venv && /tmp/ref_venv/bin/pip install lifelines
    /tmp/ref_venv/bin/python tests/data/protocols_gait_lifelines_reference.py

It writes a simulated endurance sample with two gaits (seeded; limit 120 min):
steady caudal swimming at 0.40–0.70 m/s, log10 T = 5.6 − 2.8 U + 0.25 ε (some fish censored),
and burst-and-coast swimming at 0.75–0.95 m/s, log10 T = 8.9 − 7.2 U + 0.20 ε, and lifelines'
LogNormalAFTFitter on each gait's fish alone, converted from natural to base-10 logs.
"""

import math
from pathlib import Path

import lifelines
import numpy as np
import pandas as pd
from lifelines import LogNormalAFTFitter

HERE = Path(__file__).parent
LIMIT_S = 120 * 60.0

rng = np.random.default_rng(2027)
parts = []
for gait, speeds, a, b, s in (("steady_caudal", (0.40, 0.50, 0.60, 0.70), 5.6, -2.8, 0.25),
                              ("burst_and_coast", (0.75, 0.85, 0.95), 8.9, -7.2, 0.20)):
    speed = np.repeat(speeds, 6)
    log10_t = a + b * speed + s * rng.standard_normal(speed.size)
    time = np.round(10.0**log10_t, 1)
    fatigued = time <= LIMIT_S
    parts.append(pd.DataFrame({"gait": gait, "speed_m_s": speed, "time_s": np.where(fatigued, time, LIMIT_S),
                               "fatigued": fatigued.astype(int)}))
sample = pd.concat(parts, ignore_index=True)
sample.to_csv(HERE / "protocols_endurance_gait_sample.csv", index=False)

ln10 = math.log(10.0)
rows = []
for gait, part in sample.groupby("gait", sort=True):
    fitter = LogNormalAFTFitter()
    fitter.fit(part[["speed_m_s", "time_s", "fatigued"]], duration_col="time_s", event_col="fatigued")
    params, se = fitter.params_, fitter.standard_errors_
    log_sigma = params[("sigma_", "Intercept")]
    source = (f"lifelines {lifelines.__version__} LogNormalAFTFitter on the {gait} fish of "
              "protocols_endurance_gait_sample.csv, natural logs divided by ln 10")
    reason = "two optimisers on the same likelihood; lifelines stops at its own convergence tolerance"
    for name, value, err in (
            ("intercept", params[("mu_", "Intercept")] / ln10, se[("mu_", "Intercept")] / ln10),
            ("slope", params[("mu_", "speed_m_s")] / ln10, se[("mu_", "speed_m_s")] / ln10),
            ("sigma", math.exp(log_sigma) / ln10, math.exp(log_sigma) * se[("sigma_", "Intercept")] / ln10)):
        rows.append({"gait": gait, "parameter": name, "expected": value, "expected_se": err, "tolerance": 1e-4,
                     "source": source, "tolerance_reason": reason})
    rows.append({"gait": gait, "parameter": "log_likelihood_ln", "expected": fitter.log_likelihood_,
                 "expected_se": float("nan"), "tolerance": 1e-5,
                 "source": source + " (log-likelihood of natural-log times incl. Jacobian)",
                 "tolerance_reason": "same likelihood at slightly different optima"})
table = pd.DataFrame(rows)
table.to_csv(HERE / "protocols_lognormal_aft_by_gait_lifelines.csv", index=False)
print(sample.groupby("gait").fatigued.agg(["size", "sum"]))
print(table)

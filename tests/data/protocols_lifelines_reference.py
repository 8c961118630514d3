"""Make the endurance reference tables used by tests/test_protocols_endurance.py.

Run once, by hand, in a separate environment that has lifelines (it is a test-only reference and
not a swimlab dependency; lifelines 0.30 needs pandas < 3, so it cannot share swimlab's venv):

    python -m venv /tmp/ref_venv && /tmp/ref_venv/bin/pip install lifelines
    /tmp/ref_venv/bin/python tests/data/protocols_lifelines_reference.py

It writes a simulated endurance sample (seeded; log10 T = 5.2 − 2.6 U + 0.3 ε, limit 120 min)
and lifelines' LogNormalAFTFitter estimates on it, converted from natural to base-10 logs.
"""

import math
from pathlib import Path

import lifelines
import numpy as np
import pandas as pd
from lifelines import LogNormalAFTFitter

HERE = Path(__file__).parent
LIMIT_S = 120 * 60.0

rng = np.random.default_rng(20260)
speed = np.repeat([0.45, 0.55, 0.65, 0.75, 0.85], 8)
log10_t = 5.2 - 2.6 * speed + 0.3 * rng.standard_normal(speed.size)
time = np.round(10.0**log10_t, 1)
fatigued = time <= LIMIT_S
time = np.where(fatigued, time, LIMIT_S)
sample = pd.DataFrame({"speed_m_s": speed, "time_s": time, "fatigued": fatigued.astype(int)})
sample.to_csv(HERE / "protocols_endurance_sample.csv", index=False)

fitter = LogNormalAFTFitter()
fitter.fit(sample, duration_col="time_s", event_col="fatigued")
params = fitter.params_
se = fitter.standard_errors_
ln10 = math.log(10.0)
mu0, mu1 = params[("mu_", "Intercept")], params[("mu_", "speed_m_s")]
log_sigma = params[("sigma_", "Intercept")]
source = f"lifelines {lifelines.__version__} LogNormalAFTFitter on protocols_endurance_sample.csv, natural logs divided by ln 10"
rows = [
    ("intercept", mu0 / ln10, se[("mu_", "Intercept")] / ln10),
    ("slope", mu1 / ln10, se[("mu_", "speed_m_s")] / ln10),
    ("sigma", math.exp(log_sigma) / ln10, math.exp(log_sigma) * se[("sigma_", "Intercept")] / ln10),
]
table = pd.DataFrame(
    [
        {"parameter": name, "expected": value, "expected_se": err, "tolerance": 1e-4,
         "source": source,
         "tolerance_reason": "two optimisers on the same likelihood; lifelines stops at its own convergence tolerance"}
        for name, value, err in rows
    ]
)
table.loc[len(table)] = {
    "parameter": "log_likelihood_ln", "expected": fitter.log_likelihood_, "expected_se": float("nan"),
    "tolerance": 1e-5, "source": source + " (log-likelihood of natural-log times incl. Jacobian)",
    "tolerance_reason": "same likelihood at slightly different optima",
}
table.to_csv(HERE / "protocols_lognormal_aft_lifelines.csv", index=False)
print(sample.fatigued.value_counts())
print(table)

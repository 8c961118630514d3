"""Helpers for the page tests, the browser test and the app benchmark.

The trial is invented: the "Kestrel Bay" lab's 12 L tunnel "KB-2" and a fish labelled KB-03.
The logger file is made by :mod:`swimlab.sim` when it can (its truth is known to the simulator);
:func:`synthetic_logger_csv` is a plain fallback of our own with a known oxygen decline per phase.
"""

from __future__ import annotations

import copy
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


def typical_session(n_steps: int = 10, step_min: float = 20.0, *, fatigue: bool = True) -> dict[str, Any]:
    """A valid session dict: one fish, a step test of ``n_steps`` steps, 10-minute cycles."""
    steps = [{"speed_cm_s": 10.0 + 5.0 * i, "duration_min": step_min} for i in range(n_steps)]
    total_s = n_steps * step_min * 60.0
    return {
        "session_id": "kb03trial01",
        "title": "Kestrel Bay KB-03 step test",
        "study": "Kestrel Bay warm-water series",
        "lab": "Kestrel Bay lab",
        "operator": "R. Operator",
        "trial_date": "2031-06-02",
        "water": {"temperature_c": 15.0, "salinity": 0.0, "barometric_pressure_kpa": 101.3},
        "flume": {
            "name": "KB-2 (12 L)", "section_shape": "rectangular", "section_width_cm": 15.0,
            "section_height_cm": 15.0, "section_length_cm": 50.0, "respirometer_volume_l": 12.0,
            "calibration": [{"motor_setting": m, "speed_cm_s": 1.0 * m} for m in (0, 20, 40, 60, 80)],
        },
        "fish": [{
            "fish_id": "KB-03", "species": "Oncorhynchus mykiss", "chamber": "A", "mass_g": 85.0,
            "total_length_cm": 20.0, "body_depth_cm": 4.0, "body_width_cm": 2.2,
        }],
        "protocol": {
            "type": "step_ucrit", "start_s": 0.0, "steps": steps,
            "cycle": {"source": "schedule", "flush_s": 240.0, "wait_s": 60.0, "measure_s": 300.0, "start_s": 0.0},
            "fatigue_time_s": total_s - 0.4 * step_min * 60.0 if fatigue else None,
        },
        "sensor": {"sensor": "optode KB-A", "date": "2031-06-01", "zero_point_pct": 0.0, "span_point_pct": 100.0},
        "blanks": [{"channel": "A", "when": "before", "time_s": -1800.0, "slope_mg_l_h": -0.02}],
    }


def synthetic_logger_csv(session: dict[str, Any], *, hz: float = 1.0, channels: list[str] | None = None,
                         hours: float | None = None, seed: int = 1) -> bytes:
    """A logger export (time in s, oxygen in % air saturation per chamber, temperature) for ``session``.

    Oxygen is restored to 98 % in each flush and falls linearly in wait and measure phases at a
    rate that grows with the set speed; sensor noise 0.1 % air saturation.
    """
    rng = np.random.default_rng(seed)
    cycle = session["protocol"]["cycle"]
    flush, wait, meas = cycle["flush_s"], cycle["wait_s"], cycle["measure_s"]
    period = flush + wait + meas
    steps = session["protocol"].get("steps") or [{"speed_cm_s": 20.0, "duration_min": 60.0}]
    total = hours * 3600.0 if hours else sum(s["duration_min"] for s in steps) * 60.0
    t = np.arange(0.0, total, 1.0 / hz)
    ends = np.cumsum([s["duration_min"] * 60.0 for s in steps])
    idx = np.minimum(np.searchsorted(ends, t, side="right"), len(steps) - 1)
    speed = np.array([s["speed_cm_s"] for s in steps])[idx]
    rate = (0.004 + 0.0002 * speed)  # % air saturation per second
    phase_t = np.mod(t - cycle.get("start_s", 0.0), period)
    closed = np.clip(phase_t - flush, 0.0, None)
    channels = channels or [f["chamber"] for f in session["fish"]]
    lines = ["time_s," + ",".join(f"oxygen % air sat {c}" for c in channels) + ",temperature_c"]
    columns = [98.0 - rate * closed * (1.0 + 0.05 * k) + rng.normal(0.0, 0.1, t.size) for k in range(len(channels))]
    temp = session["water"]["temperature_c"] + rng.normal(0.0, 0.01, t.size)
    body = np.column_stack([t, *columns, temp])
    for row in body:
        lines.append(",".join(f"{v:.3f}" for v in row))
    return ("\n".join(lines) + "\n").encode()


def logger_file(session: dict[str, Any]) -> tuple[str, bytes]:
    """Return (file name, bytes) of a logger export for ``session``: from swimlab.sim when it exists."""
    try:
        from swimlab import sim
    except ImportError:
        return "kb03_trace.csv", synthetic_logger_csv(session)
    trial = sim.simulate_trial(**sim_arguments(session)) if hasattr(sim, "simulate_trial") else None
    if trial is None or not getattr(trial, "csv_bytes", None):
        return "kb03_trace.csv", synthetic_logger_csv(session)
    return "kb03_trace.csv", trial.csv_bytes


def sim_arguments(session: dict[str, Any]) -> dict[str, Any]:
    """Keyword arguments for ``sim.simulate_trial`` that match ``session`` (those it accepts)."""
    import inspect

    from swimlab import sim

    params = inspect.signature(sim.simulate_trial).parameters
    wanted: dict[str, Any] = {}
    if "session" in params:
        from swimlab.session import Session

        wanted["session"] = Session.model_validate(copy.deepcopy(session))
    return {k: v for k, v in wanted.items() if k in params}


def free_port() -> int:
    """A free TCP port on the loopback interface."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def start_app(database_url: str, demo_dir: str, port: int, log_path: Path) -> subprocess.Popen:
    """Start ``streamlit run app.py`` on 127.0.0.1:``port`` with its own lab book; wait until it answers."""
    env = {**os.environ, "SWIMLAB_DATABASE_URL": database_url, "SWIMLAB_DEMO_DIR": demo_dir}
    log = open(log_path, "wb")  # noqa: SIM115 - closed with the process by stop_app
    proc = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", "app.py", "--server.port", str(port),
         "--server.address", "127.0.0.1", "--server.headless", "true", "--browser.gatherUsageStats", "false"],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT,
    )
    proc._swimlab_log = log  # type: ignore[attr-defined]
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"streamlit exited early; see {log_path}")
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as resp:
                if resp.status == 200:
                    return proc
        except OSError:
            time.sleep(0.3)
    stop_app(proc)
    raise RuntimeError(f"streamlit did not answer within 60 s; see {log_path}")


def stop_app(proc: subprocess.Popen) -> None:
    """Stop the app started by :func:`start_app` (this process only)."""
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=5)
    log = getattr(proc, "_swimlab_log", None)
    if log is not None:
        log.close()

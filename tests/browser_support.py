"""Helpers for the page tests, the browser test and the app benchmark.

The trial is invented: the "Kestrel Bay" lab's 10 L tunnel "KB-2" and a fish labelled KB-03.
Logger files are made by :mod:`swimlab.sim` (its truth is known to the simulator).
"""

from __future__ import annotations

import hashlib
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
APP_TIMEOUT_S = 90
"""How long one AppTest run of the app may take. [s]"""
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


def typical_session(n_steps: int = 10, step_min: float = 20.0, *, fatigue: bool = True) -> dict[str, Any]:
    """A valid session dict: one fish, a step test of ``n_steps`` steps, 10-minute cycles."""
    steps = [{"speed_cm_s": 15.0 + 5.0 * i, "duration_min": step_min} for i in range(n_steps)]
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
            "name": "KB-2 (10 L)", "section_shape": "rectangular", "section_width_cm": 15.0,
            "section_height_cm": 15.0, "section_length_cm": 60.0, "respirometer_volume_l": 10.0,
            "calibration": [{"motor_setting": m, "speed_cm_s": 1.0 * m} for m in (0, 20, 40, 60, 80)],
        },
        "fish": [{
            "fish_id": "KB-03", "species": "Oncorhynchus mykiss", "chamber": "A", "mass_g": 300.0,
            "total_length_cm": 28.0, "body_depth_cm": 6.0, "body_width_cm": 3.4,
        }],
        "protocol": {
            "type": "step_ucrit", "start_s": 0.0, "steps": steps,
            "cycle": {"source": "schedule", "flush_s": 240.0, "wait_s": 60.0, "measure_s": 300.0, "start_s": 0.0},
            "fatigue_time_s": total_s - 0.4 * step_min * 60.0 if fatigue else None,
        },
        "sensor": {"sensor": "optode KB-A", "date": "2031-06-01", "zero_point_pct": 0.0, "span_point_pct": 100.0},
        "blanks": [{"channel": "A", "when": "before", "time_s": -1800.0, "slope_mg_l_h": -0.02}],
    }


def logger_file(session: dict[str, Any], *, seed: int = 7) -> tuple[str, bytes]:
    """Return (file name, bytes) of a logger export for ``session``, simulated by :mod:`swimlab.sim`.

    The simulated fish swims the session's steps in the session's respirometer; its trace starts
    with a flush at time 0, as the session's cycle schedule says.
    """
    from swimlab import sim

    protocol, cycle = session["protocol"], session["protocol"]["cycle"]
    channels = [f["chamber"] for f in session["fish"]]
    steps = protocol.get("steps") or [{"speed_cm_s": protocol["set_speed_cm_s"], "duration_min": protocol["time_limit_min"]}]
    trial = sim.simulate_trial(
        seed=seed,
        channels=channels,
        speeds_m_s=[s["speed_cm_s"] / 100.0 for s in steps],
        step_duration_s=[s["duration_min"] * 60.0 for s in steps],
        flush_s=cycle["flush_s"], wait_s=cycle["wait_s"], measure_s=cycle["measure_s"],
        respirometer_volume_l=session["flume"]["respirometer_volume_l"],
        fish_mass_g={f["chamber"]: f["mass_g"] for f in session["fish"]},
        temperature_c=session["water"]["temperature_c"],
        salinity=session["water"].get("salinity", 0.0),
        pressure_pa=session["water"].get("barometric_pressure_kpa", 101.325) * 1000.0,
    )
    return "kb03_trace.csv", trial.csv_bytes


def attach_logger_file(session: dict[str, Any], *, seed: int = 7) -> tuple[str, bytes]:
    """Simulate ``session``'s logger file (:func:`logger_file`) and list it in ``session`` as its
    trial file, with the column mapping guessed from its header; return its (SHA-256, bytes)."""
    from swimlab.io import logger

    name, raw = logger_file(session, seed=seed)
    sha = hashlib.sha256(raw).hexdigest()
    session["raw_files"] = [{"sha256": sha, "name": name, "role": "trial",
                             "mapping": logger.guess_mapping(raw, name=name).to_dict()}]
    return sha, raw


def require_chromium() -> None:
    """Skip the calling test when Debian's Chromium is absent; fail instead when CI is "true"."""
    import pytest

    if Path(CHROMIUM).exists():
        return
    reason = f"{CHROMIUM} is not installed (Debian package 'chromium'); the browser test needs it"
    if os.environ.get("CI") == "true":
        pytest.fail(reason)
    pytest.skip(reason)


def app_lab_book_url(tmp_path: Path, monkeypatch) -> str:
    """Point the app at a fresh SQLite lab book and an empty demo folder in ``tmp_path``, run
    from the project folder; return the lab book's URL."""
    url = f"sqlite:///{tmp_path / 'labbook.sqlite'}"
    monkeypatch.setenv("SWIMLAB_DATABASE_URL", url)
    demo = tmp_path / "demo"
    demo.mkdir()
    monkeypatch.setenv("SWIMLAB_DEMO_DIR", str(demo))
    monkeypatch.chdir(ROOT)
    return url


def run_app():
    """Run app.py once under Streamlit's AppTest and return it; fail on an uncaught exception."""
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(ROOT / "app.py"), default_timeout=APP_TIMEOUT_S)
    at.run()
    assert not at.exception, at.exception
    return at


def texts(elements) -> str:
    """The values of AppTest elements, one a line."""
    return "\n".join(str(e.value) for e in elements)


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

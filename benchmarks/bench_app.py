"""Benchmark of the browser front end: server-side re-run times and a long trace's figure size.

Run from the repository root::

    /work/venv/bin/python benchmarks/bench_app.py

It prints

1. the server-side re-run time (AppTest, median of several runs) of each page for a typical
   session — 10 speed steps, 6 h of readings at 1 Hz — after a cell of the fish grid changes
   and when a page is viewed again (analysis cached);
2. the size of the plotly figure JSON (what the browser receives) of a 72-hour, 8-channel
   trace at 1 Hz, drawn downsampled, and the time to build it.

The targets (issue 6): a re-run well under a second for the typical session; a long trace that
stays responsive. Numbers depend on the machine; this one has 2 cores.
"""

from __future__ import annotations

import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

N_RUNS = 7


def _typical_session(hours: float = 6.0, n_steps: int = 10) -> tuple[dict, str, bytes]:
    """A 10-step session whose trace lasts ``hours`` at 1 Hz, with its simulated logger file."""
    from browser_support import attach_logger_file, typical_session

    data = typical_session(n_steps=n_steps, step_min=hours * 60.0 / n_steps)
    sha, raw = attach_logger_file(data, seed=5)
    return data, sha, raw


def _median_rerun(at, action) -> float:
    times = []
    for i in range(N_RUNS):
        action(i)
        t0 = time.perf_counter()
        at.run()
        times.append(time.perf_counter() - t0)
        if at.exception:
            raise RuntimeError(str(at.exception))
    return statistics.median(times)


def bench_reruns() -> None:
    from streamlit.testing.v1 import AppTest

    from swimlab.session import Session
    from swimlab.store import LabBook

    data, sha, raw = _typical_session()
    with tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'bench.sqlite'}"
        os.environ["SWIMLAB_DATABASE_URL"] = url
        os.environ["SWIMLAB_DEMO_DIR"] = str(Path(tmp) / "no-demo")
        book = LabBook.open(url)
        book.create_session(Session.model_validate(data), {sha: raw}, who="bench")
        at = AppTest.from_file(str(ROOT / "app.py"), default_timeout=300)
        at.run()
        at.selectbox(key="lb_open_id").set_value(data["session_id"]).run()
        at.button(key="lb_open").click().run()
        gen = at.session_state["app_gen"]
        print(f"typical session: {len(data['protocol']['steps'])} steps, "
              f"{sum(s['duration_min'] for s in data['protocol']['steps']) / 60:.1f} h at 1 Hz, "
              f"logger file {len(raw) / 1e6:.1f} MB")

        def edit_mass(i: int) -> None:
            at.session_state[f"su_fish_{gen}"] = {
                "edited_rows": {0: {"Mass [g]": 300.0 + (i % 2)}}, "added_rows": [], "deleted_rows": []}

        setup = _median_rerun(at, edit_mass)
        print(f"  Set-up page, one fish-grid cell changed:        {setup * 1000:7.0f} ms (median of {N_RUNS})")

        t0 = time.perf_counter()
        at.switch_page("app_pages/trace.py").run()
        first = time.perf_counter() - t0
        print(f"  Oxygen trace page, first view (analysis run):   {first * 1000:7.0f} ms")
        if not at.get("plotly_chart") or at.error:
            raise RuntimeError(f"the trace page did not draw the trace: {[e.value for e in at.error]}")
        for page in ("trace", "checks", "results", "review", "lab_book"):
            at.switch_page(f"app_pages/{page}.py").run()
            rerun = _median_rerun(at, lambda _i: None)
            print(f"  {page:12s} page, re-run (analysis cached):    {rerun * 1000:7.0f} ms (median of {N_RUNS})")
        book.close()


def bench_long_trace_payload() -> None:
    from swimlab import plots, sim, trace

    hours, channels = 72.0, tuple("ABCDEFGH")
    t0 = time.perf_counter()
    trial = sim.simulate_trial(seed=9, channels=channels, speeds_m_s=[0.0], step_duration_s=hours * 3600.0,
                               flush_s=240.0, wait_s=60.0, measure_s=300.0, respirometer_volume_l=10.0,
                               fish_mass_g=300.0)
    made = time.perf_counter() - t0
    time_s = trial.time_s
    phases = trace.phases_from_schedule(time_s, 240.0, 60.0, 300.0, 0.0)
    conc = trace.concentration_from_trace({ch: trial.oxygen_pct[ch] for ch in channels}, "% air saturation",
                                          trial.temperature_c)
    measure = trace.fit_slopes(time_s, conc, phases).assign(used=True)
    t0 = time.perf_counter()
    fig = plots.trace_figure(time_s, conc, unit="mg/L", phases=phases, measure=measure,
                             max_points=plots.DEFAULT_MAX_POINTS)
    build = time.perf_counter() - t0
    t0 = time.perf_counter()
    payload = plots.figure_payload_bytes(fig)
    encode = time.perf_counter() - t0
    drawn = sum(len(tr.x) for tr in fig.data if (tr.name or "").startswith("chamber "))
    print(f"long trace: {hours:.0f} h × {len(channels)} channels at 1 Hz = {time_s.size * len(channels):,} readings "
          f"(simulated in {made:.1f} s), {len(phases):,} phases, {len(measure):,} fitted measure phases")
    print(f"  drawn points: {drawn:,} ({drawn // len(channels):,} per channel)")
    print(f"  figure build: {build * 1000:.0f} ms; JSON encode: {encode * 1000:.0f} ms")
    print(f"  plotly figure JSON sent to the browser: {payload:,} bytes ({payload / 1e6:.2f} MB)")
    full = len(time_s) * len(channels) * 2 * 8
    print(f"  (the readings alone, undownsampled, would be at least {full / 1e6:.0f} MB as float64 x/y pairs)")


if __name__ == "__main__":
    bench_reruns()
    bench_long_trace_payload()

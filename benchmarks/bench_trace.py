"""Benchmark: a 72-hour, 8-channel, 1 Hz trial from file bytes to MO2.

Run:  /work/venv/bin/python benchmarks/bench_trace.py [--hours 72] [--channels 8] [--repeats 5]

Simulates the trial with :func:`swimlab.sim.simulate_trial`, then prints the median of
``--repeats`` runs of

- the bare pandas parse of the CSV bytes (the faster of the C and pyarrow engines),
- the swimlab import (:func:`swimlab.io.logger.read_logger`),
- the analysis steps: unit conversion, phases from the pump, slopes, MO2 (background and
  uptake), and the phase flags and steepest windows,

their ratios to the bare parse, and the peak memory of one import + analysis (tracemalloc) and of
the process (resource.getrusage). Targets: phases + slopes + MO2 < 0.5 × bare parse;
import + analysis < 1.5 × bare parse; peak memory < 1 GB.
"""

from __future__ import annotations

import argparse
import gc
import io
import resource
import statistics
import sys
import time
import tracemalloc
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from swimlab import trace, uptake  # noqa: E402
from swimlab.sim import simulate_trial  # noqa: E402

CPU: dict[str, float] = {}
"""Median process CPU time of each timed step (less sensitive than wall time to other load on a
shared machine; a multi-threaded step, such as the pyarrow parse, adds the time of its threads)."""


def _median_time(fn, repeats: int, name: str = "") -> tuple[float, object]:
    times, cpu, result = [], [], None
    for _ in range(repeats):
        gc.collect()
        start, start_cpu = time.perf_counter(), time.process_time()
        result = fn()
        times.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
    if name:
        CPU[name] = statistics.median(cpu)
    return statistics.median(times), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("--hours", type=float, default=72.0)
    parser.add_argument("--channels", type=int, default=8)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()

    channels = [chr(ord("A") + i) for i in range(args.channels)]
    step_s = 3 * 3600.0
    n_steps = max(1, int(round(args.hours * 3600.0 / step_s)))
    speeds = np.round(0.15 + 0.65 * (np.arange(n_steps) % 8) / 7, 3)
    t0 = time.perf_counter()
    trial = simulate_trial(seed=72, channels=channels, speeds_m_s=speeds, step_duration_s=step_s,
                           fish_mass_g={c: 400.0 + 25.0 * i for i, c in enumerate(channels)},
                           background_doubling_time_h=24.0, glitches=40)
    data = trial.csv_bytes
    truth = trial.truth
    print(f"simulated {trial.time_s.size:,} readings x {len(channels)} channels "
          f"({len(data) / 1e6:.1f} MB CSV) in {time.perf_counter() - t0:.1f} s")

    parse = {}
    for engine in ("c", "pyarrow"):
        parse[engine], _ = _median_time(lambda e=engine: pd.read_csv(io.BytesIO(data), engine=e), args.repeats,
                                         f"parse_{engine}")
    bare_engine = min(parse, key=parse.get)
    bare = parse[bare_engine]

    try:
        from swimlab.io.logger import read_logger
    except ImportError:  # the reader is another module; without it, time the analysis alone
        read_logger = None

    if read_logger is not None:
        t_import, logged = _median_time(lambda: read_logger(data, name="bench.csv"), args.repeats, "import")
        time_s, oxy, temps, pump, unit = (logged.time_s, logged.oxygen, logged.temperature_c, logged.pump,
                                          logged.oxygen_unit)
    else:
        t_import = float("nan")
        time_s, oxy, temps, pump, unit = (trial.time_s, trial.oxygen_pct, trial.temperature_c, trial.pump,
                                          "% air saturation")

    def convert():
        return trace.concentration_from_trace(oxy, unit, temps, truth.salinity, truth.pressure_pa)

    t_conv, conc = _median_time(convert, args.repeats, "conv")
    t_phases, phases = _median_time(lambda: trace.phases_from_pump(time_s, pump, truth.cycle["wait_s"]),
                                    args.repeats, "phases")
    t_slopes, slopes = _median_time(
        lambda: trace.fit_slopes(time_s, conc, phases, temperature_c=temps, oxygen_pct=oxy), args.repeats,
        "slopes")
    t_mo2, (table, _) = _median_time(
        lambda: uptake.phase_uptake(slopes, chambers=truth.chambers, blanks=list(truth.blanks),
                                    background_method="exponential"), args.repeats, "mo2")
    t_flags, flags = _median_time(
        lambda: trace.phase_flags(slopes, phases, time_s=time_s, oxygen_pct=oxy, temperature_c=temps),
        args.repeats, "flags")
    t_windows, _ = _median_time(lambda: trace.steepest_window_slopes(time_s, conc, phases, 60.0), args.repeats,
                                "windows")

    core = t_conv + t_phases + t_slopes + t_mo2
    analysis = core + t_flags + t_windows
    total = (t_import if read_logger is not None else 0.0) + analysis

    def full():
        if read_logger is not None:
            lg = read_logger(data, name="bench.csv")
            ts, ox, tc, pu, un = lg.time_s, lg.oxygen, lg.temperature_c, lg.pump, lg.oxygen_unit
        else:
            ts, ox, tc, pu, un = time_s, oxy, temps, pump, unit
        cc = trace.concentration_from_trace(ox, un, tc, truth.salinity, truth.pressure_pa)
        ph = trace.phases_from_pump(ts, pu, truth.cycle["wait_s"])
        sl = trace.fit_slopes(ts, cc, ph, temperature_c=tc, oxygen_pct=ox)
        uptake.phase_uptake(sl, chambers=truth.chambers, blanks=list(truth.blanks), background_method="exponential")
        trace.phase_flags(sl, ph, time_s=ts, oxygen_pct=ox, temperature_c=tc)
        trace.steepest_window_slopes(ts, cc, ph, 60.0)

    gc.collect()
    tracemalloc.start()
    full()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    used = table[table.used]
    merged = used.merge(truth.phases, on=["channel", "cycle"], suffixes=("", "_true"))
    clean = merged[merged.clean]
    error = (clean.mo2_mg_kg_h / clean.mo2_mg_kg_h_true - 1).abs()

    print(f"measure phases: {len(slopes):,} (channel x cycle); used {len(used):,}; flags {len(flags)}")
    print(f"MO2 error of clean phases: median {100 * error.median():.2f} %, max {100 * error.max():.2f} %")
    print()
    c = CPU
    c_bare = min(c["parse_c"], c["parse_pyarrow"])
    c_import = c.get("import", 0.0)
    c_core = c["conv"] + c["phases"] + c["slopes"] + c["mo2"]
    c_total = c_import + c_core + c["flags"] + c["windows"]

    def line(label: str, wall: float, cpu: float, target: str = "") -> None:
        print(f"{label:40s}{wall:8.3f} {wall / bare:7.2f}   {cpu:8.3f} {cpu / c_bare:7.2f}   {target}")

    print(f"median of {args.repeats} runs                   wall s  x parse      cpu s  x parse")
    line("bare pandas parse, C engine", parse["c"], c["parse_c"])
    line("bare pandas parse, pyarrow engine", parse["pyarrow"], c["parse_pyarrow"])
    line(f"bare parse (faster: {bare_engine})", bare, c_bare)
    line("swimlab import (read_logger)", t_import, c_import)
    line("  unit conversion", t_conv, c["conv"])
    line("  phases from pump", t_phases, c["phases"])
    line("  slopes", t_slopes, c["slopes"])
    line("  MO2 (background + uptake)", t_mo2, c["mo2"])
    line("phases + slopes + MO2 (with conversion)", core, c_core, "target < 0.5")
    line("  phase flags", t_flags, c["flags"])
    line("  steepest 60 s windows", t_windows, c["windows"])
    line("import + analysis", total, c_total, "target < 1.5")
    print(f"peak traced memory of import + analysis {peak / 1e6:7.0f} MB          target < 1000")
    print(f"peak resident memory of the process     {rss_mb:7.0f} MB")


if __name__ == "__main__":
    main()

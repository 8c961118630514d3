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


def _median_time(fn, repeats: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
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
        parse[engine], _ = _median_time(lambda e=engine: pd.read_csv(io.BytesIO(data), engine=e), args.repeats)
    bare_engine = min(parse, key=parse.get)
    bare = parse[bare_engine]

    try:
        from swimlab.io.logger import read_logger
    except ImportError:  # the reader is another module; without it, time the analysis alone
        read_logger = None

    if read_logger is not None:
        t_import, logged = _median_time(lambda: read_logger(data, name="bench.csv"), args.repeats)
        time_s, oxy, temps, pump, unit = (logged.time_s, logged.oxygen, logged.temperature_c, logged.pump,
                                          logged.oxygen_unit)
    else:
        t_import = float("nan")
        time_s, oxy, temps, pump, unit = (trial.time_s, trial.oxygen_pct, trial.temperature_c, trial.pump,
                                          "% air saturation")

    def convert():
        return trace.concentration_from_trace(oxy, unit, temps, truth.salinity, truth.pressure_pa)

    t_conv, conc = _median_time(convert, args.repeats)
    t_phases, phases = _median_time(lambda: trace.phases_from_pump(time_s, pump, truth.cycle["wait_s"]),
                                    args.repeats)
    t_slopes, slopes = _median_time(
        lambda: trace.fit_slopes(time_s, conc, phases, temperature_c=temps, oxygen_pct=oxy), args.repeats)
    t_mo2, (table, _) = _median_time(
        lambda: uptake.phase_uptake(slopes, chambers=truth.chambers, blanks=list(truth.blanks),
                                    background_method="exponential"), args.repeats)
    t_flags, flags = _median_time(
        lambda: trace.phase_flags(slopes, phases, time_s=time_s, oxygen_pct=oxy, temperature_c=temps),
        args.repeats)
    t_windows, _ = _median_time(lambda: trace.steepest_window_slopes(time_s, conc, phases, 60.0), args.repeats)

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
    print(f"median of {args.repeats} runs                       seconds   x bare parse")
    print(f"bare pandas parse, C engine            {parse['c']:8.3f}")
    print(f"bare pandas parse, pyarrow engine      {parse['pyarrow']:8.3f}")
    print(f"bare parse (faster: {bare_engine:7s})            {bare:8.3f}      1.00")
    print(f"swimlab import (read_logger)           {t_import:8.3f}   {t_import / bare:7.2f}")
    print(f"  unit conversion                      {t_conv:8.3f}   {t_conv / bare:7.2f}")
    print(f"  phases from pump                     {t_phases:8.3f}   {t_phases / bare:7.2f}")
    print(f"  slopes                               {t_slopes:8.3f}   {t_slopes / bare:7.2f}")
    print(f"  MO2 (background + uptake)            {t_mo2:8.3f}   {t_mo2 / bare:7.2f}")
    print(f"phases + slopes + MO2 (with conversion){core:8.3f}   {core / bare:7.2f}   target < 0.5")
    print(f"  phase flags                          {t_flags:8.3f}   {t_flags / bare:7.2f}")
    print(f"  steepest 60 s windows                {t_windows:8.3f}   {t_windows / bare:7.2f}")
    print(f"import + analysis                      {total:8.3f}   {total / bare:7.2f}   target < 1.5")
    print(f"peak traced memory of import + analysis {peak / 1e6:7.0f} MB          target < 1000")
    print(f"peak resident memory of the process     {rss_mb:7.0f} MB")


if __name__ == "__main__":
    main()

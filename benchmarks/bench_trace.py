"""Benchmark: a 72-hour, 8-channel, 1 Hz trial from file bytes to MO2.

Run:  .venv/bin/python benchmarks/bench_trace.py [--hours 72] [--channels 8] [--repeats 5]

Simulates the trial with :func:`swimlab.sim.simulate_trial`, then times, in ``--repeats``
interleaved rounds (every step once per round, so that load from other work on the machine falls
on all steps alike), and prints the median over rounds of

- the bare pandas parse of the CSV bytes with the C and the pyarrow engine (the faster is the
  yardstick),
- the swimlab import (:func:`swimlab.io.logger.read_logger`) of a file whose column mapping is
  remembered (as :func:`swimlab.analysis.analyse` reads a session's raw file, with the mapping
  stored beside it) and of a first file (mapping guessed), and apart from it
  the SHA-256 of the raw bytes (computed once, where a raw file is kept: the lab book, a bundle
  or the app's upload; an analysis reads the file by that checksum and does not hash it again),
- the analysis steps: unit conversion, phases from the pump, slopes, MO2 (background and uptake),
  and, beyond the target's analysis, the phase flags and the steepest 60 s windows (for MMR),
- import (mapping remembered) + analysis run end to end (file bytes to the MO2 table), and the
  same with flags and windows,

their ratios to the bare parse (ratio of medians, and the median of each round's own ratio), the
process CPU time of each step, and the peak memory of one import + analysis (tracemalloc) and of
the process (resource.getrusage). Targets (issue 3): phases + slopes + MO2 < 0.5 × bare parse;
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
from swimlab.io.checksum import sha256_hex  # noqa: E402
from swimlab.io.logger import ColumnMapping, guess_mapping, read_logger  # noqa: E402
from swimlab.sim import simulate_trial  # noqa: E402


def _timed(fn) -> tuple[float, float, object]:
    """Wall and process CPU seconds of one call (a multi-threaded step adds its threads' CPU)."""
    gc.collect()
    start, start_cpu = time.perf_counter(), time.process_time()
    result = fn()
    return time.perf_counter() - start, time.process_time() - start_cpu, result


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

    def parse(engine: str):
        return pd.read_csv(io.BytesIO(data), engine=engine)

    mapping = guess_mapping(data, name="bench.csv")

    def do_import(known: ColumnMapping | None = mapping):
        return read_logger(data, name="bench.csv", mapping=known)

    def analysis(logged, *, extra: bool):
        ts, ox, tc = logged.time_s, logged.oxygen, logged.temperature_c
        conc = trace.concentration_from_trace(ox, logged.oxygen_unit, tc, truth.salinity, truth.pressure_pa)
        phases = trace.phases_from_pump(ts, logged.pump, truth.cycle["wait_s"])
        slopes = trace.fit_slopes(ts, conc, phases, temperature_c=tc, oxygen_pct=ox)
        table, _ = uptake.phase_uptake(slopes, chambers=truth.chambers, blanks=list(truth.blanks),
                                       background_method="exponential")
        if extra:
            trace.phase_flags(slopes, phases, time_s=ts, oxygen_pct=ox, temperature_c=tc)
            trace.steepest_window_slopes(ts, conc, phases, 60.0)
        return table

    logged = do_import()
    time_s, oxy, temps = logged.time_s, logged.oxygen, logged.temperature_c
    conc = trace.concentration_from_trace(oxy, logged.oxygen_unit, temps, truth.salinity, truth.pressure_pa)
    phases = trace.phases_from_pump(time_s, logged.pump, truth.cycle["wait_s"])
    slopes = trace.fit_slopes(time_s, conc, phases, temperature_c=temps, oxygen_pct=oxy)

    steps = {
        "parse_c": lambda: parse("c"),
        "parse_pyarrow": lambda: parse("pyarrow"),
        "import": do_import,
        "import_guess": lambda: do_import(None),
        "sha256": lambda: sha256_hex(data),
        "conv": lambda: trace.concentration_from_trace(oxy, logged.oxygen_unit, temps, truth.salinity,
                                                       truth.pressure_pa),
        "phases": lambda: trace.phases_from_pump(time_s, logged.pump, truth.cycle["wait_s"]),
        "slopes": lambda: trace.fit_slopes(time_s, conc, phases, temperature_c=temps, oxygen_pct=oxy),
        "mo2": lambda: uptake.phase_uptake(slopes, chambers=truth.chambers, blanks=list(truth.blanks),
                                           background_method="exponential"),
        "flags": lambda: trace.phase_flags(slopes, phases, time_s=time_s, oxygen_pct=oxy, temperature_c=temps),
        "windows": lambda: trace.steepest_window_slopes(time_s, conc, phases, 60.0),
        "end_to_end": lambda: analysis(do_import(), extra=False),
        "end_to_end_extra": lambda: analysis(do_import(), extra=True),
    }
    wall: dict[str, list[float]] = {k: [] for k in steps}
    cpu: dict[str, list[float]] = {k: [] for k in steps}
    table = None
    for _ in range(args.repeats):
        for key, fn in steps.items():
            w, c, result = _timed(fn)
            wall[key].append(w)
            cpu[key].append(c)
            if key == "end_to_end":
                table = result
    per_round_bare = [min(a, b) for a, b in zip(wall["parse_c"], wall["parse_pyarrow"], strict=True)]
    med = {k: statistics.median(v) for k, v in wall.items()}
    med_cpu = {k: statistics.median(v) for k, v in cpu.items()}
    bare_engine = "c" if med["parse_c"] <= med["parse_pyarrow"] else "pyarrow"
    bare = med[f"parse_{bare_engine}"]
    c_bare = min(med_cpu["parse_c"], med_cpu["parse_pyarrow"])

    def round_ratio(key: str) -> float:
        return statistics.median(w / b for w, b in zip(wall[key], per_round_bare, strict=True))

    gc.collect()
    tracemalloc.start()
    analysis(do_import(), extra=True)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    used = table[table.used]
    merged = used.merge(truth.phases, on=["channel", "cycle"], suffixes=("", "_true"))
    clean = merged[merged.clean]
    error = (clean.mo2_mg_kg_h / clean.mo2_mg_kg_h_true - 1).abs()
    print(f"measure phases: {len(slopes):,} (channel x cycle); used {len(used):,}")
    print(f"MO2 error of clean phases: median {100 * error.median():.2f} %, max {100 * error.max():.2f} %")
    print()

    def line(label: str, key: str | None = None, *, wall_s: float | None = None, cpu_s: float | None = None,
             target: str = "") -> None:
        w = med[key] if key else wall_s
        c = med_cpu[key] if key else cpu_s
        rr = f"{round_ratio(key):7.2f}" if key else "       "
        print(f"{label:44s}{w:8.3f} {w / bare:7.2f} {rr}   {c:8.3f} {c / c_bare:7.2f}   {target}")

    core_keys = ("conv", "phases", "slopes", "mo2")
    print(f"median of {args.repeats} interleaved rounds          wall s  x parse x/round"
          f"      cpu s  x parse")
    line("bare pandas parse, C engine", "parse_c")
    line("bare pandas parse, pyarrow engine", "parse_pyarrow")
    print(f"  (yardstick: the faster, {bare_engine}; x/round divides by each round's faster parse)")
    line("swimlab import (read_logger), mapping known", "import")
    line("  the same, mapping guessed (a first file)", "import_guess")
    line("  SHA-256 of the raw bytes (when kept)", "sha256")
    line("  unit conversion", "conv")
    line("  phases from pump", "phases")
    line("  slopes", "slopes")
    line("  MO2 (background + uptake)", "mo2")
    line("phases + slopes + MO2 (with conversion)", wall_s=sum(med[k] for k in core_keys),
         cpu_s=sum(med_cpu[k] for k in core_keys), target="target < 0.5")
    line("import + analysis, end to end", "end_to_end", target="target < 1.5")
    line("  phase flags", "flags")
    line("  steepest 60 s windows (MMR)", "windows")
    line("import + analysis + flags + windows", "end_to_end_extra")
    print(f"peak traced memory of import + analysis {peak / 1e6:7.0f} MB          target < 1000")
    print(f"peak resident memory of the process     {rss_mb:7.0f} MB")


if __name__ == "__main__":
    main()

"""Benchmark: reading a large oxygen logger export against a bare pandas parse of the same bytes.

Builds in memory a 72-hour, 8-channel, 1 Hz export (259,200 readings; ISO date-times, 8 oxygen
columns in % air saturation, 8 temperature columns, a flush-pump column), then prints the median
of five interleaved runs of:

- ``pandas.read_csv`` with the C engine,
- ``pandas.read_csv`` with the pyarrow engine,
- ``swimlab.io.read_logger`` with the mapping given (as when the lab book remembers it),
- ``swimlab.io.read_logger`` with the mapping guessed,

and the ratio of each swimlab figure to the faster bare parse.

Run: ``/work/venv/bin/python benchmarks/bench_import.py [--hours 72] [--channels 8] [--runs 5]``
"""

from __future__ import annotations

import argparse
import io
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from swimlab.io import guess_mapping, read_logger  # noqa: E402


def make_export(hours: float = 72.0, channels: int = 8, seed: int = 20260302) -> bytes:
    """Return the bytes of a simulated 1 Hz logger export (its own generator, seeded)."""
    rng = np.random.default_rng(seed)
    n = int(hours * 3600)
    start = np.datetime64("2026-03-02T08:00:00")
    stamps = np.datetime_as_string(start + np.arange(n).astype("timedelta64[s]"))
    stamps = np.char.replace(stamps, "T", " ")
    cycle = np.arange(n) % 900  # 15-min cycles: 5 min flush, 10 min closed
    flushing = cycle < 300
    columns: dict[str, np.ndarray] = {"Time": stamps}
    for c in range(channels):
        decline = np.where(flushing, 0.0, (cycle - 300) * rng.uniform(0.01, 0.03))
        columns[f"O2 CH{c + 1} [% air sat.]"] = np.round(97 - decline + rng.normal(0, 0.2, n), 2)
    for c in range(channels):
        columns[f"Temp CH{c + 1} [°C]"] = np.round(15 + rng.normal(0, 0.02, n), 2)
    columns["Flush pump"] = flushing.astype(int)
    return pd.DataFrame(columns).to_csv(index=False).encode("utf-8")


def timed(func) -> tuple[float, float]:
    """Wall time and process CPU time (all threads) of one call. [s]"""
    start, start_cpu = time.perf_counter(), time.process_time()
    func()
    return time.perf_counter() - start, time.process_time() - start_cpu


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hours", type=float, default=72.0)
    parser.add_argument("--channels", type=int, default=8)
    parser.add_argument("--runs", type=int, default=5)
    args = parser.parse_args(argv)

    data = make_export(args.hours, args.channels)
    name = "bench_export.csv"
    mapping = guess_mapping(data, name=name)
    trace = read_logger(data, name=name, mapping=mapping)
    n_rows = trace.n_rows_read
    assert trace.time_s.size == n_rows and trace.glitches.empty, "benchmark file should be clean"

    # Rounds interleave the four readers so that each round sees the same machine load; the
    # ratio is taken within each round, then the median over rounds is reported.
    readers = {
        "c": lambda: pd.read_csv(io.BytesIO(data), engine="c"),
        "arrow": lambda: pd.read_csv(io.BytesIO(data), engine="pyarrow"),
        "given": lambda: read_logger(data, name=name, mapping=mapping),
        "guessed": lambda: read_logger(data, name=name),
    }
    times: dict[str, list[float]] = {key: [] for key in readers}
    cpu: dict[str, list[float]] = {key: [] for key in readers}
    for _ in range(args.runs):
        for key, func in readers.items():
            wall, used = timed(func)
            times[key].append(wall)
            cpu[key].append(used)
    bare = [min(c, a) for c, a in zip(times["c"], times["arrow"], strict=True)]
    med = {key: statistics.median(values) for key, values in times.items()}
    med_cpu = {key: statistics.median(values) for key, values in cpu.items()}
    ratio = {key: statistics.median(t / b for t, b in zip(times[key], bare, strict=True))
             for key in ("given", "guessed")}
    bare_cpu = min(med_cpu["c"], med_cpu["arrow"])

    print(f"file: {n_rows} rows, {args.channels} oxygen + {args.channels} temperature + pump "
          f"columns, {len(data) / 1e6:.1f} MB; median of {args.runs} interleaved runs")
    print("                                   wall s   ratio    cpu s   ratio")
    print(f"pandas.read_csv, C engine        {med['c']:8.3f}          {med_cpu['c']:7.3f}")
    print(f"pandas.read_csv, pyarrow engine  {med['arrow']:8.3f}          {med_cpu['arrow']:7.3f}")
    for key, label in (("given", "swimlab read_logger (mapping)  "),
                       ("guessed", "swimlab read_logger (guessed)  ")):
        print(f"{label}  {med[key]:8.3f}  {ratio[key]:6.2f}  {med_cpu[key]:7.3f}  "
              f"{med_cpu[key] / bare_cpu:6.2f}")
    print("wall ratio: median over rounds of swimlab / the faster bare parse of that round; "
          "cpu ratio: to the lower median CPU of the two bare parses")

if __name__ == "__main__":
    main()

"""Where a Parquet scan's CPU goes: decoding the file, against the one-pass engine's own work.

    PYTHONPATH=. python benchmarks/engine.py              # the benchmark night (benchmarks/run.py makes it)
    PYTHONPATH=. python benchmarks/engine.py --reps 9 FILE.parquet

In one process, repetitions interleaved, medians:

- decode: every window of row groups the scan reads, decoded one after the other (what
  ``ingest.onepass`` hands to two threads), with nothing done to the rows;
- engine: ``ingest.onepass.aggregate_samples`` over the same windows already in memory, so
  nothing is decoded while it runs (its reducer thread still runs beside it).

The scan's wall time on 2 cores is bounded below by (decode + engine CPU) / 2 plus start-up
(about 0.5 s, one core): this is the budget a speed target leaves the engine. A change to the
engine is judged by its CPU seconds here, the old and the new code run alternately several
times (the same code moves 10-15 % between runs on the development VM; DEVELOPERS.md), not by
a single wall time of a whole scan. A measurement, not a test.
"""

from __future__ import annotations

import argparse
import gc
import os
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

# monitor first, as in the ctwd program: its __init__ sets the allocator's and BLAS's environment
# before polars and numpy load
from monitor.config import load_config  # noqa: E402, I001

import polars as pl  # noqa: E402

from ingest import onepass  # noqa: E402
from ingest.reader import scan_samples  # noqa: E402


def _timed(fn) -> tuple[float, float]:
    w, c = time.perf_counter(), time.process_time()
    fn()
    return time.perf_counter() - w, time.process_time() - c


def main() -> None:
    ap = argparse.ArgumentParser(description="decode against engine CPU of one Parquet export")
    ap.add_argument("file", type=Path, nargs="?",
                    default=Path(os.environ.get("TMPDIR", "/tmp")) / "ctwd-bench" / "night_2000x10s_1000hz_s6.parquet")
    ap.add_argument("--config", type=Path, default=ROOT / "config")
    ap.add_argument("--reps", type=int, default=7)
    a = ap.parse_args()
    if not a.file.exists():
        raise SystemExit(f"{a.file}: not found (PYTHONPATH=. python benchmarks/run.py writes the benchmark night)")
    cfg = load_config(a.config)
    samples = scan_samples(a.file, cfg.cell.export)
    source = samples.plan.source
    windows = onepass.parquet_windows(a.file)
    frames = [source.slice(*w).collect() for w in windows]
    rows = sum(f.height for f in frames)

    def decode() -> None:
        for w in windows:
            source.slice(*w).collect()

    seams: list[int] = []

    def engine() -> None:
        seams.append(onepass.aggregate_samples(samples, cfg.cell.arc).aggregates.height)

    gc.freeze()  # as the ctwd program does once its modules are loaded (monitor.cli.entry)
    real = onepass._batches
    onepass._batches = lambda _samples, _chunk: iter(frames)  # the engine over the frames in memory
    got: dict[str, list[tuple[float, float]]] = {"decode": [], "engine": []}
    try:
        for _ in range(a.reps):
            got["decode"].append(_timed(decode))
            got["engine"].append(_timed(engine))
    finally:
        onepass._batches = real
    print(f"{a.file.name}: {rows:,} rows in {len(windows)} windows, {seams[-1]} seams; "
          f"{a.reps} interleaved repetitions, medians; {os.cpu_count()} CPUs, polars {pl.__version__}")
    print("| part   | wall s | CPU s | CPU us a row |")
    print("|--------|-------:|------:|-------------:|")
    for k, v in got.items():
        w, c = statistics.median(x for x, _ in v), statistics.median(x for _, x in v)
        print(f"| {k:<6} | {w:6.2f} | {c:5.2f} | {c / rows * 1e6:12.3f} |")


if __name__ == "__main__":
    main()

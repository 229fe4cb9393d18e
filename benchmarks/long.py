"""Peak memory against file length: the benchmark night repeated 1, 2, 5 and 10 times in one Parquet file.

    PYTHONPATH=. python benchmarks/long.py                 # 21 M, 42 M, 105 M and 210 M rows
    PYTHONPATH=. python benchmarks/long.py --copies 1 2    # a quick look

Each copy of the night (benchmarks/night.py) is shifted in time to follow the one before and its
serials get a copy number, so every seam label stays unique in the file (a label that recurs is
scanned by the slower whole-seam form, which is not what is measured here). The long files are
written a copy at a time, with 1 M-row row groups, so this process never holds more than one
night. Every scan is a fresh process: ``ctwd scan --no-page --no-history``; wall time around it,
peak RSS from ``os.wait4``. A measurement, not a test: nothing here asserts.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))


def write_long(night: Path, copies: int, out: Path) -> Path:
    """``copies`` back-to-back copies of ``night`` as one Parquet file ``out`` (kept if present)."""
    import polars as pl
    import pyarrow.parquet as pq

    if out.exists():
        return out
    df = pl.read_parquet(night)
    span = df["time"].max() - df["time"].min() + (df["time"][1] - df["time"][0])
    tmp = out.with_suffix(".tmp")
    writer = None
    try:
        for c in range(copies):
            part = df.with_columns(pl.col("time") + span * c, (pl.col("serial") + f"-{c:02d}").alias("serial"))
            table = part.to_arrow()
            if writer is None:
                writer = pq.ParquetWriter(tmp, table.schema, compression="zstd")
            writer.write_table(table, row_group_size=1_000_000)
    finally:
        if writer is not None:
            writer.close()
    tmp.replace(out)
    return out


def scan(path: Path, py: str, out: Path) -> dict:
    d = path.parent / f"in_{path.stem}"
    d.mkdir(exist_ok=True)
    link = d / path.name
    if not link.exists():
        link.symlink_to(path)
    argv = [py, "-m", "monitor.cli", "scan", "--config", str(ROOT / "config"), "-q", "--no-history", "--no-page",
            "--out", str(out), str(d)]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    t = time.perf_counter()
    p = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env, cwd=ROOT)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t
    if os.waitstatus_to_exitcode(status) not in (0, 1):  # 1: flagged seams, a normal night
        raise SystemExit(f"scan failed: {p.stderr.read().decode()[-500:]}")
    return {"wall_s": wall, "cpu_s": ru.ru_utime + ru.ru_stime, "peak_mb": ru.ru_maxrss / 1024}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--copies", type=int, nargs="+", default=[1, 2, 5, 10])
    ap.add_argument("--work", type=Path, default=Path(os.environ.get("TMPDIR", "/tmp")) / "ctwd-bench")
    a = ap.parse_args()
    # The files are made in a child process: on Linux a child's peak RSS (ru_maxrss) starts from
    # its parent's at fork, so this process must stay small for the peaks below to mean anything.
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    made = subprocess.run([sys.executable, __file__, "--make", str(a.work), *map(str, a.copies)], env=env, cwd=ROOT,
                          check=True, capture_output=True, text=True)
    files = json.loads(made.stdout.strip().splitlines()[-1])
    rows = []
    for c, (path, n) in zip(a.copies, files):
        path = Path(path)
        got = scan(path, sys.executable, a.work / "out_long")
        rows.append({"copies": c, "rows": n, "file_mib": path.stat().st_size / 2**20, **got})
        print(f"  {c} x: {n:,} rows, {got['wall_s']:.1f} s, peak {got['peak_mb']:.0f} MiB", file=sys.stderr, flush=True)
    print("\n| rows | Parquet MiB | wall s | peak MiB |\n|-----:|------------:|-------:|---------:|")
    for r in rows:
        print(f"| {r['rows'] / 1e6:.0f} M | {r['file_mib']:.0f} | {r['wall_s']:.1f} | {r['peak_mb']:.0f} |")
    print(json.dumps(rows))


def _make(work: Path, copies: list[int]) -> None:
    import polars as pl
    from night import write_night

    night = write_night(work, 2000, csv=False)["parquet"]
    files = []
    for c in copies:
        path = write_long(night, c, work / f"long_{c}x.parquet")
        files.append((str(path), pl.scan_parquet(path).select(pl.len()).collect().item()))
    print(json.dumps(files))


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--make":
        _make(Path(sys.argv[2]), [int(c) for c in sys.argv[3:]])
    else:
        main()

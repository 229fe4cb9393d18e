"""Benchmark: a simulated night at 1 kHz, scanned by ``ctwd scan`` against a bare polars floor and a pandas reference.

    PYTHONPATH=. python benchmarks/run.py                # 2,000 seams x 10 s x 1 kHz (21 M rows), 3 repetitions
    PYTHONPATH=. python benchmarks/run.py --small        # smoke run, well under a minute
    PYTHONPATH=. python benchmarks/run.py --dask         # also: 8 files on a local Dask cluster, 1 vs 2 workers

Every measurement is a fresh process; repetitions are interleaved (floor, bare read, scan, scan
with page, pandas, CSV floor, CSV bare read, CSV scan, then again) and the medians reported.
Wall time is measured around the process, CPU time (user + system) and peak RSS come from
``os.wait4`` on that process. Input files are generated once (benchmarks/night.py) and kept in ``--work``.
Before each measurement its input is read once, untimed, so every step starts from a file in the
page cache: on a VM whose cache is reclaimed behind its back (a step after the 1.5 GB CSV ones
found the Parquet file evicted), the step that happens to run first would otherwise pay the disk.
This is a measurement, never a test: nothing here asserts a time.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

FLOOR = """
import sys, polars as pl
src = sys.argv[1]
lf = pl.scan_parquet(src) if src.endswith(".parquet") else pl.scan_csv(src)
df = lf.group_by("serial", "seam").agg(
    pl.col("current_a").mean().alias("i"), (pl.col("current_a") ** 2).mean().alias("i2"),
    pl.col("voltage_v").mean().alias("v"), pl.col("wfs_m_min").mean().alias("w")).collect()
print(df.height)
"""

# A bare read of every column the scan needs (all 8 of the night's), in batches, with no work: what
# the scan cannot go below on the same file, where the floor reads 5 columns.
READ = """
import sys, polars as pl
src = sys.argv[1]
lf = pl.scan_parquet(src) if src.endswith(".parquet") else pl.scan_csv(src)
n = 0
for b in lf.collect_batches(chunk_size=1_000_000, maintain_order=True):
    n += b.height
print(n)
"""

# What a user would write instead: read everything, group, apply a Python function per seam.
PANDAS = """
import sys, numpy as np, pandas as pd
d = pd.read_parquet(sys.argv[1])
d["t"] = (d["time"] - d["time"].iloc[0]).dt.total_seconds()
d = d[(d["current_a"] > 30) & d["seam"].notna()]
def seam(g):
    t0, t1 = g["t"].min(), g["t"].max()
    k = g[(g["t"] >= t0 + 0.5) & (g["t"] <= t1 - 0.3)]
    i = k["current_a"]
    return pd.Series({"current": i.mean(), "current_sq": (i ** 2).mean(), "voltage": k["voltage_v"].mean(),
                      "power": (i * k["voltage_v"]).mean(), "wfs": k["wfs_m_min"].mean(),
                      "max_gap": k["t"].diff().max(), "n": len(k)})
out = d.groupby(["serial", "seam"]).apply(seam)
print(len(out))
"""


def _run(argv: list[str], env: dict) -> dict:
    t = time.perf_counter()
    p = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env, cwd=ROOT)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t
    err = p.stderr.read().decode() if p.stderr else ""
    p.returncode = os.waitstatus_to_exitcode(status)
    if p.returncode != 0:
        raise SystemExit(f"benchmark step failed ({' '.join(argv[:4])} ...): {err.strip()[-500:]}")
    peak_kb = ru.ru_maxrss if sys.platform != "darwin" else ru.ru_maxrss / 1024
    return {"wall_s": wall, "cpu_s": ru.ru_utime + ru.ru_stime, "peak_mb": peak_kb / 1024}


def _warm(path: Path) -> None:
    """Read ``path`` (a file, or every file below a folder) once, so it is in the page cache."""
    files = [path] if path.is_file() else sorted(q for q in path.rglob("*") if q.is_file())
    for f in files:
        with open(f, "rb") as fh:
            while fh.read(1 << 23):
                pass


def _dir_with(path: Path, name: str) -> Path:
    d = path.parent / f"in_{name}"
    d.mkdir(exist_ok=True)
    link = d / path.name
    if not link.exists():
        link.symlink_to(path)
    return d


def _version(pkg: str) -> str:
    from importlib.metadata import version

    return version(pkg)


def main() -> None:
    ap = argparse.ArgumentParser(description="ctwd scan benchmark")
    ap.add_argument("--small", action="store_true", help="smoke size: 60 seams x 4 s, one repetition")
    ap.add_argument("--seams", type=int, default=None)
    ap.add_argument("--seam-s", type=float, default=10.0)
    ap.add_argument("--rate", type=float, default=1000.0)
    ap.add_argument("--reps", type=int, default=None)
    ap.add_argument("--dask", action="store_true", help="also time 8 files on a local Dask cluster, 1 vs 2 workers")
    ap.add_argument("--work", type=Path, default=Path(os.environ.get("TMPDIR", "/tmp")) / "ctwd-bench")
    ap.add_argument("--json", type=Path, default=None, help="write the medians here")
    a = ap.parse_args()
    seams = a.seams or (60 if a.small else 2000)
    seam_s = 4.0 if a.small else a.seam_s
    reps = a.reps or (1 if a.small else 3)

    # The inputs are made in a child process: on Linux a child's peak RSS (ru_maxrss) starts from
    # its parent's at fork, so this process must stay small for the peaks below to mean anything.
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    # as installed from a wheel, modules are byte-compiled: let the source tree's be cached too, or
    # every measured start would compile ctwd-monitor's modules again
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    py = sys.executable
    made = subprocess.run([py, str(ROOT / "benchmarks" / "night.py"), str(a.work), "--seams", str(seams),
                           "--seam-s", str(seam_s), "--rate", str(a.rate), *(["--split", "8"] if a.dask else [])],
                          env=env, cwd=ROOT, check=True, capture_output=True, text=True)
    info = json.loads(made.stdout.strip().splitlines()[-1])
    pq, csv, rows = Path(info["parquet"]), Path(info["csv"]), int(info["rows"])
    out = a.work / "out"
    cli = [py, "-m", "monitor.cli", "scan", "--config", str(ROOT / "config"), "-q", "--no-history"]
    steps = {
        "floor (polars, Parquet)": [py, "-c", FLOOR, str(pq)],
        "bare read, 8 cols, Parquet": [py, "-c", READ, str(pq)],
        "ctwd scan --no-page": [*cli, "--out", str(out / "a"), "--no-page", str(_dir_with(pq, "pq"))],
        "ctwd scan (with page)": [*cli, "--out", str(out / "b"), str(_dir_with(pq, "pq"))],
        "pandas reference": [py, "-c", PANDAS, str(pq)],
        "floor (polars, CSV)": [py, "-c", FLOOR, str(csv)],
        "bare read, 8 cols, CSV": [py, "-c", READ, str(csv)],
        "ctwd scan CSV --no-page": [*cli, "--out", str(out / "c"), "--no-page", str(_dir_with(csv, "csv"))],
    }
    if a.dask:
        split = Path(info["split"])
        steps["8 files, dask local:1"] = [*cli, "--out", str(out / "d1"), "--no-page", "--cluster", "local:1", str(split)]
        steps["8 files, dask local:2"] = [*cli, "--out", str(out / "d2"), "--no-page", "--cluster", "local:2", str(split)]
        steps["8 files, --jobs 1"] = [*cli, "--out", str(out / "j1"), "--no-page", str(split)]
        steps["8 files, --jobs 2"] = [*cli, "--out", str(out / "j2"), "--no-page", "--jobs", "2", str(split)]
    results: dict[str, list[dict]] = {k: [] for k in steps}
    for rep in range(reps):
        for name, argv in steps.items():
            _warm(csv if "CSV" in name else Path(info["split"]) if "8 files" in name else pq)
            results[name].append(_run(argv, env))
            print(f"  rep {rep + 1}/{reps} {name}: {results[name][-1]['wall_s']:.2f} s", file=sys.stderr, flush=True)
    shutil.rmtree(out, ignore_errors=True)

    med = {k: {m: statistics.median(r[m] for r in v) for m in ("wall_s", "cpu_s", "peak_mb")} for k, v in results.items()}
    print(f"\n{seams} seams x {seam_s:g} s at {a.rate:g} Hz = {rows:,} rows; Parquet {pq.stat().st_size / 2**20:.0f} MiB, "
          f"CSV {csv.stat().st_size / 2**20:.0f} MiB; {reps} interleaved repetitions, medians; "
          f"{os.cpu_count()} CPUs, Python {platform.python_version()}, polars {_version('polars')}\n")
    floor = med["floor (polars, Parquet)"]
    print(f"| {'step':<26} | wall s | CPU s | peak MiB | wall / floor | peak / floor |")
    print(f"|{'-' * 28}|-------:|------:|---------:|-------------:|-------------:|")
    for k, m in med.items():
        ref = med["floor (polars, CSV)"] if "CSV" in k else floor
        print(f"| {k:<26} | {m['wall_s']:6.2f} | {m['cpu_s']:5.2f} | {m['peak_mb']:8.0f} | "
              f"{m['wall_s'] / ref['wall_s']:12.2f} | {m['peak_mb'] / ref['peak_mb']:12.2f} |")
    scan, page, pandas = med["ctwd scan --no-page"], med["ctwd scan (with page)"], med["pandas reference"]
    print(f"\npandas reference / ctwd scan --no-page: {pandas['wall_s'] / scan['wall_s']:.1f}x (wall)")
    print(f"page adds: {page['wall_s'] - scan['wall_s']:.2f} s for {seams} seams")
    csv_ratio = med["ctwd scan CSV --no-page"]["wall_s"] / med["floor (polars, CSV)"]["wall_s"]
    print(f"CSV scan / bare polars CSV scan: {csv_ratio:.2f}x")
    for fmt, name in (("Parquet", "ctwd scan --no-page"), ("CSV", "ctwd scan CSV --no-page")):
        got = med[name]["wall_s"] / med[f"bare read, 8 cols, {fmt}"]["wall_s"]
        print(f"{fmt}: scan / bare read of the columns it needs: {got:.2f}x")
    # each repetition's scan against the floor measured just before it (same machine state): on a
    # shared VM whose speed drifts, the spread of these says more than one ratio of medians
    for name, ref in (("ctwd scan --no-page", "floor (polars, Parquet)"), ("ctwd scan CSV --no-page", "floor (polars, CSV)")):
        pairs = sorted(s["wall_s"] / f["wall_s"] for s, f in zip(results[name], results[ref]))
        print(f"{name} / {ref}, each repetition: median {statistics.median(pairs):.2f}x, "
              f"range {pairs[0]:.2f}-{pairs[-1]:.2f}x")
    if a.dask:
        print(f"dask 2 workers vs 1: {med['8 files, dask local:1']['wall_s'] / med['8 files, dask local:2']['wall_s']:.2f}x; "
              f"--jobs 2 vs 1: {med['8 files, --jobs 1']['wall_s'] / med['8 files, --jobs 2']['wall_s']:.2f}x")
    if a.json:
        a.json.write_text(json.dumps({"rows": rows, "reps": reps, "medians": med, "runs": results}, indent=2))


if __name__ == "__main__":
    main()

"""A reproducible simulated night of one cell at a high logging rate, for the benchmarks and the scale tests.

The night is serials of the demo's tow bracket (3 seams each) in the demo's canonical export
columns (``config/cell.toml``): ``time`` (UTC timestamps, ms), ``part``, ``serial``, ``seam``,
``current_a``, ``voltage_v``, ``wfs_m_min``, ``travel_mm_s``, so ``config/`` applies as is.
Every seam carries the simulator's ripple, noise, arc-start ramp and crater fill; seams are
separated by a short arc-off stretch. Deterministic for a given seed.
"""

from __future__ import annotations

import sys
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import polars as pl

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from monitor.config import load_config  # noqa: E402
from monitor.simulate import SeamPlan, simulate_seam  # noqa: E402

__all__ = ["make_night", "write_night", "split_night"]

START = datetime(2026, 11, 30, 22, 0, tzinfo=UTC)
PART = "TB7-tow-bracket"
SEAMS = ("S1", "S2", "S3")


def make_night(n_seams: int, seam_s: float, rate: float, seed: int = 6, idle_s: float = 0.5,
               config_dir: Path | None = None) -> pl.DataFrame:
    """The night as one DataFrame in export columns (units as logged: A, V, m/min, mm/s)."""
    cfg = load_config(config_dir or Path(__file__).resolve().parent.parent / "config")
    part = cfg.parts[PART]
    w = cfg.wires[part.wire]
    rng = np.random.default_rng(seed)
    n_idle = int(round(idle_s * rate))
    n_seam = int(round(seam_s * rate))
    cols: dict[str, list[np.ndarray]] = {k: [] for k in ("current", "voltage", "wire_feed", "travel_speed")}
    for k in range(n_seams):
        spec = part.seam(SEAMS[k % 3])
        ctwd = spec.nominal_ctwd + 0.2e-3 * (k // 3) % 4e-3 + rng.normal(0, 0.3e-3)
        plan = SeamPlan(SEAMS[k % 3], ctwd, spec.wire_feed, spec.voltage + rng.normal(0, 0.15), spec.travel_speed, seam_s)
        s = simulate_seam(plan, w.melt_a, w.melt_b, w.diameter, w.density, rate, rng)
        cols["current"] += [np.abs(rng.normal(0, 0.3, n_idle)), s["current"]]
        cols["voltage"] += [np.abs(rng.normal(0.5, 0.1, n_idle)), s["voltage"]]
        cols["wire_feed"] += [np.zeros(n_idle), s["wire_feed"]]
        cols["travel_speed"] += [np.zeros(n_idle), s["travel_speed"]]
    per = n_idle + n_seam
    n = per * n_seams
    pos = np.arange(n)
    k_of = pos // per
    in_seam = (pos % per) >= n_idle
    # labels built from integer codes, without per-sample Python work
    seam_label = pl.Series("seam", np.where(in_seam, k_of % 3, -1)).replace_strict(
        {0: "S1", 1: "S2", 2: "S3", -1: None}, return_dtype=pl.String)
    serial_codes = pl.Series("k", k_of // 3)
    serial = ("TB7-" + (serial_codes + 1).cast(pl.String).str.zfill(5)).alias("serial")
    t_ms = (pos * (1000.0 / rate)).round().astype(np.int64)
    df = pl.DataFrame({
        "time": pl.select(pl.lit(START).dt.cast_time_unit("ms") + pl.Series(t_ms).cast(pl.Duration("ms"))).to_series(),
        "part": pl.repeat(PART, n, eager=True, dtype=pl.String),
        "serial": serial,
        "seam": seam_label,
        "current_a": np.concatenate(cols["current"]).round(1),
        "voltage_v": np.concatenate(cols["voltage"]).round(2),
        "wfs_m_min": (np.concatenate(cols["wire_feed"]) * 60).round(3),
        "travel_mm_s": (np.concatenate(cols["travel_speed"]) * 1e3).round(2),
    })
    return df


def write_night(out: Path, n_seams: int, seam_s: float = 10.0, rate: float = 1000.0, seed: int = 6,
                csv: bool = True) -> dict[str, Path]:
    """Write the night as ``night.parquet`` (and ``night.csv``) in ``out``; reuses files already there."""
    out.mkdir(parents=True, exist_ok=True)
    tag = f"night_{n_seams}x{seam_s:g}s_{rate:g}hz_s{seed}"
    paths = {"parquet": out / f"{tag}.parquet"}
    if csv:
        paths["csv"] = out / f"{tag}.csv"
    if all(p.exists() for p in paths.values()):
        return paths
    df = make_night(n_seams, seam_s, rate, seed)
    df.write_parquet(paths["parquet"], compression="zstd", row_group_size=1_000_000)
    if csv:
        df.with_columns(pl.col("time").dt.strftime("%Y-%m-%dT%H:%M:%S%.3fZ")).write_csv(paths["csv"])
    return paths


def split_night(parquet: Path, n_files: int) -> Path:
    """The night as ``n_files`` Parquet files (serials dealt round-robin) in ``split<n>/`` beside it."""
    d = parquet.parent / f"split{n_files}"
    if d.is_dir() and len(list(d.glob("*.parquet"))) == n_files:
        return d
    d.mkdir(exist_ok=True)
    df = pl.read_parquet(parquet)
    serials = df["serial"].unique(maintain_order=True).to_list()
    for j in range(n_files):
        chunk = serials[j::n_files]
        df.filter(pl.col("serial").is_in(chunk)).write_parquet(d / f"cell_TB7_{j:02d}.parquet", compression="zstd")
    return d


if __name__ == "__main__":
    import argparse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--seams", type=int, default=2000)
    ap.add_argument("--seam-s", type=float, default=10.0)
    ap.add_argument("--rate", type=float, default=1000.0)
    ap.add_argument("--split", type=int, default=0, help="also write the night as this many files (by serial)")
    a = ap.parse_args()
    import json

    paths = write_night(a.out, a.seams, a.seam_s, a.rate)
    info = {k: str(v) for k, v in paths.items()}
    info["rows"] = pl.scan_parquet(paths["parquet"]).select(pl.len()).collect().item()
    if a.split:
        info["split"] = str(split_night(paths["parquet"], a.split))
    print(json.dumps(info))

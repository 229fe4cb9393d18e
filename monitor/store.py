"""Write scan outputs: seams.parquet/.csv, files.csv, run.json, each atomically (temp, then rename)."""

from __future__ import annotations

import json
import os
import tempfile
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path

import polars as pl

from monitor.pipeline import FileRecord

__all__ = ["OUTPUT_COLUMNS", "to_output", "atomic_write", "write_outputs", "read_seams", "empty_output"]

# (output column, expression on the internal SI frame)
_MM = 1e3
_OUT: list[tuple[str, pl.Expr]] = [
    ("source", pl.col("source")),
    ("part", pl.col("part")),
    ("serial", pl.col("serial")),
    ("seam", pl.col("seam")),
    ("start", pl.col("start")),
    ("start_s", pl.col("start_s")),
    ("arc_time_s", pl.col("arc_time_s")),
    ("samples", pl.col("n_samples").cast(pl.Int64)),
    ("current_mean_a", pl.col("current_mean")),
    ("current_rms_a", pl.col("current_sq_mean").sqrt()),
    ("voltage_mean_v", pl.col("voltage_mean")),
    ("power_mean_w", pl.col("power_mean")),
    ("wire_feed_m_min", pl.col("wire_feed_mean") * 60.0),
    ("travel_speed_mm_s", pl.col("travel_speed") * _MM),
    ("melt_rate_kg_h", pl.col("melt_rate") * 3600.0),
    ("ctwd_mm", pl.col("ctwd") * _MM),
    ("ctwd_low_mm", pl.col("ctwd_low") * _MM),
    ("ctwd_high_mm", pl.col("ctwd_high") * _MM),
    ("ctwd_nominal_mm", pl.col("nominal_ctwd") * _MM),
    ("ctwd_band_mm", pl.col("ctwd_band") * _MM),
    ("ctwd_basis", pl.lit("absolute")),
    ("penetration_mm", pl.col("penetration") * _MM),
    ("penetration_low_mm", pl.col("penetration_low") * _MM),
    ("penetration_high_mm", pl.col("penetration_high") * _MM),
    ("min_penetration_mm", pl.col("min_penetration") * _MM),
    ("arc_energy_kj_mm", pl.col("arc_energy") * 1e-6),
    ("wire_mass_g", pl.col("wire_mass") * 1e3),
    ("status", pl.col("status")),
    ("reason", pl.col("reason")),
]
OUTPUT_COLUMNS = tuple(name for name, _ in _OUT)

_DTYPES = {
    "source": pl.String, "part": pl.String, "serial": pl.String, "seam": pl.String,
    "start": pl.Datetime("us", "UTC"), "samples": pl.Int64, "ctwd_basis": pl.String,
    "status": pl.String, "reason": pl.String,
}


def empty_output() -> pl.DataFrame:
    return pl.DataFrame(schema={c: _DTYPES.get(c, pl.Float64) for c in OUTPUT_COLUMNS})


def to_output(seams: pl.DataFrame) -> pl.DataFrame:
    """Internal SI frame -> the published seam table (units in the column names)."""
    if seams.height == 0:
        return empty_output()
    out = seams.select([expr.alias(name) for name, expr in _OUT])
    if "ctwd_basis" in seams.columns:
        out = out.with_columns(seams.get_column("ctwd_basis"))
    if "tip_change" in seams.columns:  # optional contact-tip-change marker (cell.toml [export] tip_change)
        out = out.with_columns(seams.get_column("tip_change").cast(pl.Boolean))
    return out.cast({c: _DTYPES.get(c, pl.Float64) for c in OUTPUT_COLUMNS}).sort(
        ["part", "start", "start_s", "source", "seam"], nulls_last=True)


def atomic_write(path: Path, write: Callable[[Path], None]) -> None:
    """Write via a temporary file in the same folder, fsync it, then rename over ``path``.

    A reader (or a scan killed half-way) sees the old file or the new one, never a torn one.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        write(tmp_path)
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp_path, path)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def _csv_frame(df: pl.DataFrame) -> pl.DataFrame:
    return df.with_columns(pl.col(pl.Datetime).dt.strftime("%Y-%m-%dT%H:%M:%S%.3fZ"))


def write_outputs(out_dir: Path, seams_out: pl.DataFrame, files: list[FileRecord], run: dict) -> None:
    """seams.parquet, seams.csv, files.csv and run.json (run.json last: its presence means complete)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    atomic_write(out_dir / "seams.parquet", lambda p: seams_out.write_parquet(p))
    atomic_write(out_dir / "seams.csv", lambda p: _csv_frame(seams_out).write_csv(p))
    files_df = pl.DataFrame([asdict(f) for f in files], schema={
        "source": pl.String, "format": pl.String, "size_bytes": pl.Int64, "sha256": pl.String,
        "rows": pl.Int64, "seams": pl.Int64, "status": pl.String, "error": pl.String})
    atomic_write(out_dir / "files.csv", lambda p: files_df.write_csv(p))

    def _json(p: Path) -> None:
        p.write_text(json.dumps(run, indent=2, default=str) + "\n", encoding="utf-8")

    atomic_write(out_dir / "run.json", _json)


def read_seams(results_dir: Path) -> pl.DataFrame:
    return pl.read_parquet(results_dir / "seams.parquet")

"""Write scan outputs: seams.parquet/.csv, files.csv, run.json, each atomically (temp, then rename)."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import tempfile
import time
import uuid
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path

import polars as pl

from monitor.pipeline import FileRecord

__all__ = ["OUTPUT_COLUMNS", "to_output", "atomic_write", "write_outputs", "read_seams", "empty_output",
           "files_frame", "recover", "OutputWriteError", "JOURNAL"]

#: Journal of a commit in progress: while it exists, the staged run must be rolled forward.
JOURNAL = ".commit-journal.json"

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


_FILES_SCHEMA = {
    "source": pl.String, "format": pl.String, "size_bytes": pl.Int64, "sha256": pl.String,
    "rows": pl.Int64, "seams": pl.Int64, "status": pl.String, "error": pl.String, "note": pl.String}


class OutputWriteError(OSError):
    """Results could not be written (disk full, read-only...); the previous results are intact."""


def files_frame(files: list[FileRecord]) -> pl.DataFrame:
    """files.csv as a frame: one row an input file, with its status, reason and notes."""
    return pl.DataFrame([asdict(f) for f in files], schema=_FILES_SCHEMA)


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _sha256(path: Path) -> str:
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def _fault_pause() -> None:
    """Fault-injection hook for the kill test: ``CTWD_COMMIT_PAUSE=<s>`` sleeps at each commit step.

    Unset in normal use (no pause); the test sets it so that random SIGKILLs land inside the
    commit as often as outside it.
    """
    pause = os.environ.get("CTWD_COMMIT_PAUSE")
    if pause:
        time.sleep(float(pause))


def recover(out_dir: Path) -> str | None:
    """Finish or discard an interrupted commit in ``out_dir``; called before every scan.

    - a journal exists: the staged run was complete, so roll it forward (move the files the
      journal lists that are still staged, run.json last), then drop the journal;
    - staging folders without a journal: an interrupted stage, deleted (the old results stand).

    Returns a one-line account of what was done, or None when there was nothing to do.
    """
    out_dir = Path(out_dir)
    if not out_dir.is_dir():
        return None
    done = None
    journal = out_dir / JOURNAL
    if journal.exists():
        try:
            plan = json.loads(journal.read_text(encoding="utf-8"))
            stage = out_dir / plan["staging"]
            names = list(plan["files"])
        except (OSError, ValueError, KeyError, TypeError):
            plan = None
        if plan is not None:
            for name in names:
                src = stage / name
                if src.exists():
                    os.replace(src, out_dir / name)
                    _fault_pause()
            _fsync_dir(out_dir)
            done = f"finished the interrupted commit of run {plan.get('run_id')}"
        journal.unlink(missing_ok=True)
    stale = [d for d in out_dir.glob(".staging-*") if d.is_dir()]
    for d in stale:
        shutil.rmtree(d, ignore_errors=True)
    for tmp in out_dir.glob(".*.tmp"):
        tmp.unlink(missing_ok=True)
    if stale and done is None:
        done = f"discarded {len(stale)} unfinished staging folder(s); previous results kept"
    return done


def write_outputs(out_dir: Path, seams_out: pl.DataFrame, files: list[FileRecord], run: dict,
                  extra: dict[str, str] | None = None) -> None:
    """Publish seams.parquet, seams.csv, files.csv, ``extra`` text files and run.json, all or nothing.

    Every file is first written and fsynced in ``out/.staging-<run id>/``; then a journal naming
    them is written atomically, the files are renamed into ``out`` (run.json last), and the journal
    is removed. A kill before the journal leaves the old results (the staging folder is discarded
    by :func:`recover` at the next start); a kill after it is rolled forward by :func:`recover`.
    run.json lists the sha256 of every file of its run (``outputs``), so a reader can check that
    all files come from one run.

    Raises
    ------
    OutputWriteError
        One-line message (e.g. disk full); the previous results are untouched.
    """
    out_dir = Path(out_dir)
    run_id = run.setdefault("run_id", uuid.uuid4().hex[:12])
    stage = out_dir / f".staging-{run_id}"
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        stage.mkdir()
        seams_out.write_parquet(stage / "seams.parquet")
        _fault_pause()
        _csv_frame(seams_out).write_csv(stage / "seams.csv")
        _fault_pause()
        files_frame(files).write_csv(stage / "files.csv")
        for name, text in (extra or {}).items():
            (stage / name).write_text(text, encoding="utf-8")
        _fault_pause()
        names = sorted(p.name for p in stage.iterdir())
        run["outputs"] = {n: _sha256(stage / n) for n in names}
        (stage / "run.json").write_text(json.dumps(run, indent=2, default=str) + "\n", encoding="utf-8")
        for n in [*names, "run.json"]:
            with open(stage / n, "rb") as fh:
                os.fsync(fh.fileno())
        _fsync_dir(stage)
        plan = {"run_id": run_id, "staging": stage.name, "files": [*names, "run.json"]}
        _fault_pause()
        atomic_write(out_dir / JOURNAL, lambda p: p.write_text(json.dumps(plan), encoding="utf-8"))
        _fault_pause()
    except OSError as exc:
        shutil.rmtree(stage, ignore_errors=True)
        why = "disk full" if exc.errno == errno.ENOSPC else (exc.strerror or str(exc))
        raise OutputWriteError(exc.errno or errno.EIO,
                               f"cannot write results to {out_dir} ({why}); previous results kept") from None
    recover(out_dir)


def read_seams(results_dir: Path) -> pl.DataFrame:
    return pl.read_parquet(results_dir / "seams.parquet")

"""The scan: files -> canonical samples -> seams -> estimates -> verdicts, one file at a time.

A file that cannot be read is recorded with its reason and the scan goes on; nothing about one
bad file can lose another file's results.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from ingest.discover import discover
from ingest.reader import IngestError, file_format, scan_samples
from ingest.seams import collect_seam_aggregates
from monitor.config import Config, safe_name
from monitor.estimate import estimate
from monitor.judge import judge

__all__ = ["FileRecord", "ScanResult", "scan_file", "scan_paths", "resolve_part", "file_digest"]


@dataclass
class FileRecord:
    source: str
    format: str
    size_bytes: int | None
    sha256: str | None
    rows: int | None
    seams: int | None
    status: str  # "read" or "skipped"
    error: str | None = None


@dataclass
class ScanResult:
    seams: pl.DataFrame  # judged seams, internal SI columns
    files: list[FileRecord]


def file_digest(path: Path) -> str:
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def resolve_part(file_name: str, cfg: Config, override: str | None) -> str | None:
    """The part a file belongs to when the export has no part column.

    The longest configured part name found in the file name wins (compared case-insensitively,
    with anything but letters, digits, dot, dash and underscore treated alike); else ``override``.
    """
    stem = safe_name(file_name).lower()
    hits = [name for name in cfg.parts if safe_name(name).lower() in stem]
    if hits:
        return max(hits, key=len)
    return override


def scan_file(
    path: Path, cfg: Config, part: str | None = None, label: str | None = None
) -> tuple[pl.DataFrame | None, FileRecord]:
    """Scan one export file. Never raises for bad input: the record carries the reason."""
    source = label or str(path)
    fmt = file_format(path) or "?"
    try:
        size = path.stat().st_size
    except OSError as exc:
        return None, FileRecord(source, fmt, None, None, None, None, "skipped", f"cannot be read ({exc.strerror})")
    try:
        digest = file_digest(path)
    except OSError as exc:
        return None, FileRecord(source, fmt, size, None, None, None, "skipped", f"cannot be read ({exc.strerror})")
    if size == 0:
        return None, FileRecord(source, fmt, 0, digest, 0, 0, "skipped", "file is empty")
    spec = cfg.cell.export
    try:
        samples = scan_samples(path, spec)
        # the streaming engine keeps memory bounded however long the file is
        agg = collect_seam_aggregates(samples.frame, cfg.cell.arc, labelled=samples.has_seam, engine="streaming")
        rows = int(samples.frame.select(pl.len()).collect(engine="streaming").item())
    except IngestError as exc:
        return None, FileRecord(source, fmt, size, digest, None, None, "skipped", str(exc))
    except (pl.exceptions.PolarsError, OSError, ValueError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        return None, FileRecord(source, fmt, size, digest, None, None, "skipped", f"cannot be read: {msg[:200]}")
    if rows == 0:
        return None, FileRecord(source, fmt, size, digest, 0, 0, "skipped", "no data rows (header only)")
    if agg.height == 0:
        return None, FileRecord(source, fmt, size, digest, rows, 0, "read", "no arc-on seams found")
    fallback = resolve_part(path.name, cfg, part)
    agg = agg.with_columns(pl.col("part").fill_null(pl.lit(fallback, dtype=pl.String)), pl.lit(source).alias("source"))
    judged = judge(estimate(agg, cfg), cfg.cell.arc)
    return judged, FileRecord(source, fmt, size, digest, rows, judged.height, "read", None)


def scan_paths(paths: list[Path], cfg: Config, part: str | None = None,
               progress: Callable[[Path], None] | None = None, jobs: int = 1,
               executor: str | None = None, cluster: str | None = None) -> ScanResult:
    """Scan every export under ``paths``; bad files are recorded, good ones kept.

    ``jobs`` > 1 scans files in that many worker processes; ``executor="dask"`` submits them to
    the Dask cluster at ``cluster`` (see :mod:`monitor.parallel`). Results are gathered in file
    order, so every way of running gives the same frame.
    """
    files, problems = discover(paths)
    records = [FileRecord(str(p), file_format(p) or "?", None, None, None, None, "skipped", why) for p, why in problems]
    frames: list[pl.DataFrame] = []
    if jobs > 1 or executor not in (None, "local"):
        from monitor.parallel import map_files

        results = map_files(files, cfg, part, jobs=jobs, executor=executor, cluster=cluster)
    else:
        results = ((f, scan_file(f, cfg, part)) for f in files)
    for f, (df, rec) in results:
        records.append(rec)
        if df is not None:
            frames.append(df)
        if progress is not None:
            progress(f)
    seams = pl.concat(frames, how="diagonal_relaxed") if frames else pl.DataFrame()
    return ScanResult(seams=seams, files=records)

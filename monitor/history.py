"""The results history: every scan's seam rows, kept across nights as a hive-partitioned Parquet dataset.

Layout (one folder a part, one a day, one file a scan)::

    results/part=<safe part name>/date=<YYYY-MM-DD>/<run checksum>.parquet

The run checksum is the SHA-256 of the sorted input checksums whose rows the file holds, so a
night's scan adds one small file per part and day, and the same rows always get the same name.

- **Append only.** A file already in the history is never rewritten; a new night only adds files.
- **Atomic.** Each file is written under ``results/.staging/`` and renamed into place, so a
  reader (or a scan killed half-way) sees a whole file or none.
- **No duplicates.** Rows are keyed by the SHA-256 of the input log they came from; re-scanning
  the same log adds nothing.
- **Lazy.** :func:`scan_history` is a ``pl.scan_parquet`` over the partitions with the part and
  date filters pushed down to the folder names, so years of a plant's history stay fast.

Partition names come from :func:`monitor.config.safe_name`: a part called ``../../etc`` is
written as ``part=etc`` inside the history, never outside it. The part's own name is kept in
the ``part`` column.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import UTC, date, datetime
from pathlib import Path

import polars as pl

from monitor.config import safe_name

__all__ = ["HistoryAppend", "append_history", "default_history_dir", "known_inputs", "partition_dir",
           "read_history", "scan_history"]

#: Columns the history adds to the published seam columns.
KEY_COLUMN = "input_sha256"
SCANNED_COLUMN = "scanned_at"
_PART_FILE = "part_name"  # the part's real name inside each file (the folder holds the safe name)
_GLOB = "part=*/date=*/*.parquet"
_UNKNOWN = "_unknown"
# files of different nights may differ a little (a column all-null one night is not stored)
_CAST = pl.ScanCastOptions(integer_cast=["upcast", "allow-float"], float_cast="upcast")


@dataclass(frozen=True)
class HistoryAppend:
    """What one append did: rows and files added, inputs skipped because already present."""

    root: Path
    rows_added: int
    files_written: tuple[Path, ...]
    inputs_already_present: tuple[str, ...]


def default_history_dir(config_dir: Path) -> Path:
    """``results/`` beside the config folder."""
    return Path(config_dir).resolve().parent / "results"


def partition_dir(root: Path, part: str | None, day: date) -> Path:
    """The folder of one part and day; always inside ``root`` whatever the part name."""
    name = safe_name(part) if part else _UNKNOWN
    d = Path(root) / f"part={name}" / f"date={day.isoformat()}"
    base = Path(root).resolve()
    if base not in d.resolve().parents:  # defence in depth: safe_name already forbids separators
        raise ValueError(f"partition {d} would fall outside the history {root}")
    return d


def _files(root: Path) -> list[Path]:
    return sorted(Path(root).glob(_GLOB))


def scan_history(root: Path, part: str | None = None, since: date | None = None,
                 until: date | None = None) -> pl.LazyFrame | None:
    """Lazy frame over the history, optionally one part and a date range; None if empty.

    The ``part`` column is the part's real name, ``date`` the partition's day (UTC of the seam
    start). Filters on the partition keys are pushed down, so other parts and days are not read.
    Files written by other versions with fewer or more columns are read together (missing
    columns become null).
    """
    root = Path(root)
    if not root.is_dir() or not _files(root):
        return None
    lf = pl.scan_parquet(root / _GLOB, hive_partitioning=True, hive_schema={"part": pl.String, "date": pl.Date},
                         missing_columns="insert", extra_columns="ignore", cast_options=_CAST)
    if part is not None:
        lf = lf.filter(pl.col("part") == (safe_name(part) if part else _UNKNOWN))
    if since is not None:
        lf = lf.filter(pl.col("date") >= since)
    if until is not None:
        lf = lf.filter(pl.col("date") <= until)
    lf = lf.drop("part").rename({_PART_FILE: "part"})
    if part is not None:
        lf = lf.filter(pl.col("part") == part)
    return lf


def read_history(root: Path, part: str | None = None, since: date | None = None) -> pl.DataFrame:
    """Collect :func:`scan_history`, ordered by part, start and seam; empty frame if none."""
    lf = scan_history(root, part=part, since=since)
    if lf is None:
        return pl.DataFrame()
    return lf.collect().sort(["part", "start", "seam"], nulls_last=True)


def known_inputs(root: Path) -> set[str]:
    """SHA-256 of every input log already in the history (reads only that one column)."""
    if not _files(root):
        return set()
    lf = pl.scan_parquet(Path(root) / _GLOB, hive_partitioning=False, missing_columns="insert",
                         extra_columns="ignore", cast_options=_CAST)
    return set(lf.select(pl.col(KEY_COLUMN).unique()).collect().get_column(KEY_COLUMN).drop_nulls().to_list())


def _write_atomic(df: pl.DataFrame, dest: Path, staging: Path) -> bool:
    """Write ``df`` to ``dest`` via a staging file and a rename; False if ``dest`` exists."""
    if dest.exists():
        return False
    staging.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix="_tmp", suffix=".parquet", dir=staging)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        df.write_parquet(tmp_path)
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        dest.parent.mkdir(parents=True, exist_ok=True)
        try:
            os.link(tmp_path, dest)  # fails if dest appeared meanwhile: never overwrite
        except FileExistsError:
            return False
        except OSError:
            os.replace(tmp_path, dest)
        return True
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def append_history(root: Path, seams_out: pl.DataFrame, inputs: Iterable[tuple[str, str | None]],
                   scanned_at: datetime | None = None) -> HistoryAppend:
    """Append published seam rows to the history, skipping inputs already in it.

    Parameters
    ----------
    root : Path
        History folder (created if missing).
    seams_out : polars.DataFrame
        Published seam table (``monitor.store.to_output``, plus any drift columns); its
        ``source`` column names the input file of each row.
    inputs : iterable of (source, sha256)
        Each read input and the SHA-256 of its bytes (the scan's file records). Rows whose
        source has no checksum are not stored (they cannot be de-duplicated).
    scanned_at : datetime, optional
        Time stamp stored with the rows (default now, UTC).
    """
    root = Path(root)
    sha_of = {}
    for source, sha in inputs:
        if sha and source not in sha_of:
            sha_of[source] = sha
    present = known_inputs(root)
    if seams_out.height == 0 or not sha_of:
        return HistoryAppend(root, 0, (), tuple(sorted(set(sha_of.values()) & present)))
    stamp = scanned_at or datetime.now(UTC)
    keys = pl.DataFrame({"source": list(sha_of), KEY_COLUMN: list(sha_of.values())})
    rows = seams_out.join(keys, on="source", how="inner")
    # the same bytes under two names in one scan: keep the first name only
    first_source = rows.group_by(KEY_COLUMN).agg(pl.col("source").min().alias("_keep"))
    rows = rows.join(first_source, on=KEY_COLUMN).filter(pl.col("source") == pl.col("_keep")).drop("_keep")
    skipped = sorted(set(rows.get_column(KEY_COLUMN).unique().to_list()) & present)
    rows = rows.filter(~pl.col(KEY_COLUMN).is_in(list(present)))
    start_day = pl.col("start").dt.convert_time_zone("UTC").dt.date() if rows.schema.get("start") == \
        pl.Datetime("us", "UTC") else pl.col("start").cast(pl.Datetime("us")).dt.date()
    rows = rows.with_columns(
        start_day.fill_null(stamp.date()).alias("_day"),
        pl.lit(stamp).dt.replace_time_zone(None).dt.replace_time_zone("UTC").alias(SCANNED_COLUMN),
    ).rename({"part": _PART_FILE})
    written: list[Path] = []
    staging = root / ".staging"
    rows = rows.drop([c for c, t in rows.schema.items() if t == pl.Null])  # no type to store
    for (part, day), grp in rows.group_by([_PART_FILE, "_day"], maintain_order=True):
        run_sum = hashlib.sha256("\n".join(sorted(grp.get_column(KEY_COLUMN).unique().to_list())).encode())
        dest = partition_dir(root, part, day) / f"{run_sum.hexdigest()[:32]}.parquet"
        if _write_atomic(grp.drop("_day"), dest, staging):
            written.append(dest)
    try:
        staging.rmdir()
    except OSError:
        pass
    n = sum(pl.scan_parquet(p).select(pl.len()).collect().item() for p in written)
    return HistoryAppend(root, int(n), tuple(written), tuple(skipped))

"""The scan: files -> canonical samples -> seams -> estimates -> verdicts, one file at a time.

A file that cannot be read is recorded with its reason and the scan goes on; nothing about one
bad file can lose another file's results.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from ingest.discover import discover
from ingest.onepass import FilePass, aggregate_file
from ingest.reader import IngestError, diagnose_csv, file_format, polars_reason, probe_file
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
    note: str | None = None  # repairs made and things worth knowing about a file that was read


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


# Alternative units a channel is commonly logged in, tried when a mean is implausible (SI factors).
_UNIT_GUESSES = {
    "current": (("A", 1.0), ("kA", 1e3), ("mA", 1e-3)),
    "voltage": (("V", 1.0), ("mV", 1e-3), ("dV", 0.1)),
    "wire_feed": (("m/min", 1 / 60), ("in/min", 0.0254 / 60), ("mm/s", 1e-3), ("m/s", 1.0), ("cm/min", 1e-2 / 60)),
}
_PLAUSIBLE = {"current": (30.0, 800.0), "voltage": (8.0, 50.0), "wire_feed": (0.5 / 60, 30.0 / 60)}


def units_hint(channel: str, value_si: float, scale: float, unit: str) -> str | None:
    """"kA logged but config says A?" when ``value_si`` is implausible and another unit fits.

    ``scale`` is the configured factor to SI, so ``value_si / scale`` is the number in the log.
    Ranges: common practice for GMAW, no source (the same as the judge's).
    """
    if value_si is None or scale == 0 or not value_si == value_si:
        return None
    lo, hi = _PLAUSIBLE[channel]
    logged = value_si / scale
    for name, factor in _UNIT_GUESSES[channel]:
        if name != unit and lo <= logged * factor <= hi:
            return f"{name} logged but config says {unit}? (units?)"
    return None


def _quality_notes(q: dict, spec, rows: int) -> tuple[str | None, list[str]]:
    """(reason to skip the file or None, notes) from the reader's one-row quality frame."""
    notes: list[str] = []
    chans = (("current", spec.current), ("voltage", spec.voltage), ("wire_feed", spec.wire_feed))
    for alias, ch in chans:
        if rows and q[f"{alias}_nulls"] == rows:
            return f'column {ch.column} ({alias.replace("_", " ")}) is empty on every row (sensor not connected?)', notes
    for alias, ch in chans:
        n = q[f"{alias}_absurd"]
        if n:
            notes.append(f"repaired: {n} impossible {alias.replace('_', ' ')} readings in {ch.column} "
                         "(sensor sentinel or saturation) treated as dropouts")
    if q.get("dup_t"):
        notes.append(f"{q['dup_t']} repeated timestamps (kept)")
    tz = q.get("tz_offsets")
    if tz and "," in tz:
        notes.append(f"repaired: timestamps carry mixed UTC offsets ({tz}); all converted to UTC")
    return None, notes


def _collect(path: Path, cfg: Config, encoding: str = "utf8") -> FilePass:
    """One streaming pass over the file: seam aggregates and the file-level checks together."""
    return aggregate_file(path, cfg.cell.export, cfg.cell.arc, encoding=encoding)


def _read(path: Path, cfg: Config, fmt: str) -> tuple[FilePass | None, str | None]:
    """(the file's one pass, None), or (None, the one-line reason it cannot be read)."""
    try:
        try:
            return _collect(path, cfg), None
        except (pl.exceptions.ComputeError, IngestError) as exc:
            if fmt != "csv" or "utf-8" not in str(exc).lower():
                raise
            # Repair: a latin-1 serial or comment must not cost the night's data.
            return _collect(path, cfg, encoding="utf8-lossy"), None
    except IngestError as exc:
        return None, str(exc)
    except (pl.exceptions.PolarsError, OSError, ValueError) as exc:
        return None, (diagnose_csv(path, cfg.cell.export) if fmt == "csv" else None) or polars_reason(exc)


def _stat_key(path: Path) -> tuple[int, int, int]:
    """Size, modification and status-change time [ns]. A write sets both times; the status-change
    time (POSIX ``ctime``) cannot be set back by a program, so a rewrite that restores the
    modification time still shows (on Windows ``st_ctime_ns`` is the creation time: a file
    replaced meanwhile shows)."""
    st = path.stat()
    return st.st_size, st.st_mtime_ns, st.st_ctime_ns


#: Files shorter than this [bytes] are checksummed again after the read (hashing such a file twice
#: costs well under a tenth of a second; a longer one relies on its stat key, see :func:`_stat_key`).
RECHECK_BELOW = 32 * 2**20

CHANGED = "file changed while being read (cell still writing?); skipped, will be read next run"


def scan_file(
    path: Path, cfg: Config, part: str | None = None, label: str | None = None
) -> tuple[pl.DataFrame | None, FileRecord]:
    """Scan one export file. Never raises for bad input: the record carries the one-line reason.

    Order of checks: stat, a cheap probe of size and head/tail bytes (a 10 GB sparse file or a cut
    Parquet file is refused without being read), checksum (a file of :data:`RECHECK_BELOW` or
    more: while it is read), the streaming pass, then stat and (a shorter file) checksum again: a
    file that changed meanwhile is skipped (its results would mix two versions).
    """
    source = label or str(path)
    fmt = file_format(path) or "?"

    def skip(reason: str, size=None, digest=None, rows=None, seams=None, note=None):
        return None, FileRecord(source, fmt, size, digest, rows, seams, "skipped", reason, note)

    try:
        before = _stat_key(path)
    except OSError as exc:
        return skip(f"cannot be read ({exc.strerror})")
    size = before[0]
    try:
        probe_file(path)
    except IngestError as exc:
        return skip(str(exc), size)
    except OSError as exc:
        return skip(f"cannot be read ({exc.strerror})", size)
    spec = cfg.cell.export
    # A file below RECHECK_BELOW is checksummed before the read and again after it, so the two
    # checksums bracket the read. A longer one is checked again by its stat key only (a second
    # checksum of a night's 150 MB Parquet file cost a tenth of its scan, of gigabytes of CSV more),
    # so nothing is lost by taking its one checksum in a thread while it is read (hashlib and
    # polars release the GIL): a 1.5 GB CSV costs about a second to hash, which then no longer
    # waits in front of the read.
    if size < RECHECK_BELOW:
        try:
            digest = file_digest(path)
        except OSError as exc:
            return skip(f"cannot be read ({exc.strerror})", size)
        got, failed = _read(path, cfg, fmt)
    else:
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="ctwd-digest") as pool:
            pending = pool.submit(file_digest, path)
            got, failed = _read(path, cfg, fmt)
            try:
                digest = pending.result()
            except OSError as exc:
                return skip(f"cannot be read ({exc.strerror})", size)
    if failed is not None:
        return skip(failed, size, digest)
    agg, quality, samples = got.aggregates, got.quality, got.samples
    rows = int(quality["rows"])
    try:
        changed = _stat_key(path) != before or (size < RECHECK_BELOW and file_digest(path) != digest)
    except OSError:
        changed = True
    if changed:
        return skip(CHANGED, size, digest)
    if rows == 0:
        return skip("no data rows (header only)", size, digest, 0, 0)
    bad, notes = _quality_notes(quality, spec, rows)
    notes = [*samples.notes, *notes]
    if bad is not None:
        return skip(bad, size, digest, rows, 0, "; ".join(notes) or None)
    if agg.height == 0:
        cmax = quality.get("current_max")
        hint = units_hint("current", cmax, spec.current.scale, spec.current.unit) if cmax is not None else None
        if hint:
            return skip(f"no arc-on samples: current peaks at {cmax / spec.current.scale:.3g} {spec.current.unit}, "
                        f"below the {cfg.cell.arc.min_current:g} A arc-on threshold — {hint}", size, digest, rows, 0)
        return None, FileRecord(source, fmt, size, digest, rows, 0, "read", "no arc-on seams found", "; ".join(notes) or None)
    labels = quality.get("seam_labels")
    if samples.has_seam and labels:
        missing = set(labels) - set(agg["seam_key"].to_list())
        if missing:
            shown = ", ".join(sorted({m.split("\u241f", 1)[1] for m in missing})[:8])
            notes.append(f"seam {shown}: no arc-on samples (current never above {cfg.cell.arc.min_current:g} A); not judged")
    fallback = resolve_part(path.name, cfg, part)
    agg = agg.with_columns(pl.col("part").fill_null(pl.lit(fallback, dtype=pl.String)), pl.lit(source).alias("source"))
    judged = judge(estimate(agg, cfg), cfg.cell.arc)
    judged = _explain_units(judged, spec)
    return judged, FileRecord(source, fmt, size, digest, rows, judged.height, "read", None, "; ".join(notes) or None)


def _explain_units(judged: pl.DataFrame, spec) -> pl.DataFrame:
    """Replace an "outside range; units?" reason by one that names the likely unit mix-up."""
    if judged.height == 0 or not judged["reason"].str.contains("units?", literal=True).any():
        return judged
    reasons = []
    for r in judged.select("status", "reason", "current_mean", "voltage_mean", "wire_feed_mean").iter_rows(named=True):
        text = r["reason"]
        if r["status"] == "invalid" and text and text.endswith("units?"):
            for alias, ch, label in (("current", spec.current, "current"), ("voltage", spec.voltage, "voltage"),
                                     ("wire_feed", spec.wire_feed, "WFS")):
                if text.startswith(f"mean {label}"):
                    v = r[f"{alias}_mean"]
                    hint = units_hint(alias, v, ch.scale, ch.unit)
                    if hint:
                        text = f"{label} mean {v / ch.scale:.3g} {ch.unit} — {hint}"
        reasons.append(text)
    return judged.with_columns(pl.Series("reason", reasons, dtype=pl.String))


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
    if seams.height:
        from monitor.baseline import apply_baseline  # ctwd_basis per seam; re-estimates [baseline] parts

        seams = apply_baseline(seams, cfg)
    return ScanResult(seams=seams, files=records)

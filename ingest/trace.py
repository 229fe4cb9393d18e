"""One seam's trace for plotting: the few rows around it, re-read lazily and decimated.

Only the page uses this, and only for flagged seams; estimates never see decimated data.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import polars as pl

from ingest.reader import IngestError, scan_samples
from ingest.schema import ArcSettings, ExportSpec

__all__ = ["SeamTrace", "read_seam_trace", "TRACE_CHANNELS"]

#: Channels of a trace, SI units (A, V, m/s).
TRACE_CHANNELS = ("current", "voltage", "wire_feed")


@dataclass(frozen=True)
class SeamTrace:
    """A decimated seam trace.

    ``t`` [s] is time since the seam's arc start (bucket centres, or the samples themselves when
    the seam is short). For every channel ``c`` in :data:`TRACE_CHANNELS` there are
    ``lo[c]``/``hi[c]`` (bucket minimum and maximum, NaN where the bucket had no valid reading)
    and ``mean[c]``. ``trimmed`` lists ``(t_from, t_to)`` windows [s] left out of the estimate
    (arc start and crater fill). ``n_samples`` is the number of raw rows read, ``decimated``
    whether buckets hold more than one sample.
    """

    t: np.ndarray
    lo: dict[str, np.ndarray]
    hi: dict[str, np.ndarray]
    mean: dict[str, np.ndarray]
    trimmed: tuple[tuple[float, float], ...]
    arc_time_s: float
    n_samples: int
    decimated: bool


def read_seam_trace(
    path: Path,
    spec: ExportSpec,
    arc: ArcSettings,
    seam: str | None,
    serial: str | None,
    start_s: float,
    arc_time_s: float,
    max_points: int = 400,
    margin_s: float = 0.5,
) -> SeamTrace | None:
    """Read one seam's samples from its export and decimate them for a plot.

    Parameters
    ----------
    path : Path
        The export file the seam came from (CSV or Parquet).
    spec : ExportSpec
        The export's column mapping.
    arc : ArcSettings
        Trims [s] used to mark the windows left out of the estimate.
    seam, serial : str or None
        The seam label and serial; used only when the export has those columns, to keep a
        neighbouring seam's samples out of the window.
    start_s : float
        Arc start of the seam [s since the file's first sample], as in the seam table.
    arc_time_s : float
        Arc-on duration of the seam [s].
    max_points : int
        Upper bound on buckets; each bucket keeps min, max and mean of every channel, so
        spikes and dropouts survive decimation.
    margin_s : float
        Context shown before arc start and after arc end [s].

    Returns
    -------
    SeamTrace or None
        None when no sample falls in the window.

    Raises
    ------
    IngestError
        The file is gone or cannot be read.
    """
    if not Path(path).is_file():
        raise IngestError(f"{path}: file not found")
    samples = scan_samples(Path(path), spec)
    return _trace_from(samples.frame, samples.has_seam, samples.has_serial, path, arc, seam, serial, start_s,
                       arc_time_s, max_points, margin_s)


def read_seam_traces(
    path: Path,
    spec: ExportSpec,
    arc: ArcSettings,
    seams: list[tuple[str | None, str | None, float, float]],
    max_points: int = 400,
    margin_s: float = 0.5,
) -> list[SeamTrace | None]:
    """:func:`read_seam_trace` for several seams of one file, reading the file once.

    ``seams`` holds ``(seam, serial, start_s, arc_time_s)`` per seam. One lazy pass keeps only
    the samples inside any of the windows (a small frame, whatever the file's length); each
    seam's trace is then decimated from that in memory.
    """
    if not Path(path).is_file():
        raise IngestError(f"{path}: file not found")
    if not seams:
        return []
    samples = scan_samples(Path(path), spec)
    t = pl.col("t")
    windows = [(float(start) - margin_s, float(start) + float(dur) + margin_s) for _s, _n, start, dur in seams]
    inside = pl.lit(False)
    for lo, hi in windows:
        inside = inside | t.is_between(lo, hi)
    try:
        pruned = _row_groups_read(samples, windows, inside)
        subset = (pruned if pruned is not None else samples.frame.filter(inside).collect()).lazy()
    except (pl.exceptions.PolarsError, OSError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise IngestError(f"{path}: cannot be read: {msg[:200]}") from None
    return [_trace_from(subset, samples.has_seam, samples.has_serial, path, arc, seam, serial, start, dur,
                        max_points, margin_s) for seam, serial, start, dur in seams]


def _row_groups_read(samples, windows: list[tuple[float, float]], inside: pl.Expr) -> pl.DataFrame | None:
    """The samples inside ``windows`` [s since the first sample] of a Parquet export, reading only
    the row groups whose time statistics overlap a window (a few row groups of a long night).

    None when that cannot be decided (not Parquet, no statistics, text time): then the caller
    reads the whole file once.
    """
    plan = samples.plan
    path = samples.path
    if plan is None or path is None or path.suffix.lower() not in (".parquet", ".pq"):
        return None
    import pyarrow.parquet as pq

    meta = pq.ParquetFile(path).metadata
    names = [meta.schema.column(j).path for j in range(meta.num_columns)]
    if plan.time_column not in names:
        return None
    j = names.index(plan.time_column)
    src_type = plan.source.collect_schema()[plan.time_column]
    if isinstance(src_type, pl.Datetime) and src_type.time_unit in ("ms", "us"):
        per_s = 1e3 if src_type.time_unit == "ms" else 1e6
    elif src_type.is_numeric():
        per_s = 1.0
    else:
        return None
    origin = plan.source.head(1).collect().select(plan.origin).item()
    if origin is None:
        return None
    keep: list[tuple[int, int]] = []
    off = 0
    for i in range(meta.num_row_groups):
        rg = meta.row_group(i)
        st = rg.column(j).statistics
        n = rg.num_rows
        if st is None or not st.has_min_max:
            return None
        lo_s, hi_s = (float(st.min_raw) - origin) / per_s, (float(st.max_raw) - origin) / per_s
        if any(lo_s <= b and a <= hi_s for a, b in windows):
            if keep and keep[-1][0] + keep[-1][1] == off:
                keep[-1] = (keep[-1][0], keep[-1][1] + n)
            else:
                keep.append((off, n))
        off += n
    frames = [plan.canonical(plan.source.slice(a, n).collect(), origin, *plan.text.values()).filter(inside)
              for a, n in keep]
    if not frames:
        return pl.DataFrame(schema=samples.frame.collect_schema())
    got = pl.concat(frames)
    for c in ("seam", "part", "serial"):
        if c not in got.columns:
            got = got.with_columns(pl.lit(None, dtype=pl.String).alias(c))
    return got


def _trace_from(frame: pl.LazyFrame, has_seam: bool, has_serial: bool, path: Path, arc: ArcSettings,
                seam: str | None, serial: str | None, start_s: float, arc_time_s: float, max_points: int,
                margin_s: float) -> SeamTrace | None:
    t0 = float(start_s)
    t1 = t0 + float(arc_time_s)
    lf = frame.filter(pl.col("t").is_between(t0 - margin_s, t1 + margin_s))
    samples_has_seam, samples_has_serial = has_seam, has_serial
    if samples_has_seam and seam is not None:
        lf = lf.filter(pl.col("seam").is_null() | (pl.col("seam") == seam))
    if samples_has_serial and serial is not None:
        lf = lf.filter(pl.col("serial").is_null() | (pl.col("serial") == serial))
    lf = lf.select((pl.col("t") - t0).alias("t"), *TRACE_CHANNELS)
    span = (t1 - t0) + 2 * margin_s
    width = span / max(int(max_points), 1)

    def ok(c: str) -> pl.Expr:
        v = pl.col(c)
        return pl.when(v.is_finite()).then(v)

    bucket = ((pl.col("t") + margin_s) / width).floor().cast(pl.Int64).alias("_b")
    dec = (
        lf.with_columns(bucket)
        .group_by("_b")
        .agg(
            pl.col("t").mean().alias("t"),
            pl.len().alias("_n"),
            *[ok(c).min().alias(f"{c}_lo") for c in TRACE_CHANNELS],
            *[ok(c).max().alias(f"{c}_hi") for c in TRACE_CHANNELS],
            *[ok(c).mean().alias(f"{c}_mean") for c in TRACE_CHANNELS],
        )
        .sort("_b")
    )
    try:
        df = dec.collect()
    except (pl.exceptions.PolarsError, OSError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise IngestError(f"{path}: cannot be read: {msg[:200]}") from None
    if df.height == 0:
        return None

    def arr(name: str) -> np.ndarray:
        return df.get_column(name).cast(pl.Float64).fill_null(float("nan")).to_numpy()

    n = int(df.get_column("_n").sum())
    trimmed = []
    if arc.trim_start > 0:
        trimmed.append((0.0, min(arc.trim_start, arc_time_s)))
    if arc.trim_end > 0:
        trimmed.append((max(arc_time_s - arc.trim_end, 0.0), float(arc_time_s)))
    return SeamTrace(
        t=arr("t"),
        lo={c: arr(f"{c}_lo") for c in TRACE_CHANNELS},
        hi={c: arr(f"{c}_hi") for c in TRACE_CHANNELS},
        mean={c: arr(f"{c}_mean") for c in TRACE_CHANNELS},
        trimmed=tuple(trimmed),
        arc_time_s=float(arc_time_s),
        n_samples=n,
        decimated=n > df.height,
    )

"""One streaming pass over an export: per-seam aggregates and the file-level checks together.

The file is read once, in batches of rows in file order (polars' streaming reader, so memory is
bounded by the batch size and the longest seam, not by the file's length). Each batch becomes
canonical samples; arc-on samples form *runs* (a labelled seam's samples, or an arc-on stretch of
an unlabelled export), which are contiguous in a well-formed export. The last run of a batch may
continue in the next one, so its rows are carried over; every other run is complete and is
reduced to one row right away:

1. its first and last time (one group-by on the run number, which is sorted, so polars groups
   by slices), broadcast back by position (a gather, no join);
2. the trim window as a mask, every channel masked by its own validity;
3. one group-by on the run number for all sums, counts and extremes.

Every mean of a run is computed over that run's rows in one contiguous slice, in file order,
whatever the number of threads or worker processes: two scans of the same file give the same
bits (tested).

A labelled seam whose label recurs later in the file (a re-strike after another seam) has more
than one run; such a file is recomputed with :func:`ingest.seams.seam_aggregates`, whose trim
window spans the whole seam.
"""

from __future__ import annotations

import math
import queue
import threading
from collections.abc import Callable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import polars as pl

from ingest.reader import CHECK_COMBINE, HARD_LIMITS, IngestError, Samples, file_format, scan_samples
from ingest.schema import ArcSettings
from ingest.seams import AGGREGATE_COLUMNS, arc_state, seam_aggregates

__all__ = ["FilePass", "aggregate_file", "aggregate_samples", "parquet_windows", "CHUNK_ROWS", "CSV_CHUNK_ROWS"]

#: Rows per batch of a Parquet file (whole row groups, at least this many). About 100 MB of
#: canonical columns; large enough that per-batch overhead is negligible, small enough that a file
#: of any length scans in bounded memory.
CHUNK_ROWS = 1_000_000

#: Rows per batch of a text export. A CSV batch holds its text as well as its numbers: at a
#: quarter of :data:`CHUNK_ROWS` the benchmark night's peak memory was 888 MiB instead of 1132 MiB,
#: in no more time (measured, see DEVELOPERS.md).
CSV_CHUNK_ROWS = 250_000

_KEY = "\u241f"


@dataclass(frozen=True)
class FilePass:
    """What one pass over a file gives."""

    aggregates: pl.DataFrame  # one row a seam, columns of ingest.seams.AGGREGATE_COLUMNS (+ tip_change)
    quality: dict  # file-level checks, keys of ingest.reader.CHECK_COMBINE
    samples: Samples


#: Longest string an Arrow string view holds in itself; a longer one is held as its length, its
#: first 4 bytes and where its bytes are, so comparing two such values reads their bytes.
_INLINE_BYTES = 12


def _changes(s: pl.Series, before: str | None, first_batch: bool, views: bool = True) -> np.ndarray:
    """Rows (positions in the batch, rising, int64) where text column ``s`` (a batch's) differs
    from the row before; the first row is compared with ``before`` (the previous batch's last
    value), or starts a change in the first batch. A null equals a null (polars' ``ne_missing``).
    ``views=False`` skips the shortcut below (a text export, whose rows never share their bytes).

    Long values (part names, say) are compared through their string views first: a Parquet
    column decoded from a dictionary points every row of a value at the same bytes, so two rows
    whose 16-byte views are identical hold the same string, and only the few rows whose views
    differ from the row before are compared as strings (exact: every change is among them). A
    column whose rows all have bytes of their own (a CSV batch) is compared as strings whole.
    Positions, not a mask: a batch has a few changes a seam, and everything that uses them
    (run numbers, the values that start) picks those rows. Measured in DEVELOPERS.md.
    """
    n = len(s)
    head = np.array([0] if first_batch or s[0] != before else [], dtype=np.int64)  # None for null
    if n == 1:
        return head
    candidates = None
    if views and s.n_chunks() == 1:
        arr = s.to_arrow(compat_level=pl.CompatLevel.newest())
        # each row's 16-byte view as two 64-bit words
        words = np.frombuffer(arr.buffers()[1], dtype=np.uint64)[2 * arr.offset: 2 * (arr.offset + n)]
        if int(words[0]) & 0xFFFFFFFF > _INLINE_BYTES:  # little-endian: the length, then its prefix
            ne = words[2:] != words[:-2]
            differs = ne[0::2] | ne[1::2]  # row j + 1 against row j
            if s.null_count():
                valid = s.is_not_null().to_numpy()
                differs |= valid[1:] != valid[:-1]
            candidates = np.flatnonzero(differs) + 1
            if len(candidates) > n // 8:
                candidates = None
    if candidates is None:
        rest = s.slice(1).ne_missing(s.slice(0, n - 1)).arg_true().to_numpy().astype(np.int64) + 1
    elif len(candidates):
        at = pl.Series(candidates, dtype=pl.UInt32)
        rest = candidates[s.gather(at).ne_missing(s.gather(at - 1)).to_numpy()]
    else:
        rest = candidates
    return np.concatenate([head, rest]) if len(head) else rest


def _run_keys(starts: np.ndarray, n: int, base: int) -> pl.Series:
    """Run number of each of a batch's ``n`` rows: ``base - 1`` plus the count of run starts
    (positions ``starts``, rising) at or before it. Built from the few start positions (the
    cumulative sum of a boolean column over a batch costs ten times as much)."""
    lens = np.diff(np.concatenate(([0], starts, [n])))
    return pl.Series("_key", np.repeat(np.arange(base - 1, base + len(starts), dtype=np.int64), lens))


def _own(s: pl.Series) -> pl.Series:
    """A copy of a few strings picked out of a batch. A filtered string column still points into
    the batch's whole text buffers (a CSV batch holds one per column); kept for the file's length,
    those would grow memory with the file. O(values kept), a handful a seam."""
    return pl.Series(s.name, s.to_list(), dtype=pl.String)


class _Text:
    """Where each value of one text column starts along the file (small: one row a change)."""

    def __init__(self) -> None:
        self.pos: list[pl.Series] = []
        self.val: list[pl.Series] = []

    def add(self, pos: pl.Series, val: pl.Series) -> None:
        self.pos.append(pos)
        self.val.append(_own(val))

    def first_non_null(self, p0: np.ndarray, p1: np.ndarray) -> pl.Series:
        """Per run [p0, p1] (global row positions): the first non-null value that starts inside
        it, or the value running at p0."""
        if not self.pos:
            return pl.Series([None] * len(p0), dtype=pl.String)
        starts = pl.concat(self.pos).to_numpy()
        vals = pl.concat(self.val)
        n = len(starts)
        idx = np.where(vals.is_not_null().to_numpy(), np.arange(n), n)
        nxt = np.minimum.accumulate(idx[::-1])[::-1]  # next non-null stretch at or after j
        j = np.searchsorted(starts, p0, side="right") - 1
        k = nxt[np.clip(j, 0, n - 1)]
        hit = (j >= 0) & (k < n) & (starts[np.minimum(k, n - 1)] <= p1)
        got = vals.gather(pl.Series(np.minimum(k, n - 1)))
        return pl.select(pl.when(pl.Series(hit)).then(got)).to_series()


def _masked_means() -> list[pl.Expr]:
    """Per-seam means of the masked channel columns (null where a reading is not kept or not
    valid): ``_i`` current, ``_v`` voltage, ``_w`` WFS, ``_s`` travel speed, and V·I (null unless
    both are kept); ⟨I²⟩ in float64 over the same current samples."""
    i = pl.col("_i")
    return [
        i.mean().alias("current_mean"),
        (i * i).mean().alias("current_sq_mean"),
        pl.col("_v").mean().alias("voltage_mean"),
        (i * pl.col("_v")).mean().alias("power_mean"),
        pl.col("_w").mean().alias("wire_feed_mean"),
        pl.col("_s").mean().alias("travel_speed_mean"),
    ]


def _valid_kept(col: str) -> pl.Expr:
    """``col`` where its reading is valid (:func:`ingest.seams.valid_reading`), else null. A
    canonical channel with plausibility limits is null or finite (ingest.reader.HARD_LIMITS), so
    "valid" is just > 0 there (a null compares null: not kept). Any other is tested as
    0 < x < inf: polars orders NaN above every number, so a NaN fails the second test, and two
    comparisons cost less than ``is_finite``."""
    c = pl.col(col)
    return pl.when((c > 0) if col in HARD_LIMITS else (c > 0) & (c < math.inf)).then(c)


def _reduce_sorted_runs(df: pl.DataFrame, tn: np.ndarray, d: np.ndarray, arc: ArcSettings,
                        has_marker: bool) -> dict[str, np.ndarray]:
    """:func:`_reduce_runs` where time never goes backwards in ``df``: ``tn`` its ``t``, ``d`` the
    differences ``tn[j + 1] - tn[j]`` (one longer, the last unused).

    A run's first and last rows then hold its first and last time, and its kept samples (inside
    the trim window) are one contiguous block, found by binary search. Everything but the means
    comes from those positions (numpy, exact: first/last values, extremes of differences, counts);
    the means are one group-by over the run's three blocks (before, inside, after the window),
    which polars groups by slices. Same values as the general form, floats to rounding.

    Returns the runs' columns as arrays (those of the general form, in its order; NaN for null),
    made one frame for the whole file by :func:`_runs_frame`: a frame of a few thousand rows a
    batch cost about a third of this function's time to build and reshape.
    """
    key = df.get_column("_key").to_numpy()
    n = len(key)
    # run keys increase along the file: each run's rows found by binary search, not by a pass
    bounds = np.searchsorted(key, np.arange(key[0], key[-1] + 2))
    held = bounds[1:] > bounds[:-1]  # keys of runs that kept no row are skipped
    first, end = bounds[:-1][held], bounds[1:][held]  # each run's first row, and one past its last
    start_s, t1 = tn[first], tn[end - 1]
    # the window [start + trim_start, end - trim_end], as a block of rows of each run
    a = np.clip(np.searchsorted(tn, start_s + arc.trim_start_edge, side="left"), first, end)
    b = np.clip(np.searchsorted(tn, t1 - arc.trim_end_edge, side="right"), a, end)
    runs = len(first)
    blocks = np.repeat(np.arange(3 * runs, dtype=np.int32), np.stack([a - first, b - a, end - b], axis=1).ravel())
    chans = df.select(pl.Series("_g", blocks).set_sorted(),
                      _valid_kept("current").alias("_i"), _valid_kept("voltage").alias("_v"),
                      _valid_kept("wire_feed").alias("_w"), _valid_kept("travel_speed").alias("_s"))
    means = (chans.group_by("_g", maintain_order=True)
             .agg(*_masked_means(), *(pl.col(c).count().alias(f"_n{c}") for c in ("_i", "_v", "_w"))))
    n_kept = b - a
    # steps between kept samples: t[j] - t[j-1] for j in (a, b), i.e. the differences d[a:b-1]
    has_step = n_kept >= 2
    if has_step.any():
        idx = np.stack([a[has_step], b[has_step] - 1], axis=1).ravel()
        gap_max = np.full(runs, np.nan)
        gap_min = np.full(runs, np.nan)
        gap_max[has_step] = np.maximum.reduceat(d, idx)[::2]
        gap_min[has_step] = np.minimum.reduceat(d, idx)[::2]
    else:
        gap_max = gap_min = np.full(runs, np.nan)
    nonempty = n_kept > 0
    last_kept = np.maximum(b - 1, a)
    pos = df.get_column("_pos").to_numpy()
    abs_t = df.get_column("_abs").to_numpy()
    cols = {
        "_key": key[first], "start_s": start_s, "_t1": t1,
        "_p0": pos[first], "_p1": pos[end - 1],
        # integer stored times (timestamps) rise with t, so a run's first is its least; float
        # seconds might not, to rounding, so they are searched
        "_abs_min": abs_t[first] if abs_t.dtype.kind in "iu" else np.minimum.reduceat(abs_t, first),
        "_tk_min": np.where(nonempty, tn[np.minimum(a, n - 1)], np.nan),
        "_tk_max": np.where(nonempty, tn[np.minimum(last_kept, n - 1)], np.nan),
        "n_samples": n_kept.astype(np.uint32),
        "_n_all": (end - first).astype(np.uint32),
    }
    # the means' rows are the runs that kept samples, in run order: put in place by position (a
    # run without kept samples has null means and zero counts; a mean is never NaN, as only
    # finite readings are kept)
    g = means.get_column("_g").to_numpy()
    inside = g % 3 == 1  # the window's block of each run
    r = g[inside] // 3
    for c in means.columns[1:]:
        count = c.startswith("_n")
        full = np.zeros(runs, dtype=np.uint32) if count else np.full(runs, np.nan)
        full[r] = means.get_column(c).to_numpy()[inside]
        cols[c] = full
    for c, name in (("_i", "current"), ("_v", "voltage"), ("_w", "wire_feed")):
        cols[f"{name}_bad"] = cols["n_samples"] - cols.pop(f"_n{c}")
    cols["max_gap_s"], cols["min_step_s"] = gap_max, gap_min
    if has_marker:
        marks = df.get_column("tip_change").to_numpy()
        cols["tip_change"] = np.logical_or.reduceat(marks, first)
    live = df.get_column("_live").gather(first).to_numpy()
    if not live.all():
        cols = {k: v[live] for k, v in cols.items()}
    return cols


def _runs_frame(parts: list[dict[str, np.ndarray]]) -> pl.DataFrame:
    """One frame of the rows of :func:`_reduce_sorted_runs` (``parts`` in file order): NaN stands
    for null in its float columns but ``start_s`` and ``_t1`` (never missing), counts are UInt32."""
    cols = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    return pl.DataFrame([pl.Series(k, v, nan_to_null=k in _NULLABLE, dtype=_RUN_DTYPES.get(k))
                         for k, v in cols.items()])


#: Columns of a reduced run that are null where they do not apply (NaN in the arrays)
_NULLABLE = frozenset({"_tk_min", "_tk_max", "current_mean", "current_sq_mean", "voltage_mean", "power_mean",
                       "wire_feed_mean", "travel_speed_mean", "max_gap_s", "min_step_s"})
_RUN_DTYPES = {k: pl.UInt32 for k in ("n_samples", "_n_all", "current_bad", "voltage_bad", "wire_feed_bad")}


def _flips(x: pl.Series) -> np.ndarray:
    """Rows (past the first, rising, int64) where boolean column ``x`` differs from the row before."""
    n = len(x)
    return (x.slice(1) != x.slice(0, n - 1)).arg_true().to_numpy().astype(np.int64) + 1 if n > 1 else np.empty(0, np.int64)


def _whole_runs(in_run: pl.Series, flips: np.ndarray, new: np.ndarray, first_key: int,
                carry: pl.DataFrame | None) -> bool:
    """True when every run of a batch is arc on on all its rows or on none (a well-formed
    export), so the batch need not be filtered: each run is kept or dropped as a whole after its
    reduction (``_live``). ``flips`` holds the rows past the first where ``in_run`` changes
    (:func:`_flips`), ``new`` the rows that start a run (both rising), ``first_key`` is the first
    row's run: a first row that continues the carried run must be arc on (the carry holds arc-on
    rows only), one that continues a dropped run must be arc off. Otherwise (a seam label held
    over arc-off rows, say) the batch is filtered to its arc-on rows."""
    # past the first row, the arc state changes only where a run starts
    if len(flips) and not np.isin(flips, new).all():
        return False
    if len(new) and new[0] == 0:
        return True
    carried = carry is not None and carry.height > 0 and int(carry.get_column("_key")[-1]) == first_key
    return bool(in_run[0]) == carried


def _reduce_runs(df: pl.DataFrame, arc: ArcSettings, has_marker: bool) -> dict[str, np.ndarray] | pl.DataFrame:
    """One row a run of ``df`` (complete runs, ``_key`` sorted, in file order) that is arc on
    (``_live``); a batch kept whole also holds runs out of arc, dropped here. Arrays (time never
    goes backwards, :func:`_reduce_sorted_runs`) or a frame (:func:`_reduce_any_runs`); see
    :func:`_stack`."""
    tt = df.get_column("t")
    if tt.null_count() == 0:
        tn = tt.to_numpy()
        d = np.empty(len(tn))
        np.subtract(tn[1:], tn[:-1], out=d[:-1])
        d[-1:] = 0.0
        # time never goes backwards (a NaN compares false)
        if bool(np.all(d >= 0)):
            return _reduce_sorted_runs(df, tn, d, arc, has_marker)
    return _reduce_any_runs(df, arc, has_marker)


def _reduce_any_runs(df: pl.DataFrame, arc: ArcSettings, has_marker: bool) -> pl.DataFrame:
    """:func:`_reduce_runs` for any order of time (the general form, all in polars)."""
    t = pl.col("t")
    tt = df.get_column("t")
    # time goes backwards somewhere (the seam is reported as such downstream): the bounds are
    # extremes, and a step is measured from the previous kept sample of the same run
    df = df.with_columns(pl.col("_key").set_sorted())
    # group by the sorted run key: polars groups by slices
    got = df.group_by("_key", maintain_order=True).agg(t.min().alias("start_s"), t.max().alias("_t1"),
                                                       pl.len().alias("_len"))
    lens = got.get_column("_len").to_numpy()
    bounds = got.select("_key", "start_s", "_t1")
    # the bounds broadcast back by repetition
    t0 = pl.Series(np.repeat(bounds.get_column("start_s").to_numpy() + arc.trim_start_edge, lens))
    t1 = pl.Series(np.repeat(bounds.get_column("_t1").to_numpy() - arc.trim_end_edge, lens))
    df = df.with_columns(((tt >= t0) & (tt <= t1)).alias("_keep"))
    kk = pl.col("_keep")
    sid = pl.col("_key")
    tk = pl.when(kk).then(t)
    prev_id = pl.when(kk).then(sid).shift(1).forward_fill()
    step = pl.when(kk & (prev_id == sid)).then(t - tk.shift(1).forward_fill())

    def kept(col: str) -> pl.Expr:
        return pl.when(kk).then(_valid_kept(col))

    df = df.select(
        "_key", "_pos", "_abs", "_live", *(["tip_change"] if has_marker else []),
        tk.alias("_tk"), step.alias("_step"),
        kept("current").alias("_i"), kept("voltage").alias("_v"),
        kept("wire_feed").alias("_w"), kept("travel_speed").alias("_s"),
    )
    i, tk = pl.col("_i"), pl.col("_tk")
    n_kept = tk.count()  # kept samples; a kept reading that is not valid is a bad one
    out = df.group_by("_key", maintain_order=True).agg(
        pl.col("_pos").first().alias("_p0"),
        pl.col("_pos").last().alias("_p1"),
        pl.col("_abs").min().alias("_abs_min"),
        tk.min().alias("_tk_min"),
        tk.max().alias("_tk_max"),
        n_kept.alias("n_samples"),
        pl.len().alias("_n_all"),
        *_masked_means(),
        (n_kept - i.count()).alias("current_bad"),
        (n_kept - pl.col("_v").count()).alias("voltage_bad"),
        (n_kept - pl.col("_w").count()).alias("wire_feed_bad"),
        pl.col("_step").max().alias("max_gap_s"),
        pl.col("_step").min().alias("min_step_s"),
        *([pl.col("tip_change").any()] if has_marker else []),
        pl.col("_live").first(),
    )
    got = pl.concat([bounds, out.drop("_key")], how="horizontal")
    return got.filter(pl.col("_live")).drop("_live")


def _rows(part: dict[str, np.ndarray] | pl.DataFrame) -> int:
    return part.height if isinstance(part, pl.DataFrame) else len(part["_key"])


def _stack(parts: list[dict[str, np.ndarray] | pl.DataFrame]) -> pl.DataFrame:
    """The reduced runs of every batch (:func:`_reduce_runs`), in file order, as one frame."""
    frames: list[pl.DataFrame] = []
    arrays: list[dict[str, np.ndarray]] = []
    for part in parts:
        if isinstance(part, pl.DataFrame):
            if arrays:
                frames.append(_runs_frame(arrays))
                arrays = []
            frames.append(part)
        else:
            arrays.append(part)
    if arrays:
        frames.append(_runs_frame(arrays))
    return frames[0] if len(frames) == 1 else pl.concat(frames, how="vertical_relaxed")


def _finish(parts: list[dict[str, np.ndarray] | pl.DataFrame], text: dict[str, _Text], labels: pl.DataFrame | None,
            arc: ArcSettings, labelled: bool, has_marker: bool, to_ts) -> pl.DataFrame:
    extra = ["tip_change"] if has_marker else []
    agg = _stack(parts)
    agg = agg.with_columns(to_ts(pl.col("_abs_min")).alias("start"))
    p0, p1 = agg.get_column("_p0").to_numpy(), agg.get_column("_p1").to_numpy()
    cols = {"part": text["part"].first_non_null(p0, p1) if "part" in text else None}
    if labelled:
        agg = agg.join(labels, on="_key", how="left", maintain_order="left")
    else:
        cols["serial"] = text["serial"].first_non_null(p0, p1) if "serial" in text else None
    agg = agg.with_columns(
        *(pl.Series(k, v, dtype=pl.String) if v is not None else pl.lit(None, dtype=pl.String).alias(k)
          for k, v in cols.items()),
        (pl.col("_t1") - pl.col("start_s")).alias("arc_time_s"),
        (pl.col("_tk_max") - pl.col("_tk_min")).alias("used_time_s"),
        (pl.col("_n_all") - pl.col("n_samples")).alias("n_trimmed"),
    )
    if labelled:
        agg = agg.with_columns((pl.col("serial").fill_null("") + _KEY + pl.col("seam")).alias("seam_key"))
    else:
        agg = agg.with_columns(pl.col("_key").cast(pl.String).alias("seam_key"))
        agg = agg.filter(pl.col("arc_time_s") >= arc.min_duration_edge)
    agg = agg.sort("start_s", maintain_order=True)
    if not labelled:
        number = pl.int_range(1, pl.len() + 1).over(pl.col("serial").fill_null(""))
        agg = agg.with_columns(("S" + number.cast(pl.String)).alias("seam"))
    return agg.select(*AGGREGATE_COLUMNS, *extra)


def _combine(acc: dict, got: dict) -> None:
    for name, value in got.items():
        how = CHECK_COMBINE[name]
        if name not in acc:
            acc[name] = set(value or ()) if how == "union" else value
        elif how == "sum":
            acc[name] += value or 0
        elif how == "max":
            if value is not None and (acc[name] is None or value > acc[name]):
                acc[name] = value
        else:
            acc[name].update(value or ())


def _batches(samples: Samples, chunk_rows: int | None) -> Iterator[pl.DataFrame]:
    """The export's rows in file order, a bounded number at a time, read ahead of the consumer.

    Parquet: windows of whole row groups (at least ``chunk_rows`` rows each, default
    :data:`CHUNK_ROWS`, or one row group).
    polars decodes one window on one thread, so two windows are decoded at once, in two threads
    (polars releases the GIL), and handed over in file order; at most :data:`READ_AHEAD` windows
    are read ahead, so memory does not grow with the file whatever the consumer's speed. CSV:
    polars' streaming reader in chunks of ``chunk_rows``, one batch read ahead (parsing text is
    slower than the aggregation that consumes it, so little is buffered); ``chunk_rows`` defaults
    to :data:`CSV_CHUNK_ROWS` there.
    """
    plan = samples.plan
    path = samples.path
    if path is not None and file_format(path) == "parquet":
        source = plan.source
        yield from _read_ahead([lambda w=w: source.slice(*w).collect() for w in parquet_windows(path, chunk_rows)])
        return
    chunk_rows = chunk_rows or CSV_CHUNK_ROWS
    yield from _prefetch(plan.source.collect_batches(chunk_size=chunk_rows, maintain_order=True))


def parquet_windows(path: Path, chunk_rows: int | None = None) -> list[tuple[int, int]]:
    """(first row, rows) of each window of whole row groups that a Parquet file is read in: at
    least ``chunk_rows`` rows (default :data:`CHUNK_ROWS`) or one row group each, in file order."""
    import pyarrow.parquet as pq

    chunk_rows = chunk_rows or CHUNK_ROWS
    meta = pq.ParquetFile(path).metadata
    windows: list[tuple[int, int]] = []
    off = n = 0
    for i in range(meta.num_row_groups):
        n += meta.row_group(i).num_rows
        if n >= chunk_rows or i == meta.num_row_groups - 1:
            if n:
                windows.append((off, n))
            off, n = off + n, 0
    return windows


#: Parquet windows decoded at once, and read ahead of the one being aggregated.
READ_AHEAD = 2


def _read_ahead(loads: list[Callable[[], pl.DataFrame]], workers: int = READ_AHEAD) -> Iterator[pl.DataFrame]:
    """``load()`` of each of ``loads`` in order, ``workers`` of them running at once in threads; an
    error is raised here, in order. Loads not started when the consumer stops are cancelled."""
    pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="ctwd-read")
    pending: list[Future] = []
    todo = iter(loads)
    try:
        for load in todo:
            pending.append(pool.submit(load))
            if len(pending) >= workers:
                break
        while pending:
            got = pending.pop(0).result()
            for load in todo:
                pending.append(pool.submit(load))
                break
            yield got
            del got
    finally:
        for f in pending:
            f.cancel()
        pool.shutdown(wait=False, cancel_futures=True)


def _prefetch(batches: Iterator[pl.DataFrame], depth: int = 1) -> Iterator[pl.DataFrame]:
    """Read the next batch in a background thread while this one is aggregated (at most ``depth``
    batches wait); an error while reading is raised here, in order."""
    q: queue.Queue = queue.Queue(maxsize=depth)
    done = object()
    stop = threading.Event()

    def work() -> None:
        try:
            for b in batches:
                while not stop.is_set():
                    try:
                        q.put(b, timeout=0.1)
                        break
                    except queue.Full:
                        continue
                if stop.is_set():
                    return
            q.put(done)
        except BaseException as exc:  # handed to the consumer, raised there
            q.put(exc)

    th = threading.Thread(target=work, name="ctwd-read", daemon=True)
    th.start()
    try:
        while True:
            item = q.get()
            if item is done:
                return
            if isinstance(item, BaseException):
                raise item
            yield item
    finally:
        stop.set()
        while th.is_alive():
            try:
                q.get_nowait()
            except queue.Empty:
                th.join(0.05)


def aggregate_samples(samples: Samples, arc: ArcSettings, chunk_rows: int | None = None) -> FilePass:
    """Per-seam aggregates and file-level checks of ``samples`` in one streaming pass.

    Parameters
    ----------
    samples : Samples
        From :func:`ingest.reader.scan_samples`; its ``plan`` is streamed.
    arc : ArcSettings
        Arc-on threshold [A], trims [s], minimum duration of an unlabelled seam [s].
    chunk_rows : int, optional
        Rows per batch, default :data:`CHUNK_ROWS` for Parquet and :data:`CSV_CHUNK_ROWS` for text
        (memory, not the seams found, depends on it).

    Returns
    -------
    FilePass
        ``aggregates`` has the columns and meaning documented in
        :func:`ingest.seams.seam_aggregates`; ``quality`` the checks of
        :data:`ingest.reader.CHECK_COMBINE` (``tz_offsets`` a ", "-joined string, ``seam_labels`` a
        sorted list).
    """
    plan = samples.plan
    if plan is None:
        raise ValueError("samples have no batch plan")
    labelled = samples.has_seam
    has_marker = "tip_change" in samples.frame.collect_schema().names()
    names = list(plan.text)
    text = {k: _Text() for k in names}
    label_rows: list[pl.DataFrame] = []
    # Complete runs are reduced in a second thread while this one reads on and numbers the next
    # batch's runs (polars releases the GIL); results are kept in file order.
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ctwd-reduce")
    parts: list[Future] = []
    quality: dict = {}
    carry: pl.DataFrame | None = None
    last_arc = False
    last_text: dict[str, str | None] = {}
    origin, have_origin = None, False
    prev_time = None
    offset = 0  # rows before this batch
    key_base = 0  # run keys used so far
    time_col = plan.time_column
    # a Parquet column decoded from a dictionary shares each value's bytes among its rows (_changes)
    shared = samples.path is not None and file_format(samples.path) == "parquet"
    # channel counts from the columns themselves when every channel is numeric in the export
    fast_checks = bool(plan.channels) and all(numeric for _a, _c, numeric in plan.channels)
    try:
        for raw in _batches(samples, chunk_rows):
            n = raw.height
            if n == 0:
                continue
            if not have_origin:
                origin, have_origin = raw.head(1).select(plan.origin).item(), True  # parse one value, not the batch
            got = raw.select(*(plan.light_checks if fast_checks else plan.checks)).row(0, named=True)
            got["tz_offsets"] = plan.tz_offsets(raw) if plan.tz_offsets is not None else []
            first_time = raw.get_column(time_col)[0]
            if prev_time is not None and first_time is not None and first_time == prev_time:
                got["dup_t"] = (got.get("dup_t") or 0) + 1
            prev_time = raw.get_column(time_col)[-1]
            txt = raw.select(*plan.text.values())
            chg = {k: _changes(txt.get_column(k), last_text.get(k), offset == 0, shared) for k in names}
            pos = pl.int_range(offset, offset + n, dtype=pl.Int64).alias("_pos")
            b = plan.canonical(raw, origin, pos)
            if fast_checks:
                # counts from the columns themselves: a canonical channel is null where the export's is
                # null, NaN, or outside the plausibility limits (ingest.reader.HARD_LIMITS)
                # (null counts are known without a pass; NaNs are counted only when some reading
                # became null, so a clean batch costs one pass, the current's maximum)
                for alias, col, _numeric in plan.channels:
                    x, c = raw.get_column(col), b.get_column(alias)
                    lost = c.null_count() - x.null_count()  # NaN or outside the limits
                    nan = int(x.is_nan().sum()) if lost and x.dtype.is_float() else 0
                    got[f"{alias}_nulls"] = x.null_count()
                    got[f"{alias}_absurd"] = lost - nan
                got["current_max"] = b.get_column("current").max()
            _combine(quality, got)
            cur = b.get_column("current")
            if cur.null_count() == 0:  # nothing to carry over: arc on is just current > threshold
                b = b.with_columns((pl.col("current") > arc.min_current).alias("_arc"))
            else:
                b = b.with_columns(arc_state(arc, last_arc).alias("_arc"))
            for k in names:
                at = chg[k]
                text[k].add(pl.Series(at + offset), txt.get_column(k).gather(at))
                last_text[k] = txt.get_column(k)[-1]
            if labelled:
                new = np.union1d(chg["seam"], chg["serial"]) if "serial" in names else chg["seam"]
                keys = _run_keys(new, n, key_base)
                in_run = b.get_column("_arc") & txt.get_column("seam").is_not_null()
                flips = _flips(in_run)
                # the runs starting in this batch are numbered key_base, key_base + 1, ..., keys[-1]
                starts = pl.Series("_key", np.arange(key_base, int(keys[-1]) + 1, dtype=np.int64))
                label_rows.append(pl.DataFrame([starts, _own(txt.get_column("seam").gather(new)),
                                                (_own(txt.get_column("serial").gather(new)) if "serial" in names
                                                 else pl.Series("serial", [None] * len(starts), dtype=pl.String))]))
            else:
                in_run = b.get_column("_arc")
                # a run starts where the arc state changes (the first row: against the last batch's)
                flips = _flips(in_run)
                new = np.concatenate([[0], flips]) if bool(in_run[0]) != last_arc or not offset else flips
                keys = _run_keys(new, n, key_base)
            key_base = int(keys[-1]) + 1
            last_arc = bool(b.get_column("_arc")[-1])
            whole = _whole_runs(in_run, flips, new, int(keys[0]), carry)
            b = b.with_columns(keys, in_run.alias("_live")).drop("_arc")
            if not whole:
                b = b.filter(in_run)
            offset += n
            if carry is not None and carry.height:
                # the carried run with its rows in this batch, in a frame of its own (small), so
                # the rest of the batch stays one chunk: no copies to hand its columns to numpy
                k0 = carry.get_column("_key")[-1]
                m = b.get_column("_key").search_sorted(k0, side="right") if b.height else 0
                head = pl.concat([carry, b.slice(0, m)], how="vertical_relaxed")
                b = b.slice(m)
                if b.height == 0:  # the run goes on through this batch (chunks appended, not copied)
                    carry = head
                    continue
                # complete: a later run follows; one copy into one chunk, once
                parts.append(pool.submit(_reduce_runs, head.rechunk(), arc, has_marker))
            carry = None
            if b.height == 0:
                continue
            last = b.get_column("_key")[-1]
            split = b.get_column("_key").search_sorted(last, side="left")
            # a run out of arc (kept whole) is dropped, not carried: its rows in the next batch
            # form a run that is dropped again, or (arc on there) are read by the filter
            carry = b.slice(split) if b.get_column("_live")[-1] else None
            if split:
                parts.append(pool.submit(_reduce_runs, b.slice(0, split), arc, has_marker))
                if len(parts) >= 2 and not parts[-2].done():
                    parts[-2].result()  # at most two batches being reduced: memory stays bounded
        if carry is not None and carry.height:
            parts.append(pool.submit(_reduce_runs, carry, arc, has_marker))
        done = [got for f in parts if _rows(got := f.result())]
    finally:
        pool.shutdown(wait=False, cancel_futures=True)
    if not quality:
        quality = {name: (0 if how == "sum" else None) for name, how in CHECK_COMBINE.items()}
    quality["tz_offsets"] = ", ".join(sorted(quality.get("tz_offsets") or ()))
    labels = pl.concat(label_rows) if label_rows else None
    if labelled:
        keyed = labels.filter(pl.col("seam").is_not_null()) if labels is not None else pl.DataFrame()
        quality["seam_labels"] = sorted(set((keyed.get_column("serial").fill_null("") + _KEY + keyed.get_column("seam"))
                                            .to_list())) if keyed.height else []
    if done:
        agg = _finish(done, text, labels, arc, labelled, has_marker, plan.to_ts)
    else:
        agg = pl.DataFrame()
    if labelled and agg.height and agg.get_column("seam_key").is_duplicated().any():
        # a label recurs after another seam's samples: the window form spans the whole seam
        agg = seam_aggregates(samples.frame, arc, labelled=True).collect()
    if agg.height == 0:
        agg = pl.DataFrame(schema=seam_aggregates(samples.frame, arc, labelled).collect_schema())
    return FilePass(aggregates=agg, quality=quality, samples=samples)


def aggregate_file(path: Path, spec, arc: ArcSettings, encoding: str = "utf8",
                   chunk_rows: int | None = None) -> FilePass:
    """:func:`aggregate_samples` of one export file (see :func:`ingest.reader.scan_samples`).

    Raises
    ------
    IngestError
        The file is not a readable export (the one-line reason); polars' own errors for
        malformed content found while streaming (the caller diagnoses those).
    """
    samples = scan_samples(Path(path), spec, encoding=encoding)
    if samples.plan is None:
        raise IngestError("no batch plan")
    return aggregate_samples(samples, arc, chunk_rows=chunk_rows)

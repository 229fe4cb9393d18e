"""Arc-on segmentation, trimming and per-seam aggregation as one whole-file lazy polars query.

The scan uses :mod:`ingest.onepass` (batches, bounded memory); this window form is its fallback
for a seam label that recurs later in a file, and the lazy cross-check in the tests.
"""

from __future__ import annotations

import polars as pl

from ingest.schema import ArcSettings

__all__ = ["seam_aggregates", "valid_reading", "arc_state", "AGGREGATE_COLUMNS"]

#: Columns of the per-seam aggregate frame (SI units; see README "Outputs").
AGGREGATE_COLUMNS = (
    "seam_key", "seam", "part", "serial", "start", "start_s", "arc_time_s", "used_time_s", "n_samples",
    "current_mean", "current_sq_mean", "voltage_mean", "power_mean", "wire_feed_mean",
    "travel_speed_mean", "current_bad", "voltage_bad", "wire_feed_bad", "max_gap_s", "min_step_s",
    "n_trimmed",
)


def valid_reading(col: str) -> pl.Expr:
    """A usable reading: present, finite and positive (a dropped-out channel reads null or 0)."""
    c = pl.col(col)
    return c.is_not_null() & c.is_finite() & (c > 0)


def arc_state(arc: ArcSettings, last: bool = False) -> pl.Expr:
    """Arc on where current > the threshold; a null/NaN current carries the previous state
    (``last`` before the first row: off for a whole file, the previous batch's last state for a
    batch), so a current dropout inside a seam does not split it."""
    cur = pl.col("current")
    return (pl.when(cur.is_null() | cur.is_nan()).then(None).otherwise(cur > arc.min_current)
            .forward_fill().fill_null(last))


def seam_aggregates(samples: pl.LazyFrame, arc: ArcSettings, labelled: bool) -> pl.LazyFrame:
    """Per-seam aggregates of a canonical sample frame.

    Parameters
    ----------
    samples : polars.LazyFrame
        Canonical frame from :func:`ingest.reader.scan_samples` (SI units, file order).
    arc : ArcSettings
        Arc-on threshold [A], trims [s], minimum seam duration [s].
    labelled : bool
        True when the export has a seam column: seams are its labels (per serial), and arc-on
        samples inside a label form that seam. False: each arc-on stretch longer than
        ``arc.min_duration`` is a seam, numbered S1, S2, ... per serial (or per file).

    Returns
    -------
    polars.LazyFrame
        One row a seam. Means are over the trimmed window (closed: a sample within
        :data:`ingest.schema.EDGE_TOL_S` of an edge is inside) and over valid readings of each
        channel; ``*_bad`` count invalid readings (null, NaN, ≤ 0) in the window;
        ``current_sq_mean`` is ⟨I²⟩ in float64; ``power_mean`` is ⟨V·I⟩ over samples where both
        are valid; ``max_gap_s`` the longest step between kept samples, ``min_step_s`` the
        smallest (negative when timestamps go backwards). When the sample frame has a
        ``tip_change`` marker column, ``tip_change`` is true for a seam with any marked sample.

    Notes
    -----
    A null current does not end an arc-on stretch (the previous state carries on), so a
    current-channel dropout inside a seam is counted as a dropout rather than splitting it.
    """
    has_marker = "tip_change" in samples.collect_schema().names()
    cur = pl.col("current")
    lf = samples.with_columns(arc_state(arc).alias("_arc"))
    serial_key = pl.col("serial").fill_null("")
    if labelled:
        lf = lf.filter(pl.col("_arc") & pl.col("seam").is_not_null())
        lf = lf.with_columns((serial_key + "\u241f" + pl.col("seam")).alias("seam_key"))
    else:
        run = (pl.col("_arc") != pl.col("_arc").shift(1)).fill_null(True).cum_sum()
        lf = lf.with_columns(run.alias("_run")).filter(pl.col("_arc"))
        lf = lf.with_columns(pl.col("_run").cast(pl.String).alias("seam_key"))

    t = pl.col("t")
    t0 = t.min().over("seam_key")
    t1 = t.max().over("seam_key")
    keep = (t >= t0 + arc.trim_start_edge) & (t <= t1 - arc.trim_end_edge)
    lf = lf.with_columns(t0.alias("_t0"), t1.alias("_t1"), keep.alias("_keep"))

    k = pl.col("_keep")
    cur_ok = valid_reading("current") & k
    volt_ok = valid_reading("voltage") & k
    wfs_ok = valid_reading("wire_feed") & k
    both_ok = cur_ok & volt_ok
    tk = pl.when(k).then(t)
    steps = tk.drop_nulls().diff()
    agg = lf.group_by("seam_key").agg(
        pl.col("seam").first().alias("seam"),
        pl.col("part").drop_nulls().first().alias("part"),
        pl.col("serial").drop_nulls().first().alias("serial"),
        pl.col("ts").min().alias("start"),
        pl.col("_t0").first().alias("start_s"),
        (pl.col("_t1").first() - pl.col("_t0").first()).alias("arc_time_s"),
        (tk.max() - tk.min()).alias("used_time_s"),
        k.sum().alias("n_samples"),
        cur.filter(cur_ok).mean().alias("current_mean"),
        (cur.filter(cur_ok).cast(pl.Float64) ** 2).mean().alias("current_sq_mean"),
        pl.col("voltage").filter(volt_ok).mean().alias("voltage_mean"),
        (cur * pl.col("voltage")).filter(both_ok).mean().alias("power_mean"),
        pl.col("wire_feed").filter(wfs_ok).mean().alias("wire_feed_mean"),
        pl.col("travel_speed").filter(k & valid_reading("travel_speed")).mean().alias("travel_speed_mean"),
        (k & ~valid_reading("current")).sum().alias("current_bad"),
        (k & ~valid_reading("voltage")).sum().alias("voltage_bad"),
        (k & ~valid_reading("wire_feed")).sum().alias("wire_feed_bad"),
        steps.max().alias("max_gap_s"),
        steps.min().alias("min_step_s"),
        (~k).sum().alias("n_trimmed"),
        *([pl.col("tip_change").any()] if has_marker else []),
    )
    if not labelled:
        agg = agg.filter(pl.col("arc_time_s") >= arc.min_duration_edge)
    agg = agg.sort("start_s")
    if not labelled:
        number = pl.int_range(1, pl.len() + 1).over(pl.col("serial").fill_null(""))
        agg = agg.with_columns(("S" + number.cast(pl.String)).alias("seam"))
    return agg.select(*AGGREGATE_COLUMNS, *(["tip_change"] if has_marker else []))

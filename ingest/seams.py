"""Arc-on segmentation, trimming and per-seam aggregation, in one lazy polars pass."""

from __future__ import annotations

import polars as pl

from ingest.schema import ArcSettings

__all__ = ["seam_aggregates", "run_aggregates", "collect_seam_aggregates", "AGGREGATE_COLUMNS"]

#: Columns of the per-seam aggregate frame (SI units; see README "Outputs").
AGGREGATE_COLUMNS = (
    "seam_key", "seam", "part", "serial", "start", "start_s", "arc_time_s", "used_time_s", "n_samples",
    "current_mean", "current_sq_mean", "voltage_mean", "power_mean", "wire_feed_mean",
    "travel_speed_mean", "current_bad", "voltage_bad", "wire_feed_bad", "max_gap_s", "min_step_s",
    "n_trimmed",
)


def _valid(col: str) -> pl.Expr:
    """A usable reading: present, finite and positive (a dropped-out channel reads null or 0)."""
    c = pl.col(col)
    return c.is_not_null() & c.is_finite() & (c > 0)


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
        One row a seam. Means are over the trimmed window and over valid readings of each
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
    arc_on = (
        pl.when(cur.is_null() | cur.is_nan()).then(None).otherwise(cur > arc.min_current)
        .forward_fill().fill_null(False)
    )
    lf = samples.with_columns(arc_on.alias("_arc"))
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
    keep = (t >= t0 + arc.trim_start) & (t <= t1 - arc.trim_end)
    lf = lf.with_columns(t0.alias("_t0"), t1.alias("_t1"), keep.alias("_keep"))

    k = pl.col("_keep")
    cur_ok = _valid("current") & k
    volt_ok = _valid("voltage") & k
    wfs_ok = _valid("wire_feed") & k
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
        pl.col("travel_speed").filter(k & _valid("travel_speed")).mean().alias("travel_speed_mean"),
        (k & ~_valid("current")).sum().alias("current_bad"),
        (k & ~_valid("voltage")).sum().alias("voltage_bad"),
        (k & ~_valid("wire_feed")).sum().alias("wire_feed_bad"),
        steps.max().alias("max_gap_s"),
        steps.min().alias("min_step_s"),
        (~k).sum().alias("n_trimmed"),
        *([pl.col("tip_change").any()] if has_marker else []),
    )
    if not labelled:
        agg = agg.filter(pl.col("arc_time_s") >= arc.min_duration)
    agg = agg.sort("start_s")
    if not labelled:
        number = pl.int_range(1, pl.len() + 1).over(pl.col("serial").fill_null(""))
        agg = agg.with_columns(("S" + number.cast(pl.String)).alias("seam"))
    return agg.select(*AGGREGATE_COLUMNS, *(["tip_change"] if has_marker else []))


def masked_means() -> list[pl.Expr]:
    """Per-seam means of the masked channel columns (null where a reading is not kept or not
    valid): ``_i`` current, ``_v`` voltage, ``_p`` V·I, ``_w`` WFS, ``_s`` travel speed; ⟨I²⟩ in
    float64 over the same current samples."""
    i = pl.col("_i")
    return [
        i.mean().alias("current_mean"),
        (i * i).mean().alias("current_sq_mean"),
        pl.col("_v").mean().alias("voltage_mean"),
        pl.col("_p").mean().alias("power_mean"),
        pl.col("_w").mean().alias("wire_feed_mean"),
        pl.col("_s").mean().alias("travel_speed_mean"),
    ]


def run_aggregates(samples: pl.LazyFrame, arc: ArcSettings, labelled: bool) -> pl.LazyFrame:
    """Per-seam aggregates without a window over the seam key: bounds first, then one grouping.

    Same columns and meaning as :func:`seam_aggregates`, plus ``runs``: how many separate
    stretches of kept samples the seam has along the file (1 for a well-formed export, where a
    seam's samples are contiguous). ``max_gap_s``/``min_step_s`` only see steps inside a
    stretch, so :func:`collect_seam_aggregates` falls back to :func:`seam_aggregates` for a
    file with ``runs`` > 1.

    Plan: (1) arc-on samples grouped by seam give each seam's first/last time (a tiny frame,
    numbered by an integer id); (2) that frame is joined back onto the samples, keeping file
    order, the trim window applied as a mask, and every channel aggregated in one ``group_by``
    on the integer id. Steps between kept samples come from fills and shifts along the file.
    """
    cur = pl.col("current")
    t = pl.col("t")
    has_marker = "tip_change" in samples.collect_schema().names()
    arc_on = (
        pl.when(cur.is_null() | cur.is_nan()).then(None).otherwise(cur > arc.min_current)
        .forward_fill().fill_null(False)
    )
    lf = samples.with_columns(arc_on.alias("_arc"))
    if labelled:
        lf = lf.filter(pl.col("_arc") & pl.col("seam").is_not_null())
        keys = ["serial", "seam"]
    else:
        run = (pl.col("_arc") != pl.col("_arc").shift(1)).fill_null(True).cum_sum()
        lf = lf.with_columns(run.alias("_run")).filter(pl.col("_arc"))
        keys = ["_run"]
    bounds = lf.group_by(keys).agg(
        pl.col("part").drop_nulls().first().alias("part"),
        pl.col("serial").drop_nulls().first().alias("_serial"),
        pl.col("ts").min().alias("start"),
        t.min().alias("start_s"),
        t.max().alias("_t1"),
        *([pl.col("tip_change").any()] if has_marker else []),
    ).with_row_index("_id")
    lf = lf.join(bounds.select(*keys, "_id", "start_s", "_t1"), on=keys, how="inner", nulls_equal=True,
                 maintain_order="left")
    k = (t >= pl.col("start_s") + arc.trim_start) & (t <= pl.col("_t1") - arc.trim_end)
    lf = lf.with_columns(k.alias("_keep"))
    kk = pl.col("_keep")
    sid = pl.col("_id")
    tk = pl.when(kk).then(t)
    idk = pl.when(kk).then(sid)
    prev_id = idk.shift(1).forward_fill()
    step = pl.when(kk & (prev_id == sid)).then(t - tk.shift(1).forward_fill())
    new_stretch = kk & (prev_id.is_null() | (prev_id != sid))

    def ok(col: str) -> pl.Expr:
        return kk & _valid(col)

    volt = pl.col("voltage")
    lf = lf.select(
        "_id", "_keep", tk.alias("_tk"), step.alias("_step"), new_stretch.alias("_new"),
        pl.when(ok("current")).then(cur).alias("_i"),
        pl.when(ok("voltage")).then(volt).alias("_v"),
        pl.when(ok("current") & ok("voltage")).then(cur * volt).alias("_p"),
        pl.when(ok("wire_feed")).then(pl.col("wire_feed")).alias("_w"),
        pl.when(ok("travel_speed")).then(pl.col("travel_speed")).alias("_s"),
        (kk & ~_valid("current")).alias("_ib"),
        (kk & ~_valid("voltage")).alias("_vb"),
        (kk & ~_valid("wire_feed")).alias("_wb"),
    )
    sums = lf.group_by("_id").agg(
        pl.col("_tk").min().alias("_tk_min"),
        pl.col("_tk").max().alias("_tk_max"),
        kk.sum().alias("n_samples"),
        pl.len().alias("_n_all"),
        *masked_means(),
        pl.col("_ib").sum().alias("current_bad"),
        pl.col("_vb").sum().alias("voltage_bad"),
        pl.col("_wb").sum().alias("wire_feed_bad"),
        pl.col("_step").max().alias("max_gap_s"),
        pl.col("_step").min().alias("min_step_s"),
        pl.col("_new").sum().alias("runs"),
    )
    agg = bounds.join(sums, on="_id", how="left").with_columns(
        (pl.col("_t1") - pl.col("start_s")).alias("arc_time_s"),
        (pl.col("_tk_max") - pl.col("_tk_min")).alias("used_time_s"),
        (pl.col("_n_all") - pl.col("n_samples")).alias("n_trimmed"),
        pl.col("_serial").alias("serial"),
    )
    if labelled:
        agg = agg.with_columns((pl.col("serial").fill_null("") + "\u241f" + pl.col("seam")).alias("seam_key"))
    else:
        agg = agg.with_columns(pl.col("_run").cast(pl.String).alias("seam_key"))
        agg = agg.filter(pl.col("arc_time_s") >= arc.min_duration)
    agg = agg.sort("start_s")
    if not labelled:
        number = pl.int_range(1, pl.len() + 1).over(pl.col("serial").fill_null(""))
        agg = agg.with_columns(("S" + number.cast(pl.String)).alias("seam"))
    return agg.select(*AGGREGATE_COLUMNS, *(["tip_change"] if has_marker else []), "runs")


def collect_seam_aggregates(samples: pl.LazyFrame, arc: ArcSettings, labelled: bool,
                            engine: str = "auto") -> pl.DataFrame:
    """Collected per-seam aggregates (columns of :data:`AGGREGATE_COLUMNS`), fast path first.

    Runs :func:`run_aggregates`; when a labelled seam comes in more than one stretch (its label
    recurs after another seam's samples), recomputes the file with :func:`seam_aggregates`, whose
    trim window spans the whole seam. ``engine`` is passed to ``LazyFrame.collect``.
    """
    out = run_aggregates(samples, arc, labelled).collect(engine=engine)
    if out.height and int(out["runs"].max()) > 1:
        return seam_aggregates(samples, arc, labelled).collect(engine=engine)
    return out.drop("runs")

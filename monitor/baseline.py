"""Baseline zeroing: CTWD relative to the first good seams after each contact-tip change.

A current sensor's gain drifts and differs between cells; a 1 % gain error moves the back-solved
CTWD by several millimetres. For a part whose config has a ``[baseline]`` table, the first N good
seams after each tip change are taken to be at their nominal CTWD, a current-gain correction g
is solved from them (``physics.current_gain_at_ctwd``, averaged over the N seams), and every seam
until the next tip change is re-estimated with Ī/g and ⟨I²⟩/g². Those seams get
``ctwd_basis = "baseline"``; all others stay ``"absolute"``.

Tip changes ("epochs") start: at the first seam of the scan; at each time listed in the
``tip_changes`` CSV (``time`` column, ISO-8601, UTC when no offset) or at the first seam of each
listed serial (``serial`` column) (both read by ``monitor.config``); and, with ``detect_step``,
where a seam position's CTWD steps back toward nominal by at least that much from the previous
seam at that position (with a serial column: at every seam position of that serial, so that one
seam's cleared fixture fault is not taken for a new tip).
"""

from __future__ import annotations

import numpy as np
import polars as pl

from monitor import physics
from monitor.config import Baseline, Config, Part
from monitor.estimate import estimate
from monitor.judge import judge

__all__ = ["apply_baseline", "tip_change_flags"]

_ORDER = ["start", "source", "start_s", "seam"]


def tip_change_flags(seams: pl.DataFrame, baseline: Baseline) -> np.ndarray:
    """True on each seam (rows in time order) that is the first after a tip change."""
    n = seams.height
    flags = np.zeros(n, dtype=bool)
    if n == 0:
        return flags
    flags[0] = True
    serial = seams.get_column("serial")
    first_of_serial = (serial.is_not_null() & (serial != serial.shift(1)).fill_null(True)).to_numpy()
    start = seams.get_column("start").cast(pl.Datetime("us", "UTC"))
    if baseline.tip_times and start.null_count() < n:
        start = start.fill_null(strategy="forward").fill_null(strategy="backward")
        times = pl.Series(baseline.tip_times, dtype=pl.Datetime("us", "UTC"))
        epoch = times.search_sorted(start, side="right").to_numpy()
        flags[1:] |= epoch[1:] != epoch[:-1]
    if baseline.tip_serials:
        flags |= serial.is_in(list(baseline.tip_serials)).fill_null(False).to_numpy() & first_of_serial
    if baseline.detect_step is not None:
        dev = (pl.col("ctwd") - pl.col("nominal_ctwd")).abs()
        prev = pl.col("ctwd").shift(1).over("seam")
        prev_dev = dev.shift(1).over("seam")
        step = seams.select(
            ((prev - pl.col("ctwd") >= baseline.detect_step) & (dev < prev_dev)).fill_null(False).alias("s")
        ).get_column("s").to_numpy()
        # a new tip moves every seam of the part back; a cleared fixture fault moves one. With a
        # serial column, a serial is a tip change only when all its seam positions stepped back.
        if serial.null_count() < n:
            key = serial.fill_null("").to_numpy()
            all_step = pl.DataFrame({"k": key, "s": step}).select(pl.col("s").all().over("k")).to_series().to_numpy()
            flags |= all_step & first_of_serial
        else:
            flags |= step
    return flags


def _gain_rows(part: Part, rows: pl.DataFrame, cfg: Config) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per row: epoch number, epoch gain g (NaN when the epoch has no good seam), seams used."""
    assert part.baseline is not None
    w = cfg.wires[part.wire]
    flags = tip_change_flags(rows, part.baseline)
    epoch = np.cumsum(flags) - 1
    good = (rows.get_column("status") != "invalid").to_numpy()
    g_seam = physics.current_gain_at_ctwd(
        rows.get_column("melt_rate").fill_null(np.nan).to_numpy(),
        rows.get_column("current_mean").fill_null(np.nan).to_numpy(),
        rows.get_column("current_sq_mean").fill_null(np.nan).to_numpy(),
        rows.get_column("nominal_ctwd").fill_null(np.nan).to_numpy(),
        w.melt_a, w.melt_b,
    )
    good &= np.isfinite(g_seam)
    frame = pl.DataFrame({"epoch": epoch, "good": good, "g": g_seam})
    rank = pl.col("good").cast(pl.Int64).cum_sum().over("epoch")
    per_epoch = (
        frame.with_columns(rank.alias("rank"))
        .filter(pl.col("good") & (pl.col("rank") <= part.baseline.seams))
        .group_by("epoch").agg(pl.col("g").mean().alias("gain"), pl.len().alias("used"))
    )
    joined = frame.join(per_epoch, on="epoch", how="left", maintain_order="left")
    return (epoch, joined.get_column("gain").fill_null(np.nan).to_numpy(),
            joined.get_column("used").fill_null(0).to_numpy())


def apply_baseline(seams: pl.DataFrame, cfg: Config) -> pl.DataFrame:
    """Re-estimate the seams of every part that has a ``[baseline]`` table; add ``ctwd_basis``.

    Parameters
    ----------
    seams : polars.DataFrame
        Judged seam frame (internal SI columns) of the whole scan.
    cfg : Config
        Parsed configuration.

    Returns
    -------
    polars.DataFrame
        The same seams; those of baseline parts re-estimated with their epoch's current-gain
        correction, with ``ctwd_basis`` "baseline", ``current_gain`` g [-] and the reason
        saying so; every other seam ``ctwd_basis`` "absolute" and ``current_gain`` null.
    """
    if seams.height == 0 or "part" not in seams.columns:
        return seams
    out = seams.with_columns(pl.lit("absolute").alias("ctwd_basis"),
                             pl.lit(None, dtype=pl.Float64).alias("current_gain"))
    base_parts = [p for p in cfg.parts.values() if p.baseline is not None]
    if not base_parts:
        return out
    names = [p.name for p in base_parts]
    done = [out.filter(~pl.col("part").is_in(names).fill_null(False))]
    for part in base_parts:
        rows = out.filter(pl.col("part") == part.name).sort(_ORDER, nulls_last=True)
        if rows.height == 0:
            continue
        _, gain, used = _gain_rows(part, rows, cfg)
        ok = np.isfinite(gain)
        g = np.where(ok, gain, 1.0)
        corrected = rows.with_columns(
            pl.col("current_mean") / pl.Series(g), pl.col("current_sq_mean") / pl.Series(g * g),
            pl.col("power_mean") / pl.Series(g),
        )
        rejudged = judge(estimate(corrected, cfg), cfg.cell.arc)
        note = [f"; CTWD relative to baseline of {int(u)} seam(s) after tip change (current gain ×{gg:.4f})"
                if k else "; no good seam after tip change for a baseline: absolute CTWD"
                for k, u, gg in zip(ok, used, g)]
        rejudged = rejudged.with_columns(
            pl.Series("ctwd_basis", np.where(ok, "baseline", "absolute"), dtype=pl.String),
            pl.Series("current_gain", np.where(ok, gain, np.nan)).fill_nan(None),
            (pl.col("reason") + pl.Series(note, dtype=pl.String)).alias("reason"),
        )
        done.append(rejudged)
    return pl.concat(done, how="diagonal_relaxed")

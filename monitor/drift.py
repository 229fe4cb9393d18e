"""Drift across successive parts: EWMA and CUSUM per seam position, tip-change resets, forecasts.

Each seam position of a part (S1, S2, ...) is its own series: one observation a part, the
back-solved CTWD's deviation from nominal [mm], parts in order of their first arc start, over
the results history plus tonight's scan. Invalid seams are gaps (NaN), never observations.

For each series (settings from the part's ``[drift]`` table, see ``monitor.config``):

1. **Baseline.** The first ``baseline_parts`` observations give the in-control level (their
   median) and σ by the moving-range method (MR̄/d2, ``spc.moving_range_sigma``; moving ranges
   that span a tip change are dropped). With fewer observations the series is "in baseline"
   and raises no drift signal; the baseline parts themselves never raise one (they define the
   level, they are not tested against it).
2. **Resets at contact-tip changes.** A part starts a new tip when the seam rows carry a true
   ``tip_change`` marker column, or, without a marker, when *every* seam position of that part
   with a value on it and on the previous part (at least :data:`TIP_MIN_SEAMS` of them) stepped
   toward its baseline level by more than :data:`TIP_STEP_SIGMAS` of its own σ at once. One
   seam jumping back alone (a fixture put right) is not a tip change. Under no change each seam
   makes such a step with probability about 1.7 % (a difference of two observations has
   standard deviation √2·σ), so two seams at once about 3e-4 a part and three 5e-6: rare
   enough. Parts with a single seam position need the marker. Both charts restart at a reset.
3. **Charts.** EWMA (λ, L; exact limits) and two-sided tabular CUSUM (k, h), both in units of
   the seam's σ (``spc.ewma_chart``, ``spc.cusum_chart``). Either chart's signal turns an
   ``ok`` seam into ``watch`` with the reason "CTWD drift: CUSUM signal on S3 since serial
   ...", naming the first part of the unbroken run of signals.
4. **Forecast.** Penetration since the last reset against part number, Theil–Sen slope with
   its 95 % interval (``spc.parts_to_limit``): parts until the trend line crosses the seam's
   minimum (``parts_to_limit``, ``_low``, ``_high``) and the arc time that is
   (``arc_time_to_limit_s``). Only when the slope is significant and there are at least
   :data:`MIN_FORECAST_PARTS` parts since the reset.

Screening indicators of drift, not weld acceptance; the applicable code, the WPS and
inspection decide.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import polars as pl

from monitor import spc
from monitor.config import Config, DriftSettings

__all__ = ["DRIFT_COLUMNS", "MIN_FORECAST_PARTS", "TIP_MIN_SEAMS", "TIP_STEP_SIGMAS", "SeriesResult", "analyse_series",
           "detect_tip_changes", "drift_frame", "apply_drift_status", "forecast_sentences", "drift_with_history"]

#: A tip change is a step back toward the baseline larger than this many σ on every seam at once.
TIP_STEP_SIGMAS = 3.0
#: ... on at least this many seam positions of the part.
TIP_MIN_SEAMS = 2
#: Fewest parts since the last reset for a penetration forecast.
MIN_FORECAST_PARTS = 8

DRIFT_COLUMNS = ("drift_index", "drift_sigma_mm", "drift_target_mm", "drift_ewma_mm", "drift_cusum_upper",
                 "drift_cusum_lower", "drift_signal", "drift_chart", "drift_since_serial", "tip_reset",
                 "parts_to_limit", "parts_to_limit_low", "parts_to_limit_high", "arc_time_to_limit_s")


_DTYPES = {"drift_index": pl.UInt32, "drift_signal": pl.Boolean, "tip_reset": pl.Boolean,
           "drift_chart": pl.String, "drift_since_serial": pl.String}


@dataclass
class SeriesResult:
    """Chart output of one seam position, arrays aligned with the part order."""

    sigma: float
    target: float
    ewma: np.ndarray
    upper: np.ndarray
    lower: np.ndarray
    signal: np.ndarray
    chart: list[str | None]
    since: np.ndarray  # index of the first part of the current run of signals, -1 if none


def baseline(x: np.ndarray, n: int, reset: np.ndarray | None = None) -> tuple[float, float]:
    """(level, σ) from the first ``n`` finite observations; NaNs if there are fewer."""
    idx = np.flatnonzero(np.isfinite(x))
    if idx.size < n or n < 2:
        return float("nan"), float("nan")
    stop = idx[n - 1] + 1
    r = None if reset is None else reset[:stop]
    sigma = spc.moving_range_sigma(x[:stop], reset=r)
    return float(np.nanmedian(x[:stop])), sigma


def detect_tip_changes(x: np.ndarray, target: np.ndarray, sigma: np.ndarray,
                       marker: np.ndarray | None = None) -> np.ndarray:
    """Reset mask over parts from a (seams × parts) deviation matrix.

    Part j (j ≥ 1) is a tip change if ``marker[j]`` is true, or if every seam with a finite value
    on parts j−1 and j and a known σ stepped in the direction of its target by more than
    TIP_STEP_SIGMAS·σ, with at least TIP_MIN_SEAMS seams compared. ``target`` and ``sigma``
    [unit of x] are per seam.
    """
    n_parts = x.shape[1]
    reset = np.zeros(n_parts, dtype=bool)
    if marker is not None:
        reset |= np.asarray(marker, dtype=bool)
    if n_parts < 2:
        return reset
    t = target[:, None]
    s = sigma[:, None]
    prev, cur = x[:, :-1], x[:, 1:]
    comparable = np.isfinite(prev) & np.isfinite(cur) & np.isfinite(s) & (s > 0)
    step = cur - prev
    step_back = (np.abs(step) > TIP_STEP_SIGMAS * s) & ((t - prev) * step > 0)
    all_back = np.where(comparable, step_back, True).all(axis=0) & (comparable.sum(axis=0) >= TIP_MIN_SEAMS)
    reset[1:] |= all_back
    reset[0] = False
    return reset


def _run_starts(sig: np.ndarray, finite: np.ndarray, reset: np.ndarray) -> np.ndarray:
    """Index of the first part of the current unbroken run of signals at each part, −1 if none.

    A run is broken by a reset or by a finite observation without a signal; NaN parts neither
    break nor start one (they carry the run on). Vectorised: the latest break b(j) at or before j,
    then the first signal at or after b(j), kept if it is not after j.
    """
    n = sig.size
    j = np.arange(n)
    sigf = sig & finite
    brk = reset | (finite & ~sig)
    last_break = np.maximum.accumulate(np.where(brk, j, 0)) if n else j
    next_sig = np.minimum.accumulate(np.where(sigf, j, n)[::-1])[::-1] if n else j
    first = next_sig[last_break] if n else j
    return np.where(first <= j, first, -1).astype(np.int64)


def analyse_series(x: np.ndarray, reset: np.ndarray, settings: DriftSettings) -> SeriesResult | None:
    """Run both charts on one seam position's deviations; None while still in baseline."""
    target, sigma = baseline(x, settings.baseline_parts, reset)
    if not (np.isfinite(sigma) and sigma > 0):
        return None
    e = spc.ewma_chart(x, target, sigma, settings.ewma_lambda, settings.ewma_l, reset=reset)
    c = spc.cusum_chart(x, target, sigma, settings.cusum_k, settings.cusum_h, reset=reset)
    sig_c, sig_e = np.asarray(c["signal"]), np.asarray(e["signal"])
    idx = np.flatnonzero(np.isfinite(x))
    phase2 = np.arange(x.size) > idx[settings.baseline_parts - 1]  # the baseline parts define, not test
    sig_c, sig_e = sig_c & phase2, sig_e & phase2
    sig = sig_c | sig_e
    chart = [("CUSUM and EWMA" if a and b else "CUSUM" if a else "EWMA" if b else None) for a, b in zip(sig_c, sig_e)]
    since = _run_starts(sig, np.isfinite(x), reset)
    return SeriesResult(sigma, target, np.asarray(e["z"]), np.asarray(c["upper"]), np.asarray(c["lower"]), sig,
                        chart, since)


def _part_units(df: pl.DataFrame) -> pl.DataFrame:
    """Unit key of each row (serial, else source) and its order index among the part's units."""
    df = df.with_columns(pl.coalesce(pl.col("serial"), pl.col("source")).alias("_unit"))
    order = (df.group_by("_unit").agg(pl.col("start").min().alias("_t0"), pl.col("source").min().alias("_s0"))
             .sort(["_t0", "_s0"], nulls_last=True).with_row_index("drift_index"))
    return df.join(order.select("_unit", "drift_index"), on="_unit")


def drift_frame(seams: pl.DataFrame, settings_for: Callable[[str], DriftSettings]) -> pl.DataFrame:
    """Add :data:`DRIFT_COLUMNS` to a published seam frame (history plus tonight, any parts).

    Needs columns part, serial, source, seam, start, status, ctwd_mm, ctwd_nominal_mm,
    penetration_mm, min_penetration_mm, arc_time_s; uses a boolean ``tip_change`` column when
    present. Row order is kept.
    """
    df = seams.drop([c for c in DRIFT_COLUMNS if c in seams.columns]).with_row_index("_row")
    out: list[pl.DataFrame] = []
    for (part,), pdf in df.group_by(["part"], maintain_order=True):
        if part is None:
            continue
        settings = settings_for(part)
        pdf = _part_units(pdf)
        n_parts = int(pdf.get_column("drift_index").max()) + 1
        seam_names = sorted(pdf.get_column("seam").drop_nulls().unique().to_list())
        dev = (pl.when(pl.col("status") != "invalid").then(pl.col("ctwd_mm") - pl.col("ctwd_nominal_mm")))
        pdf = pdf.with_columns(dev.alias("_dev"))
        x = np.full((len(seam_names), n_parts), np.nan)
        pen = np.full((len(seam_names), n_parts), np.nan)
        for i, s in enumerate(seam_names):
            g = pdf.filter((pl.col("seam") == s) & pl.col("_dev").is_not_null()).unique("drift_index", keep="last")
            j = g.get_column("drift_index").to_numpy()
            x[i, j] = g.get_column("_dev").to_numpy()
            pen[i, j] = g.get_column("penetration_mm").fill_null(np.nan).to_numpy()
        marker = None
        if "tip_change" in pdf.columns:
            m = pdf.group_by("drift_index").agg(pl.col("tip_change").cast(pl.Boolean).fill_null(False).any())
            marker = np.zeros(n_parts, dtype=bool)
            marker[m.get_column("drift_index").to_numpy()] = m.get_column("tip_change").to_numpy()
        pre = [baseline(x[i], settings.baseline_parts) for i in range(len(seam_names))]
        reset = detect_tip_changes(x, np.array([p[0] for p in pre]), np.array([p[1] for p in pre]), marker)
        units = pdf.group_by("drift_index").agg(pl.col("_unit").first(), pl.col("arc_time_s").sum().alias("_arc"))
        unit_of = np.empty(n_parts, dtype=object)
        unit_of[units.get_column("drift_index").to_numpy()] = units.get_column("_unit").to_list()
        arc_per_part = float(units.get_column("_arc").drop_nulls().mean() or float("nan"))
        last_reset = int(np.flatnonzero(reset).max()) if reset.any() else 0
        cols: list[pl.DataFrame] = []
        for i, s in enumerate(seam_names):
            res = analyse_series(x[i], reset, settings)
            pmin_s = pdf.filter(pl.col("seam") == s).get_column("min_penetration_mm").drop_nulls()
            fc = {"parts": float("nan"), "parts_low": float("nan"), "parts_high": float("nan")}
            idx = np.arange(last_reset, n_parts)
            p_since = pen[i, last_reset:]
            if pmin_s.len() and np.isfinite(p_since).sum() >= MIN_FORECAST_PARTS:
                fc = spc.parts_to_limit(idx.astype(float), p_since, float(pmin_s[-1]))
            nan = np.full(n_parts, np.nan)
            cols.append(pl.DataFrame({
                "seam": [s] * n_parts,
                "drift_index": np.arange(n_parts, dtype=np.uint32),
                "drift_sigma_mm": np.full(n_parts, res.sigma if res else np.nan),
                "drift_target_mm": np.full(n_parts, res.target if res else np.nan),
                "drift_ewma_mm": res.ewma if res else nan,
                "drift_cusum_upper": res.upper if res else nan,
                "drift_cusum_lower": res.lower if res else nan,
                "drift_signal": res.signal if res else np.zeros(n_parts, dtype=bool),
                "drift_chart": pl.Series(res.chart if res else [None] * n_parts, dtype=pl.String),
                "drift_since_serial": pl.Series([unit_of[k] if res and k >= 0 else None
                                                 for k in (res.since if res else [-1] * n_parts)], dtype=pl.String),
                "tip_reset": reset,
                "parts_to_limit": np.full(n_parts, fc["parts"]),
                "parts_to_limit_low": np.full(n_parts, fc["parts_low"]),
                "parts_to_limit_high": np.full(n_parts, fc["parts_high"]),
                "arc_time_to_limit_s": np.full(n_parts, fc["parts"] * arc_per_part),
            }))
        table = pl.concat(cols) if cols else None
        if table is not None:
            pdf = pdf.join(table, on=["seam", "drift_index"], how="left")
        out.append(pdf.drop("_unit", "_dev"))
    result = pl.concat(out, how="diagonal_relaxed") if out else df
    result = pl.concat([result, df.filter(pl.col("part").is_null())], how="diagonal_relaxed")
    for c in DRIFT_COLUMNS:
        if c not in result.columns:
            result = result.with_columns(pl.lit(None).alias(c))
    result = result.cast({c: _DTYPES.get(c, pl.Float64) for c in DRIFT_COLUMNS})
    result = result.with_columns(pl.col("drift_signal").fill_null(False), pl.col("tip_reset").fill_null(False),
                                 pl.col(pl.Float64).fill_nan(None))
    return result.sort("_row").drop("_row")


def apply_drift_status(df: pl.DataFrame) -> pl.DataFrame:
    """Upgrade ``ok`` to ``watch`` where a drift chart signals; add the drift note to the reason."""
    note = pl.format("CTWD drift: {} signal on {} since serial {}", pl.col("drift_chart"), pl.col("seam"),
                     pl.col("drift_since_serial").fill_null("?"))
    hit = pl.col("drift_signal") & (pl.col("status") != "invalid")
    return df.with_columns(
        pl.when(hit & (pl.col("status") == "ok")).then(pl.lit("watch")).otherwise(pl.col("status")).alias("status"),
        pl.when(hit & (pl.col("status") == "ok")).then(note)
        .when(hit).then(pl.concat_str([pl.col("reason"), note], separator="; "))
        .otherwise(pl.col("reason")).alias("reason"),
    )


def _n(v: float) -> str:
    return f"{v:.0f}" if v >= 10 else f"{v:.1f}".rstrip("0").rstrip(".")


def forecast_sentences(df: pl.DataFrame) -> list[str]:
    """One plain sentence per seam position with a forecast (as of its latest part).

    e.g. "TB7-tow-bracket S3 reaches 2.5 mm in about 40 parts (25–70) at the present drift
    (about 15 min of arc time)."
    """
    if df.height == 0 or "parts_to_limit" not in df.columns:
        return []
    last = (df.filter(pl.col("parts_to_limit").is_not_null()).sort("start", nulls_last=True)
            .group_by(["part", "seam"], maintain_order=True).last().sort(["part", "seam"]))
    out = []
    for r in last.iter_rows(named=True):
        p, lo, hi, lim = r["parts_to_limit"], r["parts_to_limit_low"], r["parts_to_limit_high"], r["min_penetration_mm"]
        head = f"{r['part']} {r['seam']}"
        if p == 0:
            out.append(f"{head} is already at or below {lim:.1f} mm on its trend line.")
            continue
        if math.isinf(p):
            continue  # significant but rising: moving away from the minimum
        rng = f"{_n(lo)}–{_n(hi)}" if math.isfinite(hi) else f"{_n(lo)} or more"
        arc = r.get("arc_time_to_limit_s")
        arc_txt = f" (about {arc / 60:.0f} min of arc time)" if arc is not None and math.isfinite(arc) else ""
        out.append(f"{head} reaches {lim:.1f} mm in about {_n(p)} parts ({rng}) at the present drift{arc_txt}.")
    return out


def drift_with_history(seams_out: pl.DataFrame, files: list, cfg: Config, history: Path) -> tuple[pl.DataFrame, dict]:
    """Judge tonight's seams for drift against the history, then append them to it.

    Returns tonight's published frame with :data:`DRIFT_COLUMNS` (status upgraded where a chart
    signals) and a dict for run.json: ``history`` (what was appended) and ``drift_forecast``
    (the sentences of :func:`forecast_sentences`).
    """
    from monitor.history import KEY_COLUMN, append_history, known_inputs, scan_history

    history = Path(history)
    inputs = [(f.source, f.sha256) for f in files if f.status == "read"]
    sha_of = {src: sha for src, sha in inputs if sha}
    present = known_inputs(history)
    tonight = seams_out.with_columns(pl.col("source").replace_strict(sha_of, default=None, return_dtype=pl.String)
                                     .alias(KEY_COLUMN), pl.lit(True).alias("_tonight"))
    parts = [p for p in tonight.get_column("part").drop_nulls().unique().to_list()]
    past: list[pl.DataFrame] = []
    for p in parts:
        lf = scan_history(history, part=p)
        if lf is not None:
            names = lf.collect_schema().names()
            wanted = dict.fromkeys([*seams_out.columns, KEY_COLUMN, "tip_change"])
            past.append(lf.select([c for c in wanted if c in names]).collect())
    if past:
        old = pl.concat(past, how="diagonal_relaxed").filter(~pl.col(KEY_COLUMN).is_in(
            tonight.get_column(KEY_COLUMN).drop_nulls().unique().to_list()) | pl.col(KEY_COLUMN).is_null())
        both = pl.concat([old.with_columns(pl.lit(False).alias("_tonight")), tonight], how="diagonal_relaxed")
    else:
        both = tonight

    def settings_for(part: str) -> DriftSettings:
        p = cfg.parts.get(part)
        return p.drift if p is not None else DriftSettings()

    judged = drift_frame(both, settings_for)
    now = apply_drift_status(judged.filter(pl.col("_tonight")))
    now = now.drop("_tonight", KEY_COLUMN, "drift_index")
    from monitor.lock import scan_lock

    with scan_lock(Path(history), reentrant=True):  # one writer at a time per history (ScanBusy otherwise)
        added = append_history(history, now, inputs)
    info = {
        "history": {"root": str(history), "rows_added": added.rows_added, "files_written": len(added.files_written),
                    "inputs_already_present": len(set(sha_of.values()) & present)},
        "drift_forecast": forecast_sentences(now),
    }
    return now, info

"""Judge each seam: ok / watch / alarm / invalid, with the reason in plain words."""

from __future__ import annotations

import math

import polars as pl

from ingest.schema import ArcSettings
from monitor.estimate import Z95

__all__ = ["judge", "STATUSES", "CTWD_RANGE_M", "CURRENT_RANGE_A", "VOLTAGE_RANGE_V", "WFS_RANGE_M_S"]

STATUSES = ("alarm", "watch", "invalid", "ok")

# Physical ranges outside which a seam cannot be judged (common practice for GMAW, no source):
CTWD_RANGE_M = (2e-3, 60e-3)  # a back-solved CTWD outside this means wrong wire, units or coefficients
CURRENT_RANGE_A = (30.0, 800.0)
VOLTAGE_RANGE_V = (8.0, 50.0)
WFS_RANGE_M_S = (0.5 / 60, 30.0 / 60)  # 0.5-30 m/min


def _mm(x: float, digits: int = 1) -> str:
    return f"{x * 1e3:.{digits}f} mm"


def _reason_invalid(r: dict, arc: ArcSettings) -> str | None:
    if not r["known_part"]:
        if r["part"]:
            return f'no part config for "{r["part"]}"'
        return "part unknown (no part column, no matching part file, no --part)"
    n = r["n_samples"] or 0
    if n == 0 or (r["used_time_s"] or 0) <= 0:
        return f"arc-on {r['arc_time_s'] or 0:.2f} s is shorter than the trims ({arc.trim_start + arc.trim_end:.2f} s)"
    if r["arc_time_s"] < arc.min_duration_edge:
        return f"seam too short: arc-on {r['arc_time_s']:.2f} s < {arc.min_duration:.2f} s"
    if r["min_step_s"] is not None and r["min_step_s"] < 0:
        return "timestamps go backwards inside the seam"
    for ch, label in (("current", "current"), ("voltage", "voltage"), ("wire_feed", "WFS")):
        bad = r[f"{ch}_bad"] or 0
        if bad > arc.max_dropout_fraction * n:
            return f"{label} channel dropped out on {100 * bad / n:.0f} % of samples"
    if r["max_gap_s"] is not None and r["max_gap_s"] > arc.max_gap:
        return f"logging gap of {r['max_gap_s']:.2f} s inside the seam (> {arc.max_gap:.2f} s)"
    if r["travel_speed"] is None or not r["travel_speed"] > 0:
        return "no travel speed (not logged, none in the part file)"
    i, v, w = r["current_mean"], r["voltage_mean"], r["wire_feed_mean"]
    if not CURRENT_RANGE_A[0] <= i <= CURRENT_RANGE_A[1]:
        return f"mean current {i:.0f} A outside {CURRENT_RANGE_A[0]:.0f}-{CURRENT_RANGE_A[1]:.0f} A; units?"
    if not VOLTAGE_RANGE_V[0] <= v <= VOLTAGE_RANGE_V[1]:
        return f"mean voltage {v:.1f} V outside {VOLTAGE_RANGE_V[0]:.0f}-{VOLTAGE_RANGE_V[1]:.0f} V; units?"
    if not WFS_RANGE_M_S[0] <= w <= WFS_RANGE_M_S[1]:
        return f"mean WFS {w * 60:.2f} m/min outside 0.5-30 m/min; units?"
    c = r["ctwd"]
    if c is None or not CTWD_RANGE_M[0] <= c <= CTWD_RANGE_M[1]:
        shown = "not computable" if c is None else _mm(c)
        return f"back-solved CTWD {shown} outside 2-60 mm; wrong wire, coefficients or units?"
    return None


def _judge_row(r: dict, arc: ArcSettings) -> tuple[str, str]:
    bad = _reason_invalid(r, arc)
    if bad is not None:
        return "invalid", bad
    c, nom, band = r["ctwd"], r["nominal_ctwd"], r["ctwd_band"]
    p, p_lo, pmin = r["penetration"], r["penetration_low"], r["min_penetration"]
    dev = c - nom
    ctwd_txt = f"CTWD {_mm(c)}, {'+' if dev >= 0 else '-'}{_mm(abs(dev))} {'over' if dev >= 0 else 'under'} nominal"
    notes: list[str] = []
    status = "ok"
    if p < pmin:
        status = "alarm"
        notes.append(f"penetration {_mm(p, 2)} < {_mm(pmin, 2)}")
    elif p_lo < pmin:
        status = "watch"
        notes.append(f"penetration {_mm(p, 2)}, 95 % low bound {_mm(p_lo, 2)} < {_mm(pmin, 2)}")
    margin = r.get("penetration_margin") or 0.0
    if pmin <= p < pmin + margin:
        status = "watch" if status == "ok" else status
        notes.append(f"penetration {_mm(p, 2)} within {_mm(margin, 2)} margin of {_mm(pmin, 2)}")
    if abs(dev) > band:
        status = "watch" if status == "ok" else status
        notes.append(f"outside ±{_mm(band)} band")
    w, wp, wt = r["wire_feed_mean"], r["prog_wire_feed"], r["wire_feed_tol"]
    if wp is not None and not math.isnan(wp) and abs(w - wp) > wt * wp:
        status = "watch" if status == "ok" else status
        notes.append(f"WFS {w * 60:.2f} m/min outside programmed {wp * 60:.2f} ± {100 * wt:.0f} %")
    v, vp, vt = r["voltage_mean"], r["prog_voltage"], r["voltage_tol"]
    if vp is not None and not math.isnan(vp) and abs(v - vp) > vt * vp:
        status = "watch" if status == "ok" else status
        notes.append(f"voltage {v:.1f} V outside programmed {vp:.1f} V ± {100 * vt:.0f} %")
    if status == "ok":
        return "ok", f"{ctwd_txt}; penetration {_mm(p, 2)} ≥ {_mm(pmin, 2)}"
    return status, "; ".join([ctwd_txt, *notes])


def judge(est: pl.DataFrame, arc: ArcSettings) -> pl.DataFrame:
    """Add interval bounds, ``status`` and ``reason`` to an estimated seam frame.

    Rules (in this order):

    - ``invalid``: the seam cannot be judged: unknown part, too short, a channel dropped out,
      timestamps broken, a logging gap, no travel speed, means outside physical ranges, or a
      back-solved CTWD outside 2-60 mm;
    - ``alarm``: estimated penetration < the seam's minimum;
    - ``watch``: the 95 % low bound of penetration < minimum, or penetration < minimum + the
      part's ``penetration_margin`` (default 0), or |CTWD − nominal| > the band,
      or WFS or voltage outside the programmed window (when given);
    - ``ok`` otherwise.
    """
    est = est.with_columns(
        (pl.col("ctwd") - Z95 * pl.col("ctwd_sigma")).alias("ctwd_low"),
        (pl.col("ctwd") + Z95 * pl.col("ctwd_sigma")).alias("ctwd_high"),
        (pl.col("penetration") - Z95 * pl.col("penetration_sigma")).alias("penetration_low"),
        (pl.col("penetration") + Z95 * pl.col("penetration_sigma")).alias("penetration_high"),
    )
    verdicts = [_judge_row(r, arc) for r in est.iter_rows(named=True)]
    status = [v[0] for v in verdicts]
    reason = [v[1] for v in verdicts]
    return est.with_columns(pl.Series("status", status, dtype=pl.String), pl.Series("reason", reason, dtype=pl.String))

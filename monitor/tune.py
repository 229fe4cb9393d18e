"""Per-part drift-chart settings from the part's own history: backtest, recommend, write.

For each candidate pair of chart settings (CUSUM k, h with EWMA λ, L) the part's history is
replayed through :func:`monitor.drift.drift_frame` exactly as the nightly scan would judge it,
and counted per seam position:

- ``watches``: runs of drift signals (each unbroken run of signalling parts counts once);
- ``unconfirmed``: watches in a contact-tip run (between resets) with no penetration alarm at
  or after the watch's start: the false watches of the backtest;
- ``episodes``: tip runs that contain a penetration alarm (status ``alarm``), ``caught``: those
  with a watch before their first alarm, ``lead_parts``: mean parts from that watch to the alarm.

The in-control ARL of each setting comes from Monte Carlo on the charts themselves
(``spc.cusum_arl``, ``spc.ewma_arl``, zero state, normal independent observations); the two
charts run side by side, and their combined ARL is approximated by 1 / (1/ARL_cusum +
1/ARL_ewma), which treats their false signals as independent (slightly pessimistic, as they are
positively correlated). The recommendation is the setting with combined ARL ≥ the target (one
false watch per ``target_parts`` parts per seam by default 500) that caught most drift episodes,
then earliest, then with fewest unconfirmed watches.

The part's CTWD band and penetration margin are backtested the same way (:func:`backtest_limits`):
for every pairing of :data:`BAND_GRID_MM` and :data:`MARGIN_GRID_MM` a watch is raised on a valid
seam when |CTWD − nominal| > band or minimum ≤ penetration < minimum + margin, and the same counts
are taken, tip runs included. Their false-watch rate is empirical only: unconfirmed watches per
valid part, on the worst seam position. The recommended pair has that rate ≤ 1/``target_parts``
and caught most episodes, then earliest, then had fewest unconfirmed watches, then the widest
band and smallest margin.

A history is too short when any seam position has fewer than ``baseline_parts`` +
:data:`MIN_BACKTEST_PARTS` valid parts.
"""

from __future__ import annotations

import math
import re
import shutil
from dataclasses import dataclass, replace
from functools import lru_cache
from pathlib import Path

import numpy as np
import polars as pl

from monitor import spc
from monitor.config import DriftSettings, Part, load_part
from monitor.drift import drift_frame
from monitor.toml_edit import toml_value

__all__ = ["MIN_BACKTEST_PARTS", "CUSUM_GRID", "EWMA_GRID", "BAND_GRID_MM", "MARGIN_GRID_MM", "HistoryTooShort",
           "LimitSettings", "TuneResult", "backtest", "backtest_limits", "history_length", "tune_part",
           "write_drift_table", "write_limits", "plot_tradeoff"]

#: Parts beyond the baseline window a backtest needs, per seam position.
MIN_BACKTEST_PARTS = 50
#: Candidate (k, h) of the tabular CUSUM [σ units].
CUSUM_GRID = ((0.5, 4.0), (0.5, 5.0), (0.5, 6.0), (0.75, 3.5), (0.75, 4.5), (1.0, 3.0), (1.0, 4.0))
#: Candidate (λ, L) of the EWMA chart.
EWMA_GRID = ((0.05, 2.615), (0.10, 2.814), (0.10, 3.0), (0.20, 2.962), (0.20, 3.2))
#: Candidate CTWD bands [mm]: watch when |CTWD − nominal| > band.
BAND_GRID_MM = (1.5, 2.0, 2.5, 3.0, 4.0)
#: Candidate penetration margins [mm]: watch when minimum ≤ penetration < minimum + margin.
MARGIN_GRID_MM = (0.0, 0.05, 0.1, 0.2)


class HistoryTooShort(ValueError):
    """The history cannot support a backtest; the message says how much more is needed."""


@dataclass(frozen=True)
class LimitSettings:
    """Part-level watch limits, SI: CTWD band [m] and penetration margin [m]."""

    ctwd_band: float
    penetration_margin: float


@dataclass(frozen=True)
class TuneResult:
    table: pl.DataFrame  # one row a candidate
    recommended: DriftSettings | None
    parts_per_seam: int
    target_parts: float
    note: str
    limits: pl.DataFrame | None = None  # one row a (band, margin) candidate
    recommended_limits: LimitSettings | None = None


@lru_cache(maxsize=256)
def _cusum_arl0(k: float, h: float) -> float:
    return spc.cusum_arl(k, h, 0.0, n_runs=1500, max_len=50_000, rng=np.random.default_rng(11)).arl


@lru_cache(maxsize=256)
def _ewma_arl0(lam: float, L: float) -> float:
    return spc.ewma_arl(lam, L, 0.0, n_runs=1500, max_len=50_000, rng=np.random.default_rng(12)).arl


def combined_arl(arl_a: float, arl_b: float) -> float:
    """ARL of two charts side by side, false signals taken as independent: 1/(1/a + 1/b)."""
    return 1.0 / (1.0 / arl_a + 1.0 / arl_b)


def history_length(hist: pl.DataFrame) -> tuple[int, int]:
    """(fewest valid parts over the seam positions, number of distinct days) of one part's history."""
    if hist.height == 0:
        return 0, 0
    valid = hist.filter(pl.col("status") != "invalid")
    per_seam = valid.group_by("seam").agg(pl.coalesce("serial", "source").n_unique().alias("n"))
    days = hist.select(pl.col("start").dt.date().n_unique()).item() if "start" in hist.columns else 0
    return (int(per_seam.get_column("n").min()) if per_seam.height else 0), int(days)


def _score(judged: pl.DataFrame) -> dict[str, float]:
    """Backtest counts of one candidate, summed over seam positions."""
    df = judged.sort(["seam", "drift_index"]).with_columns(
        pl.col("tip_reset").cast(pl.Int32).cum_sum().over("seam").alias("_run"),
        (pl.col("status") == "alarm").alias("_alarm"),
    )
    df = df.with_columns(
        (pl.col("drift_signal") & ~pl.col("drift_signal").shift(1, fill_value=False).over("seam")).alias("_start"),
    )
    runs = df.group_by(["seam", "_run"]).agg(
        pl.col("drift_index").filter(pl.col("_alarm")).min().alias("first_alarm"),
        pl.col("drift_index").filter(pl.col("_start")).alias("starts"),
    )
    watches = unconfirmed = episodes = caught = 0
    leads: list[float] = []
    for r in runs.iter_rows(named=True):  # one row a (seam, tip run): small
        starts = np.asarray(r["starts"], dtype=float)
        watches += starts.size
        fa = r["first_alarm"]
        if fa is None:
            unconfirmed += starts.size
            continue
        episodes += 1  # watches after the first alarm of the run are confirmed by it
        before = starts[starts <= fa]
        if before.size:
            caught += 1
            leads.append(float(fa - before.min()))
    n_parts = int(df.filter(pl.col("status") != "invalid").height)
    return {"watches": watches, "unconfirmed": unconfirmed, "episodes": episodes, "caught": caught,
            "lead_parts": float(np.mean(leads)) if leads else float("nan"),
            "unconfirmed_per_500": 500.0 * unconfirmed / n_parts if n_parts else float("nan")}


def backtest(hist: pl.DataFrame, base: DriftSettings, grid_cusum=None, grid_ewma=None) -> pl.DataFrame:
    """One row per candidate: its settings, backtest counts on ``hist`` and in-control ARLs.

    ``grid_cusum``: (k, h) pairs, default :data:`CUSUM_GRID`; ``grid_ewma``: (λ, L) pairs,
    default :data:`EWMA_GRID`; every pairing of the two is a candidate.
    """
    grid_cusum = CUSUM_GRID if grid_cusum is None else grid_cusum
    grid_ewma = EWMA_GRID if grid_ewma is None else grid_ewma
    rows = []
    for k, h in grid_cusum:
        for lam, L in grid_ewma:
            s = replace(base, cusum_k=k, cusum_h=h, ewma_lambda=lam, ewma_l=L)
            judged = drift_frame(hist, lambda _p, s=s: s)
            arl_c, arl_e = _cusum_arl0(k, h), _ewma_arl0(lam, L)
            rows.append({"cusum_k": k, "cusum_h": h, "ewma_lambda": lam, "ewma_l": L, **_score(judged),
                         "arl0_cusum": arl_c, "arl0_ewma": arl_e, "arl0_combined": combined_arl(arl_c, arl_e)})
    return pl.DataFrame(rows)


def backtest_limits(hist: pl.DataFrame, base: DriftSettings, bands_mm=None, margins_mm=None,
                    target_parts: float = 500.0) -> pl.DataFrame:
    """One row per (CTWD band [mm], penetration margin [mm]) candidate with its backtest counts on ``hist``.

    ``hist`` needs ``ctwd_mm``, ``ctwd_nominal_mm``, ``penetration_mm``, ``min_penetration_mm``,
    ``status``, ``seam`` and what :func:`monitor.drift.drift_frame` needs (tip runs come from it;
    the chart settings ``base`` do not change them). ``false_per_part``: unconfirmed watches per
    valid part on the worst seam position; ``meets_target``: that rate ≤ 1/``target_parts``.
    """
    bands_mm = BAND_GRID_MM if bands_mm is None else bands_mm
    margins_mm = MARGIN_GRID_MM if margins_mm is None else margins_mm
    judged = drift_frame(hist, lambda _p: base)
    valid = pl.col("status") != "invalid"
    dev = (pl.col("ctwd_mm") - pl.col("ctwd_nominal_mm")).abs()
    pen, pmin = pl.col("penetration_mm"), pl.col("min_penetration_mm")
    seams = judged.get_column("seam").unique().sort().to_list()
    rows = []
    for band in bands_mm:
        for margin in margins_mm:
            sig = (valid & ((dev > band) | ((pen >= pmin) & (pen < pmin + margin)))).fill_null(False)
            j = judged.with_columns(sig.alias("drift_signal"))
            per_seam = [_score(j.filter(pl.col("seam") == s)) for s in seams]
            tot = _score(j)
            worst = max((d["unconfirmed_per_500"] for d in per_seam if d["unconfirmed_per_500"] == d["unconfirmed_per_500"]),
                        default=float("nan")) / 500.0
            rows.append({"band_mm": float(band), "margin_mm": float(margin), **tot, "false_per_part": worst,
                         "meets_target": bool(worst <= 1.0 / target_parts)})
    return pl.DataFrame(rows)


def _recommend_limits(limits: pl.DataFrame) -> LimitSettings | None:
    ok = limits.filter(pl.col("meets_target")).sort(
        ["caught", "lead_parts", "unconfirmed", "band_mm", "margin_mm"],
        descending=[True, True, False, True, False], nulls_last=True)
    if not ok.height:
        return None
    r = ok.row(0, named=True)
    return LimitSettings(ctwd_band=r["band_mm"] * 1e-3, penetration_margin=r["margin_mm"] * 1e-3)


def tune_part(hist: pl.DataFrame, part: Part, target_parts: float = 500.0, grid_cusum=None,
              grid_ewma=None, bands_mm=None, margins_mm=None) -> TuneResult:
    """Backtest a part's history and recommend settings; raises HistoryTooShort with the shortfall."""
    base = part.drift
    need = base.baseline_parts + MIN_BACKTEST_PARTS
    n, days = history_length(hist)
    if n < need:
        per_day = n / days if days else 0
        more = need - n
        nights = f", about {math.ceil(more / per_day)} more night(s) at the recent {per_day:.0f} parts a night" \
            if per_day > 0 else ""
        raise HistoryTooShort(
            f'history of part "{part.name}" has {n} valid parts on its shortest seam position'
            f"{f' over {days} day(s)' if days else ''}; tuning needs at least {need} "
            f"({base.baseline_parts} for the baseline + {MIN_BACKTEST_PARTS} to backtest): {more} more parts{nights}")
    table = backtest(hist, base, grid_cusum, grid_ewma).with_columns(
        (pl.col("arl0_combined") >= target_parts).alias("meets_target"))
    ok = table.filter(pl.col("meets_target")).sort(
        ["caught", "lead_parts", "unconfirmed", "arl0_combined"], descending=[True, True, False, True], nulls_last=True)
    rec = None
    if ok.height:
        r = ok.row(0, named=True)
        rec = replace(base, cusum_k=r["cusum_k"], cusum_h=r["cusum_h"], ewma_lambda=r["ewma_lambda"], ewma_l=r["ewma_l"])
    note = (f"{n} valid parts on the shortest seam position over {days} day(s). ARLs are from Monte Carlo on the "
            f"charts; the history has {'enough' if n >= target_parts else 'too few'} parts to confirm a rate of one "
            f"false watch per {target_parts:.0f} parts by itself.")
    limits = backtest_limits(hist, base, bands_mm, margins_mm, target_parts)
    return TuneResult(table, rec, n, target_parts, note, limits, _recommend_limits(limits))


def _plot_limits(ax, result: TuneResult) -> None:
    """Mean warning against CTWD band, one line a penetration margin; refused points hollow."""
    lim = result.limits
    for margin in lim.get_column("margin_mm").unique().sort().to_list():
        d = lim.filter(pl.col("margin_mm") == margin).sort("band_mm")
        lead = d.get_column("lead_parts").fill_null(0).fill_nan(0).to_numpy()
        band = d.get_column("band_mm").to_numpy()
        meets = d.get_column("meets_target").to_numpy()
        line, = ax.plot(band, lead, marker="", lw=1, label=f"margin {margin:g} mm")
        ax.scatter(band[meets], lead[meets], color=line.get_color())
        ax.scatter(band[~meets], lead[~meets], facecolors="none", edgecolors=line.get_color())
    rl = result.recommended_limits
    if rl is not None:
        r = lim.filter((pl.col("band_mm") == round(rl.ctwd_band * 1e3, 6))
                       & (pl.col("margin_mm") == round(rl.penetration_margin * 1e3, 6))).row(0, named=True)
        ax.scatter([r["band_mm"]], [r["lead_parts"] or 0], s=160, facecolors="none", edgecolors="tab:red",
                   linewidths=2, label="recommended")
    ax.set_xlabel("CTWD band [mm] (hollow: over the false-watch target)")
    ax.set_ylabel("mean warning before the alarm [parts]")
    ax.set_title("CTWD band and penetration margin")
    ax.legend(loc="best", fontsize=8)


def plot_tradeoff(result: TuneResult, path: Path, title: str) -> None:
    """Scatter of in-control ARL against mean detection lead, recommended setting marked (PNG)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    t = result.table
    lim = result.limits
    if lim is not None and lim.height:
        fig, (ax, ax2) = plt.subplots(1, 2, figsize=(12, 4.5), dpi=110)
        _plot_limits(ax2, result)
    else:
        fig, ax = plt.subplots(figsize=(7, 4.5), dpi=110)
    lead = t.get_column("lead_parts").fill_null(0).fill_nan(0).to_numpy()
    arl = t.get_column("arl0_combined").to_numpy()
    meets = t.get_column("meets_target").to_numpy()
    ax.scatter(arl[~meets], lead[~meets], c="0.6", label="below target ARL")
    ax.scatter(arl[meets], lead[meets], c="tab:blue", label="meets target ARL")
    if result.recommended is not None:
        r = result.recommended
        sel = t.filter((pl.col("cusum_k") == r.cusum_k) & (pl.col("cusum_h") == r.cusum_h)
                       & (pl.col("ewma_lambda") == r.ewma_lambda) & (pl.col("ewma_l") == r.ewma_l)).row(0, named=True)
        ax.scatter([sel["arl0_combined"]], [sel["lead_parts"] or 0], s=160, facecolors="none", edgecolors="tab:red",
                   linewidths=2, label="recommended")
    ax.axvline(result.target_parts, color="tab:red", ls="--", lw=1)
    ax.set_xscale("log")
    ax.set_xlabel("in-control ARL, CUSUM and EWMA together [parts per false watch, per seam]")
    ax.set_ylabel("mean warning before the alarm [parts]")
    ax.set_title(title)
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path)
    plt.close(fig)


_HEADER = re.compile(r"^\s*\[\s*drift\s*\]\s*(#.*)?$")
_ANY_HEADER = re.compile(r"^\s*\[")


def _fmt(v: float | int) -> str:
    return str(v) if isinstance(v, int) else f"{v:g}"


def write_drift_table(part_path: Path, settings: DriftSettings, wires: dict) -> Path:
    """Set the [drift] keys of a part file by a textual edit; returns the backup's path.

    Only the lines of the [drift] table are touched (keys replaced in place, trailing comments
    kept; missing keys added under the header; the table appended if absent); every other
    line, comment and blank stays as it was. The old file is kept as ``<name>.toml.bak``, and
    the new one is parsed before it replaces the old; on any problem the old one stays.
    """
    text = part_path.read_text(encoding="utf-8")
    lines = text.splitlines(keepends=True)
    values = {"ewma_lambda": settings.ewma_lambda, "ewma_l": settings.ewma_l, "cusum_k": settings.cusum_k,
              "cusum_h": settings.cusum_h, "baseline_parts": settings.baseline_parts}
    start = next((i for i, ln in enumerate(lines) if _HEADER.match(ln)), None)
    if start is None:
        tail = "" if text.endswith("\n") or not text else "\n"
        block = "\n[drift]                       # set by ctwd tune\n" + "".join(
            f"{k} = {_fmt(v)}\n" for k, v in values.items())
        new = text + tail + block
    else:
        end = next((j for j in range(start + 1, len(lines)) if _ANY_HEADER.match(lines[j])), len(lines))
        seen = set()
        for j in range(start + 1, end):
            m = re.match(r"^(\s*)([A-Za-z_]+)(\s*=\s*)([^#\n]*?)(\s*#.*)?(\r?\n)?$", lines[j])
            if m and m.group(2) in values:
                key = m.group(2)
                seen.add(key)
                lines[j] = f"{m.group(1)}{key}{m.group(3)}{_fmt(values[key])}{m.group(5) or ''}{m.group(6) or ''}"
        missing = "".join(f"{k} = {_fmt(v)}\n" for k, v in values.items() if k not in seen)
        lines.insert(start + 1, missing) if missing else None
        new = "".join(lines)
    return _replace_checked(part_path, new, wires)


def _replace_checked(part_path: Path, new: str, wires: dict) -> Path:
    """Replace a part file by ``new`` only if it still loads; keep the old one as ``.bak``."""
    backup = part_path.with_name(part_path.name + ".bak")
    tmp = part_path.with_name(f".{part_path.name}.tune.tmp")
    tmp.write_text(new, encoding="utf-8")
    try:
        load_part(tmp, wires)  # raises ConfigError if the edit broke anything
        shutil.copy2(part_path, backup)
        tmp.replace(part_path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return backup


_TOP_KEY = re.compile(r"^(\s*)([A-Za-z_]+)(\s*=\s*)(\"[^\"\n]*\"|'[^'\n]*'|[^#\n]*?)(\s*#.*)?(\r?\n)?$")


def write_limits(part_path: Path, limits: LimitSettings, wires: dict) -> Path:
    """Set the top-level ``ctwd_band`` and ``penetration_margin`` of a part file by a textual edit.

    Only those two ``key = value`` lines before the first table header change (trailing comments
    kept); a missing key is added after the last top-level key line. ``[[seam]]`` entries that
    override either key are left alone. The old file is kept as ``<name>.toml.bak``; the new one is
    parsed before it replaces the old, and on any problem the old one stays. Returns the backup's path.
    """
    text = part_path.read_text(encoding="utf-8")
    nl = "\r\n" if "\r\n" in text else "\n"
    lines = text.splitlines(keepends=True)
    values = {"ctwd_band": toml_value(f"{limits.ctwd_band * 1e3:g} mm"),
              "penetration_margin": toml_value(f"{limits.penetration_margin * 1e3:g} mm")}
    end = next((j for j, ln in enumerate(lines) if _ANY_HEADER.match(ln)), len(lines))
    seen: set[str] = set()
    last_key = -1
    for j in range(end):
        m = _TOP_KEY.match(lines[j])
        if not m or lines[j].lstrip().startswith("#"):
            continue
        last_key = j
        key = m.group(2)
        if key in values:
            seen.add(key)
            lines[j] = f"{m.group(1)}{key}{m.group(3)}{values[key]}{m.group(5) or ''}{m.group(6) or ''}"
    missing = [f"{k} = {v}{nl}" for k, v in values.items() if k not in seen]
    if missing:
        if last_key >= 0 and not lines[last_key].endswith("\n"):
            lines[last_key] += nl
        lines[last_key + 1:last_key + 1] = missing
    new = "".join(lines)
    return _replace_checked(part_path, new, wires)

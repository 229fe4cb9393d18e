"""The morning review page: summary.html, one self-contained file (inline SVG, inline CSS/JS).

Everything that comes from data (part, serial, seam, reason, file names) reaches the page through
jinja2 with autoescape; matplotlib draws only fixed labels and numbers, and its SVG text is drawn
as paths, so nothing from a log can become markup.
"""

from __future__ import annotations

import io
import re
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import jinja2
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import polars as pl  # noqa: E402
from matplotlib.patches import Rectangle  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

__all__ = ["render_page", "ctwd_plot_svg", "penetration_plot_svg", "trace_plot_svgs", "load_history",
           "MAX_TRACES", "STYLE"]

#: Traces drawn at most (flagged seams only); the rest are listed as left out.
MAX_TRACES = 16

#: status -> (marker, colour, filled). Shapes and fills differ, so B/W print still tells them apart.
STYLE = {
    "ok": ("o", "#3c6e91", False),
    "watch": ("^", "#a86f00", True),
    "alarm": ("X", "#9c1c1c", True),
    "invalid": ("s", "#6b6b6b", False),
}
_ORDER = {"alarm": 0, "watch": 1, "invalid": 2, "ok": 3}
_TIP_COLUMNS = ("tip_change", "tip_changed")
_OK_BARS_MAX = 150  # ok seams in one panel above which their interval bars are left out
_COMMENT = re.compile(r"<!--.*?-->", re.DOTALL)

matplotlib.rcParams.update({"svg.fonttype": "path", "font.size": 8, "axes.titlesize": 9, "svg.hashsalt": "ctwd"})


def _env() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.PackageLoader("monitor", "templates"),
        autoescape=jinja2.select_autoescape(default=True, default_for_string=True),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True, lstrip_blocks=True,
    )


def _svg(fig: Any, close: bool = True) -> str:
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    if close:
        plt.close(fig)
    s = buf.getvalue()
    return _COMMENT.sub("", s[s.find("<svg"):])


def _tight_layout(fig: Any, rect: tuple[float, float, float, float]) -> None:
    """``fig.tight_layout``, once. Afterwards the figure is left with no layout engine: matplotlib
    would otherwise keep a placeholder one, and saving a figure that has one draws it a second
    time, without output, before drawing it for the file (a third of a night plot's time)."""
    fig.tight_layout(rect=rect)
    fig.set_layout_engine(None)


def _seam_order(names: list[str]) -> list[str]:
    return sorted(names, key=lambda s: (len(s), s))


def _x(df: pl.DataFrame, use_time: bool) -> list:
    return df.get_column("start").to_list() if use_time else df.get_column("order").to_list()


def _status_points(ax: Any, d: pl.DataFrame, x: str, y: str, lo: str | None, hi: str | None, use_time: bool) -> None:
    for status, (m, colour, filled) in STYLE.items():
        sel = d.filter((pl.col("status") == status) & pl.col(y).is_not_null())
        if sel.height == 0:
            continue
        xs = _x(sel, use_time) if x == "_time" else sel.get_column(x).to_list()
        ys = sel.get_column(y).to_numpy()
        yerr = None
        # interval bars for every flagged seam; for ok seams only on small nights (bars are most of an SVG's weight)
        if lo is not None and hi is not None and (status != "ok" or sel.height <= _OK_BARS_MAX):
            yerr = [np.clip(ys - sel.get_column(lo).to_numpy(), 0, None), np.clip(sel.get_column(hi).to_numpy() - ys, 0, None)]
        ax.errorbar(xs, ys, yerr=yerr, fmt=m, ms=5 if status != "ok" else 3.5, color=colour,
                    mfc=colour if filled else "white", elinewidth=0.5, capsize=0, lw=0, label=status, zorder=3)


def ctwd_plot_svg(part_seams: pl.DataFrame, part: str = "", history: pl.DataFrame | None = None) -> str:
    """CTWD over the night for one part, one panel a seam position, as an SVG string.

    Draws the nominal CTWD (solid line), the allowed band (grey), the drift-budget CTWD limit
    (``limit_ctwd_mm``, dashed, when the column exists), tip changes (dotted verticals, when a
    ``tip_change``/``tip_changed`` column says so) and earlier nights' seams (``history``, small
    grey dots, when given). ``part`` is not drawn (the page's caption names it).
    """
    df = part_seams.sort(["start", "start_s"], nulls_last=True).with_row_index("order")
    use_time = df.get_column("start").null_count() == 0
    seams = _seam_order(df.get_column("seam").drop_nulls().unique().to_list())
    tip_col = next((c for c in _TIP_COLUMNS if c in df.columns), None)
    fig, axes = plt.subplots(len(seams), 1, figsize=(7.6, 1.55 * len(seams) + 0.75), sharex=True, squeeze=False)
    for ax, seam in zip(axes[:, 0], seams):
        d = df.filter(pl.col("seam") == seam)
        nom = d.get_column("ctwd_nominal_mm").drop_nulls()
        band = d.get_column("ctwd_band_mm").drop_nulls()
        if nom.len():
            n0, b0 = float(nom[-1]), float(band[-1]) if band.len() else 0.0
            ax.axhspan(n0 - b0, n0 + b0, color="0.88", zorder=0, label=f"allowed band (±{b0:.1f} mm)")
            ax.axhline(n0, color="black", lw=0.9, ls="-", label="nominal", zorder=1)
        if "limit_ctwd_mm" in d.columns:
            lim = d.get_column("limit_ctwd_mm").drop_nulls()
            if lim.len():
                ax.axhline(float(lim[-1]), color="black", lw=1.0, ls="--", label="CTWD limit (drift budget)", zorder=1)
        if history is not None and use_time and history.height:
            h = history.filter(pl.col("seam") == seam)
            if h.height:
                ax.plot(h.get_column("start").to_list(), h.get_column("ctwd_mm").to_list(), ls="none", marker=".",
                        ms=2.5, color="0.55", label="earlier nights", zorder=2)
        if tip_col is not None:
            tips = d.filter(pl.col(tip_col).cast(pl.Boolean, strict=False).fill_null(False))
            for i, xv in enumerate(_x(tips, use_time)):
                ax.axvline(xv, color="black", lw=0.8, ls=":", label="tip change" if i == 0 else None, zorder=1)
        ax.plot(_x(d, use_time), d.get_column("ctwd_mm").to_list(), color="0.45", lw=0.6, zorder=2)
        _status_points(ax, d, "_time", "ctwd_mm", "ctwd_low_mm", "ctwd_high_mm", use_time)
        ax.set_ylabel("CTWD [mm]")
        ax.grid(True, lw=0.3, color="0.8")
        ax.set_title(f"seam position {len(seams) and seams.index(seam) + 1} of {len(seams)}", loc="left", fontsize=8)
    fig.suptitle("Effective CTWD per seam over the night (bars: 95 % interval)", fontsize=9)
    axes[-1, 0].set_xlabel("seam start [UTC]" if use_time else "seam order in the night")
    if use_time:
        fig.autofmt_xdate()
    seen: dict[str, object] = {}
    for ax in axes[:, 0]:
        for h_, lab in zip(*ax.get_legend_handles_labels()):
            seen.setdefault(lab, h_)
    fig.legend(list(seen.values()), list(seen.keys()), loc="lower center", ncol=min(len(seen), 4), fontsize=7.5,
               frameon=False)
    _tight_layout(fig, (0, 0.05 + 0.04 * (len(seen) > 4), 1, 1))
    return _svg(fig)


def penetration_plot_svg(part_seams: pl.DataFrame) -> str:
    """Estimated penetration against CTWD, one small panel a seam position, with the minimum."""
    seams = _seam_order(part_seams.get_column("seam").drop_nulls().unique().to_list())
    n = len(seams)
    cols = min(n, 4)
    rows = -(-n // cols)
    fig, axes = plt.subplots(rows, cols, figsize=(1.95 * cols + 0.6, 1.9 * rows + 0.5), squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k >= n:
            ax.axis("off")
            continue
        d = part_seams.filter(pl.col("seam") == seams[k])
        mins = d.get_column("min_penetration_mm").drop_nulls()
        if mins.len():
            ax.axhline(float(mins[-1]), color="black", lw=1.0, ls="--", label="minimum penetration")
        nom = d.get_column("ctwd_nominal_mm").drop_nulls()
        if nom.len():
            ax.axvline(float(nom[-1]), color="black", lw=0.7, ls=":", label="nominal CTWD")
        _status_points(ax, d, "ctwd_mm", "penetration_mm", "penetration_low_mm", "penetration_high_mm", False)
        ax.set_title(f"seam position {k + 1}", fontsize=8)
        ax.set_xlabel("CTWD [mm]")
        if k % cols == 0:
            ax.set_ylabel("penetration [mm]")
        ax.grid(True, lw=0.3, color="0.8")
    seen: dict[str, object] = {}
    for ax in axes.flat:
        for h_, lab in zip(*ax.get_legend_handles_labels()):
            seen.setdefault(lab, h_)
    fig.legend(list(seen.values()), list(seen.keys()), loc="lower center", ncol=min(len(seen), 6), fontsize=7, frameon=False)
    _tight_layout(fig, (0, 0.09 if rows == 1 else 0.05, 1, 1))
    return _svg(fig)


_TRACE_AXES = (("current", "current [A]", 1.0, "-"), ("voltage", "voltage [V]", 1.0, "--"),
               ("wire_feed", "WFS [m/min]", 60.0, "-."))


def trace_plot_svgs(flagged: pl.DataFrame, cfg: Any, max_traces: int = MAX_TRACES,
                    trace_points: int = 240) -> tuple[list[dict], int]:
    """Trace plots of flagged seams (current, voltage, WFS; trimmed windows shaded).

    Returns ``(items, left_out)``: one dict a drawn seam (``row``: the seam's published row,
    ``svg`` or ``note`` when its file cannot be re-read) and how many flagged seams were not
    drawn because of ``max_traces``. One matplotlib figure is reused for every trace.
    """
    from ingest.reader import IngestError
    from ingest.trace import read_seam_traces

    # alarms first, then invalid seams (a dropout is what a trace shows best), then watch
    rank = pl.col("status").replace_strict({"alarm": 0, "invalid": 1, "watch": 2}, default=3, return_dtype=pl.Int8)
    rows = flagged.with_row_index("_i").sort([rank, "_i"]).drop("_i").head(max_traces).to_dicts()
    left_out = max(flagged.height - max_traces, 0)
    items: list[dict] = []
    if not rows:
        return items, left_out
    fig, axes = plt.subplots(3, 1, figsize=(7.6, 3.4), sharex=True)
    fig.subplots_adjust(left=0.09, right=0.985, top=0.93, bottom=0.12, hspace=0.1)  # fixed: tight_layout per trace is slow
    # One figure for every trace: axes, ticks and artists are made once; each trace only moves
    # them (new artists per trace cost more than drawing them).
    lines, bands, bads, marks, spans = [], [], [], [], []
    for ax, (_ch, label, _scale, ls) in zip(axes, _TRACE_AXES):
        spans.append([ax.add_artist(Rectangle((0.0, 0.0), 0.0, 1.0, transform=ax.get_xaxis_transform(),
                                              facecolor="0.85", edgecolor="0.4", hatch="////", lw=0, zorder=0))
                      for _ in range(2)])  # the trimmed start and end of the seam
        bands.append(ax.fill_between([0.0, 0.0], [0.0, 0.0], [0.0, 0.0], color="0.75", lw=0, zorder=1))
        lines.append(ax.plot([], [], color="black", lw=0.8, ls=ls, zorder=2)[0])
        marks.append([ax.axvline(0.0, color="0.3", lw=0.6, ls=":") for _ in range(2)])  # arc start and end
        bads.append(ax.plot([], [], ls="none", marker="|", ms=6, color="#9c1c1c", zorder=3)[0])
        ax.set_ylabel(label)
        ax.yaxis.set_major_locator(MaxNLocator(3))  # few ticks: axis drawing is most of a trace's cost
        ax.xaxis.set_major_locator(MaxNLocator(5))
        # fixed label places (the margins are fixed too): matplotlib then skips measuring every
        # tick label of the three axes to place them, a sixth of each trace's drawing time
        ax.yaxis.set_label_coords(-0.075, 0.5)
    axes[-1].set_xlabel("time from arc start [s]")
    axes[-1].xaxis.set_label_coords(0.5, -0.32)
    # one read a source file for all its flagged seams (a long file is scanned once, not per seam)
    pre: dict[int, Any] = {}
    if cfg is not None:
        by_source: dict[str, list[int]] = {}
        for k, r in enumerate(rows):
            by_source.setdefault(str(r["source"]), []).append(k)
        for source, ks in by_source.items():
            try:
                got = read_seam_traces(Path(source), cfg.cell.export, cfg.cell.arc,
                                       [(rows[k].get("seam"), rows[k].get("serial"), float(rows[k]["start_s"]),
                                         float(rows[k]["arc_time_s"])) for k in ks], max_points=trace_points)
                pre.update(zip(ks, got))
            except (IngestError, OSError, TypeError, ValueError) as exc:
                pre.update((k, exc) for k in ks)
    try:
        for k_row, r in enumerate(rows):
            item = {"row": r, "svg": None, "note": None}
            items.append(item)
            if cfg is None:
                item["note"] = "trace not drawn: the scan's config folder is not available"
                continue
            tr = pre.get(k_row)
            if isinstance(tr, Exception):
                item["note"] = f"trace not drawn: source file is gone or unreadable ({tr})"
                continue
            if tr is None:
                item["note"] = "trace not drawn: no samples in the seam's window (file changed since the scan?)"
                continue
            inside = (tr.t >= 0) & (tr.t <= tr.arc_time_s)
            for k, (ax, (ch, _label, scale, _ls)) in enumerate(zip(axes, _TRACE_AXES)):
                for span, window in zip(spans[k], (*tr.trimmed, None, None)):
                    span.set_visible(window is not None)
                    if window is not None:
                        span.set_x(window[0])
                        span.set_width(window[1] - window[0])
                for mark, at in zip(marks[k], (0.0, tr.arc_time_s)):
                    mark.set_xdata([at, at])
                bands[k].set_visible(tr.decimated)
                if tr.decimated:
                    bands[k].set_data(tr.t, tr.lo[ch] * scale, tr.hi[ch] * scale)
                lines[k].set_data(tr.t, tr.mean[ch] * scale)
                bad = (~np.isfinite(tr.mean[ch]) | (tr.mean[ch] <= 0)) & inside
                bads[k].set_data(tr.t[bad], np.zeros(int(np.sum(bad))))
                ax.relim()
                ax.autoscale_view()
            item["svg"] = _svg(fig, close=False)
            item["points"] = len(tr.t)
            item["samples"] = tr.n_samples
    finally:
        plt.close(fig)
    return items, left_out


def load_history(history_dir: Path | None, tonight: pl.DataFrame) -> tuple[pl.DataFrame | None, str | None]:
    """Earlier nights' seams (part, seam, start, ctwd_mm) for the CTWD charts, and a note.

    Uses ``monitor.history.load_history(dir)`` when that module exists, else every
    ``seams.parquet`` under the folder. Never raises: a problem becomes the note.
    """
    if history_dir is None:
        return None, None
    history_dir = Path(history_dir)
    if not history_dir.is_dir():
        return None, f"history folder {history_dir} not found; history left out"
    frames: list[pl.DataFrame] = []
    try:
        try:
            from monitor import history as hist  # type: ignore[attr-defined]
        except ImportError:
            hist = None
        loader = getattr(hist, "load_history", None) if hist is not None else None
        got = loader(history_dir) if callable(loader) else None
        if isinstance(got, pl.LazyFrame):
            got = got.collect()
        if isinstance(got, pl.DataFrame):
            frames = [got]
        else:
            frames = [pl.read_parquet(p) for p in sorted(history_dir.rglob("seams.parquet"))]
        need = ["part", "seam", "start", "ctwd_mm"]
        frames = [f.select(need) for f in frames if all(c in f.columns for c in need)]
        if not frames:
            return None, f"no earlier results in {history_dir}"
        h = pl.concat(frames, how="vertical_relaxed").drop_nulls(["start", "ctwd_mm"])
        if tonight.height and tonight.get_column("start").null_count() < tonight.height:
            h = h.filter(pl.col("start") < tonight.get_column("start").min())
        return h, f"{h.height} seams from earlier nights ({history_dir})"
    except Exception as exc:  # noqa: BLE001 - the page must render whatever the history holds
        return None, f"history in {history_dir} could not be read ({type(exc).__name__}); left out"


def _hint(part_rows: list[dict]) -> str:
    """A plain-words pointer to what to check at the cell, from the per-seam-position summary."""
    off = [r for r in part_rows if r["alarm"] + r["watch"] > 0]
    n_invalid = sum(r["invalid"] for r in part_rows)
    extra = (f"; {n_invalid} seam{'s' if n_invalid != 1 else ''} could not be judged: check the logger and "
             "its sense leads (reasons in the tables)") if n_invalid else ""
    if not off:
        return "CTWD within its band on every seam position" + extra
    signs = {1 if (r["dev_recent_mm"] or 0) > 0 else -1 for r in off}
    if len(off) >= 2 and len(off) >= 0.5 * len(part_rows) and len(signs) == 1:
        if signs == {1}:
            return ("CTWD long on most seam positions: points at the torch (worn or recessed contact tip, wire "
                    "cast) rather than the path; change the contact tip, then check the TCP" + extra)
        return "CTWD short on most seam positions: check the TCP / torch neck and the fixture height" + extra
    names = ", ".join(r["seam"] or "?" for r in off)
    return f"only some seam positions off ({names}): check the robot path / TCP and fixturing of those seams" + extra


def _position_summary(seams: pl.DataFrame) -> list[dict]:
    if seams.height == 0:
        return []
    s = seams.sort(["start", "start_s"], nulls_last=True)
    dev = pl.col("ctwd_mm") - pl.col("ctwd_nominal_mm")
    g = s.group_by("part", "seam", maintain_order=True).agg(
        pl.len().alias("seams"),
        (pl.col("status") == "alarm").sum().alias("alarm"),
        (pl.col("status") == "watch").sum().alias("watch"),
        (pl.col("status") == "invalid").sum().alias("invalid"),
        pl.col("ctwd_nominal_mm").drop_nulls().last().alias("nominal_mm"),
        pl.col("ctwd_band_mm").drop_nulls().last().alias("band_mm"),
        dev.median().alias("dev_median_mm"),
        dev.drop_nulls().tail(5).mean().alias("dev_recent_mm"),
        pl.col("penetration_mm").min().alias("pen_min_mm"),
        pl.col("min_penetration_mm").drop_nulls().last().alias("min_pen_mm"),
        pl.col("arc_energy_kj_mm").mean().alias("arc_energy_mean"),
        pl.col("arc_energy_kj_mm").min().alias("arc_energy_min"),
        pl.col("arc_energy_kj_mm").max().alias("arc_energy_max"),
        pl.col("wire_mass_g").sum().alias("wire_g"),
        pl.col("source").drop_nulls().map_elements(lambda p: Path(p).parent.name, return_dtype=pl.String)
        .unique().sort().str.join(", ").alias("folders"),
    )
    extra = [c for c in seams.columns if c.startswith("parts_to_limit")]
    if "limit_ctwd_mm" in seams.columns:
        extra.append("limit_ctwd_mm")
    if extra:
        last = s.group_by("part", "seam", maintain_order=True).agg([pl.col(c).drop_nulls().last() for c in extra])
        g = g.join(last, on=["part", "seam"], how="left", nulls_equal=True)
    rows = g.to_dicts()
    rows.sort(key=lambda r: (r["part"] or "", len(r["seam"] or ""), r["seam"] or ""))
    return rows


def _fmt(v: Any, spec: str = ".2f") -> str:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "—"
    if isinstance(v, int | float | np.floating | np.integer):
        return format(v, spec)
    return str(v)


def render_page(seams: pl.DataFrame, files: pl.DataFrame, run: dict, out_path: Path, *, cfg: Any = None,
                history: Path | None = None, max_traces: int = MAX_TRACES, traces: bool = True,
                charts: bool = True, files_beside: bool | None = None) -> str:
    """Render summary.html from the published seam table and files table; returns the HTML.

    ``files_beside``: whether files.csv sits next to the page (None: look; a scan passes True, as it
    publishes files.csv together with the page).

    ``cfg`` (a :class:`monitor.config.Config`) lets the page re-read flagged seams' traces; when
    None the config folder named in ``run["config_dir"]`` is tried. ``history`` is a folder of
    earlier results for the CTWD charts (optional). ``traces``/``charts`` False leave those
    plots out (tests, quick looks); the tables are always complete. ``out_path`` is where the page will be written
    (used only to make file links relative).
    """
    if cfg is None and traces and run.get("config_dir"):
        try:
            from monitor.config import load_config

            cfg = load_config(Path(run["config_dir"]))
        except Exception:  # noqa: BLE001 - a missing or changed config only costs the traces
            cfg = None
    config_note = None
    if cfg is not None and run.get("config_digest") and getattr(cfg, "digest", None) not in (None, run["config_digest"]):
        config_note = (f"the config folder now has digest {cfg.digest}, not the scan's {run['config_digest']}; "
                       "traces use today's column mapping")

    has = seams.height > 0
    counts = {s: int(seams.filter(pl.col("status") == s).height) if has else 0 for s in ("alarm", "watch", "invalid", "ok")}
    order_key = pl.col("status").replace_strict(_ORDER, default=9, return_dtype=pl.Int8)
    flagged = (seams.filter(pl.col("status").is_in(["alarm", "watch", "invalid"]))
               .sort([order_key, "part", "serial", "start", "start_s", "seam"], nulls_last=True)
               .with_row_index("n", offset=1)) if has else seams
    alarm = flagged.filter(pl.col("status") == "alarm") if has else seams
    watch = flagged.filter(pl.col("status") == "watch") if has else seams
    invalid = flagged.filter(pl.col("status") == "invalid") if has else seams

    pull = []
    if alarm.height:
        pg = alarm.group_by("part", "serial", maintain_order=True).agg(
            pl.col("seam").alias("seams"), pl.len().alias("n"),
            (pl.col("penetration_mm") - pl.col("min_penetration_mm")).min().alias("worst_margin_mm"),
            pl.col("n").alias("rows"))
        pull = pg.to_dicts()

    skipped = files.filter(pl.col("status") == "skipped").to_dicts() if files.height and "status" in files.columns else []
    parts = sorted(seams.get_column("part").drop_nulls().unique().to_list()) if has else []
    history_df, history_note = load_history(history, seams) if history is not None else (None, None)

    positions = _position_summary(seams)
    plots = []
    for p in parts:
        ps = seams.filter((pl.col("part") == p) & pl.col("ctwd_mm").is_not_null())
        if ps.height == 0:
            continue
        hp = history_df.filter(pl.col("part") == p) if history_df is not None else None
        rows = [r for r in positions if r["part"] == p]
        plots.append({
            "part": p,
            "ctwd_svg": ctwd_plot_svg(ps, p, history=hp) if charts else None,
            "pen_svg": penetration_plot_svg(ps) if charts else None,
            "positions": rows,
            "seam_names": _seam_order(ps.get_column("seam").drop_nulls().unique().to_list()),
            "hint": _hint(rows),
        })
    forecast_cols = sorted({c for c in seams.columns if c.startswith("parts_to_limit")})

    trace_items, traces_left_out = ([], 0)
    if traces and flagged.height:
        trace_items, traces_left_out = trace_plot_svgs(flagged, cfg, max_traces)
    traced = {it["row"]["n"] for it in trace_items}

    per_part = (
        seams.group_by("part").agg(
            pl.len().alias("seams"),
            pl.col("serial").n_unique().alias("serials"),
            (pl.col("status") == "alarm").sum().alias("alarm"),
            (pl.col("status") == "watch").sum().alias("watch"),
            (pl.col("status") == "invalid").sum().alias("invalid"),
            pl.col("ctwd_mm").median().alias("ctwd_median_mm"),
            pl.col("arc_energy_kj_mm").mean().alias("arc_energy_kj_mm"),
            pl.col("wire_mass_g").sum().alias("wire_mass_g"),
            (pl.col("wire_mass_g").sum() / pl.col("serial").n_unique()).alias("wire_per_serial_g"),
        ).sort("part", nulls_last=True).to_dicts()
        if has else []
    )
    out_dir = Path(out_path).parent
    if files_beside is None:
        files_beside = (out_dir / "files.csv").exists()
    files_link = "files.csv" if files_beside else None
    night = None
    if has and seams.get_column("start").null_count() < seams.height:
        a, b = seams.get_column("start").min(), seams.get_column("start").max()
        night = f"{a:%Y-%m-%d %H:%M} – {b:%Y-%m-%d %H:%M} UTC"
    return _env().get_template("summary.html.j2").render(
        run=run,
        counts=counts,
        n_seams=seams.height,
        n_parts=len(parts),
        n_serials=seams.select(pl.struct("part", "serial").n_unique()).item() if has else 0,
        pull=pull,
        alarm=alarm.to_dicts(),
        watch=watch.to_dicts(),
        invalid=invalid.to_dicts(),
        traced=traced,
        skipped=skipped,
        noted=files.filter(pl.col("note").is_not_null()).to_dicts() if "note" in files.columns else [],
        n_files=files.height,
        files_link=files_link,
        plots=plots,
        positions=positions,
        forecast_cols=forecast_cols,
        has_limit="limit_ctwd_mm" in seams.columns,
        history_note=history_note,
        config_note=config_note,
        traces=trace_items,
        traces_left_out=traces_left_out,
        max_traces=max_traces,
        per_part=per_part,
        night=night,
        generated=datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC"),
        svg_markup=lambda s: jinja2.utils.markupsafe.Markup(s),
        fmt=_fmt,
        fname=lambda p: Path(p).name if p else "—",
    )

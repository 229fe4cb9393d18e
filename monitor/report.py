"""The morning page: summary.html, self-contained (inline SVG plots, no external files)."""

from __future__ import annotations

import io
from datetime import UTC, datetime
from pathlib import Path

import jinja2
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import polars as pl  # noqa: E402

__all__ = ["render_page", "ctwd_plot_svg"]

_MARKERS = {"ok": ("o", "#1b6ca8", "none"), "watch": ("^", "#c98a00", "full"),
            "alarm": ("X", "#b3261e", "full"), "invalid": ("s", "#777777", "none")}


def _env() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.PackageLoader("monitor", "templates"),
        autoescape=jinja2.select_autoescape(default=True, default_for_string=True),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True, lstrip_blocks=True,
    )


def ctwd_plot_svg(part_seams: pl.DataFrame, part: str) -> str:
    """CTWD over the night for one part, one panel line a seam position, as an SVG string."""
    df = part_seams.sort(["start", "start_s"], nulls_last=True).with_row_index("order")
    use_time = df.get_column("start").null_count() == 0
    seams = sorted(df.get_column("seam").unique().to_list(), key=lambda s: (len(s), s))
    fig, axes = plt.subplots(len(seams), 1, figsize=(8.0, 1.9 * len(seams) + 0.6), sharex=True, squeeze=False)
    for ax, seam in zip(axes[:, 0], seams):
        d = df.filter(pl.col("seam") == seam)
        x = d.get_column("start").to_list() if use_time else d.get_column("order").to_list()
        nom = d.get_column("ctwd_nominal_mm").drop_nulls()
        band = d.get_column("ctwd_band_mm").drop_nulls()
        if nom.len():
            n0, b0 = float(nom[0]), float(band[0]) if band.len() else 0.0
            ax.axhline(n0, color="black", lw=0.8, ls="-", label="nominal")
            ax.axhspan(n0 - b0, n0 + b0, color="0.9", zorder=0, label=f"band ±{b0:.1f} mm")
        for status, (m, colour, fill) in _MARKERS.items():
            sel = d.filter(pl.col("status") == status)
            if sel.height == 0:
                continue
            xs = sel.get_column("start").to_list() if use_time else sel.get_column("order").to_list()
            ax.errorbar(xs, sel.get_column("ctwd_mm").to_list(),
                        yerr=[(sel["ctwd_mm"] - sel["ctwd_low_mm"]).to_list(), (sel["ctwd_high_mm"] - sel["ctwd_mm"]).to_list()],
                        fmt=m, ms=5, color=colour, mfc=colour if fill == "full" else "white", elinewidth=0.6,
                        lw=0, label=status)
        ax.plot(x, d.get_column("ctwd_mm").to_list(), color="0.5", lw=0.5, zorder=1)
        ax.set_ylabel(f"{seam}\nCTWD [mm]")
        ax.grid(True, lw=0.3, color="0.8")
    axes[0, 0].set_title(f"Effective CTWD by seam, part {part} (bars: 95 % interval)")
    axes[-1, 0].set_xlabel("seam start [UTC]" if use_time else "seam order in the night")
    handles, labels = axes[0, 0].get_legend_handles_labels()
    seen: dict[str, object] = {}
    for ax in axes[:, 0]:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            seen.setdefault(lab, h)
    fig.legend(list(seen.values()), list(seen.keys()), loc="lower center", ncol=len(seen), fontsize=8, frameon=False)
    fig.tight_layout(rect=(0, 0.06, 1, 1))
    buf = io.StringIO()
    fig.savefig(buf, format="svg")
    plt.close(fig)
    svg = buf.getvalue()
    return svg[svg.find("<svg"):]


def render_page(seams: pl.DataFrame, files: pl.DataFrame, run: dict, out_path: Path) -> str:
    """Render summary.html from the published seam table and files table; returns the HTML."""
    counts = {s: int(seams.filter(pl.col("status") == s).height) for s in ("alarm", "watch", "invalid", "ok")}
    flagged = seams.filter(pl.col("status").is_in(["alarm", "watch"])).sort(
        [pl.col("status").replace_strict({"alarm": 0, "watch": 1}, return_dtype=pl.Int8), "part", "serial", "seam"],
        nulls_last=True)
    invalid = seams.filter(pl.col("status") == "invalid")
    skipped = files.filter(pl.col("status") == "skipped") if files.height else files
    parts = sorted(p for p in seams.get_column("part").drop_nulls().unique().to_list()) if seams.height else []
    plots = []
    for p in parts:
        ps = seams.filter((pl.col("part") == p) & pl.col("ctwd_mm").is_not_null())
        if ps.height:
            plots.append({"part": p, "svg": ctwd_plot_svg(ps, p)})
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
        ).sort("part", nulls_last=True)
        if seams.height else pl.DataFrame()
    )
    html = _env().get_template("summary.html.j2").render(
        run=run,
        counts=counts,
        n_seams=seams.height,
        n_parts=len(parts),
        n_serials=seams.select(pl.struct("part", "serial").n_unique()).item() if seams.height else 0,
        flagged=flagged.to_dicts(),
        invalid=invalid.to_dicts(),
        skipped=skipped.to_dicts() if skipped.height else [],
        noted=files.filter(pl.col("note").is_not_null()).to_dicts() if "note" in files.columns else [],
        n_files=files.height,
        plots=plots,
        per_part=per_part.to_dicts() if per_part.height else [],
        generated=datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC"),
        svg_markup=lambda s: jinja2.utils.markupsafe.Markup(s),
    )
    return html

"""``ctwd calibrate`` and ``ctwd calibrate-penetration``: fit the model to the cell's own welds.

- ``calibrate``: melting coefficients A, B of a wire from reference seams run at known CTWDs
  (logs + a CSV of seam -> CTWD); prints a table, saves a plot, writes TOML or edits wires.toml.
- ``calibrate-penetration``: the reference depth (and optionally the exponents) of Jackson's
  relation from measured macro sections matched to a scan's seams by serial and seam.

The fits themselves are :mod:`monitor.calibrate`. Config files are edited as text
(:mod:`monitor.toml_edit`) so that their comments survive; the old file is kept as ``.bak``.
Calibrated numbers are screening calibrations, not weld qualification.
"""

from __future__ import annotations

import re
import shutil
import sys
import tomllib
from datetime import UTC, date, datetime
from pathlib import Path

import click
import numpy as np
import polars as pl

from monitor import physics
from monitor.calibrate import (
    JACKSON_EXPONENTS,
    CalibrationError,
    MeltFit,
    fit_melt_coefficients,
    fit_penetration_exponents,
    fit_penetration_scale,
)
from monitor.config import Config, ConfigError, load_config, load_part, load_wires
from monitor.toml_edit import TomlEditError, set_table_values, toml_value, unit_of
from monitor.units import UnitError, to_si

__all__ = [
    "calibrate",
    "calibrate_penetration",
    "read_known_table",
    "reference_seams",
    "melt_values",
    "penetration_values",
    "write_config_table",
]

EXIT_USAGE = 2
_LB = 0.45359237  # kg per international pound (exact)


def _die(msg: str) -> None:
    click.echo(f"ctwd: {msg}", err=True)
    sys.exit(EXIT_USAGE)


def _today() -> date:
    return datetime.now(UTC).date()


# --------------------------------------------------------------------------------------------
# tables with a unit in a column name


def _unit_column(df: pl.DataFrame, base: str, unit: str | None, path: Path, example: str) -> tuple[str, float]:
    """(column, scale to metres) for a column named ``base_mm``, ``base [mm]``, ``base (in)`` or ``base`` + unit."""
    for c in df.columns:
        m = re.fullmatch(rf"\s*{base}\s*(?:[_ ]\s*|\[|\()\s*([^\]\)]+?)\s*[\]\)]?\s*", c, flags=re.IGNORECASE)
        if m:
            u = m.group(1)
            try:
                return c, to_si(f"1 {u}", "length")
            except UnitError:
                _die(f'{path}: column "{c}": "{u}" is not a length unit (use e.g. {example})')
        if c.strip().lower() == base:
            if unit is None:
                _die(f'{path}: column "{c}" has no unit; name it e.g. {example} or pass --unit mm')
            try:
                return c, to_si(f"1 {unit}", "length")
            except UnitError:
                _die(f'--unit "{unit}" is not a length unit (use e.g. mm or in)')
    _die(f'{path}: no "{base}" column (e.g. {example}); columns are: {", ".join(df.columns)}')
    raise AssertionError  # unreachable


def _read_csv(path: Path) -> pl.DataFrame:
    try:
        return pl.read_csv(path, infer_schema=False)
    except (OSError, pl.exceptions.PolarsError) as exc:
        _die(f"{path}: cannot be read as CSV ({str(exc).strip().splitlines()[0][:200]})")
    raise AssertionError  # unreachable


def read_known_table(path: Path, unit: str | None = None) -> pl.DataFrame:
    """The known-CTWD table: columns ``seam``, ``ctwd`` [m] and, when the file has one, ``serial``."""
    df = _read_csv(path)
    cols = {c.strip().lower(): c for c in df.columns}
    if "seam" not in cols:
        _die(f'{path}: no "seam" column; columns are: {", ".join(df.columns)}')
    col, scale = _unit_column(df, "ctwd", unit, path, '"ctwd_mm" or "ctwd [in]"')
    try:
        ctwd = df.get_column(col).str.strip_chars().cast(pl.Float64) * scale
    except pl.exceptions.PolarsError:
        _die(f'{path}: column "{col}" holds values that are not numbers (use a decimal point)')
    out = pl.DataFrame({"seam": df.get_column(cols["seam"]).str.strip_chars(), "ctwd_known": ctwd})
    if "serial" in cols:
        out = out.with_columns(df.get_column(cols["serial"]).str.strip_chars().alias("serial"))
    if out.get_column("ctwd_known").null_count():
        _die(f'{path}: column "{col}" has empty cells')
    return out


# --------------------------------------------------------------------------------------------
# ctwd calibrate


def reference_seams(paths: list[Path], cfg: Config) -> tuple[pl.DataFrame, list[str]]:
    """Per-seam Ī, ⟨I²⟩, WFS (SI) of the reference logs, with notes on files and seams left out.

    Seams that the scan would call invalid for data reasons (too short, a channel dropout, a
    logging gap, timestamps backwards) are left out; the part is not needed here.
    """
    from ingest.discover import discover
    from monitor.pipeline import scan_file

    files, problems = discover(paths)
    notes = [f"skipped {p}: {why}" for p, why in problems]
    frames = []
    arc = cfg.cell.arc
    for f in files:
        df, rec = scan_file(f, cfg)
        if df is None:
            notes.append(f"skipped {rec.source}: {rec.error}")
            continue
        frames.append(df.select("source", "serial", "seam", "n_samples", "arc_time_s", "current_mean", "current_sq_mean",
                                "wire_feed_mean", "voltage_mean", "current_bad", "voltage_bad", "wire_feed_bad",
                                "max_gap_s", "min_step_s"))
    if not frames:
        return pl.DataFrame(), notes
    seams = pl.concat(frames, how="diagonal_relaxed")
    n = pl.col("n_samples").cast(pl.Float64)
    bad = (
        (pl.col("n_samples") == 0) | (pl.col("arc_time_s") < arc.min_duration_edge)
        | (pl.col("current_bad") > arc.max_dropout_fraction * n) | (pl.col("wire_feed_bad") > arc.max_dropout_fraction * n)
        | (pl.col("max_gap_s").fill_null(0) > arc.max_gap) | (pl.col("min_step_s").fill_null(0) < 0)
        | pl.col("current_mean").is_null() | pl.col("wire_feed_mean").is_null()
    )
    dropped = seams.filter(bad)
    for r in dropped.iter_rows(named=True):
        notes.append(f"left out {r['source']} seam {r['seam']}: too short, a dropout or a logging gap")
    return seams.filter(~bad), notes


def _quantity_unit(raw: dict, key: str, dimension: str, fallback: str) -> tuple[str, float]:
    """(unit string, SI value of 1 unit) of the existing value of ``key``, else ``fallback``."""
    u = unit_of(str(raw.get(key, ""))) or fallback
    try:
        return u, to_si(f"1 {u}", dimension)
    except UnitError:
        return fallback, to_si(f"1 {fallback}", dimension)


def melt_values(fit: MeltFit, raw_wire: dict, on: date) -> dict[str, object]:
    """The ``[wire."NAME"]`` keys of a fit, as TOML values in the units the wire's table uses."""
    ua, sa = _quantity_unit(raw_wire, "melt_a", "melt_a", "kg/h/A")
    ub, sb = _quantity_unit(raw_wire, "melt_b", "melt_b", "kg/h/mm/A**2")
    return {
        "melt_a": f"{fit.a / sa:.5g} {ua}",
        "melt_b": f"{fit.b / sb:.5g} {ub}",
        "melt_a_se": f"{fit.a_se / sa:.3g} {ua}",
        "melt_b_se": f"{fit.b_se / sb:.3g} {ub}",
        "melt_ab_corr": round(float(np.clip(fit.ab_corr, -1.0, 1.0)), 4),
        "calibrated_on": on,
        "reference_seams": int(fit.n),
    }


def write_config_table(path: Path, table: tuple[str, ...], values: dict[str, object], check) -> Path:
    """Edit ``table`` of the TOML file ``path`` in place; the old file is kept as ``path.bak``.

    ``check(tmp_path)`` must load the edited file (raising ConfigError if it is wrong) before it
    replaces the original. Returns the backup's path.
    """
    from monitor.store import atomic_write

    text = path.read_text(encoding="utf-8")
    new = set_table_values(text, table, values, file=str(path))
    tmp = path.with_name(f".{path.name}.check.toml")
    try:
        tmp.write_text(new, encoding="utf-8")
        check(tmp)
    finally:
        tmp.unlink(missing_ok=True)
    backup = path.with_name(path.name + ".bak")
    shutil.copy2(path, backup)
    atomic_write(path, lambda p: p.write_text(new, encoding="utf-8"))
    return backup


def _melt_plot(png: Path, wire: str, fit: MeltFit, mr, i, q, L) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    kgh = 3600.0
    x = L * q  # [m·A²]
    y = (mr - fit.a * i) * kgh  # the resistive part of MR [kg/h]
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4), constrained_layout=True)
    sc = ax1.scatter(x * 1e3, y, c=L * 1e3, cmap="viridis", s=28)
    xs = np.linspace(0, x.max() * 1.05, 50)
    ax1.plot(xs * 1e3, fit.b * xs * kgh, "k-", lw=1, label=f"fit: B = {fit.b * kgh * 1e-3:.4g} kg/h/mm/A²")
    ax1.set_xlabel("L·⟨I²⟩ [mm·A²]")
    ax1.set_ylabel("MR − A·Ī [kg/h]")
    ax1.set_title(f"{wire}: melting rate vs ⟨I²⟩·L")
    ax1.legend(loc="upper left", fontsize=8)
    fig.colorbar(sc, ax=ax1, label="known CTWD [mm]")
    fitted = (fit.a * i + fit.b * x) * kgh
    ax2.axhline(0, color="0.5", lw=0.8)
    ax2.scatter(fitted, fit.residuals * kgh, c=L * 1e3, cmap="viridis", s=28)
    ax2.set_xlabel("fitted MR [kg/h]")
    ax2.set_ylabel("residual MR [kg/h]")
    ax2.set_title(f"residuals (s = {fit.residual_std * kgh:.3g} kg/h, n = {fit.n})")
    fig.savefig(png, dpi=110)
    plt.close(fig)


@click.command("calibrate")
@click.argument("logs", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--known", "known_csv", required=True, type=click.Path(path_type=Path, dir_okay=False, exists=True),
              help="CSV of seam (and serial) -> CTWD the seam was run at; unit in the header, e.g. ctwd_mm.")
@click.option("--unit", default=None, help="Unit of a plain 'ctwd' column (e.g. mm, in).")
@click.option("--wire", required=True, help='Wire name, as in wires.toml [wire."NAME"].')
@click.option("--config", "config_dir", required=True, type=click.Path(path_type=Path),
              help="Config folder (cell.toml for the export mapping, wires.toml for the wire).")
@click.option("--out", "out_file", default=None, type=click.Path(path_type=Path, dir_okay=False),
              help="Write the fitted [wire.\"NAME\"] table to this TOML file (the plot goes beside it, as .png).")
@click.option("--write", "write_config", is_flag=True, help="Update wires.toml in place (old file kept as wires.toml.bak).")
def calibrate(logs: tuple[Path, ...], known_csv: Path, unit: str | None, wire: str, config_dir: Path,
              out_file: Path | None, write_config: bool) -> None:
    """Fit a wire's melting coefficients A, B to reference seams run at known CTWDs.

    Weld coupons at two or more CTWDs (at least 5 mm apart), ideally at two or more wire feed
    speeds; list each seam's CTWD in the --known table. Least squares on MR = A·Ī + B·L·⟨I²⟩
    gives A and B with standard errors and their correlation; the covariance feeds the scan's
    CTWD intervals. Exit code 2 when the design cannot separate A from B.
    """
    try:
        cfg = load_config(config_dir)
    except ConfigError as exc:
        _die(f"config error: {exc}")
    if wire not in cfg.wires:
        _die(f'--wire "{wire}" is not in {config_dir / "wires.toml"}; known wires: {", ".join(sorted(cfg.wires))}')
    w = cfg.wires[wire]
    known = read_known_table(known_csv, unit)
    seams, notes = reference_seams(list(logs), cfg)
    for note in notes:
        click.echo(f"  {note}", err=True)
    if seams.height == 0:
        _die("no usable seams in the reference logs")
    keys = ["serial", "seam"] if "serial" in known.columns else ["seam"]
    matched = seams.join(known.unique(keys, keep="last"), on=keys, how="inner")
    unmatched = known.join(seams.select(keys).unique(), on=keys, how="anti")
    for r in unmatched.iter_rows(named=True):
        click.echo(f"  {known_csv}: no usable seam in the logs for " + ", ".join(f"{k} {r[k]}" for k in keys), err=True)
    if matched.height == 0:
        _die(f"no logged seam matches {known_csv} by {' and '.join(keys)}")
    matched = matched.sort(["source", "seam"])
    i = matched.get_column("current_mean").to_numpy()
    q = matched.get_column("current_sq_mean").to_numpy()
    wfs = matched.get_column("wire_feed_mean").to_numpy()
    L = matched.get_column("ctwd_known").to_numpy()
    mr = physics.melt_rate_from_wfs(wfs, w.diameter, w.density)
    try:
        fit = fit_melt_coefficients(mr, i, q, L)
    except CalibrationError as exc:
        _die(f"calibrate: {exc}")

    raw = tomllib.loads((config_dir / "wires.toml").read_text(encoding="utf-8"))["wire"][wire]
    values = melt_values(fit, raw, _today())
    kgh = 3600.0
    click.echo(f'{fit.n} reference seams for wire "{wire}" ({len(np.unique(np.round(L, 4)))} CTWDs)')
    click.echo(f"{'serial':<12} {'seam':<6} {'CTWD mm':>8} {'I A':>7} {'Irms A':>7} {'WFS m/min':>9} "
               f"{'MR kg/h':>8} {'resid kg/h':>10} {'CTWD err mm':>11}")
    for k, r in enumerate(matched.iter_rows(named=True)):
        click.echo(f"{(r['serial'] or '-'):<12} {r['seam']:<6} {L[k] * 1e3:8.2f} {i[k]:7.1f} {np.sqrt(q[k]):7.1f} "
                   f"{wfs[k] * 60:9.3f} {mr[k] * kgh:8.3f} {fit.residuals[k] * kgh:10.4f} {fit.ctwd_error[k] * 1e3:11.2f}")
    click.echo(f"A = {values['melt_a']} ± {values['melt_a_se']}  (old {raw.get('melt_a')})")
    click.echo(f"B = {values['melt_b']} ± {values['melt_b_se']}  (old {raw.get('melt_b')})")
    click.echo(f"corr(A, B) = {fit.ab_corr:+.3f}; residual spread {fit.residual_std * kgh:.4f} kg/h "
               f"= {fit.residual_std * kgh / _LB:.4f} lb/h ({fit.dof} dof); "
               f"CTWD error RMS {np.sqrt(np.mean(fit.ctwd_error ** 2)) * 1e3:.2f} mm")
    for warn in fit.warnings:
        click.echo(f"warning: {warn}", err=True)

    if out_file is not None:
        text = (f"# melting coefficients fitted by ctwd calibrate on {values['calibrated_on']} "
                f"from {fit.n} reference seams ({known_csv.name})\n"
                f"[wire.{toml_value(wire)}]\n")
        for k in ("note", "diameter", "density"):
            if k in raw:
                text += f"{k} = {toml_value(raw[k])}\n"
        text += "".join(f"{k} = {toml_value(v)}\n" for k, v in values.items())
        out_file.parent.mkdir(parents=True, exist_ok=True)
        out_file.write_text(text, encoding="utf-8")
        click.echo(f"wrote {out_file}")
    # the plot goes beside the output: the --out file, else wires.toml (--write), else here
    stem = f"calibration_{re.sub(r'[^A-Za-z0-9._-]+', '_', wire)}.png"
    png = (out_file.with_suffix(".png") if out_file is not None
           else config_dir / stem if write_config else Path.cwd() / stem)
    _melt_plot(png, wire, fit, mr, i, q, L)
    click.echo(f"plot:  {png}")
    if write_config:
        path = config_dir / "wires.toml"
        try:
            backup = write_config_table(path, ("wire", wire), values, load_wires)
        except (TomlEditError, ConfigError) as exc:
            _die(f"not written: {exc}")
        click.echo(f"updated {path} (previous version: {backup})")


# --------------------------------------------------------------------------------------------
# ctwd calibrate-penetration


def penetration_values(fit, raw_ref: dict, free: bool, on: date) -> dict[str, object]:
    """The ``[penetration_reference]`` keys of a fit, in the units the part file uses."""
    ud, sd = _quantity_unit(raw_ref, "depth", "length", "mm")
    ui, si_ = _quantity_unit(raw_ref, "current", "current", "A")
    uv, sv = _quantity_unit(raw_ref, "voltage", "voltage", "V")
    us, ss = _quantity_unit(raw_ref, "travel_speed", "speed", "mm/s")
    values: dict[str, object] = {
        "current": f"{fit.ref_current / si_:.5g} {ui}",
        "voltage": f"{fit.ref_voltage / sv:.5g} {uv}",
        "travel_speed": f"{fit.ref_travel_speed / ss:.5g} {us}",
        "depth": f"{fit.ref_depth / sd:.4g} {ud}",
        "depth_se": f"{fit.ref_depth_se / sd:.3g} {ud}",
    }
    if free:
        values["exponents"] = [round(e, 4) for e in fit.exponents]
    elif "exponents" in raw_ref:
        values["exponents"] = [round(e, 6) for e in JACKSON_EXPONENTS]
    values["calibrated_on"] = on
    values["sections"] = int(fit.n)
    return values


@click.command("calibrate-penetration")
@click.argument("results_dir", type=click.Path(path_type=Path, file_okay=False, exists=True))
@click.option("--sections", "sections_csv", required=True, type=click.Path(path_type=Path, dir_okay=False, exists=True),
              help="CSV of measured macro sections: serial, seam, depth (unit in the header, e.g. depth_mm).")
@click.option("--part", "part_name", required=True, help="Part the sections belong to.")
@click.option("--unit", default=None, help="Unit of a plain 'depth' column (e.g. mm).")
@click.option("--free-exponents", is_flag=True, help="Fit Jackson's three exponents too (needs at least 6 sections).")
@click.option("--config", "config_dir", default=None, type=click.Path(path_type=Path),
              help="Config folder (default: the one recorded in RESULTS_DIR/run.json).")
@click.option("--out", "out_file", default=None, type=click.Path(path_type=Path, dir_okay=False),
              help="Write the [penetration_reference] table to this TOML file.")
@click.option("--write", "write_config", is_flag=True,
              help="Update the part's file in place (old file kept with .bak appended).")
def calibrate_penetration(results_dir: Path, sections_csv: Path, part_name: str, unit: str | None,
                          free_exponents: bool, config_dir: Path | None, out_file: Path | None,
                          write_config: bool) -> None:
    """Fit the penetration reference of a part from measured macro sections.

    The sections are matched by serial and seam to RESULTS_DIR/seams.parquet of a scan. By
    default Jackson's exponents (4/3, −2/3, −1/3) are kept and only the reference depth is
    fitted; --free-exponents fits all three in log space and says whether Jackson's values lie
    inside their 95 % intervals. Exit code 2 when there are too few sections.
    """
    import json

    try:
        seams = pl.read_parquet(results_dir / "seams.parquet")
    except (OSError, pl.exceptions.PolarsError) as exc:
        _die(f"{results_dir}: not a results folder ({str(exc).splitlines()[0][:200]})")
    if config_dir is None:
        try:
            config_dir = Path(json.loads((results_dir / "run.json").read_text(encoding="utf-8"))["config_dir"])
        except (OSError, ValueError, KeyError):
            _die(f"{results_dir}/run.json does not name the config folder; pass --config")
    try:
        cfg = load_config(config_dir)
    except ConfigError as exc:
        _die(f"config error: {exc}")
    if part_name not in cfg.parts:
        _die(f'--part "{part_name}" has no file in {config_dir / "parts"}; known parts: {", ".join(sorted(cfg.parts))}')
    part = cfg.parts[part_name]

    raw = _read_csv(sections_csv)
    cols = {c.strip().lower(): c for c in raw.columns}
    for need in ("serial", "seam"):
        if need not in cols:
            _die(f'{sections_csv}: no "{need}" column; columns are: {", ".join(raw.columns)}')
    col, scale = _unit_column(raw, "depth", unit, sections_csv, '"depth_mm"')
    try:
        depth = raw.get_column(col).str.strip_chars().cast(pl.Float64) * scale
    except pl.exceptions.PolarsError:
        _die(f'{sections_csv}: column "{col}" holds values that are not numbers (use a decimal point)')
    sec = pl.DataFrame({"serial": raw.get_column(cols["serial"]).str.strip_chars(),
                        "seam": raw.get_column(cols["seam"]).str.strip_chars(), "depth": depth}).drop_nulls()
    usable = seams.filter((pl.col("part") == part_name) & (pl.col("status") != "invalid")).unique(
        ["serial", "seam"], keep="last")
    matched = sec.join(usable, on=["serial", "seam"], how="inner").sort(["serial", "seam"])
    missing = sec.join(usable, on=["serial", "seam"], how="anti")
    for r in missing.iter_rows(named=True):
        click.echo(f"  {sections_csv}: serial {r['serial']} seam {r['seam']} not among the valid scanned seams "
                   f"of {part_name}", err=True)
    if matched.height == 0:
        _die(f"no section of {sections_csv} matches a valid scanned seam of {part_name} by serial and seam")
    p = matched.get_column("depth").to_numpy()
    i = matched.get_column("current_mean_a").to_numpy()
    v = matched.get_column("voltage_mean_v").to_numpy()
    s = matched.get_column("travel_speed_mm_s").to_numpy() * 1e-3
    ref = part.reference
    try:
        if free_exponents:
            fit = fit_penetration_exponents(p, i, v, s, ref.current, ref.voltage, ref.travel_speed)
        else:
            fit = fit_penetration_scale(p, i, v, s, ref.current, ref.voltage, ref.travel_speed)
    except CalibrationError as exc:
        _die(f"calibrate-penetration: {exc}")
    exps = fit.exponents
    g = (i / ref.current) ** exps[0] * (v / ref.voltage) ** exps[1] * (s / ref.travel_speed) ** exps[2]
    fitted = fit.ref_depth * g
    click.echo(f"{fit.n} macro sections of {part_name}")
    click.echo(f"{'serial':<12} {'seam':<6} {'I A':>7} {'V':>6} {'S mm/s':>7} {'depth mm':>9} {'fit mm':>7} {'resid mm':>9}")
    for k, r in enumerate(matched.iter_rows(named=True)):
        click.echo(f"{r['serial']:<12} {r['seam']:<6} {i[k]:7.1f} {v[k]:6.2f} {s[k] * 1e3:7.2f} {p[k] * 1e3:9.3f} "
                   f"{fitted[k] * 1e3:7.3f} {(p[k] - fitted[k]) * 1e3:9.3f}")
    click.echo(f"reference depth at {ref.current:.0f} A, {ref.voltage:.1f} V, {ref.travel_speed * 1e3:.1f} mm/s: "
               f"{fit.ref_depth * 1e3:.3f} ± {fit.ref_depth_se * 1e3:.3f} mm (old {ref.depth * 1e3:.3f} mm)")
    resid = p - fitted
    click.echo(f"residual spread {np.sqrt(resid @ resid / fit.dof) * 1e3:.3f} mm ({fit.dof} dof)")
    if free_exponents:
        for name, e, (lo, hi), held, jk in zip(("current", "voltage", "travel speed"), fit.exponents, fit.exponents_ci,
                                               fit.held, JACKSON_EXPONENTS):
            if held:
                click.echo(f"exponent of {name}: held at Jackson's {jk:+.3f} (did not vary)")
            else:
                inside = "inside" if lo <= jk <= hi else "OUTSIDE"
                click.echo(f"exponent of {name}: {e:+.3f}, 95 % interval [{lo:+.3f}, {hi:+.3f}]; "
                           f"Jackson's {jk:+.3f} is {inside}")
        click.echo("Jackson's exponents " + ("lie inside the intervals" if fit.jackson_inside
                                             else "do NOT all lie inside the intervals"))
        for warn in fit.warnings:
            click.echo(f"warning: {warn}", err=True)
    raw_ref = tomllib.loads(part.path.read_text(encoding="utf-8")).get("penetration_reference", {})
    values = penetration_values(fit, raw_ref, free_exponents, _today())
    if out_file is not None:
        text = (f"# penetration reference of {part_name} fitted by ctwd calibrate-penetration on "
                f"{values['calibrated_on']} from {fit.n} macro sections ({sections_csv.name})\n"
                "[penetration_reference]\n" + "".join(f"{k} = {toml_value(x)}\n" for k, x in values.items()))
        out_file.parent.mkdir(parents=True, exist_ok=True)
        out_file.write_text(text, encoding="utf-8")
        click.echo(f"wrote {out_file}")
    if write_config:
        try:
            backup = write_config_table(part.path, ("penetration_reference",), values,
                                        lambda tmp: load_part(tmp, cfg.wires))
        except (TomlEditError, ConfigError) as exc:
            _die(f"not written: {exc}")
        click.echo(f"updated {part.path} (previous version: {backup})")

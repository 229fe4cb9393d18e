"""``ctwd history``, ``ctwd limits`` and ``ctwd tune``: the results history, drift budget, chart tuning."""

from __future__ import annotations

import json
import sys
from datetime import date
from pathlib import Path

import click
import polars as pl

from monitor.config import Config, ConfigError, load_config

__all__ = ["history_cmd", "limits_cmd", "tune_cmd"]

EXIT_USAGE = 2


def _config(config_dir: Path) -> Config:
    try:
        return load_config(config_dir)
    except ConfigError as exc:
        click.echo(f"ctwd: config error: {exc}", err=True)
        sys.exit(EXIT_USAGE)


def _need_part(cfg: Config, name: str, config_dir: Path) -> None:
    if name not in cfg.parts:
        click.echo(f'ctwd: part "{name}" has no file in {config_dir / "parts"}; known parts: '
                   f'{", ".join(sorted(cfg.parts)) or "none"}', err=True)
        sys.exit(EXIT_USAGE)


def _history_dir(history: Path | None, config_dir: Path | None) -> Path:
    from monitor.history import default_history_dir

    if history is not None:
        return history
    if config_dir is not None:
        return default_history_dir(config_dir)
    return Path("results")


@click.command("history")
@click.option("--part", required=True, help="Part name (as in its part file).")
@click.option("--since", type=click.DateTime(formats=["%Y-%m-%d"]), default=None,
              help="First day to include (YYYY-MM-DD, UTC day of the seam start).")
@click.option("--history", "history_dir", type=click.Path(path_type=Path, file_okay=False), default=None,
              help="History folder [default: results/ beside --config, else ./results].")
@click.option("--config", "config_dir", type=click.Path(path_type=Path), default=None,
              help="Config folder, to find the default history beside it.")
@click.option("--format", "fmt", type=click.Choice(["csv", "parquet"]), default="csv", show_default=True)
@click.option("--output", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="Write here instead of printing (Parquet needs --output).")
def history_cmd(part: str, since, history_dir: Path | None, config_dir: Path | None, fmt: str,
                output: Path | None) -> None:
    """Print or export a part's seam results from the history."""
    from monitor.history import read_history
    from monitor.store import atomic_write

    root = _history_dir(history_dir, config_dir)
    if not root.is_dir():
        click.echo(f"ctwd: {root}: no results history there (ctwd scan writes one)", err=True)
        sys.exit(EXIT_USAGE)
    since_d: date | None = since.date() if since is not None else None
    df = read_history(root, part=part, since=since_d)
    if df.height == 0:
        click.echo(f'ctwd: {root}: no rows for part "{part}"{f" since {since_d}" if since_d else ""}', err=True)
        sys.exit(1)
    csv_df = df.with_columns(pl.col(pl.Datetime).dt.strftime("%Y-%m-%dT%H:%M:%S%.3fZ"))
    if fmt == "parquet":
        if output is None:
            click.echo("ctwd: --format parquet needs --output FILE", err=True)
            sys.exit(EXIT_USAGE)
        atomic_write(output, lambda p: df.write_parquet(p))
    elif output is not None:
        atomic_write(output, lambda p: csv_df.write_csv(p))
    else:
        click.echo(csv_df.write_csv(), nl=False)
        return
    click.echo(f"{df.height} rows of {part} -> {output}", err=True)


@click.command("limits")
@click.option("--config", "config_dir", required=True, type=click.Path(path_type=Path))
@click.option("--part", required=True, help="Part name (as in its part file).")
@click.option("--json", "as_json", is_flag=True, help="Print a JSON list of objects instead of a table.")
def limits_cmd(config_dir: Path, part: str, as_json: bool) -> None:
    """Drift budget: per seam, the CTWD at which penetration reaches its minimum.

    From the seam's programmed WFS, voltage and travel speed: the melting-rate relation solved
    for current at that WFS, then Jackson's penetration. Exit 2 if a seam had to be refused
    (programmed WFS, voltage or travel speed missing). A screening figure, not a qualified limit.
    """
    from monitor.limits import part_limits

    cfg = _config(config_dir)
    _need_part(cfg, part, config_dir)
    rows = part_limits(cfg, part)
    if as_json:
        click.echo(json.dumps([r.as_json() for r in rows], indent=2))
    else:
        click.echo(f"{'seam':<6} {'nominal':>9} {'limit':>9} {'current':>9} {'margin':>9}")
        for r in rows:
            if r.limit_ctwd_mm is None:
                click.echo(f"{r.seam:<6} {r.nominal_ctwd_mm:>6.1f} mm  {r.problem}")
            else:
                click.echo(f"{r.seam:<6} {r.nominal_ctwd_mm:>6.1f} mm {r.limit_ctwd_mm:>6.1f} mm "
                           f"{r.current_at_limit_a:>7.0f} A {r.margin_mm:>+6.1f} mm")
    for r in rows:
        if r.problem and r.problem.startswith("refused"):
            click.echo(f'ctwd: seam "{r.seam}": {r.problem}', err=True)
    if any(r.problem and r.problem.startswith("refused") for r in rows):
        sys.exit(EXIT_USAGE)


@click.command("tune")
@click.option("--config", "config_dir", required=True, type=click.Path(path_type=Path))
@click.option("--part", required=True, help="Part name (as in its part file).")
@click.option("--history", "history_dir", type=click.Path(path_type=Path, file_okay=False), default=None,
              help="History folder [default: results/ beside the config].")
@click.option("--target-parts", type=click.FloatRange(min=10), default=500.0, show_default=True,
              help="Target in-control ARL: parts per false watch, per seam position.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="PNG of the trade-off [default: tune-<part>.png in the history folder].")
@click.option("--write", is_flag=True, help="Write the recommended settings into the part's [drift] table and its "
              "top-level ctwd_band and penetration_margin (backup kept).")
def tune_cmd(config_dir: Path, part: str, history_dir: Path | None, target_parts: float, plot_path: Path | None,
             write: bool) -> None:
    """Backtest drift-chart settings on a part's history and recommend some for a false-watch target."""
    from monitor.config import safe_name
    from monitor.history import read_history
    from monitor.tune import HistoryTooShort, plot_tradeoff, tune_part, write_drift_table, write_limits

    cfg = _config(config_dir)
    _need_part(cfg, part, config_dir)
    root = _history_dir(history_dir, config_dir)
    hist = read_history(root, part=part) if root.is_dir() else pl.DataFrame()
    p = cfg.parts[part]
    try:
        res = tune_part(hist, p, target_parts=target_parts)
    except HistoryTooShort as exc:
        click.echo(f"ctwd: cannot tune yet: {exc}", err=True)
        sys.exit(1)
    t = res.table.sort("arl0_combined", descending=True)
    click.echo(f"part {part}: {res.note}")
    click.echo(f"{'k':>5} {'h':>5} {'lambda':>7} {'L':>6} {'ARL0':>7} {'watches':>8} {'unconf.':>8} "
               f"{'caught':>7} {'lead':>6}")
    for r in t.iter_rows(named=True):
        lead = "—" if r["lead_parts"] is None or r["lead_parts"] != r["lead_parts"] else f"{r['lead_parts']:.1f}"
        mark = " *" if r["meets_target"] else ""
        click.echo(f"{r['cusum_k']:>5g} {r['cusum_h']:>5g} {r['ewma_lambda']:>7g} {r['ewma_l']:>6g} "
                   f"{r['arl0_combined']:>7.0f} {r['watches']:>8} {r['unconfirmed']:>8} "
                   f"{r['caught']:>3}/{r['episodes']:<3} {lead:>6}{mark}")
    click.echo(f"(* meets the target of one false watch per {target_parts:.0f} parts per seam; ARL0 of both charts "
               f"together; lead = parts of warning before the first alarm of a tip)")
    lim = res.limits
    if lim is not None and lim.height:
        click.echo(f"\nCTWD band and penetration margin (now: band {p.defaults.ctwd_band * 1e3:g} mm, "
                   f"margin {p.defaults.penetration_margin * 1e3:g} mm)")
        click.echo(f"{'band':>5} {'margin':>7} {'watches':>8} {'unconf.':>8} {'false/500':>10} {'caught':>7} {'lead':>6}")
        for r in lim.iter_rows(named=True):
            lead = "—" if r["lead_parts"] is None or r["lead_parts"] != r["lead_parts"] else f"{r['lead_parts']:.1f}"
            mark = " *" if r["meets_target"] else ""
            click.echo(f"{r['band_mm']:>5g} {r['margin_mm']:>7g} {r['watches']:>8} {r['unconfirmed']:>8} "
                       f"{500 * r['false_per_part']:>10.2f} {r['caught']:>3}/{r['episodes']:<3} {lead:>6}{mark}")
        click.echo(f"(band, margin in mm; false/500 = unconfirmed watches per 500 parts on the worst seam position; "
                   f"* within one false watch per {target_parts:.0f} parts)")
    plot_path = plot_path or root / f"tune-{safe_name(part)}.png"
    plot_tradeoff(res, plot_path, f"{part}: drift-chart settings")
    click.echo(f"plot: {plot_path}")
    r = res.recommended
    if r is None:
        click.echo("no chart setting meets the target; keep the present settings or lower --target-parts")
    else:
        click.echo(f"recommended: cusum_k = {r.cusum_k:g}, cusum_h = {r.cusum_h:g}, ewma_lambda = {r.ewma_lambda:g}, "
                   f"ewma_l = {r.ewma_l:g}")
    rl = res.recommended_limits
    if rl is None:
        click.echo("no band and margin meet the target; keep the present ones or lower --target-parts")
    else:
        click.echo(f'recommended: ctwd_band = "{rl.ctwd_band * 1e3:g} mm", '
                   f'penetration_margin = "{rl.penetration_margin * 1e3:g} mm"')
        overrides = [s.name for s in p.seams.values()
                     if s.ctwd_band != p.defaults.ctwd_band or s.penetration_margin != p.defaults.penetration_margin]
        if overrides:
            click.echo(f"note: seam(s) {', '.join(overrides)} set their own band or margin; --write leaves those")
    if write and (r is not None or rl is not None):
        original = p.path.read_bytes()
        try:
            backup = None
            if r is not None:
                backup = write_drift_table(p.path, r, cfg.wires)
                click.echo(f"written: [drift] in {p.path}")
            if rl is not None:
                backup = write_limits(p.path, rl, cfg.wires)
                click.echo(f"written: ctwd_band, penetration_margin in {p.path}")
        except (ConfigError, OSError) as exc:
            click.echo(f"ctwd: {p.path}: not written ({exc})", err=True)
            sys.exit(EXIT_USAGE)
        finally:
            if p.path.read_bytes() != original:
                p.path.with_name(p.path.name + ".bak").write_bytes(original)
        click.echo(f"(previous file kept as {backup})")

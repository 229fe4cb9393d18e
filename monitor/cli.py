"""The ``ctwd`` command: scan logs, rebuild the page, run the demo."""

from __future__ import annotations

import gc
import json
import platform
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import click
import polars as pl

from monitor import __version__
from monitor.config import Config, ConfigError, load_config

__all__ = ["entry", "main", "run_scan"]

EXIT_OK, EXIT_FLAGGED, EXIT_USAGE = 0, 1, 2
EXIT_BUSY, EXIT_WRITE = 3, 4  # another scan holds the lock; results could not be written (previous kept)


def _fail_config(exc: ConfigError) -> None:
    click.echo(f"ctwd: config error: {exc}", err=True)
    sys.exit(EXIT_USAGE)


def _now() -> str:
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def run_scan(paths: list[Path], cfg: Config, out: Path, part: str | None = None, page: bool = True,
             quiet: bool = False, history: Path | None = None, jobs: int = 1, executor: str | None = None,
             cluster: str | None = None) -> dict:
    """Scan, write all outputs into ``out``, return run.json's content.

    With ``history`` (a folder), tonight's seams are judged for drift against it and appended.
    ``jobs``/``executor``/``cluster`` choose where files are scanned (monitor.parallel).
    Holds ``out``'s scan lock (:class:`monitor.lock.ScanBusy` if another scan runs), finishes or
    discards an interrupted earlier commit first, and publishes all outputs at once
    (:class:`monitor.store.OutputWriteError` if they cannot be written; the old ones are kept).
    """
    from monitor.lock import scan_lock

    notes: list[str] = []
    with scan_lock(out, notes):
        return _run_scan_locked(paths, cfg, out, part, page, quiet, notes, history, jobs, executor, cluster)


def _run_scan_locked(paths: list[Path], cfg: Config, out: Path, part: str | None, page: bool, quiet: bool,
                     notes: list[str], history: Path | None = None, jobs: int = 1, executor: str | None = None,
                     cluster: str | None = None) -> dict:
    from monitor.pipeline import scan_paths
    from monitor.store import files_frame, recover, to_output, write_outputs

    recovered = recover(out)
    if recovered:
        notes.append(recovered)
    started = _now()
    t0 = time.perf_counter()
    bar = None
    progress = None
    if sys.stderr.isatty() and not quiet:
        from ingest.discover import discover

        n = len(discover(paths)[0])
        bar = click.progressbar(length=n, label="scanning", file=sys.stderr, show_pos=True)
        bar.__enter__()

        def progress(_f: Path) -> None:
            bar.update(1)

    try:
        result = scan_paths(paths, cfg, part=part, progress=progress, jobs=jobs, executor=executor, cluster=cluster)
    finally:
        if bar is not None:
            bar.__exit__(None, None, None)
    seams = to_output(result.seams)
    from monitor.limits import with_limit_column

    seams = with_limit_column(seams, cfg)  # the drift budget line on the page
    drift_info: dict = {}
    if history is not None:
        from monitor.drift import drift_with_history

        seams, drift_info = drift_with_history(seams, result.files, cfg, history)
    counts = {s: int((seams.get_column("status") == s).sum()) for s in ("alarm", "watch", "invalid", "ok")}
    run = {
        "tool": "ctwd-monitor",
        "tool_version": __version__,
        "python": platform.python_version(),
        "polars": pl.__version__,
        "started_at": started,
        "finished_at": _now(),
        "elapsed_s": round(time.perf_counter() - t0, 3),
        "config_dir": str(cfg.root.resolve()),
        "paths": [str(Path(p).resolve()) for p in paths],
        "out_dir": str(Path(out).resolve()),
        "config_digest": cfg.digest,
        "config_files": [str(f) for f in cfg.files],
        "inputs": [{"path": f.source, "size_bytes": f.size_bytes, "sha256": f.sha256, "status": f.status,
                    "rows": f.rows, "seams": f.seams, "error": f.error, "note": f.note} for f in result.files],
        "counts": {"files": len(result.files), "files_skipped": sum(f.status == "skipped" for f in result.files),
                   "seams": seams.height, **counts},
        **drift_info,
        "notes": notes,
    }
    extra = {}
    if page:
        from monitor.report import render_page

        files_df = files_frame(result.files).cast(pl.String)
        extra["summary.html"] = render_page(seams, files_df, run, out / "summary.html", cfg=cfg,
                                            files_beside=True)
    write_outputs(out, seams, result.files, run, extra=extra)
    return run


def _run_or_exit(paths: list[Path], cfg: Config, out: Path, **kw) -> dict:
    """run_scan, turning a busy lock or a failed write into one line and an exit code."""
    from monitor.lock import ScanBusy
    from monitor.parallel import ExecutorError
    from monitor.store import OutputWriteError

    try:
        return run_scan(paths, cfg, out, **kw)
    except ExecutorError as exc:
        click.echo(f"ctwd: {exc}", err=True)
        sys.exit(EXIT_USAGE)
    except ScanBusy as exc:
        click.echo(f"ctwd: {exc}", err=True)
        sys.exit(EXIT_BUSY)
    except OutputWriteError as exc:
        click.echo(f"ctwd: {exc.strerror}", err=True)
        sys.exit(EXIT_WRITE)
    except OSError as exc:  # --out cannot be created or locked (read-only, not a folder...)
        click.echo(f"ctwd: cannot use {out} for results ({exc.strerror or exc}); nothing written", err=True)
        sys.exit(EXIT_WRITE)


def _print_summary(run: dict, out: Path, page: bool) -> None:
    c = run["counts"]
    click.echo(
        f"scanned {c['files']} files ({c['files_skipped']} skipped), {c['seams']} seams: "
        f"{c['alarm']} alarm, {c['watch']} watch, {c['invalid']} invalid, {c['ok']} ok"
    )
    for f in run["inputs"]:
        if f["status"] == "skipped":
            click.echo(f"  skipped {f['path']}: {f['error']}")
    click.echo(f"results: {out / 'seams.parquet'} (also seams.csv, files.csv, run.json)")
    if page:
        click.echo(f"page:    {out / 'summary.html'}")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="ctwd")
def main() -> None:
    """Screen robotic GMAW seams for contact-tip-to-work distance (CTWD) drift.

    Reads the power source's logs (current, voltage, wire feed speed), back-solves each seam's
    effective CTWD from the melting-rate relation, estimates penetration with Jackson's
    relation and flags seams below the part's minimum.

    Estimates are screening indicators, not weld acceptance: the applicable code (e.g. AWS
    D1.1, ISO 5817), the qualified WPS and licensed inspection decide.
    """


@main.command()
@click.argument("paths", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--config", "config_dir", required=True, type=click.Path(path_type=Path),
              help="Config folder with cell.toml, wires.toml and parts/*.toml.")
@click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path, file_okay=False),
              help="Folder for seams.parquet/.csv, files.csv, run.json and summary.html.")
@click.option("--part", default=None, help="Part name for files with no part column and no matching part file.")
@click.option("--fail-on", type=click.Choice(["alarm", "watch"]), default=None,
              help="Exit 1 when any seam is in alarm (or in watch or alarm).")
@click.option("--no-page", is_flag=True, help="Do not write summary.html.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar, no summary.")
@click.option("--history", "history_dir", default=None, type=click.Path(path_type=Path, file_okay=False),
              help="Results history folder to judge drift against and append to [default: results/ beside the config].")
@click.option("--no-history", is_flag=True, help="Neither read nor append the results history.")
@click.option("-j", "--jobs", type=click.IntRange(min=1), default=1, show_default=True,
              help="Scan this many files at once in worker processes.")
@click.option("--executor", type=click.Choice(["local", "dask"]), default=None,
              help="Where files are scanned: this machine (default) or a Dask cluster (extra 'cluster').")
@click.option("--cluster", default=None, metavar="ADDRESS",
              help="Dask scheduler address (tcp://host:8786) or local:N; implies --executor dask.")
def scan(paths: tuple[Path, ...], config_dir: Path, out_dir: Path, part: str | None, fail_on: str | None,
         no_page: bool, quiet: bool, history_dir: Path | None = None, no_history: bool = False, jobs: int = 1,
         executor: str | None = None, cluster: str | None = None) -> None:
    """Scan log exports (files and/or folders) and judge every seam.

    Exit code: 0 when the scan ran (alarms or not), 1 with --fail-on when such seams exist,
    2 for usage or config errors, 3 when another scan holds the results folder's lock, 4 when
    the results cannot be written (the previous results are kept).
    """
    try:
        cfg = load_config(config_dir)
    except ConfigError as exc:
        _fail_config(exc)
    if part is not None and part not in cfg.parts:
        click.echo(f'ctwd: --part "{part}" has no file in {config_dir / "parts"}; known parts: '
                   f'{", ".join(sorted(cfg.parts)) or "none"}', err=True)
        sys.exit(EXIT_USAGE)
    if not no_history and history_dir is None:
        from monitor.history import default_history_dir

        history_dir = default_history_dir(config_dir)
    if cluster is not None and executor is None:
        executor = "dask"
    run = _run_or_exit(list(paths), cfg, out_dir, part=part, page=not no_page, quiet=quiet,
                       history=None if no_history else history_dir, jobs=jobs, executor=executor, cluster=cluster)
    if not quiet:
        _print_summary(run, out_dir, not no_page)
        if "history" in run:
            h = run["history"]
            click.echo(f"history: {h['root']} (+{h['rows_added']} rows; {h['inputs_already_present']} inputs already in it)")
    c = run["counts"]
    if fail_on == "alarm" and c["alarm"] > 0 or fail_on == "watch" and (c["alarm"] + c["watch"]) > 0:
        sys.exit(EXIT_FLAGGED)


@main.command()
@click.argument("results_dir", type=click.Path(path_type=Path, file_okay=False, exists=True))
@click.option("--history", "history_dir", default=None, type=click.Path(path_type=Path, file_okay=False),
              help="Folder of earlier nights' results, drawn behind tonight's CTWD.")
@click.option("--max-traces", default=None, type=click.IntRange(min=0),
              help="Draw at most this many flagged seams' traces (default 16).")
def report(results_dir: Path, history_dir: Path | None, max_traces: int | None) -> None:
    """Rebuild summary.html from stored results (seams.parquet, files.csv, run.json)."""
    from monitor.report import render_page
    from monitor.store import atomic_write, read_seams

    try:
        seams = read_seams(results_dir)
        run = json.loads((results_dir / "run.json").read_text(encoding="utf-8"))
    except (OSError, ValueError, pl.exceptions.PolarsError) as exc:
        click.echo(f"ctwd: {results_dir}: not a results folder ({str(exc).splitlines()[0]})", err=True)
        sys.exit(EXIT_USAGE)
    files_csv = results_dir / "files.csv"
    files_df = pl.read_csv(files_csv, infer_schema=False) if files_csv.exists() else pl.DataFrame()
    kw = {} if max_traces is None else {"max_traces": max_traces}
    html = render_page(seams, files_df, run, results_dir / "summary.html", history=history_dir, **kw)
    atomic_write(results_dir / "summary.html", lambda p: p.write_text(html, encoding="utf-8"))
    click.echo(f"page: {results_dir / 'summary.html'}")


def demo_paths() -> tuple[Path, Path]:
    """The demo's logs and config: the source tree's if run from it, else the installed copy."""
    here = Path.cwd()
    if (here / "sample_logs").is_dir() and (here / "config" / "cell.toml").is_file():
        return here / "sample_logs", here / "config"
    pkg = Path(__file__).resolve().parent / "_demo"
    if (pkg / "sample_logs").is_dir() and (pkg / "config" / "cell.toml").is_file():
        return pkg / "sample_logs", pkg / "config"
    src = Path(__file__).resolve().parent.parent
    return src / "sample_logs", src / "config"


@main.command()
@click.option("--out", "out_dir", default="ctwd-demo-out", show_default=True,
              type=click.Path(path_type=Path, file_okay=False), help="Where the demo writes its results.")
def demo(out_dir: Path) -> None:
    """Scan the bundled sample night (an invented cell) and write its page."""
    logs, config_dir = demo_paths()
    try:
        cfg = load_config(config_dir)
    except ConfigError as exc:
        _fail_config(exc)
    click.echo(f"demo: scanning {logs} with config {config_dir}")
    run = _run_or_exit([logs], cfg, out_dir)
    _print_summary(run, out_dir, True)
    click.echo(f"open {(out_dir / 'summary.html').resolve().as_uri()} in a browser")


from monitor.cli_calibrate import calibrate, calibrate_penetration  # noqa: E402

main.add_command(calibrate)
main.add_command(calibrate_penetration)

from monitor.cli_drift import history_cmd, limits_cmd, tune_cmd  # noqa: E402

main.add_command(history_cmd); main.add_command(limits_cmd); main.add_command(tune_cmd)  # noqa: E702


def entry() -> None:
    """The ``ctwd`` program (``python -m monitor.cli``): :func:`main` in a process of its own.

    The modules imported by now (polars, numpy, click, ...) live as long as the process, so they
    are moved out of reach of Python's cyclic garbage collector (``gc.freeze``): its full
    collections would otherwise walk all of them again, holding the GIL while the reader and
    reducer threads wait on it. Not done by :func:`main` itself, which tests and callers run in
    their own processes.
    """
    gc.freeze()
    main()


if __name__ == "__main__":  # pragma: no cover
    entry()

"""Shared by the page tests: the demo night scanned once, with hostile names planted in it."""

from __future__ import annotations

import atexit
import json
import shutil
import tempfile
from pathlib import Path

import polars as pl

ROOT = Path(__file__).resolve().parent.parent
#: Names a log could carry; the page must show them as text and run nothing.
BAD_PART = '"><img src=x onerror=alert(1)>'
BAD_SEAM = "<script>alert(1)</script>"
BAD_SERIAL = "<b onmouseover=alert(2)>X</b>"


_SCANNED: list[Path] = []  # one scan of the demo per test session, copied for each user


def scan_demo(out: Path) -> pl.DataFrame:
    """Scan the committed sample logs into ``out`` (no page) and return seams.parquet."""
    from monitor.cli import run_scan
    from monitor.config import load_config

    if not _SCANNED:
        first = Path(tempfile.mkdtemp(prefix="ctwd-demo-scan-"))
        atexit.register(shutil.rmtree, first, ignore_errors=True)
        run_scan([ROOT / "sample_logs"], load_config(ROOT / "config"), first, page=False, quiet=True)
        _SCANNED.append(first)
    shutil.copytree(_SCANNED[0], out, dirs_exist_ok=True)
    return pl.read_parquet(out / "seams.parquet")


def plant_hostile_names(out: Path) -> pl.DataFrame:
    """Rename the first alarm seam's part, serial and seam, and one watch seam's part, in place."""
    seams = pl.read_parquet(out / "seams.parquet").with_row_index("_i")
    first_alarm = seams.filter(pl.col("status") == "alarm").get_column("_i")[0]
    first_watch = seams.filter(pl.col("status") == "watch").get_column("_i")[0]
    seams = seams.with_columns(
        pl.when(pl.col("_i").is_in([first_alarm, first_watch])).then(pl.lit(BAD_PART)).otherwise(pl.col("part")).alias("part"),
        pl.when(pl.col("_i") == first_alarm).then(pl.lit(BAD_SEAM)).otherwise(pl.col("seam")).alias("seam"),
        pl.when(pl.col("_i") == first_alarm).then(pl.lit(BAD_SERIAL)).otherwise(pl.col("serial")).alias("serial"),
        pl.when(pl.col("_i") == first_alarm).then(pl.col("reason") + pl.lit(" " + BAD_SEAM)).otherwise(pl.col("reason"))
        .alias("reason"),
    ).drop("_i")
    seams.write_parquet(out / "seams.parquet")
    return seams


def render(out: Path, max_traces: int = 6, **kw) -> str:
    """Rebuild summary.html in ``out`` the way ``ctwd report`` does; returns the HTML."""
    from monitor.report import render_page

    seams = pl.read_parquet(out / "seams.parquet")
    files = pl.read_csv(out / "files.csv", infer_schema=False)
    run = json.loads((out / "run.json").read_text(encoding="utf-8"))
    html = render_page(seams, files, run, out / "summary.html", max_traces=max_traces, **kw)
    (out / "summary.html").write_text(html, encoding="utf-8")
    return html

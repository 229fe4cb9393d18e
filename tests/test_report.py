"""The morning page without a browser: escaping, the alarm list, traces, optional columns, the CLI."""

from __future__ import annotations

import html as htmllib
import re
import shutil
from datetime import timedelta
from pathlib import Path

import markupsafe
import numpy as np
import polars as pl
import pytest
from click.testing import CliRunner
from pagedemo import BAD_PART, BAD_SEAM, BAD_SERIAL, plant_hostile_names, render, scan_demo

from ingest.reader import IngestError
from ingest.schema import ArcSettings, ChannelMap, ExportSpec
from ingest.trace import read_seam_trace


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("night")
    scan_demo(out)
    return out


@pytest.fixture()
def night(demo, tmp_path) -> Path:
    out = tmp_path / "night"
    shutil.copytree(demo, out)
    return out


def _rows(html: str, table_id: str) -> list[str]:
    m = re.search(rf'<table id="{table_id}".*?<tbody>(.*?)</tbody>', html, re.S)
    assert m, f"table {table_id} missing"
    return re.findall(r"<tr\b.*?</tr>", m.group(1), re.S)


def test_alarm_table_lists_exactly_the_alarm_seams(night):
    html = render(night, max_traces=0, charts=False)
    seams = pl.read_parquet(night / "seams.parquet")
    alarm = seams.filter(pl.col("status") == "alarm")
    rows = _rows(html, "alarm-table")
    assert len(rows) == alarm.height > 0
    got = sorted((htmllib.unescape(re.search(r'data-serial="(.*?)"', r).group(1)),
                  htmllib.unescape(re.search(r'data-seam="(.*?)"', r).group(1))) for r in rows)
    assert got == sorted(zip(alarm["serial"].to_list(), alarm["seam"].to_list()))
    # the pull list groups by serial: one entry per serial with an alarm seam
    pull = re.search(r'<ol class="pull" id="pull-list">(.*?)</ol>', html, re.S).group(1)
    assert pull.count("<li>") == alarm.select("part", "serial").unique().height
    assert len(_rows(html, "watch-table")) == seams.filter(pl.col("status") == "watch").height


def test_hostile_names_are_escaped(night):
    plant_hostile_names(night)
    html = render(night, max_traces=3)
    # jinja2 autoescape: the raw markup never reaches the page, its escaped form does
    for bad in (BAD_PART, BAD_SEAM, BAD_SERIAL):
        assert bad not in html
        assert str(markupsafe.escape(bad)) in html  # jinja2's own escaping of the same text
    assert "<img" not in html
    assert html.count("<script>") == 1  # the page's own sorting/filter script only
    assert "onerror=alert" not in html.replace("onerror=alert(1)&gt;", "")


def test_page_renders_when_a_source_file_is_gone(night):
    seams = pl.read_parquet(night / "seams.parquet")
    seams.with_columns(pl.lit("/nonexistent/gone.parquet").alias("source")).write_parquet(night / "seams.parquet")
    html = render(night, max_traces=2, charts=False)
    assert "source file is gone or unreadable" in html
    assert len(_rows(html, "alarm-table")) == seams.filter(pl.col("status") == "alarm").height


def test_traces_are_capped_and_the_rest_counted(night):
    seams = pl.read_parquet(night / "seams.parquet")
    flagged = seams.filter(pl.col("status").is_in(["alarm", "watch", "invalid"])).height
    html = render(night, max_traces=2, charts=False)
    assert html.count('<section class="trace"') == 2
    assert f"{flagged - 2} flagged seams not drawn" in html


def test_optional_drift_columns_are_shown_only_when_present(night):
    seams = pl.read_parquet(night / "seams.parquet")
    seams.drop("limit_ctwd_mm", strict=False).write_parquet(night / "seams.parquet")
    plain = render(night, max_traces=0, charts=False)
    assert "CTWD limit [mm]" not in plain and "parts to limit" not in plain
    seams.drop("limit_ctwd_mm", strict=False).with_columns(
        (pl.col("ctwd_nominal_mm") + 4.5).alias("limit_ctwd_mm"),
        pl.lit(12.0).alias("parts_to_limit"),
        (pl.col("serial").str.ends_with("0125") & (pl.col("seam") == "S1")).alias("tip_change"),
    ).write_parquet(night / "seams.parquet")
    html = render(night, max_traces=0)
    assert "CTWD limit [mm]" in html and "parts to limit" in html


def test_report_command_with_and_without_history(night, tmp_path):
    from monitor.cli import main

    earlier = tmp_path / "history" / "night-1"
    earlier.mkdir(parents=True)
    pl.read_parquet(night / "seams.parquet").with_columns(pl.col("start") - timedelta(days=1)).write_parquet(
        earlier / "seams.parquet")
    r = CliRunner().invoke(main, ["report", str(night), "--history", str(tmp_path / "history"),
                                   "--max-traces", "0"])
    assert r.exit_code == 0, r.output
    assert "seams from earlier nights" in (night / "summary.html").read_text(encoding="utf-8")
    r = CliRunner().invoke(main, ["report", str(night), "--history", str(tmp_path / "nothing-here"),
                                   "--max-traces", "1"])
    assert r.exit_code == 0, r.output
    page = (night / "summary.html").read_text(encoding="utf-8")
    assert "history left out" in page
    assert page.count('<section class="trace"') == 1


def _spec() -> ExportSpec:
    return ExportSpec(time="time", current=ChannelMap("i", 1.0, "A"), voltage=ChannelMap("u", 1.0, "V"),
                      wire_feed=ChannelMap("w", 1.0 / 60.0, "m/min"), seam="seam")


def test_read_seam_trace_keeps_extremes_and_marks_trims(tmp_path):
    # 10 kHz, 3 s of arc between two idle stretches; one 1-sample spike and a 50 ms dropout
    t = np.arange(0, 5.0, 1e-4)
    on = (t >= 1.0) & (t < 4.0)
    current = np.where(on, 200.0 + 5 * np.sin(2 * np.pi * 50 * t), 0.0)
    spike = int(np.searchsorted(t, 2.5))
    current[spike] = 480.0
    voltage = np.where(on, 24.0, 0.0)
    voltage[(t >= 3.0) & (t < 3.05)] = np.nan
    df = pl.DataFrame({"time": t, "i": current, "u": voltage, "w": np.where(on, 9.0, 0.0), "on": on}).select(
        "time", "i", "u", "w", pl.when(pl.col("on")).then(pl.lit("S1")).alias("seam"))
    path = tmp_path / "log.parquet"
    df.write_parquet(path)
    arc = ArcSettings(trim_start=0.5, trim_end=0.3)
    tr = read_seam_trace(path, _spec(), arc, "S1", None, start_s=1.0, arc_time_s=3.0, max_points=300, margin_s=0.5)
    assert tr is not None and tr.decimated
    assert len(tr.t) <= 301
    # min/max per bucket keep the single-sample spike that a mean would smear (cross-check: numpy max)
    assert np.nanmax(tr.hi["current"]) == pytest.approx(current[on].max())
    # the dropout shows as buckets without a valid voltage, inside the arc
    gap = (tr.t > 3.0 - 1.0 + 0.01) & (tr.t < 3.05 - 1.0 - 0.01)
    assert gap.any() and np.all(np.isnan(tr.mean["voltage"][gap]))
    # WFS converted to SI through the spec's factor: 9 m/min = 0.15 m/s
    assert np.nanmax(tr.mean["wire_feed"]) == pytest.approx(0.15)
    assert tr.trimmed == ((0.0, 0.5), (2.7, 3.0))
    # only the window was read: the idle second before and after is cut to the margin
    assert tr.t.min() >= -0.5 - 1e-9 and tr.t.max() <= 3.5 + 1e-9


def test_read_seam_trace_missing_file(tmp_path):
    with pytest.raises(IngestError, match="not found"):
        read_seam_trace(tmp_path / "gone.csv", _spec(), ArcSettings(), "S1", None, 0.0, 1.0)


def test_empty_night_renders(tmp_path):
    from monitor.report import render_page
    from monitor.store import empty_output

    html = render_page(empty_output(), pl.DataFrame(), {}, tmp_path / "summary.html")
    assert "No part to pull" in html and "No seam on watch" in html

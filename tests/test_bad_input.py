"""Bad input: every kind of broken export gets its decided outcome and a plain one-line reason,
while the good files of the same run are processed and their results kept.

The outcomes are decisions of this project (see README, "Reliability"); the physical ranges behind
the units checks are common practice for GMAW, no source.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
import polars as pl
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from corpus import CASES, CONFIG_DIR, GOOD, build_corpus, good_frame  # noqa: E402
from reliability import record  # noqa: E402

from monitor.cli import run_scan  # noqa: E402
from monitor.config import load_config  # noqa: E402
from monitor.pipeline import CHANGED, scan_file, scan_paths  # noqa: E402

_BY_NAME = {c.name: c for c in CASES}


@pytest.fixture(scope="module")
def cfg():
    return load_config(CONFIG_DIR)


@pytest.fixture(scope="module")
def corpus_run(tmp_path_factory, cfg):
    logs = build_corpus(tmp_path_factory.mktemp("corpus"))
    out = tmp_path_factory.mktemp("out")
    run_scan([logs], cfg, out, quiet=True)
    files = pl.read_csv(out / "files.csv", infer_schema=False).with_columns(
        pl.col("source").str.split("/").list.last().alias("name"))
    seams = pl.read_parquet(out / "seams.parquet").with_columns(pl.col("source").str.split("/").list.last().alias("name"))
    return logs, out, files, seams


def _one_line(text: str) -> None:
    assert text and "\n" not in text and len(text) < 300, text
    for raw in ("Traceback", "polars.exceptions", "ComputeError", "You might want to try", "Schema"):
        assert raw not in text, f"raw library message leaked: {text}"


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_each_bad_kind_gets_its_outcome(case, corpus_run):
    _logs, _out, files, seams = corpus_run
    row = files.filter(pl.col("name") == case.name)
    assert row.height == 1, f"{case.name} not listed in files.csv"
    r = row.row(0, named=True)
    mine = seams.filter(pl.col("name") == case.name)
    if case.outcome == "skipped":
        assert r["status"] == "skipped"
        _one_line(r["error"])
        assert case.expect in r["error"]
        assert mine.height == 0
    elif case.outcome == "invalid":
        assert r["status"] == "read"
        bad = mine.filter(pl.col("status") == "invalid")
        assert bad.height >= 1
        for reason in bad["reason"]:
            _one_line(reason)
        assert bad["reason"].str.contains(case.expect, literal=True).any(), bad["reason"].to_list()
    else:  # repaired / noted: read, judged, and the note says what was done or seen
        assert r["status"] == "read"
        _one_line(r["note"])
        assert case.expect in r["note"]
        assert mine.height >= 1
        if case.outcome == "repaired":
            # the repair must leave a judgeable seam: not all invalid
            assert (mine["status"] != "invalid").any(), mine.select("seam", "reason").rows()
    if case.outcome == "invalid":
        given = mine.filter(pl.col("reason").str.contains(case.expect, literal=True))["reason"][0]
    else:
        given = r["error"] or r["note"]
    record("bad_input", case.kind, case.outcome, given)


def test_good_files_kept_and_unchanged_by_bad_neighbours(corpus_run, cfg, tmp_path):
    """The good files' seams are in the run, judged ok, and equal to a scan of the good files alone."""
    logs, _out, files, seams = corpus_run
    for name in GOOD:
        r = files.filter(pl.col("name") == name).row(0, named=True)
        assert r["status"] == "read" and r["error"] is None
    good = seams.filter(pl.col("name").is_in(list(GOOD)))
    assert good.height == 3 * len(GOOD)
    assert (good["status"] == "ok").all(), good.select("name", "seam", "reason").rows()
    alone = scan_paths([logs / n for n in GOOD], cfg).seams
    a = good.sort("name", "seam").select("seam", "status", "current_mean_a", "ctwd_mm")
    from monitor.store import to_output

    b = to_output(alone).with_columns(pl.col("source").str.split("/").list.last().alias("name")).sort("name", "seam")
    b = b.select("seam", "status", "current_mean_a", "ctwd_mm")
    # bit for bit: each seam's sums run over its own rows in file order, whatever else was scanned
    assert a.equals(b)


def test_folder_link_loop_does_not_trap_the_walk(corpus_run):
    logs, _out, files, _seams = corpus_run
    assert (logs / "nested" / "up").is_symlink()
    # each real file listed once: the link back up was not followed
    assert files["name"].n_unique() == files.height
    record("bad_input", "symbolic link loop (folder)", "not followed", "each file listed once")


def test_sparse_file_fails_fast_without_reading(corpus_run, cfg):
    logs, *_ = corpus_run
    t0 = time.perf_counter()
    df, rec = scan_file(logs / "sparse_10gb.csv", cfg)
    dt = time.perf_counter() - t0
    assert df is None and rec.status == "skipped" and "sparse" in rec.error
    assert rec.sha256 is None  # not even hashed
    assert dt < 1.0, f"took {dt:.2f} s"
    record("bad_input_timing", "10 GB sparse file", "skipped", f"refused in {dt * 1e3:.1f} ms", seconds=dt)


def test_large_dense_file_refused_by_size_before_reading(tmp_path, cfg, monkeypatch):
    """The size limit holds for a file that is not sparse too (limit lowered for the test)."""
    import ingest.reader as reader

    p = tmp_path / "big.csv"
    good_frame(__import__("numpy").random.default_rng(1), "TB7-1").write_csv(p)
    monkeypatch.setattr(reader, "MAX_FILE_BYTES", 1000)
    df, rec = scan_file(p, cfg)
    assert df is None and "over the" in rec.error and "limit" in rec.error


def test_file_changing_while_read_is_skipped_then_read_next_run(tmp_path, cfg, monkeypatch):

    import monitor.pipeline as pipeline

    p = tmp_path / "live.csv"
    good_frame(np.random.default_rng(3), "TB7-0555").write_csv(p)
    real = pipeline._collect

    def writing_cell(path, cfg_, **kw):
        got = real(path, cfg_, **kw)
        with open(path, "a", encoding="utf-8") as fh:  # the cell appends while we read
            fh.write("2026-11-30T02:09:00.000+00:00,TB7-tow-bracket,TB7-0555,,0.1,0.5,0.0,0.0\n")
        return got

    monkeypatch.setattr(pipeline, "_collect", writing_cell)
    df, rec = scan_file(p, cfg)
    assert df is None and rec.status == "skipped" and rec.error == CHANGED
    monkeypatch.setattr(pipeline, "_collect", real)
    df, rec = scan_file(p, cfg)  # next run: the file is quiet now
    assert rec.status == "read" and df is not None and df.height == 3
    record("bad_input", "file changing while read", "skipped, read next run", CHANGED)


def _rewrite_keeping_mtime(real, st):
    """A ``_collect`` that rewrites one byte of the file after reading it, same size, and sets its
    modification time back."""

    def rewrite(path, cfg_, **kw):
        got = real(path, cfg_, **kw)
        # a long file's read takes long; the kernel stamps times from a coarse clock (a few ms)
        time.sleep(0.05)
        data = bytearray(path.read_bytes())
        data[-3] = ord("9") if data[-3] != ord("9") else ord("8")
        path.write_bytes(bytes(data))
        os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
        return got

    return rewrite


def test_same_size_rewrite_caught_by_checksum(tmp_path, cfg, monkeypatch):
    """A rewrite of a short file that keeps size and (coarse) mtime is still caught by the
    checksum, even where the status-change time does not show it (it is left out of the stat key
    here, as on a filesystem with coarse times)."""
    import monitor.pipeline as pipeline

    p = tmp_path / "rewrite.csv"
    good_frame(np.random.default_rng(4), "TB7-0556").write_csv(p)
    monkeypatch.setattr(pipeline, "_collect", _rewrite_keeping_mtime(pipeline._collect, p.stat()))
    monkeypatch.setattr(pipeline, "_stat_key", lambda path: (path.stat().st_size, path.stat().st_mtime_ns))
    df, rec = scan_file(p, cfg)
    assert df is None and rec.error == CHANGED


@pytest.mark.skipif(os.name == "nt", reason="st_ctime_ns is the creation time on Windows")
def test_long_file_rewrite_keeping_mtime_caught_by_status_change_time(tmp_path, cfg, monkeypatch):
    """A file of RECHECK_BELOW bytes or more is not checksummed again: a same-size rewrite that
    sets the modification time back is caught by the status-change time, which POSIX says every
    write and every utimensat() marks for update (IEEE Std 1003.1, <sys/stat.h> and utimensat,
    from memory)."""
    import monitor.pipeline as pipeline

    monkeypatch.setattr(pipeline, "RECHECK_BELOW", 0)  # every file counts as long
    p = tmp_path / "rewrite.csv"
    good_frame(np.random.default_rng(4), "TB7-0556").write_csv(p)
    monkeypatch.setattr(pipeline, "_collect", _rewrite_keeping_mtime(pipeline._collect, p.stat()))
    df, rec = scan_file(p, cfg)
    assert df is None and rec.error == CHANGED


def test_long_file_checksummed_while_read_and_a_change_still_caught(tmp_path, cfg, monkeypatch):
    """A file of RECHECK_BELOW bytes or more has its one checksum taken while it is read: the
    recorded checksum is still the file's SHA-256 (hashlib as the reference), a read that fails
    still records it, and an append during the read is caught by the stat key."""
    import hashlib

    import monitor.pipeline as pipeline

    monkeypatch.setattr(pipeline, "RECHECK_BELOW", 0)  # every file counts as long
    p = tmp_path / "long.csv"
    good_frame(np.random.default_rng(5), "TB7-0557").write_csv(p)
    df, rec = scan_file(p, cfg)
    assert rec.status == "read" and df is not None and df.height == 3
    assert rec.sha256 == hashlib.sha256(p.read_bytes()).hexdigest()

    real = pipeline._collect

    def writing_cell(path, cfg_, **kw):
        got = real(path, cfg_, **kw)
        with open(path, "a", encoding="utf-8") as fh:
            fh.write("2026-11-30T02:09:00.000+00:00,TB7-tow-bracket,TB7-0557,,0.1,0.5,0.0,0.0\n")
        return got

    monkeypatch.setattr(pipeline, "_collect", writing_cell)
    df, rec = scan_file(p, cfg)
    assert df is None and rec.error == CHANGED

    bad = tmp_path / "bad.csv"
    bad.write_text("time,current\n0,1\n", encoding="utf-8")
    monkeypatch.setattr(pipeline, "_collect", real)
    df, rec = scan_file(bad, cfg)
    assert df is None and rec.status == "skipped" and "not found" in rec.error
    assert rec.sha256 == hashlib.sha256(bad.read_bytes()).hexdigest()


def test_page_lists_skipped_reasons_and_repairs(corpus_run):
    """The morning page carries the same one-line reasons and repair notes as files.csv, HTML-escaped
    (escaping as done by markupsafe, the library jinja2's autoescape uses)."""
    from markupsafe import escape

    _logs, out, files, _seams = corpus_run
    page = (out / "summary.html").read_text(encoding="utf-8")
    for r in files.iter_rows(named=True):
        if r["status"] == "skipped":
            assert str(escape(r["error"])) in page, r["error"]
        if r["note"]:
            assert str(escape(r["note"])) in page, r["note"]


def test_a_value_with_a_line_break_is_shown_escaped_in_a_one_line_reason(tmp_path, cfg):
    """Text where a number was expected, holding a line break: the reason stays one line."""
    frame = good_frame(np.random.default_rng(5), "TB7-0557")
    bad = frame.with_columns(pl.col("voltage_v").cast(pl.String))
    bad = bad.with_columns(pl.when(pl.int_range(pl.len()) == 5).then(pl.lit("0\n0")).otherwise(pl.col("voltage_v"))
                           .alias("voltage_v"))
    p = tmp_path / "linebreak.parquet"
    bad.write_parquet(p)
    df, rec = scan_file(p, cfg)
    assert df is None and rec.status == "skipped"
    _one_line(rec.error)
    assert '"0\\n0"' in rec.error and "voltage" in rec.error

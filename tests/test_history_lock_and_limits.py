"""A scan holds the history's lock too; the drift budget reaches the seam table."""

from __future__ import annotations

import json
import socket

import polars as pl
import pytest
from click.testing import CliRunner

from monitor.cli import main
from monitor.limits import part_limits
from monitor.lock import LOCK_NAME, process_start_ticks


def test_second_scan_on_the_same_history_is_refused(tmp_path, repo_root):
    # Two scans appending to one history at once would interleave partitions: the second is
    # refused with the owner's pid (exit 3), like two scans on one --out.
    hist = tmp_path / "history"
    hist.mkdir()
    # the lock of another live process on this host (pid 1 is always alive)
    (hist / LOCK_NAME).write_text(json.dumps({"pid": 1, "start_ticks": process_start_ticks(1),
                                              "host": socket.gethostname(), "since": "2026-12-01T02:00:00Z"}))
    r = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs" / "cell5"), "--config",
                                  str(repo_root / "config"), "--out", str(tmp_path / "out"), "--history",
                                  str(hist), "--no-page", "-q"])
    assert r.exit_code == 3
    assert "another scan is running since" in r.output and "pid" in r.output
    assert not (tmp_path / "out" / "seams.parquet").exists()
    assert (hist / LOCK_NAME).exists()  # another process's lock is left alone


def test_limit_column_matches_ctwd_limits(tmp_path, repo_root, demo_config):
    r = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs" / "cell3"), "--config",
                                  str(repo_root / "config"), "--out", str(tmp_path / "out"), "--no-history",
                                  "--no-page", "-q"])
    assert r.exit_code == 0, r.output
    seams = pl.read_parquet(tmp_path / "out" / "seams.parquet")
    expected = {lim.seam: lim.limit_ctwd_mm for lim in part_limits(demo_config, "TB7-tow-bracket")}
    got = dict(seams.select("seam", "limit_ctwd_mm").unique().iter_rows())
    assert got.keys() == expected.keys()
    for seam, value in expected.items():
        assert got[seam] == pytest.approx(value)
    # the limit lies beyond nominal: longer CTWD lowers penetration (Lesnewich + Jackson)
    assert (seams["limit_ctwd_mm"] > seams["ctwd_nominal_mm"]).all()


def test_out_folder_may_be_the_history_folder(tmp_path, repo_root):
    # The lock is re-entrant within one process: --out and --history naming one folder must
    # not make a scan refuse itself (common practice, no source: one results folder per cell).
    folder = tmp_path / "results"
    r = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs" / "cell5"), "--config",
                                  str(repo_root / "config"), "--out", str(folder), "--history", str(folder),
                                  "--no-page", "-q"])
    assert r.exit_code == 0, r.output
    assert (folder / "seams.parquet").is_file()
    assert not (folder / ".ctwd-scan.lock").exists()

"""A scan holds the history's lock too; the drift budget reaches the seam table."""

from __future__ import annotations

import polars as pl
import pytest
from click.testing import CliRunner

from monitor.cli import main
from monitor.limits import part_limits
from monitor.lock import scan_lock


def test_second_scan_on_the_same_history_is_refused(tmp_path, repo_root):
    # Two scans appending to one history at once would interleave partitions: the second is
    # refused with the owner's pid (exit 3), like two scans on one --out.
    hist = tmp_path / "history"
    with scan_lock(hist):
        r = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs" / "cell5"), "--config",
                                      str(repo_root / "config"), "--out", str(tmp_path / "out"), "--history",
                                      str(hist), "--no-page", "-q"])
    assert r.exit_code == 3
    assert "another scan is running since" in r.output and "pid" in r.output
    assert not (tmp_path / "out" / "seams.parquet").exists()


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

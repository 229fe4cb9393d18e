"""Scale: bounded memory on long files, and parallel/distributed scans equal to a serial one, bit for bit.

No timing assertions here; speed is measured by benchmarks/run.py.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from monitor.config import load_config
from monitor.pipeline import scan_paths

ROOT = Path(__file__).resolve().parent.parent
CONFIG = ROOT / "config"


def _write_long_log(path: Path, n_seams: int, seam_s: float = 4.0, rate: float = 1000.0, seed: int = 1) -> int:
    """A labelled Parquet log in the demo's export columns: seams of ``seam_s`` at ``rate``, 0.5 s idle between."""
    rng = np.random.default_rng(seed)
    n_idle, n_seam = int(0.5 * rate), int(seam_s * rate)
    per = n_idle + n_seam
    n = per * n_seams
    pos = np.arange(n)
    in_seam = pos % per >= n_idle
    k = pos // per
    current = np.where(in_seam, 200.0 + rng.normal(0, 20, n), np.abs(rng.normal(0, 0.3, n)))
    df = pl.DataFrame({
        "time": pl.Series(pos.astype(np.int64), dtype=pl.Int64) / rate,
        "serial": ("SN-" + pl.Series(k // 3).cast(pl.String)),
        "seam": pl.Series(np.where(in_seam, k % 3, -1)).replace_strict({0: "S1", 1: "S2", 2: "S3", -1: None},
                                                                         return_dtype=pl.String),
        "current_a": current.round(1),
        "voltage_v": np.where(in_seam, 24.0 + rng.normal(0, 1, n), 0.5).round(2),
        "wfs_m_min": np.where(in_seam, 9.0 + rng.normal(0, 0.05, n), 0.0).round(3),
    })
    df.write_parquet(path, row_group_size=100_000)
    return n


_PEAK = """
import json, resource, sys
from pathlib import Path
import ingest.onepass
from monitor.config import load_config
from monitor.pipeline import scan_file
ingest.onepass.CHUNK_ROWS = 100_000  # both files span many batches (the default is 1 M rows)
df, rec = scan_file(Path(sys.argv[1]), load_config(Path(sys.argv[2])), part="TB7-tow-bracket")
print(json.dumps({"seams": df.height, "rows": rec.rows, "peak_kb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}))
"""


def _peak(path: Path) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "POLARS_MAX_THREADS": "2"}
    out = subprocess.run([sys.executable, "-c", _PEAK, str(path), str(CONFIG)], capture_output=True, text=True,
                         env=env, check=True, cwd=ROOT)
    return json.loads(out.stdout.strip().splitlines()[-1])


@pytest.mark.skipif(sys.platform == "win32", reason="resource.getrusage is POSIX only")
def test_peak_memory_does_not_grow_with_file_length(tmp_path):
    # A file 6x longer must scan in about the same peak memory: rows are streamed in batches
    # (100 k rows here). The in-memory size of the long file's six columns is ~8 bytes x 6 x 6N;
    # a scan that held the file would grow by at least that much between N and 6N. Bound: growth
    # below a fifth of that (and below 1.25x). Source of the expectation: the issue's
    # bounded-memory requirement (common practice, no source).
    small, big = tmp_path / "n.parquet", tmp_path / "n6.parquet"
    n = _write_long_log(small, 120)
    n6 = _write_long_log(big, 720)
    a, b = _peak(small), _peak(big)
    assert (a["rows"], b["rows"]) == (n, n6)
    assert (a["seams"], b["seams"]) == (120, 720)
    held_bytes = 8 * 6 * (n6 - n)
    growth = (b["peak_kb"] - a["peak_kb"]) * 1024
    assert growth < held_bytes / 5, (a, b)
    assert b["peak_kb"] < 1.25 * a["peak_kb"], (a, b)


def _same(a, b) -> None:
    # Bit for bit (the requirement): same columns, dtypes, rows, order and every value;
    # floats compared by their 64-bit patterns, nulls by position.
    assert a.seams.columns == b.seams.columns
    assert a.seams.schema == b.seams.schema
    floats = [c for c, t in a.seams.schema.items() if t.is_float()]
    assert a.seams.drop(floats).equals(b.seams.drop(floats), null_equal=True)
    for c in floats:
        x, y = a.seams.get_column(c), b.seams.get_column(c)
        assert x.is_null().equals(y.is_null()), c
        bits = [s.cast(pl.Float64).fill_null(0.0).to_numpy().view(np.uint64) for s in (x, y)]
        assert np.array_equal(*bits), c
    assert [vars(r) for r in a.files] == [vars(r) for r in b.files]


def test_jobs_gives_the_serial_result():
    # Reference: the serial scan of the committed demo logs (36 + 20 files, one bad, one dropout).
    cfg = load_config(CONFIG)
    serial = scan_paths([ROOT / "sample_logs"], cfg)
    parallel = scan_paths([ROOT / "sample_logs"], cfg, jobs=2)
    assert serial.seams.height > 100
    _same(serial, parallel)


def test_dask_local_cluster_gives_the_serial_result():
    distributed = pytest.importorskip("dask.distributed", reason="dask[distributed] not installed (extra 'cluster')")
    cfg = load_config(CONFIG)
    logs = [ROOT / "sample_logs" / "cell5"]
    serial = scan_paths(logs, cfg)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as lc:
        on_cluster = scan_paths(logs, cfg, executor="dask", cluster=lc.scheduler_address)
    _same(serial, on_cluster)


def test_unknown_scheduler_is_a_one_line_error(tmp_path, monkeypatch):
    pytest.importorskip("dask.distributed", reason="dask[distributed] not installed (extra 'cluster')")
    from click.testing import CliRunner

    from monitor import parallel
    from monitor.cli import main

    monkeypatch.setattr(parallel, "CONNECT_TIMEOUT", "2s")
    r = CliRunner().invoke(main, ["scan", str(ROOT / "sample_logs" / "cell3"), "--config", str(CONFIG), "--out",
                                  str(tmp_path / "o"), "-q", "--cluster", "tcp://127.0.0.1:9"])
    assert r.exit_code == 2
    assert "cannot reach the Dask scheduler" in r.output


def test_traces_read_only_the_row_groups_they_need(tmp_path, monkeypatch):
    # The page re-reads flagged seams; on a long Parquet night only the row groups whose time
    # statistics overlap a seam are read. The traces must equal those of a whole-file read.
    import ingest.trace as trace

    path = tmp_path / "long.parquet"
    _write_long_log(path, 60)  # 60 seams of 4 s at 1 kHz, 100 k-row row groups
    cfg = load_config(CONFIG)
    spec, arc = cfg.cell.export, cfg.cell.arc
    wanted = [("S2", "SN-3", 9 * 4.5 + 0.5 + 4.5, 4.0), ("S1", "SN-15", 45 * 4.5 + 0.5, 4.0)]
    read = []
    real_slice = pl.LazyFrame.slice

    def counting(self, offset, length=None):
        read.append(length)
        return real_slice(self, offset, length)

    monkeypatch.setattr(pl.LazyFrame, "slice", counting)
    pruned = trace.read_seam_traces(path, spec, arc, wanted)
    monkeypatch.setattr(pl.LazyFrame, "slice", real_slice)
    assert 0 < sum(n for n in read if n) <= 400_000  # a few row groups of 1.215 M rows
    monkeypatch.setattr(trace, "_row_groups_read", lambda *a: None)
    whole = trace.read_seam_traces(path, spec, arc, wanted)
    for a, b in zip(pruned, whole, strict=True):
        assert a is not None and b is not None
        assert a.n_samples == b.n_samples > 3000
        np.testing.assert_array_equal(a.t, b.t)
        for c in a.mean:
            np.testing.assert_array_equal(a.mean[c], b.mean[c])

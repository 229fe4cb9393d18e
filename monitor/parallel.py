"""Scanning many files at once: worker processes on this machine, or a Dask distributed cluster.

The unit of work is one file (:func:`monitor.pipeline.scan_file`): it reads the file lazily,
returns one small frame a seam and a :class:`~monitor.pipeline.FileRecord`. Only those small
results travel back; the samples never leave the worker that read them. Results are returned in
the order of the input list, so a parallel scan gives the same frame as a serial one, bit for bit:
each file is computed by the same code on the same bytes, each seam's sums run over its own rows
in file order (``ingest.onepass``), and nothing is summed across files (tests/test_scale.py).

Dask is an optional extra (``pip install 'ctwd-monitor[cluster]'``). A plant runs a scheduler on
one host and workers near the log shares; files are named by paths the workers can read (a
shared filesystem) — see the README's "Scaling out" section.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import polars as pl

from monitor.config import Config

__all__ = ["map_files", "scan_one", "ExecutorError", "CONNECT_TIMEOUT"]

#: How long to wait for a Dask scheduler before giving up.
CONNECT_TIMEOUT = "20s"


class ExecutorError(RuntimeError):
    """The requested executor cannot run (missing extra, unreachable scheduler); one-line message."""


def scan_one(path: Path, cfg: Config, part: str | None):
    """Worker entry point: scan one file (imported lazily so workers import only what they need)."""
    from monitor.pipeline import scan_file

    return scan_file(path, cfg, part)


def _local(files: list[Path], cfg: Config, part: str | None, jobs: int) -> Iterator[tuple]:
    # spawn, not fork: polars' thread pool does not survive a fork
    ctx = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=jobs, mp_context=ctx) as pool:
        futures = [pool.submit(scan_one, f, cfg, part) for f in files]
        for f, fut in zip(files, futures):
            yield f, fut.result()


def _client(cluster: str | None):
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise ExecutorError("--executor dask needs the 'cluster' extra: pip install 'ctwd-monitor[cluster]'") from None
    if cluster is None or cluster.startswith("local"):
        n = int(cluster.split(":", 1)[1]) if cluster and ":" in cluster else 2
        lc = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None)
        return Client(lc), lc
    try:
        return Client(cluster, timeout=CONNECT_TIMEOUT), None
    except (OSError, TimeoutError) as exc:
        raise ExecutorError(f"cannot reach the Dask scheduler at {cluster} ({exc})") from None


def _dask(files: list[Path], cfg: Config, part: str | None, cluster: str | None) -> Iterator[tuple]:
    client, local = _client(cluster)
    try:
        futures = client.map(scan_one, files, cfg=cfg, part=part, pure=False)
        results = client.gather(futures)
    finally:
        client.close()
        if local is not None:
            local.close()
    yield from zip(files, results)


def map_files(files: list[Path], cfg: Config, part: str | None, jobs: int = 1, executor: str | None = None,
              cluster: str | None = None) -> Iterator[tuple[Path, tuple[pl.DataFrame | None, object]]]:
    """``(file, scan_file(file, cfg, part))`` for every file, in input order.

    Parameters
    ----------
    files : list of Path
        Export files, as discovered.
    jobs : int
        Worker processes on this machine (``executor`` None or "local"); 1 runs in this process.
    executor : {"local", "dask"} or None
        "dask" submits one task a file to a Dask distributed cluster.
    cluster : str or None
        Scheduler address (``tcp://host:8786``) or ``local:N`` for a throw-away local cluster of
        N worker processes (the default when None).
    """
    if executor == "dask":
        yield from _dask(files, cfg, part, cluster)
    elif executor in (None, "local"):
        if jobs <= 1 or len(files) <= 1:
            yield from ((f, scan_one(f, cfg, part)) for f in files)
        else:
            yield from _local(files, cfg, part, min(jobs, len(files)))
    else:
        raise ExecutorError(f'unknown executor "{executor}" (use "local" or "dask")')

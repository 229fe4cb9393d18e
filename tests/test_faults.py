"""Faults of an unattended night: a killed scan, two scans at once, a full disk, read-only logs,
and hostile names or data. The out dir is always either as before or complete and consistent."""

from __future__ import annotations

import ast
import errno
import hashlib
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import polars as pl
import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).resolve().parent))

from corpus import CONFIG_DIR, good_frame  # noqa: E402
from reliability import record  # noqa: E402

from monitor.cli import main, run_scan  # noqa: E402
from monitor.config import load_config  # noqa: E402
from monitor.lock import LOCK_NAME, ScanBusy, process_start_ticks, scan_lock  # noqa: E402
from monitor.store import JOURNAL, recover  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
OUTPUTS = {"seams.parquet", "seams.csv", "files.csv", "summary.html", "run.json"}


@pytest.fixture(scope="module")
def cfg():
    return load_config(CONFIG_DIR)


def _logs(folder: Path, n: int = 3, seed: int = 5) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    for k in range(n):
        good_frame(rng, f"TB7-{700 + k}").write_csv(folder / f"cell3_TB7-{700 + k}.csv")
    return folder


def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def consistent_run_id(out: Path) -> str | None:
    """The run id if ``out`` holds one complete run (every file's checksum as listed in run.json)."""
    run = out / "run.json"
    if not run.exists():
        assert not any((out / n).exists() for n in OUTPUTS - {"run.json"}), "outputs without run.json"
        return None
    meta = json.loads(run.read_text(encoding="utf-8"))
    listed = meta["outputs"]
    assert set(listed) | {"run.json"} == {p.name for p in out.iterdir() if not p.name.startswith(".")}
    for name, digest in listed.items():
        assert _sha(out / name) == digest, f"{name} is not from run {meta['run_id']}"
    pl.read_parquet(out / "seams.parquet")  # readable, not torn
    return meta["run_id"]


def _until_locked(proc: subprocess.Popen, out: Path, timeout: float = 30.0) -> float:
    """Wait until the scan holds its lock (imports done, work begun); returns the wait [s]."""
    t0 = time.perf_counter()
    while proc.poll() is None and time.perf_counter() - t0 < timeout:
        try:  # the killed predecessor's stale lock does not count: wait for this process's own
            if json.loads((out / LOCK_NAME).read_text()).get("pid") == proc.pid:
                break
        except (OSError, ValueError):
            pass
        time.sleep(0.005)
    return time.perf_counter() - t0


# A `ctwd scan` that imports everything first, then waits for its gate file: the next victim
# warms up while the current one is being killed, so each kill costs the scan's work, not the
# interpreter's start-up. Past the gate it is exactly `python -m monitor.cli scan ...`.
_GATED = """
import sys, time
from pathlib import Path
import matplotlib.pyplot, polars, monitor.cli, monitor.pipeline, monitor.report, monitor.store, monitor.units
monitor.units.registry()
gate = Path(sys.argv[1])
while not gate.exists():
    time.sleep(0.002)
sys.argv = ["ctwd", *sys.argv[2:]]
monitor.cli.main()
"""


def test_kill_at_random_points_leaves_old_or_complete_results(tmp_path):
    """SIGKILL a `ctwd scan` subprocess at random moments of its work, many times (< 60 s in all).

    The kill moment is drawn uniformly over the scan's working time (from taking the lock to
    exit, measured on a first full run), so kills land while reading, while staging and inside
    the commit; ``CTWD_COMMIT_PAUSE`` widens the commit so that it is hit often.
    """
    logs = _logs(tmp_path / "logs")
    out = tmp_path / "out"
    gates = tmp_path / "gates"
    gates.mkdir()
    env = {**os.environ, "PYTHONPATH": str(ROOT), "CTWD_COMMIT_PAUSE": "0.05"}
    args = ["scan", str(logs), "--config", str(CONFIG_DIR), "--out", str(out), "-q", "--no-page"]

    def spawn(k: int) -> tuple[subprocess.Popen, Path]:
        gate = gates / f"go-{k}"
        return subprocess.Popen([sys.executable, "-c", _GATED, str(gate), *args], env=env,
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL), gate

    proc, gate = spawn(0)
    waiting = [spawn(1), spawn(2)]  # two warm victims in reserve
    gate.touch()
    _until_locked(proc, out)
    t_lock = time.perf_counter()
    assert proc.wait(timeout=60) == 0
    work = time.perf_counter() - t_lock
    rng = random.Random(20261201)
    outcomes = {"as before": 0, "complete (new run)": 0, "rolled forward at next start": 0}
    budget = 20.0  # seconds of kill loop; with the first and last full runs the test stays under 60 s
    start = time.perf_counter()
    iterations = 0
    # time-bounded: on a busy machine each scan is slower and fewer kills fit; at least 3 are made
    while time.perf_counter() - start < budget or iterations < 3:
        before = consistent_run_id(out)
        proc, gate = waiting.pop(0)
        waiting.append(spawn(iterations + 3))
        gate.touch()
        _until_locked(proc, out)
        time.sleep(rng.uniform(0.0, 1.1 * work))
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        iterations += 1
        if (out / JOURNAL).exists():
            # killed inside the commit: the next start rolls the staged run forward
            assert recover(out) is not None
            after = consistent_run_id(out)
            assert after != before
            outcomes["rolled forward at next start"] += 1
        else:
            recover(out)  # what the next start does: discard an unfinished staging folder
            after = consistent_run_id(out)
            outcomes["as before" if after == before else "complete (new run)"] += 1
        assert not any(p.name.startswith(".staging-") for p in out.iterdir())
    # and the next run completes normally (the killed scan's stale lock is recovered)
    proc, gate = waiting.pop(0)
    gate.touch()
    assert proc.wait(timeout=60) == 0
    for spare, _gate in waiting:
        spare.kill()
        spare.wait(timeout=30)
    final = consistent_run_id(out)
    assert final is not None and not (out / LOCK_NAME).exists()
    elapsed = time.perf_counter() - start
    record("kill", "SIGKILL at random moments", "survived", f"{iterations} kills in {elapsed:.0f} s",
           iterations=iterations, outcomes=outcomes)


class _Crash(BaseException):
    """A simulated power cut: not an Exception, so no handler of the program cleans up after it."""


def test_crash_at_every_commit_step_is_recovered(tmp_path, cfg, monkeypatch):
    """Exhaustive companion of the kill test: stop the process at each commit step in turn."""
    import monitor.store as store

    logs = _logs(tmp_path / "logs", n=1)
    out = tmp_path / "out"
    run_scan([logs], cfg, out, page=False, quiet=True)
    steps, k, seen = 0, 0, {"as before": 0, "rolled forward at next start": 0}
    while True:
        calls = {"n": 0}

        def pause(target=k, calls=calls):
            calls["n"] += 1
            if calls["n"] == target + 1:
                raise _Crash

        monkeypatch.setattr(store, "_fault_pause", pause)
        before = consistent_run_id(out)
        try:
            run_scan([logs], cfg, out, page=False, quiet=True)
            finished = True
        except _Crash:
            finished = False
        monkeypatch.setattr(store, "_fault_pause", lambda: None)
        if finished:
            break
        (out / LOCK_NAME).unlink(missing_ok=True)  # the dead process's lock (its pid is ours here)
        had_journal = (out / JOURNAL).exists()
        recover(out)
        now = consistent_run_id(out)
        assert now is not None
        seen["rolled forward at next start" if had_journal else "as before"] += 1
        assert (now != before) if had_journal else (now == before)
        steps += 1
        k += 1
    assert steps >= 6 and seen["as before"] >= 3 and seen["rolled forward at next start"] >= 3
    record("kill_steps", "crash at every commit step (in process)", "recovered", f"{steps} crash points", steps=steps,
           outcomes=seen)


def test_second_scan_is_refused_with_who_and_since(tmp_path, cfg):
    out = tmp_path / "out"
    logs = _logs(tmp_path / "logs", n=1)
    with scan_lock(out):
        with pytest.raises(ScanBusy, match="another scan is running since"):
            with scan_lock(out):
                pass
        res = CliRunner().invoke(main, ["scan", str(logs), "--config", str(CONFIG_DIR), "--out", str(out), "-q"])
    assert res.exit_code == 3
    line = res.output.strip()
    assert "another scan is running since" in line and f"(pid {os.getpid()}" in line and "\n" not in line
    assert not (out / "run.json").exists()
    record("lock", "second scan while one runs", "refused, exit 3",
           line.split("ctwd: ", 1)[-1].split("; lock file", 1)[0])


def test_stale_lock_of_a_dead_process_is_recovered(tmp_path, cfg):
    out = tmp_path / "out"
    out.mkdir()
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    (out / LOCK_NAME).write_text(json.dumps({"pid": dead.pid, "start_ticks": 1, "host": os.uname().nodename,
                                             "since": "2026-11-30T02:00:00Z"}))
    run = run_scan([_logs(tmp_path / "logs", n=1)], cfg, out, quiet=True)
    assert any("stale lock" in n and str(dead.pid) in n for n in run["notes"])
    assert not (out / LOCK_NAME).exists() and consistent_run_id(out) == run["run_id"]
    record("lock", "stale lock (owner killed)", "recovered", run["notes"][0])


def test_reused_pid_is_not_mistaken_for_the_owner(tmp_path):
    """A lock naming a live pid but another start time (pid reused after a reboot) is stale."""
    out = tmp_path / "out"
    out.mkdir()
    ticks = process_start_ticks(os.getpid())
    if ticks is None:
        pytest.skip("no /proc on this system")
    (out / LOCK_NAME).write_text(json.dumps({"pid": os.getpid(), "start_ticks": ticks - 1,
                                             "host": os.uname().nodename, "since": "?"}))
    notes: list[str] = []
    with scan_lock(out, notes):
        pass
    assert notes and "stale lock" in notes[0]


def test_disk_full_keeps_previous_results(tmp_path, cfg, monkeypatch):
    logs = _logs(tmp_path / "logs", n=2)
    out = tmp_path / "out"
    first = run_scan([logs], cfg, out, quiet=True)
    snapshot = {p.name: _sha(p) for p in out.iterdir()}

    def no_space(self, *a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(pl.DataFrame, "write_csv", no_space)
    res = CliRunner().invoke(main, ["scan", str(logs), "--config", str(CONFIG_DIR), "--out", str(out), "-q"])
    assert res.exit_code == 4
    line = res.output.strip()
    assert "\n" not in line and "disk full" in line and "previous results kept" in line
    assert {p.name: _sha(p) for p in out.iterdir()} == snapshot  # nothing changed, nothing left behind
    assert consistent_run_id(out) == first["run_id"]
    monkeypatch.undo()
    assert run_scan([logs], cfg, out, quiet=True)["run_id"] != first["run_id"]  # and the next run works
    record("disk_full", "disk full while writing (ENOSPC)", "clear error, exit 4, previous results intact",
           line.split("ctwd: ", 1)[-1].replace(str(out), "OUT"))


def _tree(folder: Path) -> dict[str, tuple[int, int]]:
    return {str(p.relative_to(folder)): (p.stat().st_size, p.stat().st_mtime_ns) for p in sorted(folder.rglob("*"))}


def test_read_only_logs_are_fine_and_never_written(tmp_path, cfg):
    logs = _logs(tmp_path / "logs", n=2)
    before = _tree(logs)
    for p in [*logs.rglob("*"), logs]:
        p.chmod(0o555 if p.is_dir() else 0o444)
    try:
        run = run_scan([logs], cfg, tmp_path / "out", quiet=True)
    finally:
        for p in [logs, *logs.rglob("*")]:
            p.chmod(0o755 if p.is_dir() else 0o644)
    assert run["counts"]["files_skipped"] == 0 and run["counts"]["seams"] == 6
    assert _tree(logs) == before  # (as root the mode bits do not stop writes: the snapshot does)
    record("read_only", "read-only log folder", "read, nothing written into it", "2 files, 6 seams")


def test_part_name_with_path_parts_stays_inside_out(tmp_path, cfg):
    logs = tmp_path / "logs"
    logs.mkdir()
    df = good_frame(np.random.default_rng(9), "../../etc/passwd").with_columns(pl.lit("../../etc").alias("part"))
    df.write_csv(logs / "evil.csv")
    out = tmp_path / "sub" / "out"
    outside_before = _tree(tmp_path)
    run_scan([logs], cfg, out, quiet=True)
    created = set(_tree(tmp_path)) - set(outside_before)
    assert all(c.startswith("sub/out") or c == "sub" for c in created), created
    seams = pl.read_parquet(out / "seams.parquet")
    assert (seams["status"] == "invalid").all()
    assert seams["reason"].str.contains('no part config for "../../etc"', literal=True).all()
    record("security", 'part named "../../etc"', "stays inside --out; seams invalid (unknown part)", "")


def test_no_eval_exec_or_pickle_in_the_code():
    """Data never becomes code: no eval/exec/pickle/marshal/yaml.load anywhere in the package."""
    banned_calls = {"eval", "exec", "compile", "__import__"}
    banned_modules = {"pickle", "cPickle", "marshal", "shelve", "dill", "cloudpickle", "yaml"}
    hits = []
    for f in [*ROOT.glob("ingest/*.py"), *ROOT.glob("monitor/*.py")]:
        tree = ast.parse(f.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id in banned_calls:
                hits.append(f"{f.name}:{node.lineno} {node.func.id}()")
            if isinstance(node, ast.Import | ast.ImportFrom):
                mods = [a.name for a in node.names] if isinstance(node, ast.Import) else [node.module or ""]
                hits += [f"{f.name}:{node.lineno} import {m}" for m in mods if m.split(".")[0] in banned_modules]
            if isinstance(node, ast.Attribute) and node.attr in {"read_pickle", "loads"} and \
                    isinstance(node.value, ast.Name) and node.value.id in {"pd", "pickle"}:
                hits.append(f"{f.name}:{node.lineno} {node.value.id}.{node.attr}")
    assert hits == []
    record("security", "eval / exec / pickle in the code", "none", "AST scan of ingest/ and monitor/")


def test_interrupted_stage_without_journal_is_discarded(tmp_path, cfg):
    out = tmp_path / "out"
    run = run_scan([_logs(tmp_path / "logs", n=1)], cfg, out, quiet=True)
    stage = out / ".staging-deadbeef"
    stage.mkdir()
    (stage / "seams.parquet").write_bytes(b"half")
    assert "discarded" in recover(out)
    assert not stage.exists() and consistent_run_id(out) == run["run_id"]
    shutil.rmtree(out)

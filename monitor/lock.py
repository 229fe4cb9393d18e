"""One scan at a time per results folder: an exclusive lock file with the owner's pid and start time."""

from __future__ import annotations

import json
import os
import socket
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

__all__ = ["LOCK_NAME", "ScanBusy", "scan_lock", "process_start_ticks"]

LOCK_NAME = ".ctwd-scan.lock"


class ScanBusy(RuntimeError):
    """Another live scan holds the lock; the message is the one-line explanation."""


def process_start_ticks(pid: int) -> int | None:
    """Start time of process ``pid`` in clock ticks since boot (Linux /proc), or None if unknown.

    Together with the pid this tells a live owner from a new process that reused a dead one's pid.
    """
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    # field 22 (starttime), counted after the parenthesised command name, which may hold spaces
    return int(stat.rsplit(")", 1)[1].split()[19])


def _alive(pid: int, ticks: int | None) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    if ticks is not None:
        now = process_start_ticks(pid)
        if now is not None and now != ticks:
            return False  # the pid was reused by another process
    return True


def _read(path: Path) -> dict | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        return data if isinstance(data, dict) and isinstance(data.get("pid"), int) else None
    except (OSError, ValueError):
        return None


#: lock files this process holds (re-entrant within one process, exclusive across processes)
_HELD: set[Path] = set()


@contextmanager
def scan_lock(folder: Path, notes: list[str] | None = None, reentrant: bool = False) -> Iterator[Path]:
    """Hold ``folder/.ctwd-scan.lock`` for the duration of a scan.

    The lock file is created with O_CREAT|O_EXCL (atomic on local file systems) and holds the
    owner's pid, its start ticks, host and start time. A lock whose process is gone (killed scan,
    power cut) is stale: it is removed, a line saying so is appended to ``notes``, and the lock is
    taken.

    With ``reentrant``, a lock this process already holds is simply used again.

    Raises
    ------
    ScanBusy
        "another scan is running since <time> (pid N on host)" when the owner is alive.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / LOCK_NAME
    key = path.resolve()
    if reentrant and key in _HELD:  # this process holds it already (--out and the history are one folder)
        yield path
        return
    me = {"pid": os.getpid(), "start_ticks": process_start_ticks(os.getpid()), "host": socket.gethostname(),
          "since": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")}
    for _attempt in range(3):
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            owner = _read(path)
            if owner is None:
                # half-written lock (owner killed between create and write) or garbage: stale
                # only if it is not brand new (another scan may be writing it right now)
                try:
                    age = datetime.now(UTC).timestamp() - path.stat().st_mtime
                except OSError:
                    continue
                if age < 5:
                    raise ScanBusy(f"another scan is starting in {folder} (lock file {path.name} is being written)") from None
                owner = {"pid": -1, "since": "?"}
            elif owner.get("host", me["host"]) == me["host"] and not _alive(owner["pid"], owner.get("start_ticks")):
                pass
            else:
                raise ScanBusy(f"another scan is running since {owner.get('since', '?')} (pid {owner['pid']}"
                               f"{' on ' + owner['host'] if owner.get('host') != me['host'] else ''}); "
                               f"lock file {path}") from None
            path.unlink(missing_ok=True)
            if notes is not None:
                notes.append(f"removed a stale lock of pid {owner['pid']} (since {owner.get('since', '?')}); "
                             "that scan did not finish")
            continue
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(me, fh)
        break
    else:
        raise ScanBusy(f"cannot take the lock {path} (another scan keeps replacing it)")
    _HELD.add(key)
    try:
        yield path
    finally:
        _HELD.discard(key)
        if (_read(path) or {}).get("pid") == me["pid"]:
            path.unlink(missing_ok=True)

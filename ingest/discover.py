"""Find export files under the paths a user gives: files and folders, nested, loop-safe."""

from __future__ import annotations

import errno
import os
from pathlib import Path

from ingest.reader import file_format

__all__ = ["discover"]


def _link_problem(path: Path) -> str:
    """Why a symbolic link cannot be followed: a loop, or a target that is gone."""
    try:
        os.stat(path)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            return "symbolic link loop (the link points back to itself); skipped"
    return "broken symbolic link (its target is gone)"


def discover(paths: list[Path]) -> tuple[list[Path], list[tuple[Path, str]]]:
    """Expand files and folders into export files, sorted, each once.

    Folders are walked recursively without following symbolic links to folders (a link loop
    cannot trap the walk); linked files are read. Hidden files and folders (leading dot) and
    files that are not CSV or Parquet are passed over.

    Returns
    -------
    (files, problems)
        The export files found, and ``(path, reason)`` for given paths that could not be used.
    """
    found: dict[Path, None] = {}
    problems: list[tuple[Path, str]] = []
    for p in paths:
        p = Path(p)
        if p.is_file():
            if file_format(p) is None:
                problems.append((p, f"not a CSV or Parquet export (suffix {p.suffix!r})"))
            else:
                found[p] = None
            continue
        if not p.exists():
            problems.append((p, "no such file or folder" if not p.is_symlink() else _link_problem(p)))
            continue
        if p.is_dir():
            def on_error(e: OSError, top: Path = p) -> None:
                problems.append((Path(e.filename or top), f"folder cannot be read ({e.strerror})"))

            for root, dirs, files in os.walk(p, followlinks=False, onerror=on_error):
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                for name in sorted(files):
                    if name.startswith("."):
                        continue
                    f = Path(root) / name
                    if file_format(f) is not None:
                        if f.is_symlink() and not f.exists():
                            problems.append((f, _link_problem(f)))
                        else:
                            found[f] = None
            continue
        problems.append((p, "not a regular file or folder"))
    return sorted(found), problems

"""Figures for the README "Reliability" table, written by the tests themselves.

When the environment variable ``CTWD_RELIABILITY_JSON`` names a file, each reliability test
appends one JSON line to it: ``{"test": ..., "kind": ..., "outcome": ..., "detail": ...}``.
``tests/reliability_table.py`` turns those lines into the markdown table. Without the variable
nothing is written, so a normal test run leaves no files behind.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

__all__ = ["record", "ENV"]

ENV = "CTWD_RELIABILITY_JSON"


def record(test: str, kind: str, outcome: str, detail: str = "", **figures: object) -> None:
    """Append one figure line (only when ``CTWD_RELIABILITY_JSON`` is set)."""
    target = os.environ.get(ENV)
    if not target:
        return
    line = {"test": test, "kind": kind, "outcome": outcome, "detail": detail, **figures}
    with open(Path(target), "a", encoding="utf-8") as fh:
        fh.write(json.dumps(line, default=str) + "\n")

"""Render the README "Reliability" table from the figures the test suite wrote.

    CTWD_RELIABILITY_JSON=/tmp/rel.jsonl python -m pytest tests/test_bad_input.py tests/test_faults.py \\
        tests/test_config_errors.py tests/test_properties.py
    python tests/reliability_table.py /tmp/rel.jsonl > table.md

Every number in the table comes from those lines (see tests/reliability.py); nothing is typed in.
Only tests that passed reach their ``record`` call, so a listed row is a passed check.
"""

from __future__ import annotations

import json
import sys
from collections import Counter
from pathlib import Path

__all__ = ["load", "render"]


def load(path: Path) -> list[dict]:
    return [json.loads(line) for line in Path(path).read_text(encoding="utf-8").splitlines() if line.strip()]


def _cell(text: object) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def render(rows: list[dict]) -> str:
    """Markdown: a summary table, then one row per bad-input kind with its outcome and reason."""
    by = Counter(r["test"] for r in rows)
    bad = [r for r in rows if r["test"] == "bad_input"]
    outcomes = Counter(r["outcome"] for r in bad)
    kills = [r for r in rows if r["test"] == "kill"]
    steps = [r for r in rows if r["test"] == "kill_steps"]
    lines = ["| Check | Result |", "|---|---|"]
    lines.append(f"| Bad-input kinds tried | {len(bad)} — " + "; ".join(f"{n} {o}" for o, n in sorted(outcomes.items()))
                 + " |")
    if by.get("config_error"):
        lines.append(f"| Config errors (exit 2, one line naming file and key, no log read) | {by['config_error']} kinds |")
    for k in kills:
        o = k.get("outcomes", {})
        lines.append(f"| Scan killed with SIGKILL at random moments | {k['iterations']} kills survived "
                     f"({', '.join(f'{v} {n}' for n, v in o.items())}); next run completed normally |")
    for s in steps:
        o = s.get("outcomes", {})
        lines.append(f"| Crash at every commit step | {s['steps']} crash points recovered "
                     f"({', '.join(f'{v} {n}' for n, v in o.items())}) |")
    for r in rows:
        if r["test"] in ("lock", "disk_full", "read_only", "security", "property", "bad_input_timing"):
            detail = f" — {_cell(r['detail'])}" if r.get("detail") else ""
            lines.append(f"| {_cell(r['kind'])} | {_cell(r['outcome'])}{detail} |")
    lines += ["", "| Bad input | Outcome | Reason or note given (one line) |", "|---|---|---|"]
    for r in bad:
        lines.append(f"| {_cell(r['kind'])} | {_cell(r['outcome'])} | {_cell(r['detail'])} |")
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: python tests/reliability_table.py FIGURES.jsonl")
    sys.stdout.write(render(load(Path(sys.argv[1]))))

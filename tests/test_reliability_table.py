"""The table script renders what the tests recorded (and only that)."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from reliability_table import render  # noqa: E402


def test_render_counts_what_was_recorded():
    rows = [
        {"test": "bad_input", "kind": "empty file", "outcome": "skipped", "detail": "file is empty"},
        {"test": "bad_input", "kind": "a | b", "outcome": "invalid", "detail": "x"},
        {"test": "kill", "kind": "k", "outcome": "survived", "detail": "", "iterations": 7,
         "outcomes": {"as before": 5, "complete (new run)": 2}},
        {"test": "lock", "kind": "second scan", "outcome": "refused", "detail": "another scan is running since t (pid 1)"},
    ]
    md = render(rows)
    assert "| Bad-input kinds tried | 2 — 1 invalid; 1 skipped |" in md
    assert "7 kills survived (5 as before, 2 complete (new run))" in md
    assert "a \\| b" in md  # pipes escaped so the table stays a table
    # 3 summary rows (bad-input count, kill, lock) + the second header + 2 per-kind rows
    assert md.count("\n| ") == 3 + 1 + 2

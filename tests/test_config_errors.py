"""Config errors stop the scan with exit 2 and one line naming the file and the key, before any log is read."""

from __future__ import annotations

import re
import shutil
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).resolve().parent))

from corpus import CONFIG_DIR  # noqa: E402
from reliability import record  # noqa: E402

from monitor.cli import main  # noqa: E402

PART_FILE = "parts/tb7-tow-bracket.toml"


def _edit(root: Path, rel: str, old: str, new: str) -> Path:
    p = root / rel
    text = p.read_text(encoding="utf-8")
    assert old in text, f"{old!r} not in {rel}"
    p.write_text(text.replace(old, new, 1), encoding="utf-8")
    return p


CASES = [
    # (what, file, old text, new text, key the message must name)
    ("unknown key", "cell.toml", 'min_current = "30 A"', 'min_current = "30 A"\nmin_curent = "25 A"', "min_curent"),
    ("bad unit", "cell.toml", 'trim_start = "0.5 s"', 'trim_start = "0.5 kg"', "trim_start"),
    ("bad unit (decimal comma)", PART_FILE, 'min_penetration = "2.5 mm"', 'min_penetration = "2,5 mm"', "min_penetration"),
    ("missing wire", PART_FILE, 'wire = "steel-1.0"', 'wire = "steel-1.2"', "wire"),
    ("seam named twice", PART_FILE, 'name = "S3"', 'name = "S2"', "S2"),
    ("unknown channel unit", "cell.toml", 'unit = "m/min"', 'unit = "furlong/fortnight/A"', "wire_feed"),
]


@pytest.mark.parametrize("what,rel,old,new,key", CASES, ids=[c[0] for c in CASES])
def test_config_error_exits_2_with_one_line_before_reading_logs(what, rel, old, new, key, tmp_path, monkeypatch):
    root = tmp_path / "config"
    shutil.copytree(CONFIG_DIR, root)
    bad = _edit(root, rel, old, new)
    import monitor.pipeline as pipeline

    def must_not_run(*_a, **_k):  # any log reading after a config error is a bug
        raise AssertionError("logs were read despite a config error")

    monkeypatch.setattr(pipeline, "scan_paths", must_not_run)
    monkeypatch.setattr(pipeline, "scan_file", must_not_run)
    logs = tmp_path / "logs"
    logs.mkdir()
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["scan", str(logs), "--config", str(root), "--out", str(out)])
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1, res.output
    line = lines[0]
    assert str(bad) in line, line
    assert re.search(rf"\b{re.escape(key)}\b", line), line
    assert "Traceback" not in res.output
    assert not out.exists()  # nothing written either
    record("config_error", what, "exit 2, one line", line.split(": ", 1)[1] if ": " in line else line)

"""Unit strings remembered between runs give exactly pint's conversion; errors are never remembered.

Reference: pint (general-purpose units library) converting the same strings directly.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

import monitor.units as units


@pytest.fixture()
def cache(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    units._memo.cache_clear()
    yield tmp_path
    units._memo.cache_clear()


CASES = [("15 mm", "length", "m"), ("0.017 lb/h/A", "melt_a", "kg/s/A"), ("20 in/min", "speed", "m/s"),
         ("7.85 g/cm**3", "density", "kg/m**3"), ("5 %", "dimensionless", "")]


@pytest.mark.parametrize("text,dimension,si", CASES)
def test_remembered_value_is_pints_conversion(cache, text, dimension, si):
    ureg = units.registry()
    want = float(ureg.Quantity(text).to(si or "dimensionless").magnitude)
    assert units.to_si(text, dimension) == want  # parsed by pint, then remembered
    units._memo.cache_clear()
    assert units.to_si(text, dimension) == want  # read back from the file: the same float
    assert next(cache.glob("ctwd-monitor/units-pint-*.json")).is_file()


def test_a_string_is_not_reused_for_another_dimension(cache):
    assert units.to_si("15 mm", "length") == pytest.approx(0.015)
    with pytest.raises(units.UnitError):
        units.to_si("15 mm", "speed")


def test_errors_are_not_remembered_and_a_damaged_file_is_ignored(cache):
    with pytest.raises(units.UnitError):
        units.to_si("15 furlongs per fortnight", "length")
    memo = next(cache.glob("ctwd-monitor/*.json"), None)
    assert memo is None or "furlongs" not in memo.read_text()
    units.to_si("1 A", "current")
    path = next(cache.glob("ctwd-monitor/*.json"))
    path.write_text("{not json")
    units._memo.cache_clear()
    assert units.to_si("220 A", "current") == 220.0
    assert json.loads(path.read_text())["A\x1f220 A"] == 220.0


def test_a_remembered_config_loads_without_importing_pint(cache):
    code = ("import sys; from pathlib import Path; from monitor.config import load_config; "
            "load_config(Path('config')); print('pint' in sys.modules)")
    env = {"XDG_CACHE_HOME": str(cache), "PATH": "/usr/bin:/bin"}
    root = Path(__file__).resolve().parent.parent
    env["PYTHONPATH"] = str(root)
    first, second = (subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                                    cwd=root, check=True) for _ in range(2))
    assert first.stdout.strip() == "True" and second.stdout.strip() == "False"

"""Configuration parsing: unit strings through pint, one-line errors naming file and key."""

from __future__ import annotations

import shutil

import pint
import pytest
from hypothesis import given
from hypothesis import strategies as st

from monitor.config import ConfigError, load_config
from monitor.units import UnitError, to_si

ureg = pint.UnitRegistry()


@pytest.mark.parametrize("text, dim, unit", [
    ("15 mm", "length", "m"), ("0.6 in", "length", "m"), ("9 m/min", "speed", "m/s"), ("350 in/min", "speed", "m/s"),
    ("7.85 g/cm**3", "density", "kg/m**3"), ("0.017 lb/h/A", "melt_a", "kg/s/A"),
    ("0.00014 lb/h/in/A**2", "melt_b", "kg/s/m/A**2"), ("0.5 s", "time", "s"), ("220 A", "current", "A"),
])
def test_to_si_agrees_with_pint(text, dim, unit):
    # pint (reference library) converts the same strings independently
    assert to_si(text, dim) == pytest.approx(ureg(text).to(unit).magnitude, rel=1e-12)


@given(st.floats(0.01, 1000), st.sampled_from(["mm", "in", "cm", "m"]))
def test_length_strings_round_trip(value, unit):
    si = to_si(f"{value!r} {unit}", "length")
    assert ureg.Quantity(si, "m").to(unit).magnitude == pytest.approx(value, rel=1e-9)


@pytest.mark.parametrize("text", ["2,5 mm", "2.5 V", "mm", "2.5", "fifteen mm"])
def test_bad_lengths_are_refused(text):
    with pytest.raises(UnitError):
        to_si(text, "length")


def test_demo_config_loads(demo_config):
    part = demo_config.parts["TB7-tow-bracket"]
    assert part.seam("S1").min_penetration == pytest.approx(2.6e-3)
    assert part.seam("S2").min_penetration == pytest.approx(2.5e-3)  # default
    assert part.seam("S9").nominal_ctwd == pytest.approx(15e-3)  # unlisted seam takes the defaults


@pytest.mark.parametrize("file, old, new, key", [
    ("cell.toml", 'trim_start = "0.5 s"', 'trim_start = "0.5 mm"', "trim_start"),
    ("cell.toml", "[arc]", "[arc]\nmin_curent = \"30 A\"", "min_curent"),
    ("wires.toml", 'diameter = "1.0 mm"', 'diameter = "1.0"', "diameter"),
    ("parts/tb7-tow-bracket.toml", 'wire = "steel-1.0"', 'wire = "steel-9"', "wire"),
    ("parts/tb7-tow-bracket.toml", 'name = "S3"', 'name = "S2"', "name"),
    ("parts/tb7-tow-bracket.toml", 'depth = "2.9 mm"', 'depth = "2.9 mm/s"', "depth"),
])
def test_config_errors_name_file_and_key(tmp_path, repo_root, file, old, new, key):
    cfg = tmp_path / "config"
    shutil.copytree(repo_root / "config", cfg)
    p = cfg / file
    text = p.read_text()
    assert old in text
    p.write_text(text.replace(old, new, 1))
    with pytest.raises(ConfigError) as e:
        load_config(cfg)
    msg = str(e.value)
    assert "\n" not in msg and str(p) in msg and key in msg

"""Drift budget (`ctwd limits`): CTWD at which penetration reaches the minimum at programmed settings."""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from monitor.cli import main
from monitor.config import load_config
from monitor.limits import part_limits, penetration_at_ctwd

REPO = Path(__file__).resolve().parent.parent
IN = 0.0254  # m per inch (exact)
LB = 0.45359237  # kg per pound (exact)

# Outside check (common practice, no source): 0.035 in steel wire, A = 0.017 lb/h/A,
# B = 0.00014 lb/h/(in·A²); programmed WFS giving 200 A at 3/8 in CTWD, 23 V, 10 in/min; Jackson
# reference 0.127 in at 200 A / 23 V / 10 in/min. At 1/2 in: about 184 A and 0.114 in.
A_LB_H = 0.017
B_LB_H_IN = 0.00014
DENSITY = 7850.0  # kg/m³, carbon steel (common practice, no source)


def programmed_wfs_m_min() -> float:
    """WFS that melts at 200 A and 3/8 in: MR = A·I + B·L·I², WFS = MR / (ρ·π d²/4)."""
    mr_lb_h = A_LB_H * 200 + B_LB_H_IN * 0.375 * 200**2
    mr = mr_lb_h * LB / 3600
    area = math.pi * (0.035 * IN) ** 2 / 4
    return mr / (DENSITY * area) * 60


def write_config(tmp_path: Path, part_extra: str = "", min_pen: str = "0.114 in", wfs: bool = True) -> Path:
    cfg = tmp_path / "config"
    (cfg / "parts").mkdir(parents=True)
    shutil.copy(REPO / "config" / "cell.toml", cfg / "cell.toml")
    (cfg / "wires.toml").write_text(
        '[wire."steel-0.035"]\ndiameter = "0.035 in"\ndensity = "7.85 g/cm**3"\n'
        f'melt_a = "{A_LB_H} lb/h/A"\nmelt_b = "{B_LB_H_IN} lb/h/in/A**2"\n')
    wfs_line = f'wire_feed = "{programmed_wfs_m_min():.6f} m/min"\n' if wfs else ""
    (cfg / "parts" / "check.toml").write_text(
        f'part = "CHECK"\nwire = "steel-0.035"\nnominal_ctwd = "0.375 in"\nmin_penetration = "{min_pen}"\n'
        f'travel_speed = "10 in/min"\nvoltage = "23 V"\n{wfs_line}{part_extra}\n'
        '[penetration_reference]\ncurrent = "200 A"\nvoltage = "23 V"\ntravel_speed = "10 in/min"\n'
        'depth = "0.127 in"\n\n[[seam]]\nname = "S1"\n')
    return cfg


def test_outside_check_values(tmp_path):
    cfg = load_config(write_config(tmp_path))
    part = cfg.parts["CHECK"]
    w = cfg.wires[part.wire]
    s = part.seam("S1")
    i_nom, p_nom = penetration_at_ctwd(0.375 * IN, s.wire_feed, s.voltage, s.travel_speed, part, w.melt_a, w.melt_b,
                                       w.diameter, w.density)
    assert float(i_nom) == pytest.approx(200.0, rel=1e-6)
    assert float(p_nom) / IN == pytest.approx(0.127, rel=1e-6)
    i_half, p_half = penetration_at_ctwd(0.5 * IN, s.wire_feed, s.voltage, s.travel_speed, part, w.melt_a,
                                         w.melt_b, w.diameter, w.density)
    assert float(i_half) == pytest.approx(184, abs=1)
    assert float(p_half) / IN == pytest.approx(0.114, abs=0.0005)
    # independent route for the current: the quadratic B·L·I² + A·I − MR = 0 solved by numpy.roots
    mr = A_LB_H * 200 + B_LB_H_IN * 0.375 * 200**2
    root = max(np.roots([B_LB_H_IN * 0.5, A_LB_H, -mr]).real)
    assert float(i_half) == pytest.approx(root, rel=1e-6)  # WFS is written rounded to 1e-6 m/min
    (lim,) = part_limits(cfg, "CHECK")
    assert lim.problem is None
    assert 0.47 * IN * 1e3 < lim.limit_ctwd_mm < 0.5 * IN * 1e3  # "just under 1/2 in"
    assert lim.current_at_limit_a == pytest.approx(184, abs=1.5)
    assert lim.margin_mm == pytest.approx(lim.limit_ctwd_mm - 0.375 * IN * 1e3)


def test_cli_json_keys_and_table(tmp_path):
    cfg = write_config(tmp_path)
    r = CliRunner()
    res = r.invoke(main, ["limits", "--config", str(cfg), "--part", "CHECK", "--json"])
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert list(data[0]) == ["seam", "nominal_ctwd_mm", "limit_ctwd_mm", "current_at_limit_a", "margin_mm"]
    assert data[0]["nominal_ctwd_mm"] == pytest.approx(9.525)
    table = r.invoke(main, ["limits", "--config", str(cfg), "--part", "CHECK"])
    assert table.exit_code == 0 and "S1" in table.output and "mm" in table.output


def test_missing_programmed_wfs_is_refused(tmp_path):
    cfg = write_config(tmp_path, wfs=False)
    res = CliRunner().invoke(main, ["limits", "--config", str(cfg), "--part", "CHECK", "--json"])
    assert res.exit_code == 2
    assert 'seam "S1": refused: no programmed wire_feed' in res.output
    assert json.loads(res.output.split("\nctwd:")[0])[0]["limit_ctwd_mm"] is None


@pytest.mark.parametrize("min_pen, words", [("0.15 in", "already"), ("0.01 in", "stays above")])
def test_minimum_that_cannot_be_reached(tmp_path, min_pen, words):
    cfg = load_config(write_config(tmp_path, min_pen=min_pen))
    (lim,) = part_limits(cfg, "CHECK")
    assert lim.limit_ctwd_mm is None and lim.problem.startswith("cannot be reached") and words in lim.problem


def test_unknown_part_is_a_usage_error(tmp_path):
    res = CliRunner().invoke(main, ["limits", "--config", str(write_config(tmp_path)), "--part", "NOPE"])
    assert res.exit_code == 2 and "known parts: CHECK" in res.output


def test_closed_form_limit_equals_scipy_root_search():
    # Reference: scipy.optimize.brentq (a reference library) on the same P(L) relation; the scan
    # uses the closed form (Jackson inverted for current, Lesnewich solved for CTWD).
    from scipy.optimize import brentq

    from monitor.judge import CTWD_RANGE_M
    from monitor.limits import seam_limit

    cfg = load_config(REPO / "config")
    checked = 0
    for part in cfg.parts.values():
        w = cfg.wires[part.wire]
        for spec in part.seams.values():
            lim = seam_limit(cfg, part, spec)
            if lim.limit_ctwd_mm is None:
                continue

            def gap(c, spec=spec, part=part, w=w):
                return float(penetration_at_ctwd(c, spec.wire_feed, spec.voltage, spec.travel_speed, part,
                                                 w.melt_a, w.melt_b, w.diameter, w.density)[1]) - spec.min_penetration

            root = brentq(gap, max(spec.nominal_ctwd, CTWD_RANGE_M[0]), CTWD_RANGE_M[1], xtol=1e-12)
            assert lim.limit_ctwd_mm == pytest.approx(root * 1e3, abs=1e-6)
            checked += 1
    assert checked >= 3

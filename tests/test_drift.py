"""Drift across parts: charts per seam position, tip-change resets, forecasts, [drift] config."""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta

import numpy as np
import polars as pl
import pytest

from monitor.config import ConfigError, DriftSettings, load_config
from monitor.drift import (
    TIP_STEP_SIGMAS,
    analyse_series,
    apply_drift_status,
    detect_tip_changes,
    drift_frame,
    forecast_sentences,
)

NOMINAL_MM = 15.0


def seam_frame(dev_mm: np.ndarray, pen_mm: np.ndarray | None = None, part: str = "P1", min_pen: float = 2.5,
               tip_change: np.ndarray | None = None) -> pl.DataFrame:
    """A published-like seam table: dev_mm is (seams × parts) CTWD deviation from nominal [mm]."""
    n_seams, n_parts = dev_mm.shape
    t0 = datetime(2026, 11, 1, 22, tzinfo=UTC)
    rows = []
    for j in range(n_parts):
        for i in range(n_seams):
            rows.append({
                "source": f"log_{j:04d}.parquet", "part": part, "serial": f"SN-{j:04d}", "seam": f"S{i + 1}",
                "start": t0 + timedelta(minutes=3 * j, seconds=10 * i), "status": "ok", "reason": "fine",
                "ctwd_mm": NOMINAL_MM + dev_mm[i, j], "ctwd_nominal_mm": NOMINAL_MM,
                "penetration_mm": 3.0 if pen_mm is None else pen_mm[i, j], "min_penetration_mm": min_pen,
                "arc_time_s": 6.0, **({"tip_change": bool(tip_change[j])} if tip_change is not None else {}),
            })
    return pl.DataFrame(rows).with_columns(pl.col("start").dt.cast_time_unit("us"))


def test_no_drift_signals_beyond_the_expected_rate():
    # In-control data through the per-seam pipeline (baseline sigma by moving range, then both charts):
    # each chart's run length to its first signal must match that chart's in-control ARL. Published
    # values (from memory): CUSUM k=0.5, h=5 about 465 (Montgomery, Introduction to Statistical
    # Quality Control); EWMA lambda=0.1, L=2.814 about 500 (Lucas and Saccucci 1990). The EWMA here
    # uses exact limits (a few more early signals), hence the wider lower tolerance.
    rng = np.random.default_rng(3)
    s = DriftSettings(ewma_lambda=0.1, ewma_l=2.814, cusum_k=0.5, cusum_h=5.0, baseline_parts=300)
    n_series, n, b = 200, 3300, 300
    restart = np.zeros(n, dtype=bool)
    restart[b] = True  # zero-state charts from the first part after the baseline, as the tables assume
    rl_c, rl_e, rl_any = [], [], []
    for _ in range(n_series):
        x = rng.normal(0.0, 0.3, n)
        res = analyse_series(x, restart, s)
        chart = np.array([c or "" for c in res.chart])
        for out, mask in ((rl_c, np.char.find(chart, "CUSUM") >= 0), (rl_e, np.char.find(chart, "EWMA") >= 0),
                          (rl_any, res.signal)):
            hit = np.flatnonzero(mask)
            assert hit.size == 0 or hit[0] >= b  # the baseline parts never signal
            out.append(hit[0] + 1 - b if hit.size else n - b)
    assert 0.8 * 465 < np.mean(rl_c) < 1.2 * 465
    assert 0.7 * 500 < np.mean(rl_e) < 1.2 * 500
    # side by side: no longer than either chart alone, no shorter than if their false signals were
    # independent (1/(1/465 + 1/500) = 241 parts)
    assert 0.8 * 241 < np.mean(rl_any) <= min(np.mean(rl_c), np.mean(rl_e))


def test_drift_is_signalled_and_turns_ok_into_watch():
    rng = np.random.default_rng(7)
    n = 80
    sigma = 0.3
    dev = rng.normal(0, sigma, (3, n))
    dev[2, 40:] += 0.5 * sigma * np.arange(n - 40) / 4  # S3 drifts from part 40, 0.125 sigma a part
    df = seam_frame(dev)
    judged = apply_drift_status(drift_frame(df, lambda _p: DriftSettings()))
    s3 = judged.filter(pl.col("seam") == "S3").sort("start")
    first = s3.filter(pl.col("drift_signal")).row(0, named=True)
    k = int(first["serial"].split("-")[1])
    assert 40 < k < 70  # caught after the drift started, well before its end
    assert first["status"] == "watch"
    assert re.fullmatch(r"CTWD drift: (CUSUM|EWMA|CUSUM and EWMA) signal on S3 since serial SN-\d{4}",
                        first["reason"])
    since = int(s3.row(-1, named=True)["drift_since_serial"].split("-")[1])
    assert 40 <= since <= k
    # S1 and S2 were in control: no watch from the charts on them in 80 parts is the likely outcome
    # (probability of a false signal per seam in 60 post-baseline parts, ARL0 about 240: about 0.2)
    others = judged.filter(pl.col("seam") != "S3")
    assert others.get_column("drift_signal").sum() <= others.height // 4


def test_only_ok_is_upgraded_and_other_reasons_kept():
    df = pl.DataFrame({"status": ["ok", "alarm", "invalid", "watch"], "reason": ["a", "b", "c", "d"],
                       "drift_signal": [True, True, True, False], "drift_chart": ["CUSUM"] * 4,
                       "seam": ["S1"] * 4, "drift_since_serial": ["X-1"] * 4})
    out = apply_drift_status(df)
    assert out.get_column("status").to_list() == ["watch", "alarm", "invalid", "watch"]
    assert out.get_column("reason").to_list() == [
        "CTWD drift: CUSUM signal on S1 since serial X-1", "b; CTWD drift: CUSUM signal on S1 since serial X-1",
        "c", "d"]


def _worn_then_changed(rng, n_before=40, n_after=20, sigma=0.3):
    dev = rng.normal(0, sigma, (3, n_before + n_after))
    wear = np.concatenate([np.zeros(20), np.linspace(0, 10 * sigma, n_before - 20), np.zeros(n_after)])
    return dev + wear, n_before


def test_tip_change_is_detected_and_resets_the_charts():
    rng = np.random.default_rng(11)
    dev, change = _worn_then_changed(rng)
    df = seam_frame(dev)
    judged = drift_frame(df, lambda _p: DriftSettings())
    s1 = judged.filter(pl.col("seam") == "S1").sort("start")
    resets = np.flatnonzero(s1.get_column("tip_reset").to_numpy())
    assert resets.tolist() == [change]
    before = s1.row(change - 1, named=True)
    after = s1.row(change, named=True)
    assert before["drift_signal"]
    # after the reset the CUSUM restarts from 0: C+ at the first new part is max(0, y - k) only
    y = (after["ctwd_mm"] - NOMINAL_MM - after["drift_target_mm"]) / after["drift_sigma_mm"]
    assert after["drift_cusum_upper"] == pytest.approx(max(0.0, y - 0.5))


def test_one_seam_stepping_back_is_not_a_tip_change_but_a_marker_is():
    sigma = np.array([0.3, 0.3, 0.3])
    target = np.zeros(3)
    x = np.zeros((3, 10))
    x[1, 3:6] = 4.0  # S2 knocked out for three parts, then put right: only one seam steps back
    assert not detect_tip_changes(x, target, sigma).any()
    x[:, 3:6] = 4.0  # all seams worn, then all back at once by more than TIP_STEP_SIGMAS sigma
    assert 4.0 > TIP_STEP_SIGMAS * 0.3
    assert np.flatnonzero(detect_tip_changes(x, target, sigma)).tolist() == [6]
    marker = np.zeros(10, dtype=bool)
    marker[8] = True
    assert np.flatnonzero(detect_tip_changes(np.zeros((3, 10)), target, sigma, marker)).tolist() == [8]


def test_marker_column_resets_in_drift_frame():
    rng = np.random.default_rng(5)
    dev = rng.normal(0, 0.3, (2, 40))
    marker = np.zeros(40, dtype=bool)
    marker[30] = True
    judged = drift_frame(seam_frame(dev, tip_change=marker), lambda _p: DriftSettings())
    assert judged.filter(pl.col("tip_reset")).get_column("serial").unique().to_list() == ["SN-0030"]


def test_forecast_matches_the_trend_and_reads_as_a_sentence():
    rng = np.random.default_rng(2)
    n = 40
    slope = -0.01  # mm a part, a steady fall in penetration
    pen = 3.0 + slope * np.arange(n) + rng.normal(0, 0.01, (3, n))
    judged = drift_frame(seam_frame(rng.normal(0, 0.3, (3, n)), pen_mm=pen), lambda _p: DriftSettings())
    last = judged.filter(pl.col("seam") == "S3").row(-1, named=True)
    # straight-line check: (P_last - P_min) / |slope| parts to go, P_last on the true line
    expected = (3.0 + slope * (n - 1) - 2.5) / -slope
    assert last["parts_to_limit_low"] <= last["parts_to_limit"] <= last["parts_to_limit_high"]
    assert last["parts_to_limit"] == pytest.approx(expected, rel=0.15)
    assert last["arc_time_to_limit_s"] == pytest.approx(last["parts_to_limit"] * 3 * 6.0)
    sentences = forecast_sentences(judged)
    s3 = [s for s in sentences if " S3 " in s][0]
    m = re.fullmatch(r"P1 S3 reaches 2\.5 mm in about (\d+) parts \((\d+)–(\d+)\) at the present drift "
                     r"\(about \d+ min of arc time\)\.", s3)
    assert m and int(m.group(2)) <= int(m.group(1)) <= int(m.group(3))


def test_no_forecast_without_a_significant_trend():
    rng = np.random.default_rng(9)
    pen = 3.0 + rng.normal(0, 0.01, (1, 40))
    judged = drift_frame(seam_frame(rng.normal(0, 0.3, (1, 40)), pen_mm=pen), lambda _p: DriftSettings())
    # a flat series has a significant slope only by chance (5 %); this seed's is not
    assert judged.get_column("parts_to_limit").null_count() == judged.height
    assert forecast_sentences(judged) == []


@pytest.mark.parametrize("line, key", [("ewma_lambda = 0", "ewma_lambda"), ('cusum_h = "five"', "cusum_h"),
                                       ("baseline_parts = 2.5", "baseline_parts"), ("lambda = 0.1", "lambda")])
def test_bad_drift_settings_are_one_line_errors(tmp_path, line, key):
    import shutil
    from pathlib import Path

    src = Path(__file__).resolve().parent.parent / "config"
    shutil.copytree(src, tmp_path / "config")
    part = tmp_path / "config" / "parts" / "tb7-tow-bracket.toml"
    part.write_text(part.read_text() + f"\n[drift]\n{line}\n")
    with pytest.raises(ConfigError) as exc:
        load_config(tmp_path / "config")
    msg = str(exc.value)
    assert "\n" not in msg and "tb7-tow-bracket.toml" in msg and f"[drift]: {key}" in msg


def test_good_drift_settings_are_read(tmp_path):
    import shutil
    from pathlib import Path

    src = Path(__file__).resolve().parent.parent / "config"
    shutil.copytree(src, tmp_path / "config")
    part = tmp_path / "config" / "parts" / "tb7-tow-bracket.toml"
    part.write_text(part.read_text() + "\n[drift]\newma_lambda = 0.2\newma_l = 2.962\ncusum_h = 4\n")
    cfg = load_config(tmp_path / "config")
    assert cfg.parts["TB7-tow-bracket"].drift == DriftSettings(0.2, 2.962, 0.5, 4.0, 20)


def test_tip_change_marker_mapped_in_cell_toml_resets_the_charts(tmp_path):
    # end to end: the export carries a marker column, cell.toml maps it, the scan resets there
    import shutil
    from pathlib import Path

    from click.testing import CliRunner

    from monitor.cli import main

    repo = Path(__file__).resolve().parent.parent
    shutil.copytree(repo / "config", tmp_path / "config")
    cell = tmp_path / "config" / "cell.toml"
    cell.write_text(cell.read_text().replace('serial = "serial"', 'serial = "serial"\ntip_change = "tip_change"'))
    logs = tmp_path / "logs"
    logs.mkdir()
    for k, f in enumerate(sorted((repo / "sample_logs" / "cell3").glob("*.parquet"))[:12]):
        pl.read_parquet(f).with_columns(pl.lit(k == 8).alias("tip_change")).write_parquet(logs / f.name)
    res = CliRunner().invoke(main, ["scan", str(logs), "--config", str(tmp_path / "config"), "--out",
                                    str(tmp_path / "out"), "--no-page", "--history", str(tmp_path / "h")])
    assert res.exit_code == 0, res.output
    seams = pl.read_parquet(tmp_path / "out" / "seams.parquet")
    assert seams.filter(pl.col("tip_change")).get_column("serial").unique().to_list() == ["TB7-0109"]
    assert seams.filter(pl.col("tip_reset")).get_column("serial").unique().to_list() == ["TB7-0109"]

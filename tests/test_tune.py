"""`ctwd tune`: backtest drift-chart settings on a part's history, recommend, refuse short histories, write."""

from __future__ import annotations

import shutil
import tomllib
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import polars as pl
import pytest
from click.testing import CliRunner

from monitor import tune
from monitor.cli import main
from monitor.config import DriftSettings, load_config, load_part
from monitor.history import append_history

REPO = Path(__file__).resolve().parent.parent
PART = "TB7-tow-bracket"
SMALL_CUSUM = ((0.5, 4.0), (0.5, 6.0))
SMALL_EWMA = ((0.1, 2.814), (0.2, 3.2))


def history_frame(n_tips: int = 4, parts_a_tip: int = 50, parts_a_day: int = 60, seed: int = 1) -> pl.DataFrame:
    """A part's history: each tip in control for 25 parts, then wearing 0.25 mm a part; a seam is in
    alarm once its CTWD is 5 mm over nominal (the tip is changed after the run)."""
    rng = np.random.default_rng(seed)
    t0 = datetime(2026, 10, 1, 22, tzinfo=UTC)
    rows = []
    j = 0
    for _tip in range(n_tips):
        for k in range(parts_a_tip):
            wear = 0.25 * max(0, k - 25) if _tip % 2 == 0 else 0.0  # every other tip wears out
            for i in range(3):
                dev = wear + rng.normal(0, 0.3)
                t = t0 + timedelta(days=j // parts_a_day, minutes=3 * (j % parts_a_day), seconds=10 * i)
                rows.append({"source": f"log{j:05d}.parquet", "part": PART, "serial": f"TB7-{j:05d}",
                             "seam": f"S{i + 1}", "start": t, "arc_time_s": 7.0,
                             "status": "alarm" if dev > 5.0 else "ok", "reason": "",
                             "ctwd_mm": 15.0 + dev, "ctwd_nominal_mm": 15.0,
                             "penetration_mm": 2.9 - 0.08 * dev, "min_penetration_mm": 2.5})
            j += 1
    return pl.DataFrame(rows).with_columns(pl.col("start").dt.cast_time_unit("us"))


def test_too_short_history_is_refused_with_the_shortfall():
    part = load_config(REPO / "config").parts[PART]
    hist = history_frame(n_tips=1, parts_a_tip=40, parts_a_day=40)
    with pytest.raises(tune.HistoryTooShort) as exc:
        tune.tune_part(hist, part)
    msg = str(exc.value)
    need = part.drift.baseline_parts + tune.MIN_BACKTEST_PARTS
    assert "has 40 valid parts" in msg and f"needs at least {need}" in msg
    assert f"{need - 40} more parts" in msg and "about 1 more night(s) at the recent 40 parts a night" in msg


def test_recommendation_meets_the_false_watch_target_and_catches_the_episodes():
    part = load_config(REPO / "config").parts[PART]
    res = tune.tune_part(history_frame(), part, target_parts=500, grid_cusum=SMALL_CUSUM, grid_ewma=SMALL_EWMA)
    t = res.table
    assert t.height == 4
    # two of the four tips wore out into alarms: two drift episodes per seam position, three seams
    assert t.get_column("episodes").unique().to_list() == [6]
    rec = res.recommended
    assert rec is not None
    row = t.filter((pl.col("cusum_k") == rec.cusum_k) & (pl.col("cusum_h") == rec.cusum_h)
                   & (pl.col("ewma_lambda") == rec.ewma_lambda) & (pl.col("ewma_l") == rec.ewma_l)).row(0, named=True)
    # target: one false watch per 500 parts per seam, i.e. an in-control ARL of at least 500
    assert row["arl0_combined"] >= 500
    assert row["arl0_combined"] == pytest.approx(1 / (1 / row["arl0_cusum"] + 1 / row["arl0_ewma"]))
    assert row["caught"] == t.filter(pl.col("meets_target")).get_column("caught").max()
    assert row["caught"] >= 5 and row["lead_parts"] > 0
    # the strict CUSUM h = 4 (ARL0 about 168, Montgomery, from memory) can never meet the target
    assert not t.filter(pl.col("cusum_h") == 4.0).get_column("meets_target").any()


def test_write_edits_only_the_drift_table(tmp_path):
    p = tmp_path / "part.toml"
    original = (REPO / "config" / "parts" / "tb7-tow-bracket.toml").read_text()
    p.write_text(original + "\n[drift]   # tuned by hand\newma_lambda = 0.1   # keep this comment\n"
                 "cusum_h = 5\n\n[[seam]]\nname = \"S4\"\n")
    wires = load_config(REPO / "config").wires
    backup = tune.write_drift_table(p, DriftSettings(0.2, 3.2, 0.5, 6.0, 20), wires)
    assert backup.read_text() == original + "\n[drift]   # tuned by hand\newma_lambda = 0.1   # keep this comment\n" \
        "cusum_h = 5\n\n[[seam]]\nname = \"S4\"\n"
    text = p.read_text()
    assert "ewma_lambda = 0.2   # keep this comment" in text and "# tuned by hand" in text
    assert text.startswith(original)  # everything before the table untouched, comments included
    data = tomllib.loads(text)
    assert data["drift"] == {"ewma_lambda": 0.2, "ewma_l": 3.2, "cusum_k": 0.5, "cusum_h": 6, "baseline_parts": 20}
    assert [s["name"] for s in data["seam"]] == ["S1", "S2", "S3", "S4"]
    assert load_part(p, wires).drift == DriftSettings(0.2, 3.2, 0.5, 6.0, 20)


def test_cli_tune_write_and_refusal(tmp_path, monkeypatch):
    monkeypatch.setattr(tune, "CUSUM_GRID", SMALL_CUSUM)
    monkeypatch.setattr(tune, "EWMA_GRID", SMALL_EWMA)
    cfg = tmp_path / "config"
    shutil.copytree(REPO / "config", cfg)
    r = CliRunner()
    short = r.invoke(main, ["tune", "--config", str(cfg), "--part", PART])
    assert short.exit_code == 1 and "cannot tune yet" in short.output and "more parts" in short.output
    hist = history_frame()
    srcs = hist.get_column("source").unique().to_list()
    append_history(tmp_path / "results", hist, [(s, f"{i:064x}") for i, s in enumerate(srcs)])
    part_file = cfg / "parts" / "tb7-tow-bracket.toml"
    before = part_file.read_text()
    res = r.invoke(main, ["tune", "--config", str(cfg), "--part", PART, "--write", "--plot", str(tmp_path / "t.png")])
    assert res.exit_code == 0, res.output
    assert "recommended: cusum_k = 0.5, cusum_h = 6" in res.output
    assert (tmp_path / "t.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (cfg / "parts" / "tb7-tow-bracket.toml.bak").read_text() == before
    assert load_config(cfg).parts[PART].drift.cusum_h == 6.0
    after = part_file.read_text()
    assert 'ctwd_band = "' in after and "# watch when |CTWD - nominal| exceeds this" in after  # comment kept
    assert "recommended: ctwd_band = " in res.output and "CTWD band and penetration margin" in res.output

    def strip(t):  # the file apart from the two limit lines the write may set
        return [ln for ln in t.splitlines() if not ln.startswith(("ctwd_band", "penetration_margin"))]
    assert strip(after)[:len(strip(before))] == strip(before)


# ---------------------------------------------------------------------------------------------
# CTWD band and penetration margin

SIGMA_MM = 0.6  # CTWD scatter of the synthetic history [mm]


def limits_history(n_tips: int = 6, parts_a_tip: int = 50, wear_every: int = 2, seed: int = 3) -> pl.DataFrame:
    """Like :func:`history_frame` with a wider scatter (σ = 0.6 mm); every ``wear_every``-th tip wears
    0.25 mm a part after 25 parts (0: none wears). Penetration falls 0.08 mm per mm of CTWD over nominal, and a seam
    is in alarm exactly when its penetration is below the 2.5 mm minimum (CTWD 5 mm over)."""
    rng = np.random.default_rng(seed)
    t0 = datetime(2026, 10, 1, 22, tzinfo=UTC)
    n = n_tips * parts_a_tip
    j = np.repeat(np.arange(n), 3)
    tip, k = j // parts_a_tip, j % parts_a_tip
    wears = (tip % wear_every == 0) if wear_every else np.zeros(j.size, bool)
    wear = np.where(wears, 0.25 * np.maximum(0, k - 25), 0.0)
    dev = wear + rng.normal(0, SIGMA_MM, j.size)
    pen = 2.9 - 0.08 * dev
    seam = np.tile(["S1", "S2", "S3"], n)
    starts = [t0 + timedelta(days=int(x) // 60, minutes=3 * (int(x) % 60), seconds=10 * (i % 3)) for i, x in enumerate(j)]
    return pl.DataFrame({
        "source": [f"log{x:05d}.parquet" for x in j], "part": PART, "serial": [f"TB7-{x:05d}" for x in j],
        "seam": seam, "start": starts, "arc_time_s": 7.0,
        "status": np.where(pen < 2.5, "alarm", "ok"), "reason": "",
        "ctwd_mm": 15.0 + dev, "ctwd_nominal_mm": 15.0, "penetration_mm": pen, "min_penetration_mm": 2.5,
    }).with_columns(pl.col("start").dt.cast_time_unit("us"))


def _row(t: pl.DataFrame, lim) -> dict:
    return t.filter((pl.col("band_mm") == round(lim.ctwd_band * 1e3, 6))
                    & (pl.col("margin_mm") == round(lim.penetration_margin * 1e3, 6))).row(0, named=True)


def test_recommended_band_catches_the_episodes_within_the_false_watch_target():
    from scipy.stats import norm

    part = load_config(REPO / "config").parts[PART]
    res = tune.tune_part(limits_history(), part, target_parts=500, grid_cusum=SMALL_CUSUM[1:], grid_ewma=SMALL_EWMA[1:])
    lim, rec = res.limits, res.recommended_limits
    assert lim.height == len(tune.BAND_GRID_MM) * len(tune.MARGIN_GRID_MM)
    assert rec is not None
    row = _row(lim, rec)
    # tips 0, 2, 4 wear into alarms: three episodes on each of three seam positions, all caught early
    assert row["episodes"] == 9 and row["caught"] == 9 and row["lead_parts"] > 5
    assert row["false_per_part"] <= 1 / 500 and row["meets_target"]
    best = lim.filter(pl.col("meets_target")).sort(["caught", "lead_parts"], descending=True).row(0, named=True)
    assert (row["caught"], row["lead_parts"]) == (best["caught"], best["lead_parts"])
    # a normal scatter leaves the band on 2·Φ(−band/σ) of in-control parts (scipy.stats.norm):
    # 1.5 mm = 2.5 σ gives about 1.2 % (six per 500 parts), far over the target, and must be refused
    assert 2 * norm.sf(1.5 / SIGMA_MM) > 5 / 500
    assert not lim.filter(pl.col("band_mm") == 1.5).get_column("meets_target").any()
    assert 2 * norm.sf(rec.ctwd_band * 1e3 / SIGMA_MM) <= 1 / 500
    # the margin rule fires once penetration nears the minimum, so a wider margin never warns later
    for band in tune.BAND_GRID_MM:
        leads = lim.filter(pl.col("band_mm") == band).sort("margin_mm").get_column("lead_parts").to_list()
        assert all(b >= a - 1e-9 for a, b in zip(leads, leads[1:]))


def test_recommended_limits_stay_within_target_on_in_control_data():
    part = load_config(REPO / "config").parts[PART]
    res = tune.tune_part(limits_history(), part, target_parts=500, grid_cusum=SMALL_CUSUM[1:], grid_ewma=SMALL_EWMA[1:])
    rec = res.recommended_limits
    fresh = limits_history(n_tips=6, wear_every=0, seed=99)  # no tip wears: every watch is false
    t = tune.backtest_limits(fresh, part.drift, [rec.ctwd_band * 1e3], [rec.penetration_margin * 1e3])
    r = t.row(0, named=True)
    assert r["episodes"] == 0 and r["false_per_part"] <= 1 / 500


def test_write_limits_round_trips_through_the_loader(tmp_path):
    cfg = tmp_path / "config"
    shutil.copytree(REPO / "config", cfg)
    f = cfg / "parts" / "tb7-tow-bracket.toml"
    before = f.read_text()
    backup = tune.write_limits(f, tune.LimitSettings(2.5e-3, 0.1e-3), load_config(cfg).wires)
    assert backup.read_text() == before
    after = f.read_text()
    assert 'ctwd_band = "2.5 mm"            # watch when |CTWD - nominal| exceeds this' in after
    part = load_config(cfg).parts[PART]
    assert part.defaults.ctwd_band == pytest.approx(2.5e-3) and part.defaults.penetration_margin == pytest.approx(1e-4)
    assert part.seam("S2").penetration_margin == pytest.approx(1e-4)  # defaults reach every seam
    # the added key sits with the top-level keys, before the first table; nothing else changed
    assert after.index("penetration_margin") < after.index("[penetration_reference]")
    assert [ln for ln in after.splitlines() if not ln.startswith(("ctwd_band", "penetration_margin"))] == \
        [ln for ln in before.splitlines() if not ln.startswith("ctwd_band")]
    tune.write_limits(f, tune.LimitSettings(3e-3, 0.2e-3), load_config(cfg).wires)  # second write replaces
    assert f.read_text().count("penetration_margin") == 1
    assert load_config(cfg).parts[PART].defaults.penetration_margin == pytest.approx(2e-4)


def test_bad_penetration_margin_is_one_line_error(tmp_path):
    from monitor.config import ConfigError

    cfg = tmp_path / "config"
    shutil.copytree(REPO / "config", cfg)
    f = cfg / "parts" / "tb7-tow-bracket.toml"
    for bad in ('"0.1 V"', '"-0.1 mm"', '"2 m"'):
        f.write_text((REPO / "config" / "parts" / "tb7-tow-bracket.toml").read_text().replace(
            'min_penetration = "2.5 mm"', f'min_penetration = "2.5 mm"\npenetration_margin = {bad}'))
        with pytest.raises(ConfigError) as exc:
            load_config(cfg)
        assert "penetration_margin" in str(exc.value) and "\n" not in str(exc.value)


def test_judge_margin_rule():
    from ingest.schema import ArcSettings
    from monitor.judge import judge

    def one(pen_mm: float, margin_mm: float) -> tuple[str, str]:
        row = {"known_part": True, "part": PART, "n_samples": 1000, "used_time_s": 6.0, "arc_time_s": 7.0,
               "min_step_s": 0.005, "current_bad": 0, "voltage_bad": 0, "wire_feed_bad": 0, "max_gap_s": 0.005,
               "travel_speed": 8e-3, "current_mean": 200.0, "voltage_mean": 24.0, "wire_feed_mean": 9 / 60,
               "ctwd": 15e-3, "ctwd_sigma": 0.2e-3, "nominal_ctwd": 15e-3, "ctwd_band": 3e-3,
               "penetration": pen_mm * 1e-3, "penetration_sigma": 0.0, "min_penetration": 2.5e-3,
               "prog_wire_feed": 9 / 60, "wire_feed_tol": 0.05, "prog_voltage": 24.0, "voltage_tol": 0.05,
               "penetration_margin": margin_mm * 1e-3}
        r = judge(pl.DataFrame([row]), ArcSettings()).row(0, named=True)
        return r["status"], r["reason"]

    assert one(2.58, 0.1) == ("watch", "CTWD 15.0 mm, +0.0 mm over nominal; "
                                       "penetration 2.58 mm within 0.10 mm margin of 2.50 mm")
    assert one(2.58, 0.0)[0] == "ok"  # no margin: the old rule
    assert one(2.61, 0.1)[0] == "ok"  # clear of the margin
    assert one(2.45, 0.1) == ("alarm", "CTWD 15.0 mm, +0.0 mm over nominal; penetration 2.45 mm < 2.50 mm")

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
    assert part_file.read_text().startswith(before.rstrip("\n"))

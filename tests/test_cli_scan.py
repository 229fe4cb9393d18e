"""End to end: `ctwd scan` on the committed sample logs through the CLI, outputs and exit codes."""

from __future__ import annotations

import json
import shutil

import polars as pl
import pytest
from click.testing import CliRunner

from monitor.cli import main

REQUIRED = ["source", "part", "serial", "seam", "start", "arc_time_s", "current_mean_a", "current_rms_a",
            "voltage_mean_v", "wire_feed_m_min", "travel_speed_mm_s", "melt_rate_kg_h", "ctwd_mm", "ctwd_low_mm",
            "ctwd_high_mm", "ctwd_nominal_mm", "penetration_mm", "penetration_low_mm", "penetration_high_mm",
            "min_penetration_mm", "arc_energy_kj_mm", "wire_mass_g", "status", "reason"]


@pytest.fixture(scope="module")
def scanned(tmp_path_factory, repo_root):
    out = tmp_path_factory.mktemp("scan")
    res = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs"), "--config", str(repo_root / "config"),
                                    "--out", str(out), "--no-history"] if _has_history_option() else
                             ["scan", str(repo_root / "sample_logs"), "--config", str(repo_root / "config"),
                              "--out", str(out)])
    return res, out


def _has_history_option() -> bool:
    return any(p.name == "no_history" for p in main.commands["scan"].params)


def test_scan_writes_every_output(scanned):
    res, out = scanned
    assert res.exit_code == 0, res.output
    for name in ("seams.parquet", "seams.csv", "files.csv", "summary.html", "run.json"):
        assert (out / name).is_file(), name
    seams = pl.read_parquet(out / "seams.parquet")
    assert all(c in seams.columns for c in REQUIRED)
    csv = pl.read_csv(out / "seams.csv")
    assert csv.height == seams.height and csv.columns == seams.columns
    assert set(seams["status"].unique()) <= {"ok", "watch", "alarm", "invalid"}
    # penetration interval brackets the estimate; alarm means estimate below minimum
    assert (seams["penetration_low_mm"] <= seams["penetration_mm"]).all()
    alarms = seams.filter(pl.col("status") == "alarm")
    assert alarms.height > 0
    assert (alarms["penetration_mm"] < alarms["min_penetration_mm"]).all()


def test_malformed_file_is_listed_with_reason_and_the_rest_processed(scanned, repo_root):
    res, out = scanned
    files = pl.read_csv(out / "files.csv", infer_schema=False)
    n_logs = len([p for p in (repo_root / "sample_logs").rglob("*") if p.suffix in (".csv", ".parquet")])
    assert files.height == n_logs
    bad = files.filter(pl.col("source").str.contains("SR40-0117"))
    assert bad.height == 1 and bad["status"][0] == "skipped"
    assert bad["error"][0]  # a reason is given
    good = files.filter(~pl.col("source").str.contains("SR40-0117"))
    assert (good["status"] == "read").all()
    seams = pl.read_parquet(out / "seams.parquet")
    assert seams["source"].n_unique() == good.height
    assert "SR40-0117" in res.output


def test_dropout_seam_is_invalid_with_reason(scanned):
    _, out = scanned
    s = pl.read_parquet(out / "seams.parquet").filter((pl.col("serial") == "SR40-0108") & (pl.col("seam") == "S2"))
    assert s["status"].to_list() == ["invalid"]
    assert "voltage" in s["reason"][0] and "dropped out" in s["reason"][0]


def test_run_json_describes_inputs(scanned):
    _, out = scanned
    run = json.loads((out / "run.json").read_text())
    assert run["tool_version"] and len(run["config_digest"]) == 16
    assert all(len(i["sha256"]) == 64 for i in run["inputs"] if i["sha256"])
    assert run["counts"]["seams"] == pl.read_parquet(out / "seams.parquet").height


def test_exit_codes(tmp_path, repo_root):
    logs, cfg = repo_root / "sample_logs", repo_root / "config"
    runner = CliRunner()
    r = runner.invoke(main, ["scan", str(logs / "cell3"), "--config", str(cfg), "--out", str(tmp_path / "a"),
                             "--fail-on", "alarm", "-q"])
    assert r.exit_code == 1  # the demo night has alarms
    r = runner.invoke(main, ["scan", str(logs / "cell5"), "--config", str(cfg), "--out", str(tmp_path / "b"),
                             "--fail-on", "alarm", "-q"])
    assert r.exit_code == 0  # cell 5 has none
    r = runner.invoke(main, ["scan", str(logs), "--config", str(tmp_path / "nope"), "--out", str(tmp_path / "c")])
    assert r.exit_code == 2 and "config" in r.output
    r = runner.invoke(main, ["scan", "--config", str(cfg), "--out", str(tmp_path / "d")])
    assert r.exit_code == 2  # no paths: usage error


def test_bad_config_is_one_line_naming_file_and_key(tmp_path, repo_root):
    cfg = tmp_path / "config"
    shutil.copytree(repo_root / "config", cfg)
    part = cfg / "parts" / "tb7-tow-bracket.toml"
    part.write_text(part.read_text().replace('min_penetration = "2.5 mm"', 'min_penetration = "2,5 mm"'))
    r = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs"), "--config", str(cfg), "--out",
                                  str(tmp_path / "o")])
    assert r.exit_code == 2
    line = r.output.strip()
    assert "\n" not in line and "tb7-tow-bracket.toml" in line and "min_penetration" in line
    assert "Traceback" not in r.output
    assert not (tmp_path / "o").exists()  # nothing was written before the config was good


def test_demo_command(tmp_path, monkeypatch, repo_root):
    monkeypatch.chdir(repo_root)
    r = CliRunner().invoke(main, ["demo", "--out", str(tmp_path / "demo")])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "demo" / "summary.html").is_file()
    assert "summary.html" in r.output and "alarm" in r.output


def test_report_regenerates_page(scanned):
    _, out = scanned
    (out / "summary.html").unlink()
    r = CliRunner().invoke(main, ["report", str(out)])
    assert r.exit_code == 0, r.output
    html = (out / "summary.html").read_text()
    assert "Screening indicator, not weld acceptance" in html


def test_part_from_file_name(scanned):
    _, out = scanned
    seams = pl.read_parquet(out / "seams.parquet")
    cell5 = seams.filter(pl.col("source").str.contains("cell5"))
    assert set(cell5["part"].unique()) == {"SR40-seat-rail"}
    assert set(cell5["seam"].unique()) == {"S1", "S2"}


def test_page_links_files_csv_beside_it(tmp_path, repo_root):
    # files.csv is published together with the page, so a first scan's page links to it
    out = tmp_path / "first"
    r = CliRunner().invoke(main, ["scan", str(repo_root / "sample_logs" / "cell5"), "--config",
                                  str(repo_root / "config"), "--out", str(out), "--no-history", "-q"])
    assert r.exit_code == 0, r.output
    assert '<a href="files.csv">files.csv</a>' in (out / "summary.html").read_text()

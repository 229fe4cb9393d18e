"""Round trip: simulate a cell (forward physics, ripple, noise), scan it, recover what was simulated."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import polars as pl
import pytest

from monitor import physics
from monitor.pipeline import scan_file
from monitor.simulate import SeamPlan, simulate_log
from monitor.store import to_output


def _write_log(path: Path, plans, cfg, rng, rate=500.0, ripple=0.2):
    w = cfg.wires["steel-1.0"]
    df = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, rate, rng, ripple=ripple)
    df.select(
        pl.col("t").alias("time"),
        pl.lit("TB7-tow-bracket").alias("part"),
        pl.lit("RT-1").alias("serial"),
        "seam",
        pl.col("current").alias("current_a"),
        pl.col("voltage").alias("voltage_v"),
        (pl.col("wire_feed") * 60).alias("wfs_m_min"),
        (pl.col("travel_speed") * 1e3).alias("travel_mm_s"),
    ).write_parquet(path)


def test_scan_recovers_simulated_ctwd_and_flags_low_penetration(tmp_path, demo_config):
    # Ground truth is the simulation itself: forward Lesnewich relation for the current, Jackson
    # through the part's reference section for penetration (the relations' definitions).
    cfg = demo_config
    part = cfg.parts["TB7-tow-bracket"]
    w = cfg.wires["steel-1.0"]
    rng = np.random.default_rng(7)
    true_ctwd = np.linspace(11e-3, 24e-3, 40)
    rng.shuffle(true_ctwd)
    spec = part.seam("S2")
    plans = [SeamPlan(f"X{k:02d}", float(c), spec.wire_feed, spec.voltage, spec.travel_speed, 6.0)
             for k, c in enumerate(true_ctwd)]
    log = tmp_path / "roundtrip.parquet"
    _write_log(log, plans, cfg, rng)
    judged, rec = scan_file(log, cfg)
    assert rec.status == "read" and rec.error is None
    out = to_output(judged).sort("seam")
    assert out.height == len(plans)
    est = out.get_column("ctwd_mm").to_numpy()
    truth = true_ctwd[np.argsort([p.seam for p in plans])] * 1e3
    err = est - truth
    assert np.median(np.abs(err)) < 0.5
    assert np.max(np.abs(err)) < 1.5
    # the simulated interval covers the truth: with noise only (no gain error) nearly always
    assert np.mean((out["ctwd_low_mm"].to_numpy() <= truth) & (truth <= out["ctwd_high_mm"].to_numpy())) > 0.9

    # true penetration from the noise-free forward current
    mr = physics.melt_rate_from_wfs(spec.wire_feed, w.diameter, w.density)
    i_true = physics.current_from_melt_rate(mr, truth * 1e-3, w.melt_a, w.melt_b, 1 + 0.2**2)
    r = part.reference
    p_true = physics.jackson_penetration(i_true, spec.voltage, spec.travel_speed, r.current, r.voltage,
                                         r.travel_speed, r.depth)
    status = out.get_column("status").to_numpy()
    pmin = spec.min_penetration
    clearly_low = p_true < 0.97 * pmin
    clearly_ok = p_true > 1.03 * pmin
    assert clearly_low.sum() >= 5 and clearly_ok.sum() >= 5  # the design spans the minimum
    assert np.all(status[clearly_low] == "alarm")
    assert not np.any(status[clearly_ok] == "alarm")


def test_interval_matches_monte_carlo_of_gain_errors(demo_config):
    # Linearised propagation (JCGM 100:2008, 5.1) against a direct Monte Carlo of the channel
    # gains (JCGM 101:2008 propagation of distributions), numpy as the independent engine.
    from monitor.estimate import estimate

    cfg = demo_config
    agg = pl.DataFrame({
        "seam": ["S2"], "part": ["TB7-tow-bracket"], "current_mean": [190.0], "current_sq_mean": [190.0**2 * 1.04],
        "voltage_mean": [24.0], "power_mean": [4560.0], "wire_feed_mean": [0.15], "travel_speed_mean": [8e-3],
        "arc_time_s": [8.0],
    })
    e = estimate(agg, cfg).row(0, named=True)
    w = cfg.wires["steel-1.0"]
    rng = np.random.default_rng(3)
    n = 200_000
    gi = 1 + 0.01 * rng.standard_normal(n)
    gw = 1 + 0.01 * rng.standard_normal(n)
    mr = physics.melt_rate_from_wfs(0.15 * gw, w.diameter, w.density)
    L = physics.ctwd_from_melt_rate(mr, 190.0 * gi, 190.0**2 * 1.04 * gi**2, w.melt_a, w.melt_b)
    assert e["ctwd_sigma"] == pytest.approx(np.std(L), rel=0.05)
    assert e["ctwd"] == pytest.approx(np.median(L), abs=0.1e-3)

"""Per-seam aggregates cross-checked against an independent pandas computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import polars as pl
import pytest

from ingest.reader import scan_samples
from ingest.seams import seam_aggregates
from monitor.simulate import SeamPlan, simulate_log


def _pandas_reference(df: pd.DataFrame, min_current: float, trim_start: float, trim_end: float, min_duration: float):
    """Arc-on runs, trims and means written plainly in pandas (the reference)."""
    arc = df["current"] > min_current
    run = (arc != arc.shift(fill_value=not arc.iloc[0])).cumsum()
    rows = []
    for _, g in df[arc].groupby(run[arc]):
        t0, t1 = g["time"].min(), g["time"].max()
        if t1 - t0 < min_duration:
            continue
        k = g[(g["time"] >= t0 + trim_start) & (g["time"] <= t1 - trim_end)]
        rows.append({
            "start_s": t0 - df["time"].iloc[0], "arc_time_s": t1 - t0, "n": len(k),
            "i": k["current"].mean(), "i2": (k["current"] ** 2).mean(), "v": k["voltage"].mean(),
            "p": (k["current"] * k["voltage"]).mean(), "w": k["wfs"].mean(),
        })
    return pd.DataFrame(rows)


def test_seam_aggregates_equal_pandas(tmp_path, demo_config):
    cfg = demo_config
    w = cfg.wires["steel-1.0"]
    rng = np.random.default_rng(11)
    plans = [SeamPlan(f"S{k}", 15e-3 + k * 1e-3, 0.15, 24.0, 8e-3, 3.0 + k) for k in range(5)]
    sim = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, 400.0, rng)
    pdf = pd.DataFrame({"time": sim["t"].to_numpy(), "current": sim["current"].to_numpy(),
                        "voltage": sim["voltage"].to_numpy(), "wfs": sim["wire_feed"].to_numpy() * 60})
    path = tmp_path / "agg.csv"
    pl.DataFrame({"time": pdf["time"], "current_a": pdf["current"], "voltage_v": pdf["voltage"],
                  "wfs_m_min": pdf["wfs"]}).write_csv(path)
    arc = cfg.cell.arc
    ours = seam_aggregates(scan_samples(path, cfg.cell.export).frame, arc, labelled=False).collect()
    # reference computed on the values as written to CSV, read back by pandas itself
    back = pd.read_csv(path).rename(columns={"current_a": "current", "voltage_v": "voltage", "wfs_m_min": "wfs"})
    ref = _pandas_reference(back, arc.min_current, arc.trim_start, arc.trim_end, arc.min_duration)
    assert ours.height == len(ref) == 5
    np.testing.assert_allclose(ours["start_s"], ref["start_s"], rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(ours["arc_time_s"], ref["arc_time_s"], rtol=1e-12)
    np.testing.assert_array_equal(ours["n_samples"], ref["n"])
    np.testing.assert_allclose(ours["current_mean"], ref["i"], rtol=1e-12)
    np.testing.assert_allclose(ours["current_sq_mean"], ref["i2"], rtol=1e-12)
    np.testing.assert_allclose(ours["voltage_mean"], ref["v"], rtol=1e-12)
    np.testing.assert_allclose(ours["power_mean"], ref["p"], rtol=1e-12)
    np.testing.assert_allclose(ours["wire_feed_mean"] * 60, ref["w"], rtol=1e-12)
    assert list(ours["seam"]) == ["S1", "S2", "S3", "S4", "S5"]
    assert ours["current_sq_mean"].to_numpy() == pytest.approx(ref["i2"].to_numpy())

"""The per-seam aggregation against an independent pandas computation.

Two engines are checked: the one-pass batch engine the scan uses (ingest.onepass, at several batch
sizes so that seams straddle batch boundaries) and the whole-file lazy window form (ingest.seams,
the engine's fallback for a recurring label).

Reference: pandas (a reference library) doing the same arithmetic the docstring of
ingest.seams.seam_aggregates states — arc-on where current > threshold (a null current carries
the previous state), trim the first ``trim_start`` and last ``trim_end`` seconds of each seam
(a sample within 1 ns of an edge is kept: the window is closed whatever the rounding of its time),
means over valid readings (present, finite, > 0), ⟨I²⟩ over the same current samples, ⟨V·I⟩
where both are valid, the longest step between kept samples. Simulated files carry the
simulator's short-circuit ripple, noise, arc-start ramp, crater fill and a channel dropout.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest

from ingest.onepass import aggregate_samples
from ingest.reader import scan_samples
from ingest.seams import seam_aggregates
from monitor.config import load_config
from monitor.simulate import SeamPlan, simulate_log

ROOT = Path(__file__).resolve().parent.parent
EDGE = 1e-9  # [s], the stated tolerance on the trim window's edges and the minimum duration
CFG = load_config(ROOT / "config")
ARC = CFG.cell.arc


def _log(tmp_path: Path, seam_order: tuple[str, ...], labelled: bool, seed: int = 3, gas_flow: bool = False) -> Path:
    """A simulated log, in row groups of 250 rows so that the engine's batches cut through seams.
    ``gas_flow``: each seam label is raised 0.3 s before the arc strikes and held 0.1 s after it
    goes out (pre- and post-flow of shielding gas; common practice, no source), so a label also
    covers arc-off rows."""
    w = CFG.wires["steel-1.0"]
    rng = np.random.default_rng(seed)
    plans = []
    for j, name in enumerate(seam_order):
        dropout = (2.0, 0.4, "voltage") if j == 1 else None
        plans.append(SeamPlan(name, 15e-3 + 1e-3 * j, 0.15, 24.0, 8e-3, 4.0 + j, dropout=dropout))
    df = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, 1000.0, rng)
    seam = pl.col("seam")
    if gas_flow:
        seam = seam.fill_null(strategy="backward", limit=300).fill_null(strategy="forward", limit=100)
    out = df.select(
        pl.col("t").alias("time"),
        *([seam] if labelled else []),
        pl.col("current").round(1).alias("current_a"),
        pl.col("voltage").round(2).alias("voltage_v"),
        (pl.col("wire_feed") * 60).round(3).alias("wfs_m_min"),
        (pl.col("travel_speed") * 1e3).round(2).alias("travel_mm_s"),
    )
    path = tmp_path / f"log_{'l' if labelled else 'u'}_{len(seam_order)}.parquet"
    out.write_parquet(path, row_group_size=250)
    return path


def _valid(s: pd.Series) -> pd.Series:
    return s.notna() & np.isfinite(s) & (s > 0)


def _pandas_aggregates(path: Path, labelled: bool) -> pd.DataFrame:
    d = pd.read_parquet(path)
    d = pd.DataFrame({
        "t": d["time"] - d["time"].iloc[0],
        "seam": d["seam"] if labelled else None,
        "i": d["current_a"], "v": d["voltage_v"], "w": d["wfs_m_min"] / 60.0, "s": d["travel_mm_s"] / 1e3,
    })
    state = (d["i"] > ARC.min_current).astype("object").where(d["i"].notna())
    d["arc"] = state.ffill().fillna(False).astype(bool)
    if labelled:
        d = d[d["arc"] & d["seam"].notna()].copy()
        d["key"] = d["seam"]
    else:
        d["key"] = (d["arc"] != d["arc"].shift(1)).cumsum()
        d = d[d["arc"]].copy()
    rows = []
    for key, g in d.groupby("key", sort=False):
        t0, t1 = g["t"].min(), g["t"].max()
        if not labelled and t1 - t0 < ARC.min_duration - EDGE:
            continue
        k = g[(g["t"] >= t0 + ARC.trim_start - EDGE) & (g["t"] <= t1 - ARC.trim_end + EDGE)]
        i_ok, v_ok = _valid(k["i"]), _valid(k["v"])
        steps = k["t"].diff().dropna()
        rows.append({
            "key": key, "start_s": t0, "arc_time_s": t1 - t0, "n_samples": len(k), "n_trimmed": len(g) - len(k),
            "current_mean": k["i"][i_ok].mean(), "current_sq_mean": (k["i"][i_ok] ** 2).mean(),
            "voltage_mean": k["v"][v_ok].mean(), "power_mean": (k["i"] * k["v"])[i_ok & v_ok].mean(),
            "wire_feed_mean": k["w"][_valid(k["w"])].mean(), "travel_speed_mean": k["s"][_valid(k["s"])].mean(),
            "voltage_bad": int((~v_ok).sum()), "current_bad": int((~i_ok).sum()),
            "max_gap_s": steps.max(), "min_step_s": steps.min(),
        })
    out = pd.DataFrame(rows).sort_values("start_s").reset_index(drop=True)
    if not labelled:
        out["seam"] = [f"S{j + 1}" for j in range(len(out))]
    else:
        out["seam"] = out["key"]
    return out


CHECKED = ("start_s", "arc_time_s", "n_samples", "n_trimmed", "current_mean", "current_sq_mean", "voltage_mean",
           "power_mean", "wire_feed_mean", "travel_speed_mean", "voltage_bad", "current_bad", "max_gap_s", "min_step_s")


@pytest.mark.parametrize(("order", "labelled", "gas_flow"), [
    (("S1", "S2", "S3"), True, False),
    (("S1", "S2", "S3"), False, False),
    # labels over arc-off rows too: only the arc-on rows inside a label form the seam
    (("S1", "S2", "S3"), True, True),
    # a label that recurs after another seam: the seam's trim window spans both stretches
    (("S1", "S2", "S1"), True, False),
])
@pytest.mark.parametrize("engine", ["onepass-1M", "onepass-997", "onepass-50", "lazy-streaming"])
def test_aggregates_equal_pandas(tmp_path, order, labelled, gas_flow, engine):
    path = _log(tmp_path, order, labelled, gas_flow=gas_flow)
    samples = scan_samples(path, CFG.cell.export)
    assert samples.has_seam is labelled
    if engine.startswith("onepass"):
        chunk = {"1M": 1_000_000, "997": 997, "50": 50}[engine.split("-")[1]]
        got = aggregate_samples(samples, ARC, chunk_rows=chunk).aggregates.to_pandas()
    else:
        got = seam_aggregates(samples.frame, ARC, labelled=labelled).collect(engine="streaming").to_pandas()
    want = _pandas_aggregates(path, labelled)
    assert list(got["seam"]) == list(want["seam"])
    assert len(got) == len(set(order))
    for col in CHECKED:
        # float64 sums in a different order: agreement to 1e-12 relative
        np.testing.assert_allclose(got[col].to_numpy(float), want[col].to_numpy(float), rtol=1e-12, err_msg=col)
    # the dropout (0.4 s of voltage in the second seam) shows as invalid voltage readings
    assert got["voltage_bad"].iloc[1] == pytest.approx(400, abs=1)

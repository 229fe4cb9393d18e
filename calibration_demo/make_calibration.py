"""Generate the calibration demo: reference coupons at known CTWDs, and macro sections.

    python calibration_demo/make_calibration.py      # rewrites the files in calibration_demo/

Scenario (invented): before trusting the alarms, the engineer of demo cell 3 welds twelve
coupon seams with a new lot of 1.0 mm steel wire: four CTWDs (12, 15, 18, 21 mm, set with a
gauge, each off by about 0.15 mm in reality) at three wire feed speeds (7, 9 and 11 m/min),
one log file per feed speed. The new lot melts a little differently from the illustrative
coefficients in config/wires.toml (A 3 % higher, B 8 % higher), which is what the calibration
should find; the demo night's logs were welded with the old lot. Separately, eight TB7
brackets from the demo night were sectioned and their penetration measured (depths simulated
from Jackson's relation through a 3.1 mm reference, 4 % scatter), for
``ctwd calibrate-penetration``.

Deterministic (seeded). Files: logs/cal_wfs07.parquet, logs/cal_wfs09.parquet, logs/cal_wfs11.parquet,
known_ctwd.csv, tb7_sections.csv.
"""

from __future__ import annotations

import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import polars as pl

ROOT = Path(__file__).resolve().parent
sys.path.insert(0, str(ROOT.parent))

from monitor import physics  # noqa: E402
from monitor.config import load_config  # noqa: E402
from monitor.pipeline import scan_paths  # noqa: E402
from monitor.simulate import SeamPlan, export_frame, simulate_log  # noqa: E402

MORNING = datetime(2026, 11, 30, 7, 0, tzinfo=UTC)
A_FACTOR, B_FACTOR = 1.03, 1.08  # this cell's wire relative to the illustrative coefficients
SET_CTWD_MM = (12.0, 15.0, 18.0, 21.0)
WFS_M_MIN = (7.0, 9.0, 11.0)
VOLTAGE = {7.0: 21.5, 9.0: 24.0, 11.0: 26.5}
SECTION_REF_DEPTH = 3.1e-3  # [m] at the part's reference conditions
SECTIONED = ("TB7-0103", "TB7-0107", "TB7-0110", "TB7-0116", "TB7-0120", "TB7-0126", "TB7-0131", "TB7-0135")


def coupons(cfg, rng: np.random.Generator) -> None:
    w = cfg.wires["steel-1.0"]
    a, b = w.melt_a * A_FACTOR, w.melt_b * B_FACTOR
    rate = 200.0
    known = []
    t_start = MORNING
    for wfs in WFS_M_MIN:
        serial = f"CAL-{wfs:02.0f}"
        plans = []
        for k, set_mm in enumerate(SET_CTWD_MM):
            seam = f"S{k + 1}"
            true = set_mm * 1e-3 + rng.normal(0, 0.15e-3)  # the gauge is not perfect
            plans.append(SeamPlan(seam, true, wfs / 60, VOLTAGE[wfs] + 0.15 * (set_mm - 15), 8e-3, 6.0))
            known.append({"serial": serial, "seam": seam, "ctwd_mm": set_mm})
        df = simulate_log(plans, a, b, w.diameter, w.density, rate, rng)
        df = export_frame(df, t_start, serial=serial)
        (ROOT / "logs").mkdir(exist_ok=True)
        df.write_parquet(ROOT / "logs" / f"cal_wfs{wfs:02.0f}.parquet", compression="zstd", compression_level=9)
        t_start += timedelta(minutes=20)
    pl.DataFrame(known).write_csv(ROOT / "known_ctwd.csv")


def sections(cfg, rng: np.random.Generator) -> None:
    part = cfg.parts["TB7-tow-bracket"]
    r = part.reference
    seams = scan_paths([ROOT.parent / "sample_logs" / "cell3"], cfg).seams
    rows = seams.filter(pl.col("serial").is_in(SECTIONED) & (pl.col("status") != "invalid")).sort("serial", "seam")
    rows = rows.filter(pl.int_range(pl.len()).mod(3) == pl.col("serial").str.slice(-1).cast(pl.Int64).mod(3))
    depth = physics.jackson_penetration(
        rows["current_mean"].to_numpy(), rows["voltage_mean"].to_numpy(), rows["travel_speed"].to_numpy(),
        r.current, r.voltage, r.travel_speed, SECTION_REF_DEPTH,
    ) * (1.0 + 0.04 * rng.standard_normal(rows.height))
    pl.DataFrame({"serial": rows["serial"], "seam": rows["seam"], "depth_mm": np.round(depth * 1e3, 2)}).write_csv(
        ROOT / "tb7_sections.csv")


def main() -> None:
    cfg = load_config(ROOT.parent / "config")
    rng = np.random.default_rng(20261130)
    coupons(cfg, rng)
    sections(cfg, rng)


if __name__ == "__main__":
    main()

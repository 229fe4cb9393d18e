"""Generate the demo night: two invented robot cells, simulated from the physics with noise.

    python sample_logs/make_samples.py        # rewrites sample_logs/cell3 and sample_logs/cell5

Scenario (invented): a night shift at a fabrication shop.
- Cell 3 welds tow brackets TB7 (3 seams each). Its export is Parquet with timestamps, seam,
  part, serial and travel-speed columns. The contact tip wears through the night, drifting the
  effective CTWD up by about 0.22 mm a part; a fixture clamp is knocked out of place for serials
  TB7-0109..0113, adding 4 mm on seam S2; the tip is changed before serial TB7-0125.
- Cell 5 welds seat rails SR40 (2 seams each). Its export is CSV with ISO-8601 timestamps and a
  serial column only (no part, seam or travel-speed column). Serial SR40-0108 has a 1 s voltage
  dropout in seam S2; the file for SR40-0117 was corrupted when the power source restarted.

The wire coefficients are the illustrative ones in config/wires.toml. Deterministic (seeded).
"""

from __future__ import annotations

import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import polars as pl

ROOT = Path(__file__).resolve().parent
sys.path.insert(0, str(ROOT.parent))

from monitor.config import load_config  # noqa: E402
from monitor.simulate import SeamPlan, export_frame, simulate_log  # noqa: E402

NIGHT = datetime(2026, 11, 30, 22, 0, tzinfo=UTC)


def _with_time(df: pl.DataFrame, start: datetime) -> pl.DataFrame:
    ts = pl.lit(start) + pl.duration(microseconds=(pl.col("t") * 1e6).round(0).cast(pl.Int64))
    return df.with_columns(ts.dt.cast_time_unit("ms").alias("time"))


def cell3(cfg, out: Path, rng: np.random.Generator) -> None:
    part = cfg.parts["TB7-tow-bracket"]
    w = cfg.wires[part.wire]
    out.mkdir(parents=True, exist_ok=True)
    rate = 200.0
    t_start = NIGHT
    for k in range(36):
        serial = f"TB7-{101 + k:04d}"
        wear = 0.22e-3 * (k if k < 24 else k - 24) + (0.2e-3 if k >= 24 else 0.0)
        plans = []
        for seam, dur in (("S1", 7.0), ("S2", 9.0), ("S3", 6.0)):
            spec = part.seam(seam)
            ctwd = spec.nominal_ctwd + wear + rng.normal(0, 0.3e-3)
            if seam == "S2" and 8 <= k <= 12:
                ctwd += 4.0e-3  # fixture clamp out of place
            plans.append(SeamPlan(seam, ctwd, spec.wire_feed, spec.voltage + rng.normal(0, 0.15), spec.travel_speed, dur))
        df = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, rate, rng)
        df = export_frame(df, t_start, part="TB7-tow-bracket", serial=serial)
        df.write_parquet(out / f"cell3_{serial}.parquet", compression="zstd", compression_level=9)
        t_start += timedelta(seconds=float(df.height / rate) + 95.0)


def cell5(cfg, out: Path, rng: np.random.Generator) -> None:
    part = cfg.parts["SR40-seat-rail"]
    w = cfg.wires[part.wire]
    out.mkdir(parents=True, exist_ok=True)
    rate = 100.0
    t_start = NIGHT + timedelta(minutes=7)
    for k in range(20):
        serial = f"SR40-{101 + k:04d}"
        plans = []
        for seam, dur in (("S1", 6.0), ("S2", 8.0)):
            spec = part.seam(seam)
            ctwd = spec.nominal_ctwd + 0.05e-3 * k + rng.normal(0, 0.35e-3)
            dropout = (3.0, 1.0, "voltage") if (serial == "SR40-0108" and seam == "S2") else None
            plans.append(SeamPlan(seam, ctwd, spec.wire_feed, spec.voltage + rng.normal(0, 0.15), spec.travel_speed,
                                  dur, dropout=dropout))
        df = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, rate, rng)
        df = _with_time(df, t_start).select(
            pl.col("time").dt.strftime("%Y-%m-%dT%H:%M:%S%.3f+00:00"),
            pl.lit(serial).alias("serial"),
            pl.col("current").round(1).alias("current_a"),
            pl.col("voltage").round(2).alias("voltage_v"),
            (pl.col("wire_feed") * 60).round(3).alias("wfs_m_min"),
        )
        path = out / f"cell5_SR40-seat-rail_{serial}.csv"
        df.write_csv(path)
        if serial == "SR40-0117":  # the power source restarted while writing: a garbage line, then a cut
            lines = path.read_text().splitlines(keepends=True)
            half = len(lines) // 2
            path.write_text("".join(lines[:half]) + "#### LOGGER RESTART ;; buffer lost ####\n"
                            + "".join(lines[half:half + 40]) + lines[half + 40][:9])
        t_start += timedelta(seconds=float(df.height / rate) + 140.0)


def main() -> None:
    cfg = load_config(ROOT.parent / "config")
    rng = np.random.default_rng(20261130)
    for sub in ("cell3", "cell5"):
        for f in (ROOT / sub).glob("*"):
            f.unlink()
    cell3(cfg, ROOT / "cell3", rng)
    cell5(cfg, ROOT / "cell5", rng)


if __name__ == "__main__":
    main()

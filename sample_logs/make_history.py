"""Simulate two earlier nights of demo cell 3 into a results history, for the multi-night demo.

    python sample_logs/make_history.py --history demo-results      # then:
    ctwd scan sample_logs --config config --out demo-out --history demo-results

Nothing is committed: the logs of the two nights are simulated into a temporary folder,
scanned into the history by the ordinary scan (``monitor.cli.run_scan``), and deleted.

Scenario (invented), tow bracket TB7, 40 parts a night:
- 28 Nov: a fresh contact tip, barely wearing (about 0.005 mm of effective CTWD a part).
- 29 Nov: the tip starts wearing fast from the 10th part (about 0.25 mm a part), the last
  parts before the change fall below the minimum penetration, and the tip is changed before
  the 35th part.
The sample night of 30 Nov (sample_logs/cell3) then continues the series.
Deterministic (seeded).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent
sys.path.insert(0, str(ROOT.parent))

from monitor.cli import run_scan  # noqa: E402
from monitor.config import load_config  # noqa: E402
from monitor.simulate import SeamPlan, export_frame, simulate_log  # noqa: E402

PARTS_A_NIGHT = 40
RATE_HZ = 50.0  # enough for seam means; keeps the simulation quick


def _wear(night: int, k: int) -> float:
    """Effective CTWD added by tip wear [m] on part k of night 0 or 1."""
    if night == 0:
        return 0.005e-3 * k
    if k >= 34:  # new tip
        return 0.02e-3 * (k - 34)
    return 0.2e-3 + 0.25e-3 * max(0, k - 9)


def simulate_night(cfg, night: int, start: datetime, out: Path, rng: np.random.Generator) -> None:
    part = cfg.parts["TB7-tow-bracket"]
    w = cfg.wires[part.wire]
    t_start = start
    for k in range(PARTS_A_NIGHT):
        serial = f"TB7-{(night + 1) * 1000 + 101 + k:04d}"
        plans = []
        for seam, dur in (("S1", 7.0), ("S2", 9.0), ("S3", 6.0)):
            spec = part.seam(seam)
            ctwd = spec.nominal_ctwd + _wear(night, k) + rng.normal(0, 0.3e-3)
            plans.append(SeamPlan(seam, ctwd, spec.wire_feed, spec.voltage + rng.normal(0, 0.15),
                                  spec.travel_speed, dur))
        df = simulate_log(plans, w.melt_a, w.melt_b, w.diameter, w.density, RATE_HZ, rng)
        df = export_frame(df, t_start, part="TB7-tow-bracket", serial=serial)
        df.write_parquet(out / f"cell3_{serial}.parquet")
        t_start += timedelta(seconds=float(df.height / RATE_HZ) + 95.0)


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--history", required=True, type=Path, help="results history folder to fill")
    ap.add_argument("--config", type=Path, default=ROOT.parent / "config")
    args = ap.parse_args(argv)
    cfg = load_config(args.config)
    rng = np.random.default_rng(20261128)
    for night in (0, 1):
        start = datetime(2026, 11, 28, 22, 0, tzinfo=UTC) + timedelta(days=night)
        with tempfile.TemporaryDirectory() as tmp:
            logs, out = Path(tmp) / "logs", Path(tmp) / "out"
            logs.mkdir()
            simulate_night(cfg, night, start, logs, rng)
            run = run_scan([logs], cfg, out, page=False, quiet=True, history=args.history)
        c = run["counts"]
        print(f"{start:%Y-%m-%d}: {c['seams']} seams ({c['alarm']} alarm, {c['watch']} watch) "
              f"-> {args.history} (+{run['history']['rows_added']} rows)")


if __name__ == "__main__":
    main()

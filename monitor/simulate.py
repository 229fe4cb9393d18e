"""A simulated welding cell: forward physics plus ripple and noise, for the demo and the tests.

Given the wire feed and the true CTWD of a seam, the mean current is solved from the
melting-rate relation (``physics.current_from_melt_rate``), then a short-circuit-like ripple,
sensor noise and idle stretches between seams are added. Nothing here is used by the scan.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import numpy as np
import polars as pl

from monitor import physics

__all__ = ["SeamPlan", "simulate_seam", "simulate_log", "ripple_waveform", "export_frame"]


@dataclass(frozen=True)
class SeamPlan:
    """One seam to simulate. SI units."""

    seam: str
    ctwd: float  # true effective CTWD [m]
    wire_feed: float  # [m/s]
    voltage: float  # mean arc voltage [V]
    travel_speed: float  # [m/s]
    duration: float  # arc-on time [s]
    dropout: tuple[float, float, str] | None = None  # (start s, length s, channel) set to null


def ripple_waveform(n: int, rate: float, rng: np.random.Generator, freq: float = 75.0, jitter: float = 0.25) -> np.ndarray:
    """Zero-mean, unit-RMS short-circuit-like ripple sampled at ``rate`` [Hz].

    Each cycle (mean frequency ``freq`` [Hz], cycle-to-cycle jitter as a relative standard
    deviation) is a fast rise during the short followed by an exponential decay in the arcing
    phase: a skewed sawtooth, like the current of short-circuit transfer.
    """
    t = np.arange(n) / rate
    n_cycles = int(t[-1] * freq * 2) + 4 if n else 4
    periods = np.clip(rng.normal(1.0 / freq, jitter / freq, n_cycles), 0.2 / freq, None)
    edges = np.concatenate([[-rng.uniform(0, 1.0 / freq)], np.cumsum(periods)])
    idx = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, n_cycles - 1)
    phase = (t - edges[idx]) / periods[idx]  # 0..1 within each cycle
    short = 0.2
    w = np.where(phase < short, phase / short, np.exp(-(phase - short) / 0.25))
    w = w - w.mean()
    rms = np.sqrt(np.mean(w * w))
    return w / rms if rms > 0 else w


def simulate_seam(plan: SeamPlan, a: float, b: float, diameter: float, density: float, rate: float,
                  rng: np.random.Generator, ripple: float = 0.2, noise_current: float = 2.0,
                  noise_voltage: float = 0.2, noise_wfs: float = 0.0008, start_ramp: float = 0.4) -> dict[str, np.ndarray]:
    """Samples of one seam: current [A], voltage [V], wire feed [m/s], with an arc-start ramp.

    The steady-state mean current Ī solves MR = A·Ī + B·L·(1 + c²)·Ī², c the ripple's relative
    RMS, so that the seam's ⟨I²⟩ = (1 + c²)·Ī² obeys the melting-rate relation exactly. The first
    ``start_ramp`` seconds ramp up from run-in (the arc-start transient the scan trims off).
    """
    n = int(round(plan.duration * rate))
    mr = physics.melt_rate_from_wfs(plan.wire_feed, diameter, density)
    i_bar = float(physics.current_from_melt_rate(mr, plan.ctwd, a, b, 1.0 + ripple**2))
    r = ripple_waveform(n, rate, rng)
    t = np.arange(n) / rate
    ramp = np.clip(0.55 + 0.45 * t / start_ramp, None, 1.0) if start_ramp > 0 else np.ones(n)
    current = i_bar * (1.0 + ripple * r) * ramp + rng.normal(0, noise_current, n)
    voltage = plan.voltage * (1.0 - 0.12 * r) + rng.normal(0, noise_voltage, n)
    wfs = plan.wire_feed * ramp + rng.normal(0, noise_wfs, n)
    # crater fill: the last 0.25 s at reduced feed and current
    tail = t > plan.duration - 0.25
    current[tail] *= 0.6
    wfs[tail] *= 0.6
    out = {"current": current, "voltage": voltage, "wire_feed": wfs, "travel_speed": np.full(n, plan.travel_speed)}
    if plan.dropout is not None:
        t0, length, channel = plan.dropout
        sel = (t >= t0) & (t < t0 + length)
        out[channel] = np.where(sel, np.nan, out[channel])
    return out


def simulate_log(plans: list[SeamPlan], a: float, b: float, diameter: float, density: float, rate: float,
                 rng: np.random.Generator, idle: float = 2.0, **kw) -> pl.DataFrame:
    """A file's worth of samples: seams separated by ``idle`` seconds of arc-off (current ≈ 0).

    Columns: ``t`` [s from file start], ``seam`` (label, null when idle), ``current`` [A],
    ``voltage`` [V], ``wire_feed`` [m/s], ``travel_speed`` [m/s].
    """
    chunks = []
    t_now = 0.0
    n_idle = int(round(idle * rate))
    for plan in plans:
        s = simulate_seam(plan, a, b, diameter, density, rate, rng, **kw)
        n = s["current"].size
        idle_df = pl.DataFrame({
            "t": t_now + np.arange(n_idle) / rate, "seam": [None] * n_idle,
            "current": np.abs(rng.normal(0, 0.3, n_idle)), "voltage": np.abs(rng.normal(0.5, 0.1, n_idle)),
            "wire_feed": np.zeros(n_idle), "travel_speed": np.zeros(n_idle)}, schema_overrides={"seam": pl.String})
        t_now += idle
        seam_df = pl.DataFrame({"t": t_now + np.arange(n) / rate, "seam": [plan.seam] * n, **s})
        t_now += n / rate
        chunks += [idle_df, seam_df]
    tail = pl.DataFrame({"t": t_now + np.arange(n_idle) / rate, "seam": [None] * n_idle,
                         "current": np.zeros(n_idle), "voltage": np.zeros(n_idle), "wire_feed": np.zeros(n_idle),
                         "travel_speed": np.zeros(n_idle)}, schema_overrides={"seam": pl.String})
    return pl.concat([*chunks, tail], how="vertical_relaxed")


def export_frame(df: pl.DataFrame, start: datetime, part: str | None = None, serial: str | None = None,
                 travel: bool = True) -> pl.DataFrame:
    """A simulated log (:func:`simulate_log`) in the demo cells' export layout (config/cell.toml).

    Columns: ``time`` (UTC timestamps, ms, from ``start``), ``part`` and ``serial`` when given,
    ``seam``, ``current_a``, ``voltage_v``, ``wfs_m_min`` and, with ``travel``, ``travel_mm_s``;
    values rounded as a power source logs them (0.1 A, 0.01 V, 0.001 m/min, 0.01 mm/s).
    """
    ts = pl.lit(start) + pl.duration(microseconds=(pl.col("t") * 1e6).round(0).cast(pl.Int64))
    cols: list[pl.Expr | str] = [ts.dt.cast_time_unit("ms").alias("time")]
    if part is not None:
        cols.append(pl.lit(part).alias("part"))
    if serial is not None:
        cols.append(pl.lit(serial).alias("serial"))
    cols += [
        "seam",
        pl.col("current").round(1).alias("current_a"),
        pl.col("voltage").round(2).alias("voltage_v"),
        (pl.col("wire_feed") * 60).round(3).alias("wfs_m_min"),
    ]
    if travel:
        cols.append((pl.col("travel_speed") * 1e3).round(2).alias("travel_mm_s"))
    return df.select(cols)

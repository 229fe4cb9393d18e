"""Per-seam estimates: effective CTWD, penetration, their 95 % intervals, arc energy, wire used.

Input is the per-seam aggregate frame from ``ingest.seams`` (SI units). Work here is O(seams):
parameters are looked up once per seam, the arithmetic is vectorised numpy over all seams.
"""

from __future__ import annotations

import numpy as np
import polars as pl

from monitor import physics
from monitor.config import Config, Part

__all__ = ["estimate", "Z95", "PARAM_COLUMNS"]

#: Two-sided 95 % coverage factor of a normal distribution (scipy.stats.norm.ppf(0.975)).
Z95 = 1.959963984540054

#: Per-seam parameters taken from the part and wire config, SI units.
PARAM_COLUMNS = (
    "known_part", "a", "b", "var_a", "var_b", "cov_ab", "diameter", "density", "nominal_ctwd",
    "min_penetration", "ctwd_band", "cfg_travel_speed", "prog_wire_feed", "prog_voltage",
    "wire_feed_tol", "voltage_tol", "ref_current", "ref_voltage", "ref_travel_speed", "ref_depth",
    "ref_depth_se", "exp_i", "exp_v", "exp_s", "penetration_margin",
)


def _params(part: Part | None, seam: str, cfg: Config) -> tuple:
    if part is None:
        return (False,) + (np.nan,) * (len(PARAM_COLUMNS) - 1)
    w = cfg.wires[part.wire]
    s = part.seam(seam)
    r = part.reference
    nan = np.nan
    return (
        True, w.melt_a, w.melt_b, w.melt_a_se**2, w.melt_b_se**2, w.melt_ab_corr * w.melt_a_se * w.melt_b_se,
        w.diameter, w.density, s.nominal_ctwd, s.min_penetration, s.ctwd_band,
        s.travel_speed if s.travel_speed is not None else nan,
        s.wire_feed if s.wire_feed is not None else nan,
        s.voltage if s.voltage is not None else nan,
        s.wire_feed_tolerance, s.voltage_tolerance,
        r.current, r.voltage, r.travel_speed, r.depth, r.depth_se, *r.exponents, s.penetration_margin,
    )


def estimate(agg: pl.DataFrame, cfg: Config) -> pl.DataFrame:
    """Add estimate columns to a per-seam aggregate frame whose ``part`` column is resolved.

    Adds (SI units): ``melt_rate`` [kg/s], ``ctwd``, ``ctwd_sigma`` [m], ``penetration``,
    ``penetration_sigma`` [m], ``travel_speed`` [m/s], ``arc_energy`` [J/m], ``wire_mass`` [kg],
    and the parameter columns of :data:`PARAM_COLUMNS`.

    Uncertainty: linearised first-order propagation (JCGM 100:2008, GUM, 5.1) of the channel
    gain uncertainties in config/cell.toml [sensors] (one sigma, relative, independent) and,
    when the wire was calibrated, of the covariance of A and B. Sample noise of the seam means is
    negligible next to gain errors (thousands of samples a seam) and is left out.
    """
    parts = agg.get_column("part").to_list()
    seams = agg.get_column("seam").to_list()
    rows = [_params(cfg.parts.get(p) if p is not None else None, s, cfg) for p, s in zip(parts, seams)]
    if rows:
        cols = list(zip(*rows))
    else:
        cols = [[] for _ in PARAM_COLUMNS]
    prm = {name: np.asarray(col, dtype=np.float64) for name, col in zip(PARAM_COLUMNS[1:], cols[1:])}
    known = np.asarray(cols[0], dtype=bool)

    i_mean = agg.get_column("current_mean").fill_null(np.nan).to_numpy().astype(np.float64)
    i_sq = agg.get_column("current_sq_mean").fill_null(np.nan).to_numpy().astype(np.float64)
    v_mean = agg.get_column("voltage_mean").fill_null(np.nan).to_numpy().astype(np.float64)
    p_mean = agg.get_column("power_mean").fill_null(np.nan).to_numpy().astype(np.float64)
    wfs = agg.get_column("wire_feed_mean").fill_null(np.nan).to_numpy().astype(np.float64)
    s_log = agg.get_column("travel_speed_mean").fill_null(np.nan).to_numpy().astype(np.float64)
    arc_time = agg.get_column("arc_time_s").fill_null(np.nan).to_numpy().astype(np.float64)
    travel = np.where(np.isfinite(s_log), s_log, prm["cfg_travel_speed"])

    sens = cfg.cell.sensors
    a, b = prm["a"], prm["b"]
    mr = physics.melt_rate_from_wfs(wfs, prm["diameter"], prm["density"])
    with np.errstate(invalid="ignore", divide="ignore"):
        ctwd = physics.ctwd_from_melt_rate(mr, i_mean, i_sq, a, b)
        d = physics.ctwd_sensitivities(mr, i_mean, i_sq, a, b)
        var_ctwd = (
            (d["wire_feed"] * sens.wire_feed) ** 2
            + (d["current"] * sens.current) ** 2
            + d["a"] ** 2 * prm["var_a"] + d["b"] ** 2 * prm["var_b"] + 2 * d["a"] * d["b"] * prm["cov_ab"]
        )
        pen = physics.jackson_penetration(
            i_mean, v_mean, travel, prm["ref_current"], prm["ref_voltage"], prm["ref_travel_speed"],
            prm["ref_depth"], exponents=(prm["exp_i"], prm["exp_v"], prm["exp_s"]),
        )
        # relative variance of P: exponents times relative gain errors, plus the reference's own
        rel_var_pen = (prm["exp_i"] * sens.current) ** 2 + (prm["exp_v"] * sens.voltage) ** 2 \
            + (prm["ref_depth_se"] / prm["ref_depth"]) ** 2
        energy = physics.arc_energy_per_length(p_mean, travel)
        wire_mass = mr * arc_time

    out = agg.with_columns(
        pl.Series("known_part", known),
        *[pl.Series(k, v) for k, v in prm.items()],
        pl.Series("travel_speed", travel),
        pl.Series("melt_rate", mr),
        pl.Series("ctwd", ctwd),
        pl.Series("ctwd_sigma", np.sqrt(var_ctwd)),
        pl.Series("penetration", pen),
        pl.Series("penetration_sigma", pen * np.sqrt(rel_var_pen)),
        pl.Series("arc_energy", energy),
        pl.Series("wire_mass", wire_mass),
    )
    return out.with_columns(pl.col(pl.Float64).fill_nan(None))

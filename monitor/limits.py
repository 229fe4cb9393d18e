"""Drift budget: the CTWD at which a seam's penetration reaches its minimum, at programmed settings.

For a seam welded at its programmed WFS, voltage and travel speed by a constant-voltage source,
a longer CTWD preheats the wire more, so the current needed to melt the fed wire falls
(melting-rate relation solved for current, ``physics.current_from_melt_rate``) and Jackson's
penetration falls with it (``physics.jackson_penetration``). The drift budget is the CTWD
L_lim with P(L_lim) = P_min: in closed form when the current exponent is positive (the current
that gives P_min, then the Lesnewich relation solved for the CTWD), else by bracketing root
search (``scipy.optimize.brentq``) over the physical range of ``judge.CTWD_RANGE_M``; the margin
is L_lim − nominal.

Steady current is assumed (ripple factor 1). A screening figure, not a qualified limit: the
applicable code and the qualified WPS decide what may be welded.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import polars as pl

from monitor import physics
from monitor.config import Config, Part, SeamSpec
from monitor.judge import CTWD_RANGE_M

__all__ = ["SeamLimit", "penetration_at_ctwd", "seam_limit", "part_limits"]


@dataclass(frozen=True)
class SeamLimit:
    """One seam's drift budget. Lengths [mm], current [A]; None where it could not be found."""

    seam: str
    nominal_ctwd_mm: float | None
    limit_ctwd_mm: float | None
    current_at_limit_a: float | None
    margin_mm: float | None
    problem: str | None = None  # why there is no limit: refused, or the minimum cannot be reached

    def as_json(self) -> dict:
        d = asdict(self)
        if d["problem"] is None:
            d.pop("problem")
        return d


def penetration_at_ctwd(ctwd: np.ndarray | float, wire_feed: float, voltage: float, travel_speed: float,
                        part: Part, a: float, b: float, diameter: float, density: float) -> tuple[np.ndarray, np.ndarray]:
    """(current [A], penetration [m]) at CTWD ``ctwd`` [m] for programmed WFS [m/s], V [V], S [m/s].

    MR = ρ·(π d²/4)·WFS; Ī solves A·Ī + B·L·Ī² = MR (Lesnewich 1958); P by Jackson (1960) scaled
    through the part's reference section. ``a`` [kg/(s·A)], ``b`` [kg/(s·m·A²)], ``diameter``
    [m], ``density`` [kg/m³]. Valid near the reference conditions (see the physics functions).
    """
    mr = physics.melt_rate_from_wfs(wire_feed, diameter, density)
    i = physics.current_from_melt_rate(mr, ctwd, a, b)
    r = part.reference
    p = physics.jackson_penetration(i, voltage, travel_speed, r.current, r.voltage, r.travel_speed, r.depth,
                                    r.exponents)
    return i, p


def seam_limit(cfg: Config, part: Part, spec: SeamSpec) -> SeamLimit:
    """The drift budget of one seam; ``problem`` says why when there is none."""
    nom_mm = spec.nominal_ctwd * 1e3
    missing = [k for k, v in (("wire_feed", spec.wire_feed), ("voltage", spec.voltage),
                              ("travel_speed", spec.travel_speed)) if v is None]
    if missing:
        return SeamLimit(spec.name, nom_mm, None, None, None,
                         f"refused: no programmed {' and '.join(missing)} in {part.path} (needed to solve for current)")
    w = cfg.wires[part.wire]

    def pen(ctwd: float) -> float:
        return float(penetration_at_ctwd(ctwd, spec.wire_feed, spec.voltage, spec.travel_speed, part, w.melt_a,
                                         w.melt_b, w.diameter, w.density)[1])

    lo, hi = CTWD_RANGE_M
    pmin = spec.min_penetration
    p_nom = pen(spec.nominal_ctwd)
    if p_nom < pmin:
        return SeamLimit(spec.name, nom_mm, None, None, None,
                         f"cannot be reached: penetration at nominal CTWD is already {p_nom * 1e3:.2f} mm, below the "
                         f"minimum {pmin * 1e3:.2f} mm")
    if pen(hi) > pmin:
        return SeamLimit(spec.name, nom_mm, None, None, None,
                         f"cannot be reached: penetration stays above {pmin * 1e3:.2f} mm at every CTWD up to "
                         f"{hi * 1e3:.0f} mm ({pen(hi) * 1e3:.2f} mm there)")
    mr = physics.melt_rate_from_wfs(spec.wire_feed, w.diameter, w.density)
    limit = _closed_form_limit(part, spec, w, mr, pmin, max(spec.nominal_ctwd, lo), hi)
    if limit is None:
        from scipy.optimize import brentq  # here: importing scipy.optimize costs ~0.5 s at every start

        limit = brentq(lambda c: pen(c) - pmin, max(spec.nominal_ctwd, lo), hi, xtol=1e-9)
    i_lim = float(physics.current_from_melt_rate(mr, limit, w.melt_a, w.melt_b))
    return SeamLimit(spec.name, nom_mm, limit * 1e3, i_lim, (limit - spec.nominal_ctwd) * 1e3)


def part_limits(cfg: Config, part_name: str) -> list[SeamLimit]:
    """Drift budget of every seam of a part (its [[seam]] entries, else its defaults as "*")."""
    part = cfg.parts[part_name]
    specs = list(part.seams.values()) or [part.defaults]
    return [seam_limit(cfg, part, s) for s in specs]


def _closed_form_limit(part: Part, spec: SeamSpec, w, mr: float, pmin: float, lo: float, hi: float) -> float | None:
    """L_lim without a root search when the current exponent is positive (Jackson's 4/3).

    P rises with Ī alone at fixed V and S, so P = P_min fixes the current: Ī_lim = I_ref ·
    (P_min / (P_ref · (V/V_ref)^ev · (S/S_ref)^es))^(1/ei); the Lesnewich relation solved for the
    CTWD at steady current (⟨I²⟩ = Ī²) then gives L_lim (``physics.ctwd_from_melt_rate``).
    None when the exponent is not positive or the result falls outside [lo, hi] (the caller
    then searches for the root).
    """
    r = part.reference
    ei, ev, es = (float(np.asarray(e)) for e in r.exponents)
    if not ei > 0:
        return None
    rest = r.depth * (spec.voltage / r.voltage) ** ev * (spec.travel_speed / r.travel_speed) ** es
    i_lim = r.current * (pmin / rest) ** (1.0 / ei)
    limit = float(physics.ctwd_from_melt_rate(mr, i_lim, i_lim * i_lim, w.melt_a, w.melt_b))
    return limit if lo <= limit <= hi else None


def with_limit_column(seams: pl.DataFrame, cfg: Config) -> pl.DataFrame:
    """Add ``limit_ctwd_mm``: each seam position's drift budget (null where there is none).

    Computed once per (part, seam) pair present (O(seam positions)), then joined.
    """
    if seams.height == 0 or "part" not in seams.columns:
        return seams
    pairs = seams.select("part", "seam").unique().drop_nulls()
    limits: list[float | None] = []
    for part_name, seam in pairs.iter_rows():
        part = cfg.parts.get(part_name)
        limits.append(None if part is None else seam_limit(cfg, part, part.seam(seam)).limit_ctwd_mm)
    table = pairs.with_columns(pl.Series("limit_ctwd_mm", limits, dtype=pl.Float64))
    return seams.join(table, on=["part", "seam"], how="left", nulls_equal=True, maintain_order="left")

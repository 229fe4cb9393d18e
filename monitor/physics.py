"""Every equation ctwd-monitor uses, and nothing else.

All functions are pure and vectorised: they take scalars or numpy arrays in SI units and
return numpy arrays (or floats for scalar input) in SI units. Unit conversions happen at the
edges (``monitor.units``), never here.

Symbols used throughout
-----------------------
I      welding current [A]; ``i_mean`` is the seam mean Ī, ``i_sq_mean`` the mean of I², ⟨I²⟩
V      arc voltage at the torch [V]
L      contact-tip-to-work distance, CTWD ("stick-out", electrode extension) [m]
MR     electrode melting rate [kg/s]
A      arc-term melting coefficient [kg/(s·A)]
B      resistive-term melting coefficient [kg/(s·m·A²)]
WFS    wire feed speed [m/s]
S      travel speed [m/s]
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "wire_area",
    "melt_rate_from_wfs",
    "wfs_from_melt_rate",
    "melt_rate",
    "ctwd_from_melt_rate",
    "current_from_melt_rate",
    "current_gain_at_ctwd",
    "jackson_penetration",
    "jackson_scale",
    "arc_power",
    "arc_energy_per_length",
    "ctwd_sensitivities",
]


def wire_area(diameter: ArrayLike) -> np.ndarray:
    """Cross-sectional area of a solid round wire.

    Parameters
    ----------
    diameter : array_like
        Nominal wire diameter [m].

    Returns
    -------
    numpy.ndarray
        Area π·d²/4 [m²].
    """
    d = np.asarray(diameter, dtype=np.float64)
    return np.pi * d * d / 4.0


def melt_rate_from_wfs(wfs: ArrayLike, diameter: ArrayLike, density: ArrayLike) -> np.ndarray:
    """Electrode melting rate implied by the wire feed: MR = WFS · (π d²/4) · ρ.

    At steady state the wire burns off as fast as it is fed, so the mass fed per second is
    the mass melted per second (mass continuity; valid for a stable arc, not during the
    arc-start transient or crater fill, which the scan trims away).

    Parameters
    ----------
    wfs : array_like
        Wire feed speed [m/s].
    diameter : array_like
        Wire diameter [m].
    density : array_like
        Wire density [kg/m³] (carbon steel ≈ 7850).

    Returns
    -------
    numpy.ndarray
        Melting rate [kg/s].
    """
    return np.asarray(wfs, dtype=np.float64) * wire_area(diameter) * np.asarray(density, dtype=np.float64)


def wfs_from_melt_rate(mr: ArrayLike, diameter: ArrayLike, density: ArrayLike) -> np.ndarray:
    """Inverse of :func:`melt_rate_from_wfs`: WFS = MR / ((π d²/4) · ρ), in [m/s]."""
    return np.asarray(mr, dtype=np.float64) / (wire_area(diameter) * np.asarray(density, dtype=np.float64))


def melt_rate(i_mean: ArrayLike, i_sq_mean: ArrayLike, ctwd: ArrayLike, a: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Electrode melting rate, Lesnewich form: MR = A·Ī + B·L·⟨I²⟩.

    Parameters
    ----------
    i_mean : array_like
        Mean welding current Ī over the seam [A] (drives the arc/anode heating term).
    i_sq_mean : array_like
        Mean of the squared current ⟨I²⟩ over the seam [A²] (drives the resistive, Joule
        preheat of the extension). For a steady current it equals Ī²; with short-circuit or
        pulsed ripple it is larger, and using Ī² instead biases any back-solved CTWD.
    ctwd : array_like
        Contact-tip-to-work distance L [m]. Strictly the electrode extension; the arc length
        (a few mm) is folded into the coefficients, as is usual when the relation is written
        with CTWD.
    a : array_like
        Arc-term coefficient A [kg/(s·A)].
    b : array_like
        Resistive-term coefficient B [kg/(s·m·A²)].

    Returns
    -------
    numpy.ndarray
        Melting rate MR [kg/s].

    Notes
    -----
    Lesnewich, A. (1958), "Control of melting rate and metal transfer in gas-shielded metal-arc
    welding", Welding Journal 37(8), 343-s and 37(9), 418-s. The relation is empirical: the
    coefficients depend on wire alloy, diameter, shielding gas and polarity (DCEP assumed), and
    hold over the calibrated current and CTWD range (typically 100-400 A, 8-30 mm for solid
    steel wire).
    """
    i = np.asarray(i_mean, dtype=np.float64)
    q = np.asarray(i_sq_mean, dtype=np.float64)
    return np.asarray(a, dtype=np.float64) * i + np.asarray(b, dtype=np.float64) * np.asarray(ctwd, dtype=np.float64) * q


def ctwd_from_melt_rate(mr: ArrayLike, i_mean: ArrayLike, i_sq_mean: ArrayLike, a: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Back-solve the effective CTWD from the Lesnewich relation: L = (MR − A·Ī) / (B·⟨I²⟩).

    Parameters
    ----------
    mr : array_like
        Melting rate [kg/s], normally from :func:`melt_rate_from_wfs`.
    i_mean : array_like
        Mean current Ī [A].
    i_sq_mean : array_like
        Mean squared current ⟨I²⟩ [A²].
    a, b : array_like
        Melting coefficients, as in :func:`melt_rate` [kg/(s·A)], [kg/(s·m·A²)].

    Returns
    -------
    numpy.ndarray
        Effective CTWD L [m]. NaN where ⟨I²⟩ is not positive. A negative or very large value
        means the seam lies outside the relation's validity (wrong wire, units or coefficients).

    Notes
    -----
    Exact inverse of :func:`melt_rate` in L (Lesnewich 1958, rearranged). "Effective" because
    tip wear (the current transfer point moving back inside a worn bore) lengthens the heated
    extension exactly as a larger geometric CTWD does.
    """
    q = np.asarray(i_sq_mean, dtype=np.float64)
    denom = np.asarray(b, dtype=np.float64) * q
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (np.asarray(mr, dtype=np.float64) - np.asarray(a, dtype=np.float64) * np.asarray(i_mean, dtype=np.float64)) / denom
    return np.where(q > 0, out, np.nan)


def current_from_melt_rate(
    mr: ArrayLike, ctwd: ArrayLike, a: ArrayLike, b: ArrayLike, ripple_factor: ArrayLike = 1.0
) -> np.ndarray:
    """Forward model: the mean current a CV source settles at for a given feed and CTWD.

    Solves A·Ī + B·L·k·Ī² = MR for Ī > 0, where k = ⟨I²⟩/Ī² is the ripple (form) factor
    (1 for a steady current; 1 + c² for a waveform whose relative RMS ripple is c).

    Parameters
    ----------
    mr : array_like
        Melting rate demanded by the wire feed [kg/s].
    ctwd : array_like
        CTWD L [m].
    a, b : array_like
        Melting coefficients [kg/(s·A)], [kg/(s·m·A²)].
    ripple_factor : array_like, optional
        k = ⟨I²⟩/Ī² [-], default 1.

    Returns
    -------
    numpy.ndarray
        Mean current Ī [A], the positive root, computed in the cancellation-free form
        Ī = 2·MR / (A + √(A² + 4·B·L·k·MR)).

    Notes
    -----
    Lesnewich (1958) relation solved for current. Valid where that relation is (see
    :func:`melt_rate`). This is the self-regulation of a constant-voltage source: at fixed
    WFS, a longer extension preheats the wire more, so less current is needed to melt it.
    """
    mr = np.asarray(mr, dtype=np.float64)
    a = np.asarray(a, dtype=np.float64)
    c = np.asarray(b, dtype=np.float64) * np.asarray(ctwd, dtype=np.float64) * np.asarray(ripple_factor, dtype=np.float64)
    return 2.0 * mr / (a + np.sqrt(a * a + 4.0 * c * mr))


def current_gain_at_ctwd(
    mr: ArrayLike, i_mean: ArrayLike, i_sq_mean: ArrayLike, ctwd: ArrayLike, a: ArrayLike, b: ArrayLike
) -> np.ndarray:
    """Current-measurement gain g that makes a seam's readings consistent with a known CTWD.

    A current channel reading g times the true current gives Ī_m = g·Ī and ⟨I²⟩_m = g²·⟨I²⟩; the
    form factor k = ⟨I²⟩_m/Ī_m² is unaffected. The true Ī at CTWD L follows from
    :func:`current_from_melt_rate` with that k, and g = Ī_m / Ī. Dividing Ī_m by g and ⟨I²⟩_m by
    g² then makes :func:`ctwd_from_melt_rate` return L exactly.

    Parameters
    ----------
    mr : array_like
        Melting rate from the wire feed [kg/s].
    i_mean, i_sq_mean : array_like
        Measured mean current [A] and mean squared current [A²].
    ctwd : array_like
        CTWD the seam is taken to have been welded at [m] (the nominal, for baseline zeroing).
    a, b : array_like
        Melting coefficients [kg/(s·A)], [kg/(s·m·A²)].

    Returns
    -------
    numpy.ndarray
        Gain g [-] (1 = the channel reads true); NaN where Ī_m is not positive.

    Notes
    -----
    Lesnewich (1958) relation solved for current, as in :func:`current_from_melt_rate`. Valid
    only if the seam really was at ``ctwd``: any true CTWD offset is absorbed into g.
    """
    i = np.asarray(i_mean, dtype=np.float64)
    q = np.asarray(i_sq_mean, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = q / (i * i)
        i_true = current_from_melt_rate(mr, ctwd, a, b, k)
        return np.where(i > 0, i / i_true, np.nan)


def jackson_penetration(
    current: ArrayLike,
    voltage: ArrayLike,
    travel_speed: ArrayLike,
    ref_current: ArrayLike,
    ref_voltage: ArrayLike,
    ref_travel_speed: ArrayLike,
    ref_depth: ArrayLike,
    exponents: tuple[ArrayLike, ArrayLike, ArrayLike] = (4.0 / 3.0, -2.0 / 3.0, -1.0 / 3.0),
) -> np.ndarray:
    """Penetration by Jackson's relation, scaled through one measured reference section.

    P = K·(I⁴ / (S·V²))^(1/3); eliminating K with a reference section (I_ref, V_ref, S_ref,
    P_ref) of the same joint, wire and gas gives

        P = P_ref · (I/I_ref)^(4/3) · (V_ref/V)^(2/3) · (S_ref/S)^(1/3).

    Parameters
    ----------
    current : array_like
        Mean welding current [A].
    voltage : array_like
        Mean arc voltage [V]. More voltage widens the arc and gives *less* penetration.
    travel_speed : array_like
        Travel speed [m/s].
    ref_current, ref_voltage, ref_travel_speed : array_like
        The reference section's welding conditions [A], [V], [m/s].
    ref_depth : array_like
        Penetration measured on the reference macro section [m].
    exponents : tuple of three array_like, optional
        Exponents of current, voltage and travel speed [-]; Jackson's (4/3, −2/3, −1/3) by
        default. A calibration with free exponents may supply others (per seam, as arrays).

    Returns
    -------
    numpy.ndarray
        Estimated penetration depth [m].

    Notes
    -----
    Jackson, C. E. (1960), "The science of arc welding", Welding Journal 39(4), 129-s to 140-s.
    An empirical scaling: trust it near the reference conditions (same joint,
    position, wire, gas and transfer mode; current within roughly ±30 % of the reference).
    """
    ei, ev, es = exponents
    return (
        np.asarray(ref_depth, dtype=np.float64)
        * (np.asarray(current, dtype=np.float64) / np.asarray(ref_current, dtype=np.float64)) ** ei
        * (np.asarray(voltage, dtype=np.float64) / np.asarray(ref_voltage, dtype=np.float64)) ** ev
        * (np.asarray(travel_speed, dtype=np.float64) / np.asarray(ref_travel_speed, dtype=np.float64)) ** es
    )


def jackson_scale(current: ArrayLike, voltage: ArrayLike, travel_speed: ArrayLike) -> np.ndarray:
    """Jackson's penetration group (I⁴ / (S·V²))^(1/3), so that P = K · this.

    Parameters
    ----------
    current : array_like
        Current [A].
    voltage : array_like
        Voltage [V].
    travel_speed : array_like
        Travel speed in whatever unit K was fitted with (SI: [m/s]).

    Returns
    -------
    numpy.ndarray
        The group, [A^(4/3) · V^(−2/3) · (unit of S)^(−1/3)].

    Notes
    -----
    Jackson (1960), Welding Journal 39(4), 129-s.
    """
    i = np.asarray(current, dtype=np.float64)
    return np.cbrt(i**4 / (np.asarray(travel_speed, dtype=np.float64) * np.asarray(voltage, dtype=np.float64) ** 2))


def arc_power(current: ArrayLike, voltage: ArrayLike) -> np.ndarray:
    """Instantaneous electrical power of the arc, P = V·I.

    Parameters
    ----------
    current : array_like
        Welding current [A].
    voltage : array_like
        Arc voltage measured at the torch [V].

    Returns
    -------
    numpy.ndarray
        Power [W].

    Notes
    -----
    Averaging this product over a seam, rather than multiplying mean current by mean voltage,
    is what the instantaneous-power method for waveform-controlled welding asks for
    (ISO/TR 18491; ASME BPVC Section IX, QW-409.1).
    """
    return np.multiply(np.asarray(current, dtype=np.float64), np.asarray(voltage, dtype=np.float64))


def arc_energy_per_length(power_mean: ArrayLike, travel_speed: ArrayLike) -> np.ndarray:
    """Arc energy per unit length of weld, E = ⟨V·I⟩ / S.

    Parameters
    ----------
    power_mean : array_like
        Mean instantaneous power ⟨V·I⟩ over the seam [W].
    travel_speed : array_like
        Travel speed [m/s].

    Returns
    -------
    numpy.ndarray
        Arc energy [J/m]. (Heat input in the EN 1011-1 / ISO/TR 17671-1 sense is this times
        the process's thermal efficiency, 0.8 for GMAW; this function does not apply it.)

    Notes
    -----
    Instantaneous-power method: ISO/TR 18491:2015; ASME BPVC Section IX, QW-409.1(c).
    """
    s = np.asarray(travel_speed, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(s > 0, np.asarray(power_mean, dtype=np.float64) / s, np.nan)


def ctwd_sensitivities(
    mr: ArrayLike, i_mean: ArrayLike, i_sq_mean: ArrayLike, a: ArrayLike, b: ArrayLike
) -> dict[str, np.ndarray]:
    """First-order sensitivities of the back-solved CTWD, for uncertainty propagation.

    With L = (MR − A·Ī)/(B·⟨I²⟩):

    - ``wire_feed``: ∂L/∂ln(WFS) = MR/(B·⟨I²⟩)               [m per unit relative WFS gain]
    - ``current``:   ∂L/∂ln(g) = −(A·Ī/(B·⟨I²⟩) + 2·L)       [m per unit relative current gain g,
      which scales Ī by g and ⟨I²⟩ by g²]
    - ``a``:         ∂L/∂A = −Ī/(B·⟨I²⟩)                      [m per kg/(s·A)]
    - ``b``:         ∂L/∂B = −L/B                              [m per kg/(s·m·A²)]

    Parameters
    ----------
    mr, i_mean, i_sq_mean, a, b : array_like
        As in :func:`ctwd_from_melt_rate`, SI units.

    Returns
    -------
    dict of numpy.ndarray
        The four partial derivatives above, keyed ``wire_feed``, ``current``, ``a``, ``b``.

    Notes
    -----
    Linearised (first-order) propagation as in JCGM 100:2008 (GUM), section 5.1: σ_L² = Σ
    (∂L/∂x_i)² σ_i² + 2 Σ ∂L/∂x_i ∂L/∂x_j cov(x_i, x_j). The relation is linear in MR, A and
    B, so only the current term carries linearisation error (second order in the gain error).
    """
    mr = np.asarray(mr, dtype=np.float64)
    i = np.asarray(i_mean, dtype=np.float64)
    q = np.asarray(i_sq_mean, dtype=np.float64)
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    bq = b * q
    L = (mr - a * i) / bq
    return {
        "wire_feed": mr / bq,
        "current": -(a * i / bq + 2.0 * L),
        "a": -i / bq,
        "b": -L / b,
    }

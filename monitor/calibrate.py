"""Fitting the coefficients the estimates need, from reference seams and macro sections.

Pure numerical functions (numpy/scipy): arrays in SI units in, frozen dataclasses out. No file
I/O and no dataframes here; the caller aggregates seams (``ingest``) and parses units
(``monitor.units``) first. The equations themselves live in :mod:`monitor.physics`.

- :func:`fit_melt_coefficients`   A and B of MR = A·Ī + B·L·⟨I²⟩ from seams run at known CTWDs.
- :func:`fit_penetration_scale`   the reference depth of Jackson's relation, exponents fixed.
- :func:`fit_penetration_exponents` reference depth and free exponents, with confidence intervals.
- :func:`ctwd_variance_from_coefficients` variance of a back-solved CTWD due to the fitted A, B.
- :func:`simulate_reference_runs` forward model of a calibration session (tests, demo).

The fitted numbers are screening calibrations, not weld qualification: acceptance belongs to
the applicable code (AWS D1.1, ISO 5817), the qualified WPS and licensed inspection.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from monitor import physics

__all__ = [
    "JACKSON_EXPONENTS",
    "MAX_CONDITION_NUMBER",
    "MIN_CTWD_SPREAD",
    "MIN_CURRENT_SPREAD",
    "MIN_LOG_SPREAD",
    "CalibrationError",
    "MeltFit",
    "PenetrationExponentFit",
    "PenetrationFit",
    "ctwd_variance_from_coefficients",
    "fit_melt_coefficients",
    "fit_penetration_exponents",
    "fit_penetration_scale",
    "simulate_reference_runs",
]

#: Jackson's exponents of current, voltage and travel speed (Jackson 1960).
JACKSON_EXPONENTS: tuple[float, float, float] = (4.0 / 3.0, -2.0 / 3.0, -1.0 / 3.0)

#: Smallest CTWD spread (max − min) of a melt calibration that is not warned about [m].
MIN_CTWD_SPREAD = 5e-3
#: Two CTWDs closer than this count as one when deciding whether the design has two [m].
CTWD_DISTINCT_TOL = 0.5e-3
#: Smallest relative spread of mean current, (max − min)/mean, not warned about [-].
MIN_CURRENT_SPREAD = 0.10
#: Largest condition number of the column-normalised design not warned about [-]
#: (20 ≈ two unit columns whose cosine is 0.995).
MAX_CONDITION_NUMBER = 20.0
#: Smallest spread of a log regressor, max − min of ln(x), not warned about in the
#: free-exponent fit (0.2 ≈ a 22 % range of that variable) [-].
MIN_LOG_SPREAD = 0.2
#: A log regressor whose spread is below this is treated as constant [-].
_CONSTANT_LOG_SPREAD = 1e-9

_REGRESSOR_NAMES = ("current", "voltage", "travel speed")


class CalibrationError(ValueError):
    """A calibration that cannot be done with the data given; the message says why and what to do."""


# --------------------------------------------------------------------------------------------
# results


@dataclass(frozen=True, eq=False)
class MeltFit:
    """Least-squares fit of the Lesnewich coefficients.

    Attributes
    ----------
    a, b : float
        Fitted A [kg/(s·A)] and B [kg/(s·m·A²)].
    a_se, b_se : float
        Their standard errors (same units).
    ab_corr : float
        Correlation of the two estimates [-] (strongly negative is usual).
    covariance : numpy.ndarray
        2×2 covariance of (A, B), SI units.
    residual_std : float
        Residual standard deviation of MR, √(RSS/dof) [kg/s].
    residuals : numpy.ndarray
        Per-seam MR − fitted MR [kg/s].
    n, dof : int
        Number of seams and degrees of freedom (n − 2).
    condition_number : float
        2-norm condition number of the design with each column scaled to unit length [-]
        (unit-free; large means A and B are hard to tell apart).
    ctwd_error : numpy.ndarray
        Per-seam CTWD back-solved with the fitted A, B minus the known CTWD [m].
    ctwd_spread : float
        max − min of the known CTWDs [m].
    current_spread : float
        (max − min)/mean of the seam mean currents [-].
    warnings : tuple of str
        One-line warnings about a weak design (empty when none).
    """

    a: float
    b: float
    a_se: float
    b_se: float
    ab_corr: float
    covariance: np.ndarray
    residual_std: float
    residuals: np.ndarray
    n: int
    dof: int
    condition_number: float
    ctwd_error: np.ndarray
    ctwd_spread: float
    current_spread: float
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False)
class PenetrationFit:
    """Reference depth of Jackson's relation with its exponents held fixed.

    Attributes
    ----------
    ref_depth : float
        Fitted penetration P_ref at the reference conditions [m] (geometric-mean fit).
    ref_depth_se : float
        Its standard error by the delta method, P_ref · SE(ln P_ref) [m].
    log_ref_depth_se : float
        Standard error of ln P_ref [-].
    residuals : numpy.ndarray
        Per-section measured − fitted depth [m].
    residual_std : float
        Standard deviation of ``residuals`` with n − 1 degrees of freedom [m].
    log_residual_std : float
        Residual standard deviation of ln P, the fit's own scatter [-] (≈ relative scatter).
    n, dof : int
        Number of sections and degrees of freedom (n − 1).
    ref_current, ref_voltage, ref_travel_speed : float
        The reference conditions the depth refers to [A], [V], [m/s].
    exponents : tuple of float
        The exponents used (Jackson's).
    """

    ref_depth: float
    ref_depth_se: float
    log_ref_depth_se: float
    residuals: np.ndarray
    residual_std: float
    log_residual_std: float
    n: int
    dof: int
    ref_current: float
    ref_voltage: float
    ref_travel_speed: float
    exponents: tuple[float, float, float] = JACKSON_EXPONENTS


@dataclass(frozen=True, eq=False)
class PenetrationExponentFit:
    """Log-linear fit of penetration with free exponents.

    Attributes
    ----------
    ref_depth : float
        P_ref = exp(c0) at the reference conditions [m].
    ref_depth_se : float
        Delta-method standard error of P_ref [m].
    log_ref_depth, log_ref_depth_se : float
        c0 = ln(P_ref / 1 m) and its standard error [-].
    exponents : tuple of float
        Fitted exponents of current, voltage and travel speed (e_I, e_V, e_S) [-]. An exponent
        whose regressor did not vary is held at Jackson's value (see ``held``).
    exponents_se : tuple of float
        Their standard errors (NaN for a held exponent).
    exponents_ci : tuple of (float, float)
        Two-sided t-based confidence intervals at level 1 − alpha (NaN for a held exponent).
    jackson_inside : bool
        True when each fitted exponent's interval contains Jackson's value (held ones skipped).
    current_inside, voltage_inside, speed_inside : bool or None
        The same test per exponent; None for a held exponent.
    held : tuple of bool
        Which exponents were held at Jackson's value because their regressor was constant.
    covariance : numpy.ndarray
        Covariance of the fitted coefficients (c0 then the free exponents, in that order).
    residuals : numpy.ndarray
        Per-section ln P − fitted ln P [-].
    residual_std : float
        √(RSS/dof) of ln P [-].
    n, dof : int
        Sections and degrees of freedom (n − number of fitted coefficients).
    alpha : float
        1 − confidence level of the intervals.
    condition_number : float
        Condition number of the column-normalised log design [-].
    ref_current, ref_voltage, ref_travel_speed : float
        Reference conditions [A], [V], [m/s].
    warnings : tuple of str
        One-line warnings about a weak design.
    """

    ref_depth: float
    ref_depth_se: float
    log_ref_depth: float
    log_ref_depth_se: float
    exponents: tuple[float, float, float]
    exponents_se: tuple[float, float, float]
    exponents_ci: tuple[tuple[float, float], tuple[float, float], tuple[float, float]]
    jackson_inside: bool
    current_inside: bool | None
    voltage_inside: bool | None
    speed_inside: bool | None
    held: tuple[bool, bool, bool]
    covariance: np.ndarray
    residuals: np.ndarray
    residual_std: float
    n: int
    dof: int
    alpha: float
    condition_number: float
    ref_current: float
    ref_voltage: float
    ref_travel_speed: float
    warnings: tuple[str, ...] = ()


# --------------------------------------------------------------------------------------------
# helpers


def _vectors(names: tuple[str, ...], *arrays: ArrayLike) -> list[np.ndarray]:
    """1-D float64 arrays of one length, all finite, else CalibrationError naming the input."""
    out = [np.atleast_1d(np.asarray(x, dtype=np.float64)) for x in arrays]
    for name, x in zip(names, out, strict=True):
        if x.ndim != 1:
            raise CalibrationError(f"{name}: expected one value per seam (1-D), got shape {x.shape}")
        if not np.all(np.isfinite(x)):
            raise CalibrationError(f"{name}: {int(np.sum(~np.isfinite(x)))} value(s) are not finite")
    lengths = {len(x) for x in out}
    if len(lengths) > 1:
        detail = ", ".join(f"{n}={len(x)}" for n, x in zip(names, out, strict=True))
        raise CalibrationError(f"inputs differ in length ({detail})")
    return out


def _require_positive(name: str, x: np.ndarray) -> None:
    if np.any(x <= 0):
        raise CalibrationError(f"{name}: {int(np.sum(x <= 0))} value(s) are not positive")


def _ols(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, float, float]:
    """Ordinary least squares y ≈ X·β on a column-normalised copy of X.

    Returns β, cov(β) = s²·(XᵀX)⁻¹, residuals, s = √(RSS/dof) and the condition number of the
    normalised design. Normalising the columns makes the solve and the condition number
    independent of the units of each column.
    """
    norms = np.linalg.norm(x, axis=0)
    xs = x / norms
    beta_s, *_ = np.linalg.lstsq(xs, y, rcond=None)
    resid = y - xs @ beta_s
    dof = x.shape[0] - x.shape[1]
    s = float(np.sqrt(resid @ resid / dof))
    # (XsᵀXs)⁻¹ from the SVD, stable for the modest conditioning the caller allows
    _, sv, vt = np.linalg.svd(xs, full_matrices=False)
    inv_s = (vt.T / sv**2) @ vt
    cov = s * s * inv_s / np.outer(norms, norms)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")
    return beta_s / norms, cov, resid, s, cond


# --------------------------------------------------------------------------------------------
# melting-rate coefficients


def fit_melt_coefficients(mr: ArrayLike, i_mean: ArrayLike, i_sq_mean: ArrayLike, ctwd: ArrayLike) -> MeltFit:
    """Fit A and B of MR = A·Ī + B·L·⟨I²⟩ to reference seams run at known CTWDs.

    The relation is linear in A and B, so this is ordinary least squares with the design
    columns [Ī, L·⟨I²⟩] and no intercept (no melting without current).

    Parameters
    ----------
    mr : array_like
        Per-seam melting rate from the wire feed, :func:`monitor.physics.melt_rate_from_wfs` [kg/s].
    i_mean : array_like
        Per-seam mean current Ī [A].
    i_sq_mean : array_like
        Per-seam mean squared current ⟨I²⟩ [A²] (not Ī²: ripple matters).
    ctwd : array_like
        Per-seam CTWD as set and measured on the cell [m].

    Returns
    -------
    MeltFit
        Coefficients, standard errors s·√diag((XᵀX)⁻¹), their correlation, residuals and
        per-seam back-solved CTWD errors.

    Raises
    ------
    CalibrationError
        Inputs not finite or not positive; all seams at one CTWD (A and B cannot be told apart,
        and B would absorb any fixed CTWD offset); fewer than 4 seams (parameters + 2, so
        the residual scatter has at least 2 degrees of freedom).

    Notes
    -----
    Relation: Lesnewich (1958), Welding Journal 37(8), 343-s. Standard errors assume
    independent, equal-variance errors in MR (feed slip, wire tolerance); errors in the
    current measurement are not modelled here (see ``ctwd_sensitivities["current"]``).
    Warnings (fit still returned): CTWD spread < :data:`MIN_CTWD_SPREAD` (5 mm); relative
    current spread < :data:`MIN_CURRENT_SPREAD` (10 %); condition number of the
    column-normalised design > :data:`MAX_CONDITION_NUMBER` (20).
    """
    mr, i, q, L = _vectors(("mr", "i_mean", "i_sq_mean", "ctwd"), mr, i_mean, i_sq_mean, ctwd)
    for name, x in (("mr", mr), ("i_mean", i), ("i_sq_mean", q), ("ctwd", L)):
        _require_positive(name, x)
    if np.any(q < i * i * (1.0 - 1e-9)):
        raise CalibrationError(
            "i_sq_mean: mean of I² is below the square of the mean current for "
            f"{int(np.sum(q < i * i * (1.0 - 1e-9)))} seam(s); pass ⟨I²⟩ in A², not the RMS current or Ī"
        )
    n = len(mr)
    levels = np.sort(L)
    n_levels = 1 + int(np.sum(np.diff(levels) > CTWD_DISTINCT_TOL)) if n else 0
    if n_levels < 2:
        shown = f" ({levels[0] * 1e3:.1f} mm)" if n else ""
        raise CalibrationError(
            f"all reference seams were run at one CTWD{shown}; weld at two or more CTWDs at least 5 mm apart"
        )
    if n < 4:
        raise CalibrationError(
            f"need at least 4 reference seams to fit A and B with an error estimate (got {n})"
        )

    x = np.column_stack([i, L * q])
    beta, cov, resid, s, cond = _ols(x, mr)
    a, b = float(beta[0]), float(beta[1])
    a_se, b_se = float(np.sqrt(cov[0, 0])), float(np.sqrt(cov[1, 1]))
    ab_corr = float(cov[0, 1] / (a_se * b_se)) if a_se > 0 and b_se > 0 else float("nan")
    ctwd_error = physics.ctwd_from_melt_rate(mr, i, q, a, b) - L

    spread = float(levels[-1] - levels[0])
    i_spread = float((i.max() - i.min()) / i.mean())
    warns: list[str] = []
    if spread < MIN_CTWD_SPREAD:
        warns.append(
            f"reference CTWDs span only {spread * 1e3:.1f} mm (< {MIN_CTWD_SPREAD * 1e3:.0f} mm); "
            "A and B are poorly separated, weld further apart"
        )
    if i_spread < MIN_CURRENT_SPREAD:
        warns.append(
            f"mean current varies by only {i_spread:.0%} across the reference seams "
            f"(< {MIN_CURRENT_SPREAD:.0%}); add a second or third wire feed speed"
        )
    if cond > MAX_CONDITION_NUMBER:
        warns.append(
            f"the reference design is ill-conditioned (condition number {cond:.0f} > "
            f"{MAX_CONDITION_NUMBER:.0f}); A and B are strongly confounded"
        )
    if b <= 0 or a <= 0:
        warns.append(
            f"fitted A = {a:.3g} kg/(s·A), B = {b:.3g} kg/(s·m·A²): a non-positive coefficient is unphysical"
        )
    return MeltFit(
        a=a,
        b=b,
        a_se=a_se,
        b_se=b_se,
        ab_corr=ab_corr,
        covariance=cov,
        residual_std=s,
        residuals=resid,
        n=n,
        dof=n - 2,
        condition_number=cond,
        ctwd_error=ctwd_error,
        ctwd_spread=spread,
        current_spread=i_spread,
        warnings=tuple(warns),
    )


def ctwd_variance_from_coefficients(
    mr: ArrayLike, i_mean: ArrayLike, i_sq_mean: ArrayLike, a: float, b: float, cov_ab: ArrayLike
) -> np.ndarray:
    """Variance of the back-solved CTWD caused by the uncertainty of the fitted A and B.

    σ_L² = J Σ Jᵀ with J = [∂L/∂A, ∂L/∂B] from :func:`monitor.physics.ctwd_sensitivities`
    and Σ the 2×2 covariance of (A, B), evaluated element-wise.

    Parameters
    ----------
    mr : array_like
        Melting rate [kg/s].
    i_mean, i_sq_mean : array_like
        Mean current [A] and mean squared current [A²].
    a, b : float
        Fitted coefficients [kg/(s·A)], [kg/(s·m·A²)].
    cov_ab : array_like
        2×2 covariance of (A, B) in SI units (``MeltFit.covariance``).

    Returns
    -------
    numpy.ndarray
        Variance of L [m²], one per element of the inputs (broadcast).

    Notes
    -----
    First-order propagation, JCGM 100:2008 (GUM) 5.2 (correlated inputs). L is linear in A
    and in 1/B; the linearisation is good while B's relative standard error is small (a few %).
    """
    sens = physics.ctwd_sensitivities(mr, i_mean, i_sq_mean, a, b)
    cov = np.asarray(cov_ab, dtype=np.float64)
    if cov.shape != (2, 2):
        raise CalibrationError(f"cov_ab: expected a 2×2 covariance of (A, B), got shape {cov.shape}")
    ja, jb = sens["a"], sens["b"]
    return ja * ja * cov[0, 0] + 2.0 * ja * jb * cov[0, 1] + jb * jb * cov[1, 1]


def simulate_reference_runs(
    a: float,
    b: float,
    ctwds: ArrayLike,
    wfs_values: ArrayLike,
    diameter: float,
    density: float,
    rng: np.random.Generator,
    ripple_rms: float = 0.15,
    current_gain_noise: float = 0.0,
    mr_noise_rel: float = 0.01,
    repeats: int = 1,
) -> dict[str, np.ndarray]:
    """Forward model of a melt calibration session: every CTWD × every WFS, ``repeats`` times.

    For each seam, the nominal melting rate is MR₀ = WFS·(π d²/4)·ρ; the arc settles at the mean
    current that melts MR₀ at that CTWD (:func:`monitor.physics.current_from_melt_rate`, ripple
    factor k = 1 + c²). The returned ``mr`` is MR₀·(1 + ε), ε ~ N(0, mr_noise_rel) (the seam's
    true burn-off differs from the nominal feed: slip, wire tolerance); the returned currents
    carry a per-seam gain g ~ N(1, current_gain_noise) on Ī and g² on ⟨I²⟩.

    Parameters
    ----------
    a, b : float
        True coefficients [kg/(s·A)], [kg/(s·m·A²)].
    ctwds : array_like
        CTWD levels [m].
    wfs_values : array_like
        Wire feed speed levels [m/s].
    diameter : float
        Wire diameter [m].
    density : float
        Wire density [kg/m³].
    rng : numpy.random.Generator
        Random source.
    ripple_rms : float, optional
        Relative RMS current ripple c [-]; ⟨I²⟩ = (1 + c²)·Ī².
    current_gain_noise : float, optional
        Relative standard deviation of the per-seam current-measurement gain [-].
    mr_noise_rel : float, optional
        Relative standard deviation of the melting rate about the nominal feed [-].
    repeats : int, optional
        Seams per (CTWD, WFS) combination.

    Returns
    -------
    dict of numpy.ndarray
        ``mr`` [kg/s], ``i_mean`` [A], ``i_sq_mean`` [A²], ``ctwd`` [m], ``wfs`` [m/s], one value
        per seam.

    Notes
    -----
    Lesnewich (1958) relation solved for current (CV self-regulation); mass continuity for
    the feed. Invented data for tests and demonstrations only.
    """
    L, wfs = np.meshgrid(np.asarray(ctwds, dtype=np.float64), np.asarray(wfs_values, dtype=np.float64))
    L = np.tile(L.ravel(), repeats)
    wfs = np.tile(wfs.ravel(), repeats)
    k = 1.0 + ripple_rms**2
    mr_nominal = physics.melt_rate_from_wfs(wfs, diameter, density)
    i_true = physics.current_from_melt_rate(mr_nominal, L, a, b, k)
    n = len(L)
    mr = mr_nominal * (1.0 + mr_noise_rel * rng.standard_normal(n))
    gain = 1.0 + current_gain_noise * rng.standard_normal(n)
    i_mean = gain * i_true
    i_sq_mean = gain * gain * k * i_true * i_true
    return {"mr": mr, "i_mean": i_mean, "i_sq_mean": i_sq_mean, "ctwd": L, "wfs": wfs}


# --------------------------------------------------------------------------------------------
# penetration


def _penetration_inputs(
    depth: ArrayLike,
    current: ArrayLike,
    voltage: ArrayLike,
    travel_speed: ArrayLike,
    ref_current: float,
    ref_voltage: float,
    ref_travel_speed: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    p, i, v, s = _vectors(
        ("depth", "current", "voltage", "travel_speed"), depth, current, voltage, travel_speed
    )
    for name, x in (("depth", p), ("current", i), ("voltage", v), ("travel_speed", s)):
        _require_positive(name, x)
    for name, r in (
        ("ref_current", ref_current),
        ("ref_voltage", ref_voltage),
        ("ref_travel_speed", ref_travel_speed),
    ):
        if not (np.isfinite(r) and r > 0):
            raise CalibrationError(f"{name}: expected a positive finite value, got {r!r}")
    return p, i, v, s


def fit_penetration_scale(
    depth: ArrayLike,
    current: ArrayLike,
    voltage: ArrayLike,
    travel_speed: ArrayLike,
    ref_current: float,
    ref_voltage: float,
    ref_travel_speed: float,
) -> PenetrationFit:
    """Fit the reference depth of Jackson's relation, exponents fixed at (4/3, −2/3, −1/3).

    ln P = ln P_ref + ln g(I, V, S), g = (I/I_ref)^(4/3)·(V/V_ref)^(−2/3)·(S/S_ref)^(−1/3),
    fitted by least squares in log space: ln P_ref = mean(ln P − ln g).

    Parameters
    ----------
    depth : array_like
        Penetration measured on each macro section [m].
    current, voltage, travel_speed : array_like
        Each section's mean current [A], voltage [V] and travel speed [m/s].
    ref_current, ref_voltage, ref_travel_speed : float
        Reference conditions at which P_ref is wanted [A], [V], [m/s].

    Returns
    -------
    PenetrationFit
        P_ref, SE(P_ref) = P_ref·s/√n (delta method), residuals in m and in ln P.

    Raises
    ------
    CalibrationError
        Inputs not positive or not finite; fewer than 3 sections (parameters + 2).

    Notes
    -----
    Jackson (1960), Welding Journal 39(4), 129-s. Log space makes the scatter multiplicative
    (depth errors grow with depth) and the estimate a geometric mean. Trust it near the
    sections' conditions (current within roughly ±30 %).
    """
    p, i, v, s = _penetration_inputs(
        depth, current, voltage, travel_speed, ref_current, ref_voltage, ref_travel_speed
    )
    n = len(p)
    if n < 3:
        raise CalibrationError(
            f"need at least 3 macro sections to fit the reference depth with an error estimate (got {n})"
        )
    g = physics.jackson_penetration(
        i, v, s, ref_current, ref_voltage, ref_travel_speed, 1.0, JACKSON_EXPONENTS
    )
    z = np.log(p) - np.log(g)
    c0 = float(z.mean())
    log_resid = z - c0
    log_s = float(np.sqrt(log_resid @ log_resid / (n - 1)))
    log_se = log_s / np.sqrt(n)
    p_ref = float(np.exp(c0))
    resid = p - p_ref * g
    return PenetrationFit(
        ref_depth=p_ref,
        ref_depth_se=p_ref * log_se,
        log_ref_depth_se=float(log_se),
        residuals=resid,
        residual_std=float(np.sqrt(resid @ resid / (n - 1))),
        log_residual_std=log_s,
        n=n,
        dof=n - 1,
        ref_current=float(ref_current),
        ref_voltage=float(ref_voltage),
        ref_travel_speed=float(ref_travel_speed),
    )


def fit_penetration_exponents(
    depth: ArrayLike,
    current: ArrayLike,
    voltage: ArrayLike,
    travel_speed: ArrayLike,
    ref_current: float,
    ref_voltage: float,
    ref_travel_speed: float,
    alpha: float = 0.05,
) -> PenetrationExponentFit:
    """Fit penetration with free exponents: ln P = c0 + e_I·ln(I/I_ref) + e_V·ln(V/V_ref) + e_S·ln(S/S_ref).

    Parameters
    ----------
    depth : array_like
        Penetration measured on each macro section [m].
    current, voltage, travel_speed : array_like
        Each section's mean current [A], voltage [V] and travel speed [m/s].
    ref_current, ref_voltage, ref_travel_speed : float
        Reference conditions [A], [V], [m/s]; P_ref = exp(c0) is the depth there.
    alpha : float, optional
        1 − confidence level of the two-sided t intervals (default 0.05 → 95 %).

    Returns
    -------
    PenetrationExponentFit
        P_ref, exponents, standard errors s·√diag((XᵀX)⁻¹), intervals
        estimate ± t(1 − alpha/2, dof)·SE, and whether Jackson's exponents lie inside.

    Raises
    ------
    CalibrationError
        Inputs not positive or not finite; fewer than 6 sections (4 parameters + 2); alpha
        not in (0, 1).

    Notes
    -----
    Jackson (1960), Welding Journal 39(4), 129-s, gives the exponents this tests against.
    A regressor that does not vary at all (ln spread < 1e-9) cannot be fitted: its exponent is
    held at Jackson's value and a warning says so. Warnings also when a regressor's ln spread
    is < :data:`MIN_LOG_SPREAD` (0.2) or the column-normalised design's condition number is
    > :data:`MAX_CONDITION_NUMBER` (20).
    """
    if not 0.0 < alpha < 1.0:
        raise CalibrationError(f"alpha: expected a value between 0 and 1, got {alpha!r}")
    p, i, v, s = _penetration_inputs(
        depth, current, voltage, travel_speed, ref_current, ref_voltage, ref_travel_speed
    )
    n = len(p)
    if n < 6:
        raise CalibrationError(
            f"need at least 6 macro sections to fit the reference depth and three exponents (got {n}); "
            "fit the reference depth alone with Jackson's exponents instead"
        )
    logs = np.column_stack([np.log(i / ref_current), np.log(v / ref_voltage), np.log(s / ref_travel_speed)])
    y = np.log(p)
    spreads = logs.max(axis=0) - logs.min(axis=0)
    held = spreads < _CONSTANT_LOG_SPREAD
    warns: list[str] = []
    for name, sp, h, e in zip(_REGRESSOR_NAMES, spreads, held, JACKSON_EXPONENTS, strict=True):
        if h:
            warns.append(
                f"{name} did not vary across the sections; its exponent is held at Jackson's {e:+.3f}, not fitted"
            )
        elif sp < MIN_LOG_SPREAD:
            warns.append(
                f"{name} varies by only {np.expm1(sp):.0%} across the sections (ln spread {sp:.2f} < "
                f"{MIN_LOG_SPREAD}); its exponent is poorly determined"
            )
    # held exponents move to the left-hand side at Jackson's value
    y_adj = y - logs[:, held] @ np.asarray(JACKSON_EXPONENTS)[held]
    x = np.column_stack([np.ones(n), logs[:, ~held]])
    beta, cov, resid, res_std, cond = _ols(x, y_adj)
    dof = n - x.shape[1]
    if cond > MAX_CONDITION_NUMBER:
        warns.append(
            f"the section design is ill-conditioned (condition number {cond:.0f} > {MAX_CONDITION_NUMBER:.0f}); "
            "current, voltage and travel speed were changed together"
        )
    from scipy import stats  # imported here: scipy.stats costs about a second at every `ctwd` start

    tcrit = float(stats.t.ppf(1.0 - alpha / 2.0, dof))
    se_all = np.sqrt(np.diag(cov))
    exps = np.array(JACKSON_EXPONENTS, dtype=np.float64)
    exps_se = np.full(3, np.nan)
    exps[~held] = beta[1:]
    exps_se[~held] = se_all[1:]
    lo, hi = exps - tcrit * exps_se, exps + tcrit * exps_se
    inside: list[bool | None] = [
        None if h else bool(lo_k <= e <= hi_k)
        for h, lo_k, hi_k, e in zip(held, lo, hi, JACKSON_EXPONENTS, strict=True)
    ]
    c0, c0_se = float(beta[0]), float(se_all[0])
    p_ref = float(np.exp(c0))
    return PenetrationExponentFit(
        ref_depth=p_ref,
        ref_depth_se=p_ref * c0_se,
        log_ref_depth=c0,
        log_ref_depth_se=c0_se,
        exponents=(float(exps[0]), float(exps[1]), float(exps[2])),
        exponents_se=(float(exps_se[0]), float(exps_se[1]), float(exps_se[2])),
        exponents_ci=(
            (float(lo[0]), float(hi[0])),
            (float(lo[1]), float(hi[1])),
            (float(lo[2]), float(hi[2])),
        ),
        jackson_inside=all(f for f in inside if f is not None),
        current_inside=inside[0],
        voltage_inside=inside[1],
        speed_inside=inside[2],
        held=(bool(held[0]), bool(held[1]), bool(held[2])),
        covariance=cov,
        residuals=resid,
        residual_std=res_std,
        n=n,
        dof=dof,
        alpha=float(alpha),
        condition_number=cond,
        ref_current=float(ref_current),
        ref_voltage=float(ref_voltage),
        ref_travel_speed=float(ref_travel_speed),
        warnings=tuple(warns),
    )

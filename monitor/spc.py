"""Statistical process control for drift across successive parts at one seam position.

Pure numpy/scipy functions, no I/O. Each observation ``x[i]`` is one part's per-seam value
(typically the back-solved effective CTWD [m] or the estimated penetration [m]) in weld order.
All charts take plain SI floats; their outputs are in the unit of ``x`` unless stated.

``reset`` arrays
----------------
A boolean array as long as ``x``: True where a contact-tip change (or any deliberate
re-setting of the process) happened *before* that observation. A chart restarts there: its
statistic goes back to the target and its observation counter back to zero, exactly as if a
new series began at that index.

Missing values
--------------
NaN observations (a part whose seam could not be evaluated) are skipped: the statistic is
carried forward unchanged, the counter does not advance and no signal is raised there.

References
----------
Montgomery, D. C., *Introduction to Statistical Quality Control*, Wiley (chapters on control
charts for individuals, the tabular CUSUM and the EWMA chart) - from memory.
Lucas, J. M. and Saccucci, M. S. (1990), "Exponentially weighted moving average control
schemes: properties and enhancements", Technometrics 32(1), 1-12 - from memory.

These charts are screening indicators of drift, not weld acceptance; see the package notice.
"""

from __future__ import annotations

from itertools import pairwise
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike
from scipy import signal, stats

__all__ = [
    "D2_N2",
    "ArlEstimate",
    "cusum_arl",
    "cusum_chart",
    "ewma_arl",
    "ewma_chart",
    "moving_range_sigma",
    "parts_to_limit",
    "theil_sen_trend",
]

#: d2 for subgroups of n = 2: E[|X1 − X2|] / σ for independent normals (= 2/√π ≈ 1.1284).
#: Montgomery, Introduction to Statistical Quality Control, table of control-chart constants.
D2_N2 = 1.128


def _as_1d(x: ArrayLike) -> np.ndarray:
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1:
        raise ValueError(f"expected a one-dimensional series, got shape {a.shape}")
    return a


def _reset_mask(reset: ArrayLike | None, n: int) -> np.ndarray:
    if reset is None:
        return np.zeros(n, dtype=bool)
    r = np.asarray(reset, dtype=bool)
    if r.shape != (n,):
        raise ValueError(f"reset must have shape ({n},), got {r.shape}")
    return r


def _segments(reset: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) slices of the runs between resets (index 0 always starts a run)."""
    n = reset.size
    starts = np.flatnonzero(reset[1:]) + 1 if n > 1 else np.empty(0, dtype=np.intp)
    bounds = np.concatenate(([0], starts, [n])).astype(np.intp)
    return [(int(a), int(b)) for a, b in pairwise(bounds) if b > a]


def _first_index(mask: np.ndarray) -> int | None:
    idx = np.flatnonzero(mask)
    return int(idx[0]) if idx.size else None


def moving_range_sigma(x: ArrayLike, reset: ArrayLike | None = None) -> float:
    """In-control standard deviation from the average moving range: σ̂ = MR̄ / d2.

    MR_i = |x_i − x_{i−1}| for consecutive observations, d2 = 1.128 (subgroups of two).

    Parameters
    ----------
    x : array_like
        Individual observations in part order, any unit (e.g. CTWD [m]). NaNs are ignored: a
        moving range is used only where both neighbours are finite.
    reset : array_like of bool, optional
        True where a contact-tip change happened before that observation; the moving range
        that spans the change (a deliberate step, not common-cause variation) is dropped.

    Returns
    -------
    float
        σ̂ in the unit of ``x``; NaN when no moving range is available.

    Notes
    -----
    Montgomery, Introduction to Statistical Quality Control, control chart for individual
    measurements (from memory). Valid for an approximately normal, independent in-control
    series; the moving range is barely affected by a slow drift, which is why it, and not the
    overall standard deviation, is used to set drift limits.
    """
    a = _as_1d(x)
    if a.size < 2:
        return float("nan")
    mr = np.abs(np.diff(a))
    r = _reset_mask(reset, a.size)
    keep = np.isfinite(mr) & ~r[1:]
    if not keep.any():
        return float("nan")
    return float(mr[keep].mean() / D2_N2)


def ewma_chart(
    x: ArrayLike,
    target: float,
    sigma: float,
    lam: float,
    L: float,
    reset: ArrayLike | None = None,
) -> dict[str, np.ndarray | int | None]:
    """EWMA control chart with exact (time-varying) limits.

    z_i = λ·x_i + (1 − λ)·z_{i−1},  z_0 = target;
    limits = target ± L·σ·√( λ/(2 − λ) · (1 − (1 − λ)^(2i)) ),  i = observations since (re)start.

    Parameters
    ----------
    x : array_like
        Observations in part order [unit of x]; NaNs are skipped (see module notes).
    target : float
        In-control mean μ0 [unit of x].
    sigma : float
        In-control standard deviation of one observation [unit of x], e.g. from
        :func:`moving_range_sigma`.
    lam : float
        Smoothing weight λ, 0 < λ ≤ 1 [-]; 0.05-0.25 is the usual range for small shifts.
    L : float
        Limit width in standard deviations of z [-] (e.g. 2.814 with λ = 0.10 for an in-control
        ARL of about 500).
    reset : array_like of bool, optional
        Restart points (see module notes).

    Returns
    -------
    dict
        ``z``, ``ucl``, ``lcl`` (float arrays, unit of x), ``count`` (int array, i),
        ``signal`` (bool array, z outside the limits at a finite observation) and
        ``first_signal_index`` (int or None). The chart is not restarted after a signal.

    Notes
    -----
    Montgomery, Introduction to Statistical Quality Control, EWMA chart; Lucas and Saccucci
    (1990). The recursion is a first-order IIR filter and is evaluated with
    ``scipy.signal.lfilter`` per run between resets.
    """
    a = _as_1d(x)
    if not 0.0 < lam <= 1.0:
        raise ValueError(f"lam must be in (0, 1], got {lam}")
    if sigma <= 0 or not np.isfinite(sigma):
        raise ValueError(f"sigma must be a positive finite number, got {sigma}")
    r = _reset_mask(reset, a.size)
    finite = np.isfinite(a)
    z = np.empty_like(a)
    count = np.empty(a.size, dtype=np.intp)
    b_coef, a_coef = [lam], [1.0, -(1.0 - lam)]
    for start, stop in _segments(r):
        seg = a[start:stop]
        f = finite[start:stop]
        zf = signal.lfilter(b_coef, a_coef, seg[f], zi=[(1.0 - lam) * target])[0]
        c = np.cumsum(f)
        count[start:stop] = c
        # index by the running count: forward-fills over NaNs, target before the first value
        z[start:stop] = np.concatenate(([target], zf))[c]
    width = L * sigma * np.sqrt(lam / (2.0 - lam) * (1.0 - (1.0 - lam) ** (2 * count)))
    ucl = target + width
    lcl = target - width
    sig = finite & ((z > ucl) | (z < lcl))
    return {
        "z": z,
        "ucl": ucl,
        "lcl": lcl,
        "count": count,
        "signal": sig,
        "first_signal_index": _first_index(sig),
    }


def _lindley(y: np.ndarray, c0: np.ndarray | float = 0.0, axis: int = -1) -> np.ndarray:
    """C_t = max(0, C_{t−1} + y_t) for all t at once, C_0 = c0 ≥ 0.

    Closed form of the recursion: with S_t = c0 + Σ_{j≤t} y_j, C_t = S_t − min(0, min_{j≤t} S_j)
    (Lindley's recursion, solved by induction on t). Exact, and never negative because
    S_t − min(…, S_t) ≥ 0 in floating point too.
    """
    s = np.cumsum(y, axis=axis)
    c = np.asarray(c0, dtype=np.float64)
    s += np.expand_dims(c, axis) if c.ndim else c
    m = np.minimum(np.minimum.accumulate(s, axis=axis), 0.0)
    return s - m


def cusum_chart(
    x: ArrayLike,
    target: float,
    sigma: float,
    k: float = 0.5,
    h: float = 5.0,
    reset: ArrayLike | None = None,
) -> dict[str, np.ndarray | int | None]:
    """Two one-sided tabular CUSUMs, in units of σ.

    With y_i = (x_i − μ0)/σ:
    C⁺_i = max(0, y_i − k + C⁺_{i−1}),  C⁻_i = max(0, −k − y_i + C⁻_{i−1}),  C⁺_0 = C⁻_0 = 0,
    which is the data-unit form C⁺_i = max(0, x_i − (μ0 + kσ) + C⁺_{i−1}) divided by σ.
    A signal is raised where C⁺ > h (upward drift) or C⁻ > h (downward drift).

    Parameters
    ----------
    x : array_like
        Observations in part order [unit of x]; NaNs are skipped (see module notes).
    target : float
        In-control mean μ0 [unit of x].
    sigma : float
        In-control standard deviation of one observation [unit of x].
    k : float, optional
        Reference value (allowance) in σ units [-]; half the shift to detect fastest, 0.5
        by default (a 1σ shift).
    h : float, optional
        Decision interval in σ units [-]; 4 or 5 are the usual choices with k = 0.5.
    reset : array_like of bool, optional
        Restart points (see module notes).

    Returns
    -------
    dict
        ``upper`` (C⁺), ``lower`` (C⁻) as float arrays [σ units, ≥ 0], ``signal_upper``,
        ``signal_lower``, ``signal`` (bool arrays) and ``first_signal_index`` (int or None).
        The statistics are not reset after a signal, only at ``reset``.

    Notes
    -----
    Montgomery, Introduction to Statistical Quality Control, tabular (algorithmic) CUSUM
    (from memory). Evaluated without a Python loop through the closed form of the recursion
    (see ``_lindley``). Assumes independent, roughly normal observations.
    """
    a = _as_1d(x)
    if sigma <= 0 or not np.isfinite(sigma):
        raise ValueError(f"sigma must be a positive finite number, got {sigma}")
    r = _reset_mask(reset, a.size)
    finite = np.isfinite(a)
    y = (a - target) / sigma
    upper = np.empty_like(a)
    lower = np.empty_like(a)
    for start, stop in _segments(r):
        f = finite[start:stop]
        ys = y[start:stop][f]
        c = np.cumsum(f)
        upper[start:stop] = np.concatenate(([0.0], _lindley(ys - k)))[c]
        lower[start:stop] = np.concatenate(([0.0], _lindley(-ys - k)))[c]
    su = finite & (upper > h)
    sl = finite & (lower > h)
    sig = su | sl
    return {
        "upper": upper,
        "lower": lower,
        "signal_upper": su,
        "signal_lower": sl,
        "signal": sig,
        "first_signal_index": _first_index(sig),
    }


class ArlEstimate(NamedTuple):
    """Monte Carlo average run length: mean, its standard error, runs cut off at max_len."""

    arl: float
    se: float
    n_censored: int


def _simulate_run_lengths(step_block, state0, shift, n_runs, max_len, rng) -> ArlEstimate:
    """Run ``n_runs`` charts on N(shift, 1) data until each signals (or reaches max_len).

    ``step_block(state, block) -> (state_at_each_time (n, b, ...), signalled (n, b))`` advances
    the active runs over a block of b time steps at once; the block doubles as runs survive.
    """
    lengths = np.full(n_runs, max_len, dtype=np.int64)
    active = np.arange(n_runs)
    state = np.repeat(np.asarray(state0, dtype=np.float64)[None, ...], n_runs, axis=0)
    t, block = 0, 32
    while active.size and t < max_len:
        b = min(block, max_len - t)
        noise = rng.standard_normal((active.size, b)) + shift
        state_end, fired = step_block(state, noise)
        hit = fired.any(axis=1)
        first = np.argmax(fired, axis=1)
        lengths[active[hit]] = t + first[hit] + 1
        keep = ~hit
        active, state = active[keep], state_end[keep]
        t += b
        block = min(block * 2, 4096)
    n_cens = int(active.size)
    arl = float(lengths.mean())
    se = float(lengths.std(ddof=1) / np.sqrt(n_runs)) if n_runs > 1 else float("nan")
    return ArlEstimate(arl, se, n_cens)


def cusum_arl(
    k: float,
    h: float,
    shift: float,
    n_runs: int,
    max_len: int,
    rng: np.random.Generator,
) -> ArlEstimate:
    """Zero-state average run length of the two-sided tabular CUSUM, by Monte Carlo.

    Each run starts at C⁺ = C⁻ = 0 and sees independent N(shift, 1) observations (shift in σ
    units, applied from the first observation); its run length is the index (1-based) of the
    first observation with C⁺ > h or C⁻ > h.

    Parameters
    ----------
    k, h : float
        Reference value and decision interval [σ units].
    shift : float
        Mean shift [σ units]; 0 gives the in-control ARL.
    n_runs : int
        Number of simulated runs; the standard error falls as 1/√n_runs (for an in-control
        run-length distribution, roughly geometric, se ≈ ARL/√n_runs).
    max_len : int
        Runs still silent after ``max_len`` observations are counted as ``max_len`` (censored;
        the count is returned), which biases the ARL low if many are censored.
    rng : numpy.random.Generator
        Source of the normal variates.

    Returns
    -------
    ArlEstimate
        (arl, se, n_censored).

    Notes
    -----
    Vectorised across runs and over blocks of time steps (closed form of the CUSUM
    recursion). Montgomery's ARL table for the tabular CUSUM with k = 1/2 refers to this
    two-sided scheme (from memory).
    """

    def step(state: np.ndarray, noise: np.ndarray):
        up = _lindley(noise - k, state[:, 0], axis=1)
        lo = _lindley(-noise - k, state[:, 1], axis=1)
        fired = (up > h) | (lo > h)
        return np.stack([up[:, -1], lo[:, -1]], axis=1), fired

    return _simulate_run_lengths(step, [0.0, 0.0], shift, n_runs, max_len, rng)


def ewma_arl(
    lam: float,
    L: float,
    shift: float,
    n_runs: int,
    max_len: int,
    rng: np.random.Generator,
) -> ArlEstimate:
    """Zero-state average run length of the two-sided EWMA chart, by Monte Carlo.

    Uses the **asymptotic (steady-state) limits** ±L·√(λ/(2 − λ)) (σ = 1, target 0), as the
    published ARL tables do (Lucas and Saccucci 1990), not the exact time-varying limits of
    :func:`ewma_chart`, which signal a little earlier at the start. Each run starts at z_0 = 0
    and sees N(shift, 1) observations from the first one.

    Parameters
    ----------
    lam : float
        Smoothing weight λ, 0 < λ ≤ 1 [-].
    L : float
        Limit width [standard deviations of z, asymptotic].
    shift : float
        Mean shift [σ units]; 0 gives the in-control ARL.
    n_runs, max_len, rng
        As in :func:`cusum_arl`.

    Returns
    -------
    ArlEstimate
        (arl, se, n_censored).

    Notes
    -----
    Vectorised across runs; each block of time steps is one ``scipy.signal.lfilter`` call along
    the time axis with the carried-over state as initial condition.
    """
    width = L * np.sqrt(lam / (2.0 - lam))
    b_coef, a_coef = [lam], [1.0, -(1.0 - lam)]

    def step(state: np.ndarray, noise: np.ndarray):
        z, _ = signal.lfilter(b_coef, a_coef, noise, axis=1, zi=(1.0 - lam) * state)
        fired = np.abs(z) > width
        return z[:, -1:], fired

    return _simulate_run_lengths(step, [0.0], shift, n_runs, max_len, rng)


def theil_sen_trend(x: ArrayLike, y: ArrayLike, alpha: float = 0.05) -> dict[str, float | bool]:
    """Robust linear trend y ≈ intercept + slope·x, by the Theil–Sen estimator.

    Parameters
    ----------
    x : array_like
        Abscissa, e.g. part index [-] or time [s].
    y : array_like
        Values, e.g. penetration [m]. Pairs with a non-finite x or y are dropped.
    alpha : float, optional
        1 − confidence level of the slope interval (0.05 → 95 %).

    Returns
    -------
    dict
        ``slope`` [unit y / unit x], ``intercept`` [unit y], ``slope_low``, ``slope_high``
        (confidence bounds of the slope) and ``significant`` (the interval excludes 0).
        All NaN / False with fewer than 3 usable points.

    Notes
    -----
    Median of pairwise slopes (Theil 1950; Sen 1968), via ``scipy.stats.theilslopes``, whose
    slope interval comes from the distribution of Kendall's tau. Robust to up to about 29 %
    gross outliers; assumes independent residuals (serial correlation makes the interval too
    narrow).
    """
    xa = _as_1d(x)
    ya = _as_1d(y)
    if xa.shape != ya.shape:
        raise ValueError(f"x and y must have the same length, got {xa.size} and {ya.size}")
    ok = np.isfinite(xa) & np.isfinite(ya)
    if ok.sum() < 3 or np.ptp(xa[ok]) == 0:
        nan = float("nan")
        return {"slope": nan, "intercept": nan, "slope_low": nan, "slope_high": nan, "significant": False}
    res = stats.theilslopes(ya[ok], xa[ok], alpha=1.0 - alpha)
    low, high = float(res.low_slope), float(res.high_slope)
    return {
        "slope": float(res.slope),
        "intercept": float(res.intercept),
        "slope_low": low,
        "slope_high": high,
        "significant": bool(low > 0.0 or high < 0.0),
    }


def parts_to_limit(
    x_index: ArrayLike, penetration: ArrayLike, limit: float, alpha: float = 0.05
) -> dict[str, float]:
    """Screening forecast: parts left before a falling penetration trend reaches a minimum.

    Fits penetration ≈ a + b·n (Theil–Sen, :func:`theil_sen_trend`) against part index n, takes
    the fitted value at the last index n_last, ŷ = a + b·n_last, and extrapolates the line:

        parts = (ŷ − limit) / (−b)     for b < 0 and ŷ > limit.

    This is a **linear extrapolation screening forecast**, not a prediction of weld quality:
    drift from tip wear is rarely linear for long, and the forecast says nothing about any
    single weld. Acceptance stays with the applicable code, the WPS and inspection.

    Parameters
    ----------
    x_index : array_like
        Part index (or serial order) of each observation [-].
    penetration : array_like
        Estimated penetration of each part [m].
    limit : float
        Minimum acceptable penetration [m] (a lower limit).
    alpha : float, optional
        1 − confidence level of the slope interval.

    Returns
    -------
    dict
        ``parts`` from the point slope, ``parts_low`` from the steeper bound (fewer parts)
        and ``parts_high`` from the shallower bound, in parts after the last index
        (fractional). All 0 if the fitted line is already at or below the limit at the last
        index; NaN if the trend is not significant; inf if it is significant but rising
        (pointing away from the limit).
    """
    xa = _as_1d(x_index)
    fit = theil_sen_trend(xa, penetration, alpha=alpha)
    nan, inf = float("nan"), float("inf")
    if not np.isfinite(fit["slope"]):
        return {"parts": nan, "parts_low": nan, "parts_high": nan}
    n_last = float(np.nanmax(xa))
    margin = fit["intercept"] + fit["slope"] * n_last - limit
    if margin <= 0.0:
        return {"parts": 0.0, "parts_low": 0.0, "parts_high": 0.0}
    if not fit["significant"]:
        return {"parts": nan, "parts_low": nan, "parts_high": nan}

    def ahead(slope: float) -> float:
        return margin / -slope if slope < 0.0 else inf

    return {
        "parts": ahead(fit["slope"]),
        "parts_low": ahead(fit["slope_low"]),
        "parts_high": ahead(fit["slope_high"]),
    }

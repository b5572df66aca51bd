"""The equations of nstress, written once for the simulator and the model.

Every function here is pure and works on NumPy arrays; the functions that
the PyMC model also needs take ``xp``, an array namespace (``numpy`` or
``pytensor.tensor``), so that the forward simulator and the model evaluate
the *same* expressions. Nothing here reads files or knows about tables.

Time is in days, δ values in ‰ (δ15N vs AIR, δ13C vs VPDB).
"""

from __future__ import annotations

from types import ModuleType
from typing import Any

import numpy as np

from nstress._chem_equations import *  # noqa: F401,F403  (δ, C:N, lipid, scale equations)

LN2 = float(np.log(2.0))

Array = Any


# --------------------------------------------------------------------------
# array-namespace shims (numpy vs pytensor.tensor)
# --------------------------------------------------------------------------
def _where(xp: ModuleType, cond: Array, a: Array, b: Array) -> Array:
    return np.where(cond, a, b) if xp is np else xp.switch(cond, a, b)


def _softplus(xp: ModuleType, x: Array) -> Array:
    return np.logaddexp(0.0, x) if xp is np else xp.softplus(x)


# --------------------------------------------------------------------------
# turnover: the one-compartment incorporation model
# --------------------------------------------------------------------------
def half_life(rate_per_day: Array) -> Array:
    """Half-life t½ = ln 2 / λ (days) of a one-compartment pool.

    Tieszen et al. 1983; Martínez del Rio et al. 2009.
    """
    return LN2 / np.asarray(rate_per_day)


def incorporation_curve(t_days: Array, d0: Array, d_inf: Array, rate_per_day: Array) -> Array:
    """One-compartment incorporation after a step change of diet at t = 0.

    δ(t) = δ∞ + (δ0 − δ∞)·exp(−λ t) (Tieszen et al. 1983).

    Parameters
    ----------
    t_days
        Time since the step (days, ≥ 0).
    d0, d_inf
        Tissue value before the step and at the new equilibrium (‰).
    rate_per_day
        Incorporation rate λ (1/d).

    Returns
    -------
    numpy.ndarray
        Tissue value at ``t_days`` (‰).
    """
    t = np.asarray(t_days, dtype=float)
    return d_inf + (d0 - d_inf) * np.exp(-np.asarray(rate_per_day) * t)


def blood_weights(
    t_obs: Array, bin_lo: Array, bin_width: float, rate: Array, xp: ModuleType = np
) -> Array:
    """Weights of a blood sample drawn at ``t_obs`` on the bins of the pool.

    A one-compartment tissue with rate λ, fed by a pool that is constant
    within each bin, has at time t the value Σ_u w_u P_u with
    w_u = ∫_{bin u, s ≤ t} λ e^{−λ (t − s)} ds. The history before the grid
    (weight e^{−λ (t − t_0)}) is given to bin 0, i.e. the pool is taken as
    constant before the grid starts. The weights sum to 1, are continuous in
    t, and reproduce δ∞ + (δ0 − δ∞) e^{−λ t} after a step (Tieszen et al.
    1983).

    Parameters
    ----------
    t_obs
        Draw time (days since the grid origin), shape ``(..., 1)`` to
        broadcast against ``bin_lo``.
    bin_lo
        Left edges of the bins (days since origin), shape ``(T,)``.
    bin_width
        Bin width Δ (days).
    rate
        Incorporation rate λ (1/d), broadcastable to the output.
    xp
        Array namespace.

    Returns
    -------
    array
        Weights of shape ``broadcast(t_obs, bin_lo)``, summing to 1 over bins.
    """
    a = xp.clip(t_obs - bin_lo - bin_width, 0.0, np.inf)  # to the bin's right edge
    b = xp.clip(t_obs - bin_lo, 0.0, np.inf)  # to the bin's left edge
    w = xp.exp(-rate * a) - xp.exp(-rate * b)
    first = (np.arange(np.shape(bin_lo)[-1]) == 0).astype(float)
    return w + first * xp.exp(-rate * (t_obs - bin_lo[0]))


def exponential_filter_matrix(
    n_bins: int, bin_width: float, rate: Array, xp: ModuleType = np
) -> Array:
    """Lower-triangular matrix F with F[t, u] = q^(t−u) for u ≤ t, q = e^(−λΔ).

    ``F @ P`` is the exponentially filtered pool S[t] = Σ_{u≤t} q^(t−u) P[u]:
    the one-compartment recursion S[t] = q·S[t−1] + P[t] written as one matrix
    product (no scan).
    """
    lag = np.subtract.outer(np.arange(n_bins), np.arange(n_bins)).astype(float)
    lower = lag >= 0
    return xp.exp(-rate * bin_width * np.where(lower, lag, 0.0)) * lower


def blood_from_filtered(
    s_prev: Array,
    p_here: Array,
    p_first: Array,
    phi: Array,
    t_obs: Array,
    rate: Array,
    bin_width: float,
    has_prev: np.ndarray,
    xp: ModuleType = np,
) -> Array:
    """Blood value from the filtered pool: :func:`blood_weights` in closed form.

    With the draw in bin b at offset φ into it::

        Y = e^(−λφ)(1 − q)·S[b − 1] + (1 − e^(−λφ))·P[b] + e^(−λt)·P[0]

    where S is the filtered pool of :func:`exponential_filter_matrix`; the
    weights are those of :func:`blood_weights` (tested to agree).

    Parameters
    ----------
    s_prev, p_here, p_first
        ``(..., c)`` S[b − 1], P[b] and P[0] for each observation.
    phi, t_obs, rate
        ``(...)`` offset into the bin, draw time (days), λ (1/d).
    bin_width
        Δ (days).
    has_prev
        ``(...)`` bool, b ≥ 1.
    xp
        Array namespace.
    """
    e_phi = xp.exp(-rate * phi)
    one_minus_q = 1.0 - xp.exp(-rate * bin_width)
    w_prev = e_phi * one_minus_q * has_prev
    return (
        w_prev[..., None] * s_prev
        + (1.0 - e_phi)[..., None] * p_here
        + xp.exp(-rate * t_obs)[..., None] * p_first
    )


def interpolate_knots(
    t: Array, spacing: float, values: Array, n_knots: int, xp: ModuleType = np
) -> Array:
    """Piecewise-linear interpolation of knot values at arbitrary times.

    The same interpolation as :func:`knot_basis` (knots at 0, s, 2s, ...),
    by gathering the two neighbouring knots; held constant outside.

    Parameters
    ----------
    t
        ``(I, ...)`` times (days since origin).
    spacing
        Knot spacing s (days).
    values
        ``(I, K, 2)`` values at the knots.
    n_knots
        K.
    xp
        Array namespace.

    Returns
    -------
    array
        ``(I, ..., 2)``.
    """
    u = xp.clip(t / spacing, 0.0, n_knots - 1.0)
    j = xp.clip(xp.floor(u), 0.0, n_knots - 2.0)
    frac = u - j
    ji = j.astype("int64")
    ii = xp.arange(values.shape[0]).reshape((-1,) + (1,) * (t.ndim - 1))
    lo = values[ii, ji]
    hi = values[ii, ji + 1]
    return lo + frac[..., None] * (hi - lo)


def window_points(start: Array, end: Array, n_points: int) -> Array:
    """Midpoints of ``n_points`` equal parts of ``[start, end]`` (last axis added)."""
    f = (np.arange(n_points) + 0.5) / n_points
    return start[..., None] + (end - start)[..., None] * f


# --------------------------------------------------------------------------
# catabolic enrichment of the body pool
# --------------------------------------------------------------------------
def enrichment(
    t: Array, onset: Array, duration: Array, kappa: Array, tau_rec: Array, xp: ModuleType = np
) -> Array:
    """Catabolic δ15N enrichment E(t) of the body pool (‰), closed form.

    Continuous limit of the recursion E(t) = E(t−Δ)·e^(−Δ/τ) + κ·s(t)·Δ with
    s = 1 during the episode ``[onset, onset + duration]``::

        u = max(t − onset, 0); a = min(u, duration)
        E = κ τ · exp(−(u − a)/τ) · (1 − exp(−a/τ))

    It rises at about κ ‰/d while catabolic, then relaxes with recovery
    time τ. No overflow: both exponents are ≤ 0.

    Parameters
    ----------
    t
        Times (days since origin).
    onset, duration
        Episode start and length (days).
    kappa
        Enrichment rate while catabolic (‰/d), ≥ 0.
    tau_rec
        Recovery (relaxation) time (days), > 0.
    xp
        Array namespace.

    Returns
    -------
    array
        E(t) ≥ 0 (‰).
    """
    u = xp.clip(t - onset, 0.0, np.inf)
    a = xp.minimum(u, duration)
    return kappa * tau_rec * xp.exp(-(u - a) / tau_rec) * (1.0 - xp.exp(-a / tau_rec))


EXP_CLIP = 300.0
"""Bound on the exponents of :func:`_decay` (e^300 is far from float64 overflow)."""


def _decay(rate: Array, t: Array, onset: Array, ref: Array, xp: ModuleType = np) -> Array:
    """e^(−rate·(t − onset)) as the product e^(−rate·(t − ref))·e^(rate·(onset − ref)).

    The two factors broadcast separately, so that for N times and M candidate
    onsets the exponentials are computed on N and M values, not on N × M.
    With ``ref`` near the middle of the times the exponents stay small; they
    are clipped at ±:data:`EXP_CLIP` so that the product is always finite.
    """
    a = xp.clip(-rate * (t - ref), -EXP_CLIP, EXP_CLIP)
    b = xp.clip(rate * (onset - ref), -EXP_CLIP, EXP_CLIP)
    return xp.exp(a) * xp.exp(b)


def enrichment_integral(
    v: Array, duration: Array, kappa: Array, tau_rec: Array, xp: ModuleType = np
) -> Array:
    """∫_0^v E du: the enrichment of :func:`enrichment` integrated from its onset.

    With w = min(max(v, 0), d), r = max(v − d, 0) and A = κτ(1 − e^(−d/τ))
    (the enrichment at the episode's end)::

        F(v) = κτ·(w − τ(1 − e^(−w/τ))) + A·τ·(1 − e^(−r/τ))

    Parameters
    ----------
    v
        Time since the onset (days; negative before it).
    duration, kappa, tau_rec
        Episode length (d), rate (‰/d) and recovery time (d).
    xp
        Array namespace.
    """
    u = xp.clip(v, 0.0, np.inf)
    w = xp.minimum(u, duration)
    r = u - w
    a_end = kappa * tau_rec * (-xp.expm1(-duration / tau_rec))
    return kappa * tau_rec * (w + tau_rec * xp.expm1(-w / tau_rec)) + a_end * tau_rec * (
        -xp.expm1(-r / tau_rec)
    )


def _integral_separable(
    t: Array, onset: Array, duration: Array, kappa: Array, tau_rec: Array, ref: Array, xp
) -> Array:
    """:func:`enrichment_integral` at v = t − onset, with one separable exponential."""
    v = t - onset
    e_v = _decay(1.0 / tau_rec, t, onset, ref, xp=xp)  # e^(−v/τ)
    kt = kappa * tau_rec
    e_d = xp.exp(-duration / tau_rec)
    a_end = kt * (1.0 - e_d)
    during = kt * (v - tau_rec + tau_rec * e_v)
    f_end = kt * (duration - tau_rec + tau_rec * e_d)
    after = f_end + a_end * tau_rec - a_end * tau_rec * e_v / e_d
    out = _where(xp, v <= duration, during, after)
    return _where(xp, v <= 0.0, 0.0, out)


def enrichment_window_mean(
    t_lo: Array,
    t_hi: Array,
    onset: Array,
    duration: Array,
    kappa: Array,
    tau_rec: Array,
    ref: Array = 0.0,
    xp: ModuleType = np,
) -> Array:
    """Mean of the enrichment E over the window ``[t_lo, t_hi]`` (a keratin segment), exact.

    ``(F(t_hi − onset) − F(t_lo − onset)) / (t_hi − t_lo)`` with F from
    :func:`enrichment_integral`, written so that the only exponential of
    time since onset, e^(−v/τ), separates into a factor of the window and a
    factor of the onset (many candidate onsets cost no extra exponentials).

    Parameters
    ----------
    t_lo, t_hi
        Window (days since origin), ``t_hi > t_lo``.
    onset, duration, kappa, tau_rec
        Episode (see :func:`enrichment`); broadcast against the window.
    ref
        A time near the middle of the windows and onsets (days); keeps the
        separated exponents small (|t − ref|/τ ≤ 300).
    xp
        Array namespace.
    """
    width = xp.maximum(t_hi - t_lo, 1e-9)
    hi = _integral_separable(t_hi, onset, duration, kappa, tau_rec, ref, xp)
    lo = _integral_separable(t_lo, onset, duration, kappa, tau_rec, ref, xp)
    return (hi - lo) / width


MIN_RATE_GAP = 1e-6
"""|λ − 1/τ| below this (1/d) is moved to it: the removable singularity of
:func:`enrichment_incorporated` (a change of the response far below 1e-4 ‰)."""


def enrichment_incorporated(
    t: Array,
    onset: Array,
    duration: Array,
    kappa: Array,
    tau_rec: Array,
    rate: Array,
    ref: Array = 0.0,
    xp: ModuleType = np,
) -> Array:
    """Return the enrichment seen by a one-compartment tissue, ∫ λe^(−λ(t − s)) E(s) ds.

    The tissue obeys dY/dt = λ(E − Y) with Y = 0 before the onset (Tieszen
    et al. 1983; Martínez del Rio et al. 2009), driven by the closed-form E of
    :func:`enrichment`. With v = t − onset, α = 1/τ, x = λ − α and
    A = κτ(1 − e^(−αd))::

        0 < v ≤ d:  Y = κτ·[1 + (α/x)·e^(−λv) − (λ/x)·e^(−αv)]
        v > d:      Y = C1·e^(−λv) + C2·e^(−αv)
                    C1 = κτ(e^(λd) − 1) − κτλ(e^(xd) − 1)/x − Aλe^(λd)/x
                    C2 = κτλ(e^(αd) − 1)/x

    and 0 before the onset. The exponentials of v separate into a factor of
    the sampling time and one of the onset (see :func:`_decay`), so many
    candidate onsets cost no extra exponentials per sample.

    Parameters
    ----------
    t
        Sampling time (days since origin).
    onset, duration, kappa, tau_rec
        Episode (see :func:`enrichment`).
    rate
        Incorporation rate λ of the tissue (1/d).
    ref
        A time near the middle of the samples and onsets (days), see
        :func:`_decay`.
    xp
        Array namespace.
    """
    alpha0 = 1.0 / tau_rec
    x0 = rate - alpha0
    near = xp.abs(x0) < MIN_RATE_GAP
    x = _where(xp, near, MIN_RATE_GAP, x0)
    alpha = rate - x
    v = t - onset
    kt = kappa / alpha
    e_lv = _decay(rate, t, onset, ref, xp=xp)
    e_av = _decay(alpha, t, onset, ref, xp=xp)
    during = kt * (1.0 + (alpha / x) * e_lv - (rate / x) * e_av)
    ld = xp.clip(rate * duration, 0.0, EXP_CLIP)
    ad = xp.clip(alpha * duration, 0.0, EXP_CLIP)
    xd = xp.clip(x * duration, -EXP_CLIP, EXP_CLIP)
    a_end = kt * (-xp.expm1(-ad))
    c1 = kt * xp.expm1(ld) - kt * rate * xp.expm1(xd) / x - a_end * rate * xp.exp(ld) / x
    c2 = kt * rate * xp.expm1(ad) / x
    after = c1 * e_lv + c2 * e_av
    out = _where(xp, v <= duration, during, after)
    return _where(xp, v <= 0.0, 0.0, out)


def ramp(t: Array, start: Array, width: float, xp: ModuleType = np) -> Array:
    """Return a diet shift's shape: 0 before ``start``, rising to 1 over ``width`` days."""
    return xp.clip((t - start) / width, 0.0, 1.0)


def _ramp_integral(v: Array, width: float, xp: ModuleType = np) -> Array:
    """∫_0^v ramp: 0 (v ≤ 0), v²/(2R) (0 < v ≤ R), v − R/2 (v > R)."""
    u = xp.clip(v, 0.0, np.inf)
    w = xp.minimum(u, width)
    return w * w / (2.0 * width) + (u - w)


def ramp_window_mean(
    t_lo: Array, t_hi: Array, start: Array, width: float, xp: ModuleType = np
) -> Array:
    """Mean of :func:`ramp` over the window ``[t_lo, t_hi]`` (a keratin segment), exact."""
    span = xp.maximum(t_hi - t_lo, 1e-9)
    return (
        _ramp_integral(t_hi - start, width, xp=xp) - _ramp_integral(t_lo - start, width, xp=xp)
    ) / span


def ramp_incorporated(
    t: Array, start: Array, width: float, rate: Array, ref: Array = 0.0, xp: ModuleType = np
) -> Array:
    """Return a one-compartment tissue's response to :func:`ramp`, ∫ λe^(−λ(t − s)) ramp(s) ds.

    With v = t − start and R the ramp's width (Tieszen et al. 1983 kernel)::

        0 < v ≤ R:  Y = (v − (1 − e^(−λv))/λ) / R
        v > R:      Y = 1 − e^(−λv)(e^(λR) − 1)/(λR)

    and 0 before the start; e^(−λv) separates as in :func:`_decay`.
    """
    v = t - start
    e_lv = _decay(rate, t, start, ref, xp=xp)
    rising = (v - (1.0 - e_lv) / rate) / width
    lr = xp.clip(rate * width, 0.0, EXP_CLIP)
    done = 1.0 - e_lv * xp.expm1(lr) / (rate * width)
    out = _where(xp, v <= width, rising, done)
    return _where(xp, v <= 0.0, 0.0, out)


def episode_overlap(bin_lo: Array, bin_width: float, onset: Array, duration: Array, xp=np) -> Array:
    """Fraction of each bin that lies inside the episode ``[onset, onset+duration]``.

    This is P(bin inside the episode | episode, onset, duration), used for
    P(catabolic) per bin.
    """
    lo = xp.maximum(bin_lo, onset)
    hi = xp.minimum(bin_lo + bin_width, onset + duration)
    return xp.clip(hi - lo, 0.0, bin_width) / bin_width


# --------------------------------------------------------------------------
# diet path on coarse knots
# --------------------------------------------------------------------------
def knot_basis(t: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Linear-interpolation (hat) basis of knots evaluated at times ``t``.

    Parameters
    ----------
    t
        Evaluation times, shape ``(T,)``.
    knots
        Increasing knot times, shape ``(K,)``.

    Returns
    -------
    numpy.ndarray
        ``B`` of shape ``(T, K)`` with rows summing to 1; a path with knot
        values ``v`` is ``B @ v``. Outside the knots it is held constant.
    """
    t = np.asarray(t, dtype=float)
    k = np.asarray(knots, dtype=float)
    B = np.zeros((t.size, k.size))
    if k.size == 1:
        B[:, 0] = 1.0
        return B
    tc = np.clip(t, k[0], k[-1])
    j = np.clip(np.searchsorted(k, tc, side="right") - 1, 0, k.size - 2)
    frac = (tc - k[j]) / (k[j + 1] - k[j])
    rows = np.arange(t.size)
    B[rows, j] = 1.0 - frac
    B[rows, j + 1] += frac
    return B


def cumulative_matrix(n: int) -> np.ndarray:
    """Lower-triangular matrix of ones: ``L @ x`` is the cumulative sum of x.

    A random walk is written as this matrix product, never as a scan.
    """
    return np.tril(np.ones((n, n)))


def body_pool(diet: Array, enrich: Array, gamma: Array, xp: ModuleType = np) -> Array:
    """Body pool (δ15N, δ13C) = diet + E·(1, γ).

    Parameters
    ----------
    diet
        Diet signal, shape ``(..., 2)`` with isotope order (δ15N, δ13C).
    enrich
        Catabolic enrichment E (‰ δ15N), shape ``(...)``.
    gamma
        δ13C change per ‰ of catabolic δ15N (dimensionless), broadcastable.
    xp
        Array namespace.
    """
    direction = xp.stack([xp.ones_like(gamma * 1.0), gamma * 1.0], axis=-1)
    return diet + enrich[..., None] * direction


# --------------------------------------------------------------------------
# nitrogen balance: the Rayleigh relation
# --------------------------------------------------------------------------
def rayleigh_enrichment(f_remaining: Array, epsilon: Array, d0: Array | None = None) -> Array:
    """δ15N enrichment of the remaining pool after losing a fraction of its N.

    Rayleigh distillation: (1000 + δ)/(1000 + δ0) = f^(α − 1) with
    ε = 1000(α − 1) (‰, < 0 for light N lost). With ``d0`` the exact form is
    used, else the approximation δ − δ0 ≈ ε·ln f (Mariotti et al. 1981).

    Parameters
    ----------
    f_remaining
        Fraction of body N remaining, in (0, 1].
    epsilon
        Fractionation of N loss ε (‰), e.g. about −3.8 ‰ (Lee et al. 2012).
    d0
        Initial δ15N of the pool (‰), for the exact form.

    Returns
    -------
    numpy.ndarray
        Enrichment δ − δ0 (‰).
    """
    f = np.asarray(f_remaining, dtype=float)
    eps = np.asarray(epsilon, dtype=float)
    if d0 is None:
        return eps * np.log(f)
    return (1000.0 + np.asarray(d0)) * (f ** (eps / 1000.0) - 1.0)


def rayleigh_fraction_remaining(enrich: Array, epsilon: Array, d0: Array | None = None) -> Array:
    """Invert :func:`rayleigh_enrichment`: fraction f of body N remaining.

    Approximate form f = exp(E/ε); exact form
    f = ((1000 + δ0 + E)/(1000 + δ0))^(1000/ε). Body-N loss is ``1 − f``.
    Negative enrichment is treated as 0 (no loss).
    """
    e = np.clip(np.asarray(enrich, dtype=float), 0.0, None)
    eps = np.asarray(epsilon, dtype=float)
    if d0 is None:
        return np.exp(e / eps)
    d0 = np.asarray(d0, dtype=float)
    return ((1000.0 + d0 + e) / (1000.0 + d0)) ** (1000.0 / eps)


def anchored_walk_matrix(n_knots: int, anchor: np.ndarray) -> np.ndarray:
    """Matrices A with knot values V = level + A @ z for a walk anchored at knot ``anchor``.

    The walk is 0 at the anchor knot (chosen inside the data, so that the
    level is identified by the data rather than by the far end of the walk),
    cumulative sums of the increments after it and minus the cumulative sums
    before it: for k > a, V_k − V_a = Σ_{a≤j<k} z_j; for k < a,
    V_k − V_a = −Σ_{k≤j<a} z_j. A random walk as one matrix product.

    Parameters
    ----------
    n_knots
        K.
    anchor
        ``(I,)`` anchor knot per individual.

    Returns
    -------
    numpy.ndarray
        ``(I, K, K − 1)``.
    """
    a = np.asarray(anchor, dtype=int)[:, None, None]
    k = np.arange(n_knots)[None, :, None]
    j = np.arange(n_knots - 1)[None, None, :]
    after = (k > a) & (j >= a) & (j < k)
    before = (k < a) & (j >= k) & (j < a)
    return after.astype(float) - before.astype(float)


def walk_values(baseline: Array, steps: Array, walk: np.ndarray, xp: ModuleType = np) -> Array:
    """Diet signal at the knots: a level plus a Gaussian random walk, V = b + A·z.

    Between knots the diet is piecewise linear (:func:`interpolate_knots`,
    the same as the hat basis :func:`knot_basis`).

    Parameters
    ----------
    baseline
        ``(..., I, 2)`` level b at the anchor knot (‰).
    steps
        ``(..., I, K − 1, 2)`` increments z between consecutive knots (‰).
    walk
        ``(I, K, K − 1)`` matrices A (:func:`anchored_walk_matrix`).
    xp
        Array namespace.

    Returns
    -------
    array
        Knot values ``(..., I, K, 2)``.
    """
    if xp is np:
        return baseline[..., None, :] + np.einsum("ikj,...ijc->...ikc", walk, steps)
    return baseline[:, None, :] + (walk[..., None] * steps[:, None, :, :]).sum(axis=2)


def walk_basis(t: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Matrix M (``(T, K−1)``) with ``M @ z`` = the knot random walk at times ``t``.

    M = B·L[:, 1:] with B the hat basis (:func:`knot_basis`) and L the
    cumulative-sum matrix (:func:`cumulative_matrix`); the walk is 0 at the
    first knot.
    """
    B = knot_basis(t, knots)
    return B @ cumulative_matrix(len(knots))[:, 1:]


# --------------------------------------------------------------------------
# compound-specific amino acids: trophic position from glutamic acid and phenylalanine
# --------------------------------------------------------------------------
def trophic_position_glu_phe(
    d15n_glu: Array,
    d15n_phe: Array,
    beta: Array,
    tdf: Array,
    sd_glu: Array = 0.0,
    sd_phe: Array = 0.0,
    sd_beta: Array = 0.0,
    sd_tdf: Array = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Trophic position from δ15N of glutamic acid and phenylalanine, with its SD.

    TP = (δ15N_Glu − δ15N_Phe − β) / TDF + 1 (Chikaraishi et al. 2009,
    Limnol. Oceanogr. Methods 7:740), with β the Glu − Phe difference of the
    food web's primary producers and TDF the trophic discrimination of
    Glu − Phe per trophic level.

    The SD is propagated to first order (delta method), the four inputs
    independent: with d = δ15N_Glu − δ15N_Phe − β,

        Var(TP) = (sd_glu² + sd_phe² + sd_beta²) / TDF² + d² · sd_tdf² / TDF⁴.

    Parameters
    ----------
    d15n_glu, d15n_phe
        δ15N of glutamic acid and phenylalanine (‰ vs AIR).
    beta
        β (‰).
    tdf
        TDF of Glu − Phe (‰ per trophic level, > 0).
    sd_glu, sd_phe
        Analytical SDs of the two amino acids (‰).
    sd_beta, sd_tdf
        SDs of β and TDF (‰).

    Returns
    -------
    tuple of numpy.ndarray
        ``(tp, sd)``, broadcast over the inputs (NaN where an input is NaN).
    """
    glu, phe = np.asarray(d15n_glu, float), np.asarray(d15n_phe, float)
    beta, tdf = np.asarray(beta, float), np.asarray(tdf, float)
    d = glu - phe - beta
    tp = d / tdf + 1.0
    analytical = np.square(sd_glu) + np.square(sd_phe) + np.square(sd_beta)
    var = analytical / tdf**2 + d**2 * np.square(sd_tdf) / tdf**4
    return tp, np.sqrt(var)

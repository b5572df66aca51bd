"""Pure chemistry equations of the preparation layer (to be merged into ``nstress.equations``).

Plain, vectorised numpy functions of arrays: no tables, no ledger, no
configuration. Each names its published source. δ values are in ‰
(δ13C vs VPDB, δ15N vs AIR); C:N is the atomic (molar) ratio unless a
function says otherwise.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

M_C = 12.011
"""Standard atomic weight of carbon (g/mol) used for atomic C:N."""

M_N = 14.007
"""Standard atomic weight of nitrogen (g/mol) used for atomic C:N."""

R_AIR_15N = 1.0 / 272.0
"""n(15N)/n(14N) of atmospheric N2 as recommended by IUPAC (n(14N)/n(15N) = 272, CIAAW 1991)."""

R_VPDB_13C = 0.0111802
"""n(13C)/n(12C) of VPDB, 0.0111802 (from memory; not verified against the source)."""

FloatArray = NDArray[np.float64]


def delta_from_ratio(ratio: ArrayLike, ratio_standard: ArrayLike) -> FloatArray:
    """Return the isotope delta in ‰ from an isotope-amount ratio.

    δ = R_sample / R_standard − 1, expressed in ‰ (× 1000).

    Parameters
    ----------
    ratio
        Isotope-amount ratio of the sample (e.g. n(13C)/n(12C)).
    ratio_standard
        The same ratio of the scale's standard (VPDB for C, AIR for N).

    Returns
    -------
    numpy.ndarray
        δ in ‰.

    Notes
    -----
    Definition of the delta value: Coplen 2011, Rapid Commun. Mass Spectrom.
    25:2538.
    """
    r = np.asarray(ratio, dtype=float)
    rs = np.asarray(ratio_standard, dtype=float)
    return 1000.0 * (r / rs - 1.0)


def ratio_from_delta(delta: ArrayLike, ratio_standard: ArrayLike) -> FloatArray:
    """Return the isotope-amount ratio from a delta in ‰ (inverse of :func:`delta_from_ratio`).

    R_sample = R_standard · (1 + δ/1000).

    Parameters
    ----------
    delta
        δ in ‰.
    ratio_standard
        Ratio of the scale's standard.

    Returns
    -------
    numpy.ndarray
        Isotope-amount ratio of the sample.

    Notes
    -----
    Coplen 2011, Rapid Commun. Mass Spectrom. 25:2538.
    """
    d = np.asarray(delta, dtype=float)
    rs = np.asarray(ratio_standard, dtype=float)
    return rs * (1.0 + d / 1000.0)


def cn_atomic(pct_C: ArrayLike, pct_N: ArrayLike) -> FloatArray:
    """Return the atomic C:N ratio from mass percentages of C and N.

    C:N = (%C / 12.011) / (%N / 14.007).

    Parameters
    ----------
    pct_C, pct_N
        Mass percentages (or any common mass unit) of carbon and nitrogen.

    Returns
    -------
    numpy.ndarray
        Atomic (molar) C:N; NaN where %N is not positive or an input is NaN.

    Notes
    -----
    Conversion of mass to amount with the standard atomic weights; the
    atomic C:N is the basis of the collagen quality range 2.9-3.6
    (DeNiro 1985, Nature 317:806).
    """
    c = np.asarray(pct_C, dtype=float)
    n = np.asarray(pct_N, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (c / M_C) / (n / M_N)
    return np.where(n > 0, out, np.nan)


def cn_mass_from_atomic(cn: ArrayLike) -> FloatArray:
    """Return the mass C:N (%C/%N) from the atomic C:N.

    C:N_mass = C:N_atomic · 12.011 / 14.007.

    Parameters
    ----------
    cn
        Atomic C:N.

    Returns
    -------
    numpy.ndarray
        Mass C:N.

    Notes
    -----
    Inverse of :func:`cn_atomic` (standard atomic weights).
    """
    return np.asarray(cn, dtype=float) * (M_C / M_N)


def lipid_post2007(d13C: ArrayLike, cn: ArrayLike) -> FloatArray:
    """Return the lipid-normalised δ13C of an aquatic animal from its bulk δ13C and C:N.

    δ13C_norm = δ13C − 3.32 + 0.99 · C:N.

    Parameters
    ----------
    d13C
        Bulk δ13C of the untreated sample (‰ vs VPDB).
    cn
        Bulk C:N of the untreated sample.

    Returns
    -------
    numpy.ndarray
        Lipid-normalised δ13C (‰).

    Notes
    -----
    Post et al. 2007, Oecologia 152:179 (aquatic animals); the authors
    found no correction needed at C:N ≤ 3.5 (< 5 % lipid). The
    coefficients −3.32 and 0.99 are **from memory** (as they are widely
    quoted), not verified against the paper; nor is whether the paper's
    C:N is atomic or by mass, which changes the result by about 0.5 ‰ at
    C:N 3.5 (see :func:`cn_mass_from_atomic`).
    """
    d = np.asarray(d13C, dtype=float)
    r = np.asarray(cn, dtype=float)
    return d - 3.32 + 0.99 * r


def kiljunen_lipid_percent(cn: ArrayLike) -> FloatArray:
    """Return the lipid content L (%) predicted from C:N by the McConnaughey & McRoy model.

    L = 93 / (1 + (0.246 · C:N − 0.775)^−1), clipped at 0.

    Parameters
    ----------
    cn
        Bulk C:N.

    Returns
    -------
    numpy.ndarray
        Lipid content L in %. The formula gives L ≤ 0 for
        C:N ≤ 0.775/0.246 ≈ 3.15; those are returned as 0 (no lipid),
        which is the limit of the formula as C:N falls to 3.15.

    Notes
    -----
    McConnaughey & McRoy 1979, Mar. Biol. 53:257; used unchanged by
    Kiljunen et al. 2006, J. Appl. Ecol. 43:1213 (from memory).
    """
    r = np.asarray(cn, dtype=float)
    x = 0.246 * r - 0.775
    # 93 / (1 + 1/x) == 93 x / (x + 1), which avoids the division by zero at x = 0.
    with np.errstate(divide="ignore", invalid="ignore"):
        lip = 93.0 * x / (x + 1.0)
    return np.where(np.isnan(r), np.nan, np.where(x > 0, lip, 0.0))


def lipid_kiljunen2006(d13C: ArrayLike, cn: ArrayLike) -> FloatArray:
    """Return the lipid-normalised δ13C by the mass-balance model with Kiljunen et al. constants.

    δ13C′ = δ13C + D · (I + 3.90 / (1 + 287 / L)), with L from
    :func:`kiljunen_lipid_percent`, D = 7.018 and I = 0.048.

    Parameters
    ----------
    d13C
        Bulk δ13C of the untreated sample (‰ vs VPDB).
    cn
        Bulk C:N of the untreated sample.

    Returns
    -------
    numpy.ndarray
        Lipid-normalised δ13C (‰). At L = 0 (C:N ≤ 3.15) the shift is
        D · I ≈ +0.34 ‰, the model's own value at zero lipid.

    Notes
    -----
    Model form: McConnaughey & McRoy 1979, Mar. Biol. 53:257. Constants
    D = 7.018 and I = 0.048 revised by Kiljunen et al. 2006, J. Appl. Ecol.
    43:1213 (**from memory**, not verified against the paper; nor is the
    C:N basis, atomic or by mass).
    """
    d = np.asarray(d13C, dtype=float)
    lip = kiljunen_lipid_percent(cn)
    with np.errstate(divide="ignore"):
        frac = 3.90 / (1.0 + 287.0 / lip)  # L = 0 -> 287/L = inf -> 0
    return d + 7.018 * (0.048 + frac)


def two_point_normalise(
    delta_measured: ArrayLike,
    measured_1: float,
    true_1: float,
    measured_2: float,
    true_2: float,
) -> FloatArray:
    """Return δ values normalised to the international scale by two anchor materials.

    δ_true = δ1,true + (δ_meas − δ1,meas) · (δ2,true − δ1,true) / (δ2,meas − δ1,meas).

    Parameters
    ----------
    delta_measured
        Measured δ of the samples (‰, on the laboratory's working scale).
    measured_1, true_1
        Mean measured and certified δ of the first anchor.
    measured_2, true_2
        Mean measured and certified δ of the second anchor.

    Returns
    -------
    numpy.ndarray
        Normalised δ (‰). The anchors map exactly onto their certified
        values; samples should lie between them (bracketing).

    Notes
    -----
    Paul et al. 2007, Rapid Commun. Mass Spectrom. 21:3006.
    """
    slope, _ = two_point_line(measured_1, true_1, measured_2, true_2)
    d = np.asarray(delta_measured, dtype=float)
    return true_1 + (d - measured_1) * slope


def two_point_line(
    measured_1: float, true_1: float, measured_2: float, true_2: float
) -> tuple[float, float]:
    """Return slope and intercept of the two-point normalisation line δ_true = a·δ_meas + b.

    Parameters
    ----------
    measured_1, true_1, measured_2, true_2
        Mean measured and certified δ of the two anchors (‰).

    Returns
    -------
    tuple of float
        ``(slope, intercept)``; ``slope`` is the scale stretch.

    Raises
    ------
    ZeroDivisionError
        If the two anchors were measured alike (no line is defined).

    Notes
    -----
    Paul et al. 2007, Rapid Commun. Mass Spectrom. 21:3006.
    """
    if measured_2 == measured_1:
        raise ZeroDivisionError("the two anchors have the same measured δ")
    slope = (true_2 - true_1) / (measured_2 - measured_1)
    return float(slope), float(true_1 - slope * measured_1)


def scale_line_lstsq(measured: ArrayLike, true: ArrayLike) -> tuple[float, float]:
    """Return the least-squares normalisation line through three or more anchors.

    Fits δ_true = a·δ_meas + b by ordinary least squares; with exactly two
    anchors it equals :func:`two_point_line`.

    Parameters
    ----------
    measured
        Mean measured δ of each anchor (‰).
    true
        Certified δ of each anchor (‰).

    Returns
    -------
    tuple of float
        ``(slope, intercept)``.

    Raises
    ------
    ValueError
        With fewer than two anchors or no spread in ``measured``.

    Notes
    -----
    Multi-point extension of the normalisation of Paul et al. 2007, Rapid
    Commun. Mass Spectrom. 21:3006 (a straight line through all anchors).
    """
    x = np.asarray(measured, dtype=float)
    y = np.asarray(true, dtype=float)
    if x.size < 2:
        raise ValueError("a normalisation line needs at least two anchors")
    xm, ym = x.mean(), y.mean()
    sxx = float(np.sum((x - xm) ** 2))
    if sxx == 0.0:
        raise ValueError("the anchors have no spread in measured δ")
    slope = float(np.sum((x - xm) * (y - ym)) / sxx)
    return slope, float(ym - slope * xm)

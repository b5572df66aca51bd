"""Phenylalanine as a per-sample tracker of the food-web baseline.

Phenylalanine is a "source" amino acid: its δ15N changes little with trophic
level (about +0.4 ‰ per level, Chikaraishi et al. 2011) and, by assumption
(from memory; common practice in amino-acid isotope ecology), not with
catabolism. A change of δ15N_Phe within one animal's tissue is then read as
a change of the food web's baseline δ15N, which moves the bulk δ15N of the
same sample by the same amount (the sample integrates the same time window,
so no turnover kernel is needed).

For a sample row r of animal i and tissue k with δ15N_Phe,

    b_r = δ15N_Phe(r) − mean of δ15N_Phe over the n rows of animal i and tissue k,

is a known additive offset of the row's expected bulk δ15N, and its
variance from the Phe measurements,

    Var(b_r) = sd_r²·(1 − 2/n) + Σ_s sd_s² / n²     (exact for independent rows),

is added to that row's δ15N observation variance (0 for a lone Phe row,
whose offset is 0 whatever it measured). The reference is per animal *and
tissue*, so that a tissue's own Phe discrimination cancels. Rows without Phe
have offset 0 and unchanged variance. Left as a simplification: the offsets
of one animal and tissue share the error of their mean, a covariance
−(sd_r² + sd_s²)/n + Σ sd²/n² between rows r ≠ s that the model's
independent-observation likelihood ignores (small for many rows).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from nstress.aminoacids import DEFAULT_AA_SD

PHE = "d15N_Phe"
SD_PHE = "sd_d15N_Phe"


def phe_baseline_offsets(samples: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Per-row baseline offset of bulk δ15N from phenylalanine, and its variance.

    Parameters
    ----------
    samples
        Prepared samples with ``individual`` and ``tissue``; ``d15N_Phe``
        (‰ vs AIR) and ``sd_d15N_Phe`` (‰) where measured (either may be
        absent: then every offset is 0).

    Returns
    -------
    tuple of numpy.ndarray
        ``offset`` (‰) and ``variance`` (‰²), one per row; 0 where the row
        has no δ15N_Phe.
    """
    n = len(samples)
    if PHE not in samples.columns:
        return np.zeros(n), np.zeros(n)
    phe = pd.to_numeric(samples[PHE], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    has = np.isfinite(phe)
    if not has.any():
        return np.zeros(n), np.zeros(n)
    sd = (
        pd.to_numeric(samples[SD_PHE], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        if SD_PHE in samples.columns
        else np.full(n, np.nan)
    )
    sd = np.where(np.isfinite(sd), sd, DEFAULT_AA_SD)
    keys = [samples[c].astype(str).to_numpy() for c in ("individual", "tissue")]
    var = np.where(has, sd**2, np.nan)
    frame = pd.DataFrame({"phe": np.where(has, phe, np.nan), "var": var, "n": has.astype(float)})
    by = frame.groupby(keys)
    ref = by["phe"].transform("mean").to_numpy()
    count = by["n"].transform("sum").to_numpy()
    total = by["var"].transform("sum").to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        v = var * (1.0 - 2.0 / count) + total / count**2
    offset = np.where(has, phe - ref, 0.0)
    return offset, np.where(has, np.maximum(v, 0.0), 0.0)

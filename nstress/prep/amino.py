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
tissue*, so that a tissue's own Phe discrimination cancels.

Compound-specific analyses are costly and often made on every second or
third segment only. With ``mode="interpolate"`` (the default) a row without
Phe that lies *between* two Phe rows of the same animal and tissue (in time:
a blood draw's date, a keratin segment's nominal growth-window midpoint)
gets the linear interpolation w·b_a + (1 − w)·b_b of their offsets, with
variance w²·Var(b_a) + (1 − w)²·Var(b_b), w = (t_b − t)/(t_b − t_a) the
weight of the earlier row a. Without it, the rows between measured ones
still carry the baseline's rise unexplained: in fast-mode fits of a
synthetic colony (six animals with a 1.5-2.5 ‰ baseline rise, Phe SD 0.5 ‰
on every second sample of each animal and tissue) the mean P(episode) of
those animals was 0.92 without Phe, 0.88 with ``mode="measured"`` and 0.34
with ``mode="interpolate"`` (``tests/test_aminoacids.py``). ``"measured"``
uses the measured rows only; rows outside the span of an animal-tissue's Phe
rows have offset 0 in both modes (nothing is extrapolated). ``"off"``
ignores Phe.

The price: a row's Phe noise enters its bulk δ15N observation SD (0.5 ‰
against a bulk 0.15 ‰), so the bulk δ15N of rows with an offset says less
about a real fast too (the one faster of that colony that was found
without Phe fell from 0.88 to 0.42).

Rows without an offset keep offset 0 and unchanged variance. Left as
simplifications: the offsets of one animal and tissue share the error of
their mean (a covariance −(sd_r² + sd_s²)/n + Σ sd²/n² between rows r ≠ s,
and between interpolated rows and their neighbours) that the model's
independent-observation likelihood ignores; the baseline's own change
between two measured rows is taken as linear.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from nstress.aminoacids import DEFAULT_AA_SD, PHE_MODES
from nstress.errors import ConfigError

PHE = "d15N_Phe"
SD_PHE = "sd_d15N_Phe"
MODES = (*PHE_MODES, "off")
"""Ways Phe sets the baseline offsets (see the module docstring)."""


def phe_baseline_offsets(
    samples: pd.DataFrame, t_mid: np.ndarray | None = None, mode: str = "interpolate"
) -> tuple[np.ndarray, np.ndarray]:
    """Per-row baseline offset of bulk δ15N from phenylalanine, and its variance.

    Parameters
    ----------
    samples
        Prepared samples with ``individual`` and ``tissue``; ``d15N_Phe``
        (‰ vs AIR) and ``sd_d15N_Phe`` (‰) where measured (either may be
        absent: then every offset is 0).
    t_mid
        Time of each row (days, any origin): a blood draw's date, a keratin
        segment's growth-window midpoint. Needed for ``mode="interpolate"``.
    mode
        ``"interpolate"``, ``"measured"`` or ``"off"`` (see the module docstring).

    Returns
    -------
    tuple of numpy.ndarray
        ``offset`` (‰) and ``variance`` (‰²), one per row; 0 where the row
        has no offset.

    Raises
    ------
    ConfigError
        Unknown ``mode`` (key ``phe_mode``).
    ValueError
        ``"interpolate"`` without ``t_mid`` (a programming error), or
        ``t_mid`` of the wrong length.
    """
    if mode not in MODES:
        raise ConfigError(
            f"unknown Phe baseline mode {mode!r}; expected one of {list(MODES)}", key="phe_mode"
        )
    n = len(samples)
    zeros = (np.zeros(n), np.zeros(n))
    if mode == "off" or PHE not in samples.columns:
        return zeros
    phe = pd.to_numeric(samples[PHE], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    has = np.isfinite(phe)
    if not has.any():
        return zeros
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
    variance = np.where(has, np.maximum(v, 0.0), 0.0)
    if mode == "interpolate":
        if t_mid is None:
            raise ValueError("interpolating Phe offsets needs each row's time (t_mid)")
        t = np.asarray(t_mid, dtype=float)
        if t.shape != (n,):
            raise ValueError(f"t_mid must have one time per row ({n}), got shape {t.shape}")
        offset, variance = _interpolate(keys, t, has, offset, variance)
    return offset, variance


def _interpolate(
    keys: list[np.ndarray], t: np.ndarray, has: np.ndarray, offset: np.ndarray, var: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Fill rows between two measured rows of one animal and tissue by linear interpolation."""
    group = pd.MultiIndex.from_arrays(keys).factorize()[0]
    order = np.lexsort((t, group))
    g, ts, h = group[order], t[order], has[order]
    pos = np.where(h, np.arange(order.size), np.nan)
    by = pd.Series(pos).groupby(g)
    prev = by.ffill().to_numpy()
    nxt = by.bfill().to_numpy()
    inside = ~h & np.isfinite(prev) & np.isfinite(nxt)
    a = np.where(inside, prev, 0).astype(int)
    b = np.where(inside, nxt, 0).astype(int)
    span = ts[b] - ts[a]
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(span > 0, (ts[b] - ts) / span, 0.5)  # weight of the earlier row
    off_s, var_s = offset[order], var[order]
    fill_off = w * off_s[a] + (1.0 - w) * off_s[b]
    fill_var = w**2 * var_s[a] + (1.0 - w) ** 2 * var_s[b]
    out_off, out_var = offset.copy(), var.copy()
    rows = order[inside]
    out_off[rows] = fill_off[inside]
    out_var[rows] = fill_var[inside]
    return out_off, out_var

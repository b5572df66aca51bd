"""Recovery metrics: products of a fit against a simulated colony's known truth.

Used by the recovery benchmark (``benchmarks/recovery.py``) and the
recovery tests. The AUC is the Mann–Whitney form (probability that a
random catabolic bin scores above a random non-catabolic one, ties 1/2).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import rankdata


def auc(score: np.ndarray, label: np.ndarray) -> float:
    """Area under the ROC curve by the Mann–Whitney U statistic (ties count 1/2)."""
    score = np.asarray(score, dtype=float)
    label = np.asarray(label, dtype=bool)
    n1, n0 = label.sum(), (~label).sum()
    if n1 == 0 or n0 == 0:
        return float("nan")
    r = rankdata(score)
    return float((r[label].sum() - n1 * (n1 + 1) / 2) / (n1 * n0))


def recovery_metrics(
    timelines: pd.DataFrame,
    screening: pd.DataFrame,
    truth_bins: pd.DataFrame,
    truth_individuals: pd.DataFrame,
    *,
    min_fast_days: float = 20.0,
    min_rate: float = 0.03,
) -> dict[str, float]:
    """Compare a fit's products with the simulation truth.

    Parameters
    ----------
    timelines, screening
        Products of the fit.
    truth_bins, truth_individuals
        The simulator's truth tables.
    min_fast_days, min_rate
        Fasts at least this long (days) and strong (‰/d) count for the
        detection rate.

    Returns
    -------
    dict
        ``auc_bins``, ``diet_only_flagged`` (share of diet-shift-only animals
        with P(episode) > 0.5), ``detected`` (share of qualifying fasts with
        P(episode) > 0.5), ``coverage90`` (share of bins whose true enrichment
        is inside the 90 % interval; ``coverage90_enriched`` the same over
        bins whose true enrichment exceeds 0.05 ‰), ``onset_error_median_days`` (detected
        fasters), and counts.
    """
    tl = timelines.merge(
        truth_bins[["individual", "date", "catabolic", "enrichment_d15N"]],
        on=["individual", "date"],
        how="inner",
    )
    out: dict[str, float] = {"n_bins": float(len(tl))}
    out["auc_bins"] = auc(tl["p_catabolic"], tl["catabolic"].astype(bool))
    inside = (tl["enrichment_d15N"] >= tl["enrichment_d15N_lo"] - 1e-9) & (
        tl["enrichment_d15N"] <= tl["enrichment_d15N_hi"] + 1e-9
    )
    out["coverage90"] = float(inside.mean())
    # bins with real enrichment: zero-truth bins are covered by [0, x] almost trivially
    enriched = tl["enrichment_d15N"] > 0.05
    out["coverage90_enriched"] = float(inside[enriched].mean()) if enriched.any() else float("nan")
    out["n_bins_enriched"] = float(enriched.sum())
    ti = truth_individuals.merge(screening, on="individual", how="inner", suffixes=("", "_fit"))
    flagged = ti["p_catabolic_any"] > 0.5
    diet_only = ti["kind"].isin(["trophic_shift", "habitat_shift"])
    out["n_diet_only"] = float(diet_only.sum())
    out["diet_only_flagged"] = float(flagged[diet_only].mean()) if diet_only.any() else 0.0
    neither = ti["kind"] == "neither"
    out["neither_flagged"] = float(flagged[neither].mean()) if neither.any() else 0.0
    qual = (
        ti["has_episode"].astype(bool)
        & (ti["duration_days"] >= min_fast_days)
        & (ti["kappa_per_day"] >= min_rate)
    )
    out["n_fasts"] = float(qual.sum())
    out["detected"] = float(flagged[qual].mean()) if qual.any() else float("nan")
    det = qual & flagged
    if det.any():
        err = pd.to_datetime(ti.loc[det, "onset_date_fit"]) - pd.to_datetime(
            ti.loc[det, "onset_date"]
        )
        out["onset_error_median_days"] = float(np.median(np.abs(err.dt.days.to_numpy())))
    else:
        out["onset_error_median_days"] = float("nan")
    return out

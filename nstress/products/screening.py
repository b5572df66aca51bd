"""The screening table: one row per animal, a status, and the evidence behind it.

Status vocabulary (nstress's own; thresholds configurable):

``catabolic``
    P(episode) ≥ ``flag`` (default 0.8), the fit passed its diagnostics and
    the animal's data can separate catabolism from a diet shift.
``possible``
    P(episode) between ``clear`` and ``flag``: some evidence, not enough.
``clear``
    P(episode) ≤ ``clear`` (default 0.2).
``cannot_tell``
    The data cannot separate catabolism from a diet shift for this animal:
    too few samples, or δ15N rose but there is no δ13C to tell its
    direction. (A flat δ15N still counts as ``clear``.)
``fit_failed``
    The fit (or this animal's part of it) failed its diagnostics; nothing
    confident is said.

A screening flag is not a diagnosis: it says where the isotopes point, and
defers to field observation and licensed veterinary judgement.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from nstress.model.diagnose import Diagnostics
from nstress.prep.timebase import TimeBase

STATUSES = ("catabolic", "possible", "clear", "cannot_tell", "fit_failed")
STATUS_ORDER = {"catabolic": 0, "possible": 1, "cannot_tell": 2, "fit_failed": 3, "clear": 4}

SCREENING_COLUMNS = [
    "individual",
    "group",
    "status",
    "status_reason",
    "rank",
    "p_catabolic_any",
    "p_catabolic_any_lo",
    "p_catabolic_any_hi",
    "catabolic_days_mean",
    "peak_enrichment_d15N_mean",
    "peak_enrichment_d15N_lo",
    "peak_enrichment_d15N_hi",
    "onset_date",
    "onset_date_lo",
    "onset_date_hi",
    "end_date",
    "end_date_lo",
    "end_date_hi",
    "duration_days_median",
    "body_N_loss_mean",
    "body_N_loss_lo",
    "body_N_loss_hi",
    "n_samples",
    "n_d13C",
    "tissues",
    "diagnostics_ok",
    "approximate",
]


@dataclass
class ScreeningRules:
    """Thresholds of the status vocabulary.

    Attributes
    ----------
    flag
        P(episode) at or above which an animal is ``catabolic``.
    clear
        P(episode) at or below which an animal is ``clear``.
    min_samples
        Fewer samples than this -> ``cannot_tell``.
    min_d13C
        Fewer δ13C values than this and not clear -> ``cannot_tell``.
    """

    flag: float = 0.8
    clear: float = 0.2
    min_samples: int = 4
    min_d13C: int = 3


def data_support(tb: TimeBase) -> pd.DataFrame:
    """Per-animal sample counts: samples, δ13C values, tissues."""
    rows = []
    for i, name in enumerate(tb.individuals):
        n, n_c, tis = 0, 0, set()
        for o in (tb.blood, tb.keratin):
            m = o.mask[i]
            n += int(m.sum())
            n_c += int((o.y_mask[i, :, 1] & m).sum())
            tis.update(tb.tissues[k] for k in o.tissue[i][m])
        rows.append(
            {
                "individual": str(name),
                "n_samples": n,
                "n_d13C": n_c,
                "tissues": "+".join(sorted(tis)),
            }
        )
    return pd.DataFrame(rows)


def assign_status(
    p: np.ndarray,
    n_samples: np.ndarray,
    n_d13c: np.ndarray,
    fit_ok: np.ndarray,
    rules: ScreeningRules | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Status and reason per animal from P(episode), data support and diagnostics.

    Parameters
    ----------
    p
        Posterior P(episode) per animal.
    n_samples, n_d13c
        Samples and δ13C values per animal.
    fit_ok
        Whether the fit passed its diagnostics for that animal.
    rules
        Thresholds.

    Returns
    -------
    tuple of numpy.ndarray
        Status strings and reasons.
    """
    r = rules or ScreeningRules()
    p = np.asarray(p, dtype=float)
    status = np.where(p >= r.flag, "catabolic", np.where(p <= r.clear, "clear", "possible"))
    reason = np.where(
        status == "catabolic",
        [f"P(episode) = {x:.2f} ≥ {r.flag}" for x in p],
        np.where(
            status == "clear",
            [f"P(episode) = {x:.2f} ≤ {r.clear}" for x in p],
            [f"P(episode) = {x:.2f} between {r.clear} and {r.flag}" for x in p],
        ),
    ).astype(object)
    no_c = (np.asarray(n_d13c) < r.min_d13C) & (status != "clear")
    status = np.where(no_c, "cannot_tell", status)
    reason = np.where(
        no_c,
        "δ15N changed but too few δ13C values to tell catabolism from a diet shift",
        reason,
    )
    few = np.asarray(n_samples) < r.min_samples
    status = np.where(few, "cannot_tell", status)
    reason = np.where(few, f"fewer than {r.min_samples} samples", reason)
    bad = ~np.asarray(fit_ok, dtype=bool)
    status = np.where(bad, "fit_failed", status)
    reason = np.where(bad, "the fit failed its diagnostics; see the report", reason)
    return status.astype(object), reason.astype(object)


def screening_table(
    episodes: pd.DataFrame,
    tb: TimeBase,
    diagnostics: Diagnostics,
    rules: ScreeningRules | None = None,
    *,
    approximate: bool = False,
) -> pd.DataFrame:
    """Build the screening table (contract.md) ranked by evidence and magnitude.

    Parameters
    ----------
    episodes
        Per-animal episode summaries (:class:`nstress.products.timelines.Products`).
    tb
        Time base (for data support).
    diagnostics
        Diagnostics of the fit.
    rules
        Thresholds.
    approximate
        Whether the posterior came from the approximate fast mode.
    """
    sup = data_support(tb)
    df = episodes.merge(sup, on="individual", how="left")
    fit_ok = np.asarray(diagnostics.individual_ok, bool) & bool(diagnostics.ok)
    df["diagnostics_ok"] = fit_ok
    df["status"], df["status_reason"] = assign_status(
        df["p_catabolic_any"].to_numpy(),
        df["n_samples"].to_numpy(),
        df["n_d13C"].to_numpy(),
        fit_ok,
        rules,
    )
    if not diagnostics.ok:
        df["status_reason"] = "the fit failed its diagnostics: " + "; ".join(
            diagnostics.reasons[:3]
        )
    df["approximate"] = bool(approximate)
    df["_order"] = df["status"].map(STATUS_ORDER)
    df = df.sort_values(
        ["_order", "p_catabolic_any", "peak_enrichment_d15N_mean"], ascending=[True, False, False]
    )
    df["rank"] = np.arange(1, len(df) + 1)
    return df[SCREENING_COLUMNS].reset_index(drop=True)


def colony_summary(
    screening: pd.DataFrame, d_episode: np.ndarray, groups: np.ndarray, group_index: np.ndarray
) -> pd.DataFrame:
    """Share of animals with an episode per group, with a 90 % interval from the draws.

    Parameters
    ----------
    screening
        The screening table.
    d_episode
        ``(S, I)`` sampled episode indicators.
    groups, group_index
        Group names and each animal's group index.
    """
    rows = []
    for g, name in enumerate(groups):
        m = group_index == g
        share = d_episode[:, m].mean(1)
        sub = screening[screening["group"] == name]
        rows.append(
            {
                "group": str(name),
                "n_animals": int(m.sum()),
                "n_catabolic": int((sub["status"] == "catabolic").sum()),
                "n_possible": int((sub["status"] == "possible").sum()),
                "n_cannot_tell": int((sub["status"] == "cannot_tell").sum()),
                "n_fit_failed": int((sub["status"] == "fit_failed").sum()),
                "share_with_episode_mean": float(share.mean()),
                "share_with_episode_lo": float(np.quantile(share, 0.05)),
                "share_with_episode_hi": float(np.quantile(share, 0.95)),
                "catabolic_days_total": float(sub["catabolic_days_mean"].sum()),
            }
        )
    return pd.DataFrame(rows)

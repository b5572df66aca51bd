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
    too few samples (``min_samples``), samples covering too short a period
    (``min_span_days``), fewer tissues than ``min_tissues`` (default 1: one
    tissue is enough when it has δ13C), fewer δ15N values than
    ``min_samples`` (δ13C alone cannot show an episode), or δ15N rose but there are too few
    δ13C values to tell its direction (``min_d13C``). (A flat δ15N still
    counts as ``clear`` when only δ13C is missing.)
``fit_failed``
    The fit (or this animal's part of it) failed its diagnostics; nothing
    confident is said.

A screening flag is not a diagnosis: it says where the isotopes point, and
defers to field observation and licensed veterinary judgement.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, fields
from typing import Any

import numpy as np
import pandas as pd
from scipy.stats import norm

from nstress.errors import ConfigError
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
    "n_tissues",
    "span_days",
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
    min_span_days
        Samples covering fewer days than this (blood draws, keratin growth
        windows at nominal growth) -> ``cannot_tell``.
    min_tissues
        Fewer tissues than this -> ``cannot_tell`` (set 2 to require paired
        tissues of different turnover).
    """

    flag: float = 0.8
    clear: float = 0.2
    min_samples: int = 4
    min_d13C: int = 3
    min_span_days: float = 16.0
    min_tissues: int = 1

    @classmethod
    def from_config(cls, config: dict[str, Any] | None) -> ScreeningRules:
        """Build the rules from a ``[screening]`` table, checking keys and values.

        Raises
        ------
        ConfigError
            On an unknown key (with a "did you mean" hint), a non-number, or
            thresholds outside ``0 <= clear < flag <= 1``.
        """
        known = [f.name for f in fields(cls)]
        values: dict[str, Any] = {}
        for key, v in (config or {}).items():
            if key not in known:
                hint = difflib.get_close_matches(key, known, n=1)
                extra = f"; did you mean '{hint[0]}'?" if hint else ""
                raise ConfigError(f"unknown setting {key!r}{extra}", key=f"screening.{key}")
            if not isinstance(v, int | float) or isinstance(v, bool):
                raise ConfigError(f"expected a number, got {v!r}", key=f"screening.{key}")
            values[key] = v
        rules = cls(**values)
        if not 0.0 <= rules.clear < rules.flag <= 1.0:
            raise ConfigError(
                f"expected 0 <= clear < flag <= 1, got clear={rules.clear}, flag={rules.flag}",
                key="screening",
            )
        return rules


def data_support(tb: TimeBase) -> pd.DataFrame:
    """Per-animal data support: samples, δ13C values, tissues and the period covered (days)."""
    rows = []
    b, k = tb.blood, tb.keratin
    for i, name in enumerate(tb.individuals):
        n, n_n, n_c, tis = 0, 0, 0, set()
        for o in (b, k):
            m = o.mask[i]
            n += int(m.sum())
            n_n += int((o.y_mask[i, :, 0] & m).sum())
            n_c += int((o.y_mask[i, :, 1] & m).sum())
            tis.update(tb.tissues[j] for j in o.tissue[i][m])
        # period the samples see: draw days, and keratin growth windows at nominal growth
        mb, mk = b.mask[i], k.mask[i]
        lo = np.r_[b.t[i][mb], (k.t[i] - k.h_hi[i])[mk] if k.h_hi is not None else []]
        hi = np.r_[b.t[i][mb], (k.t[i] - k.h_lo[i])[mk] if k.h_lo is not None else []]
        rows.append(
            {
                "individual": str(name),
                "n_samples": n,
                "n_d15N": n_n,
                "n_d13C": n_c,
                "n_tissues": len(tis),
                "span_days": float(hi.max() - lo.min()) if lo.size else 0.0,
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
    *,
    span_days: np.ndarray | None = None,
    n_tissues: np.ndarray | None = None,
    n_d15n: np.ndarray | None = None,
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
    span_days, n_tissues
        Period the samples cover (days) and number of tissues per animal
        (optional; not checked when absent).
    n_d15n
        δ15N values per animal (optional): fewer than ``min_samples`` ->
        ``cannot_tell`` (δ15N carries the catabolic signal; δ13C alone
        cannot show an episode).

    Returns
    -------
    tuple of numpy.ndarray
        Status strings and reasons. Later checks override earlier ones:
        P(episode) bands, then too few δ13C, too few tissues, too short a
        period, too few δ15N values, too few samples, and last a failed fit.
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
    if n_tissues is not None:
        one = np.asarray(n_tissues) < r.min_tissues
        status = np.where(one, "cannot_tell", status)
        reason = np.where(one, f"fewer than {r.min_tissues} tissues", reason)
    if span_days is not None:
        short = np.asarray(span_days, dtype=float) < r.min_span_days
        status = np.where(short, "cannot_tell", status)
        reason = np.where(short, f"samples cover less than {r.min_span_days:g} days", reason)
    if n_d15n is not None:
        no_n = np.asarray(n_d15n) < r.min_samples
        status = np.where(no_n, "cannot_tell", status)
        reason = np.where(no_n, f"fewer than {r.min_samples} δ15N values", reason)
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
        span_days=df["span_days"].to_numpy(),
        n_tissues=df["n_tissues"].to_numpy(),
        n_d15n=df["n_d15N"].to_numpy(),
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


def wilson_interval(k: np.ndarray, n: np.ndarray, level: float = 0.9) -> tuple[Any, Any]:
    """Wilson score interval of a binomial proportion k/n (Wilson 1927).

    The interval inverts the score test: with p = k/n and z the normal
    quantile of (1 + level)/2, its centre is (p + z²/2n)/(1 + z²/n) and its
    half-width z/(1 + z²/n)·√(p(1 − p)/n + z²/4n²). It stays inside [0, 1]
    and keeps its coverage near nominal for small n, which a colony of a few
    dozen animals needs (Newcombe 1998, method 3; Brown, Cai & DasGupta 2001).

    Parameters
    ----------
    k, n
        Successes and trials (NaN where n = 0).
    level
        Coverage, e.g. 0.9 for the project's 90 % intervals.

    Returns
    -------
    tuple
        Lower and upper limits.
    """
    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    z = norm.ppf(0.5 + level / 2.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = k / n
        den = 1.0 + z**2 / n
        centre = (p + z**2 / (2.0 * n)) / den
        half = z / den * np.sqrt(p * (1.0 - p) / n + z**2 / (4.0 * n**2))
    return np.clip(centre - half, 0.0, 1.0), np.clip(centre + half, 0.0, 1.0)


SUMMARY_LEVEL = 0.9


def colony_summary(
    screening: pd.DataFrame,
    d_episode: np.ndarray | None = None,
    groups: np.ndarray | None = None,
    group_index: np.ndarray | None = None,
    *,
    level: float = SUMMARY_LEVEL,
) -> pd.DataFrame:
    """Per group: statuses, the share flagged with an interval, onset timing, catabolic days.

    Parameters
    ----------
    screening
        The screening table.
    d_episode
        ``(S, I)`` sampled episode indicators (optional): adds the posterior
        share of animals with an episode, with its 90 % interval.
    groups, group_index
        Group names and each animal's group index (with ``d_episode``).
    level
        Coverage of the Wilson interval of the share flagged.

    Returns
    -------
    pandas.DataFrame
        One row per group: ``n_animals``, counts per status, ``share_flagged``
        (``catabolic`` animals / all animals) with ``share_flagged_lo`` /
        ``_hi`` (Wilson score interval, :func:`wilson_interval`), the
        onset distribution of the animals with some evidence (``catabolic``
        or ``possible``: ``onset_n``, ``onset_first``, ``onset_q25``,
        ``onset_median``, ``onset_q75``, ``onset_last``, ISO dates),
        ``catabolic_days_total`` (sum of expected catabolic days, d) and,
        with draws, ``share_with_episode_mean`` / ``_lo`` / ``_hi``.
    """
    rows = []
    names = list(dict.fromkeys(screening["group"].astype(str))) if groups is None else groups
    for g, name in enumerate(names):
        sub = screening[screening["group"].astype(str) == str(name)]
        n = len(sub)
        counts = {f"n_{s}": int((sub["status"] == s).sum()) for s in STATUSES}
        k = counts["n_catabolic"]
        lo, hi = wilson_interval(k, n, level)
        row: dict[str, Any] = {"group": str(name), "n_animals": n, **counts}
        row.update(
            {
                "share_flagged": k / n if n else float("nan"),
                "share_flagged_lo": float(lo),
                "share_flagged_hi": float(hi),
                "share_flagged_interval": f"Wilson score, {level:.0%}",
            }
        )
        ev = sub[sub["status"].isin(["catabolic", "possible"])]
        on = pd.to_datetime(ev["onset_date"], errors="coerce").dropna()
        row["onset_n"] = int(on.size)
        for col, q in (
            ("onset_first", 0.0),
            ("onset_q25", 0.25),
            ("onset_median", 0.5),
            ("onset_q75", 0.75),
            ("onset_last", 1.0),
        ):
            row[col] = on.quantile(q).strftime("%Y-%m-%d") if on.size else None
        row["catabolic_days_total"] = float(sub["catabolic_days_mean"].sum())
        if d_episode is not None and group_index is not None:
            share = d_episode[:, group_index == g].mean(1)
            row["share_with_episode_mean"] = float(share.mean())
            row["share_with_episode_lo"] = float(np.quantile(share, 0.05))
            row["share_with_episode_hi"] = float(np.quantile(share, 0.95))
        rows.append(row)
    return pd.DataFrame(rows)

"""Trophic position from the amino-acid pair: per sample and per individual.

``trophic_position.csv`` (one row per used sample with both ``d15N_Glu`` and
``d15N_Phe``; written only when at least one sample has the pair):

``individual``, ``group``, ``tissue``, ``tissue_class``, ``sample_id``,
``date`` (ISO; blood: draw date; keratin: date of the segment's growth-window
midpoint at the posterior median growth, or at nominal growth without
draws), ``collected`` (keratin: ISO date the keratin was removed),
``position_mm``, ``d15N_Glu``, ``d15N_Phe``, ``sd_d15N_Glu``,
``sd_d15N_Phe`` (‰ vs AIR), ``trophic_position``, ``trophic_position_sd``
(delta method, :func:`nstress.equations.trophic_position_glu_phe`),
``phe_baseline_offset_d15N`` (the row's known δ15N offset in the model, ‰;
0 with ``phe_baseline = false``), ``food_web``, ``beta``, ``beta_sd``,
``tdf``, ``tdf_sd`` (‰, the values used).

Per individual (:data:`SCREENING_COLUMNS`, added to ``screening.csv`` when
the input has amino-acid data; empty for an animal without):
``trophic_position_median`` (median over its samples),
``trophic_position_mean`` and ``trophic_position_sd`` (TP of its mean
Glu − Phe; the analytical errors average over samples, the β and TDF
errors are shared by all of them and do not), ``n_aa_samples`` (samples with
the pair) and ``n_phe_samples`` (samples with Phe, which set the baseline
offsets).

A trophic position is a description of the animal's food, not a health
statement.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from nstress import equations as eq
from nstress.aminoacids import TrophicSettings
from nstress.prep.timebase import TimeBase

TROPHIC_COLUMNS = [
    "individual",
    "group",
    "tissue",
    "tissue_class",
    "sample_id",
    "date",
    "collected",
    "position_mm",
    "d15N_Glu",
    "d15N_Phe",
    "sd_d15N_Glu",
    "sd_d15N_Phe",
    "trophic_position",
    "trophic_position_sd",
    "phe_baseline_offset_d15N",
    "food_web",
    "beta",
    "beta_sd",
    "tdf",
    "tdf_sd",
]
TROPHIC_UNITS: dict[str, str] = {
    "individual": "label",
    "group": "label",
    "tissue": "label",
    "tissue_class": "label (keratin or blood)",
    "sample_id": "label",
    "date": "ISO 8601 date",
    "collected": "ISO 8601 date",
    "position_mm": "mm from the growing end",
    "d15N_Glu": "per mil vs AIR",
    "d15N_Phe": "per mil vs AIR",
    "sd_d15N_Glu": "per mil",
    "sd_d15N_Phe": "per mil",
    "trophic_position": "trophic level (1 = primary producer)",
    "trophic_position_sd": "trophic levels",
    "phe_baseline_offset_d15N": "per mil (d15N vs AIR)",
    "food_web": "label",
    "beta": "per mil",
    "beta_sd": "per mil",
    "tdf": "per mil per trophic level",
    "tdf_sd": "per mil per trophic level",
}
"""Unit of every column of ``trophic_position.csv`` (written to ``manifest.json``)."""

SCREENING_UNITS: dict[str, str] = {
    "trophic_position_median": "trophic level",
    "trophic_position_mean": "trophic level",
    "trophic_position_sd": "trophic levels",
    "n_aa_samples": "count",
    "n_phe_samples": "count",
}
"""Unit of every trophic column of ``screening.csv``."""

SCREENING_COLUMNS = [
    "trophic_position_median",
    "trophic_position_mean",
    "trophic_position_sd",
    "n_aa_samples",
    "n_phe_samples",
]


def _column(frame: pd.DataFrame, name: str) -> np.ndarray:
    if name not in frame.columns:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def has_amino_acids(tb: TimeBase) -> bool:
    """Whether any placed sample has a δ15N_Phe or δ15N_Glu value."""
    s = tb.samples
    return bool(
        np.isfinite(_column(s, "d15N_Phe")).any() or np.isfinite(_column(s, "d15N_Glu")).any()
    )


def trophic_positions(
    tb: TimeBase, settings: TrophicSettings, growth: np.ndarray | None = None
) -> pd.DataFrame:
    """Trophic position of every placed sample with both amino acids.

    Parameters
    ----------
    tb
        Time base (its ``samples`` are the used samples; its observation sets
        place them in time and hold the baseline offsets).
    settings
        Food web and the β/TDF values to use.
    growth
        ``(I, K_keratin)`` growth multipliers for keratin dates (e.g. the
        posterior median); ``None``: nominal growth (multiplier 1).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TROPHIC_COLUMNS`, in time-base order (individual,
        then time); no rows when no sample has the pair.
    """
    s = tb.samples
    glu, phe = _column(s, "d15N_Glu"), _column(s, "d15N_Phe")
    sd_g, sd_p = _column(s, "sd_d15N_Glu"), _column(s, "sd_d15N_Phe")
    n = len(s)
    day = np.full(n, np.nan)
    ind = np.full(n, -1)
    offset = np.zeros(n)
    for o in (tb.blood, tb.keratin):
        ii, nn = np.nonzero(o.mask)
        rows = o.sample[ii, nn]
        t = o.t[ii, nn]
        if o.h_lo is not None:
            r = 1.0 if growth is None else np.asarray(growth)[ii, o.slot[ii, nn]]
            t = t - 0.5 * (o.h_lo[ii, nn] + o.h_hi[ii, nn]) / r
        day[rows] = t
        ind[rows] = ii
        offset[rows] = o.offset[ii, nn] if o.offset is not None else 0.0
    keep = np.isfinite(glu) & np.isfinite(phe) & (ind >= 0)
    rows = np.flatnonzero(keep)
    rows = rows[np.lexsort((day[rows], ind[rows]))]
    tp, tp_sd = eq.trophic_position_glu_phe(
        glu[rows],
        phe[rows],
        settings.beta,
        settings.tdf,
        sd_g[rows],
        sd_p[rows],
        settings.beta_sd,
        settings.tdf_sd,
    )
    ii = ind[rows]
    when = tb.origin[ii] + np.floor(day[rows]).astype("timedelta64[D]")
    klass = s["tissue_class"].astype(str).to_numpy()[rows] if "tissue_class" in s else None
    collected = pd.to_datetime(s["collected"], errors="coerce") if "collected" in s else None
    out = pd.DataFrame(
        {
            "individual": np.asarray(tb.individuals, dtype=object)[ii],
            "group": np.asarray(tb.groups, dtype=object)[tb.group_index[ii]],
            "tissue": s["tissue"].astype(str).to_numpy()[rows],
            "tissue_class": klass,
            "sample_id": s["sample_id"].to_numpy()[rows] if "sample_id" in s else None,
            "date": pd.to_datetime(when).strftime("%Y-%m-%d"),
            "collected": (
                collected.iloc[rows].dt.strftime("%Y-%m-%d").to_numpy()
                if collected is not None
                else None
            ),
            "position_mm": _column(s, "position_mm")[rows],
            "d15N_Glu": glu[rows],
            "d15N_Phe": phe[rows],
            "sd_d15N_Glu": sd_g[rows],
            "sd_d15N_Phe": sd_p[rows],
            "trophic_position": tp,
            "trophic_position_sd": tp_sd,
            "phe_baseline_offset_d15N": offset[rows],
            "food_web": settings.food_web,
            "beta": settings.beta,
            "beta_sd": settings.beta_sd,
            "tdf": settings.tdf,
            "tdf_sd": settings.tdf_sd,
        }
    )
    return out.reindex(columns=TROPHIC_COLUMNS)


def trophic_summary(
    per_sample: pd.DataFrame, tb: TimeBase, settings: TrophicSettings
) -> pd.DataFrame:
    """One row per individual of the time base: the screening columns.

    Parameters
    ----------
    per_sample
        Output of :func:`trophic_positions`.
    tb
        Time base (every individual gets a row; Phe counts come from its samples).
    settings
        The β/TDF values (their SDs are shared by all of an animal's samples).

    Returns
    -------
    pandas.DataFrame
        ``individual`` and :data:`SCREENING_COLUMNS` (NaN trophic position
        and 0 counts for an animal without the pair).
    """
    names = pd.Index(np.asarray(tb.individuals, dtype=object).astype(str), name="individual")
    g = per_sample.assign(
        var_g=per_sample["sd_d15N_Glu"] ** 2, var_p=per_sample["sd_d15N_Phe"] ** 2
    ).groupby(per_sample["individual"].astype(str))
    count = g.size().reindex(names).fillna(0).astype(int)
    glu = g["d15N_Glu"].mean().reindex(names)
    phe = g["d15N_Phe"].mean().reindex(names)
    sd_g = (np.sqrt(g["var_g"].sum()) / g.size()).reindex(names)
    sd_p = (np.sqrt(g["var_p"].sum()) / g.size()).reindex(names)
    mean, sd = eq.trophic_position_glu_phe(
        glu.to_numpy(),
        phe.to_numpy(),
        settings.beta,
        settings.tdf,
        sd_g.to_numpy(),
        sd_p.to_numpy(),
        settings.beta_sd,
        settings.tdf_sd,
    )
    n_phe = np.zeros(len(names), dtype=int)
    phe_all = _column(tb.samples, "d15N_Phe")
    for o in (tb.blood, tb.keratin):
        ii, nn = np.nonzero(o.mask)
        np.add.at(n_phe, ii, np.isfinite(phe_all[o.sample[ii, nn]]).astype(int))
    return pd.DataFrame(
        {
            "individual": names.to_numpy(),
            "trophic_position_median": g["trophic_position"].median().reindex(names).to_numpy(),
            "trophic_position_mean": mean,
            "trophic_position_sd": sd,
            "n_aa_samples": count.to_numpy(),
            "n_phe_samples": n_phe,
        }
    )


def add_screening_columns(screen: pd.DataFrame, summary: pd.DataFrame) -> pd.DataFrame:
    """Return ``screen`` with the per-individual trophic columns joined on ``individual``."""
    extra = summary.set_index("individual")[SCREENING_COLUMNS]
    joined = extra.reindex(screen["individual"].astype(str).to_numpy())
    out = screen.copy()
    for c in SCREENING_COLUMNS:
        out[c] = joined[c].to_numpy()
    return out

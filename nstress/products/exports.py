"""Exports for other tools: a tidy (long) timelines table and a short run summary.

``timelines_long.csv`` has one row per individual, bin, quantity and
statistic, the shape R's tidyverse and data.table expect::

    individual, group, date, day_since_start, quantity, statistic, value, unit

``quantity`` is ``p_catabolic`` (probability), ``enrichment_d15N`` (‰, δ15N
vs AIR), ``diet_d15N`` (‰ vs AIR) or ``diet_d13C`` (‰ vs VPDB);
``statistic`` is ``mean``, ``lo`` (5 % quantile) or ``hi`` (95 % quantile).

``summary.json`` (:func:`run_summary`) is the machine-readable gist of one run:
counts by status, the flagged and inconclusive animals, whether the
diagnostics passed (and why not), the seed, input hash and versions.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from nstress.products.screening import STATUSES

SUMMARY_FORMAT = "nstress-summary-1"

_QUANTITIES = {
    "p_catabolic": ("probability", {"mean": "p_catabolic"}),
    "enrichment_d15N": (
        "per mil (d15N vs AIR)",
        {
            "mean": "enrichment_d15N_mean",
            "lo": "enrichment_d15N_lo",
            "hi": "enrichment_d15N_hi",
        },
    ),
    "diet_d15N": (
        "per mil (d15N vs AIR)",
        {"mean": "diet_d15N_mean", "lo": "diet_d15N_lo", "hi": "diet_d15N_hi"},
    ),
    "diet_d13C": (
        "per mil (d13C vs VPDB)",
        {"mean": "diet_d13C_mean", "lo": "diet_d13C_lo", "hi": "diet_d13C_hi"},
    ),
}
TIDY_COLUMNS = [
    "individual",
    "group",
    "date",
    "day_since_start",
    "quantity",
    "statistic",
    "value",
    "unit",
]


def tidy_timelines(timelines: pd.DataFrame) -> pd.DataFrame:
    """Melt the wide timelines table into the long form (see module doc).

    Parameters
    ----------
    timelines
        The ``timelines.csv`` table.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TIDY_COLUMNS`; rows ordered by individual, date,
        quantity and statistic.
    """
    ids = ["individual", "group", "date", "day_since_start"]
    parts = []
    for quantity, (unit, stats) in _QUANTITIES.items():
        cols = {c: s for s, c in stats.items() if c in timelines}
        if not cols:
            continue
        m = timelines[ids + list(cols)].melt(id_vars=ids, var_name="statistic", value_name="value")
        m["statistic"] = m["statistic"].map(cols)
        m["quantity"] = quantity
        m["unit"] = unit
        parts.append(m)
    out = pd.concat(parts, ignore_index=True)
    order = {q: i for i, q in enumerate(_QUANTITIES)}
    out["_q"] = out["quantity"].map(order)
    out = out.sort_values(["individual", "date", "_q", "statistic"], kind="stable")
    return out[TIDY_COLUMNS].reset_index(drop=True)


def run_summary(
    screening: pd.DataFrame,
    diagnostics: dict[str, Any],
    *,
    seed: int,
    input_hash: str,
    versions: dict[str, str],
) -> dict[str, Any]:
    """Return the short machine-readable summary of one run (``summary.json``).

    Parameters
    ----------
    screening
        The screening table.
    diagnostics
        ``Diagnostics.to_dict()`` of the fit (``ok`` and ``reasons`` are used).
    seed, input_hash, versions
        Provenance, as in ``manifest.json``.

    Returns
    -------
    dict
        ``format``, ``n_individuals``, ``status_counts`` (every status, zeros
        included), ``flagged`` (``catabolic`` ids, by rank), ``possible``,
        ``inconclusive`` (``cannot_tell`` ids), ``diagnostics_ok``,
        ``diagnostics_reasons``, ``groups``, ``seed``, ``input_hash``,
        ``versions``.
    """
    sc = screening.sort_values("rank") if "rank" in screening else screening

    def ids(status: str) -> list[str]:
        return [str(x) for x in sc.loc[sc["status"] == status, "individual"]]

    counts = sc["status"].value_counts()
    return {
        "format": SUMMARY_FORMAT,
        "n_individuals": int(len(sc)),
        "status_counts": {s: int(counts.get(s, 0)) for s in STATUSES},
        "flagged": ids("catabolic"),
        "possible": ids("possible"),
        "inconclusive": ids("cannot_tell"),
        "diagnostics_ok": bool(diagnostics.get("ok", False)),
        "diagnostics_reasons": list(diagnostics.get("reasons", [])),
        "groups": sorted({str(g) for g in sc["group"]}),
        "seed": int(seed),
        "input_hash": str(input_hash),
        "versions": dict(versions),
    }

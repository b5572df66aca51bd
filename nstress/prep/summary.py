"""A short human-readable summary of a prepared data set."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from nstress.prep.qc import text, tissue_names

if TYPE_CHECKING:
    from nstress.prep import Prepared


def _dates(samples: pd.DataFrame, column: str) -> pd.Series:
    if column not in samples.columns:
        return pd.Series(dtype="datetime64[ns]")
    return pd.to_datetime(samples[column], errors="coerce").dropna()


def _span(values: pd.Series) -> str:
    if values.empty:
        return "-"
    return f"{values.min():%Y-%m-%d} to {values.max():%Y-%m-%d}"


def summarise(prepared: Prepared) -> str:
    """Return a multi-line summary of a :class:`~nstress.prep.Prepared`.

    Lists the individuals, rows per tissue, the span of sampling dates
    (blood ``date`` and keratin ``collected``), ledger rows by status and
    reason, and the lipid and scale normalisation applied.

    Parameters
    ----------
    prepared
        Output of :func:`nstress.prep.prepare`.

    Returns
    -------
    str
        The summary, one line per item.
    """
    s = prepared.samples
    rep = prepared.report
    lines: list[str] = []
    ind = text(s, "individual")
    n_ind = len(set(ind.tolist()) - {""})
    groups = sorted(set(text(s, "group").tolist()) - {""})
    in_groups = f" in {len(groups)} group(s): {', '.join(groups)}" if groups else ""
    lines.append(f"Individuals: {n_ind}{in_groups}")
    names = tissue_names(s)
    counts = pd.Series(names).value_counts().sort_index()
    per_tissue = ", ".join(f"{t} {n} rows" for t, n in counts.items())
    lines.append(f"Tissues: {per_tissue or '-'}")
    drawn, collected = _dates(s, "date"), _dates(s, "collected")
    both = pd.concat([drawn, collected])
    lines.append(
        f"Dates: {_span(both)} (blood drawn {_span(drawn)}; keratin collected {_span(collected)})"
    )

    summ = prepared.ledger.summary()
    totals = summ.groupby("status")["rows"].sum()
    lines.append(
        "Input rows: "
        + ", ".join(f"{st} {int(totals.get(st, 0))}" for st in ("used", "flagged", "excluded"))
    )
    # one line per single reason (a row with several reasons counts under each)
    single = summ[summ["reason"] != "-"].assign(reason=lambda f: f["reason"].str.split("; "))
    single = single.explode("reason").groupby(["status", "reason"])["rows"].sum().reset_index()
    if len(single):
        lines.append("  by reason (a row can have several):")
    for st in ("excluded", "flagged", "used"):
        part = single[single["status"] == st]
        part = part.sort_values(["rows", "reason"], ascending=[False, True])
        for _, row in part.iterrows():
            lines.append(f"  {st:<8} {int(row['rows']):>6}  {row['reason']}")

    lip = rep.get("lipid", {})
    lip_lines = []
    for t, v in lip.get("tissues", {}).items():
        if v["n_corrected"]:
            lip_lines.append(
                f"  {t}: {v['n_corrected']} rows by {v['method']} (C:N > {v['cn_threshold']:g}, "
                f"mean shift {v['mean_shift_d13C']:+.2f} ‰)"
            )
        if v["n_suggests_lipid_not_corrected"]:
            lip_lines.append(
                f"  {t}: {v['n_suggests_lipid_not_corrected']} rows with C:N suggesting lipid, "
                "not corrected (method none, extraction unknown)"
            )
    lines.append(
        f"δ13C lipid normalisation: {lip.get('n_corrected', 0)} rows "
        f"({lip.get('cn_basis', 'atomic')} C:N)"
    )
    lines.extend(lip_lines)

    sc = rep.get("scale", {})
    cals = sc.get("calibrations", [])
    lines.append(f"Scale normalisation ({sc.get('mode', '-')}): {len(cals)} batch/isotope line(s)")
    for c in cals:
        anchors = ", ".join(a["rm"] for a in c["anchors"])
        lines.append(
            f"  batch {c['batch']} {c['isotope']}: {c['method']}, anchors {anchors}, "
            f"slope {c['slope']:.4f}, intercept {c['intercept']:+.3f} ‰, {c['n_samples']} samples"
            + (
                f", {c['n_outside_anchor_range']} outside the anchor range"
                if c["n_outside_anchor_range"]
                else ""
            )
        )
        for chk in c["checks"]:
            lines.append(
                f"    check {chk['rm']}: n {chk['n']}, residual {chk['mean_residual']:+.3f} ‰ "
                f"(max |{chk['max_abs_residual']:.3f}|)"
            )
    for nn in sc.get("not_normalised", []):
        lines.append(f"  not normalised: {nn['n_samples']} samples, {nn['reason']}")
    for w in sc.get("warnings", []):
        lines.append(f"  warning: {w}")
    n_cn = rep.get("cn", {})
    if n_cn:
        out = sum(v["n_below"] + v["n_above"] for v in n_cn.get("range", {}).values())
        lines.append(
            f"C:N: {n_cn['from_table']} given, {n_cn['computed']} computed from %C/%N, "
            f"{n_cn['missing']} unknown; {int(out)} outside the tissue range"
        )
    if np.size(rep.get("tissues_without_defaults", [])):
        lines.append("Tissues without defaults: " + ", ".join(rep["tissues_without_defaults"]))
    return "\n".join(lines)

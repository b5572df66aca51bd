"""Duplicated rows and replicate analyses.

Duplicate rule (``sample_id``)
------------------------------
A non-empty ``sample_id`` names one lab sample, so it should appear once.
Rows that share it (reference-material rows aside: labs often repeat a
standard's name) are compared on every canonical data column (identity,
time, δ values, SDs, composition, growth, mass; not on ``analysis_batch`` or
extra columns):

* some value differs -> an *error* (a duplicated row with conflicting
  values), naming both rows and the differing columns;
* all equal -> the first row is kept and every later copy is excluded as
  ``"duplicate row"`` (typically a row pasted twice).

Rows without ``sample_id`` are never treated as duplicates: two analyses of
one segment may well agree to the reported digits; they are replicates.

Replicate rule
--------------
Rows of the same ``individual`` and ``tissue``, with the same
``position_mm`` and ``collected`` (keratin) or the same ``date`` (blood),
and the same ``lipid_extracted`` state, are replicate analyses of one
sample and are combined into one:

* value: the mean of the non-empty values, per isotope (and per amino acid,
  ``d15N_Glu``/``d15N_Phe``, with their ``sd_*`` alike; no ``rep_sd_*`` and
  no disagreement flag for them);
* ``sd_*``: the SD of that mean, the larger of the propagated analytical
  SD, sqrt(sum sd_i²)/n, and the empirical standard error s/sqrt(n), so
  that replicates that disagree do not claim more precision than they show;
* ``rep_sd_*``: the sample SD of the replicate values (NaN for one value);
* ``pct_C``, ``pct_N``, ``cn_ratio``: the mean; other columns: the first row's;
* every row gets the ledger note ``"combined with N replicate(s)"``;
* when the range of a set exceeds 3·√2·SD (SD = root-mean-square analytical
  SD of the set; for two values that is a 3-sigma test of their
  difference, common practice), every row of the set is flagged.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from nstress.errors import InputError

DUPLICATE = "duplicate row (same sample_id and values as an earlier row)"
DISAGREE = "replicates disagree beyond analytical precision (range > 3·√2·SD)"
CONFLICT_COLUMNS = (
    "individual",
    "tissue",
    "group",
    "d15N",
    "d13C",
    "sd_d15N",
    "sd_d13C",
    "d15N_Glu",
    "d15N_Phe",
    "sd_d15N_Glu",
    "sd_d15N_Phe",
    "position_mm",
    "segment_length_mm",
    "collected",
    "date",
    "pct_C",
    "pct_N",
    "cn_ratio",
    "lipid_extracted",
    "growth_mm_per_day",
    "growth_sd_mm_per_day",
    "mass_kg",
)
_MEANED = ("pct_C", "pct_N", "cn_ratio")
_AMINO = ("d15N_Glu", "d15N_Phe")
_ERROR_LIMIT = 20


def combined_reason(n_others: int) -> str:
    """Return the ledger note for a row combined with ``n_others`` other rows."""
    return f"combined with {n_others} replicate(s)"


def find_duplicates(frame: pd.DataFrame) -> tuple[list[InputError], np.ndarray]:
    """Find rows sharing a ``sample_id``.

    Parameters
    ----------
    frame
        Typed rows (all files), in key order, with ``key``, ``source_file``,
        ``source_row``, ``is_reference``, ``sample_id`` and the canonical columns.

    Returns
    -------
    errors
        One error per ``sample_id`` whose rows conflict.
    duplicate_keys
        Keys of later exact copies, to be excluded.
    """
    sid = frame["sample_id"]
    cand = np.flatnonzero(((sid != "") & ~frame["is_reference"]).to_numpy(dtype=bool))
    # as sid.iloc[cand].duplicated(keep=False), by counting codes; only the rows whose
    # sample_id repeats are then taken out of the (large) table
    codes = pd.factorize(sid)[0][cand]
    repeats = np.bincount(codes)[codes] > 1 if codes.size else np.zeros(0, dtype=bool)
    sub = frame.iloc[cand[repeats]]
    if sub.empty:
        return [], np.array([], dtype=np.int64)
    cols = [c for c in CONFLICT_COLUMNS if c in sub.columns]
    differs = sub.groupby("sample_id", sort=False)[cols].nunique(dropna=False).gt(1)
    bad = differs.any(axis=1)
    errors: list[InputError] = []
    bad_ids = bad.index[bad.to_numpy()]
    for sid in bad_ids[:_ERROR_LIMIT]:
        rows = sub[sub["sample_id"] == sid]
        first = rows.iloc[0]
        cols_bad = [c for c in cols if differs.at[sid, c]]
        for _, other in rows.iloc[1:].iterrows():
            diff = [c for c in cols_bad if not _same(first[c], other[c])]
            if not diff:
                continue
            where = f"row {first['source_row']}"
            if first["source_file"] != other["source_file"]:
                where += f" of {first['source_file']}"
            errors.append(
                InputError(
                    f"sample_id also on {where} with different {', '.join(diff)}: a duplicated "
                    "row with conflicting values; expected one row per sample_id (give replicate "
                    "analyses their own sample_id, or remove the wrong row)",
                    file=str(other["source_file"]),
                    row=int(other["source_row"]),
                    column="sample_id",
                    value=str(sid),
                )
            )
    if len(bad_ids) > _ERROR_LIMIT:
        errors.append(
            InputError(f"{len(bad_ids) - _ERROR_LIMIT} more sample_id value(s) on conflicting rows")
        )
    ok = sub[~sub["sample_id"].map(bad).to_numpy(dtype=bool)]
    later = ok["key"].to_numpy()[ok["sample_id"].duplicated(keep="first").to_numpy()]
    return errors, later.astype(np.int64)


def _same(a: object, b: object) -> bool:
    if pd.isna(a) and pd.isna(b):  # type: ignore[arg-type]
        return True
    if pd.isna(a) or pd.isna(b):  # type: ignore[arg-type]
        return False
    return bool(a == b)


def combine_replicates(
    rows: pd.DataFrame, *, keep: np.ndarray | None = None
) -> tuple[pd.DataFrame, list[tuple[np.ndarray, str]], list[tuple[np.ndarray, str]]]:
    """Combine replicate analyses into one sample each.

    Parameters
    ----------
    rows
        Typed, non-excluded sample rows (no reference material), in key order.
    keep
        Boolean mask: combine only these rows (as ``rows[keep]``, without
        copying the whole table first). Default: every row.

    Returns
    -------
    samples
        One row per sample (the first row of each replicate set, in key
        order) with ``keys``, ``n_replicates``, ``rep_sd_d15N`` and
        ``rep_sd_d13C`` added and the combined values filled in.
    notes
        ``(keys, reason)`` ledger notes.
    flags
        ``(keys, reason)`` ledger flags.
    """
    pos = np.arange(len(rows)) if keep is None else np.flatnonzero(keep)
    n = pos.size
    gid = _replicate_groups(rows, pos)
    first = ~pd.Series(gid).duplicated().to_numpy() if n else np.zeros(0, bool)
    if first.all() and n == len(rows):
        out = rows.reset_index(drop=True)
    else:
        out = rows.iloc[pos[first]].reset_index(drop=True)  # one copy of the kept rows
    out_g = gid[first]
    keys = out["key"].to_numpy()
    out["keys"] = pd.Series(list(zip(keys.tolist(), strict=True)), dtype=object)
    out["n_replicates"] = 1
    out["rep_sd_d15N"] = np.nan
    out["rep_sd_d13C"] = np.nan
    if first.all():
        return out, [], []

    sizes = np.bincount(gid)
    multi = sizes[gid] > 1
    amino = [c for c in _AMINO if c in rows.columns and f"sd_{c}" in rows.columns]
    cols = ["key", "d15N", "d13C", "sd_d15N", "sd_d13C", *_MEANED]
    cols += [x for c in amino for x in (c, f"sd_{c}")]
    sub = rows[cols].iloc[pos[multi]]
    g = gid[multi]
    at = np.flatnonzero(sizes[out_g] > 1)  # output rows that are combined
    ids = out_g[at]

    def put(column: str, values: pd.Series) -> None:
        col = out[column].to_numpy(copy=True)
        col[at] = values.reindex(ids).to_numpy()
        out[column] = col

    put("keys", _key_tuples(sub["key"].to_numpy(), g))
    put("n_replicates", pd.Series(sizes[ids], index=ids))
    disagree = pd.Series(False, index=np.unique(g))
    for iso in ("d15N", "d13C", *amino):
        v = sub[iso]
        has = v.notna()
        var = (sub[f"sd_{iso}"] ** 2).where(has)
        vg, varg = v.groupby(g), var.groupby(g)
        count = has.groupby(g).sum()
        spread = vg.std(ddof=1)
        prop = np.sqrt(varg.sum()) / count
        first_sd = sub[f"sd_{iso}"].groupby(g).first()
        sd = np.fmax(prop, spread / np.sqrt(count)).where(count > 0, first_sd)
        put(iso, vg.mean())
        put(f"sd_{iso}", sd)
        if iso in _AMINO:
            continue
        limit = 3.0 * np.sqrt(2.0) * np.sqrt(varg.mean())
        disagree |= (count >= 2) & ((vg.max() - vg.min()) > limit)
        put(f"rep_sd_{iso}", spread)
    for c in _MEANED:
        put(c, sub[c].groupby(g).mean())
    sub_keys = sub["key"].to_numpy()
    size_of_row = sizes[g]
    notes = [
        (sub_keys[size_of_row == k], combined_reason(k - 1))
        for k in np.unique(size_of_row).tolist()
    ]
    bad_rows = disagree.reindex(g).to_numpy(dtype=bool)
    flags = [(sub_keys[bad_rows], DISAGREE)] if bad_rows.any() else []
    return out, notes, flags


def _key_tuples(keys: np.ndarray, g: np.ndarray) -> pd.Series:
    """Tuple of the (ascending) keys of each group, indexed by group id."""
    order = np.argsort(g, kind="stable")  # rows come in key order: stable keeps it per group
    gs, ks = g[order], keys[order].tolist()
    ids, starts = np.unique(gs, return_index=True)
    ends = np.append(starts[1:], len(gs)).tolist()
    tuples = [tuple(ks[a:b]) for a, b in zip(starts.tolist(), ends, strict=True)]
    return pd.Series(tuples, index=ids, dtype=object)


def _replicate_groups(rows: pd.DataFrame, pos: np.ndarray) -> np.ndarray:
    """Integer id of each row's replicate set (individual, tissue, time, lipid state).

    Only the rows at positions ``pos`` are grouped.
    """
    if not pos.size:
        return np.zeros(0, dtype=np.int64)
    cols = ["individual", "tissue", "tissue_class", "position_mm", "collected", "date"]
    rows = rows[cols + ["lipid_extracted"]]
    if pos.size != len(rows):
        rows = rows.iloc[pos]
    ker = (rows["tissue_class"] == "keratin").to_numpy()
    keys = pd.DataFrame(
        {
            "i": rows["individual"],
            "t": rows["tissue"],
            "p": rows["position_mm"].where(ker),
            "c": rows["collected"].where(ker),
            "d": rows["date"].where(~ker),
            "l": rows["lipid_extracted"].astype("Int8").fillna(-1),
        }
    )
    return keys.groupby(list(keys.columns), sort=False, dropna=False).ngroup().to_numpy()

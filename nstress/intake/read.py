"""Read sample tables into one checked, replicate-combined :class:`Intake`.

The steps, each in its own module:

1. :mod:`nstress.intake.files` -- bytes to stripped strings, headers to
   canonical names (aliases listed in :mod:`nstress.intake.columns`);
2. :mod:`nstress.intake.validate` -- types, required values, plausibility;
3. :mod:`nstress.intake.replicates` -- duplicated ``sample_id`` rows and
   replicate analyses.

Every input row gets a ledger key (its 0-based position in the concatenated
input) and ends up in :attr:`Intake.ledger` as used, flagged or excluded.
"""

from __future__ import annotations

import gc
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from os import PathLike

import numpy as np
import pandas as pd

from nstress.errors import ConfigError, InputError, InputErrors
from nstress.intake.files import read_raw
from nstress.intake.ledger import Ledger
from nstress.intake.replicates import DUPLICATE, combine_replicates, find_duplicates
from nstress.intake.validate import Checked, check_table
from nstress.tissues import DEFAULT_TISSUES, Tissue

SAMPLE_COLUMNS = [
    "key",
    "keys",
    "source_file",
    "source_row",
    "individual",
    "tissue",
    "tissue_class",
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
    "sample_id",
    "pct_C",
    "pct_N",
    "cn_ratio",
    "lipid_extracted",
    "growth_mm_per_day",
    "growth_sd_mm_per_day",
    "mass_kg",
    "n_replicates",
    "rep_sd_d15N",
    "rep_sd_d13C",
    "analysis_batch",
]
REFERENCE_COLUMNS = [
    "key",
    "source_file",
    "source_row",
    "reference_material",
    "reference_role",
    "analysis_batch",
    "d15N",
    "d13C",
    "sd_d15N",
    "sd_d13C",
    "sample_id",
    "date",
]

PathArg = str | PathLike[str]


@dataclass
class Intake:
    """Checked input of one run.

    Attributes
    ----------
    samples
        One row per sample (replicates combined), rows not excluded only;
        columns :data:`SAMPLE_COLUMNS` then extra input columns.
    references
        Reference-material rows (:data:`REFERENCE_COLUMNS`), may be empty.
    ledger
        Accounting of every input row of every file.
    sources
        ``{"path", "sha256", "rows"}`` per input file, in input order.
    notes
        File-level remarks (encoding fallback, a missing isotope column ...).
    tissues
        The tissue registry used.
    """

    samples: pd.DataFrame
    references: pd.DataFrame
    ledger: Ledger
    sources: list[dict[str, object]]
    notes: list[str] = field(default_factory=list)
    tissues: dict[str, Tissue] = field(default_factory=dict)


def read_samples(
    paths: PathArg | Sequence[PathArg],
    tissues: dict[str, Tissue] | None = None,
    *,
    default_sd: float = 0.15,
) -> Intake:
    """Read, check and combine one or more sample tables.

    Parameters
    ----------
    paths
        One path or a list of paths (``.csv``/``.tsv``/``.txt``; ``.parquet``
        with pyarrow; ``.xlsx`` with openpyxl).
    tissues
        Tissue registry, name -> :class:`~nstress.tissues.Tissue`
        (default :data:`nstress.tissues.DEFAULT_TISSUES`). A tissue's class
        (keratin or blood) decides which columns its rows need.
    default_sd
        Analytical SD (‰, 1 SD) for empty ``sd_d15N``/``sd_d13C`` cells.

    Returns
    -------
    Intake

    Raises
    ------
    InputError
        One problem (file, row, column, value and what was expected).
    InputErrors
        Several problems, gathered over all files.
    ConfigError
        ``default_sd`` is not a positive number.

    Examples
    --------
    >>> intake = read_samples("whiskers.csv")  # doctest: +SKIP
    >>> intake.samples[["individual", "position_mm", "d15N"]].head()  # doctest: +SKIP
    """
    if not (isinstance(default_sd, int | float) and math.isfinite(default_sd) and default_sd > 0):
        raise ConfigError(f"default_sd must be a positive number of per mil, got {default_sd!r}")
    registry = {k.strip().lower(): v for k, v in (tissues or DEFAULT_TISSUES).items()}
    items = [paths] if isinstance(paths, str | PathLike) else list(paths)
    if not items:
        raise InputError("no input file given; expected at least one sample table")

    errors: list[InputError] = []
    checked: list[Checked] = []
    sources: list[dict[str, object]] = []
    seen: dict[str, str] = {}
    key0 = 0
    for item in items:
        try:
            raw = read_raw(item)
        except InputErrors as exc:
            errors.extend(exc.errors)
            continue
        except InputError as exc:
            errors.append(exc)
            continue
        if raw.sha256 in seen:
            errors.append(
                InputError(f"same content as {seen[raw.sha256]} (file given twice?)", file=raw.path)
            )
            continue
        seen[raw.sha256] = raw.path
        chk = check_table(raw, registry, float(default_sd), key0)
        errors.extend(chk.errors)
        checked.append(chk)
        sources.append({"path": raw.path, "sha256": raw.sha256, "rows": len(raw.frame)})
        key0 += len(raw.frame)
    if errors:
        raise _bundle(errors)

    frame = _concat([c.frame for c in checked])
    dup_errors, dup_keys = find_duplicates(frame)
    if dup_errors:
        raise _bundle(dup_errors)
    extras = list(dict.fromkeys(e for c in checked for e in c.extras))
    for e in extras:
        frame[e] = frame[e].fillna("").astype(str)

    ledger_frame = _concat([c.ledger_frame for c in checked], keep_index=True).fillna("")
    gc_was_on = gc.isenabled()
    gc.disable()  # the ledger makes a list per row; cyclic GC passes over them cost seconds
    try:
        ledger = Ledger(ledger_frame)
        excluded = np.zeros(len(frame), dtype=bool)
        for chk in checked:
            k0 = int(chk.frame["key"].iloc[0]) if len(chk.frame) else 0
            for action, mask, reason in chk.marks:
                keys = np.flatnonzero(mask) + k0
                getattr(ledger, action)(keys, reason)
                if action == "exclude":
                    excluded[keys] = True
        ledger.exclude(dup_keys, DUPLICATE)
        excluded[dup_keys] = True

        ref = frame["is_reference"].to_numpy(dtype=bool)
        references = frame.loc[ref & ~excluded, REFERENCE_COLUMNS].reset_index(drop=True)
        keep = ~ref & ~excluded
        samples, notes, flags = combine_replicates(frame, keep=keep)
        for keys, reason in notes:
            ledger.note(keys, reason)
        for keys, reason in flags:
            ledger.flag(keys, reason)
    finally:
        if gc_was_on:
            gc.enable()
    samples = samples[SAMPLE_COLUMNS + extras].reset_index(drop=True)
    samples["n_replicates"] = samples["n_replicates"].astype(np.int64)
    for c in (
        "source_file",
        "individual",
        "tissue",
        "tissue_class",
        "group",
        "sample_id",
        "analysis_batch",
    ):
        samples[c] = samples[c].astype(str)
    return Intake(
        samples=samples,
        references=references,
        ledger=ledger,
        sources=sources,
        notes=[n for c in checked for n in c.notes],
        tissues=registry,
    )


def _concat(frames: list[pd.DataFrame], keep_index: bool = False) -> pd.DataFrame:
    frames = [f for f in frames if len(f.columns)]
    if len(frames) == 1:
        return frames[0]
    return pd.concat(frames, ignore_index=not keep_index, sort=False)


def _bundle(errors: list[InputError]) -> InputError:
    return errors[0] if len(errors) == 1 else InputErrors(errors)

"""δ13C lipid normalisation from C:N, per tissue.

A row is normalised only when all hold:

* it was not lipid-extracted (``lipid_extracted`` is False or unknown);
* its C:N is above the tissue's ``lipid_cn_threshold``;
* the tissue's method (``Tissue.lipid_method``, or the ``lipid`` config
  override) is not ``"none"``.

Nothing happens silently: each normalised row gets a ledger note naming
the method and threshold, its QC text gives its C:N and the shift, and
the report counts rows per tissue. Rows of unknown extraction status
whose C:N suggests lipid but whose tissue has no method get a note too.

Caution: in a fasting animal plasma lipid and plasma C:N rise while
plasma δ13C falls (Cherel et al. 2005); normalising blood δ13C by C:N can
remove part of the very signal under study. Keep the raw value
(``d13C_raw``) and C:N in any analysis. Chemical lipid extraction, the
alternative, uses hazardous solvents (e.g. chloroform:methanol): follow
your institution's chemical-safety rules.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd

from nstress._chem_equations import cn_mass_from_atomic, lipid_kiljunen2006, lipid_post2007
from nstress.intake.ledger import Ledger
from nstress.prep.qc import QCLog, RowKeys, ledger_keys, numeric, tissue_names
from nstress.tissues import Tissue

METHODS: dict[str, Callable[[np.ndarray, np.ndarray], np.ndarray] | None] = {
    "none": None,
    "post2007": lipid_post2007,
    "kiljunen2006": lipid_kiljunen2006,
}
"""Lipid methods by name; ``None`` = no normalisation."""

METHOD_SOURCES = {
    "none": "",
    "post2007": "Post et al. 2007 (coefficients from memory)",
    "kiljunen2006": "McConnaughey & McRoy 1979 with Kiljunen et al. 2006 constants (from memory)",
}

CN_BASES = ("atomic", "mass")


def extraction_status(samples: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Return boolean arrays ``(extracted, unknown)`` from ``lipid_extracted``.

    A missing column means unknown for every row.
    """
    n = len(samples)
    if "lipid_extracted" not in samples.columns:
        return np.zeros(n, dtype=bool), np.ones(n, dtype=bool)
    s = samples["lipid_extracted"]
    try:
        b = s.astype("boolean")
    except (TypeError, ValueError):
        b = s.map({True: True, False: False}).astype("boolean")
    unknown = b.isna().to_numpy()
    extracted = b.fillna(False).to_numpy(dtype=bool)
    return extracted, unknown


def normalise_lipid(
    samples: pd.DataFrame,
    tissues: Mapping[str, Tissue],
    ledger: Ledger,
    qc: QCLog,
    *,
    methods: Mapping[str, str],
    cn_basis: str = "atomic",
    row_keys: RowKeys | None = None,
) -> dict[str, Any]:
    """Apply δ13C lipid normalisation in place where the rules allow it.

    Sets ``d13C_raw`` (δ13C before lipid normalisation, after any scale
    normalisation), ``d13C`` (normalised where applied, else the raw value)
    and ``lipid_correction`` (``""`` or the method name).

    Parameters
    ----------
    samples
        Sample table with ``tissue``, ``d13C``, ``cn_ratio`` (atomic) and
        optionally ``lipid_extracted``.
    tissues
        Tissue registry (method and threshold per tissue).
    ledger
        Ledger to note corrections in.
    qc
        Per-row QC remarks.
    methods
        Per-tissue method overrides (``{"plasma": "post2007"}``).
    cn_basis
        ``"atomic"`` (default): the equations receive the atomic C:N;
        ``"mass"``: they receive the mass C:N (atomic × 12.011/14.007), in
        case the published calibrations prove to be mass-based. The
        threshold is always compared with the atomic C:N.
    row_keys
        :class:`~nstress.prep.qc.RowKeys` of ``samples`` when the caller has them.

    Returns
    -------
    dict
        Per tissue: method, threshold, and counts of corrected,
        extracted, below-threshold, unknown-C:N and "suggests lipid" rows,
        with the mean shift of the corrected rows.
    """
    names = tissue_names(samples)
    d13 = numeric(samples, "d13C")
    cn = numeric(samples, "cn_ratio")
    cn_eq = cn_mass_from_atomic(cn) if cn_basis == "mass" else cn
    extracted, unknown = extraction_status(samples)
    has_d13 = np.isfinite(d13)
    has_cn = np.isfinite(cn)
    out_d13 = d13.copy()
    label = np.full(len(samples), "", dtype=object)
    keys_of = row_keys.of if row_keys is not None else (lambda m: ledger_keys(samples, m))
    per_tissue: dict[str, Any] = {}
    for name in sorted(set(names.tolist())):
        tissue = tissues.get(name)
        if tissue is None:
            continue
        method = methods.get(name, tissue.lipid_method)
        func = METHODS[method]
        thr = float(tissue.lipid_cn_threshold)
        m = (names == name) & has_d13
        with np.errstate(invalid="ignore"):
            high = m & has_cn & (cn > thr)
        apply = high & ~extracted & (func is not None)
        if func is not None and apply.any():
            out_d13[apply] = func(d13[apply], cn_eq[apply])
            label[apply] = method
            ledger.note(
                keys_of(apply),
                f"δ13C lipid-normalised ({method}, {METHOD_SOURCES[method]}, "
                f"{cn_basis} C:N > {thr:g})",
            )
            qc.add(
                apply,
                f"δ13C lipid-normalised ({method}) at C:N ",
                cn,
                ": ",
                (out_d13 - d13, "%+.2f"),
                " ‰",
            )
        suggests = high & unknown & (func is None)
        ledger.note(
            keys_of(suggests),
            f"C:N > {thr:g} suggests lipid, δ13C not lipid-normalised "
            f"(lipid_extracted unknown, {name} lipid method 'none')",
        )
        qc.add(suggests, "C:N suggests lipid, not corrected")
        cn_unknown = m & ~has_cn & ~extracted & (func is not None)
        ledger.note(
            keys_of(cn_unknown),
            f"C:N unknown: δ13C not lipid-normalised ({name} method {method})",
        )
        shift = out_d13[apply] - d13[apply]
        per_tissue[name] = {
            "method": method,
            "source": METHOD_SOURCES[method],
            "cn_threshold": thr,
            "n_rows_with_d13C": int(m.sum()),
            "n_corrected": int(apply.sum()),
            "mean_shift_d13C": float(shift.mean()) if shift.size else None,
            "n_extracted": int((m & extracted).sum()),
            "n_at_or_below_threshold": int((m & has_cn & ~high).sum()),
            "n_unknown_cn": int((m & ~has_cn).sum()),
            "n_suggests_lipid_not_corrected": int(suggests.sum()),
            "n_not_extracted_high_cn_method_none": int((high & ~extracted & ~unknown).sum())
            if func is None
            else 0,
        }
    samples["d13C_raw"] = d13
    samples["d13C"] = out_d13
    samples["lipid_correction"] = label
    return {
        "cn_basis": cn_basis,
        "tissues": per_tissue,
        "n_corrected": int(sum(v["n_corrected"] for v in per_tissue.values())),
        "n_suggests_lipid_not_corrected": int(
            sum(v["n_suggests_lipid_not_corrected"] for v in per_tissue.values())
        ),
    }

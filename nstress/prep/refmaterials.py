"""Built-in table of isotopic reference materials (RMs) and their assigned δ values.

Values are ‰: δ13C vs VPDB, δ15N vs AIR. Each value names its source;
values recalled but not checked against the source say "from memory"
and are flagged ``verified=False``. Prefer verified materials as anchors.

Names are matched without regard to case, spaces, hyphens or
underscores (``"usgs 41A"`` = ``"USGS41a"``, ``"IAEA N2"`` = ``"IAEA-N-2"``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from nstress.errors import InputError, InputErrors

_CIAAW_N = "IUPAC-CIAAW table of δ15N reference materials (ciaaw.org)"


@dataclass(frozen=True)
class ReferenceMaterial:
    """One reference material.

    Parameters
    ----------
    name
        Display name (``"USGS41a"``).
    material
        What it is (``"L-glutamic acid"``).
    d13C, d15N
        Assigned δ (‰), NaN where the material is not a reference for that isotope.
    sources
        Source of each value, by isotope (``{"d13C": "...", "d15N": "..."}``).
    verified
        Isotopes whose value was checked against its source (the others are from memory).
    """

    name: str
    material: str
    d13C: float = np.nan
    d15N: float = np.nan
    sources: dict[str, str] = field(default_factory=dict)
    verified: tuple[str, ...] = ()

    def value(self, isotope: str) -> float:
        """Return the assigned δ for ``"d13C"`` or ``"d15N"`` (NaN if none)."""
        return float(getattr(self, isotope))

    def to_dict(self) -> dict[str, object]:
        """Return the material as plain, JSON-serialisable data."""
        return {
            "name": self.name,
            "material": self.material,
            "d13C": None if np.isnan(self.d13C) else self.d13C,
            "d15N": None if np.isnan(self.d15N) else self.d15N,
            "sources": dict(self.sources),
            "verified": list(self.verified),
        }


_TABLE = [
    ReferenceMaterial(
        "USGS40",
        "L-glutamic acid",
        d13C=-26.39,
        d15N=-4.52,
        sources={
            "d13C": "Qi et al. 2003 (−26.24 ‰ there); −26.39 ‰ on the 2006 VPDB scale "
            "(LSVEC −46.6 ‰) as restated by Qi et al. 2016",
            "d15N": "Qi et al. 2003",
        },
        verified=("d13C", "d15N"),
    ),
    ReferenceMaterial(
        "USGS41a",
        "L-glutamic acid",
        d13C=36.55,
        d15N=47.55,
        sources={"d13C": "Qi et al. 2016", "d15N": "Qi et al. 2016"},
        verified=("d13C", "d15N"),
    ),
    ReferenceMaterial(
        "USGS41",
        "L-glutamic acid (exhausted; replaced by USGS41a)",
        d13C=37.63,
        d15N=47.57,
        sources={
            "d13C": "+37.63 ‰ on the 2006 VPDB scale (from memory; +37.76 ‰ in Qi et al. 2003)",
            "d15N": "Qi et al. 2003",
        },
        verified=("d15N",),
    ),
    ReferenceMaterial(
        "IAEA-N-1",
        "ammonium sulfate",
        d15N=0.43,
        sources={"d15N": f"IAEA reference sheet; {_CIAAW_N}"},
        verified=("d15N",),
    ),
    ReferenceMaterial(
        "IAEA-N-2",
        "ammonium sulfate",
        d15N=20.41,
        sources={"d15N": _CIAAW_N},
        verified=("d15N",),
    ),
    ReferenceMaterial(
        "USGS25",
        "ammonium sulfate",
        d15N=-30.41,
        sources={"d15N": _CIAAW_N},
        verified=("d15N",),
    ),
    ReferenceMaterial(
        "USGS24",
        "graphite",
        d13C=-16.05,
        sources={"d13C": "from memory"},
    ),
    ReferenceMaterial(
        "IAEA-CH-6",
        "sucrose",
        d13C=-10.45,
        sources={"d13C": "from memory"},
    ),
    ReferenceMaterial(
        "IAEA-600",
        "caffeine",
        d13C=-27.77,
        d15N=1.0,
        sources={"d13C": "from memory", "d15N": "from memory"},
    ),
]


def _canon(name: object) -> str:
    return re.sub(r"[\s_\-]+", "", str(name)).upper()


REFERENCE_MATERIALS: dict[str, ReferenceMaterial] = {rm.name: rm for rm in _TABLE}
"""Display name -> :class:`ReferenceMaterial`."""

_BY_CANON = {_canon(rm.name): rm for rm in _TABLE}

ROLES = ("anchor", "check", "")
"""Accepted values of ``reference_role`` (empty: let nstress choose)."""


def known_names() -> list[str]:
    """Return the display names of the built-in reference materials."""
    return list(REFERENCE_MATERIALS)


def lookup(name: str) -> ReferenceMaterial | None:
    """Return the reference material called ``name`` (spelling-tolerant), or ``None``."""
    return _BY_CANON.get(_canon(name))


def resolve_references(references: pd.DataFrame | None) -> pd.DataFrame:
    """Validate reference-material rows and attach the assigned values.

    Parameters
    ----------
    references
        Reference rows as read by intake: ``key``, ``source_file``,
        ``source_row``, ``reference_material``, ``reference_role``,
        ``analysis_batch``, ``d15N``, ``d13C``. ``None`` or empty: no rows.

    Returns
    -------
    pandas.DataFrame
        A copy with ``rm`` (display name), ``role`` (``anchor``/``check``/``""``),
        ``batch`` (text, ``""`` when not given), ``certified_d15N`` and
        ``certified_d13C`` (NaN where the RM has no value for that isotope).

    Raises
    ------
    InputError, InputErrors
        For an unknown reference-material name or an unknown role; the
        message names the file, row, column and value and lists what is
        accepted.
    """
    cols = ["key", "source_file", "source_row", "reference_material", "d15N", "d13C"]
    if references is None or len(references) == 0:
        out = pd.DataFrame({c: pd.Series(dtype=float) for c in cols})
        for c in ("rm", "role", "batch"):
            out[c] = pd.Series(dtype=object)
        out["certified_d15N"] = pd.Series(dtype=float)
        out["certified_d13C"] = pd.Series(dtype=float)
        return out
    ref = references.reset_index(drop=True)
    n = len(ref)
    for c in ("d15N", "d13C"):
        ref[c] = pd.to_numeric(ref[c], errors="coerce") if c in ref else np.nan
    names = ref["reference_material"].astype(object).where(ref["reference_material"].notna(), "")
    canon = names.map(_canon)
    found = canon.map(_BY_CANON)
    roles_in = (
        ref["reference_role"].astype(object).where(ref["reference_role"].notna(), "")
        if "reference_role" in ref
        else pd.Series([""] * n, index=ref.index, dtype=object)
    )
    roles = roles_in.map(lambda v: str(v).strip().lower())
    errors: list[InputError] = []
    files = ref["source_file"].to_numpy() if "source_file" in ref else np.full(n, None)
    rows = ref["source_row"].to_numpy() if "source_row" in ref else np.full(n, None)
    bad_rm = np.flatnonzero(found.isna().to_numpy())
    for i in bad_rm.tolist():
        errors.append(
            InputError(
                f"unknown reference material; expected one of {known_names()}",
                file=None if files[i] is None else str(files[i]),
                row=None if rows[i] is None else int(rows[i]),
                column="reference_material",
                value=names.iloc[i],
            )
        )
    bad_role = np.flatnonzero(~roles.isin(ROLES).to_numpy())
    for i in bad_role.tolist():
        errors.append(
            InputError(
                "unknown reference role; expected 'anchor', 'check' or empty",
                file=None if files[i] is None else str(files[i]),
                row=None if rows[i] is None else int(rows[i]),
                column="reference_role",
                value=roles_in.iloc[i],
            )
        )
    if errors:
        errors.sort(key=lambda e: (e.file or "", e.row or 0))
        raise errors[0] if len(errors) == 1 else InputErrors(errors)
    ref["rm"] = found.map(lambda rm: rm.name).astype(object)
    ref["role"] = roles.astype(object)
    if "analysis_batch" in ref:
        b = ref["analysis_batch"].astype(object).where(ref["analysis_batch"].notna(), "")
        ref["batch"] = b.map(lambda v: str(v).strip()).astype(object)
    else:
        ref["batch"] = ""
    ref["certified_d15N"] = found.map(lambda rm: rm.d15N).astype(float)
    ref["certified_d13C"] = found.map(lambda rm: rm.d13C).astype(float)
    return ref

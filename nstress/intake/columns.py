"""Column schema of the sample table: canonical names, kinds, header aliases.

Header matching
---------------
A header is reduced to a *compact key* before it is looked up:

1. Unicode NFKC (so ``δ¹⁵N`` becomes ``δ15N``), surrounding spaces removed,
   lower-cased (``Δ`` folds to ``δ`` like any other capital), ``δ`` -> ``d``.
2. A bracketed part that only names the δ scale or unit -- ``(‰)``,
   ``(o/oo)``, ``[permil]``, ``(per mil)``, ``(‰ vs AIR)``, ``(VPDB)`` --
   is dropped; any other bracketed part is kept as text, so ``position (mm)``
   reads as ``position mm``, while ``Body Mass (g)`` is *not* taken for
   ``mass_kg`` (wrong unit: it stays an extra column).
3. ``%`` reads as ``pct``; ``‰``, ``o/oo``, ``permil``, ``per mil``, ``vs AIR``
   and ``vs VPDB`` outside brackets are dropped; then everything that is not
   a letter or a digit is removed.

The compact keys accepted for each canonical column (:data:`ALIASES`):

==========================  ==============================================================
column                      accepted headers (compact key)
==========================  ==============================================================
``individual``              individual, individualid, indiv, ind, animal, animalid
``tissue``                  tissue, tissuetype
``d15N``                    d15n, delta15n, d15nair  (``δ15N``, ``d15N (‰)``, ``Delta 15 N (o/oo)``)
``d13C``                    d13c, delta13c, d13cvpdb
``position_mm``             positionmm, position, posmm, distancemm, distancefromrootmm,
                            distancefrombasemm, midpointmm, segmentmidpointmm
``segment_length_mm``       segmentlengthmm, segmentlength, seglengthmm, seglength
``collected``               collected, collecteddate, collectiondate, datecollected
``date``                    date, sampledate, datesampled, samplingdate, drawdate, datedrawn
``group``                   group, groupid, poolinggroup
``sample_id``               sampleid, sample, labid, labcode, samplecode, samplename
``pct_C`` / ``pct_N``       pctc, cpct, percentc, cpercent, wtpctc, pctcarbon (N likewise)
``cn_ratio``                cnratio, cn, ratiocn, cnatomic, atomiccn  (so ``C:N``, ``C/N``)
``lipid_extracted``         lipidextracted, lipidextraction, lipidextract, delipidated,
                            lipidremoved
``sd_d15N`` / ``sd_d13C``   sdd15n, d15nsd, sd15n (C likewise)
``d15N_Glu``                d15nglu, d15nglx, d15nglutamicacid, d15nglutamate, glud15n
                            (``δ15N Glu (‰ vs AIR)``); Glx: Glu plus Gln, which acid
                            hydrolysis turns into Glu (common practice)
``d15N_Phe``                d15nphe, d15nphenylalanine, phed15n
``sd_d15N_Glu``             sdd15nglu, d15nglusd, sdglu, sdd15nglx (Phe likewise)
``growth_mm_per_day``       growthmmperday, growthmmday, growthmmd, growthratemmperday,
                            growthratemmday, growthratemmd
``growth_sd_mm_per_day``    growthsdmmperday, growthsdmmday, growthsdmmd, growthratesdmmperday
``mass_kg``                 masskg, bodymasskg, weightkg, bodyweightkg
``reference_material``      referencematerial, refmaterial, referencestandard
``reference_role``          referencerole, refrole
``analysis_batch``          analysisbatch, batch, batchid, analysisrun, irmsrun
==========================  ==============================================================

Any other header is an *extra* column, carried through untouched under its
header as written (spaces around it removed). An extra column whose name
would clash with a column nstress adds (``key``, ``status``, ``reason`` ...)
is renamed ``input_<name>``.

Tissue values are lower-cased, spaces and hyphens become ``_``, and a few
plural or long forms map to registry names (:data:`TISSUE_ALIASES`, e.g.
``red blood cells`` -> ``rbc``, ``vibrissae`` -> ``whisker``) when the alias
target is a registered tissue and the value itself is not.
"""

from __future__ import annotations

import re
import unicodedata

TEXT = (
    "individual",
    "tissue",
    "group",
    "sample_id",
    "reference_material",
    "reference_role",
    "analysis_batch",
)
NUMERIC = (
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
    "pct_C",
    "pct_N",
    "cn_ratio",
    "growth_mm_per_day",
    "growth_sd_mm_per_day",
    "mass_kg",
)
DATES = ("collected", "date")
BOOLEANS = ("lipid_extracted",)
CANONICAL = TEXT + NUMERIC + DATES + BOOLEANS
ISOTOPES = ("d15N", "d13C")
AMINO_ACIDS = ("d15N_Glu", "d15N_Phe")
"""Compound-specific δ15N of glutamic acid and phenylalanine (‰ vs AIR), optional."""

ALIASES: dict[str, tuple[str, ...]] = {
    "individual": ("individual", "individualid", "indiv", "ind", "animal", "animalid"),
    "tissue": ("tissue", "tissuetype"),
    "d15N": ("d15n", "delta15n", "d15nair"),
    "d13C": ("d13c", "delta13c", "d13cvpdb"),
    "position_mm": (
        "positionmm",
        "position",
        "posmm",
        "distancemm",
        "distancefromrootmm",
        "distancefrombasemm",
        "midpointmm",
        "segmentmidpointmm",
    ),
    "segment_length_mm": ("segmentlengthmm", "segmentlength", "seglengthmm", "seglength"),
    "collected": ("collected", "collecteddate", "collectiondate", "datecollected"),
    "date": ("date", "sampledate", "datesampled", "samplingdate", "drawdate", "datedrawn"),
    "group": ("group", "groupid", "poolinggroup"),
    "sample_id": ("sampleid", "sample", "labid", "labcode", "samplecode", "samplename"),
    "pct_C": ("pctc", "cpct", "percentc", "cpercent", "wtpctc", "pctcarbon"),
    "pct_N": ("pctn", "npct", "percentn", "npercent", "wtpctn", "pctnitrogen"),
    "cn_ratio": ("cnratio", "cn", "ratiocn", "cnatomic", "atomiccn"),
    "lipid_extracted": (
        "lipidextracted",
        "lipidextraction",
        "lipidextract",
        "delipidated",
        "lipidremoved",
    ),
    "sd_d15N": ("sdd15n", "d15nsd", "sd15n"),
    "sd_d13C": ("sdd13c", "d13csd", "sd13c"),
    "d15N_Glu": ("d15nglu", "d15nglx", "d15nglutamicacid", "d15nglutamate", "glud15n"),
    "d15N_Phe": ("d15nphe", "d15nphenylalanine", "phed15n"),
    "sd_d15N_Glu": ("sdd15nglu", "d15nglusd", "sdglu", "sdd15nglx"),
    "sd_d15N_Phe": ("sdd15nphe", "d15nphesd", "sdphe"),
    "growth_mm_per_day": (
        "growthmmperday",
        "growthmmday",
        "growthmmd",
        "growthratemmperday",
        "growthratemmday",
        "growthratemmd",
    ),
    "growth_sd_mm_per_day": (
        "growthsdmmperday",
        "growthsdmmday",
        "growthsdmmd",
        "growthratesdmmperday",
    ),
    "mass_kg": ("masskg", "bodymasskg", "weightkg", "bodyweightkg"),
    "reference_material": ("referencematerial", "refmaterial", "referencestandard"),
    "reference_role": ("referencerole", "refrole"),
    "analysis_batch": ("analysisbatch", "batch", "batchid", "analysisrun", "irmsrun"),
}
_LOOKUP = {alias: canon for canon, aliases in ALIASES.items() for alias in aliases}

RESERVED = (
    "key",
    "keys",
    "source_file",
    "source_row",
    "tissue_class",
    "n_replicates",
    "rep_sd_d15n",
    "rep_sd_d13c",
    "status",
    "reason",
    "is_reference",
)
"""Names nstress adds itself; an extra input column with one of them is renamed."""

MISSING = ("", "na", "n/a", "nan", "null", "-")
"""Cell values read as missing (compared lower-case, after stripping)."""

TRUE_WORDS = ("true", "t", "yes", "y", "1")
FALSE_WORDS = ("false", "f", "no", "n", "0")

TISSUE_ALIASES = {
    "red_blood_cells": "rbc",
    "red_blood_cell": "rbc",
    "red_cells": "rbc",
    "blood_cells": "rbc",
    "erythrocytes": "rbc",
    "rbcs": "rbc",
    "wholeblood": "whole_blood",
    "blood_plasma": "plasma",
    "whiskers": "whisker",
    "vibrissa": "whisker",
    "vibrissae": "whisker",
    "hairs": "hair",
    "feathers": "feather",
    "claws": "claw",
}

_SCALE_WORDS = re.compile(r"‰|o/oo|per\s*mil|permil|\bvs\.?\b|\bair\b|\bvpdb\b|[\s,;:.]")
_BRACKET = re.compile(r"[(\[{]([^)\]}]*)[)\]}]")
_OUTSIDE = re.compile(r"‰|o/oo|\bper\s*mil\b|\bpermil\b|\bvs\.?\s*(?:air|vpdb)\b")


def compact_key(name: str) -> str:
    """Reduce a header to the compact key used for alias lookup.

    Parameters
    ----------
    name
        The header as written.

    Returns
    -------
    str
        Lower-case letters and digits only (see the module docstring).
    """
    s = unicodedata.normalize("NFKC", str(name)).strip().lower().replace("δ", "d")
    s = s.replace("_", " ")

    def _bracket(m: re.Match[str]) -> str:
        inner = m.group(1)
        return " " if not _SCALE_WORDS.sub("", inner) else f" {inner} "

    s = _BRACKET.sub(_bracket, s)
    s = s.replace("%", " pct ")
    s = _OUTSIDE.sub(" ", s)
    return re.sub(r"[^0-9a-z]", "", s)


def canonical_name(name: str) -> str | None:
    """Return the canonical column a header stands for, or ``None`` for an extra column.

    Parameters
    ----------
    name
        The header as written.

    Returns
    -------
    str or None
        One of :data:`CANONICAL`, or ``None``.
    """
    return _LOOKUP.get(compact_key(name))


def normalise_tissue_name(value: str, known: set[str] | frozenset[str]) -> str:
    """Return the registry spelling of a tissue value (see the module docstring).

    Parameters
    ----------
    value
        The value as written (already stripped).
    known
        Registered tissue names.

    Returns
    -------
    str
        The normalised name (not necessarily known).
    """
    s = re.sub(r"[\s\-]+", "_", value.strip().lower())
    if s in known:
        return s
    target = TISSUE_ALIASES.get(s)
    return target if target in known else s

"""Compound-specific amino-acid δ15N: food-web constants and their settings.

Two amino acids are read from the sample table (``d15N_Glu``,
``d15N_Phe``, ‰ vs AIR, with ``sd_d15N_Glu``/``sd_d15N_Phe``):

* glutamic acid, a "trophic" amino acid, is enriched by about 8.0 ‰ per
  trophic level; phenylalanine, a "source" amino acid, by about 0.4 ‰
  (Chikaraishi et al. 2011, Res. Org. Geochem. 27:3, review; verified);
* trophic position TP = (δ15N_Glu − δ15N_Phe − β)/TDF + 1 with TDF = 7.6 ‰
  (Chikaraishi et al. 2009, Limnol. Oceanogr. Methods 7:740; verified) and β
  the Glu − Phe difference of the food web's primary producers
  (:data:`FOOD_WEBS`); the equation is
  :func:`nstress.equations.trophic_position_glu_phe`;
* phenylalanine tracks the food-web baseline: nstress assumes (from memory,
  and common practice in amino-acid isotope ecology) that it is not enriched
  by catabolism either, so that a change of δ15N_Phe within an animal is a
  baseline change, not a fast (see ``DEVELOPERS.md``, "Amino acids").

Nothing here reads files; :func:`resolve_trophic` validates the
``[trophic]`` settings of a workflow file or ``FitConfig.trophic``.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass
from typing import Any

from nstress.errors import ConfigError

AMINO_ACID_COLUMNS = ("d15N_Glu", "d15N_Phe")
"""δ15N of glutamic acid and phenylalanine (‰ vs AIR)."""

AMINO_ACID_SD_COLUMNS = ("sd_d15N_Glu", "sd_d15N_Phe")
"""Their analytical SDs (‰)."""

DEFAULT_AA_SD = 0.5
"""Analytical SD (‰) of an amino-acid δ15N value when the table gives none.

From memory: the reproducibility of amino-acid δ15N by GC-combustion-IRMS is
typically 0.3-1 ‰ (1 SD); 0.5 ‰ is a middle value, not a source's."""

PHE_TDF = 0.4
"""Trophic discrimination of phenylalanine (‰ per trophic level), Chikaraishi et al. 2011
(review; verified). For information: the baseline offsets are differences of Phe within
one animal and tissue, so a constant Phe discrimination cancels from them."""


@dataclass(frozen=True)
class FoodWeb:
    """β and TDF of one kind of food web, with their SDs and sources.

    Attributes
    ----------
    beta, beta_sd
        β = δ15N_Glu − δ15N_Phe of the primary producers (‰) and its SD.
    tdf, tdf_sd
        TDF of Glu − Phe per trophic level (‰) and its SD.
    sources
        Where each value comes from ("verified" or "from memory").
    """

    beta: float
    beta_sd: float
    tdf: float
    tdf_sd: float
    sources: Mapping[str, str]


_TDF_SOURCE = "Chikaraishi et al. 2009 L&O Methods 7:740 (7.6 ‰, verified)"
_TDF_SD_SOURCE = "Chikaraishi et al. 2009 (± 1.2 ‰, from memory)"

FOOD_WEBS: dict[str, FoodWeb] = {
    "aquatic": FoodWeb(
        beta=3.4,
        beta_sd=0.9,
        tdf=7.6,
        tdf_sd=1.2,
        sources={
            "beta": "Chikaraishi et al. 2009 L&O Methods 7:740 (3.4 ‰, verified)",
            "beta_sd": "Chikaraishi et al. 2009 (± 0.9 ‰, from memory)",
            "tdf": _TDF_SOURCE,
            "tdf_sd": _TDF_SD_SOURCE,
        },
    ),
    "terrestrial_c3": FoodWeb(
        beta=-8.4,
        beta_sd=1.6,
        tdf=7.6,
        tdf_sd=1.2,
        sources={
            "beta": "Chikaraishi et al. 2010/2011 (C3 plants, −8.4 ‰; verified in the 2011 review)",
            "beta_sd": "Chikaraishi et al. 2010 (± 1.6 ‰, from memory)",
            "tdf": _TDF_SOURCE,
            "tdf_sd": _TDF_SD_SOURCE,
        },
    ),
    "terrestrial_c4": FoodWeb(
        beta=0.4,
        beta_sd=1.7,
        tdf=7.6,
        tdf_sd=1.2,
        sources={
            "beta": "Chikaraishi et al. 2010/2011 (C4 plants, +0.4 ‰; verified in the 2011 review)",
            "beta_sd": "Chikaraishi et al. 2010 (± 1.7 ‰, from memory)",
            "tdf": _TDF_SOURCE,
            "tdf_sd": _TDF_SD_SOURCE,
        },
    ),
}
"""β and TDF per food web. The 2011 review writes TP = (Glu − Phe + β′)/7.6 + 1 with
β′ = −3.4 (aquatic), +8.4 (C3), −0.4 (C4) ‰: the same values with the sign of β turned."""

DEFAULT_FOOD_WEB = "aquatic"


@dataclass(frozen=True)
class TrophicSettings:
    """Resolved amino-acid settings of a fit.

    Attributes
    ----------
    food_web
        Key of :data:`FOOD_WEBS`.
    beta, beta_sd, tdf, tdf_sd
        Values used (the food web's, or overrides), ‰.
    phe_baseline
        Whether δ15N_Phe sets a per-sample baseline offset of the bulk δ15N
        in the model (default true; false ignores Phe in the model and keeps
        it for the trophic position only).
    phe_mode
        With ``phe_baseline``: ``"interpolate"`` (default; a sample without
        Phe lying between two samples with Phe of the same animal and tissue
        gets the interpolated offset) or ``"measured"`` (only samples with
        Phe get an offset); see :mod:`nstress.prep.amino`.
    """

    food_web: str = DEFAULT_FOOD_WEB
    beta: float = FOOD_WEBS[DEFAULT_FOOD_WEB].beta
    beta_sd: float = FOOD_WEBS[DEFAULT_FOOD_WEB].beta_sd
    tdf: float = FOOD_WEBS[DEFAULT_FOOD_WEB].tdf
    tdf_sd: float = FOOD_WEBS[DEFAULT_FOOD_WEB].tdf_sd
    phe_baseline: bool = True
    phe_mode: str = "interpolate"

    @property
    def baseline_mode(self) -> str:
        """Mode of :func:`nstress.prep.amino.phe_baseline_offsets`: ``phe_mode`` or ``"off"``."""
        return self.phe_mode if self.phe_baseline else "off"

    def to_dict(self) -> dict[str, Any]:
        """Plain data (for manifests and reports)."""
        return asdict(self)


PHE_MODES = ("interpolate", "measured")
"""Values of the ``phe_mode`` setting (``phe_baseline = false`` switches Phe offsets off)."""

TROPHIC_KEYS = ("food_web", "beta", "beta_sd", "tdf", "tdf_sd", "phe_baseline", "phe_mode")


def resolve_trophic(config: Mapping[str, Any] | None) -> TrophicSettings:
    """Validate amino-acid settings and fill in the food web's values.

    Parameters
    ----------
    config
        ``food_web`` (one of :data:`FOOD_WEBS`, default ``"aquatic"``),
        optional overrides ``beta``, ``beta_sd``, ``tdf`` (> 0), ``tdf_sd``
        (SDs ≥ 0, ‰), ``phe_baseline`` (true/false) and ``phe_mode``
        (``"interpolate"``, default, or ``"measured"``); or ``None``.

    Returns
    -------
    TrophicSettings

    Raises
    ------
    ConfigError
        Unknown key (with a "did you mean" hint), unknown food web or Phe
        mode, a value of the wrong type or out of range, ``phe_mode`` given
        with ``phe_baseline = false``; the key is named.
    """
    cfg = dict(config or {})
    for key in cfg:
        if key not in TROPHIC_KEYS:
            hint = difflib.get_close_matches(key, TROPHIC_KEYS, n=1)
            extra = f"; did you mean {hint[0]!r}?" if hint else f"; expected one of {TROPHIC_KEYS}"
            raise ConfigError(f"unknown amino-acid setting {key!r}{extra}", key=key)
    web = cfg.get("food_web", DEFAULT_FOOD_WEB)
    if web not in FOOD_WEBS:
        hint = difflib.get_close_matches(str(web), FOOD_WEBS, n=1)
        extra = f"; did you mean {hint[0]!r}?" if hint else ""
        raise ConfigError(
            f"unknown food web {web!r}; expected one of {list(FOOD_WEBS)}{extra}", key="food_web"
        )
    base = FOOD_WEBS[web]
    values: dict[str, float] = {}
    for key in ("beta", "beta_sd", "tdf", "tdf_sd"):
        v = cfg.get(key, getattr(base, key))
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise ConfigError(f"expected a finite number of per mil, got {v!r}", key=key)
        if key == "tdf" and not v > 0:
            raise ConfigError(f"expected a TDF > 0 ‰, got {v!r}", key=key)
        if key.endswith("_sd") and v < 0:
            raise ConfigError(f"expected an SD >= 0 ‰, got {v!r}", key=key)
        values[key] = float(v)
    phe = cfg.get("phe_baseline", True)
    if not isinstance(phe, bool):
        raise ConfigError(f"expected true or false, got {phe!r}", key="phe_baseline")
    mode = cfg.get("phe_mode", "interpolate")
    if mode not in PHE_MODES:
        raise ConfigError(
            f"unknown Phe mode {mode!r}; expected one of {list(PHE_MODES)}", key="phe_mode"
        )
    if not phe and "phe_mode" in cfg:
        raise ConfigError(
            "phe_mode has no effect with phe_baseline = false; drop one of them", key="phe_mode"
        )
    return TrophicSettings(food_web=web, phe_baseline=phe, phe_mode=mode, **values)

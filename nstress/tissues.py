"""Tissue definitions: class, turnover, discrimination, growth and QC defaults.

A tissue is either ``keratin`` (inert once grown; a segment records the
body pool while it grew, placed in time by a growth model) or ``blood``
(turning over; a draw records an exponentially weighted past of the pool,
the one-compartment model). Every default names its source, or says
"common practice" or "from memory" where it could not be verified.

Add a tissue by adding a :class:`Tissue` to :data:`DEFAULT_TISSUES`, or,
for a study, in the ``[tissues.NAME]`` table of a workflow file (see
``DEVELOPERS.md``).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Literal

TissueClass = Literal["keratin", "blood"]


@dataclass(frozen=True)
class Tissue:
    """Defaults for one tissue.

    Parameters
    ----------
    name
        Lower-case name used in the ``tissue`` column.
    klass
        ``"keratin"`` or ``"blood"``.
    half_life_days
        Blood: prior median of the incorporation half-life t½ = ln 2 / λ (days).
        Keratin: not used (inert).
    half_life_sd_log
        Prior SD of log t½.
    disc_d15N, disc_d13C
        Prior mean of the tissue-minus-diet discrimination Δ (‰).
    disc_sd
        Prior SD of each Δ (‰).
    growth_model
        Keratin: name of the growth model (``"linear"`` or ``"von_bertalanffy"``).
    growth_mm_per_day
        Keratin: nominal growth rate at the root (mm/d).
    growth_sd_log
        Keratin: between-individual SD of log growth rate.
    growth_params
        Extra growth-model parameters (e.g. ``{"l_inf_mm": 100, "k_per_day": 0.03}``).
    softness_days
        Keratin: width of the soft edges of a segment's growth window
        (days); stands for the short integration of the precursor pool.
    cn_range
        Accepted atomic C:N range for quality control.
    lipid_method
        δ13C lipid normalisation to use when a sample was not lipid-extracted
        and its C:N is above ``lipid_cn_threshold``: ``"none"``, ``"post2007"``
        or ``"kiljunen2006"``.
    lipid_cn_threshold
        C:N above which lipid normalisation applies.
    sources
        Where each default comes from.
    """

    name: str
    klass: TissueClass
    half_life_days: float = math.nan
    half_life_sd_log: float = 0.3
    disc_d15N: float = 3.0
    disc_d13C: float = 1.0
    disc_sd: float = 1.0
    growth_model: str = "linear"
    growth_mm_per_day: float = math.nan
    growth_sd_log: float = 0.10
    growth_params: dict[str, float] = field(default_factory=dict)
    softness_days: float = 2.0
    cn_range: tuple[float, float] = (2.9, 3.8)
    lipid_method: str = "none"
    lipid_cn_threshold: float = 3.5
    sources: dict[str, str] = field(default_factory=dict)

    @property
    def is_keratin(self) -> bool:
        """Whether the tissue is inert keratin placed in time by growth."""
        return self.klass == "keratin"

    @property
    def rate_per_day(self) -> float:
        """Incorporation rate λ = ln 2 / t½ (1/d) for blood tissues."""
        return math.log(2.0) / self.half_life_days

    def to_dict(self) -> dict[str, Any]:
        """Return the tissue as plain data (for manifests and posterior attributes)."""
        d = asdict(self)
        d["cn_range"] = list(self.cn_range)
        return d

    def updated(self, **changes: Any) -> Tissue:
        """Return a copy with some fields changed (workflow overrides)."""
        if "cn_range" in changes:
            changes["cn_range"] = tuple(changes["cn_range"])
        return replace(self, **changes)


_KERATIN_CN = "keratin C:N 2.9-3.8 (from memory); collagen 2.9-3.6 (DeNiro 1985)"
_BLOOD_CN = (
    "blood C:N 3.0-4.2 (from memory); plasma C:N rises with lipid in fasts (Cherel et al. 2005)"
)

DEFAULT_TISSUES: dict[str, Tissue] = {
    "whisker": Tissue(
        "whisker",
        "keratin",
        disc_d15N=3.0,
        disc_d13C=2.8,
        disc_sd=0.8,
        growth_model="linear",
        growth_mm_per_day=0.10,
        growth_sd_log=0.10,
        lipid_method="none",
        sources={
            "growth": "otariid whisker 0.05-0.17 mm/d (Hirons et al. 2001; McHuron et al. 2016)",
            "growth_sd": "about 10 % between individuals (common practice)",
            "disc": "seal whisker Δ13C up to +3.2 (Hobson et al. 1996); "
            "marine mammal keratin Δ13C +2 to +3 (Newsome et al. 2010); Δ15N from memory",
            "cn": _KERATIN_CN,
        },
    ),
    "hair": Tissue(
        "hair",
        "keratin",
        disc_d15N=3.0,
        disc_d13C=2.5,
        growth_mm_per_day=0.36,
        sources={
            "growth": "human scalp hair 0.35-0.37 mm/d (Barth 1986)",
            "disc": "keratin Δ (from memory)",
            "cn": _KERATIN_CN,
        },
    ),
    "feather": Tissue(
        "feather",
        "keratin",
        disc_d15N=3.0,
        disc_d13C=1.5,
        growth_mm_per_day=3.0,
        growth_sd_log=0.15,
        sources={
            "growth": "feathers grow up to several mm/d (Jenni et al. 2020); 3 mm/d from memory",
            "disc": "from memory",
            "cn": _KERATIN_CN,
        },
    ),
    "claw": Tissue(
        "claw",
        "keratin",
        disc_d15N=3.0,
        disc_d13C=1.5,
        growth_mm_per_day=0.10,
        growth_sd_log=0.2,
        sources={"growth": "from memory", "disc": "from memory", "cn": _KERATIN_CN},
    ),
    "baleen": Tissue(
        "baleen",
        "keratin",
        disc_d15N=3.0,
        disc_d13C=2.5,
        growth_mm_per_day=0.45,
        growth_sd_log=0.2,
        sources={
            "growth": "15-25 cm per year (from memory)",
            "disc": "from memory",
            "cn": _KERATIN_CN,
        },
    ),
    "plasma": Tissue(
        "plasma",
        "blood",
        half_life_days=4.3,
        half_life_sd_log=0.3,
        disc_d15N=5.2,
        disc_d13C=1.0,
        cn_range=(3.0, 4.2),
        lipid_method="none",
        sources={
            "half_life": "plasma 4.3 d (Hahn et al. 2012); 5-7 d (Tsahar et al. 2008)",
            "disc": "fur seal plasma Δ15N +5.2, Δ13C +1.0 (Kurle 2002)",
            "cn": _BLOOD_CN,
        },
    ),
    "serum": Tissue(
        "serum",
        "blood",
        half_life_days=4.3,
        half_life_sd_log=0.3,
        disc_d15N=5.2,
        disc_d13C=1.0,
        cn_range=(3.0, 4.2),
        sources={
            "half_life": "as plasma (Hahn et al. 2012)",
            "disc": "as plasma (Kurle 2002)",
            "cn": _BLOOD_CN,
        },
    ),
    "rbc": Tissue(
        "rbc",
        "blood",
        half_life_days=30.0,
        half_life_sd_log=0.25,
        disc_d15N=4.1,
        disc_d13C=1.3,
        cn_range=(3.0, 4.2),
        sources={
            "half_life": "red cells ≈32 d (Hahn et al. 2012); "
            "residence 21-31 d (Tsahar et al. 2008)",
            "disc": "fur seal RBC Δ15N +4.1, Δ13C +1.3 (Kurle 2002)",
            "cn": _BLOOD_CN,
        },
    ),
    "whole_blood": Tissue(
        "whole_blood",
        "blood",
        half_life_days=15.0,
        half_life_sd_log=0.35,
        disc_d15N=4.4,
        disc_d13C=1.2,
        cn_range=(3.0, 4.2),
        sources={
            "half_life": "between plasma and cells, about two weeks (from memory)",
            "disc": "between plasma and RBC (Kurle 2002), from memory",
            "cn": _BLOOD_CN,
        },
    ),
}

KERATIN_TISSUES = tuple(n for n, t in DEFAULT_TISSUES.items() if t.is_keratin)
BLOOD_TISSUES = tuple(n for n, t in DEFAULT_TISSUES.items() if not t.is_keratin)


def resolve_tissues(overrides: dict[str, dict[str, Any]] | None = None) -> dict[str, Tissue]:
    """Return the tissue registry with study-specific overrides applied.

    Parameters
    ----------
    overrides
        ``{name: {field: value}}``. A known name updates that tissue's fields;
        a new name declares a tissue and must give at least ``klass``.

    Returns
    -------
    dict
        Name -> :class:`Tissue`.
    """
    from nstress.errors import ConfigError

    tissues = dict(DEFAULT_TISSUES)
    valid = set(Tissue.__dataclass_fields__)
    for name, fields in (overrides or {}).items():
        key = name.strip().lower()
        unknown = set(fields) - valid
        if unknown:
            raise ConfigError(
                f"unknown tissue field(s) {sorted(unknown)}; expected some of {sorted(valid)}",
                key=f"tissues.{name}",
            )
        if key in tissues:
            tissues[key] = tissues[key].updated(**fields)
        else:
            if fields.get("klass") not in ("keratin", "blood"):
                raise ConfigError(
                    "a new tissue needs klass = 'keratin' or 'blood'", key=f"tissues.{name}.klass"
                )
            tissues[key] = Tissue(name=key, **{k: v for k, v in fields.items() if k != "name"})
    return tissues

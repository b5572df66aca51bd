"""Preparation layer: quality control and normalisation of the intake tables.

:func:`prepare` runs, in order:

1. scale normalisation of δ15N and δ13C from reference-material rows
   (:mod:`nstress.prep.scale`, Paul et al. 2007);
2. atomic C:N from %C/%N where missing, and the tissue's accepted C:N
   range (:mod:`nstress.prep.qc`);
3. δ13C lipid normalisation where the rules allow it (:mod:`nstress.prep.lipid`).

Every change is written to the ledger (notes for corrections, flags for
doubts) and counted in a JSON-serialisable report; :func:`summarise`
turns the result into a short text.
"""

from __future__ import annotations

import copy
import difflib
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

import pandas as pd

from nstress.errors import ConfigError
from nstress.intake.ledger import Ledger
from nstress.prep.lipid import CN_BASES, METHODS, normalise_lipid
from nstress.prep.qc import (
    QCLog,
    RowKeys,
    add_cn,
    check_cn_range,
    one_reason,
    tissue_names,
)
from nstress.prep.refmaterials import resolve_references
from nstress.prep.scale import MODES, normalise_scale
from nstress.prep.summary import summarise
from nstress.tissues import DEFAULT_TISSUES, Tissue

__all__ = ["DEFAULT_CONFIG", "Prepared", "prepare", "resolve_config", "summarise"]

DEFAULT_CONFIG: dict[str, Any] = {
    "lipid": {},
    "lipid_cn_basis": "atomic",
    "scale_normalisation": "auto",
    "cn_check": True,
    "cn_tolerance": 0.05,
    "check_tolerance": 0.3,
    "stretch_tolerance": 0.1,
    "max_span_days": 1827.0,
}
"""Defaults of the preparation settings (see :func:`prepare` for their meaning)."""


class IntakeLike(Protocol):
    """What :func:`prepare` needs from ``nstress.intake.Intake``."""

    samples: pd.DataFrame
    references: pd.DataFrame
    ledger: Ledger
    sources: list[dict[str, Any]]


@dataclass
class Prepared:
    """The prepared tables.

    Attributes
    ----------
    samples
        Copy of the intake samples with ``cn_ratio``, ``cn_source``,
        ``d15N_raw``, ``d13C_measured``, ``d13C_raw``, ``d15N``, ``d13C``,
        ``d15N_scaled``, ``d13C_scaled``, ``lipid_correction`` and ``qc``.
    ledger
        The intake's ledger, updated in place.
    report
        Plain, JSON-serialisable account of what was done.
    references
        Reference rows with assigned and normalised values.
    tissues
        Tissue registry used.
    config
        Resolved settings.
    sources
        The intake's input-file descriptions.
    """

    samples: pd.DataFrame
    ledger: Ledger
    report: dict[str, Any]
    references: pd.DataFrame = field(default_factory=pd.DataFrame)
    tissues: dict[str, Tissue] = field(default_factory=dict)
    config: dict[str, Any] = field(default_factory=dict)
    sources: list[dict[str, Any]] = field(default_factory=list)


def _unknown_key(key: str, known: list[str], where: str) -> ConfigError:
    hint = difflib.get_close_matches(key, known, n=1)
    extra = f"; did you mean {hint[0]!r}?" if hint else f"; expected one of {sorted(known)}"
    return ConfigError(f"unknown setting {key!r}{extra}", key=where)


def resolve_config(
    config: Mapping[str, Any] | None, tissues: Mapping[str, Tissue]
) -> dict[str, Any]:
    """Merge ``config`` over :data:`DEFAULT_CONFIG` and validate it.

    Parameters
    ----------
    config
        User settings (see :func:`prepare`), or ``None``.
    tissues
        Tissue registry (``lipid`` keys must name its tissues).

    Returns
    -------
    dict
        Complete, validated settings.

    Raises
    ------
    ConfigError
        Unknown key (with a "did you mean" hint), unknown tissue or lipid
        method, or a value of the wrong kind.
    """
    cfg = copy.deepcopy(DEFAULT_CONFIG)
    for key, value in (config or {}).items():
        if key not in DEFAULT_CONFIG:
            raise _unknown_key(key, list(DEFAULT_CONFIG), key)
        cfg[key] = copy.deepcopy(value)
    if not isinstance(cfg["lipid"], Mapping):
        raise ConfigError("expected a table of tissue = method", key="lipid")
    lipid = {}
    for name, method in cfg["lipid"].items():
        t = str(name).strip().lower()
        if t not in tissues:
            raise _unknown_key(t, list(tissues), f"lipid.{name}")
        if method not in METHODS:
            raise ConfigError(
                f"unknown lipid method {method!r}; expected one of {list(METHODS)}",
                key=f"lipid.{name}",
            )
        lipid[t] = method
    cfg["lipid"] = lipid
    for name, tissue in tissues.items():
        if tissue.lipid_method not in METHODS:
            raise ConfigError(
                f"unknown lipid method {tissue.lipid_method!r}; expected one of {list(METHODS)}",
                key=f"tissues.{name}.lipid_method",
            )
    if cfg["lipid_cn_basis"] not in CN_BASES:
        raise ConfigError(f"expected one of {list(CN_BASES)}", key="lipid_cn_basis")
    if cfg["scale_normalisation"] not in MODES:
        raise ConfigError(f"expected one of {list(MODES)}", key="scale_normalisation")
    if not isinstance(cfg["cn_check"], bool):
        raise ConfigError("expected true or false", key="cn_check")
    for key in ("cn_tolerance", "check_tolerance", "stretch_tolerance", "max_span_days"):
        v = cfg[key]
        if isinstance(v, bool) or not isinstance(v, int | float) or not v > 0:
            raise ConfigError(f"expected a positive number, got {v!r}", key=key)
        cfg[key] = float(v)
    return cfg


def prepare(
    intake: IntakeLike,
    *,
    tissues: Mapping[str, Tissue] | None = None,
    config: Mapping[str, Any] | None = None,
) -> Prepared:
    """Quality-control and normalise the intake tables.

    Parameters
    ----------
    intake
        An ``nstress.intake.Intake`` (``samples``, ``references``,
        ``ledger``, ``sources``). Its ledger is updated in place; its
        tables are not changed.
    tissues
        Tissue registry (default :data:`nstress.tissues.DEFAULT_TISSUES`).
    config
        Settings over :data:`DEFAULT_CONFIG`:

        ``lipid`` : dict
            Per-tissue δ13C lipid method overriding ``Tissue.lipid_method``:
            ``"none"``, ``"post2007"`` or ``"kiljunen2006"``
            (``{"plasma": "post2007"}``).
        ``lipid_cn_basis`` : ``"atomic"`` | ``"mass"``
            C:N fed to the lipid equations (default atomic; see
            :mod:`nstress.prep.lipid`).
        ``scale_normalisation`` : ``"auto"`` | ``"off"`` | ``"on"``
            Two-point normalisation from reference rows: where possible,
            never, or required (default ``"auto"``).
        ``cn_check`` : bool
            Flag C:N outside the tissue range and table C:N that disagrees
            with %C/%N (default true).
        ``cn_tolerance`` : float
            Relative tolerance of that agreement (default 0.05).
        ``check_tolerance`` : float
            Check-standard |mean residual| (‰) that flags a batch (default 0.3).
        ``stretch_tolerance`` : float
            |slope − 1| of a normalisation line that flags a batch (default 0.1).
        ``max_span_days`` : float
            An individual whose sample dates (blood draws, keratin collections)
            lie further apart than this is excluded, with the reason in the
            ledger (default 1827, five years: a design limit, not a science
            value). The time base pads every individual to the longest grid,
            so one animal sampled over decades would make every animal's
            arrays that long; give each period its own individual id instead.

    Returns
    -------
    Prepared
        Samples, ledger, report and the inputs used.

    Raises
    ------
    ConfigError
        Invalid settings, or ``scale_normalisation="on"`` without anchors.
    InputError
        Unknown reference-material name or role, or degenerate anchors.
    """
    reg = dict(DEFAULT_TISSUES if tissues is None else tissues)
    cfg = resolve_config(config, reg)
    samples = intake.samples.copy()
    ledger = intake.ledger
    qc = QCLog(len(samples))
    refs = resolve_references(getattr(intake, "references", None))
    row_keys = RowKeys(samples)  # every step below writes ledger entries by sample row

    report: dict[str, Any] = {"config": copy.deepcopy(cfg), "n_samples": int(len(samples))}
    report["scale"] = normalise_scale(
        samples,
        refs,
        ledger,
        qc,
        mode=cfg["scale_normalisation"],
        check_tolerance=cfg["check_tolerance"],
        stretch_tolerance=cfg["stretch_tolerance"],
        row_keys=row_keys,
    )
    cn = add_cn(
        samples,
        ledger,
        qc,
        tolerance=cfg["cn_tolerance"],
        check=cfg["cn_check"],
        row_keys=row_keys,
    )
    cn["range"] = (
        check_cn_range(samples, reg, ledger, qc, row_keys=row_keys) if cfg["cn_check"] else {}
    )
    report["cn"] = cn
    report["lipid"] = normalise_lipid(
        samples,
        reg,
        ledger,
        qc,
        methods=cfg["lipid"],
        cn_basis=cfg["lipid_cn_basis"],
        row_keys=row_keys,
    )
    report["span"] = _exclude_long_spans(samples, ledger, row_keys, cfg["max_span_days"])
    names = tissue_names(samples)
    unknown = sorted(set(names.tolist()) - set(reg))
    for name in unknown:
        ledger.note(
            row_keys.of(names == name),
            one_reason(f"tissue {name!r} has no defaults: C:N and lipid checks skipped"),
        )
    report["tissues_without_defaults"] = unknown
    samples["qc"] = qc.text
    return Prepared(
        samples=samples,
        ledger=ledger,
        report=report,
        references=refs,
        tissues=reg,
        config=cfg,
        sources=list(getattr(intake, "sources", []) or []),
    )


def _exclude_long_spans(
    samples: pd.DataFrame, ledger: Ledger, row_keys: RowKeys, limit: float
) -> dict[str, Any]:
    """Exclude the individuals whose sample dates span more than ``limit`` days."""
    when = pd.Series(pd.NaT, index=samples.index, dtype="datetime64[ns]")
    for col in ("date", "collected"):
        if col in samples.columns:
            when = when.fillna(pd.to_datetime(samples[col], errors="coerce"))
    ind = samples["individual"].astype(str) if "individual" in samples else None
    if ind is None or when.isna().all():
        return {"max_span_days": limit, "excluded_individuals": {}}
    by = when.groupby(ind)
    span = ((by.transform("max") - by.transform("min")).dt.days).fillna(0.0)
    too_long = (span > limit).to_numpy()
    out: dict[str, int] = {}
    for name in sorted(set(ind[too_long])):
        m = (ind == name).to_numpy()
        days = int(span[m].iloc[0])
        ledger.exclude(
            row_keys.of(m),
            one_reason(
                f"samples of this individual span {days} days, more than qc.max_span_days = "
                f"{limit:g}; give each period its own individual id or raise the limit"
            ),
        )
        out[name] = days
    return {"max_span_days": limit, "excluded_individuals": out}

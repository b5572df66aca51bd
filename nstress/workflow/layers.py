"""Layers of study settings: package defaults < preset < workflow file < command line.

A workflow file may name a natural-history preset (``preset = "NAME"`` at
its top, :mod:`nstress.presets`); the command line may name one too
(``--preset NAME``, which replaces the file's) and change single settings
(``--set priors.gamma.mu=0.1``, merged over the file table by table). This
module puts the layers together for the sections a preset may set
(``[priors]``, ``[tissues]``, ``[growth]``, ``[qc]``) and writes down what
the preset set: for each of its values the source, whether a higher layer
replaced it, which layer, and the value in use. That record goes into the
manifest, the result hash and the report.

The preset's own values are checked by the same schema as a workflow
file's (types, bounds, the lower layers' checks), with errors naming the
preset's file and the key.
"""

from __future__ import annotations

import copy
import tomllib
from collections.abc import Mapping
from typing import Any

from nstress.errors import ConfigError
from nstress.workflow.config import (
    GROWTH_FIELDS,
    PRESET_KEY,
    _check_sections,
    _delegate,
    _hint,
    _prefixed,
    _reject_non_finite,
    _tissues,
)

PRESET_SECTIONS = ("priors", "tissues", "growth", "qc")
"""The sections a preset may set (as :data:`nstress.presets.SECTIONS`)."""

STUDY_SECTIONS = ("priors", "tissues", "growth", "qc", "screening", "diagnostics")
"""Sections that ``--set`` may change (the others have their own options)."""

WORKFLOW_FILE = "workflow file"
COMMAND_LINE = "command line"


def study(
    doc: dict[str, Any], file: str | None, command_line: Mapping[str, Any] | None = None
) -> dict[str, Any]:
    """Resolve the study settings of a checked document: defaults < preset < document.

    Parameters
    ----------
    doc
        The document (a workflow file with the command line's overrides
        merged in, or the command line's settings alone), its sections
        already checked.
    file
        The workflow file, for messages (``None``: the command line).
    command_line
        The part of ``doc`` that came from the command line (``--set``,
        ``--preset``): a preset value it replaces is marked as replaced by
        the command line, others by the workflow file.

    Returns
    -------
    dict
        ``priors``, ``tissues``, ``qc``, ``screening``, ``diagnostics`` (the
        overrides a :class:`~nstress.workflow.pipeline.FitConfig` takes, the
        preset's values under the document's) and ``preset`` (the record of
        what the preset set, or ``None``).

    Raises
    ------
    ConfigError
        An unknown preset (with a "did you mean" hint), or a bad value in
        the document or the preset (naming its file and key).
    """
    tissues = _tissues(doc.get("tissues", {}), doc.get("growth", {}), file)
    layered, tissues, record = _layer_preset(doc, tissues, file, command_line or {})
    _delegate(layered, tissues, file)
    return {
        "priors": layered.get("priors", {}),
        "tissues": tissues,
        "qc": layered.get("qc", {}),
        "screening": doc.get("screening", {}),
        "diagnostics": doc.get("diagnostics", {}),
        "preset": record,
    }


def _checked_preset(name: Any, file: str | None) -> tuple[Any, dict[str, Any], dict[str, Any]]:
    """Load a preset and check its values as a workflow file's; return it, sections, tissues."""
    from nstress.presets import load_preset

    try:
        preset = load_preset(name)
    except ConfigError as exc:
        raise ConfigError(exc.detail, key=PRESET_KEY, file=file) from None
    where = f"preset {preset.name} ({preset.path})"
    sections = preset.sections()
    _reject_non_finite(sections, "", where)
    _check_sections(sections, PRESET_SECTIONS, where)
    tissues = _tissues(sections.get("tissues", {}), sections.get("growth", {}), where)
    _delegate(sections, tissues, where)
    return preset, sections, tissues


def _layer_preset(
    doc: dict[str, Any],
    tissues: dict[str, Any],
    file: str | None,
    command_line: Mapping[str, Any],
) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any] | None]:
    """Put the named preset's values under the document's; return them and the preset's record.

    The record (plain data) has the preset's name, title, description,
    diet, tissues, cautions and, for every value it set: ``key``,
    ``value``, ``source``, ``overridden`` (true/false), ``overridden_by``
    (``"workflow file"``, ``"command line"`` or ``None``) and ``used`` (the
    value the fit uses).
    """
    from nstress.tissues import DEFAULT_TISSUES, resolve_tissues

    if PRESET_KEY not in doc:
        return doc, tissues, None
    preset, sections, own_tissues = _checked_preset(doc[PRESET_KEY], file)
    layered = dict(doc)
    for section in ("priors", "qc"):
        if section in sections:
            layered[section] = _deep_merge(sections[section], doc.get(section, {}))
    mine = _canonical_leaves({s: doc.get(s, {}) for s in PRESET_SECTIONS})
    theirs = _canonical_leaves({s: command_line.get(s, {}) for s in PRESET_SECTIONS})
    values, notes = [], {}
    for v in preset.values:
        leaves = _canonical_leaves(_nest(v.key, v.value))
        hit = [k for k in leaves if k in mine]
        used = v.value
        if isinstance(v.value, dict):
            used = {**v.value, **{k.rsplit(".", 1)[1]: mine[k] for k in hit}}
        elif hit:
            used = mine[hit[0]]
        by = None
        if hit:
            by = COMMAND_LINE if any(k in theirs for k in hit) else WORKFLOW_FILE
        values.append(
            {
                "key": v.key,
                "value": v.value,
                "source": v.source,
                "overridden": bool(hit),
                "overridden_by": by,
                "used": used,
            }
        )
        section, *rest = _canonical(v.key).split(".")
        if section == "tissues" and not hit:  # the tissue's sources name the preset's
            said = notes.setdefault(rest[0], {})
            category = _source_category(rest[1])
            before = said.get(category)
            if before is None:
                said[category] = f"preset {preset.name}: {v.source}"
            elif v.source not in before:
                said[category] = f"{before}; {v.source}"
    merged = {name.strip().lower(): dict(body) for name, body in own_tissues.items()}
    above = {name.strip().lower(): body for name, body in tissues.items()}
    for key, body in above.items():
        below = merged.get(key, {})
        params = {**below.get("growth_params", {}), **body.get("growth_params", {})}
        merged[key] = {**below, **body, **({"growth_params": params} if params else {})}
    for name, categories in notes.items():
        base = DEFAULT_TISSUES[name].sources if name in DEFAULT_TISSUES else {}
        mine_sources = above.get(name, {}).get("sources", {})
        merged[name]["sources"] = {**base, **categories, **mine_sources}
    try:
        resolve_tissues(merged)
    except ConfigError as exc:
        raise _prefixed(exc, "", file) from None
    return layered, merged, {**preset.to_dict(), "values": values}


def _source_category(field_name: str) -> str:
    """Return the key of ``Tissue.sources`` that a tissue field's source belongs under."""
    if field_name == "growth_sd_log":
        return "growth_sd"
    for prefix, category in (
        ("growth_", "growth"),
        ("disc_", "disc"),
        ("half_life", "half_life"),
        ("cn_", "cn"),
        ("lipid_", "lipid"),
    ):
        if field_name.startswith(prefix):
            return category
    return field_name


def _nest(key: str, value: Any) -> dict[str, Any]:
    """Return ``{"a": {"b": {"c": v}}}`` for ``"a.b.c", v``."""
    for part in reversed(key.split(".")):
        value = {part: value}
    return value


def _canonical_leaves(tree: dict[str, Any]) -> dict[str, Any]:
    """Return the leaves of nested tables by canonical dotted key (see :func:`_canonical`)."""
    out: dict[str, Any] = {}

    def walk(node: Any, prefix: str) -> None:
        if isinstance(node, dict) and node:
            for k, v in node.items():
                walk(v, f"{prefix}{k}.")
        elif prefix:
            out[_canonical(prefix[:-1])] = node

    walk(tree, "")
    return out


def _canonical(key: str) -> str:
    """Return a dotted key in tissue-field terms, tissue names in lower case.

    ``growth.X.mm_per_day`` -> ``tissues.x.growth_mm_per_day``;
    ``qc.lipid.Plasma`` -> ``qc.lipid.plasma``.
    """
    parts = key.split(".")
    if parts[0] in ("growth", "tissues") and len(parts) >= 3:
        name = parts[1].strip().lower()
        field_name = GROWTH_FIELDS.get(parts[2], parts[2]) if parts[0] == "growth" else parts[2]
        return ".".join(["tissues", name, field_name, *parts[3:]])
    if parts[:2] == ["qc", "lipid"] and len(parts) == 3:
        return f"qc.lipid.{parts[2].strip().lower()}"
    return key


def _deep_merge(base: dict[str, Any], top: Mapping[str, Any]) -> dict[str, Any]:
    """Merge ``top`` over ``base``, table by table (``top`` wins; neither is changed)."""
    out = copy.deepcopy(base)
    for k, v in top.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _deep_merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def merge_overrides(doc: dict[str, Any], overrides: Mapping[str, Any]) -> dict[str, Any]:
    """Merge the command line's overrides over a parsed workflow file.

    Parameters
    ----------
    doc
        The parsed file (not changed).
    overrides
        ``{section: {key: value}}`` merged table by table, and top-level
        text keys (``preset``), which replace the file's.

    Returns
    -------
    dict
    """
    out = copy.deepcopy(doc)
    for section, values in overrides.items():
        if isinstance(values, Mapping) and isinstance(out.get(section, {}), dict):
            out[section] = _deep_merge(out.get(section, {}), values)
        else:
            out[section] = copy.deepcopy(values)
    return out


def parse_assignments(pairs: list[str]) -> dict[str, Any]:
    """Turn command-line ``KEY=VALUE`` settings into ``{section: {...}}`` overrides.

    ``KEY`` is a dotted key of a workflow file (``priors.gamma.mu``,
    ``growth.whisker.mm_per_day``, ``qc.lipid.plasma``) in one of
    :data:`STUDY_SECTIONS`; ``VALUE`` is read as a TOML value (``0.2``,
    ``true``, ``[2.9, 3.6]``, ``{ l_inf_mm = 80, k_per_day = 0.03 }``),
    and as text when it is not one (``none``).

    Parameters
    ----------
    pairs
        The ``--set`` arguments, in order (a later one wins).

    Returns
    -------
    dict

    Raises
    ------
    ConfigError
        A setting without ``=``, an empty key part, or a section that
        ``--set`` does not change (with a "did you mean" hint).
    """
    out: dict[str, Any] = {}
    for pair in pairs:
        key, eq, text = pair.partition("=")
        parts = [p.strip() for p in key.split(".")]
        if not eq or len(parts) < 2 or not all(parts):
            raise ConfigError(
                f"--set takes SECTION.KEY=VALUE (e.g. priors.gamma.mu=0.1), got {pair!r}"
            )
        if parts[0] not in STUDY_SECTIONS:
            raise ConfigError(
                f"--set changes {', '.join(STUDY_SECTIONS)}; [{parts[0]}] settings have their own "
                "options or belong in a workflow file" + _hint(parts[0], STUDY_SECTIONS),
                key=key.strip(),
            )
        try:
            value = tomllib.loads(f"v = {text.strip()}")["v"]
        except tomllib.TOMLDecodeError:
            value = text.strip()
        out = _deep_merge(out, _nest(".".join(parts), value))
    return out


def study_settings(
    preset: str | None = None, overrides: dict[str, Any] | None = None
) -> dict[str, Any]:
    """Resolve the study settings of a fit without a workflow file (``nstress fit``).

    The same checks and the same layering as a workflow file: package
    defaults < ``preset`` < ``overrides`` (the command line's ``--set``).

    Parameters
    ----------
    preset
        A preset's name, or ``None``.
    overrides
        ``{section: {...}}`` from :func:`parse_assignments`.

    Returns
    -------
    dict
        ``priors``, ``tissues``, ``qc``, ``screening``, ``diagnostics`` and
        ``preset`` (the record), ready for
        :class:`~nstress.workflow.pipeline.FitConfig`.

    Raises
    ------
    ConfigError
        An unknown preset (with a hint), key or value; the message says it
        was given on the command line.
    """
    doc: dict[str, Any] = copy.deepcopy(overrides or {})
    if preset is not None:
        doc[PRESET_KEY] = preset
    try:
        _reject_non_finite(doc, "", None)
        _check_sections(doc, STUDY_SECTIONS, None)
        return study(doc, None, command_line=doc)
    except ConfigError as exc:
        if exc.file is not None:  # a preset's own file
            raise
        raise ConfigError(
            f"{exc.detail} (given on the command line with --set or --preset)", key=exc.key
        ) from None

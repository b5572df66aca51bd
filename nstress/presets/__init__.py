"""Natural-history presets: starting values for a kind of animal, each with its source.

A preset is a TOML file in this folder (plain data: nothing in it is
evaluated). It names the animals it is meant for, the diet they live on,
the tissues they are usually sampled for, and a set of values in the
sections of a workflow file (``[priors.NAME]``, ``[tissues.NAME]``,
``[growth.NAME]``, ``[qc]``, ``[qc.lipid]``). Every value is written with its
source beside it::

    [priors.gamma]
    mu = { value = -0.1, source = "plasma δ13C fell in fasting penguins (Cherel et al. 2005)" }

The source names authors and year, or says "common practice" or "from
memory" (recalled, not checked against the paper). A value without one does
not load. A workflow file names a preset with ``preset = "NAME"`` at its
top; precedence is package defaults < preset < workflow file < command-line
options (``nstress.workflow.config`` does the layering).

This module is layer-free (it imports nothing of nstress but the errors):
it reads and checks the files; the workflow layer checks the values against
the schema of priors, tissues and QC settings.
"""

from __future__ import annotations

import difflib
import json
import re
import textwrap
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from nstress.errors import ConfigError

PRESET_DIR = Path(__file__).resolve().parent
"""Where the presets shipped with nstress live (one ``NAME.toml`` each)."""

SECTIONS = ("priors", "tissues", "growth", "qc")
"""The workflow sections a preset may set."""

DIETS = {
    "protein_lipid": "protein and lipid (marine carnivore: fish, squid, krill)",
    "carbohydrate_rich": "carbohydrate-rich plants (terrestrial herbivore)",
    "mixed": "mixed plant and animal food, largely carbohydrate (omnivore)",
}
"""Diet composition words a preset may use, and what they mean."""

MARKERS = ("common practice", "from memory")
_CITATION = re.compile(
    r"[A-Z][A-Za-zÀ-ÿ'\-]+(?: et al\.| (?:&|and) [A-Z][A-Za-zÀ-ÿ'\-]+)? (?:19|20)\d\d"
)
_NAME = re.compile(r"^[a-z][a-z0-9_]*$")
_META = {"title", "description", "diet", "tissues", "cautions"}


def is_sourced(text: str) -> bool:
    """Whether ``text`` names a source (authors and year) or says "common practice"/"from memory".

    Parameters
    ----------
    text
        A source string of a preset value.

    Returns
    -------
    bool
    """
    low = text.lower()
    return bool(_CITATION.search(text)) or any(m in low for m in MARKERS)


@dataclass(frozen=True)
class PresetValue:
    """One value a preset sets.

    Attributes
    ----------
    key
        Dotted key in the workflow file's terms (``priors.gamma.mu``,
        ``growth.whisker.mm_per_day``, ``qc.lipid.plasma``).
    value
        The value (a number, text, or a table of numbers for growth
        parameters).
    source
        Where it comes from.
    """

    key: str
    value: Any
    source: str


@dataclass(frozen=True)
class Preset:
    """A natural-history preset, read from its file.

    Attributes
    ----------
    name
        File name without ``.toml``; what a workflow file names.
    title
        One line: which animals, in which state.
    description
        What the preset assumes (a paragraph).
    diet
        One of :data:`DIETS`.
    tissues
        Tissues such animals are usually sampled for.
    cautions
        Things to check before relying on the preset's values.
    values
        Every value it sets, in file order.
    path
        The file.
    """

    name: str
    title: str
    description: str
    diet: str
    tissues: tuple[str, ...]
    cautions: tuple[str, ...] = ()
    values: tuple[PresetValue, ...] = ()
    path: Path = field(default=PRESET_DIR)

    def sections(self) -> dict[str, Any]:
        """Return the values as workflow-file sections (``{"priors": {"gamma": {"mu": ...}}}``)."""
        out: dict[str, Any] = {}
        for v in self.values:
            *parents, last = v.key.split(".")
            node = out
            for p in parents:
                node = node.setdefault(p, {})
            node[last] = v.value
        return out

    def to_dict(self) -> dict[str, Any]:
        """Return the preset as plain data (for manifests and the report)."""
        return {
            "name": self.name,
            "title": self.title,
            "description": self.description,
            "diet": self.diet,
            "tissues": list(self.tissues),
            "cautions": list(self.cautions),
            "values": [{"key": v.key, "value": v.value, "source": v.source} for v in self.values],
        }


def available(directory: Path | None = None) -> list[str]:
    """Names of the presets in ``directory`` (default: those shipped with nstress), sorted.

    Parameters
    ----------
    directory
        A folder of ``NAME.toml`` preset files.

    Returns
    -------
    list of str
    """
    folder = Path(directory) if directory is not None else PRESET_DIR
    return sorted(p.stem for p in folder.glob("*.toml") if _NAME.match(p.stem))


def load_preset(name: str, directory: Path | None = None) -> Preset:
    """Read and check one preset.

    Parameters
    ----------
    name
        The preset's name (its file name without ``.toml``).
    directory
        A folder of preset files (default: those shipped with nstress).

    Returns
    -------
    Preset

    Raises
    ------
    ConfigError
        The name is unknown (with a "did you mean" hint and the list of
        presets), or the file is malformed: not TOML, an unknown section or
        metadata key, a value written without a source, or a source that
        names neither authors and year nor "common practice"/"from memory".
    """
    known = available(directory)
    if name not in known:
        close = difflib.get_close_matches(name, known, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(
            f"unknown preset {name!r}{hint} (presets: {', '.join(known)}; "
            "`nstress presets` lists them)",
            key="preset",
        )
    path = (Path(directory) if directory is not None else PRESET_DIR) / f"{name}.toml"
    where = f"preset {name} ({path})"
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{where}: cannot read ({exc})") from None
    meta = doc.pop("preset", None)
    if not isinstance(meta, dict):
        raise ConfigError(f"{where}: needs a [preset] table (title, description, diet, tissues)")
    unknown = set(meta) - _META
    if unknown:
        raise ConfigError(f"{where}: unknown [preset] key(s) {sorted(unknown)}")
    for key in ("title", "description", "diet"):
        if not isinstance(meta.get(key), str) or not meta[key].strip():
            raise ConfigError(f"{where}: [preset] needs {key} (text)")
    if meta["diet"] not in DIETS:
        raise ConfigError(f"{where}: diet {meta['diet']!r} is not one of {sorted(DIETS)}")
    tissues = meta.get("tissues", [])
    cautions = meta.get("cautions", [])
    for key, items in (("tissues", tissues), ("cautions", cautions)):
        if not (isinstance(items, list) and all(isinstance(i, str) for i in items)):
            raise ConfigError(f"{where}: [preset] {key} must be an array of text")
    values: list[PresetValue] = []
    for section, body in doc.items():
        if section not in SECTIONS:
            raise ConfigError(f"{where}: a preset sets only {', '.join(SECTIONS)}, not [{section}]")
        _leaves(body, section, values, where)
    return Preset(
        name=name,
        title=meta["title"].strip(),
        description=" ".join(meta["description"].split()),
        diet=meta["diet"],
        tissues=tuple(tissues),
        cautions=tuple(" ".join(c.split()) for c in cautions),
        values=tuple(values),
        path=path,
    )


def format_value(value: Any) -> str:
    """Return a preset value as TOML text (``0.1``, ``"none"``, ``{ l_inf_mm = 48.0 }``).

    Parameters
    ----------
    value
        A number, text, true/false, an array or a table of them.

    Returns
    -------
    str
    """
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {format_value(v)}" for k, v in value.items()) + " }"
    if isinstance(value, list):
        return "[" + ", ".join(format_value(v) for v in value) + "]"
    return repr(value)


def describe(preset: Preset, width: int = 96) -> str:
    """Return what ``nstress presets NAME`` prints: what a preset assumes and every value it sets.

    Parameters
    ----------
    preset
        The preset.
    width
        Line width of the wrapped text.

    Returns
    -------
    str
    """
    wrap = textwrap.TextWrapper(width=width, initial_indent="  ", subsequent_indent="  ")
    lines = [f"{preset.name}: {preset.title}", "", wrap.fill(preset.description), ""]
    lines.append(f"diet: {DIETS[preset.diet]}")
    lines.append(f"tissues usually sampled: {', '.join(preset.tissues) or '-'}")
    for c in preset.cautions:
        lines.append(
            textwrap.fill(c, width=width, initial_indent="caution: ", subsequent_indent="  ")
        )
    lines += ["", "values it sets (a workflow file or --set KEY=VALUE overrides any of them):"]
    for v in preset.values:
        lines.append(f"  {v.key} = {format_value(v.value)}")
        lines.append(
            textwrap.fill(
                v.source, width=width, initial_indent="      # ", subsequent_indent="      # "
            )
        )
    return "\n".join(lines)


def _leaves(node: Any, key: str, out: list[PresetValue], where: str) -> None:
    """Collect ``{value = ..., source = ...}`` leaves below ``node`` (depth first, file order)."""
    if isinstance(node, dict) and "value" in node:
        extra = set(node) - {"value", "source"}
        if extra:
            raise ConfigError(f"{where}: {key} has unknown field(s) {sorted(extra)}")
        source = node.get("source")
        if not isinstance(source, str) or not source.strip():
            raise ConfigError(
                f"{where}: {key} has no source (write {{ value = ..., source = ... }})"
            )
        if not is_sourced(source):
            raise ConfigError(
                f"{where}: the source of {key} ({source!r}) names no authors and year and is not "
                'marked "common practice" or "from memory"'
            )
        out.append(PresetValue(key, node["value"], " ".join(source.split())))
        return
    if not isinstance(node, dict) or not node:
        raise ConfigError(
            f"{where}: {key} is written without a source (write {{ value = ..., source = ... }})"
        )
    for k, v in node.items():
        _leaves(v, f"{key}.{k}", out, where)

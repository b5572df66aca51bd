"""Workflow files: a TOML description of a whole, repeatable analysis.

A workflow file is read with :mod:`tomllib` and checked against the schema
below; it is data only (nothing in it is evaluated, imported or unpickled).
Relative paths are relative to the workflow file's directory. Every error is
a :class:`~nstress.errors.ConfigError` naming the file and the dotted key:
an unknown key with a "did you mean" hint, a wrong type with the expected
one, a missing input with the path it resolved to, an unsafe value (an
output outside the workflow's directory, a non-finite number, a negative
count).

Schema (version 1)
------------------
Settings that change results (they are hashed; a change refits):

``preset = "NAME"`` (at the top, before the first section)
    A natural-history preset (:mod:`nstress.presets`) whose values start
    ``[priors]``, ``[tissues]``, ``[growth]`` and ``[qc]``; the file's own
    values replace them key by key, the command line's ``--set`` replaces
    both (:mod:`nstress.workflow.layers`).
``[workflow]``
    ``name`` (text; default: the file name), ``title`` (report title),
    ``description`` (free text). Labels only, not hashed.
``[inputs]``
    ``tables``: a path or glob, or an array of them (CSV, Parquet, Excel).
    Inputs are only read and may lie anywhere; every pattern must match a
    file.
``[units]``
    ``split = "group"`` (default): one independent fit per ``group`` of the
    table(s), each pooling only its own animals; ``"table"``: one fit per
    input table.
``[grid]``
    ``bin_days`` (> 0, default 4): width of the time bins; ``knot_days``
    (> 0, default 16): spacing of the diet random walk's knots.
``[tissues.NAME]``
    Overrides the fields of a built-in tissue or declares a new one (then
    ``klass = "keratin"`` or ``"blood"`` is required); the fields are those
    of :class:`nstress.tissues.Tissue` (``half_life_days``, ``disc_d15N``,
    ``cn_range = [lo, hi]``, ``lipid_method`` ...).
``[growth.NAME]``
    Growth of keratin tissue NAME: ``model`` (``"linear"`` or
    ``"von_bertalanffy"``), ``mm_per_day`` (> 0), ``sd_log`` (≥ 0, between
    animals), ``params`` (a table of numbers for the model). Shorthand for
    the tissue's ``growth_*`` fields.
``[priors.NAME]``
    Fields of a prior of :data:`nstress.model.priors.PRIORS` (numbers), e.g.
    ``[priors.kappa_log_mean]`` ``mu = -3.0``.
``[qc]``
    Preparation settings (:data:`nstress.prep.DEFAULT_CONFIG`):
    ``cn_check``, ``cn_tolerance``, ``lipid_cn_basis``,
    ``scale_normalisation``, ``check_tolerance``, ``stretch_tolerance`` and
    a ``[qc.lipid]`` table of ``tissue = "method"``.
``[sampler]``
    ``draws`` (≥ 1, default 1000), ``tune`` (≥ 0, default 1000), ``chains``
    (≥ 1, default 2), ``seed`` (≥ 0, default 1; each unit's seed is derived
    from it and the unit's name, never from the order of units),
    ``sampler`` (``"auto"``, ``"nutpie"``, ``"pymc"``), ``target_accept``
    (0-1), ``product_draws`` (≥ 1, draws used for the products),
    ``method`` (``"nuts"``, default, or ``"fast"``: the approximate
    screening mode, MAP + Laplace, whose outputs are marked approximate and
    are never a final posterior), ``fast_draws`` (≥ 1, default 200, draws of
    the fast mode) and a ``[sampler.options]`` table passed to the sampler
    (numbers, text, true/false).
``[screening]``
    Status thresholds: ``flag``, ``clear``, ``min_samples``, ``min_d13C``,
    ``min_span_days``, ``min_tissues``.
``[diagnostics]``
    Pass marks: ``rhat_max``, ``ess_bulk_min``, ``ess_tail_min``,
    ``divergences_max``, ``ppc_coverage_min``.
``[trophic]``
    Amino-acid settings (:mod:`nstress.aminoacids`): ``food_web``
    (``"aquatic"``, default, ``"terrestrial_c3"``, ``"terrestrial_c4"``)
    selects β and TDF of the trophic position; ``beta``, ``beta_sd``,
    ``tdf`` (> 0), ``tdf_sd`` (‰) override them; ``phe_baseline`` (default
    true) lets δ15N_Phe set each sample's baseline offset in the model;
    ``phe_mode`` (``"interpolate"``, default: a sample without Phe between
    two with Phe of the same animal and tissue gets the interpolated offset;
    ``"measured"``: only samples with Phe get one).

The power analysis (``nstress power``; not part of a fit, so not hashed):

``[design]``
    The sampling designs and fasts to simulate: ``segment_mm``,
    ``draw_interval_days`` (0 = no blood), ``fast_days``, ``rate_per_day``
    (a number or an array of numbers each), ``animals`` (fasting animals per
    cell, default 6), ``controls`` (non-fasting, default 2),
    ``keratin_tissue`` (default ``"whisker"``), ``record_mm`` (keratin
    length analysed, default 30), ``blood_tissues``, ``blood_window_days``,
    ``method`` (``"fast"``, default, or ``"nuts"``), ``power`` (detection
    share of the detection limit, default 0.8), ``seed``, ``for_data``
    (default true: ``nstress run`` also simulates the data's own design and
    the report quotes its detection limit).

Settings that only change how a run executes (not hashed):

``[outputs]``
    ``run_dir`` (default ``runs/<file name>``): a directory inside the
    workflow's directory (``--out`` on the command line may point anywhere);
    ``unit_reports`` (default false): also render a report per unit.
``[execution]``
    ``workers`` (≥ 0; default: cores ÷ chains; 0 runs the units in the
    command's own process), ``threads`` (≥ 1, cores per worker; default:
    cores ÷ workers), ``scheduler`` (address of a running Dask scheduler,
    ``"tcp://host:8786"``), ``local_cluster`` (≥ 1: start a Dask
    ``LocalCluster`` with that many workers), ``backend`` (nutpie's
    compiler: ``"auto"``, ``"jax"``, ``"numba"``).

Example::

    [inputs]
    tables = ["data/*.csv"]

    [sampler]
    draws = 1000
    tune = 1000
    seed = 7

    [execution]
    workers = 1
"""

from __future__ import annotations

import copy
import dataclasses
import difflib
import glob
import hashlib
import math
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from nstress.errors import ConfigError
from nstress.workflow.pipeline import FitConfig

SCHEMA_VERSION = 1
SPLITS = ("group", "table")
GLOB_CHARS = set("*?[")


# ---------------------------------------------------------------- value checks


def _describe(value: Any) -> str:
    """Name a TOML value's type the way a user reads it."""
    if isinstance(value, bool):
        return f"true/false ({str(value).lower()})"
    for kind, word in ((int, "an integer"), (float, "a number"), (str, "text")):
        if isinstance(value, kind):
            return f"{word} ({value!r})"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return f"a {type(value).__name__} ({value!r})"


@dataclass(frozen=True)
class Setting:
    """One key of the schema.

    Parameters
    ----------
    kind
        ``"int"``, ``"number"``, ``"bool"``, ``"text"``, ``"texts"`` (text or
        an array of text), ``"pair"`` (two numbers), ``"numbers"`` (a table
        of numbers), ``"scalars"`` (a table of numbers, text, true/false) or
        ``"table"`` (checked elsewhere), ``"values"`` (a number or an array of
        them, each of kind ``item``, default ``"number"``, within the bounds).
    low, high
        Inclusive bounds of a number.
    above
        Exclusive lower bound of a number.
    choices
        The allowed texts.
    item
        Kind of each element of ``"values"`` (``"int"`` or ``"number"``).
    """

    kind: str
    low: float | None = None
    high: float | None = None
    above: float | None = None
    choices: tuple[str, ...] = ()
    item: str = ""

    def check(self, value: Any, key: str, file: str | None) -> Any:
        """Return ``value`` if it fits this setting, else raise :class:`ConfigError`."""

        def fail(expected: str) -> ConfigError:
            return ConfigError(f"expected {expected}, got {_describe(value)}", key=key, file=file)

        if self.kind == "bool":
            if not isinstance(value, bool):
                raise fail("true or false")
            return value
        if self.kind in ("int", "number"):
            is_int = isinstance(value, int) and not isinstance(value, bool)
            if self.kind == "int" and not is_int:
                raise fail("an integer")
            if not (is_int or isinstance(value, float)):
                raise fail("a number")
            self._bounds(value, key, file)
            return value
        if self.kind == "text":
            if not isinstance(value, str):
                raise fail("text")
            if self.choices and value not in self.choices:
                raise ConfigError(
                    f"unknown value {value!r}; expected one of {list(self.choices)}"
                    + _hint(value, self.choices),
                    key=key,
                    file=file,
                )
            return value
        if self.kind == "texts":
            items = [value] if isinstance(value, str) else value
            texts = isinstance(items, list) and all(isinstance(i, str) for i in items)
            if not texts or not items:
                raise fail("text or a non-empty array of text")
            return list(items)
        if self.kind == "values":
            items = value if isinstance(value, list) else [value]
            if not items:
                raise fail("a number or a non-empty array of numbers")
            item = Setting(self.item or "number", low=self.low, above=self.above)
            return [item.check(v, f"{key}[{i}]", file) for i, v in enumerate(items)]
        if self.kind == "pair":
            if not (isinstance(value, list) and len(value) == 2):
                raise fail("an array of two numbers")
            return [Setting("number").check(v, f"{key}[{i}]", file) for i, v in enumerate(value)]
        if self.kind in ("numbers", "scalars", "table"):
            if not isinstance(value, dict):
                raise fail("a table")
            if self.kind == "table":
                return value
            single = Setting("number") if self.kind == "numbers" else None
            for k, v in value.items():
                if single is not None:
                    single.check(v, f"{key}.{k}", file)
                elif not isinstance(v, str | int | float):  # bool is an int
                    raise ConfigError(
                        f"expected a number, text or true/false, got {_describe(v)}",
                        key=f"{key}.{k}",
                        file=file,
                    )
            return dict(value)
        raise AssertionError(f"unknown setting kind {self.kind}")  # pragma: no cover

    def _bounds(self, value: float, key: str, file: str | None) -> None:
        for bound, broken, sign in (
            (self.low, self.low is not None and value < self.low, ">="),
            (self.high, self.high is not None and value > self.high, "<="),
            (self.above, self.above is not None and not value > self.above, ">"),
        ):
            if broken:
                raise ConfigError(
                    f"expected a value {sign} {bound:g}, got {value!r}", key=key, file=file
                )


def _hint(word: str, known: Any) -> str:
    close = difflib.get_close_matches(word, list(known), n=1)
    return f"; did you mean {close[0]!r}?" if close else ""


COUNT = Setting("int", low=1)
POSITIVE = Setting("number", above=0)
NONNEG = Setting("number", low=0)
NUMBER = Setting("number")
TEXT = Setting("text")
FLAG = Setting("bool")


def _tissue_fields() -> dict[str, Setting]:
    """Return the schema of a ``[tissues.NAME]`` table (the fields of ``Tissue``)."""
    from nstress.growth import GROWTH_MODELS
    from nstress.prep.lipid import METHODS

    return {
        "klass": Setting("text", choices=("keratin", "blood")),
        "half_life_days": POSITIVE,
        "half_life_sd_log": POSITIVE,
        "disc_d15N": NUMBER,
        "disc_d13C": NUMBER,
        "disc_sd": POSITIVE,
        "growth_model": Setting("text", choices=tuple(GROWTH_MODELS)),
        "growth_mm_per_day": POSITIVE,
        "growth_sd_log": NONNEG,
        "growth_params": Setting("numbers"),
        "softness_days": NONNEG,
        "cn_range": Setting("pair"),
        "lipid_method": Setting("text", choices=tuple(METHODS)),
        "lipid_cn_threshold": POSITIVE,
        "sources": Setting("scalars"),
    }


GROWTH_FIELDS = {  # [growth.NAME] key -> Tissue field
    "model": "growth_model",
    "mm_per_day": "growth_mm_per_day",
    "sd_log": "growth_sd_log",
    "params": "growth_params",
}


def _schema() -> dict[str, dict[str, Setting]]:
    """Fixed-key sections (``tissues``, ``growth``, ``priors`` have named sub-tables)."""
    from nstress.aminoacids import FOOD_WEBS, PHE_MODES
    from nstress.model.diagnose import Thresholds
    from nstress.model.fit import BACKENDS, METHODS, SAMPLERS
    from nstress.prep import DEFAULT_CONFIG
    from nstress.products.screening import ScreeningRules

    qc = {k: Setting("table") if isinstance(v, dict) else None for k, v in DEFAULT_CONFIG.items()}
    return {
        "workflow": {"name": TEXT, "title": TEXT, "description": TEXT, "version": COUNT},
        "inputs": {"tables": Setting("texts")},
        "units": {"split": Setting("text", choices=SPLITS)},
        "grid": {"bin_days": POSITIVE, "knot_days": POSITIVE},
        "qc": {k: v or Setting("any") for k, v in qc.items()},
        "sampler": {
            "draws": COUNT,
            "tune": Setting("int", low=0),
            "chains": COUNT,
            "seed": Setting("int", low=0),
            "sampler": Setting("text", choices=SAMPLERS),
            "target_accept": Setting("number", above=0, high=1),
            "product_draws": COUNT,
            "options": Setting("scalars"),
            "method": Setting("text", choices=METHODS),
            "fast_draws": COUNT,
        },
        "screening": {f.name: NONNEG for f in dataclasses.fields(ScreeningRules)},
        "diagnostics": {f.name: NONNEG for f in dataclasses.fields(Thresholds)},
        "design": {
            "segment_mm": Setting("values", above=0),
            "draw_interval_days": Setting("values", item="int", low=0),
            "fast_days": Setting("values", above=0),
            "rate_per_day": Setting("values", above=0),
            "animals": COUNT,
            "controls": Setting("int", low=0),
            "keratin_tissue": TEXT,
            "record_mm": POSITIVE,
            "blood_tissues": Setting("texts"),
            "blood_window_days": COUNT,
            "method": Setting("text", choices=("fast", "nuts")),
            "power": Setting("number", above=0, high=0.999),
            "seed": Setting("int", low=0),
            "for_data": FLAG,
        },
        "trophic": {
            "food_web": Setting("text", choices=tuple(FOOD_WEBS)),
            "beta": NUMBER,
            "beta_sd": NONNEG,
            "tdf": POSITIVE,
            "tdf_sd": NONNEG,
            "phe_baseline": FLAG,
            "phe_mode": Setting("text", choices=PHE_MODES),
        },
        "outputs": {"run_dir": TEXT, "unit_reports": FLAG},
        "execution": {
            "workers": Setting("int", low=0),
            "threads": COUNT,
            "scheduler": TEXT,
            "local_cluster": COUNT,
            "backend": Setting("text", choices=BACKENDS),
        },
    }


NAMED_SECTIONS = ("tissues", "growth", "priors")
SECTIONS = (
    "workflow",
    "inputs",
    "units",
    "grid",
    "tissues",
    "growth",
    "priors",
    "qc",
    "sampler",
    "screening",
    "diagnostics",
    "design",
    "trophic",
    "outputs",
    "execution",
)
PRESET_KEY = "preset"
"""The one top-level key of a workflow file that is not a section: a preset's name."""
PRESET_NAME = Setting("text")
EXECUTION_SECTIONS = ("workflow", "design", "outputs", "execution")
"""Sections that never change a fit's results (kept out of the result hash); ``[design]``
is the power analysis (``nstress power``), a product of its own."""


# ---------------------------------------------------------------- the workflow


@dataclass(frozen=True)
class Execution:
    """How a run executes (never part of the result hash).

    Attributes
    ----------
    workers
        Unit processes (``None``: cores ÷ chains; 0: in this process).
    threads
        Cores per worker (``None``: cores ÷ workers).
    scheduler
        Address of a running Dask scheduler, or ``None``.
    local_cluster
        Workers of a Dask ``LocalCluster`` to start, or ``None``.
    backend
        nutpie's compiler.
    """

    workers: int | None = None
    threads: int | None = None
    scheduler: str | None = None
    local_cluster: int | None = None
    backend: str = "auto"


@dataclass(frozen=True)
class Workflow:
    """A validated workflow file.

    Attributes
    ----------
    path
        The workflow file (absolute).
    sha256
        SHA-256 of its bytes.
    name, title
        Labels (the title heads the report).
    tables
        Input tables, resolved and de-duplicated, in the order given.
    split
        ``"group"`` or ``"table"``: what one unit is.
    fit
        The result settings as a :class:`~nstress.workflow.pipeline.FitConfig`
        (the workflow's seed; units get derived seeds).
    execution
        Execution-only settings.
    run_dir
        Where the run is written.
    unit_reports
        Render a report per unit as well as the merged one.
    design
        The ``[design]`` section (power analysis), checked, or ``None``.
    document
        The validated document (for the manifest).
    """

    path: Path
    sha256: str
    name: str
    title: str | None
    tables: list[Path]
    split: str
    fit: FitConfig
    execution: Execution
    run_dir: Path
    unit_reports: bool = False
    document: dict[str, Any] = field(default_factory=dict)
    design: dict[str, Any] | None = None

    @property
    def seed(self) -> int:
        """The workflow's seed."""
        return int(self.fit.sampler["seed"])

    def result_config(self) -> dict[str, Any]:
        """Everything that changes results, as plain data (hashed)."""
        return {"schema": SCHEMA_VERSION, "split": self.split, "fit": self.fit.result_config()}


def load_workflow(
    path: str | Path, overrides: Mapping[str, Mapping[str, Any]] | None = None
) -> Workflow:
    """Read and validate a workflow file.

    Parameters
    ----------
    path
        The ``.toml`` file.
    overrides
        ``{section: {key: value}}`` merged (table by table) over the file
        before validation: the command line's options (``nstress demo
        --draws ...``, ``--set priors.gamma.mu=0``, ``--preset NAME``).

    Returns
    -------
    Workflow

    Raises
    ------
    ConfigError
        The file is missing, is not TOML, or does not fit the schema.
    """
    path = Path(path).resolve()
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ConfigError(
            f"cannot read workflow file ({exc.strerror or exc})", file=str(path)
        ) from None
    try:
        doc = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"not a valid TOML file: {exc}", file=str(path)) from None
    from nstress.workflow.layers import merge_overrides

    doc = merge_overrides(doc, overrides or {})
    return validate(doc, path, hashlib.sha256(raw).hexdigest(), command_line=overrides)


def validate(
    doc: dict[str, Any],
    path: Path,
    sha256: str = "",
    command_line: Mapping[str, Any] | None = None,
) -> Workflow:
    """Check a parsed workflow document and build the :class:`Workflow`.

    Parameters
    ----------
    doc
        The parsed TOML (with the command line's overrides merged in).
    path
        The workflow file (relative paths are relative to its directory).
    sha256
        The file's SHA-256 (provenance).
    command_line
        The overrides that came from the command line (the record of a
        preset says which of its values they replaced).

    Returns
    -------
    Workflow

    Raises
    ------
    ConfigError
        On the first problem, naming the file and the dotted key.
    """
    file = str(path)
    doc = copy.deepcopy(doc)
    _reject_non_finite(doc, "", file)
    _reject_nul(doc, "", file)
    _check_sections(doc, SECTIONS, file)
    version = doc.get("workflow", {}).get("version", SCHEMA_VERSION)
    if version > SCHEMA_VERSION:
        raise ConfigError(
            f"schema version {version} is newer than this nstress reads ({SCHEMA_VERSION})",
            key="workflow.version",
            file=file,
        )
    from nstress.workflow.layers import study as resolve_study

    study = resolve_study(doc, file, command_line)

    base = path.parent
    wf, sampler, grid = doc.get("workflow", {}), doc.get("sampler", {}), doc.get("grid", {})
    execution = doc.get("execution", {})
    if "scheduler" in execution and "local_cluster" in execution:
        raise ConfigError(
            "give either scheduler or local_cluster, not both", key="execution", file=file
        )
    if "tables" not in doc.get("inputs", {}):
        raise ConfigError("no input table: add tables = [...]", key="inputs.tables", file=file)
    options = dict(sampler.get("options", {}))
    fit = FitConfig(
        bin_days=float(grid.get("bin_days", FitConfig.bin_days)),
        knot_days=float(grid.get("knot_days", FitConfig.knot_days)),
        priors=study["priors"],
        tissues=study["tissues"],
        qc=study["qc"],
        sampler={
            "draws": sampler.get("draws", 1000),
            "tune": sampler.get("tune", 1000),
            "chains": sampler.get("chains", 2),
            "seed": sampler.get("seed", 1),
            "sampler": sampler.get("sampler", "auto"),
            **({"target_accept": sampler["target_accept"]} if "target_accept" in sampler else {}),
            **({"kwargs": options} if options else {}),
            # only when given, so that the hashes of existing NUTS workflows do not change
            **{k: sampler[k] for k in ("method", "fast_draws") if k in sampler},
            "backend": execution.get("backend", "auto"),
        },
        screening=study["screening"],
        diagnostics=study["diagnostics"],
        trophic=doc.get("trophic", {}),
        product_draws=sampler.get("product_draws", FitConfig.product_draws),
        progress=False,
        report=bool(doc.get("outputs", {}).get("unit_reports", False)),
        preset=study["preset"],
    )
    return Workflow(
        path=path,
        sha256=sha256,
        name=wf.get("name", path.stem),
        title=wf.get("title"),
        tables=resolve_inputs(_as_list(doc["inputs"]["tables"]), base, file),
        split=doc.get("units", {}).get("split", "group"),
        fit=fit,
        execution=Execution(
            workers=execution.get("workers"),
            threads=execution.get("threads"),
            scheduler=execution.get("scheduler"),
            local_cluster=execution.get("local_cluster"),
            backend=execution.get("backend", "auto"),
        ),
        run_dir=resolve_run_dir(doc.get("outputs", {}).get("run_dir"), base, path.stem, file),
        unit_reports=fit.report,
        document=doc,
        design=_design(doc.get("design"), study["tissues"], file),
    )


def _as_list(value: str | list[str]) -> list[str]:
    """One path or pattern as a list of one (``tables = "a.csv"``), an array as it is."""
    return [value] if isinstance(value, str) else list(value)


def _reject_non_finite(value: Any, key: str, file: str | None) -> None:
    """Reject ``nan`` and ``inf`` anywhere in the document."""
    if isinstance(value, float) and not math.isfinite(value):
        raise ConfigError(f"expected a finite number, got {value!r}", key=key, file=file)
    if isinstance(value, dict):
        for k, v in value.items():
            _reject_non_finite(v, f"{key}.{k}" if key else k, file)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _reject_non_finite(v, f"{key}[{i}]", file)


def _reject_nul(value: Any, key: str, file: str) -> None:
    """Reject text with a NUL character anywhere in the document (no path can hold one)."""
    if isinstance(value, str) and "\x00" in value:
        raise ConfigError(f"text contains a NUL character: {value!r}", key=key, file=file)
    if isinstance(value, dict):
        for k, v in value.items():
            _reject_nul(k, key, file)
            _reject_nul(v, f"{key}.{k}" if key else k, file)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _reject_nul(v, f"{key}[{i}]", file)


def _check_sections(doc: dict[str, Any], allowed: tuple[str, ...], file: str | None) -> None:
    """Check every section's name, that it is a table, and its keys (``preset`` is a text key)."""
    schema = _schema()
    for section, body in doc.items():
        if section == PRESET_KEY:
            PRESET_NAME.check(body, PRESET_KEY, file)
            continue
        if section not in allowed:
            raise ConfigError(
                f"unknown section [{section}]" + _hint(section, allowed), key=section, file=file
            )
        if not isinstance(body, dict):
            raise ConfigError(f"expected a table, got {_describe(body)}", key=section, file=file)
        if section in schema:
            _check_keys(body, schema[section], section, file)


def _check_keys(
    body: dict[str, Any], known: dict[str, Setting], where: str, file: str | None
) -> None:
    for key, value in body.items():
        if key == PRESET_KEY and key not in known:
            raise ConfigError(
                f"preset is named at the top of the file, before the first [section]: "
                f"preset = {toml_text(str(value))}",
                key=f"{where}.{key}",
                file=file,
            )
        if key not in known:
            raise ConfigError(
                f"unknown key {key!r} in [{where}]" + _hint(key, known),
                key=f"{where}.{key}",
                file=file,
            )
        if known[key].kind != "any":
            known[key].check(value, f"{where}.{key}", file)


def _tissues(tissues: dict[str, Any], growth: dict[str, Any], file: str | None) -> dict[str, Any]:
    """Check ``[tissues.*]`` and ``[growth.*]`` and merge them into tissue overrides."""
    from nstress.tissues import resolve_tissues

    fields = _tissue_fields()
    out: dict[str, dict[str, Any]] = {}
    for name, body in tissues.items():
        if not isinstance(body, dict):
            raise ConfigError(
                f"expected a table of tissue fields, got {_describe(body)}",
                key=f"tissues.{name}",
                file=file,
            )
        _check_keys(body, fields, f"tissues.{name}", file)
        out[name] = dict(body)
    known = set(resolve_tissues(None)) | {n.strip().lower() for n in out}
    for name, body in growth.items():
        key = f"growth.{name}"
        if not isinstance(body, dict):
            raise ConfigError(f"expected a table, got {_describe(body)}", key=key, file=file)
        if name.strip().lower() not in known:
            raise ConfigError(
                f"unknown tissue {name!r}" + _hint(name, sorted(known)) + " (declare a new "
                "tissue in [tissues.NAME] first)",
                key=key,
                file=file,
            )
        mapped = {GROWTH_FIELDS.get(k, k): v for k, v in body.items()}
        _check_keys(body, {k: fields[f] for k, f in GROWTH_FIELDS.items()}, key, file)
        out.setdefault(name, {}).update(mapped)
    try:
        registry = resolve_tissues(out)
    except ConfigError as exc:
        raise _prefixed(exc, "", file) from None
    for name in growth:
        if not registry[name.strip().lower()].is_keratin:
            raise ConfigError(
                f"{name!r} is a blood tissue; growth applies to keratin only",
                key=f"growth.{name}",
                file=file,
            )
    return out


def _delegate(doc: dict[str, Any], tissues: dict[str, Any], file: str | None) -> None:
    """Run the lower layers' own checks of priors, QC and screening settings."""
    from nstress.aminoacids import resolve_trophic
    from nstress.model.priors import resolve_priors
    from nstress.prep import resolve_config
    from nstress.products.screening import ScreeningRules
    from nstress.tissues import resolve_tissues

    checks: list[tuple[str, Callable[[], object]]] = [
        ("", lambda: resolve_priors(doc.get("priors"))),
        ("qc.", lambda: resolve_config(doc.get("qc"), resolve_tissues(tissues))),
        ("", lambda: ScreeningRules.from_config(doc.get("screening"))),
        ("trophic.", lambda: resolve_trophic(doc.get("trophic"))),
    ]
    for prefix, check in checks:
        try:
            check()
        except ConfigError as exc:
            raise _prefixed(exc, prefix, file) from None


def _design(section: dict[str, Any] | None, tissues: dict[str, Any], file: str) -> Any:
    """Check a ``[design]`` section as a whole (ranges, the keratin tissue named)."""
    if section is None:
        return None
    from nstress.tissues import resolve_tissues
    from nstress.workflow.power import design_from_section

    try:
        design = design_from_section(section)
    except ConfigError as exc:
        raise ConfigError(exc.detail, key=exc.key, file=file) from None
    registry = resolve_tissues(tissues)
    tissue = registry.get(design.keratin_tissue)
    if tissue is None or not tissue.is_keratin:
        raise ConfigError(
            f"{design.keratin_tissue!r} is not a keratin tissue"
            + _hint(design.keratin_tissue, [k for k, t in registry.items() if t.is_keratin]),
            key="design.keratin_tissue",
            file=file,
        )
    unknown = [t for t in design.blood_tissues if t not in registry or registry[t].is_keratin]
    if unknown:
        raise ConfigError(
            f"not blood tissues: {', '.join(map(repr, unknown))}",
            key="design.blood_tissues",
            file=file,
        )
    return dict(section)


def _prefixed(exc: ConfigError, prefix: str, file: str | None) -> ConfigError:
    key = f"{prefix}{exc.key}" if exc.key else prefix.rstrip(".") or None
    return ConfigError(getattr(exc, "detail", str(exc)), key=key, file=file)


def resolve_inputs(patterns: list[str], base: Path, file: str | None = None) -> list[Path]:
    """Resolve input paths and globs relative to ``base``.

    Parameters
    ----------
    patterns
        Paths or glob patterns (``*``, ``?``, ``[...]``, ``**``).
    base
        Directory relative paths start from.
    file
        The workflow file (for messages).

    Returns
    -------
    list of pathlib.Path
        Existing files, absolute, de-duplicated, in the order given (each
        glob's matches sorted).

    Raises
    ------
    ConfigError
        A path does not exist or a pattern matches no file (the message
        gives the resolved path).
    """
    found: list[Path] = []
    for i, pattern in enumerate(patterns):
        key = "inputs.tables" if len(patterns) == 1 else f"inputs.tables[{i}]"
        full = Path(pattern).expanduser()
        full = full if full.is_absolute() else base / full
        if GLOB_CHARS & set(pattern):
            hits = sorted(Path(p) for p in glob.glob(str(full), recursive=True))
            hits = [h for h in hits if h.is_file()]
            if not hits:
                raise ConfigError(f"no file matches {full.resolve()}", key=key, file=file)
        else:
            resolved = full.resolve()
            if not resolved.is_file():
                raise ConfigError(f"input file not found: {resolved}", key=key, file=file)
            hits = [resolved]
        found.extend(h.resolve() for h in hits)
    return list(dict.fromkeys(found))


def resolve_run_dir(value: str | None, base: Path, stem: str, file: str | None = None) -> Path:
    """Resolve ``[outputs] run_dir``; it must lie inside the workflow's directory.

    Parameters
    ----------
    value
        The setting (``None``: ``runs/<stem>``).
    base
        The workflow's directory.
    stem
        The workflow file's name without suffix.
    file
        The workflow file (for messages).

    Returns
    -------
    pathlib.Path

    Raises
    ------
    ConfigError
        The directory resolves outside ``base`` (``..``, an absolute path
        elsewhere) or is ``base`` itself.
    """
    rel = Path(value) if value is not None else Path("runs") / stem
    root = base.resolve()
    resolved = (root / rel.expanduser()).resolve()
    if resolved == root or not resolved.is_relative_to(root):
        raise ConfigError(
            f"run directory {resolved} is not inside the workflow's directory {root}; name a "
            "sub-directory, or give --out DIR on the command line",
            key="outputs.run_dir",
            file=file,
        )
    return resolved


# ---------------------------------------------------------------- starter file


def toml_text(value: str) -> str:
    """Quote ``value`` as a TOML basic string."""
    import json

    return json.dumps(value, ensure_ascii=False)


def _starter_preset(name: str | None) -> str:
    """Return the ``preset = "NAME"`` lines of a starter file, with what the preset sets."""
    if name is None:
        return ""
    from nstress.presets import format_value, load_preset

    p = load_preset(name)
    lines = [
        "",
        f"# Starting values: {p.title}.",
        "# The preset sets the values below (`nstress presets NAME` shows their sources);",
        "# a section of this file or --set KEY=VALUE on the command line overrides any of them.",
    ]
    lines += [f"#   {v.key} = {format_value(v.value)}" for v in p.values]
    lines.append(f"preset = {toml_text(p.name)}")
    return "\n".join(lines) + "\n"


def starter_workflow(
    tables: list[Path],
    dest: Path,
    groups: list[str],
    tissues: list[str],
    rows: int,
    preset: str | None = None,
) -> str:
    """Return the text of a starter workflow file for ``tables``.

    Parameters
    ----------
    tables
        The sample tables (absolute or relative to the current directory).
    dest
        Where the workflow file will be written (inputs are made relative to
        its directory).
    groups
        The groups found in the tables (one unit each).
    tissues
        The tissues found.
    rows
        Number of input rows (for the comment).
    preset
        A natural-history preset to start from (written as ``preset =
        "NAME"`` at the top), or ``None``.

    Returns
    -------
    str
        A workflow that :func:`load_workflow` accepts.

    Raises
    ------
    ConfigError
        An unknown preset (with a "did you mean" hint).
    """
    import os

    here = dest.resolve().parent
    names = [Path(os.path.relpath(Path(t).resolve(), here)).as_posix() for t in tables]
    listed = ", ".join(toml_text(g) for g in groups)
    return f"""\
# nstress workflow (schema {SCHEMA_VERSION}); see `nstress run --help` and DEVELOPERS.md.
# Written by `nstress init` for {len(tables)} table(s), {rows} row(s).
# Tissues found: {", ".join(tissues) or "none"}.
{_starter_preset(preset)}
[workflow]
name = {toml_text(dest.stem)}

[inputs]
# paths or globs, relative to this file
tables = [{", ".join(toml_text(n) for n in names)}]

[units]
# one independent fit per group; groups found: {listed}
split = "group"

[grid]
bin_days = 4.0
knot_days = 16.0

[sampler]
draws = 1000
tune = 1000
chains = 2
seed = 1

# [tissues.whisker]
# growth_mm_per_day = 0.1
# [priors.kappa_log_mean]
# mu = -3.2
# [screening]
# flag = 0.8

[outputs]
run_dir = {toml_text("runs/" + dest.stem)}

[execution]
# workers = 1                        # unit processes (default: cores / chains)
# scheduler = "tcp://127.0.0.1:8786" # or fit the units on a Dask cluster
"""

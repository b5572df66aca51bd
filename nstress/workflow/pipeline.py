"""One unit of work: tables in, every product out (intake -> prep -> model -> products).

:func:`fit_tables` is what ``nstress fit`` runs and what a workflow runs for
each unit. Everything that can fail on the user's input fails before the
first file is written; each file is written atomically, and
``manifest.json`` is written last, so a directory with a manifest is a
finished one.
"""

from __future__ import annotations

import hashlib
import json
import platform
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from nstress import __version__
from nstress.atomic import atomic_write, atomic_write_text
from nstress.errors import FitError, InputError

FINISHED_MARK = "manifest.json"


PHE_FAST_NOTE = (
    "the fast screening mode is not calibrated with phenylalanine baseline offsets (on a "
    "synthetic colony it gave fasters and baseline shifts alike about 0.3): refit with full "
    "NUTS before reading P(episode)"
)
"""Said (log and manifest) when a fast-mode fit uses Phe baseline offsets."""


@dataclass
class FitConfig:
    """Settings of one fit. ``result`` settings change results; ``cores``/``progress`` do not.

    Attributes
    ----------
    bin_days
        Grid bin width Δ (days).
    knot_days
        Diet random-walk knot spacing (days).
    priors
        Prior overrides.
    tissues
        Tissue overrides / declarations.
    qc
        Preparation (QC, lipid, scale) configuration.
    sampler
        Sampler settings (draws, tune, chains, seed, sampler, target_accept, kwargs).
    screening
        Status thresholds (flag, clear, min_samples, min_d13C).
    diagnostics
        Pass marks (rhat_max, ess_bulk_min, ess_tail_min, divergences_max, ppc_coverage_min).
    product_draws
        Posterior draws used for products and checks.
    group
        Fit only the samples of this ``group`` (a workflow unit); the whole
        input is still read and prepared (reference materials, QC), and the
        ledger marks the other groups' rows excluded. ``None``: every group.
    cores
        Chains run in parallel (execution only).
    progress
        Show the sampler's progress bar (execution only).
    report
        Render ``report.html`` into the fit directory (execution only; a
        workflow run renders one merged report instead).
    model
        Further :class:`nstress.model.build.ModelSpec` settings by name (for
        example ``diet_clock`` or ``onset_step_days``); they change results.
    preset
        The natural-history preset the settings started from, or ``None``:
        the record of :func:`nstress.workflow.layers.study` (plain data: name,
        title, description, cautions and every value it set with its source,
        whether a workflow file or the command line replaced it, and the
        value used). Its values are already merged into ``priors``,
        ``tissues`` and ``qc``. The name and the values are hashed with the
        result settings (:meth:`result_config`); the whole record goes into
        ``manifest.json`` and the report.
    trophic
        Amino-acid settings (:func:`nstress.aminoacids.resolve_trophic`):
        ``food_web``, overrides of ``beta``, ``beta_sd``, ``tdf``, ``tdf_sd``
        ``phe_baseline`` and ``phe_mode``; they change results.
    """

    bin_days: float = 4.0
    knot_days: float = 16.0
    priors: dict[str, dict[str, Any]] = field(default_factory=dict)
    tissues: dict[str, dict[str, Any]] = field(default_factory=dict)
    qc: dict[str, Any] = field(default_factory=dict)
    sampler: dict[str, Any] = field(default_factory=dict)
    screening: dict[str, Any] = field(default_factory=dict)
    diagnostics: dict[str, Any] = field(default_factory=dict)
    product_draws: int = 1000
    group: str | None = None
    cores: int | None = None
    progress: bool = True
    report: bool = True
    model: dict[str, Any] = field(default_factory=dict)
    preset: dict[str, Any] | None = None
    trophic: dict[str, Any] = field(default_factory=dict)

    def result_config(self) -> dict[str, Any]:
        """Return the settings that change results, as plain data (hashed for caching)."""
        from nstress.model.fit import EXECUTION_ONLY

        d = asdict(self)
        for key in ("cores", "progress", "report"):
            d.pop(key)
        if d["group"] is None:  # a whole-table fit hashes as it always did
            d.pop("group")
        if not d["model"]:
            d.pop("model")
        if d["preset"] is None:  # a fit without a preset hashes as it always did
            d.pop("preset")
        else:  # its name and values, not its prose
            d["preset"] = {"name": d["preset"]["name"], "values": d["preset"]["values"]}
        if not d["trophic"]:  # hashes of fits without amino-acid settings stay as they were
            d.pop("trophic")
        d["sampler"] = {k: v for k, v in d["sampler"].items() if k not in EXECUTION_ONLY}
        return d


def model_spec(cfg: FitConfig) -> Any:
    """Return the :class:`nstress.model.build.ModelSpec` of a fit configuration.

    Raises
    ------
    ConfigError
        An unknown ``model`` setting, or one that ``FitConfig`` sets itself.
    """
    from dataclasses import fields

    from nstress.errors import ConfigError
    from nstress.model.build import ModelSpec

    own = {"knot_days", "priors"}
    allowed = sorted(f.name for f in fields(ModelSpec) if f.name not in own)
    for key in cfg.model:
        if key not in allowed:
            raise ConfigError(
                f"unknown model setting {key!r}; expected one of {', '.join(allowed)}",
                key=f"model.{key}",
            )
    return ModelSpec(knot_days=cfg.knot_days, priors=cfg.priors, **cfg.model)


def sha256_file(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def config_hash(inputs: list[dict[str, Any]], config: dict[str, Any]) -> str:
    """Content hash of the inputs' sha256s and the result configuration."""
    blob = json.dumps(
        {"inputs": [i["sha256"] for i in inputs], "config": config, "version": __version__},
        sort_keys=True,
        default=str,
    )
    return hashlib.sha256(blob.encode()).hexdigest()


def versions() -> dict[str, str]:
    """Versions of Python and the main packages."""
    import importlib.metadata as md

    out = {"python": platform.python_version(), "nstress": __version__}
    for pkg in (
        "numpy",
        "pandas",
        "scipy",
        "pymc",
        "pytensor",
        "arviz",
        "xarray",
        "nutpie",
        "jax",
        "matplotlib",
    ):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            pass
    return out


def fit_tables(
    tables: list[str | Path],
    out: str | Path,
    config: FitConfig | None = None,
    log: Callable[[str], None] | None = None,
) -> dict[str, Any]:
    """Run the whole pipeline on sample tables and write every product into ``out``.

    Parameters
    ----------
    tables
        Sample table paths.
    out
        Output directory (created).
    config
        Fit settings.
    log
        Progress callback (one line per step).

    Returns
    -------
    dict
        The manifest.

    Raises
    ------
    InputError, ConfigError
        Bad input or configuration (nothing is written).
    FitError
        The sampler failed (nothing but the ledger is written).
    """
    import numpy as np

    from nstress.aminoacids import resolve_trophic
    from nstress.intake import read_samples
    from nstress.model import posterior as post
    from nstress.model.build import build_model
    from nstress.model.diagnose import Thresholds, diagnose, diagnose_fast
    from nstress.model.draws import collect, latent_paths, predictive_replicates
    from nstress.model.fast import APPROXIMATE_NOTE, FastSettings, fast_fit
    from nstress.model.fit import SamplerSettings, resolve_method, sample
    from nstress.prep import prepare
    from nstress.prep.timebase import build_timebase
    from nstress.products.exports import run_summary, tidy_timelines
    from nstress.products.predictions import observation_predictions
    from nstress.products.report import write_report
    from nstress.products.screening import ScreeningRules, colony_summary, screening_table
    from nstress.products.timelines import compute_products
    from nstress.products.trophic import (
        SCREENING_UNITS,
        TROPHIC_UNITS,
        add_screening_columns,
        has_amino_acids,
        trophic_positions,
        trophic_summary,
    )
    from nstress.tissues import resolve_tissues
    from nstress.workflow.cli import write_csv

    cfg = config or FitConfig()
    say = log or (lambda m: None)
    out = Path(out)
    t_start = time.perf_counter()
    timings: dict[str, float] = {}

    # ---- everything that can fail on the user's input, before any write ----
    tissues = resolve_tissues(cfg.tissues)
    settings = SamplerSettings(**{**cfg.sampler, "progress": cfg.progress, "cores": cfg.cores})
    rules = ScreeningRules.from_config(cfg.screening)
    thresholds = Thresholds(**cfg.diagnostics)
    trophic = resolve_trophic(cfg.trophic)
    say(f"reading {len(tables)} table(s)")
    intake = read_samples([str(t) for t in tables], tissues=tissues)
    prepared = prepare(intake, tissues=tissues, config=cfg.qc or None)
    used = prepared.samples
    excluded = set(prepared.ledger.excluded_keys().tolist())
    used = used[~used["key"].isin(excluded)]
    if cfg.group is not None:
        used = _only_group(used, prepared, cfg.group)
    tb = build_timebase(used, tissues, bin_width=cfg.bin_days, phe_mode=trophic.baseline_mode)
    timings["intake_prep_s"] = time.perf_counter() - t_start
    say(f"{tb.n_individuals} individuals, {len(used)} samples, tissues {', '.join(tb.tissues)}")
    t0 = time.perf_counter()
    built = build_model(tb, model_spec(cfg))
    timings["build_s"] = time.perf_counter() - t0
    result_cfg = cfg.result_config()
    digest = config_hash(intake.sources, result_cfg)

    # ---- fit ------------------------------------------------------------
    fast = resolve_method(settings.method) == "fast"
    phe_fast = fast and (tb.blood.has_offset or tb.keratin.has_offset)
    try:
        if fast:
            say(f"{APPROXIMATE_NOTE}; {settings.fast_draws} draws")
            if phe_fast:
                say(f"warning: {PHE_FAST_NOTE}")
            fit = fast_fit(
                built,
                FastSettings(
                    draws=settings.fast_draws, seed=settings.seed, backend=_fast_backend(settings)
                ),
            )
        else:
            say(
                f"sampling: {settings.chains} chains x {settings.draws} draws "
                f"(+{settings.tune} tune)"
            )
            fit = sample(built, settings)
    except FitError:
        atomic_write(out / "ledger.csv", lambda p: write_csv(prepared.ledger.to_frame(), p))
        raise
    timings.update(fit.timings)
    spent = sum(v for k, v in fit.timings.items() if k != "compile_s")
    compiled = fit.timings.get("compile_s", 0)
    say(f"fitted with {fit.sampler} in {spent:.0f} s (+{compiled:.0f} s compile)")

    # ---- products ----------------------------------------------------------
    t0 = time.perf_counter()
    seed = int(settings.seed)
    draws = collect(built, fit.idata, max_draws=cfg.product_draws, seed=seed)
    paths = latent_paths(built, draws)
    reps = predictive_replicates(built, draws, seed=seed)  # for the checks and predictions.csv
    if fast:
        diag = diagnose_fast(built, draws, fit.info, thresholds, seed=seed, reps=reps)
    else:
        diag = diagnose(built, fit.idata, draws, thresholds, seed=seed, paths=paths, reps=reps)
    eps = built.priors["epsilon_loss"]
    prods = compute_products(
        built, draws, paths, epsilon_mu=eps["mu"], epsilon_sd=eps["sigma"], seed=seed
    )
    screen = screening_table(prods.episodes, tb, diag, rules, approximate=fast)
    summary = colony_summary(screen, draws.episode, tb.groups, tb.group_index)
    preds = observation_predictions(built, draws, seed=seed, reps=reps)
    amino = has_amino_acids(tb)
    tp_rows = None
    if amino:
        growth = np.median(draws.params["growth"], axis=0)
        tp_rows = trophic_positions(tb, trophic, growth=growth)
        screen = add_screening_columns(screen, trophic_summary(tp_rows, tb, trophic))
    timings["products_s"] = time.perf_counter() - t0
    prods.dataset.attrs.update(
        {"diagnostics_ok": int(diag.ok), "nstress_version": __version__, "input_hash": digest}
    )
    if fast:
        prods.dataset.attrs.update({"approximate": 1, "method": "fast", "note": APPROXIMATE_NOTE})

    # ---- write ----------------------------------------------------------------
    out.mkdir(parents=True, exist_ok=True)
    (out / FINISHED_MARK).unlink(missing_ok=True)
    atomic_write(out / "ledger.csv", lambda p: write_csv(prepared.ledger.to_frame(), p))
    tl = prods.timelines.copy()
    tl["diagnostics_ok"] = tl["individual"].map(
        dict(zip(screen["individual"], screen["diagnostics_ok"], strict=True))
    )
    atomic_write(out / "timelines.csv", lambda p: tl.to_csv(p, index=False, float_format="%.5g"))
    atomic_write(
        out / "screening.csv", lambda p: screen.to_csv(p, index=False, float_format="%.5g")
    )
    atomic_write(
        out / "colony_summary.csv", lambda p: summary.to_csv(p, index=False, float_format="%.5g")
    )
    atomic_write(out / "timelines.nc", lambda p: prods.dataset.to_netcdf(p, engine="h5netcdf"))
    atomic_write(
        out / "predictions.csv", lambda p: preds.to_csv(p, index=False, float_format="%.5g")
    )
    if tp_rows is not None and len(tp_rows):
        atomic_write(
            out / "trophic_position.csv",
            lambda p: tp_rows.to_csv(p, index=False, float_format="%.5g"),
        )
    else:  # a file left by an earlier fit of other input
        (out / "trophic_position.csv").unlink(missing_ok=True)
    atomic_write(
        out / "timelines_long.csv",
        lambda p: tidy_timelines(tl).to_csv(p, index=False, float_format="%.5g"),
    )
    run_sum = run_summary(screen, diag.to_dict(), seed=seed, input_hash=digest, versions=versions())
    atomic_write_text(out / "summary.json", json.dumps(run_sum, indent=2))
    attrs = {
        "config": result_cfg,
        "version": __version__,
        "input_hash": digest,
        "inputs": intake.sources,
        "diagnostics_ok": diag.ok,
        "sampler": fit.sampler,
        "method": "fast" if fast else "nuts",
        "approximate": fast,
    }
    if fast:
        attrs.update({"approximate_note": APPROXIMATE_NOTE, "fast": fit.info})
    post.save(fit.idata, out / "posterior.nc", attrs)
    timings["total_s"] = time.perf_counter() - t_start
    manifest = {
        "nstress_version": __version__,
        "inputs": intake.sources,
        "config": result_cfg,
        "execution": {"cores": cfg.cores, "backend": fit.backend},
        "seed": seed,
        "input_hash": digest,
        "sampler": fit.sampler,
        "versions": versions(),
        "timings_s": {k: round(v, 3) for k, v in timings.items()},
        "method": "fast" if fast else "nuts",
        "approximate": fast,
        **({"approximate_note": APPROXIMATE_NOTE, "fast": fit.info} if fast else {}),
        "diagnostics": diag.to_dict(),
        "counts": {
            "individuals": int(tb.n_individuals),
            "samples": int(len(used)),
            "rows": int(len(prepared.ledger)),
            "status": screen["status"].value_counts().to_dict(),
        },
        "prep_report": prepared.report,
        "preset": cfg.preset,
        **(
            {
                "amino_acids": {
                    **trophic.to_dict(),
                    "samples_with_pair": int(len(tp_rows)),
                    "samples_with_phe": int(screen["n_phe_samples"].sum()),
                    **({"fast_mode_note": PHE_FAST_NOTE} if phe_fast else {}),
                    "column_units": {
                        "trophic_position.csv": TROPHIC_UNITS,
                        "screening.csv": SCREENING_UNITS,
                    },
                }
            }
            if amino
            else {}
        ),
        "files": sorted(p.name for p in out.iterdir() if not p.name.startswith(".")),
    }
    atomic_write_text(out / FINISHED_MARK, json.dumps(manifest, indent=2, default=str))
    if fast:
        verdict = "APPROXIMATE fast screening, " + (
            "sanity checks passed" if diag.ok else "SANITY CHECKS FAILED"
        )
    else:
        verdict = "diagnostics passed" if diag.ok else "DIAGNOSTICS FAILED"
    if not cfg.report:
        say(f"wrote {out} ({verdict})")
        return manifest
    # the report is rendered from the finished directory's files (re-renderable later)
    say("writing report.html")
    write_report([out], out)
    manifest["files"] = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    atomic_write_text(out / FINISHED_MARK, json.dumps(manifest, indent=2, default=str))
    say(f"wrote {out} ({verdict})")
    return manifest


def _fast_backend(settings: Any) -> str:
    """PyTensor mode of the fast fit from nutpie's backend setting (``auto``/``jax`` -> JAX)."""
    return {"jax": "JAX", "numba": "NUMBA"}.get(settings.backend, "auto")


def _only_group(used: Any, prepared: Any, group: str) -> Any:
    """Keep the used samples of ``group``; mark the other groups' rows excluded in the ledger."""
    import numpy as np

    if not (used["group"] == group).any():
        found = ", ".join(sorted(map(str, used["group"].unique()))) or "none"
        raise InputError(f"no usable sample in group {group!r} (groups with samples: {found})")
    samples = prepared.samples
    other = samples[samples["group"] != group]
    keys = [k for ks in other["keys"] for k in ks]
    reason = f"outside this unit's group {group!r}"
    prepared.ledger.exclude(np.asarray(keys, dtype=np.int64), reason)
    return used[used["group"] == group]

"""Fit the model: nutpie when installed, else PyMC's NUTS; seeded; timed.

Sampler keyword arguments pass straight through. BLAS threads are capped
at one per chain so that chains do not oversubscribe the cores (with the
default threading, two chains on two cores made each gradient about four
times slower).
"""

from __future__ import annotations

import dataclasses
import importlib.util
import logging
import time
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pymc as pm
from pymc.model.transform.optimization import freeze_dims_and_data
from threadpoolctl import threadpool_limits

from nstress.errors import ConfigError, FitError
from nstress.model.build import BuiltModel

log = logging.getLogger(__name__)
SAMPLERS = ("auto", "nutpie", "pymc")
METHODS = ("nuts", "fast")
"""``nuts``: the posterior; ``fast``: the approximate screening mode (:mod:`nstress.model.fast`)."""
EXECUTION_ONLY = ("cores", "progress", "backend")
"""Sampler settings that change how a fit runs, not its results (kept out of hashes)."""


@dataclass
class SamplerSettings:
    """Sampler settings (they change results, so they are part of the configuration).

    Attributes
    ----------
    draws, tune, chains
        Kept draws, warm-up draws, chains.
    seed
        Random seed; the same seed gives the same posterior.
    sampler
        ``"auto"`` (nutpie if installed), ``"nutpie"`` or ``"pymc"``.
    target_accept
        NUTS target acceptance (``None`` = sampler default).
    cores
        Parallel chains (execution only; ``None`` = min(chains, CPUs)).
    progress
        Show the sampler's progress bar.
    backend
        nutpie's compiler (execution only): ``"auto"`` (JAX when installed,
        else numba), ``"jax"`` or ``"numba"``. JAX compiles this model in
        seconds; numba took minutes.
    kwargs
        Extra keyword arguments passed straight to the sampler.
    method
        ``"nuts"`` (the posterior) or ``"fast"`` (MAP + block Laplace
        approximation for first-pass screening, :mod:`nstress.model.fast`;
        every output says it is approximate).
    fast_draws
        Approximate posterior draws of the fast mode.
    """

    draws: int = 1000
    tune: int = 1000
    chains: int = 2
    seed: int = 1
    sampler: str = "auto"
    target_accept: float | None = None
    cores: int | None = None
    progress: bool = True
    backend: str = "auto"
    kwargs: dict[str, Any] = field(default_factory=dict)
    method: str = "nuts"
    fast_draws: int = 200

    def result_settings(self) -> dict[str, Any]:
        """Return the settings that change results (for hashing and provenance)."""
        return {k: v for k, v in asdict(self).items() if k not in EXECUTION_ONLY}


@dataclass
class FitResult:
    """A posterior and how it was obtained."""

    idata: Any
    sampler: str
    settings: SamplerSettings
    timings: dict[str, float]
    backend: str = ""
    info: dict[str, Any] = field(default_factory=dict)
    """Method-specific information (the fast mode: optimiser and Laplace figures)."""


def _stored_names(built: BuiltModel) -> list[str]:
    """Free variables plus the deterministics that products and diagnostics read."""
    from nstress.model.diagnose import HYPER
    from nstress.model.draws import PARAM_NAMES

    names = [v.name for v in built.model.free_RVs]
    names += [n for n in (*PARAM_NAMES, *HYPER) if n in built.model.named_vars]
    return list(dict.fromkeys(names))


def _resolve_optional(name: str, key: str, choices: tuple[str, ...], fallback: str) -> str:
    """Resolve a setting whose first real choice needs an optional package of the same name.

    ``choices`` is ``("auto", preferred, fallback)``; ``"auto"`` takes the preferred
    choice when its package is installed, else ``fallback``.
    """
    setting = key.split(".")[-1]
    if name not in choices:
        raise ConfigError(f"unknown {setting} {name!r}; expected one of {list(choices)}", key=key)
    preferred = choices[1]
    installed = importlib.util.find_spec(preferred) is not None
    if name == preferred and not installed:
        raise ConfigError(
            f"{setting} {preferred!r} is not installed; install it with "
            f"`pip install nstress[fast]` or set {setting} = {fallback!r}",
            key=key,
        )
    if name == "auto":
        return preferred if installed else fallback
    return name


def resolve_method(name: str) -> str:
    """Check a fit method name (:data:`METHODS`)."""
    if name not in METHODS:
        raise ConfigError(
            f"unknown method {name!r}; expected one of {list(METHODS)}", key="sampler.method"
        )
    return name


def resolve_sampler(name: str) -> str:
    """Return the sampler to use; check that an explicitly requested one is installed."""
    return _resolve_optional(name, "sampler.sampler", SAMPLERS, "pymc")


BACKENDS = ("auto", "jax", "numba")


def resolve_backend(name: str) -> str:
    """Return nutpie's compile backend; check that an explicitly requested one is installed."""
    return _resolve_optional(name, "sampler.backend", BACKENDS, "numba")


JITTERED = (
    "p_episode_group",
    "diet_level_sd",
    "walk_sd",
    "walk_corr_z",
    "duration_log_mean",
    "kappa_log_mean",
    "tau_rec_log_mean",
    "gamma",
    "z_disc",
    "z_half_life",
    "extra_sd",
    "shift_sd",
    "shift_corr_z",
)
"""Variables whose start is jittered per chain (the colony-level ones).

The between-animal SDs of onset, duration, κ and τ are not: a chain that
started with them wide (U(−1, 1) on the log scale) let one animal settle in
a minor mode (a strong, fast-recovering episode mimicking a diet step) that
kept those SDs wide, 48 log-density units below the other chain (36-animal
recovery, seed 101: R-hat 2.24); started at the prior centre, both chains
found the same mode (log density −2367 and −2369, R-hat 1.42 at 300 + 300).

Per-animal variables (diet walk, level, growth, episode size) start at their
prior centre: a U(−1, 1) jitter of every walk increment starts a chain with a
wiggly diet that absorbs part of a fast, and such a chain stayed in that mode
(fasters explained by diet, R-hat > 1.5) while the other found the episodes.
"""


START_DAMPING = 0.02
"""Factor on the U(−1, 1) start jitter of the variables not in :data:`JITTERED`.

Not zero: nutpie needs a gradient without exact zeros at the start."""


def _damp_start_jitter(
    compiled: Any, model: pm.Model, start: dict[str, np.ndarray] | None = None
) -> Any:
    """Wrap nutpie's start-point function so only :data:`JITTERED` variables get full jitter.

    nutpie draws each chain's start as the prior centre plus U(−1, 1) on the
    unconstrained scale of every free variable (flattened in the order of
    ``model.free_RVs``); the others' jitter is scaled by
    :data:`START_DAMPING`. ``start`` replaces the prior centre of the named
    variables (unconstrained value names, e.g. points on the phase rings).
    """
    point = {**model.initial_point(), **(start or {})}
    centre, damp = [], []
    for rv in model.free_RVs:
        name = model.rvs_to_values[rv].name
        value = np.asarray(point[name], dtype=float).ravel()
        centre.append(value)
        damp.append(np.full(value.size, rv.name not in JITTERED))
    c = np.concatenate(centre)
    d = np.concatenate(damp)
    field_name = next(
        f for f in ("_make_initial_points", "initial_point_func") if hasattr(compiled, f)
    )
    original = getattr(compiled, field_name)

    def start(seed: Any) -> np.ndarray:
        x = np.array(original(seed), dtype=float)
        if x.shape != c.shape:  # layout not as expected: keep nutpie's own start
            return x
        x[d] = c[d] + START_DAMPING * (x[d] - c[d])
        return x

    return dataclasses.replace(compiled, **{field_name: start})


def sample(built: BuiltModel, settings: SamplerSettings | None = None) -> FitResult:
    """Draw from the posterior of a built model.

    Parameters
    ----------
    built
        Output of :func:`nstress.model.build.build_model`.
    settings
        Sampler settings.

    Returns
    -------
    FitResult
    """
    s = settings or SamplerSettings()
    which = resolve_sampler(s.sampler)
    cores = s.cores or min(s.chains, 2)
    timings: dict[str, float] = {}
    backend = "pytensor-c"
    kw = dict(s.kwargs)
    if s.target_accept is not None:
        kw.setdefault("target_accept", s.target_accept)
    try:
        with threadpool_limits(limits=1):
            if which == "nutpie":
                import nutpie

                t0 = time.perf_counter()
                keep = _stored_names(built)
                backend = resolve_backend(s.backend)
                extra = {"gradient_backend": "jax"} if backend == "jax" else {}
                frozen = freeze_dims_and_data(built.model)
                compiled = nutpie.compile_pymc_model(
                    frozen, backend=backend, var_names=keep, freeze_model=False, **extra
                )
                compiled = _damp_start_jitter(compiled, frozen, built.start)
                timings["compile_s"] = time.perf_counter() - t0
                t0 = time.perf_counter()
                idata = nutpie.sample(
                    compiled,
                    draws=s.draws,
                    tune=s.tune,
                    chains=s.chains,
                    cores=cores,
                    seed=int(s.seed),
                    progress_bar=s.progress,
                    save_warmup=False,
                    **kw,
                )
                timings["sample_s"] = time.perf_counter() - t0
            else:
                t0 = time.perf_counter()
                with built.model:
                    idata = pm.sample(
                        draws=s.draws,
                        tune=s.tune,
                        chains=s.chains,
                        cores=cores,
                        random_seed=int(s.seed),
                        progressbar=s.progress,
                        compute_convergence_checks=False,
                        nuts_sampler="pymc",
                        initvals=built.start or None,
                        **kw,
                    )
                timings["sample_s"] = time.perf_counter() - t0
                timings["compile_s"] = 0.0
    except (ConfigError, KeyboardInterrupt):
        raise
    except Exception as exc:  # noqa: BLE001 - any sampler failure is a failed fit
        raise FitError(f"sampling failed with {which}: {type(exc).__name__}: {exc}") from exc
    bad = [k for k, v in idata.posterior.data_vars.items() if not np.all(np.isfinite(v.values))]
    if bad:
        raise FitError(f"sampling produced non-finite values in {', '.join(sorted(bad))}")
    return FitResult(idata=idata, sampler=which, settings=s, timings=timings, backend=backend)

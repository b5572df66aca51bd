"""Fast approximate posterior for first-pass screening: MAP plus a block Laplace approximation.

The same built model (:func:`nstress.model.build.build_model`) is used: its
log density (with the Jacobians of the transforms, on the unconstrained
space) and gradient are compiled once (JAX when installed), the mode is
found with L-BFGS, and the posterior is approximated by a Gaussian around
it whose precision is the negative Hessian there. Episode presence, onset
and shift start stay summed out exactly, as in the model's likelihood;
:func:`nstress.model.draws.collect` recomputes P(episode) for every draw.

The Hessian is never formed densely. Parameters split into *group-level*
ones (few: hyperparameters, tissues) and *per-animal* ones (one block of the
same size per animal: diet level, walk, episode size, growth, phases, shift).
Animals interact only through the group-level parameters (and, weakly,
through the group mean onset that the likelihood sums out; that coupling is
neglected, which is exact when its posterior sits on one grid value), so
the Hessian is block-arrow shaped:

    H = [[A, B], [Bᵀ, D]],  D = diag(D_1, ..., D_I).

Its columns come from finite differences of the gradient (central, step
:attr:`FastSettings.hessian_step`): one difference per group-level
parameter, and one per *slot* of the animal block with the same slot of
every animal perturbed at once (the blocks do not overlap, so one
difference fills that column of every D_i). That is 2·(g + d) gradients,
whatever the number of animals. Draws then come exactly from the Gaussian
with that precision: group-level parameters from their marginal
N(θ̂, (A − Σ B_i D_i⁻¹ B_iᵀ)⁻¹), each animal from its conditional
N(x̂_i − D_i⁻¹ B_iᵀ(θ − θ̂), D_i⁻¹). Eigenvalues of each block are made
positive (absolute value, floored at :attr:`FastSettings.eig_floor`), which
only matters away from a clean mode.

This is an approximation for screening; it is never the final posterior
(:data:`APPROXIMATE_NOTE`).
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from pymc.model.transform.optimization import freeze_dims_and_data
from threadpoolctl import threadpool_limits

from nstress import dims
from nstress.errors import FitError
from nstress.model.build import BuiltModel

log = logging.getLogger(__name__)

METHOD = "fast"
APPROXIMATE_NOTE = (
    "approximate fast screening (MAP + block Laplace approximation): not a final "
    "posterior; refit flagged animals with full NUTS before drawing conclusions"
)


@dataclass
class FastSettings:
    """Settings of the fast approximate fit.

    Attributes
    ----------
    draws
        Approximate posterior draws S (one pseudo-chain).
    seed
        Seed of the draws.
    maxiter
        L-BFGS iterations at most.
    gtol
        Converged when the largest absolute gradient entry (log density
        units per unit of an unconstrained parameter) is at most this.
    hessian_step
        Step of the central finite differences of the gradient.
    eig_floor
        Smallest curvature kept in a block (eigenvalues below are raised to
        it): an unconstrained SD of at most 1/√0.1 ≈ 3.2, e.g. along the
        angle of a phase that the data do not see.
    backend
        ``"auto"`` (JAX when installed, else PyTensor's default) or a
        PyTensor mode name (``"JAX"``, ``"FAST_RUN"``, ``"NUMBA"``).
    """

    draws: int = 200
    seed: int = 1
    maxiter: int = 5000
    gtol: float = 1.0
    hessian_step: float = 1e-4
    eig_floor: float = 0.1
    backend: str = "auto"


@dataclass
class Layout:
    """Where the group-level and per-animal parameters sit in the flat unconstrained vector.

    Attributes
    ----------
    group
        ``(g,)`` flat positions of the group-level parameters.
    local
        ``(I, d)`` flat positions of each animal's parameters (slot k of
        every animal is the same quantity).
    names
        ``(d,)`` labels of the slots (``variable[index]``).
    """

    group: np.ndarray
    local: np.ndarray
    names: list[str]

    @property
    def size(self) -> int:
        """Length of the flat vector."""
        return int(self.group.size + self.local.size)


def layout(sizes: list[tuple[str, tuple[int, ...], bool]]) -> Layout:
    """Build the layout of a flat vector made of variables laid end to end (C order).

    Parameters
    ----------
    sizes
        Per variable, in order: name, shape, and whether its first axis is
        the animal (``individual``) axis.

    Returns
    -------
    Layout
    """
    group: list[np.ndarray] = []
    local: list[np.ndarray] = []
    names: list[str] = []
    offset = 0
    n_ind = None
    for name, shape, per_animal in sizes:
        n = int(np.prod(shape)) if shape else 1
        idx = offset + np.arange(n)
        offset += n
        if per_animal:
            if n_ind is not None and shape[0] != n_ind:
                raise ValueError(f"{name}: {shape[0]} animals, expected {n_ind}")
            n_ind = shape[0]
            inner = n // shape[0]
            local.append(idx.reshape(shape[0], inner))
            names += [f"{name}[{j}]" for j in range(inner)]
        else:
            group.append(idx)
    g = np.concatenate(group) if group else np.zeros(0, int)
    loc = np.concatenate(local, axis=1) if local else np.zeros((0, 0), int)
    return Layout(group=g.astype(int), local=loc.astype(int), names=names)


@dataclass
class BlockLaplace:
    """A Gaussian with block-arrow precision [[A, B], [Bᵀ, D]] (see the module notes).

    Attributes
    ----------
    mean
        ``(n,)`` the mode x̂.
    lay
        Parameter layout.
    group_cov_chol
        ``(g, g)`` Cholesky factor of the group-level marginal covariance.
    coupling
        ``(I, d, g)`` D_i⁻¹ B_iᵀ: the shift of each animal's conditional
        mean per unit of group-level deviation.
    local_vecs, local_vals
        Eigenvectors ``(I, d, d)`` and floored eigenvalues ``(I, d)`` of D_i.
    n_floored
        Eigenvalues raised to the floor (non-positive or tiny curvature).
    """

    mean: np.ndarray
    lay: Layout
    group_cov_chol: np.ndarray
    coupling: np.ndarray
    local_vecs: np.ndarray
    local_vals: np.ndarray
    n_floored: int

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """Draw ``(n, size)`` points from the Gaussian."""
        lay = self.lay
        out = np.broadcast_to(self.mean, (n, self.mean.size)).copy()
        g = lay.group.size
        dtheta = rng.standard_normal((n, g)) @ self.group_cov_chol.T if g else np.zeros((n, 0))
        out[:, lay.group] += dtheta
        if lay.local.size:
            z = rng.standard_normal((n,) + self.local_vals.shape)  # (n, I, d)
            scaled = z / np.sqrt(self.local_vals)[None]
            dx = (self.local_vecs @ scaled.transpose(1, 2, 0)).transpose(2, 0, 1)
            dx -= (self.coupling @ dtheta.T).transpose(2, 0, 1)
            out[:, lay.local] += dx
        return out

    def covariance(self) -> np.ndarray:
        """Return the dense covariance (small problems only: tests and checks)."""
        lay = self.lay
        n = self.mean.size
        cov = np.zeros((n, n))
        sg = self.group_cov_chol @ self.group_cov_chol.T
        gi = lay.group
        cov[np.ix_(gi, gi)] = sg
        dinv = np.einsum("ijk,ik,ilk->ijl", self.local_vecs, 1.0 / self.local_vals, self.local_vecs)
        cross = -np.einsum("ijg,gh->ijh", self.coupling, sg)  # Cov(x_i, θ)
        for i in range(lay.local.shape[0]):
            li = lay.local[i]
            cov[np.ix_(li, gi)] = cross[i]
            cov[np.ix_(gi, li)] = cross[i].T
            for j in range(lay.local.shape[0]):
                lj = lay.local[j]
                block = self.coupling[i] @ sg @ self.coupling[j].T
                if i == j:
                    block = block + dinv[i]
                cov[np.ix_(li, lj)] = block
        return cov


def _floor_eig(h: np.ndarray, floor: float) -> tuple[np.ndarray, np.ndarray, int]:
    """Symmetrise, eigen-decompose and make the eigenvalues positive (|λ| floored)."""
    h = 0.5 * (h + np.swapaxes(h, -1, -2))
    vals, vecs = np.linalg.eigh(h)
    bad = int(np.sum(vals < floor))
    return np.maximum(np.abs(vals), floor), vecs, bad


def block_laplace(
    grad: Callable[[np.ndarray], np.ndarray],
    mode: np.ndarray,
    lay: Layout,
    step: float = 1e-4,
    eig_floor: float = 1e-3,
) -> BlockLaplace:
    """Laplace approximation with a block-arrow Hessian from finite differences of the gradient.

    Parameters
    ----------
    grad
        Gradient of the log density at a flat point.
    mode
        The mode (flat).
    lay
        Which entries are group-level and which per animal.
    step
        Central-difference step.
    eig_floor
        Smallest curvature kept.

    Returns
    -------
    BlockLaplace
    """
    mode = np.asarray(mode, float)
    n_ind, d = lay.local.shape if lay.local.size else (0, 0)
    g = lay.group.size

    def hcol(v: np.ndarray) -> np.ndarray:  # column(s) of H = −∇² log p
        return -(grad(mode + step * v) - grad(mode - step * v)) / (2.0 * step)

    a = np.zeros((g, g))
    b = np.zeros((n_ind, d, g))  # B_iᵀ: rows of animal i, column of group parameter
    for j in range(g):
        v = np.zeros(mode.size)
        v[lay.group[j]] = 1.0
        col = hcol(v)
        a[:, j] = col[lay.group]
        if d:
            b[:, :, j] = col[lay.local]
    dblk = np.zeros((n_ind, d, d))
    for k in range(d):
        v = np.zeros(mode.size)
        v[lay.local[:, k]] = 1.0
        col = hcol(v)
        dblk[:, :, k] = col[lay.local]
    n_floored = 0
    if d:
        vals, vecs, bad = _floor_eig(dblk, eig_floor)
        n_floored += bad
        # D_i⁻¹ B_iᵀ = V diag(1/λ) Vᵀ B_iᵀ, batched matrix products (no 4-operand einsum)
        coupling = vecs @ ((np.swapaxes(vecs, 1, 2) @ b) / vals[:, :, None])
        schur = 0.5 * (a + a.T) - np.einsum("ijg,ijh->gh", b, coupling, optimize=True)
    else:
        vals, vecs = np.zeros((0, 0)), np.zeros((0, 0, 0))
        coupling = np.zeros((0, 0, g))
        schur = 0.5 * (a + a.T)
    if g:
        sv, svec, bad = _floor_eig(schur, eig_floor)
        n_floored += bad
        chol = np.linalg.cholesky(svec @ np.diag(1.0 / sv) @ svec.T)
    else:
        chol = np.zeros((0, 0))
    return BlockLaplace(
        mean=mode,
        lay=lay,
        group_cov_chol=chol,
        coupling=coupling,
        local_vecs=vecs,
        local_vals=vals,
        n_floored=n_floored,
    )


def find_mode(
    logp_grad: Callable[[np.ndarray], tuple[float, np.ndarray]],
    x0: np.ndarray,
    maxiter: int = 5000,
    gtol: float = 1.0,
    restarts: int = 5,
) -> tuple[np.ndarray, dict[str, Any]]:
    """Maximise a log density with L-BFGS (SciPy).

    Parameters
    ----------
    logp_grad
        Log density and its gradient at a flat point.
    x0
        Start.
    maxiter
        Iterations at most.
    gtol
        Converged when max |gradient| ≤ ``gtol``.
    restarts
        Restarts from the best point seen when the optimiser stopped short
        of a mode but had improved.

    Returns
    -------
    tuple
        The mode and optimiser information (``converged``, ``iterations``,
        ``evaluations``, ``grad_max``, ``logp``, ``message``).
    """
    from scipy.optimize import minimize

    n_eval = 0
    best: dict[str, Any] = {"lp": -np.inf, "x": np.asarray(x0, float), "g": None}

    def fun(x: np.ndarray) -> tuple[float, np.ndarray]:
        # A point where the density or its gradient is not finite is returned as a very
        # high value with the last good gradient (not zero: a zero gradient there made
        # L-BFGS-B stop at once, "converged", on NaN); its line search then steps back.
        nonlocal n_eval
        n_eval += 1
        lp, g = logp_grad(x)
        g = np.asarray(g, float)
        if not (np.isfinite(lp) and np.all(np.isfinite(g))):
            g_last = best["g"] if best["g"] is not None else np.ones_like(x)
            return 1e300, -g_last
        if lp > best["lp"]:
            best.update(lp=float(lp), x=np.array(x, float), g=g)
        return -float(lp), -g

    def at_mode() -> bool:
        return best["g"] is not None and float(np.max(np.abs(best["g"]), initial=0.0)) <= gtol

    # restarted from the best point while it stops short of a mode but still improves
    # (a stop at a non-finite point ends the run with "relative reduction of f")
    x_start = np.asarray(x0, float)
    nit = 0
    for _ in range(restarts + 1):
        before = best["lp"]
        res = minimize(
            fun,
            x_start,
            jac=True,
            method="L-BFGS-B",
            options={
                "maxiter": maxiter - nit,
                "maxcor": 30,
                "gtol": gtol,
                "ftol": 1e-13,
                "maxfun": 2 * maxiter,
            },
        )
        nit += int(res.nit)
        if at_mode() or nit >= maxiter or not best["lp"] > before + 1e-9:
            break
        x_start = best["x"]
    # the best finite point seen (L-BFGS-B's own end point is one of those it evaluated)
    x_end = best["x"]
    lp, g = (best["lp"], best["g"]) if best["g"] is not None else logp_grad(x_end)
    g = np.asarray(g, float)
    gmax = float(np.max(np.abs(g))) if g.size else 0.0
    info = {
        "converged": bool(np.isfinite(lp) and gmax <= gtol),
        "optimizer_success": bool(res.success),
        "iterations": nit,
        "evaluations": int(n_eval),
        "grad_max": gmax,
        "logp": float(lp),
        "message": str(res.message),
    }
    return x_end, info


@dataclass
class Recentring:
    """Optimise a centred pooled variable in non-centred coordinates (u = (b − μ_g)/σ).

    The joint mode of a centred hierarchy is degenerate (σ → 0 with every
    b_i → μ has unbounded density; the diet level went to σ = e⁻¹⁶ with the
    animals' offsets moved into their walks). In u coordinates the density
    carries the Jacobian σᴵ and the mode is proper. The flat vector keeps its
    layout: u sits where b was.

    Attributes
    ----------
    local, mean, logsd
        Flat positions of b ``(I, k)``, of μ ``(G, k)`` and of log σ ``(k,)``.
    group_index
        ``(I,)`` group of each animal.
    """

    local: np.ndarray
    mean: np.ndarray
    logsd: np.ndarray
    group_index: np.ndarray

    def to_model(self, xu: np.ndarray) -> np.ndarray:
        """Flat point(s) in model coordinates from u coordinates (last axis flat)."""
        x = np.array(xu, float, copy=True)
        s = np.exp(xu[..., self.logsd])
        mu = xu[..., self.mean][..., self.group_index, :]
        x[..., self.local] = mu + s[..., None, :] * xu[..., self.local]
        return x

    def from_model(self, x: np.ndarray) -> np.ndarray:
        """Flat point in u coordinates from model coordinates."""
        xu = np.array(x, float, copy=True)
        s = np.exp(x[self.logsd])
        xu[self.local] = (x[self.local] - x[self.mean][self.group_index]) / s
        return xu

    def logp_grad(
        self, xu: np.ndarray, f: Callable[[np.ndarray], tuple[float, np.ndarray]]
    ) -> tuple[float, np.ndarray]:
        """Log density (with the Jacobian σᴵ) and gradient in u coordinates."""
        lp, g = f(self.to_model(xu))
        s = np.exp(xu[self.logsd])
        gb = g[self.local]  # (I, k)
        gu = np.array(g, float, copy=True)
        gu[self.local] = s * gb
        np.add.at(gu, self.mean[self.group_index], gb)
        n = self.local.shape[0]
        gu[self.logsd] += (gb * s * xu[self.local]).sum(axis=0) + n
        return lp + n * float(np.sum(xu[self.logsd])), gu


def recentring(
    built: BuiltModel, sizes: list[tuple[str, tuple[int, ...], bool]]
) -> Recentring | None:
    """Return the recentring of the diet level when the model has it (``None`` otherwise)."""
    names = ("diet_level", "diet_level_group", "diet_level_sd_log__")
    where, offset = {}, 0
    for name, shape, _ in sizes:
        n = int(np.prod(shape)) if shape else 1
        where[name] = np.arange(offset, offset + n).reshape(shape)
        offset += n
    if not all(n in where for n in names):
        return None
    loc, mean, logsd = (where[n] for n in names)
    if loc.ndim != 2 or mean.ndim != 2 or logsd.shape != (loc.shape[1],):
        return None
    return Recentring(loc, mean, logsd, np.asarray(built.timebase.group_index, int))


def _pytensor_mode(backend: str) -> str | None:
    import importlib.util

    if backend == "auto":
        return "JAX" if importlib.util.find_spec("jax") is not None else None
    return backend


def fast_fit(built: BuiltModel, settings: FastSettings | None = None) -> Any:
    """Approximate posterior of a built model: MAP, block Laplace, S draws.

    Parameters
    ----------
    built
        Output of :func:`nstress.model.build.build_model`.
    settings
        Fast-fit settings.

    Returns
    -------
    nstress.model.fit.FitResult
        ``idata`` has one pseudo-chain of S draws of the variables the
        products need (:func:`nstress.model.fit._stored_names`), with
        ``idata.posterior.attrs["approximate"] = 1``; ``sampler`` is
        ``"fast"``; ``info`` holds the optimiser and Laplace information.

    Raises
    ------
    FitError
        If the log density cannot be evaluated or the draws are not finite.
    """
    import arviz as az

    from nstress.model.fit import FitResult, SamplerSettings, _stored_names

    s = settings or FastSettings()
    timings: dict[str, float] = {}
    mode_name = _pytensor_mode(s.backend)
    try:
        with threadpool_limits(limits=1):
            t0 = time.perf_counter()
            model = freeze_dims_and_data(built.model)
            value_vars = list(model.value_vars)
            point = {**model.initial_point(), **(built.start or {})}
            sizes, inds = [], []
            for v in value_vars:
                rv = model.values_to_rvs[v]
                d = model.named_vars_to_dims.get(rv.name) or ()
                shape = tuple(np.shape(point[v.name]))
                sizes.append((v.name, shape, bool(d) and d[0] == dims.INDIVIDUAL))
                inds.append(rv.name)
            lay = layout(sizes)
            kw = {"mode": mode_name} if mode_name else {}
            fn = model.logp_dlogp_function(grad_vars=value_vars, ravel_inputs=True, **kw)
            fn.set_extra_values({})
            x0 = np.concatenate([np.ravel(np.asarray(point[v.name], float)) for v in value_vars])

            def logp_grad(x: np.ndarray) -> tuple[float, np.ndarray]:
                lp, g = fn(x)
                return float(lp), np.asarray(g, float)

            logp_grad(x0)  # compiles (JAX: on the first call)
            timings["compile_s"] = time.perf_counter() - t0
            log.info("fast fit: compiled in %.0f s (dimension %d)", timings["compile_s"], x0.size)
            rc = recentring(built, sizes)
            if rc is not None:
                x0 = rc.from_model(x0)
                model_logp_grad = logp_grad

                def logp_grad(x: np.ndarray) -> tuple[float, np.ndarray]:
                    return rc.logp_grad(x, model_logp_grad)

            t0 = time.perf_counter()
            x_hat, info = find_mode(logp_grad, x0, maxiter=s.maxiter, gtol=s.gtol)
            timings["optimise_s"] = time.perf_counter() - t0
            log.info("fast fit: mode in %.0f s (%s)", timings["optimise_s"], info["message"])
            t0 = time.perf_counter()
            lap = block_laplace(lambda x: logp_grad(x)[1], x_hat, lay, s.hessian_step, s.eig_floor)
            timings["laplace_s"] = time.perf_counter() - t0
            t0 = time.perf_counter()
            rng = np.random.default_rng(s.seed)
            flat = lap.sample(rng, s.draws)
            if rc is not None:
                flat = rc.to_model(flat)
            posterior = _constrained_draws(model, value_vars, sizes, flat, _stored_names(built))
            timings["draws_s"] = time.perf_counter() - t0
    except (FitError, KeyboardInterrupt):
        raise
    except Exception as exc:  # noqa: BLE001 - any failure of the approximation is a failed fit
        raise FitError(f"fast fit failed: {type(exc).__name__}: {exc}") from exc
    bad = [k for k, v in posterior.items() if not np.all(np.isfinite(v))]
    if bad:
        raise FitError(f"fast fit produced non-finite values in {', '.join(sorted(bad))}")
    coords = {k: list(v) for k, v in built.model.coords.items()}
    var_dims = {k: list(built.model.named_vars_to_dims.get(k) or ()) for k in posterior}
    var_dims = {k: v for k, v in var_dims.items() if v}
    idata = az.from_dict(posterior=posterior, coords=coords, dims=var_dims)
    idata.posterior.attrs["approximate"] = 1
    idata.posterior.attrs["method"] = METHOD
    info.update(
        {
            "draws": int(s.draws),
            "dimension": int(lay.size),
            "group_parameters": int(lay.group.size),
            "per_animal_parameters": int(lay.local.shape[1]) if lay.local.size else 0,
            "eigenvalues_floored": int(lap.n_floored),
            "gradient_evaluations_laplace": int(2 * (lay.group.size + lay.local.shape[1])),
            "settings": asdict(s),
        }
    )
    fr = FitResult(
        idata=idata,
        sampler=METHOD,
        settings=SamplerSettings(draws=s.draws, chains=1, tune=0, seed=s.seed, sampler=METHOD),
        timings=timings,
        backend=f"pytensor-{(mode_name or 'default').lower()}",
        info=info,
    )
    return fr


def _constrained_draws(
    model: Any,
    value_vars: list[Any],
    sizes: list[tuple[str, tuple[int, ...], bool]],
    flat: np.ndarray,
    names: list[str],
) -> dict[str, np.ndarray]:
    """Map unconstrained flat draws to the named variables (constrained) and deterministics.

    Returns
    -------
    dict
        Name -> ``(1, S, ...)`` array (one pseudo-chain).
    """
    import pytensor

    wanted = [model.named_vars[n] for n in names]
    outs = model.replace_rvs_by_values(wanted)
    f = pytensor.function(value_vars, outs, on_unused_input="ignore", mode="FAST_COMPILE")
    cuts = np.cumsum([int(np.prod(sh)) if sh else 1 for _, sh, _ in sizes])[:-1]
    result: dict[str, list[np.ndarray]] = {n: [] for n in names}
    for row in flat:
        parts = np.split(row, cuts)
        args = [p.reshape(sh) for p, (_, sh, _) in zip(parts, sizes, strict=True)]
        for n, val in zip(names, f(*args), strict=True):
            result[n].append(np.asarray(val, float))
    return {n: np.stack(v)[None] for n, v in result.items()}

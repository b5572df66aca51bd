"""Diagnostics of a fit: convergence on identified quantities, and predictive checks.

Convergence (R-hat, bulk/tail ESS) is judged on quantities the data
identify (model.md section 5): the diet path, P(episode) per animal, the
presence-weighted enrichment per bin, group hyperparameters, discrimination
and turnover. An animal without an episode has an unconstrained onset whose
R-hat means nothing; onset is therefore not among them. The report says
which quantities the check covered.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from nstress.model import posterior as post
from nstress.model.build import BuiltModel
from nstress.model.draws import Draws, Replicates, latent_paths, predictive_replicates

HYPER = (
    "p_episode_group",
    "diet_level_group",
    "diet_level_sd",
    "walk_sd",
    "walk_corr",
    "onset_group",
    "onset_sd",
    "duration_log_mean",
    "kappa_log_mean",
    "tau_rec_log_mean",
    "gamma",
    "growth_log_mean",
    "shift_sd",
)


@dataclass
class Thresholds:
    """Pass marks of a fit (configurable)."""

    rhat_max: float = 1.01
    ess_bulk_min: float = 400.0
    ess_tail_min: float = 400.0
    divergences_max: int = 0
    ppc_coverage_min: float = 0.75  # share of observations inside their 90 % predictive interval


@dataclass
class Diagnostics:
    """Diagnostics of one fit; ``ok`` travels to every product."""

    ok: bool
    reasons: list[str]
    convergence: dict[str, dict[str, float]]
    sampler: dict[str, float]
    ppc: dict[str, dict[str, float]]
    individual_ok: np.ndarray
    individual_rhat: np.ndarray
    covered: list[str] = field(default_factory=list)
    method: str = "nuts"
    """``"nuts"``: R-hat/ESS/divergence checks; ``"fast"``: sanity checks of an approximation."""
    approximate: bool = False
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """Plain data for manifests and files."""
        d = asdict(self)
        d["individual_ok"] = [bool(x) for x in self.individual_ok]
        d["individual_rhat"] = [float(x) for x in self.individual_rhat]
        return d


def _identified(built: BuiltModel, d: Draws, paths: dict[str, np.ndarray], idata: Any) -> dict:
    tb = built.timebase
    mask = tb.bin_mask
    # diet path and presence-weighted enrichment at every 2nd real bin
    sel = mask & (np.arange(tb.T)[None, :] % 2 == 0)
    ii, tt = np.nonzero(sel)
    diet = paths["diet"][:, ii, tt, :]
    weighted = d.p_cond[:, ii] * paths["enrich"][:, ii, tt]
    arrays = {
        "diet_path": d.by_chain(diet),
        "p_episode": d.by_chain(np.clip(d.p_cond, 1e-4, 1 - 1e-4)),
        "enrichment_weighted": d.by_chain(np.round(weighted, 6)),
        "discrimination": d.by_chain(d.params["discrimination"]),
        "half_life": d.by_chain(d.params["half_life"]),
    }
    per = d.chain_draw[1]
    for name in HYPER:
        if post.has_var(idata, name):
            a = post.var(idata, name)
            step = max(1, a.shape[1] // per)
            arrays[name] = a[:, ::step][:, :per]
        elif name in d.params:  # summed out in the model, drawn per draw (draws.collect)
            arrays[name] = d.by_chain(d.params[name])
    return arrays


def _ppc(
    built: BuiltModel, d: Draws, seed: int, reps: Replicates | None = None
) -> dict[str, dict[str, float]]:
    """Coverage of 90 % posterior predictive intervals, and standardised residuals, per tissue.

    ``reps`` are the draws' replicates (:func:`predictive_replicates`, 200
    draws, this seed) when the caller has them already.
    """
    tb = built.timebase
    reps = reps or predictive_replicates(built, d, seed=seed)
    out: dict[str, dict[str, float]] = {}
    for name, o in (("blood", tb.blood), ("keratin", tb.keratin)):
        if not o.mask.any():
            continue
        r = reps.replicated[name]  # (R, I, N, 2)
        lo, hi = np.quantile(r, [0.05, 0.95], axis=0)
        mean, sdv = r.mean(0), r.std(0) + 1e-9
        m = o.y_mask & o.mask[..., None]
        inside = (o.y >= lo) & (o.y <= hi)
        zres = (o.y - mean) / sdv
        for k, tname in enumerate(tb.tissues):
            for c, iso in enumerate(("d15N", "d13C")):
                sel = m[..., c] & (o.tissue == k)
                if sel.sum() == 0:
                    continue
                out[f"{tname}:{iso}"] = {
                    "n": int(sel.sum()),
                    "coverage90": float(inside[..., c][sel].mean()),
                    "mean_z": float(zres[..., c][sel].mean()),
                    "sd_z": float(zres[..., c][sel].std()),
                }
    return out


def _ppc_reasons(ppc: dict[str, dict[str, float]], th: Thresholds) -> list[str]:
    """Reasons for every tissue and isotope whose predictive coverage is below the pass mark."""
    return [
        f"posterior predictive check of {key}: {v['coverage90']:.0%} of observations "
        f"inside their 90 % interval (< {th.ppc_coverage_min:.0%})"
        for key, v in ppc.items()
        if v["coverage90"] < th.ppc_coverage_min
    ]


def diagnose(
    built: BuiltModel,
    idata: Any,
    d: Draws,
    thresholds: Thresholds | None = None,
    seed: int = 0,
    paths: dict[str, np.ndarray] | None = None,
    reps: Replicates | None = None,
) -> Diagnostics:
    """Judge a fit on identified quantities, sampler statistics and predictive checks.

    Parameters
    ----------
    built
        Built model.
    idata
        Posterior.
    d
        Collected draws (:func:`nstress.model.draws.collect`).
    thresholds
        Pass marks.
    seed
        Seed of the predictive replicates.
    paths
        Latent paths of ``d`` (:func:`nstress.model.draws.latent_paths`) if already computed.
    reps
        Predictive replicates of ``d`` (:func:`nstress.model.draws.predictive_replicates`
        with this seed) if already computed.

    Returns
    -------
    Diagnostics
    """
    th = thresholds or Thresholds()
    paths = latent_paths(built, d) if paths is None else paths
    arrays = _identified(built, d, paths, idata)
    conv = post.summarise_arrays(arrays)
    n_chain, n_draw = post.n_chains_draws(idata)
    # ESS of the thinned arrays understates the full chains' ESS by the thinning factor
    thin = n_draw / d.chain_draw[1]
    for v in conv.values():
        v["ess_bulk_min"] *= thin if thin > 1 else 1.0
        v["ess_tail_min"] *= thin if thin > 1 else 1.0
    ss = post.sampler_stats(idata)
    ppc = _ppc(built, d, seed, reps)
    reasons = []
    if n_chain < 2:
        reasons.append(f"{n_chain} chain: R-hat needs at least 2 chains, convergence is unchecked")
    for name, v in conv.items():
        if not np.isfinite(v["rhat_max"]) and n_chain >= 2:
            reasons.append(f"R-hat of {name} could not be computed")
        if v["rhat_max"] > th.rhat_max:
            reasons.append(f"R-hat of {name} is {v['rhat_max']:.3f} (> {th.rhat_max})")
        if v["ess_bulk_min"] < th.ess_bulk_min:
            reasons.append(
                f"bulk ESS of {name} is {v['ess_bulk_min']:.0f} (< {th.ess_bulk_min:.0f})"
            )
        if v["ess_tail_min"] < th.ess_tail_min:
            reasons.append(
                f"tail ESS of {name} is {v['ess_tail_min']:.0f} (< {th.ess_tail_min:.0f})"
            )
    if ss.get("divergences", 0) > th.divergences_max:
        reasons.append(f"{ss['divergences']} divergent transitions")
    reasons += _ppc_reasons(ppc, th)
    # per individual: R-hat of its P(episode) and weighted enrichment
    ind_rhat = post.rhat_per_column(d.by_chain(np.clip(d.p_cond, 1e-4, 1 - 1e-4)))
    ind_ok = ind_rhat <= max(th.rhat_max, 1.05)
    return Diagnostics(
        ok=not reasons,
        reasons=reasons,
        convergence=conv,
        sampler=ss,
        ppc=ppc,
        individual_ok=ind_ok,
        individual_rhat=ind_rhat,
        covered=sorted(conv),
    )


FAST_NOT_APPLICABLE = (
    "R-hat, ESS and divergences do not apply to the fast approximation (no Markov chains); "
    "these are sanity checks of the approximation, not NUTS diagnostics"
)


def diagnose_fast(
    built: BuiltModel,
    d: Draws,
    info: dict[str, Any],
    thresholds: Thresholds | None = None,
    seed: int = 0,
    reps: Replicates | None = None,
) -> Diagnostics:
    """Sanity checks of the fast approximation (:mod:`nstress.model.fast`).

    Passing them means the screening statuses may be used for *screening*;
    it never means the fit passed NUTS diagnostics (``method`` is
    ``"fast"`` and ``approximate`` is true). The checks: the optimiser
    reached a mode (``info["converged"]``: max |gradient| at most its
    tolerance), every draw is finite, and the posterior predictive coverage
    of every tissue and isotope is at least ``ppc_coverage_min``.

    Parameters
    ----------
    built
        Built model.
    d
        Collected draws of the approximation.
    info
        The fast fit's information (:attr:`nstress.model.fit.FitResult.info`).
    thresholds
        Pass marks (only ``ppc_coverage_min`` applies).
    seed
        Seed of the predictive replicates.
    reps
        Predictive replicates of ``d`` if already computed.

    Returns
    -------
    Diagnostics
    """
    th = thresholds or Thresholds()
    ppc = _ppc(built, d, seed, reps)
    reasons = []
    if not info.get("converged", False):
        reasons.append(
            "the optimiser did not reach a mode (max |gradient| "
            f"{info.get('grad_max', float('nan')):.3g} after {info.get('iterations', 0)} "
            f"iterations: {info.get('message', '')})"
        )
    finite = all(np.all(np.isfinite(v)) for v in d.params.values()) and np.all(
        np.isfinite(d.p_cond)
    )
    if not finite:
        reasons.append("non-finite values in the approximate draws")
    reasons += _ppc_reasons(ppc, th)
    n_i = d.p_cond.shape[1]
    ind_ok = np.isfinite(d.p_cond).all(axis=0)
    keys = ("converged", "iterations", "evaluations", "grad_max", "eigenvalues_floored", "draws")
    return Diagnostics(
        ok=not reasons,
        reasons=reasons,
        convergence={},
        sampler={k: info[k] for k in keys if k in info},
        ppc=ppc,
        individual_ok=ind_ok,
        individual_rhat=np.full(n_i, np.nan),
        covered=[],
        method="fast",
        approximate=True,
        notes=[FAST_NOT_APPLICABLE],
    )

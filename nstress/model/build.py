"""Build the hierarchical PyMC model from a time base (model.md sections 1-4).

One model for the whole colony, vectorised over individuals (no per-animal
sub-models). Per individual i:

* diet path D_i(t): level b_i + random walk on coarse knots with correlated
  (δ15N, δ13C) Student-t increments and a pooled scale (a diet shift is one
  large step);
* one catabolic episode (onset, duration, rate κ_i, recovery τ_i) whose
  *presence* is a discrete indicator and whose *onset* is a discrete choice
  among candidate onsets c_m (every few days over what the samples see),
  both summed out exactly: the individual's likelihood is
  (1 − π_g)·p(y_i | no episode) + π_g·Σ_m w_im·p(y_i | episode at c_m),
  with w_im the group's onset prior Normal(μ_on,g, σ_on) on the grid;
* body pool P = D + E·(1, γ_g); tissue k sees P through its kernel
  (one-compartment weights for blood, soft growth windows for keratin) plus
  its discrimination Δ_k; keratin growth multiplier r_i is a parameter;
* observation y ~ Normal(Y, sqrt(sd_row² + σ_k²)).

Pooled quantities are non-centred, except the diet level and the growth
multipliers, which each animal's samples pin down (centred is better
conditioned there). Dims: ``individual``, ``bin``,
``tissue``, ``isotope``, ``episode``, plus ``knot_step``, ``group``,
``keratin_tissue``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from nstress import dims
from nstress.errors import ConfigError
from nstress.model import forward
from nstress.model.priors import resolve_priors
from nstress.prep.timebase import TimeBase

GROWTH_UNIT = 0.05
"""Unit (log scale) in which growth multipliers are sampled (see :func:`build_model`)."""


@dataclass
class ModelSpec:
    """Settings that change the model (and so the results).

    Attributes
    ----------
    knot_days
        Knot spacing of the diet random walk (days).
    onset_step_days
        Spacing of the candidate episode onsets that the likelihood sums
        over (days).
    priors
        Prior overrides (see :mod:`nstress.model.priors`).
    walk
        ``"noncentred"`` or ``"centred"`` parameterisation of the diet walk.
    walk_increments
        ``"student_t"`` (heavy-tailed: a diet shift is one large step) or
        ``"normal"`` (Gaussian; the known-answer case of a local-level model).
        Applies to the non-centred walk; the centred walk is always Gaussian.
    walk_scale_per_animal
        Whether each animal's walk has its own scale (another way to let
        diet shifters move; it makes a funnel with the increments).
    episodes
        ``False`` switches catabolism off (diet-only model: the likelihood is
        the no-episode component alone); a known-answer and diagnostic case.
    reference_tissue
        Tissue whose discrimination is fixed at its prior mean (identifies
        the diet level); default: a keratin tissue if present, else the
        first blood tissue.
    """

    knot_days: float = forward.DEFAULT_KNOT_DAYS
    onset_step_days: float = forward.DEFAULT_ONSET_STEP_DAYS
    priors: dict[str, dict[str, Any]] = field(default_factory=dict)
    reference_tissue: str | None = None
    walk: str = "noncentred"
    walk_increments: str = "student_t"
    walk_scale_per_animal: bool = False
    episodes: bool = True


@dataclass
class BuiltModel:
    """A PyMC model and what is needed to interpret its posterior."""

    model: pm.Model
    timebase: TimeBase
    grid: forward.Grid
    spec: ModelSpec
    priors: dict[str, dict[str, Any]]
    reference_tissue: str


def _coords(tb: TimeBase, grid: forward.Grid) -> dict[str, Any]:
    return {
        dims.INDIVIDUAL: [str(x) for x in tb.individuals],
        dims.BIN: np.arange(tb.T),
        dims.TISSUE: list(tb.tissues),
        dims.ISOTOPE: list(dims.ISOTOPES),
        dims.EPISODE: [0],
        dims.GROUP: [str(g) for g in tb.groups],
        "knot_step": np.arange(grid.n_steps),
        "keratin_tissue": list(tb.keratin_tissues) or ["none"],
    }


def data_centre(tb: TimeBase) -> np.ndarray:
    """Mean (δ15N, δ13C) of the observations minus their tissues' prior discrimination."""
    disc = np.array(
        [[tb.tissue_defs[t].disc_d15N, tb.tissue_defs[t].disc_d13C] for t in tb.tissues]
    )
    vals = []
    for o in (tb.blood, tb.keratin):
        if o.mask.any():
            v = np.where(o.y_mask, o.y - disc[o.tissue], np.nan)
            vals.append(v.reshape(-1, 2))
    allv = np.concatenate(vals)
    c = np.nanmean(np.where(np.isfinite(allv), allv, np.nan), axis=0)
    return np.where(np.isnan(c), 0.0, c)


def onset_log_weights(grid: forward.Grid, tb: TimeBase, mu: Any, sd: Any, xp: Any = np) -> Any:
    """Log prior weights ``(I, M)`` of the candidate onsets, normalised per individual.

    The onset prior Normal(μ_on,g, σ_on) (group time) is discretised on the
    candidate grid with σ widened by the grid's own spread,
    σ_eff² = σ_on² + step²/12 (a uniform spread within a grid cell), so that
    the weights stay smooth in μ and σ even when σ_on is below the spacing.

    Parameters
    ----------
    grid
        Grid with the candidate onsets.
    tb
        Time base (for each individual's origin offset).
    mu
        ``(I,)`` group mean onset of each individual's group (days since the
        earliest origin), or ``(S, I)`` for S draws.
    sd
        Between-animal SD of onset (days), scalar or ``(S,)``.
    xp
        Array namespace.
    """
    c_abs = grid.onset_days + tb.origin_offset[:, None]  # (I, M)
    sd = sd if xp is not np else np.asarray(sd, float)
    sd_eff = xp.sqrt(sd**2 + grid.onset_step**2 / 12.0)
    if xp is np and np.ndim(mu) == 2:
        z = (c_abs[None] - mu[..., None]) / sd_eff.reshape(-1, 1, 1)
    else:
        z = (c_abs - mu[:, None]) / sd_eff
    logw = xp.where(grid.onset_mask, -0.5 * z**2, -1e10)
    if xp is np:
        top = logw.max(axis=-1, keepdims=True)
        lse = top + np.log(np.exp(logw - top).sum(axis=-1, keepdims=True))
    else:
        lse = pt.logsumexp(logw, axis=-1, keepdims=True)
    return logw - lse


def build_model(tb: TimeBase, spec: ModelSpec | None = None) -> BuiltModel:
    """Build the colony model.

    Parameters
    ----------
    tb
        Time base of the prepared samples.
    spec
        Model settings; defaults if ``None``.

    Returns
    -------
    BuiltModel
    """
    spec = spec or ModelSpec()
    if spec.walk not in ("noncentred", "centred"):
        raise ConfigError(f"unknown walk {spec.walk!r}", key="model.walk")
    if spec.walk_increments not in ("student_t", "normal"):
        raise ConfigError(
            f"unknown walk_increments {spec.walk_increments!r}; expected 'student_t' or 'normal'",
            key="model.walk_increments",
        )
    pr = resolve_priors(spec.priors)
    if not spec.onset_step_days > 0:
        raise ConfigError("onset_step_days must be > 0", key="model.onset_step_days")
    grid = forward.make_grid(tb, spec.knot_days, onset_step=spec.onset_step_days)
    I, G = tb.n_individuals, len(tb.groups)  # noqa: E741
    gi = tb.group_index
    n_tis = len(tb.tissues)
    tdefs = [tb.tissue_defs[t] for t in tb.tissues]
    ref = spec.reference_tissue or (tb.keratin_tissues[0] if tb.keratin_tissues else tb.tissues[0])
    ref_idx = tb.tissues.index(ref)
    centre = data_centre(tb)

    # group time references, for onset pooling (days since the group's earliest origin)
    t_events = []
    for o in (tb.blood, tb.keratin):
        t_abs = np.where(o.mask, o.t + tb.origin_offset[:, None], np.nan)
        t_events.append(t_abs)
    t_all = np.concatenate(t_events, axis=1)
    span_lo = np.nanmin(np.where(np.isfinite(t_all), t_all, np.inf), axis=1) - 0.0
    # a keratin record reaches back in time: use the grid start instead for keratin
    ind_lo = np.minimum(span_lo, tb.origin_offset + 0.0)
    ind_hi = np.nanmax(np.where(np.isfinite(t_all), t_all, -np.inf), axis=1)
    g_lo = np.array([ind_lo[gi == g].min() for g in range(G)])
    g_hi = np.array([ind_hi[gi == g].max() for g in range(G)])
    g_mid = 0.5 * (g_lo + g_hi)
    g_half = np.maximum(0.5 * (g_hi - g_lo), 10.0)

    step_mask = np.zeros((I, grid.n_steps))
    end_days = tb.n_bins * tb.bin_width
    step_mask[:] = (grid.knots[1:][None, :] <= end_days[:, None] + spec.knot_days).astype(float)

    with pm.Model(coords=_coords(tb, grid)) as model:
        # ---- episode presence (marginalised) ---------------------------
        p = pr["p_episode"]
        pi = pm.Beta("p_episode_group", alpha=p["alpha"], beta=p["beta"], dims=dims.GROUP)

        # ---- diet level and walk -------------------------------------------
        mu_b = pm.Normal(
            "diet_level_group",
            mu=centre,
            sigma=pr["baseline_mean_sd"]["sigma"],
            shape=(G, 2),
            dims=(dims.GROUP, dims.ISOTOPE),
        )
        sd_b = pm.HalfNormal("diet_level_sd", sigma=pr["baseline_sd"]["sigma"], dims=dims.ISOTOPE)
        # centred: every animal's level is pinned by its own samples, and a non-centred
        # level is then nearly collinear with the group mean (a stiff direction for NUTS)
        baseline = pm.Normal(
            "diet_level", mu=mu_b[gi], sigma=sd_b, dims=(dims.INDIVIDUAL, dims.ISOTOPE)
        )
        w_sd = pm.HalfNormal("walk_sd", sigma=pr["walk_sd"]["sigma"], dims=dims.ISOTOPE)
        w_corr_raw = pm.Normal("walk_corr_z", pr["walk_corr"]["mu"], pr["walk_corr"]["sigma"])
        rho = pm.Deterministic("walk_corr", pt.tanh(w_corr_raw))
        if spec.walk_scale_per_animal:
            z_ws = pm.Normal("z_walk_scale", 0.0, 1.0, dims=dims.INDIVIDUAL)
            w_scale = pt.exp(pr["walk_scale_log_sd"]["value"] * z_ws)
        else:
            w_scale = pt.ones((I,))
        scale = (w_scale[:, None] * step_mask)[..., None] * w_sd  # (I, K-1, 2)
        if spec.walk == "centred":
            # centred: better when the data pin the path down (dense keratin series)
            safe = pt.where(step_mask[..., None] > 0, scale, 1.0)
            s_n = pm.Normal("walk_d15N", 0.0, safe[..., 0], dims=(dims.INDIVIDUAL, "knot_step"))
            cond_mu = rho * safe[..., 1] / safe[..., 0] * s_n
            s_c = pm.Normal(
                "walk_d13C",
                cond_mu,
                safe[..., 1] * pt.sqrt(1.0 - rho**2),
                dims=(dims.INDIVIDUAL, "knot_step"),
            )
            raw = pt.stack([s_n, s_c], axis=-1) * (step_mask[..., None] > 0)
        else:
            zdims = (dims.INDIVIDUAL, "knot_step", dims.ISOTOPE)
            if spec.walk_increments == "student_t":
                z_w = pm.StudentT(
                    "z_walk", nu=pr["walk_df"]["value"], mu=0.0, sigma=1.0, dims=zdims
                )
            else:
                z_w = pm.Normal("z_walk", 0.0, 1.0, dims=zdims)
            step_n = z_w[..., 0]
            step_c = rho * z_w[..., 0] + pt.sqrt(1.0 - rho**2) * z_w[..., 1]
            raw = pt.stack([step_n, step_c], axis=-1) * scale
        steps = pm.Deterministic(
            "diet_steps", raw, dims=(dims.INDIVIDUAL, "knot_step", dims.ISOTOPE)
        )

        # ---- episode timing: onset summed exactly over candidate onsets -------
        # A continuous onset per animal made NUTS chains settle in different
        # modes (an episode parked where no sample sees it, or a colony-wide
        # timing shift traded against growth); summing over the grid removes them.
        mu_on = pm.Normal("onset_group", mu=g_mid, sigma=g_half, dims=dims.GROUP)
        sd_on = pm.HalfNormal("onset_sd", sigma=pr["onset_sd"]["sigma"])
        onset_log_w = onset_log_weights(grid, tb, mu_on[gi], sd_on, xp=pt)

        def _lognormal_group(name: str, key: str) -> Any:
            m = pm.Normal(
                f"{name}_log_mean",
                pr[f"{key}_log_mean"]["mu"],
                pr[f"{key}_log_mean"]["sigma"],
                dims=dims.GROUP,
            )
            s = pm.HalfNormal(f"{name}_log_sd", sigma=pr[f"{key}_log_sd"]["sigma"])
            z = pm.Normal(f"z_{name}", 0.0, 1.0, dims=dims.INDIVIDUAL)
            return pm.Deterministic(name, pt.exp(m[gi] + s * z), dims=dims.INDIVIDUAL)

        duration = _lognormal_group("duration", "duration")
        kappa = _lognormal_group("kappa", "kappa")
        tau_rec = _lognormal_group("tau_rec", "tau_rec")
        gamma_g = pm.Normal("gamma", pr["gamma"]["mu"], pr["gamma"]["sigma"], dims=dims.GROUP)
        gamma = gamma_g[gi]

        # ---- tissues ----------------------------------------------------
        disc_mu = np.array([[t.disc_d15N, t.disc_d13C] for t in tdefs])
        disc_sd = np.array([t.disc_sd for t in tdefs])
        free = np.ones(n_tis, bool)
        free[ref_idx] = False
        z_disc = pm.Normal("z_disc", 0.0, 1.0, shape=(n_tis, 2), dims=(dims.TISSUE, dims.ISOTOPE))
        disc = pm.Deterministic(
            "discrimination",
            disc_mu + (free * disc_sd)[:, None] * z_disc,
            dims=(dims.TISSUE, dims.ISOTOPE),
        )
        hl_mu = np.array([np.log(t.half_life_days) if not t.is_keratin else 0.0 for t in tdefs])
        hl_sd = np.array([t.half_life_sd_log if not t.is_keratin else 0.0 for t in tdefs])
        z_hl = pm.Normal("z_half_life", 0.0, 1.0, dims=dims.TISSUE)
        half_life = pm.Deterministic("half_life", pt.exp(hl_mu + hl_sd * z_hl), dims=dims.TISSUE)
        rate = np.log(2.0) / half_life

        n_k = max(len(tb.keratin_tissues), 1)
        # Centred (keratin timing pins each animal's growth tightly, and a non-centred
        # multiplier is then nearly collinear with the group mean), but sampled in
        # units of GROWTH_UNIT: samplers start chains with a U(-1, 1) jitter on the
        # unconstrained scale, which on the log scale would multiply a growth rate by
        # up to e; a chain started there settled in a distant mode (growth +43 %,
        # onsets 20 d late, larger residual SD) while the other found the truth.
        u = GROWTH_UNIT
        g_mean_u = pm.Normal(
            "growth_log_mean_u",
            0.0,
            pr["growth_log_mean_sd"]["value"] / u,
            shape=(G, n_k),
            dims=(dims.GROUP, "keratin_tissue"),
        )
        pm.Deterministic("growth_log_mean", u * g_mean_u, dims=(dims.GROUP, "keratin_tissue"))
        gsd = np.nan_to_num(tb.growth_sd_log, nan=0.1)
        log_growth_u = pm.Normal(
            "growth_log_u",
            mu=g_mean_u[gi],
            sigma=gsd / u,
            dims=(dims.INDIVIDUAL, "keratin_tissue"),
        )
        log_growth = u * log_growth_u
        growth = pm.Deterministic(
            "growth", pt.exp(log_growth), dims=(dims.INDIVIDUAL, "keratin_tissue")
        )
        extra_sd = pm.HalfNormal(
            "extra_sd", sigma=pr["extra_sd"]["sigma"], dims=(dims.TISSUE, dims.ISOTOPE)
        )

        # ---- likelihood --------------------------------------------------
        params = forward.Params(
            baseline=baseline,
            steps=steps,
            onset=grid.onset_days,
            duration=duration,
            kappa=kappa,
            tau_rec=tau_rec,
            gamma=gamma,
            disc=disc,
            rate=rate,
            growth=growth,
        )
        pred = forward.predict(tb, grid, params, xp=pt)
        ll0, ll1 = forward.episode_logliks(tb, pred, gamma, extra_sd, xp=pt)
        if spec.episodes:
            lp0 = pt.log1p(-pi[gi]) + ll0
            lp1 = pt.log(pi[gi]) + pt.logsumexp(onset_log_w + ll1, axis=1)
            pm.Potential("mixture", pt.sum(pt.logaddexp(lp0, lp1)))
        else:
            pm.Potential("no_episode", pt.sum(ll0))
        # P(episode | continuous parameters) per draw is recomputed after sampling from the
        # stored parameters with the same equations (nstress.model.draws), which keeps the
        # forward model out of the compiled "expand" function.
    return BuiltModel(
        model=model, timebase=tb, grid=grid, spec=spec, priors=pr, reference_tissue=ref
    )

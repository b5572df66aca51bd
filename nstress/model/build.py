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
* observation y ~ Normal(Y, sqrt(sd_row² + σ_k²)); a row with δ15N_Phe has
  a known baseline offset in its expected δ15N and the offset's variance in
  sd_row² (:mod:`nstress.prep.amino`, :func:`nstress.model.forward.with_baseline_offset`).

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
    shift_step_days
        Spacing of the candidate diet-shift starts (days).
    priors
        Prior overrides (see :mod:`nstress.model.priors`).
    walk
        ``"noncentred"`` or ``"centred"`` parameterisation of the diet walk.
    walk_increments
        ``"normal"`` (Gaussian; with ``diet_shift`` the default, and the
        known-answer case of a local-level model) or ``"student_t"``
        (heavy-tailed: a diet shift is one large step; its location then had
        one mode per knot, traded against growth, and chains disagreed).
        Applies to the non-centred walk; the centred walk is always Gaussian.
    walk_scale_per_animal
        Whether each animal's walk has its own scale (another way to let
        diet shifters move; it makes a funnel with the increments).
    diet_shift
        One explicit diet shift per animal (a ramp over one knot interval,
        size (Δδ15N, Δδ13C) integrated out exactly under its Normal prior,
        start summed exactly over the knots). ``False``
        leaves the walk alone to carry diet changes.
    episodes
        ``False`` switches catabolism off (diet-only model: the likelihood is
        the no-episode component alone); a known-answer and diagnostic case.
    reference_tissue
        Tissue whose discrimination is fixed at its prior mean (identifies
        the diet level); default: a keratin tissue if present, else the
        first blood tissue.
    diet_clock
        Run the diet on each animal's clock pivoted at its keratin
        collection date (:func:`nstress.model.forward.diet_clock`), so that
        growth does not trade against the diet walk. On by default (the
        36-animal recovery, seed 101: 90 % coverage of enriched bins 0.88 and
        0.91 with it, 0.78 on absolute time); off, the clock is time itself.
    """

    knot_days: float = forward.DEFAULT_KNOT_DAYS
    onset_step_days: float = forward.DEFAULT_ONSET_STEP_DAYS
    shift_step_days: float = forward.DEFAULT_SHIFT_STEP_DAYS
    priors: dict[str, dict[str, Any]] = field(default_factory=dict)
    reference_tissue: str | None = None
    walk: str = "noncentred"
    walk_increments: str = "normal"
    walk_scale_per_animal: bool = False
    episodes: bool = True
    diet_shift: bool = True
    diet_clock: bool = True


@dataclass
class BuiltModel:
    """A PyMC model and what is needed to interpret its posterior."""

    model: pm.Model
    timebase: TimeBase
    grid: forward.Grid
    spec: ModelSpec
    priors: dict[str, dict[str, Any]]
    reference_tissue: str
    mu_grid: np.ndarray | None = None
    mu_log_prior: np.ndarray | None = None
    start: dict[str, np.ndarray] = field(default_factory=dict)
    """Start values of free variables whose prior centre is a poor start (by name)."""


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
        "plane": ["x", "y"],
    }


def data_centre(tb: TimeBase) -> np.ndarray:
    """Mean (δ15N, δ13C) of the observations minus their tissues' prior discrimination."""
    disc = np.array(
        [[tb.tissue_defs[t].disc_d15N, tb.tissue_defs[t].disc_d13C] for t in tb.tissues]
    )
    vals = []
    for o in (tb.blood, tb.keratin):
        if o.mask.any():
            v = np.where(o.y_mask, o.y - forward.with_baseline_offset(o, disc[o.tissue]), np.nan)
            vals.append(v.reshape(-1, 2))
    allv = np.concatenate(vals)
    c = np.nanmean(np.where(np.isfinite(allv), allv, np.nan), axis=0)
    return np.where(np.isnan(c), 0.0, c)


def onset_log_weights_grid(
    grid: forward.Grid,
    tb: TimeBase,
    mu_grid: np.ndarray,
    sd: Any,
    xp: Any = np,
    offset: Any = 0.0,
) -> Any:
    """Log prior weights ``(I, K, M)`` of the candidate onsets, per candidate group mean μ_k.

    The onset prior Normal(μ_k, σ_on) (group time) is discretised on each
    individual's candidate onsets and normalised over them, with σ widened
    by the grid's own spread, σ_eff² = σ_on² + step²/12 (a uniform spread
    within a grid cell), so that the weights stay smooth in σ even when σ_on
    is below the spacing.

    Parameters
    ----------
    grid
        Grid with the candidate onsets.
    tb
        Time base (for each individual's origin offset).
    mu_grid
        ``(K,)`` candidate group mean onsets (days since the earliest origin).
    sd
        Between-animal SD of onset (days), a scalar.
    xp
        Array namespace.
    offset
        ``(I,)`` offset of each individual's candidates (days,
        :func:`nstress.model.forward.phase_offset`), or 0.
    """
    off = offset[:, None] if getattr(offset, "ndim", 0) == 1 else offset
    c_abs = (grid.onset_days + tb.origin_offset[:, None] + off)[:, None, :]  # (I, 1, M)
    sd_eff = xp.sqrt(sd**2 + grid.onset_step**2 / 12.0)
    z = (c_abs - np.asarray(mu_grid, float)[None, :, None]) / sd_eff
    logw = xp.where(grid.onset_mask[:, None, :], -0.5 * z**2, -1e10)
    lse = pt.logsumexp if xp is not np else _np_logsumexp
    return logw - lse(logw, axis=-1, keepdims=True)


def group_onset_grid(
    grid: forward.Grid, tb: TimeBase, mid: np.ndarray, half: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Candidate group mean onsets μ_k and their log prior per group.

    The group mean onset is summed out exactly over a grid (every onset step
    across all candidate onsets): as a continuous parameter, a chain whose μ
    wandered away from the fasts during warm-up stayed there (its weights put
    every animal's episode at the window's edge, so the diet absorbed them).
    The prior is Normal(``mid``, ``half``) per group, normalised on the grid.

    Returns
    -------
    tuple
        ``mu_grid`` ``(K,)`` (days since the earliest origin) and
        ``log_prior`` ``(G, K)``.
    """
    c_abs = np.where(grid.onset_mask, grid.onset_days + tb.origin_offset[:, None], np.nan)
    lo, hi = np.nanmin(c_abs), np.nanmax(c_abs)
    mu_grid = lo + grid.onset_step * np.arange(int(np.floor((hi - lo) / grid.onset_step)) + 1)
    lp = -0.5 * ((mu_grid[None, :] - mid[:, None]) / half[:, None]) ** 2
    lp -= lp.max(axis=1, keepdims=True)
    return mu_grid, lp - np.log(np.exp(lp).sum(axis=1, keepdims=True))


def episode_mixture(ll_none, ll_ep, log_u, onset_logw, log_pi, log_1m_pi, xp: Any = np):
    """Per-animal log-likelihoods without an episode and with one, per group mean onset.

    Parameters
    ----------
    ll_none, ll_ep
        Tables of :func:`nstress.model.forward.candidate_logliks`,
        ``(I, J)`` and ``(I, J, M)``.
    log_u
        ``(I, J)`` log prior of the shift starts.
    onset_logw
        ``(I, K, M)`` log onset weights per group mean onset
        (:func:`onset_log_weights_grid`).
    log_pi, log_1m_pi
        ``(I,)`` log π and log(1 − π) of each animal's group.
    xp
        Array namespace.

    Returns
    -------
    tuple
        ``lp0`` ``(I,)`` and ``lp1`` ``(I, K)``, each including its log prior.
    """
    lse = pt.logsumexp if xp is not np else _np_logsumexp
    lp0 = log_1m_pi + lse(log_u + ll_none, axis=1)
    per_onset = lse(log_u[:, :, None] + ll_ep, axis=1)  # (I, M)
    lp1 = log_pi[:, None] + lse(onset_logw + per_onset[:, None, :], axis=2)
    return lp0, lp1


def _np_logsumexp(a: np.ndarray, axis: int, keepdims: bool = False) -> np.ndarray:
    top = np.max(a, axis=axis, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    out = top + np.log(np.sum(np.exp(a - top), axis=axis, keepdims=True))
    return out if keepdims else np.squeeze(out, axis)


def _phase(name: str, step: float, n: int, start: dict[str, np.ndarray]) -> Any:
    """Per-individual offset ``(I,)`` in ``[0, step)`` days of a candidate grid.

    A point on the plane per individual, standard normal times a soft ring
    (radius 1, SD :data:`nstress.model.forward.RING_SD`) that keeps it away
    from the origin, where its angle would change fastest; both factors are
    rotation-invariant, so the offset's prior is uniform. Chains start on
    the ring (``start``, a value per variable name), not at the origin.
    """
    xy = pm.Normal(
        f"{name}_xy",
        0.0,
        1.0,
        dims=(dims.INDIVIDUAL, "plane"),
    )
    start[xy.name] = np.tile([1.0, 0.0], (n, 1))
    r = pt.sqrt(pt.sum(xy**2, axis=1))
    pm.Potential(f"{name}_ring", -0.5 * pt.sum(((r - 1.0) / forward.RING_SD) ** 2))
    return pm.Deterministic(
        f"{name}_offset", forward.phase_offset(xy, step, xp=pt), dims=dims.INDIVIDUAL
    )


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
    if not spec.shift_step_days > 0:
        raise ConfigError("shift_step_days must be > 0", key="model.shift_step_days")
    grid = forward.make_grid(
        tb,
        spec.knot_days,
        onset_step=spec.onset_step_days,
        shift_step=spec.shift_step_days,
        diet_clock=spec.diet_clock,
    )
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

    start: dict[str, np.ndarray] = {}
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
        # the group mean onset μ is summed out too, over mu_grid (group_onset_grid)
        sd_on = pm.HalfNormal("onset_sd", sigma=pr["onset_sd"]["sigma"])
        mu_grid, mu_log_prior = group_onset_grid(grid, tb, g_mid, g_half)
        # candidates move together by a sampled offset (a continuous onset, see _phase)
        onset_off = _phase("onset_phase", grid.onset_step, I, start) if spec.episodes else 0.0
        onset_log_w = onset_log_weights_grid(
            grid, tb, mu_grid, sd_on, xp=pt, offset=onset_off
        )  # (I, K, M)

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

        # ---- one explicit diet shift: start summed out over the knots, size integrated
        # out exactly (it enters the Gaussian likelihood linearly), so that "an episode"
        # and "a shift" are two terms of a sum, not two regions of a sampled size
        shift_starts = None
        shift_prior = None
        if spec.diet_shift:
            shift_off = _phase("shift_phase", spec.shift_step_days, I, start)
            shift_starts = grid.shift_days + shift_off[:, None]
            sh_sd = pm.HalfNormal("shift_sd", sigma=pr["shift_sd"]["sigma"], dims=dims.ISOTOPE)
            sh_rho = pm.Deterministic(
                "shift_corr",
                pt.tanh(
                    pm.Normal("shift_corr_z", pr["shift_corr"]["mu"], pr["shift_corr"]["sigma"])
                ),
            )
            shift_prior = (sh_sd, sh_rho)

        # ---- likelihood --------------------------------------------------
        params = forward.Params(
            baseline=baseline,
            steps=steps,
            onset=grid.onset_days + (onset_off[:, None] if spec.episodes else 0.0),
            duration=duration,
            kappa=kappa,
            tau_rec=tau_rec,
            gamma=gamma,
            disc=disc,
            rate=rate,
            growth=growth,
            shift_size=None,
            shift_start=shift_starts,
        )
        pred = forward.predict(tb, grid, params, xp=pt)
        ll_none, ll_ep = forward.candidate_logliks(
            tb, pred, gamma, None, extra_sd, xp=pt, shift_prior=shift_prior
        )
        log_u = forward.shift_log_prior(grid, spec.diet_shift)
        if spec.episodes:
            lp0, lp1 = episode_mixture(
                ll_none, ll_ep, log_u, onset_log_w, pt.log(pi[gi]), pt.log1p(-pi[gi]), xp=pt
            )
            per_mu = pt.logaddexp(lp0[:, None], lp1)  # (I, K)
            onehot = (gi[None, :] == np.arange(G)[:, None]).astype(float)  # (G, I)
            by_group = mu_log_prior + pt.dot(onehot, per_mu)  # (G, K)
            pm.Potential("mixture", pt.sum(pt.logsumexp(by_group, axis=1)))
        else:
            pm.Potential("no_episode", pt.sum(pt.logsumexp(log_u + ll_none, axis=1)))
        # P(episode), P(onset) and P(shift start) given the continuous parameters are
        # recomputed per draw after sampling with the same functions (nstress.model.draws),
        # which keeps the forward model out of the compiled "expand" function.
    return BuiltModel(
        model=model,
        timebase=tb,
        grid=grid,
        spec=spec,
        priors=pr,
        reference_tissue=ref,
        mu_grid=mu_grid,
        mu_log_prior=mu_log_prior,
        start=start,
    )

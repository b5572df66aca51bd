"""Posterior draws turned back into latent paths with the forward model (NumPy).

The same :func:`nstress.model.forward.predict` that defines the likelihood
maps each retained draw to its diet path, enrichment and expected tissue
values, so products and posterior predictive checks use the model's own
equations.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from nstress import equations as eq
from nstress.model import forward
from nstress.model import posterior as post
from nstress.model.build import BuiltModel, episode_mixture, onset_log_weights_grid

PARAM_NAMES = (
    "diet_level",
    "diet_steps",
    "onset_sd",
    "duration",
    "kappa",
    "tau_rec",
    "gamma",
    "discrimination",
    "half_life",
    "growth",
    "extra_sd",
    "p_episode_group",
    "shift_sd",
    "shift_corr",
    "onset_phase_offset",
    "shift_phase_offset",
)


@dataclass
class Draws:
    """Retained posterior draws, flattened to a leading ``sample`` axis.

    ``chain_draw`` keeps ``(n_chains, n_per_chain)`` so that arrays can be
    reshaped back for R-hat. ``episode`` is a sampled indicator per draw and
    individual (seeded), drawn from ``p_cond``. The model sums the onset over
    candidate onsets; ``params["onset"]`` holds one onset per draw and
    individual drawn (seeded) from its conditional probabilities given the
    draw's parameters and an episode (likewise ``params["shift_start"]``).
    """

    params: dict[str, np.ndarray]
    chain_draw: tuple[int, int]
    p_cond: np.ndarray  # (S, I)
    episode: np.ndarray  # (S, I) bool
    gamma_ind: np.ndarray  # (S, I)

    @property
    def n(self) -> int:
        """Number of draws S."""
        return self.p_cond.shape[0]

    def by_chain(self, a: np.ndarray) -> np.ndarray:
        """Reshape ``(S, ...)`` to ``(chain, draw, ...)``."""
        return a.reshape(self.chain_draw + a.shape[1:])


def collect(built: BuiltModel, idata: Any, max_draws: int = 1000, seed: int = 0) -> Draws:
    """Flatten (and thin) the posterior draws needed for products.

    Parameters
    ----------
    built
        The built model (for the time base and group index).
    idata
        Posterior.
    max_draws
        At most this many draws in total (thinned evenly per chain).
    seed
        Seed of the episode-indicator draws.
    """
    n_chain, n_draw = post.n_chains_draws(idata)
    per_chain = max(1, max_draws // n_chain)
    names = [n for n in PARAM_NAMES if post.has_var(idata, n)]
    arrays = post.subset_draws(idata, names, max_draws=per_chain)
    cd = arrays["duration"].shape[:2]
    flat = {k: v.reshape((-1,) + v.shape[2:]) for k, v in arrays.items()}
    tb, grid = built.timebase, built.grid
    gi = tb.group_index
    n_s, n_i = flat["duration"].shape
    d = Draws(
        params=flat,
        chain_draw=cd,
        p_cond=np.zeros((n_s, n_i)),
        episode=np.zeros((n_s, n_i), bool),
        gamma_ind=flat["gamma"][:, gi],
    )
    # Per draw, with the model's own likelihood tables (forward.py) and prior weights
    # (build.py): P(episode | parameters), then the episode indicator, the onset (given an
    # episode), the shift start (given the indicator) and the shift size (given both, from
    # its conditional Normal), all drawn with one seeded stream.
    pi = flat["p_episode_group"][:, gi]
    has_shift = "shift_sd" in flat
    log_u = forward.shift_log_prior(grid, has_shift)
    rng = np.random.default_rng(seed)
    onset = np.zeros((n_s, n_i))
    start = np.zeros((n_s, n_i))
    size = np.zeros((n_s, n_i, 2))
    mu = np.zeros((n_s, len(tb.groups)))
    rows = np.arange(n_i)
    M = grid.onset_days.shape[1]
    onehot = (gi[None, :] == np.arange(len(tb.groups))[:, None]).astype(float)
    zero = np.zeros((n_s, n_i))
    onset_off = flat.get("onset_phase_offset", zero)
    shift_off = flat.get("shift_phase_offset", zero)
    for s in range(n_s):
        onsets = grid.onset_days + onset_off[s][:, None]  # (I, M)
        starts = grid.shift_days + shift_off[s][:, None]  # (I, J)
        pred = predictions(built, d, s, onset=onsets, shift_start=starts if has_shift else None)
        prior = (flat["shift_sd"][s], flat["shift_corr"][s]) if has_shift else None
        ll_none, ll_ep, terms = forward.candidate_logliks(
            tb,
            pred,
            d.gamma_ind[s],
            None,
            flat["extra_sd"][s],
            shift_prior=prior,
            return_terms=True,
        )
        logw_k = onset_log_weights_grid(
            grid, tb, built.mu_grid, flat["onset_sd"][s], offset=onset_off[s]
        )
        lp0, lp1 = episode_mixture(ll_none, ll_ep, log_u, logw_k, np.log(pi[s]), np.log1p(-pi[s]))
        per_mu = np.logaddexp(lp0[:, None], lp1)  # (I, K)
        _, post_mu = _normalise(built.mu_log_prior + onehot @ per_mu)  # (G, K)
        p_ep_k = np.exp(lp1 - per_mu)  # P(episode | μ_k, parameters)
        d.p_cond[s] = (post_mu[gi] * p_ep_k).sum(axis=1)  # Rao-Blackwellised over μ
        kg = _draw_index(rng, post_mu)  # one group mean onset per group
        k = kg[gi]
        mu[s] = built.mu_grid[kg]
        z = rng.random(n_i) < p_ep_k[rows, k]
        d.episode[s] = z
        logw = logw_k[rows, k]  # (I, M)
        l0 = log_u + ll_none  # (I, J)
        l1 = (log_u[:, :, None] + logw[:, None, :] + ll_ep).reshape(n_i, -1)  # (I, J·M)
        _, q0 = _normalise(l0)
        _, q1 = _normalise(l1)
        k1 = _draw_index(rng, q1)
        k0 = _draw_index(rng, q0)
        onset[s] = onsets[rows, k1 % M]
        j = np.where(z, k1 // M, k0)
        start[s] = starts[rows, j]
        if terms is not None:  # the shift size given its start (and the episode's onset)
            L = np.where(z[:, None], terms.L_episode[rows, j, k1 % M], terms.L_none[rows, j])
            size[s] = forward.draw_shift(L, terms.Q[rows, j], *prior, rng)
    flat["onset_group"] = mu
    flat["onset"] = onset
    if has_shift:
        flat["shift_start"] = start
        flat["shift"] = size
    return d


def _normalise(logp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row-wise log-sum-exp and normalised probabilities of a log table."""
    top = logp.max(axis=1, keepdims=True)
    q = np.exp(logp - top)
    tot = q.sum(axis=1, keepdims=True)
    return top[:, 0] + np.log(tot[:, 0]), q / tot


def _draw_index(rng: np.random.Generator, q: np.ndarray) -> np.ndarray:
    """One index per row from row-normalised probabilities."""
    k = (rng.random((q.shape[0], 1)) > np.cumsum(q, axis=1)).sum(axis=1)
    return np.minimum(k, q.shape[1] - 1)


def latent_paths(built: BuiltModel, d: Draws) -> dict[str, np.ndarray]:
    """Diet path and enrichment on the bins for every draw.

    Returns
    -------
    dict
        ``diet`` ``(S, I, T, 2)``, ``enrich`` ``(S, I, T)`` (given an
        episode), ``inside`` ``(S, I, T)`` share of each bin inside the
        episode (given an episode).
    """
    tb, grid = built.timebase, built.grid
    p = d.params
    values = eq.walk_values(p["diet_level"], p["diet_steps"], grid.walk)  # (S, I, K, 2)
    n_s, n_i = values.shape[:2]
    rate = forward.clock_rate(grid, p["growth"])  # (S, I)
    w = forward.diet_clock(grid, np.broadcast_to(tb.bin_mid, (n_s, n_i, tb.T)), rate)
    diet = eq.interpolate_knots(
        w.reshape(n_s * n_i, tb.T),
        grid.spacing,
        values.reshape((n_s * n_i,) + values.shape[2:]),
        len(grid.knots),
    ).reshape(n_s, n_i, tb.T, 2)
    if "shift" in p:
        diet = diet + forward.shift_path(grid, w, p["shift_start"], p["shift"])
    t = tb.bin_mid[None, None, :]
    on, du = p["onset"][..., None], p["duration"][..., None]
    enrich = eq.enrichment(t, on, du, p["kappa"][..., None], p["tau_rec"][..., None])
    inside = eq.episode_overlap(tb.bin_lo[None, None, :], tb.bin_width, on, du)
    return {"diet": diet, "enrich": enrich, "inside": inside}


@dataclass
class Replicates:
    """Expected values and posterior predictive replicates of every observation.

    ``index`` are the draws used (evenly spaced); ``expected`` and
    ``replicated`` map ``"blood"``/``"keratin"`` to ``(R, I, N, 2)`` arrays:
    the draw's expected value, and that plus the draw's observation noise.
    """

    index: np.ndarray
    expected: dict[str, np.ndarray]
    replicated: dict[str, np.ndarray]


def predictive_replicates(
    built: BuiltModel, d: Draws, n_rep: int = 200, seed: int = 0
) -> Replicates:
    """Push up to ``n_rep`` evenly spaced draws through the forward model, with noise.

    Shared by the posterior predictive checks (:mod:`nstress.model.diagnose`)
    and the fitted curves of the products
    (:func:`nstress.products.predictions.observation_predictions`), so the
    forward model runs once per draw for both.
    """
    tb = built.timebase
    rng = np.random.default_rng(seed)
    idx = np.unique(np.linspace(0, d.n - 1, min(n_rep, d.n)).astype(int))
    sets = (("blood", tb.blood), ("keratin", tb.keratin))
    exp: dict[str, list[np.ndarray]] = {"blood": [], "keratin": []}
    rep: dict[str, list[np.ndarray]] = {"blood": [], "keratin": []}
    for s in idx:
        pr = predictions(built, d, int(s))
        shift = d.params["shift"][s] if "shift" in d.params else None
        means = forward.expected(pr, d.gamma_ind[s], shift, episode=d.episode[s])
        esd = d.params["extra_sd"][s]
        for (name, o), mu in zip(sets, means, strict=True):
            sd = np.sqrt(o.sd**2 + esd[o.tissue] ** 2)
            exp[name].append(mu)
            rep[name].append(mu + sd * rng.standard_normal(mu.shape))
    return Replicates(
        index=idx,
        expected={k: np.stack(v) for k, v in exp.items()},
        replicated={k: np.stack(v) for k, v in rep.items()},
    )


def predictions(
    built: BuiltModel,
    d: Draws,
    idx: int,
    onset: np.ndarray | None = None,
    shift_start: np.ndarray | None = None,
) -> forward.Prediction:
    """Return the expected tissue values of one draw, via :func:`forward.predict`.

    ``onset`` and ``shift_start`` override the draw's, e.g. with the
    candidate onsets ``(I, M)`` and shift starts ``(I, J)`` of the grid.
    """
    p = d.params
    if shift_start is None and "shift_start" in p:
        shift_start = p["shift_start"][idx]
    params = forward.Params(
        baseline=p["diet_level"][idx],
        steps=p["diet_steps"][idx],
        onset=p["onset"][idx] if onset is None else onset,
        duration=p["duration"][idx],
        kappa=p["kappa"][idx],
        tau_rec=p["tau_rec"][idx],
        gamma=d.gamma_ind[idx],
        disc=p["discrimination"][idx],
        rate=np.log(2.0) / p["half_life"][idx],
        growth=p["growth"][idx],
        shift_size=p["shift"][idx] if "shift" in p else None,
        shift_start=shift_start,
    )
    return forward.predict(built.timebase, built.grid, params, xp=np)

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
from nstress.model.build import BuiltModel, onset_log_weights

PARAM_NAMES = (
    "diet_level",
    "diet_steps",
    "onset_group",
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
)


@dataclass
class Draws:
    """Retained posterior draws, flattened to a leading ``sample`` axis.

    ``chain_draw`` keeps ``(n_chains, n_per_chain)`` so that arrays can be
    reshaped back for R-hat. ``episode`` is a sampled indicator per draw and
    individual (seeded), drawn from ``p_cond``. The model sums the onset over
    candidate onsets; ``params["onset"]`` holds one onset per draw and
    individual drawn (seeded) from its conditional probabilities given the
    draw's parameters and an episode, and ``onset_prob`` ``(I, M)`` is the
    posterior probability of each candidate onset given an episode
    (Rao-Blackwellised: the mean of those conditional probabilities).
    """

    params: dict[str, np.ndarray]
    chain_draw: tuple[int, int]
    p_cond: np.ndarray  # (S, I)
    episode: np.ndarray  # (S, I) bool
    gamma_ind: np.ndarray  # (S, I)
    onset_prob: np.ndarray | None = None  # (I, M)

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
    arrays = post.subset_draws(idata, list(PARAM_NAMES), max_draws=per_chain)
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
    # P(episode | parameters) and P(onset | parameters, episode) per draw, with the
    # model's own likelihood (forward.py) and onset weights (build.py)
    pi = flat["p_episode_group"][:, gi]
    logw = onset_log_weights(grid, tb, flat["onset_group"][:, gi], flat["onset_sd"])
    rng = np.random.default_rng(seed)
    onset = np.zeros((n_s, n_i))
    prob = np.zeros(grid.onset_days.shape)
    for s in range(n_s):
        pred = predictions(built, d, s, onset=grid.onset_days)
        ll0, ll1 = forward.episode_logliks(tb, pred, d.gamma_ind[s], flat["extra_sd"][s])
        lm = logw[s] + ll1 - ll0[:, None]  # (I, M)
        top = lm.max(axis=1, keepdims=True)
        q = np.exp(lm - top)
        tot = q.sum(axis=1, keepdims=True)
        q /= tot
        logit = np.log(pi[s]) - np.log1p(-pi[s]) + top[:, 0] + np.log(tot[:, 0])
        d.p_cond[s] = 0.5 * (1.0 + np.tanh(0.5 * logit))
        m = (rng.random((n_i, 1)) > np.cumsum(q, axis=1)).sum(axis=1)
        m = np.minimum(m, q.shape[1] - 1)
        onset[s] = grid.onset_days[np.arange(n_i), m]
        prob += q
    flat["onset"] = onset
    d.onset_prob = prob / max(n_s, 1)
    d.episode[:] = rng.random(d.p_cond.shape) < d.p_cond
    return d


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
    values = p["diet_level"][:, :, None, :] + np.einsum(
        "ikj,sijc->sikc", grid.walk, p["diet_steps"]
    )
    diet = np.einsum("tk,sikc->sitc", grid.basis, values)
    t = tb.bin_mid[None, None, :]
    on, du = p["onset"][..., None], p["duration"][..., None]
    enrich = eq.enrichment(t, on, du, p["kappa"][..., None], p["tau_rec"][..., None])
    inside = eq.episode_overlap(tb.bin_lo[None, None, :], tb.bin_width, on, du)
    return {"diet": diet, "enrich": enrich, "inside": inside}


def predictions(
    built: BuiltModel, d: Draws, idx: int, onset: np.ndarray | None = None
) -> forward.Prediction:
    """Return the expected tissue values of one draw, via :func:`forward.predict`.

    ``onset`` overrides the draw's onset, e.g. with the candidate onsets
    ``(I, M)`` of the grid.
    """
    p = d.params
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
    )
    return forward.predict(built.timebase, built.grid, params, xp=np)

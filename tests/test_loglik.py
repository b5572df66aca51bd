"""The mixture likelihood: one implementation (forward.episode_logliks) for model and products."""

import numpy as np
import pytensor
import pytensor.tensor as pt
from scipy.stats import norm

from nstress.model.forward import episode_logliks, make_grid, predict
from nstress.model.simulate import ColonySpec, simulate_colony, table_to_samples
from nstress.prep.timebase import build_timebase


def _setup():
    sim = simulate_colony(ColonySpec(n_individuals=4, seed=9))
    tb = build_timebase(table_to_samples(sim.table))
    grid = make_grid(tb)
    return sim, tb, grid


def test_numpy_loglik_is_the_gaussian_density():
    # independent check against scipy.stats.norm.logpdf, entry by entry
    sim, tb, grid = _setup()
    p = sim.params
    pred = predict(tb, grid, p)
    extra = np.full((len(tb.tissues), 2), 0.07)
    ll0, ll1 = episode_logliks(tb, pred, p.gamma, extra)
    ref0 = np.zeros(tb.n_individuals)
    ref1 = np.zeros(tb.n_individuals)
    for o, y0, ye in (
        (tb.blood, pred.blood0, pred.blood_e),
        (tb.keratin, pred.keratin0, pred.keratin_e),
    ):
        for i, n, c in zip(*np.nonzero(o.y_mask & o.mask[..., None]), strict=True):
            sd = np.hypot(o.sd[i, n, c], extra[o.tissue[i, n], c])
            mu1 = y0[i, n, c] + ye[i, n] * (1.0 if c == 0 else p.gamma[i])
            ref0[i] += norm.logpdf(o.y[i, n, c], y0[i, n, c], sd)
            ref1[i] += norm.logpdf(o.y[i, n, c], mu1, sd)
    np.testing.assert_allclose(ll0, ref0, rtol=1e-12)
    np.testing.assert_allclose(ll1, ref1, rtol=1e-12)
    # the true parameters explain fasters better with their episode than without
    fasters = sim.truth_individuals["has_episode"].to_numpy(bool)
    assert (ll1[fasters] > ll0[fasters]).all()


def test_pytensor_and_numpy_logliks_agree():
    sim, tb, grid = _setup()
    p = sim.params
    extra = np.full((len(tb.tissues), 2), 0.07)
    ll0, ll1 = episode_logliks(tb, predict(tb, grid, p), p.gamma, extra)
    gamma = pt.vector("gamma")
    pred = predict(tb, grid, p, xp=np)
    tl0, tl1 = episode_logliks(tb, pred, gamma, pt.as_tensor(extra), xp=pt)
    f = pytensor.function([gamma], [tl0, tl1], mode="FAST_COMPILE")
    a0, a1 = f(np.asarray(p.gamma, dtype=float))
    np.testing.assert_allclose(a0, ll0, rtol=1e-12)
    np.testing.assert_allclose(a1, ll1, rtol=1e-12)


def test_candidate_onsets_give_the_single_onset_likelihood_per_column():
    # The model sums over candidate onsets; each column of the (I, M) likelihood must be
    # exactly the likelihood with that one onset (same equations, broadcast).
    import dataclasses

    sim, tb, grid = _setup()
    p = sim.params
    extra = np.full((len(tb.tissues), 2), 0.07)
    _, ll_grid = episode_logliks(
        tb, predict(tb, grid, dataclasses.replace(p, onset=grid.onset_days)), p.gamma, extra
    )
    assert ll_grid.shape == grid.onset_days.shape
    for m in (0, grid.onset_days.shape[1] // 2, grid.onset_days.shape[1] - 1):
        one = dataclasses.replace(p, onset=grid.onset_days[:, m])
        _, ll1 = episode_logliks(tb, predict(tb, grid, one), p.gamma, extra)
        np.testing.assert_allclose(ll_grid[:, m], ll1, rtol=1e-12)


def test_onset_grid_covers_what_the_samples_see():
    from nstress.model.forward import ONSET_LEAD_DAYS, sampled_span

    sim, tb, grid = _setup()
    lo, hi = sampled_span(tb)
    on, mask = grid.onset_days, grid.onset_mask
    first = on[:, 0]
    last = np.where(mask, on, -np.inf).max(axis=1)
    np.testing.assert_allclose(first, np.maximum(lo - ONSET_LEAD_DAYS, 0.0))
    assert np.all(last <= hi + 1e-9) and np.all(last > hi - grid.onset_step)
    np.testing.assert_allclose(np.diff(on, axis=1)[mask[:, 1:]], grid.onset_step)
    # every true onset of a simulated faster lies inside its grid
    ti = sim.truth_individuals
    ep = ti["has_episode"].to_numpy(bool)
    assert np.all(sim.params.onset[ep] >= first[ep]) and np.all(sim.params.onset[ep] <= last[ep])


def test_onset_weights_are_a_normalised_discretised_normal():
    from nstress.model.build import onset_log_weights

    sim, tb, grid = _setup()
    c_abs = grid.onset_days + tb.origin_offset[:, None]
    mu = np.nanmean(np.where(grid.onset_mask, c_abs, np.nan), axis=1)
    sd = 10.0
    lw = onset_log_weights(grid, tb, mu, sd)
    w = np.where(grid.onset_mask, np.exp(lw), 0.0)
    np.testing.assert_allclose(w.sum(axis=1), 1.0, rtol=1e-12)
    sd_eff = np.hypot(sd, grid.onset_step / np.sqrt(12.0))
    ref = np.where(grid.onset_mask, norm.pdf(c_abs, mu[:, None], sd_eff), 0.0)
    np.testing.assert_allclose(w, ref / ref.sum(axis=1, keepdims=True), rtol=1e-10)
    # the same function with draws (S, I) and (S,)
    lw_s = onset_log_weights(grid, tb, np.stack([mu, mu]), np.array([sd, sd]))
    np.testing.assert_allclose(lw_s[1], lw, rtol=1e-12)

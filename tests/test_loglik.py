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

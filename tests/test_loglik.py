"""The mixture likelihood: one implementation (forward.candidate_logliks) for model and products."""

import numpy as np
import pytensor
import pytensor.tensor as pt
from scipy.stats import norm

from nstress.model.forward import candidate_logliks, expected, make_grid, predict
from nstress.model.simulate import ColonySpec, simulate_colony, table_to_samples
from nstress.prep.timebase import build_timebase


def _no_shift_logliks(tb, pred, gamma, extra, xp=np):
    """(ll0, ll1) without a shift: the first column of each table (one onset: (I,))."""
    ll_none, ll_ep = candidate_logliks(tb, pred, gamma, None, extra, xp=xp)
    ll1 = ll_ep[:, 0, :]
    return ll_none[:, 0], (ll1 if pred.blood_e.ndim == 3 else ll1[:, 0])


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
    ll0, ll1 = _no_shift_logliks(tb, pred, p.gamma, extra)
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
    ll0, ll1 = _no_shift_logliks(tb, predict(tb, grid, p), p.gamma, extra)
    gamma = pt.vector("gamma")
    pred = predict(tb, grid, p, xp=np)
    tl0, tl1 = _no_shift_logliks(tb, pred, gamma, pt.as_tensor(extra), xp=pt)
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
    _, ll_grid = _no_shift_logliks(
        tb, predict(tb, grid, dataclasses.replace(p, onset=grid.onset_days)), p.gamma, extra
    )
    assert ll_grid.shape == grid.onset_days.shape
    for m in (0, grid.onset_days.shape[1] // 2, grid.onset_days.shape[1] - 1):
        one = dataclasses.replace(p, onset=grid.onset_days[:, m])
        _, ll1 = _no_shift_logliks(tb, predict(tb, grid, one), p.gamma, extra)
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
    from nstress.model.build import onset_log_weights_grid

    sim, tb, grid = _setup()
    c_abs = grid.onset_days + tb.origin_offset[:, None]
    mu_grid = np.array([np.nanmin(np.where(grid.onset_mask, c_abs, np.nan)), 300.0, 350.0])
    sd = 10.0
    lw = onset_log_weights_grid(grid, tb, mu_grid, sd)  # (I, K, M)
    w = np.where(grid.onset_mask[:, None, :], np.exp(lw), 0.0)
    np.testing.assert_allclose(w.sum(axis=2), 1.0, rtol=1e-12)
    sd_eff = np.hypot(sd, grid.onset_step / np.sqrt(12.0))
    for k, mu in enumerate(mu_grid):
        ref = np.where(grid.onset_mask, norm.pdf(c_abs, mu, sd_eff), 0.0)
        np.testing.assert_allclose(w[:, k], ref / ref.sum(axis=1, keepdims=True), rtol=1e-10)
    # the PyTensor graph gives the same numbers
    sd_t = pt.scalar("sd")
    f = pytensor.function([sd_t], onset_log_weights_grid(grid, tb, mu_grid, sd_t, xp=pt))
    got = f(sd)
    np.testing.assert_allclose(
        got[:, :, :][np.broadcast_to(grid.onset_mask[:, None], got.shape)],
        lw[np.broadcast_to(grid.onset_mask[:, None], lw.shape)],
        rtol=1e-12,
    )


def test_shift_and_episode_tables_are_the_gaussian_density_of_each_pair():
    # Every entry (shift start j, onset m) of the likelihood tables must equal the plain
    # Gaussian density of the data around the expected values with that start and onset
    # (scipy.stats.norm), and the PyTensor graph must give the same numbers.
    import dataclasses

    sim, tb, grid = _setup()
    p = sim.params
    extra = np.full((len(tb.tissues), 2), 0.07)
    cand = dataclasses.replace(p, onset=grid.onset_days, shift_start=grid.shift_days)
    ll_none, ll_ep = candidate_logliks(tb, predict(tb, grid, cand), p.gamma, p.shift_size, extra)
    J, M = grid.shift_days.shape[1], grid.onset_days.shape[1]
    assert ll_none.shape == (tb.n_individuals, J) and ll_ep.shape == (tb.n_individuals, J, M)

    def direct(j, m, episode):
        one = dataclasses.replace(p, onset=grid.onset_days[:, m], shift_start=grid.shift_days[:, j])
        yb, yk = expected(predict(tb, grid, one), p.gamma, p.shift_size)
        if not episode:
            zero = dataclasses.replace(one, kappa=np.zeros_like(p.kappa))
            yb, yk = expected(predict(tb, grid, zero), p.gamma, p.shift_size)
        out = np.zeros(tb.n_individuals)
        for o, mu in ((tb.blood, yb), (tb.keratin, yk)):
            m_ = o.y_mask & o.mask[..., None]
            sd = np.sqrt(o.sd**2 + extra[o.tissue] ** 2)
            out += np.where(m_, norm.logpdf(o.y, mu, sd), 0.0).sum(axis=(1, 2))
        return out

    for j, m in ((0, 0), (J // 2, M // 3), (J - 1, M - 1)):
        np.testing.assert_allclose(ll_ep[:, j, m], direct(j, m, True), rtol=1e-10)
        np.testing.assert_allclose(ll_none[:, j], direct(j, m, False), rtol=1e-10)

    gamma = pt.vector("gamma")
    tn, te = candidate_logliks(
        tb, predict(tb, grid, cand), gamma, pt.as_tensor(p.shift_size), pt.as_tensor(extra), xp=pt
    )
    f = pytensor.function([gamma], [tn, te], mode="FAST_COMPILE")
    a_none, a_ep = f(np.asarray(p.gamma, dtype=float))
    np.testing.assert_allclose(a_none, ll_none, rtol=1e-12)
    np.testing.assert_allclose(a_ep, ll_ep, rtol=1e-12)


def test_mixture_over_group_onsets_matches_explicit_enumeration():
    # episode_mixture sums shift starts, onsets and (per group mean onset) the episode
    # indicator; check it against a plain loop over every combination
    import dataclasses

    from nstress.model.build import episode_mixture, group_onset_grid, onset_log_weights_grid

    sim, tb, grid = _setup()
    p = sim.params
    extra = np.full((len(tb.tissues), 2), 0.07)
    cand = dataclasses.replace(p, onset=grid.onset_days, shift_start=grid.shift_days)
    ll_none, ll_ep = candidate_logliks(tb, predict(tb, grid, cand), p.gamma, p.shift_size, extra)
    n_sh = grid.shift_mask.sum(axis=1, keepdims=True)
    log_u = np.where(grid.shift_mask, -np.log(n_sh), -np.inf)
    G = len(tb.groups)
    mu_grid, log_prior = group_onset_grid(grid, tb, np.full(G, 300.0), np.full(G, 80.0))
    np.testing.assert_allclose(np.exp(log_prior).sum(axis=1), 1.0)
    sd = 9.0
    logw = onset_log_weights_grid(grid, tb, mu_grid, sd)
    k = len(mu_grid) // 2
    pi = 0.3
    lp0, lp1 = episode_mixture(
        ll_none,
        ll_ep,
        log_u,
        logw,
        np.full(tb.n_individuals, np.log(pi)),
        np.full(tb.n_individuals, np.log1p(-pi)),
    )
    for i in range(tb.n_individuals):
        ref0 = np.log1p(-pi) + np.log(
            sum(np.exp(log_u[i, j] + ll_none[i, j]) for j in range(ll_none.shape[1]))
        )
        np.testing.assert_allclose(lp0[i], ref0, rtol=1e-9)
        tot = 0.0
        for j in np.flatnonzero(grid.shift_mask[i]):
            for m in np.flatnonzero(grid.onset_mask[i]):
                tot += np.exp(log_u[i, j] + logw[i, k, m] + ll_ep[i, j, m] - ll_none[i, 0])
        np.testing.assert_allclose(lp1[i, k], np.log(pi) + np.log(tot) + ll_none[i, 0], rtol=1e-9)


def test_shift_size_integrated_out_is_the_gaussian_marginal_likelihood():
    # With the shift size Δ ~ Normal(0, Σ) integrated out, each table entry must be the
    # marginal likelihood of a linear-Gaussian model, y ~ Normal(μ₀, A Σ Aᵀ + R), with A
    # the response of the expected values to Δ (Bishop 2006, Pattern Recognition and
    # Machine Learning, eq. 2.115), evaluated here with scipy's multivariate normal; and
    # the PyTensor graph must give the same numbers.
    import dataclasses

    from scipy.stats import multivariate_normal

    sim, tb, grid = _setup()
    p = sim.params
    extra = np.full((len(tb.tissues), 2), 0.07)
    sd, rho = np.array([1.2, 0.8]), 0.4
    cov = np.array([[sd[0] ** 2, rho * sd[0] * sd[1]], [rho * sd[0] * sd[1], sd[1] ** 2]])
    cand = dataclasses.replace(p, onset=grid.onset_days, shift_start=grid.shift_days)
    ll_none, ll_ep = candidate_logliks(
        tb, predict(tb, grid, cand), p.gamma, None, extra, shift_prior=(sd, rho)
    )
    J, M = grid.shift_days.shape[1], grid.onset_days.shape[1]
    zero = np.zeros_like(p.shift_size)

    def marginal(j, m, episode):
        one = dataclasses.replace(p, onset=grid.onset_days[:, m], shift_start=grid.shift_days[:, j])
        if not episode:
            one = dataclasses.replace(one, kappa=np.zeros_like(p.kappa))
        pr = predict(tb, grid, one)
        base = expected(pr, p.gamma, zero)
        unit = [expected(pr, p.gamma, zero + np.eye(2)[c]) for c in range(2)]
        out = np.zeros(tb.n_individuals)
        for i in range(tb.n_individuals):
            y, mu, rows, var = [], [], [], []
            for s, o in enumerate((tb.blood, tb.keratin)):
                m_ = o.y_mask[i] & o.mask[i][:, None]
                y.append(o.y[i][m_])
                mu.append(base[s][i][m_])
                rows.append(np.stack([unit[c][s][i][m_] - base[s][i][m_] for c in range(2)], 1))
                var.append((o.sd[i] ** 2 + extra[o.tissue[i]] ** 2)[m_])
            A = np.concatenate(rows)
            S = A @ cov @ A.T + np.diag(np.concatenate(var))
            out[i] = multivariate_normal.logpdf(np.concatenate(y), np.concatenate(mu), S)
        return out

    for j, m in ((0, 0), (J // 2, M // 3), (J - 1, M - 1)):
        np.testing.assert_allclose(ll_ep[:, j, m], marginal(j, m, True), rtol=1e-9)
        np.testing.assert_allclose(ll_none[:, j], marginal(j, m, False), rtol=1e-9)

    gamma, sd_t, rho_t = pt.vector("gamma"), pt.vector("sd"), pt.scalar("rho")
    tn, te = candidate_logliks(
        tb,
        predict(tb, grid, cand),
        gamma,
        None,
        pt.as_tensor(extra),
        xp=pt,
        shift_prior=(sd_t, rho_t),
    )
    f = pytensor.function([gamma, sd_t, rho_t], [tn, te], mode="FAST_COMPILE")
    a_none, a_ep = f(np.asarray(p.gamma, dtype=float), sd, rho)
    np.testing.assert_allclose(a_none, ll_none, rtol=1e-11)
    np.testing.assert_allclose(a_ep, ll_ep, rtol=1e-11)


def test_shift_size_draws_follow_the_conditional_normal():
    # draws of Δ given its linear and quadratic coefficients: mean P⁻¹L, covariance P⁻¹
    # with P = Q + Σ⁻¹ (conjugate Normal update, Bishop 2006, eq. 2.116-2.117)
    from nstress.model.forward import draw_shift

    sd, rho = np.array([1.0, 0.5]), -0.3
    cov = np.array([[sd[0] ** 2, rho * sd[0] * sd[1]], [rho * sd[0] * sd[1], sd[1] ** 2]])
    L, Q = np.array([3.0, -2.0]), np.array([4.0, 9.0])
    P = np.diag(Q) + np.linalg.inv(cov)
    rng = np.random.default_rng(5)
    x = draw_shift(np.broadcast_to(L, (200_000, 2)), np.broadcast_to(Q, (200_000, 2)), sd, rho, rng)
    np.testing.assert_allclose(x.mean(axis=0), np.linalg.solve(P, L), atol=3e-3)
    np.testing.assert_allclose(np.cov(x.T), np.linalg.inv(P), atol=3e-3)

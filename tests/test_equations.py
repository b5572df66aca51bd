"""External checks of nstress.equations (turnover, keratin windows, enrichment, Rayleigh)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from nstress import equations as eq

# Half-lives used below: plasma 4.3 d, red cells about 32 d (Hahn et al. 2012 PLoS ONE 7:e30242);
# red-cell residence 21-31 d (Tsahar et al. 2008 J Exp Biol 211:459), so 30 d is inside both.
PLASMA_T12 = 4.3
RBC_T12 = 30.0


# --------------------------------------------------------------------------
# one-compartment incorporation
# --------------------------------------------------------------------------
@pytest.mark.parametrize("t12", [PLASMA_T12, RBC_T12, 123.0])
def test_half_life_means_halfway(t12):
    # One-compartment model delta(t) = d_inf + (d0 - d_inf) exp(-lambda t), t1/2 = ln2/lambda
    # (Tieszen et al. 1983 Oecologia 57:32, from memory; Martinez del Rio et al. 2009 Biol Rev
    # 84:91, from memory; Vander Zanden et al. 2015 PLoS ONE 10:e0116182).
    lam = np.log(2.0) / t12
    assert eq.half_life(lam) == pytest.approx(t12, rel=1e-12)
    d0, d_inf = 10.0, 13.4
    at_half = eq.incorporation_curve(t12, d0, d_inf, lam)
    assert at_half == pytest.approx(0.5 * (d0 + d_inf), abs=1e-12)
    # after two half-lives three quarters of the way, after ten 1 - 2^-10
    two = eq.incorporation_curve(2 * t12, d0, d_inf, lam)
    assert two == pytest.approx(d0 + 0.75 * (d_inf - d0))
    far = eq.incorporation_curve(10 * t12, d0, d_inf, lam)
    assert far == pytest.approx(d_inf - (d_inf - d0) * 2.0**-10, abs=1e-12)


@pytest.mark.parametrize("t12", [PLASMA_T12, RBC_T12])
def test_blood_weights_reproduce_step_response(t12):
    # A step of the pool from d0 to d_inf at t_step must give
    # d_inf + (d0 - d_inf) exp(-lambda (t - t_step)) (Tieszen et al. 1983, from memory;
    # half-lives from Hahn et al. 2012). Here the grid starts 1600 d before the step.
    lam = np.log(2.0) / t12
    width = 4.0
    bin_lo = np.arange(0.0, 2000.0, width)
    t_step = 1600.0  # a bin edge: the pool is exactly piecewise constant
    d0, d_inf = 9.0, 12.5
    pool = np.where(bin_lo >= t_step, d_inf, d0)
    t_obs = np.array(
        [1500.0, 1599.9, 1600.0, 1600.3, 1602.0, 1603.7, 1611.1, 1640.0, 1700.5, 1990.0]
    )
    w = eq.blood_weights(t_obs[:, None], bin_lo, width, lam)
    assert np.allclose(w.sum(axis=-1), 1.0, atol=1e-12)
    assert np.all(w >= 0)
    got = w @ pool
    expected = np.where(t_obs < t_step, d0, eq.incorporation_curve(t_obs - t_step, d0, d_inf, lam))
    np.testing.assert_allclose(got, expected, atol=1e-9, rtol=0)
    # no weight on bins after the draw
    assert np.all(w[t_obs[:, None] <= bin_lo[None, :]] == 0)


@pytest.mark.parametrize("t12", [PLASMA_T12, RBC_T12])
def test_blood_weights_step_soon_after_grid_start(t12):
    # The grid starts only 22 d before the step, well inside red-cell memory; the pool is
    # constant before the grid, so the history before it belongs to bin 0. A step at a bin
    # centre (the bin holds the half-way value) must follow the one-compartment curve
    # d_inf + (d0 - d_inf) exp(-lambda (t - t0)) (Tieszen et al. 1983, from memory) within
    # the bin-discretisation bound 0.5 (1 - a)^2 |delta| exp(-lambda (t - t_end)),
    # a = exp(-lambda bin/2), the bound used in test_simulate.py.
    lam = np.log(2.0) / t12
    width = 4.0
    bin_lo = np.arange(0.0, 400.0, width)
    j = 5
    t0, t_end = (j + 0.5) * width, (j + 1) * width
    d0, d_inf = 9.0, 12.5
    delta = d_inf - d0
    pool = np.where(bin_lo < j * width, d0, np.where(bin_lo > j * width, d_inf, d0 + delta / 2))
    before = np.r_[0.0, 1e-6, np.linspace(0.3, j * width, 11)]  # bin 0 and up to the step bin
    after = t_end + np.r_[0.0, np.geomspace(1e-3, 399.0 - t_end, 40)]
    t_obs = np.r_[before, after]
    w = eq.blood_weights(t_obs[:, None], bin_lo, width, lam)
    np.testing.assert_allclose(w.sum(axis=-1), 1.0, rtol=0, atol=1e-12)
    assert np.all(w >= 0)
    later = t_obs[:, None] <= bin_lo[None, :]
    later[:, 0] = False  # bin 0 also stands for the time before the grid
    assert np.all(w[later] == 0)  # nothing from after the draw
    got = w @ pool
    expected = np.where(t_obs < t0, d0, eq.incorporation_curve(t_obs - t0, d0, d_inf, lam))
    a = np.exp(-lam * width / 2)
    bound = np.where(
        t_obs < t0, 0.0, 0.5 * (1 - a) ** 2 * abs(delta) * np.exp(-lam * (t_obs - t_end))
    )
    err = np.abs(got - expected)
    assert np.all(err <= bound + 1e-12), (err.max(), t_obs[np.argmax(err - bound)])
    # a step on a bin edge is exact
    edge = j * width
    pool_edge = np.where(bin_lo < edge, d0, d_inf)
    ref = np.where(t_obs < edge, d0, eq.incorporation_curve(t_obs - edge, d0, d_inf, lam))
    np.testing.assert_allclose(w @ pool_edge, ref, rtol=0, atol=1e-12)


def _bin_and_offset(t_obs, n_bins, width):
    """Bin b of each draw and its offset phi into the bin (days)."""
    b = np.clip(np.floor(t_obs / width), 0, n_bins - 1).astype(int)
    return b, t_obs - b * width


@pytest.mark.parametrize("t12", [0.7, PLASMA_T12, RBC_T12, 123.0])
def test_blood_from_filtered_equals_weighted_sum(t12):
    # The closed form on the filtered pool must give exactly sum_u blood_weights_u P_u.
    rng = np.random.default_rng(int(10 * t12))
    width, n_bins = 4.0, 60
    lam = np.log(2.0) / t12
    bin_lo = np.arange(n_bins) * width
    pool = rng.normal(12.0, 4.0, (n_bins, 3))
    t_obs = np.r_[
        rng.uniform(0.0, width, 6),  # draws in bin 0
        0.0,
        width,
        7 * width,  # on bin edges
        rng.uniform(0.0, n_bins * width, 40),
        n_bins * width - 1e-9,  # end of the last bin
    ]
    b, phi = _bin_and_offset(t_obs, n_bins, width)
    S = eq.exponential_filter_matrix(n_bins, width, lam) @ pool
    got = eq.blood_from_filtered(
        S[np.maximum(b - 1, 0)], pool[b], pool[:1], phi, t_obs, lam, width, b >= 1
    )
    ref = eq.blood_weights(t_obs[:, None], bin_lo, width, lam) @ pool
    assert got.shape == (t_obs.size, 3)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)


def test_blood_from_filtered_mixed_tissues():
    # One rate per observation (plasma and red cells drawn together), batched over animals.
    rng = np.random.default_rng(5)
    width, n_bins, n_ind, n_obs = 4.0, 50, 3, 8
    rates = np.log(2.0) / np.array([PLASMA_T12, RBC_T12])
    bin_lo = np.arange(n_bins) * width
    pool = rng.normal(12.0, 4.0, (n_ind, n_bins, 3))
    t_obs = rng.uniform(0.0, n_bins * width, (n_ind, n_obs))
    t_obs[:, 0] = rng.uniform(0.0, width, n_ind)
    tissue = rng.integers(0, 2, (n_ind, n_obs))
    b, phi = _bin_and_offset(t_obs, n_bins, width)
    filters = [eq.exponential_filter_matrix(n_bins, width, r) for r in rates]
    S = np.stack([np.einsum("tu,iuc->itc", F, pool) for F in filters])  # (tissue, I, T, 3)
    ii = np.arange(n_ind)[:, None]
    got = eq.blood_from_filtered(
        S[tissue, ii, np.maximum(b - 1, 0)],
        pool[ii, b],
        pool[:, :1],
        phi,
        t_obs,
        rates[tissue],
        width,
        b >= 1,
    )
    w = eq.blood_weights(t_obs[..., None], bin_lo, width, rates[tissue][..., None])
    ref = np.einsum("int,itc->inc", w, pool)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)


@pytest.mark.parametrize("t12", [PLASMA_T12, RBC_T12])
def test_exponential_filter_matrix_is_the_recursion(t12):
    # S[t] = q S[t - 1] + P[t], q = exp(-lambda bin), S[0] = P[0]: the discrete
    # one-compartment recursion written as one matrix product.
    lam, width, n = np.log(2.0) / t12, 4.0, 40
    pool = np.random.default_rng(1).normal(10.0, 3.0, (n, 2))
    q = np.exp(-lam * width)
    s = np.zeros_like(pool)
    acc = np.zeros(2)
    for t in range(n):
        acc = q * acc + pool[t]
        s[t] = acc
    F = eq.exponential_filter_matrix(n, width, lam)
    np.testing.assert_allclose(F @ pool, s, rtol=1e-13)
    assert np.all(np.triu(F, 1) == 0)


def test_faster_tissue_leads():
    # Plasma turns over faster than red cells (Hahn et al. 2012): after a step, plasma is
    # always closer to the new value.
    t = np.linspace(0.1, 200, 50)
    p = eq.incorporation_curve(t, 0.0, 1.0, np.log(2) / PLASMA_T12)
    r = eq.incorporation_curve(t, 0.0, 1.0, np.log(2) / RBC_T12)
    assert np.all(p > r)


# --------------------------------------------------------------------------
# Rayleigh relation
# --------------------------------------------------------------------------
def test_rayleigh_derived_example():
    # delta - delta0 ~ eps ln f with eps = -3.8 permil (urine vs plasma, Lee et al. 2012
    # J Exp Biol 215:3354); derived example: f = 0.8 -> +0.85 permil.
    e = eq.rayleigh_enrichment(0.8, -3.8)
    assert e == pytest.approx(0.85, abs=0.005)
    assert e == pytest.approx(-3.8 * np.log(0.8), rel=1e-12)


def test_rayleigh_exact_form_against_ratios():
    # Exact Rayleigh distillation in ratio space: R/R0 = f^(alpha - 1), eps = 1000 (alpha - 1)
    # (Mariotti et al. 1981 Plant Soil 62:413, from memory); delta = (R/R_std - 1) 1000
    # (Coplen 2011 RCM 25:2538). R_std cancels, so any positive value works.
    eps, f, d0 = -3.8, np.array([0.95, 0.8, 0.6, 0.3]), 11.0
    alpha = 1.0 + eps / 1000.0
    r_std = 0.00367
    r0 = r_std * (1.0 + d0 / 1000.0)
    r = r0 * f ** (alpha - 1.0)
    expected = (r / r_std - 1.0) * 1000.0 - d0
    exact = eq.rayleigh_enrichment(f, eps, d0=d0)
    np.testing.assert_allclose(exact, expected, rtol=1e-10)
    approx = eq.rayleigh_enrichment(f, eps)
    # exact = (1000 + d0)(exp(A/1000) - 1) with A = eps ln f the approximation, so the
    # relative difference is about (d0 + A/2)/1000: about 1 %, not zero
    rel = (exact - approx) / approx
    np.testing.assert_allclose(rel, (d0 + approx / 2) / 1000.0, rtol=0.02)
    assert np.all((rel > 0.005) & (rel < 0.02))


@pytest.mark.parametrize("d0", [None, 11.0])
def test_rayleigh_inverse_round_trip(d0):
    f = np.linspace(0.2, 1.0, 17)
    for eps in (-3.0, -3.8, -4.5):
        e = eq.rayleigh_enrichment(f, eps, d0=d0)
        back = eq.rayleigh_fraction_remaining(e, eps, d0=d0)
        np.testing.assert_allclose(back, f, rtol=1e-10)
    # negative enrichment means no loss
    assert eq.rayleigh_fraction_remaining(-0.3, -3.8) == pytest.approx(1.0)


# --------------------------------------------------------------------------
# catabolic enrichment
# --------------------------------------------------------------------------
def _recursion(t_end, dt, onset, duration, kappa, tau):
    """E(t) = E(t - dt) exp(-dt/tau) + kappa s(t) dt on a fine step (model.md section 2)."""
    n = int(round(t_end / dt))
    t = (np.arange(n) + 1) * dt
    s = ((t > onset) & (t <= onset + duration)).astype(float)
    out = np.empty(n)
    e = 0.0
    decay = np.exp(-dt / tau)
    for k in range(n):
        e = e * decay + kappa * s[k] * dt
        out[k] = e
    return t, out


def test_enrichment_closed_form_is_limit_of_recursion():
    onset, duration, kappa, tau = 30.0, 40.0, 0.05, 25.0
    errors = []
    for dt in (0.1, 0.01, 0.001):
        t, rec = _recursion(150.0, dt, onset, duration, kappa, tau)
        closed = eq.enrichment(t, onset, duration, kappa, tau)
        errors.append(np.max(np.abs(closed - rec)))
    # first-order convergence: error ~ kappa dt
    assert errors[0] > errors[1] > errors[2]
    assert errors[2] < 2 * kappa * 0.001
    assert errors[1] / errors[2] == pytest.approx(10.0, rel=0.2)


def test_enrichment_matches_ode_solution():
    # The recursion's continuous limit is the linear ODE dE/dt = kappa s(t) - E/tau; solve it
    # with an independent integrator (scipy's RK45) piecewise over the episode.
    onset, duration, kappa, tau = 12.0, 33.0, 0.07, 45.0
    t_eval = np.linspace(0.0, 200.0, 401)

    def rhs(on):
        return lambda t, e: [kappa * on - e[0] / tau]

    parts = [(0.0, onset, 0.0), (onset, onset + duration, 1.0), (onset + duration, 200.0, 0.0)]
    e0, vals = 0.0, np.zeros_like(t_eval)
    for a, b, on in parts:
        sol = solve_ivp(rhs(on), (a, b), [e0], dense_output=True, rtol=1e-10, atol=1e-12)
        m = (t_eval >= a) & (t_eval <= b)
        vals[m] = sol.sol(t_eval[m])[0]
        e0 = sol.y[0, -1]
    closed = eq.enrichment(t_eval, onset, duration, kappa, tau)
    np.testing.assert_allclose(closed, vals, atol=1e-7)
    # peak at the end of the episode: kappa tau (1 - exp(-D/tau))
    assert closed.max() == pytest.approx(kappa * tau * (1 - np.exp(-duration / tau)), rel=1e-3)
    assert np.all(closed >= 0)


def test_episode_overlap_fractions():
    bin_lo = np.arange(0.0, 40.0, 4.0)
    frac = eq.episode_overlap(bin_lo, 4.0, 6.0, 10.0)  # episode [6, 16]
    np.testing.assert_allclose(frac, [0, 0.5, 1, 1, 0, 0, 0, 0, 0, 0])
    assert frac.sum() * 4.0 == pytest.approx(10.0)


# --------------------------------------------------------------------------
# keratin growth windows: midpoint rule
# --------------------------------------------------------------------------
def test_window_points_are_midpoints():
    start = np.array([[10.3, 8.0], [21.5, -3.0]])
    end = start + np.array([[7.6, 4.0], [1.0, 63.0]])
    for n in (1, 2, 6):
        tq = eq.window_points(start, end, n)
        assert tq.shape == (2, 2, n)
        h = (end - start) / n
        np.testing.assert_allclose(tq[..., 0], start + h / 2)
        np.testing.assert_allclose(np.diff(tq, axis=-1), np.repeat(h[..., None], n - 1, -1))
        np.testing.assert_allclose(tq[..., -1], end - h / 2)


@pytest.mark.parametrize("n", [2, 6, 24])
def test_window_mean_of_smooth_curve_within_midpoint_bound(n):
    # Window mean of the incorporation curve exp(-lam t) by the composite midpoint rule:
    # |error| <= L^2 max|f''| / (24 n^2) (e.g. Burden & Faires, Numerical Analysis, from
    # memory), and the rule is exact for a linear function.
    lam = np.log(2.0) / RBC_T12
    start, end = np.array([3.0, 40.0]), np.array([13.0, 90.0])
    tq = eq.window_points(start, end, n)
    got = np.exp(-lam * tq).mean(-1)
    exact = (np.exp(-lam * start) - np.exp(-lam * end)) / (lam * (end - start))
    bound = (end - start) ** 2 * lam**2 * np.exp(-lam * start) / (24 * n**2)
    assert np.all(np.abs(got - exact) <= bound)
    assert np.all(np.abs(got - exact) >= 0.5 * bound * np.exp(-lam * (end - start)))
    np.testing.assert_allclose((2.0 * tq - 1.0).mean(-1), start + end - 1.0, rtol=1e-13)


# --------------------------------------------------------------------------
# piecewise-linear knot interpolation
# --------------------------------------------------------------------------
def test_interpolate_knots_equals_hat_basis_and_numpy_interp():
    rng = np.random.default_rng(17)
    n_ind, n_knots, spacing = 3, 9, 16.0
    knots = np.arange(n_knots) * spacing
    values = rng.normal(12.0, 2.0, (n_ind, n_knots, 2))
    t = rng.uniform(-40.0, knots[-1] + 40.0, (n_ind, 7, 5))  # inside and outside the knots
    t[0, 0] = knots[:5]  # on knots
    t[1, 0] = [-1e-9, 0.0, knots[-1], knots[-1] + 1e-9, 1e6]
    t[2, 0] = [-1e6, spacing - 1e-12, spacing + 1e-12, 7.5 * spacing, knots[-2]]
    got = eq.interpolate_knots(t, spacing, values, n_knots)
    assert got.shape == (n_ind, 7, 5, 2)
    for i in range(n_ind):
        hat = eq.knot_basis(t[i].ravel(), knots) @ values[i]
        np.testing.assert_allclose(got[i], hat.reshape(7, 5, 2), rtol=0, atol=1e-12)
        # numpy's own piecewise-linear interpolation, also held constant outside the knots
        for c in range(2):
            ref = np.interp(t[i].ravel(), knots, values[i, :, c]).reshape(7, 5)
            np.testing.assert_allclose(got[i, ..., c], ref, rtol=0, atol=1e-12)
    # a 2-D time array, and exactly the knot values on the knots
    got2 = eq.interpolate_knots(np.tile(knots, (n_ind, 1)), spacing, values, n_knots)
    np.testing.assert_allclose(got2, values, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------
# diet path pieces
# --------------------------------------------------------------------------
def test_anchored_walk_is_zero_at_anchor_and_cumulative():
    rng = np.random.default_rng(5)
    K = 7
    z = rng.normal(size=(3, K - 1, 2))
    anchor = np.array([0, 3, 6])
    A = eq.anchored_walk_matrix(K, anchor)
    v = np.einsum("ikj,ijc->ikc", A, z)
    full = np.concatenate([np.zeros((3, 1, 2)), np.cumsum(z, axis=1)], axis=1)
    expect = full - full[np.arange(3), anchor][:, None, :]
    np.testing.assert_allclose(v, expect, atol=1e-12)
    np.testing.assert_allclose(v[np.arange(3), anchor], 0.0)


def test_walk_basis_is_cumulative_sum_at_knots():
    knots = np.array([0.0, 10.0, 20.0, 30.0])
    z = np.array([0.5, -1.0, 2.0])
    M = eq.walk_basis(knots, knots)
    np.testing.assert_allclose(M @ z, np.r_[0.0, np.cumsum(z)])
    # linear between knots, constant outside
    M2 = eq.walk_basis(np.array([5.0, 25.0, 99.0]), knots)
    np.testing.assert_allclose(M2 @ z, [0.25, -0.5 + 1.0, 1.5])
    np.testing.assert_allclose(eq.knot_basis(np.array([3.0, 17.0]), knots).sum(1), 1.0)


def test_body_pool_direction():
    diet = np.array([[[12.0, -17.0], [12.0, -17.0]]])
    e = np.array([[0.0, 1.0]])
    pool = eq.body_pool(diet, e, np.array([[-0.1, -0.1]]))
    np.testing.assert_allclose(pool[0, 1], [13.0, -17.1])
    np.testing.assert_allclose(pool[0, 0], [12.0, -17.0])

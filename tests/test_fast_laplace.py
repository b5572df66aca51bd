"""The block Laplace approximation against known answers (no MCMC, seconds)."""

from __future__ import annotations

import numpy as np

from nstress.model.fast import block_laplace, find_mode, layout


def _hierarchical_gaussian(n_ind: int, seed: int = 3):
    """A linear-Gaussian hierarchy: μ ~ N(0, 10²); x_i ~ N(μ, τ²); y_ij ~ N(x_i, σ²).

    The posterior is exactly Gaussian; its precision is the (dense) matrix P below.
    """
    rng = np.random.default_rng(seed)
    tau, sigma, n_obs = 0.7, 0.4, 5
    y = rng.normal(1.0, tau, n_ind)[:, None] + sigma * rng.standard_normal((n_ind, n_obs))
    n = 1 + n_ind  # flat: [μ, x_1 .. x_I]
    prec = np.zeros((n, n))
    prec[0, 0] = 1 / 10.0**2 + n_ind / tau**2
    for i in range(n_ind):
        prec[0, 1 + i] = prec[1 + i, 0] = -1 / tau**2
        prec[1 + i, 1 + i] = 1 / tau**2 + n_obs / sigma**2
    lin = np.zeros(n)
    lin[1:] = y.sum(axis=1) / sigma**2

    def logp_grad(v: np.ndarray) -> tuple[float, np.ndarray]:
        return float(-0.5 * v @ prec @ v + lin @ v), -prec @ v + lin

    return prec, lin, logp_grad


def test_block_laplace_equals_the_analytic_gaussian_posterior():
    # A Gaussian posterior's Laplace approximation is exact: mean P⁻¹b, covariance P⁻¹
    # (Laplace's method is exact for a quadratic log density; e.g. Bishop 2006, section 4.4).
    prec, lin, logp_grad = _hierarchical_gaussian(6)
    lay = layout([("mu", (), False), ("x", (6,), True)])
    mode, info = find_mode(logp_grad, np.zeros(7), gtol=1e-4)
    assert info["converged"]
    np.testing.assert_allclose(mode, np.linalg.solve(prec, lin), atol=1e-6)
    lap = block_laplace(lambda v: logp_grad(v)[1], mode, lay, step=1e-3, eig_floor=1e-8)
    np.testing.assert_allclose(lap.covariance(), np.linalg.inv(prec), rtol=1e-6, atol=1e-9)
    # draws have that covariance too (Monte Carlo, loose)
    draws = lap.sample(np.random.default_rng(0), 40000)
    np.testing.assert_allclose(np.cov(draws.T), np.linalg.inv(prec), atol=4e-3)
    np.testing.assert_allclose(draws.mean(0), mode, atol=0.02)


def test_layout_splits_group_and_per_animal_entries():
    lay = layout([("a", (2,), False), ("b", (3, 2), True), ("c", (), False), ("d", (3,), True)])
    np.testing.assert_array_equal(lay.group, [0, 1, 8])
    np.testing.assert_array_equal(lay.local, [[2, 3, 9], [4, 5, 10], [6, 7, 11]])
    assert lay.names == ["b[0]", "b[1]", "d[0]"]
    assert lay.size == 12


def test_negative_curvature_is_made_positive():
    # a saddle: the approximation must still be a proper Gaussian (|λ| floored)
    def grad(v):
        return -np.array([2.0 * v[0], -0.5 * v[1]])

    lay = layout([("g", (1,), False), ("x", (1, 1), True)])
    lap = block_laplace(grad, np.zeros(2), lay, eig_floor=0.1)
    assert lap.n_floored == 1
    cov = lap.covariance()
    np.testing.assert_allclose(np.diag(cov), [0.5, 2.0], rtol=1e-6)


def test_mode_search_steps_back_from_points_where_the_density_is_not_finite():
    # a density (pseudo-Huber, flat far out, so the search overshoots) that is NaN beyond
    # x = 3.2 in any coordinate, as a model's can be away from its mode: the search must
    # reach the mode at 3 (it stopped at -2 before: a NaN point was given a zero gradient)
    from nstress.model.fast import find_mode

    seen_nan = []

    def logp_grad(x):
        if np.any(x > 3.2):
            seen_nan.append(True)
            return np.nan, np.full_like(x, np.nan)
        u = x - 3.0
        return -float(np.sum(np.sqrt(1.0 + u**2))), -u / np.sqrt(1.0 + u**2)

    x, info = find_mode(logp_grad, np.full(5, -40.0), gtol=1e-6)
    assert seen_nan  # the search did step into the NaN region
    assert np.all(np.isfinite(x)) and np.isfinite(info["logp"])
    np.testing.assert_allclose(x, 3.0, atol=1e-4)
    assert info["converged"]

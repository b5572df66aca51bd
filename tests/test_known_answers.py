"""Known-answer checks of the PyMC model against results from outside the project.

* With catabolism switched off, Gaussian increments and fixed variances the
  model is linear-Gaussian, so its posterior mean (= its MAP) of the diet
  path must equal a Kalman smoother's (Rauch, Tung & Striebel 1965) on the
  same data. The smoother is statsmodels' state-space implementation (Durbin &
  Koopman 2012), with its own transition and design matrices written here.
* A single blood tissue after a step diet change must follow the
  one-compartment incorporation curve δ(t) = δ∞ + (δ0 − δ∞)·e^(−λ(t − t0))
  (Tieszen et al. 1983; Martínez del Rio et al. 2009), here from the MAP of
  the model fitted to noisy draws.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pymc as pm
import pytest

from nstress import equations as eq
from nstress.model import forward
from nstress.model.build import ModelSpec, build_model
from nstress.model.simulate import table_to_samples
from nstress.prep.timebase import build_timebase
from nstress.tissues import DEFAULT_TISSUES

sm = pytest.importorskip("statsmodels.api")

WALK_SD = 0.35  # ‰ per knot step
OBS_SD = 0.2  # ‰ analytical SD of every row


def _blood_table(days: np.ndarray, d15n: np.ndarray, d13c: np.ndarray, tissue: str):
    start = np.datetime64("2025-03-01")
    dates = (start + days.astype("timedelta64[D]")).astype(str)
    return pd.DataFrame(
        {
            "individual": "K1",
            "tissue": tissue,
            "d15N": d15n,
            "d13C": d13c,
            "date": dates,
            "sd_d15N": OBS_SD,
            "sd_d13C": OBS_SD,
        }
    )


def _fixed(model: pm.Model, n_tis: int, level: np.ndarray, **extra) -> pm.Model:
    """Fix every variance and hyperparameter, leaving a linear-Gaussian model."""
    values = {
        "walk_sd": np.array([WALK_SD, WALK_SD]),
        "walk_corr_z": np.array(0.0),
        "extra_sd": np.zeros((n_tis, 2)),
        "diet_level_group": level[None, :],
        "diet_level_sd": np.array([1e3, 1e3]),  # nearly flat level, like a diffuse smoother
        "onset_sd": np.array(1.0),
        "duration_log_sd": np.array(0.3),
        "kappa_log_sd": np.array(0.3),
        "tau_rec_log_sd": np.array(0.3),
        **extra,
    }
    return pm.do(model, values)


class _KnotSmoother(sm.tsa.statespace.MLEModel):
    """Random walk on knots; each observation is the straight line between two knots.

    State at index k: (m_k, m_{k−1}); an observation at time t between knots
    k−1 and k has design (w, 1 − w) with w = (t − knot_{k−1}) / spacing.
    """

    def __init__(self, endog, weights, walk_sd, obs_sd):
        super().__init__(endog, k_states=2, k_posdef=1)
        n = len(endog)
        design = np.zeros((1, 2, n))
        design[0, 0, :] = weights
        design[0, 1, :] = 1.0 - weights
        self["design"] = design
        self["transition"] = np.array([[1.0, 0.0], [1.0, 0.0]])
        self["selection"] = np.array([[1.0], [0.0]])
        self["state_cov"] = np.array([[walk_sd**2]])
        self["obs_cov"] = np.array([[obs_sd**2]])
        self.initialize_approximate_diffuse(1e6)


def test_diet_path_matches_kalman_smoother():
    rng = np.random.default_rng(7)
    # irregular draws: every 4 d with gaps, at most one per 4-day bin
    days = np.concatenate([np.arange(0, 60, 4), np.arange(76, 160, 4), [172, 184]])
    truth = 12.0 + np.cumsum(rng.normal(0, 0.3, days.size))
    y15 = truth + rng.normal(0, OBS_SD, days.size)
    y13 = -18.0 + 0.5 * (truth - 12.0) + rng.normal(0, OBS_SD, days.size)
    quick = dataclasses.replace(
        DEFAULT_TISSUES["plasma"],
        name="quickblood",
        half_life_days=0.02,  # turnover within hours: the draw reads the pool directly
        half_life_sd_log=0.0,
        disc_d15N=0.0,
        disc_d13C=0.0,
    )
    tissues = {"quickblood": quick}
    tb = build_timebase(table_to_samples(_blood_table(days, y15, y13, "quickblood")), tissues)
    spec = ModelSpec(
        knot_days=tb.bin_width, walk_increments="normal", episodes=False, diet_shift=False
    )
    built = build_model(tb, spec)
    model = _fixed(built.model, 1, np.array([12.0, -18.0]))
    with model:
        mp = pm.find_MAP(progressbar=False, maxeval=20000)
    grid = built.grid
    knots = eq.walk_values(np.asarray(mp["diet_level"]), np.asarray(mp["diet_steps"]), grid.walk)
    diet = eq.interpolate_knots(tb.bin_mid[None, :], grid.spacing, knots, len(grid.knots))

    # the smoother's own view: one time index per knot interval
    t_obs = tb.blood.t[0][tb.blood.mask[0]]
    b = np.floor(t_obs / tb.bin_width).astype(int)
    t_read = tb.bin_mid[b]  # the pool of a bin is the path at the bin's centre
    k = np.floor(t_read / grid.spacing).astype(int) + 1
    w = (t_read - grid.knots[k - 1]) / grid.spacing
    n_idx = len(grid.knots)
    for iso, y in ((0, y15), (1, y13)):
        endog = np.full(n_idx, np.nan)
        weights = np.zeros(n_idx)
        endog[k] = y
        weights[k] = w
        res = _KnotSmoother(endog, weights, WALK_SD, OBS_SD).smooth([])
        m_smooth = res.smoothed_state[0]
        covered = slice(int(k.min()) - 1, int(k.max()) + 1)
        np.testing.assert_allclose(knots[0, covered, iso], m_smooth[covered], atol=1e-3)
        # and at the bin centres where the samples sit
        np.testing.assert_allclose(
            diet[0, b, iso], w * m_smooth[k] + (1 - w) * m_smooth[k - 1], atol=1e-3
        )


def test_single_blood_tissue_follows_incorporation_curve():
    # a step diet change at day 40 from (10, -20) to (13, -18.5); plasma t1/2 = 6 d
    rng = np.random.default_rng(3)
    days = np.arange(0, 121, 4)
    t_step, half = 40.0, 6.0
    lam = np.log(2) / half
    d0, d1 = np.array([10.0, -20.0]), np.array([13.0, -18.5])
    clean = np.where(
        (days < t_step)[:, None],
        d0,
        eq.incorporation_curve((days - t_step)[:, None], d0, d1, lam),
    )
    noisy = clean + rng.normal(0, 0.05, clean.shape)
    tissue = dataclasses.replace(
        DEFAULT_TISSUES["plasma"],
        half_life_days=half,
        half_life_sd_log=0.0,
        disc_d15N=0.0,
        disc_d13C=0.0,
    )
    table = _blood_table(days, noisy[:, 0], noisy[:, 1], "plasma")
    table["sd_d15N"] = table["sd_d13C"] = 0.05
    tb = build_timebase(table_to_samples(table), {"plasma": tissue})
    spec = ModelSpec(
        knot_days=tb.bin_width, walk_increments="normal", episodes=False, diet_shift=False
    )
    built = build_model(tb, spec)
    model = _fixed(built.model, 1, d0, walk_sd=np.array([0.5, 0.5]))
    with model:
        mp = pm.find_MAP(progressbar=False, maxeval=20000)
    params = forward.Params(
        baseline=np.asarray(mp["diet_level"]),
        steps=np.asarray(mp["diet_steps"]),
        onset=np.zeros(1),
        duration=np.ones(1),
        kappa=np.zeros(1),
        tau_rec=np.ones(1),
        gamma=np.zeros(1),
        disc=np.zeros((1, 2)),
        rate=np.array([lam]),
        growth=np.ones((1, 1)),
    )
    fitted = forward.predict(tb, built.grid, params).blood0[0][tb.blood.mask[0]]
    # the fitted tissue curve follows the published curve within the analytical noise
    resid = fitted - clean
    assert np.sqrt(np.mean(resid**2)) < 0.08
    # half of the change is reached one half-life after the step
    i_half = int(np.argmin(np.abs(days - (t_step + 8.0))))
    frac = (fitted[i_half, 0] - d0[0]) / (d1[0] - d0[0])
    expect = 1.0 - np.exp(-lam * (days[i_half] - t_step))
    assert abs(frac - expect) < 0.1

"""A small recovery check in the default run: a real fit of a few synthetic animals.

Few draws, so the diagnostics are expected to fail (that mark is checked
elsewhere); the bounds here are loose but real: the fit must put its
catabolic probability on the animals and bins that really fasted.
The full recovery suite (30-40 animals, the issue's targets) is in
``benchmarks/recovery.py`` and, marked slow, in ``tests/test_recovery_slow.py``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation
from nstress.products.recovery import recovery_metrics
from nstress.workflow.pipeline import FitConfig, fit_tables

pytest.importorskip("nutpie")


@pytest.fixture(scope="module")
def small_fit(tmp_path_factory):
    root = tmp_path_factory.mktemp("recovery")
    spec = ColonySpec(
        n_individuals=8,
        seed=404,
        kind_shares={"faster": 0.5, "trophic_shift": 0.25, "neither": 0.25},
        kappa_per_day=(0.05, 0.08),
        duration_days=(25.0, 45.0),
        groups=("colony_A",),
        breeding_dates=("2024-11-28",),
        diet_means=((12.0, -17.0),),
    )
    sim = simulate_colony(spec)
    write_simulation(sim, root / "data")
    cfg = FitConfig(
        sampler={"draws": 200, "tune": 500, "chains": 2, "seed": 11},
        progress=False,
        product_draws=150,
    )
    fit_tables([root / "data" / "samples.csv"], root / "out", cfg)
    tl = pd.read_csv(root / "out" / "timelines.csv")
    sc = pd.read_csv(root / "out" / "screening.csv")
    return sim, tl, sc


def test_small_colony_recovers_who_fasted_and_when(small_fit):
    sim, tl, sc = small_fit
    m = recovery_metrics(tl, sc, sim.truth_bins, sim.truth_individuals)
    assert m["auc_bins"] >= 0.85
    ti = sim.truth_individuals.merge(sc, on="individual", suffixes=("", "_fit"))
    fasted = ti["has_episode"].astype(bool)
    assert fasted.sum() >= 3 and (~fasted).sum() >= 3
    p = ti["p_catabolic_any"].to_numpy()
    assert np.mean(p[fasted]) - np.mean(p[~fasted]) >= 0.5
    assert m["onset_error_median_days"] <= 14.0

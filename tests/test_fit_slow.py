"""Real MCMC through the whole pipeline (slow: numba compilation and sampling)."""

import json

import pandas as pd
import pytest

from nstress.model.posterior import load
from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation
from nstress.workflow.pipeline import FitConfig, fit_tables

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def short_fit(tmp_path_factory):
    root = tmp_path_factory.mktemp("fit")
    sim = simulate_colony(ColonySpec(n_individuals=4, seed=21))
    write_simulation(sim, root / "data")
    cfg = FitConfig(
        sampler={"draws": 40, "tune": 40, "chains": 2, "seed": 3}, progress=False, product_draws=80
    )
    manifest = fit_tables([root / "data" / "samples.csv"], root / "out", cfg)
    return root / "out", manifest, sim


def test_too_few_draws_is_marked_as_failing(short_fit):
    out, manifest, _ = short_fit
    diag = manifest["diagnostics"]
    assert diag["ok"] is False
    assert any("ESS" in r for r in diag["reasons"])
    sc = pd.read_csv(out / "screening.csv")
    assert set(sc["status"]) == {"fit_failed"}
    assert not sc["diagnostics_ok"].any()


def test_all_products_written_and_reopen(short_fit):
    out, manifest, sim = short_fit
    for name in (
        "ledger.csv",
        "timelines.csv",
        "screening.csv",
        "timelines.nc",
        "posterior.nc",
        "manifest.json",
    ):
        assert (out / name).exists(), name
    m = json.loads((out / "manifest.json").read_text())
    assert m["inputs"][0]["sha256"] and m["seed"] == 3
    idata, attrs = load(out / "posterior.nc")
    assert attrs["input_hash"] == m["input_hash"]
    assert attrs["config"]["sampler"]["draws"] == 40
    tl = pd.read_csv(out / "timelines.csv")
    assert tl["p_catabolic"].between(0, 1).all()
    assert set(tl["individual"]) == set(sim.truth_individuals["individual"])
    led = pd.read_csv(out / "ledger.csv")
    assert len(led) == len(sim.table)

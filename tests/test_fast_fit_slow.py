"""The fast screening mode end to end on a tiny synthetic colony (JAX compile: about a minute).

Checks that every output says it is approximate and that P(episode) puts an
obvious faster above an obvious non-faster.
"""

from __future__ import annotations

import json

import arviz as az
import pandas as pd
import pytest

from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation
from nstress.products.report import APPROXIMATE_BANNER
from nstress.workflow.pipeline import FitConfig, fit_tables

pytest.importorskip("jax")
pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def fast_fit(tmp_path_factory):
    root = tmp_path_factory.mktemp("fast")
    spec = ColonySpec(
        n_individuals=6,
        seed=404,
        kind_shares={"faster": 0.5, "neither": 0.5},
        kappa_per_day=(0.06, 0.08),
        duration_days=(30.0, 45.0),
        groups=("colony_A",),
        breeding_dates=("2024-11-28",),
        diet_means=((12.0, -17.0),),
    )
    sim = simulate_colony(spec)
    write_simulation(sim, root / "data")
    cfg = FitConfig(
        sampler={"seed": 3, "method": "fast", "fast_draws": 60}, progress=False, product_draws=60
    )
    manifest = fit_tables([root / "data" / "samples.csv"], root / "out", cfg)
    return sim, root / "out", manifest


def test_every_output_says_approximate(fast_fit):
    _, out, manifest = fast_fit
    on_disk = json.loads((out / "manifest.json").read_text())
    for m in (manifest, on_disk):
        assert m["approximate"] is True and m["method"] == "fast"
        assert "not a final posterior" in m["approximate_note"]
        assert m["diagnostics"]["method"] == "fast" and m["diagnostics"]["approximate"]
        assert m["diagnostics"]["convergence"] == {}  # no R-hat/ESS claimed
    sc = pd.read_csv(out / "screening.csv")
    assert sc["approximate"].astype(bool).all()
    idata = az.from_netcdf(str(out / "posterior.nc"), engine="h5netcdf")
    assert json.loads(idata.posterior.attrs["nstress_approximate"]) is True
    assert json.loads(idata.posterior.attrs["nstress_method"]) == "fast"
    assert idata.posterior.sizes["chain"] == 1 and idata.posterior.sizes["draw"] == 60
    html = (out / "report.html").read_text()
    assert APPROXIMATE_BANNER in html and 'id="approximate-banner"' in html


def test_p_episode_orders_faster_above_non_faster(fast_fit):
    sim, out, _ = fast_fit
    sc = pd.read_csv(out / "screening.csv").merge(sim.truth_individuals, on="individual")
    fasted = sc["has_episode"].astype(bool)
    assert fasted.any() and (~fasted).any()
    p = sc["p_catabolic_any"]
    # the strongest faster (largest true enrichment) against the flattest non-faster
    assert p[fasted].max() > p[~fasted].min() + 0.3
    assert p[fasted].mean() > p[~fasted].mean()

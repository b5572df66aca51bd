"""The report's figures for the (synthetic) demo colony, through a real but short fit (slow)."""

from __future__ import annotations

import os
from pathlib import Path

import matplotlib.image as mpimg
import pandas as pd
import pytest
from matplotlib.collections import QuadMesh

from nstress.products import figures as figs
from nstress.workflow.cli import demo_table
from nstress.workflow.pipeline import FitConfig, fit_tables

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo_fit(tmp_path_factory):
    # .ci/run has just run the README's demo command: reuse its run instead of fitting again
    # (returns the directory of the fit's tables and that of the report and its figures)
    done = os.environ.get("NSTRESS_DEMO_RUN")
    if done and (Path(done) / "manifest.json").exists():
        return Path(done) / "units" / "colony_samples", Path(done)
    # otherwise fit the first eight demo animals briefly (the figures' code paths are the
    # same; the whole colony takes half an hour even at a few draws on two cores)
    root = tmp_path_factory.mktemp("demo")
    table = pd.read_csv(demo_table())
    keep = table["individual"].drop_duplicates().iloc[:8]
    table[table["individual"].isin(keep)].to_csv(root / "demo8.csv", index=False)
    cfg = FitConfig(
        sampler={"draws": 20, "tune": 20, "chains": 2, "seed": 4}, progress=False, product_draws=40
    )
    fit_tables([root / "demo8.csv"], root / "fit", cfg)
    return root / "fit", root / "fit"


def test_demo_report_and_every_figure_written(demo_fit):
    out, rep = demo_fit
    page = (rep / "report.html").read_text(encoding="utf-8")
    sc = pd.read_csv(out / "screening.csv", dtype={"individual": str})
    assert page.count('class="individual"') == len(sc) >= 8  # one section per animal
    fig_dir = rep / "figures"
    for stem in ("colony_overview", "ranking", "onsets", "isotope_plane"):
        for ext in ("png", "svg"):
            assert (fig_dir / f"{stem}.{ext}").stat().st_size > 1000, (stem, ext)
    assert len(list(fig_dir.glob("individual_*.png"))) == len(sc)
    assert list(fig_dir.glob("trace_*.png")) and list(fig_dir.glob("ppc_*.png"))
    img = mpimg.imread(fig_dir / "colony_overview.png")
    assert img.shape[0] > 200 and img.shape[1] > 400 and img.std() > 0.05  # not blank


def test_demo_figures_have_axes_and_labels(demo_fit):
    out, _ = demo_fit
    tl = pd.read_csv(out / "timelines.csv", dtype={"individual": str})
    sc = pd.read_csv(out / "screening.csv", dtype={"individual": str})
    pr = pd.read_csv(out / "predictions.csv", dtype={"individual": str})
    ind = sc.iloc[0]["individual"]
    fig = figs.individual_figure(ind, pr[pr["individual"] == ind], tl[tl["individual"] == ind])
    ylabels = [ax.get_ylabel() for ax in fig.axes]
    assert any("‰ vs AIR" in y for y in ylabels) and any("‰ vs VPDB" in y for y in ylabels)
    assert any("probability" in y for y in ylabels)
    assert any(ax.lines or ax.collections for ax in fig.axes)
    ov = figs.colony_overview(tl, sc)
    meshes = [c for c in ov.axes[0].collections if isinstance(c, QuadMesh)]
    assert "ISO 8601" in ov.axes[0].get_xlabel()
    assert len(meshes) == tl["individual"].nunique() == len(sc)  # one strip per animal
    assert len(ov.axes[0].get_yticklabels()) == len(sc)
    ppc = figs.ppc_figure(pr)
    assert len([ax for ax in ppc.axes if ax.collections or ax.lines]) >= 4  # tissues x isotopes


def test_demo_run_reports_what_its_design_can_detect():
    # only the README's demo command runs the workflow's [design] power step
    done = os.environ.get("NSTRESS_DEMO_RUN")
    if not (done and (Path(done) / "manifest.json").exists()):
        pytest.skip("needs the demo run of .ci/run (NSTRESS_DEMO_RUN)")
    import json

    run = Path(done)
    assert json.loads((run / "manifest.json").read_text())["power"]["ok"] is True
    table = pd.read_csv(run / "power" / "power.csv")
    assert set(table["fast_days"]) == {10.0, 20.0, 40.0}
    assert (table["segment_mm"] == table["segment_mm"].iloc[0]).all()  # the data's own design
    page = (run / "report.html").read_text(encoding="utf-8")
    assert "What this sampling design can detect" in page and "The data's own design" in page

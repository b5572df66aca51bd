"""Figures from constructed product tables: axes, labels with units, files written."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from fitdir_factory import ANIMALS, make_fit_dir

from nstress.products import figures as figs

UNIT = re.compile(r"\(.*(‰|probability|ISO 8601|id|d\b|draws|rank|correlation|log).*\)")


@pytest.fixture(scope="module")
def tables(tmp_path_factory):
    root = make_fit_dir(tmp_path_factory.mktemp("figs") / "fit")
    return {
        name: pd.read_csv(root / f"{name}.csv", dtype={"individual": str})
        for name in ("screening", "timelines", "predictions")
    }


def _labels(fig):
    for ax in fig.axes:
        if not ax.get_visible() or (not ax.lines and not ax.collections and not ax.images):
            continue
        yield ax, ax.get_xlabel(), ax.get_ylabel()


def _assert_units(fig):
    n = 0
    for ax, xl, yl in _labels(fig):
        for lab in (xl, yl):
            if lab:
                assert UNIT.search(lab), f"axis label without a unit: {lab!r}"
                n += 1
        # every drawn axis has a y label, or shares its y axis with one that has
        siblings = ax.get_shared_y_axes().get_siblings(ax)
        assert any(a.get_ylabel() for a in siblings), "axis without a y label"
    assert n > 0


def test_individual_figure_has_isotopes_probability_and_enrichment(tables):
    tl, pr = tables["timelines"], tables["predictions"]
    fig = figs.individual_figure("A1", pr[pr["individual"] == "A1"], tl[tl["individual"] == "A1"])
    axes = fig.axes
    assert len(axes) == 4
    assert "‰ vs AIR" in axes[0].get_ylabel() and "‰ vs VPDB" in axes[1].get_ylabel()
    assert "probability" in axes[2].get_ylabel()
    assert "‰" in axes[3].get_ylabel() and "ISO 8601" in axes[3].get_xlabel()
    # per tissue: one fitted line and one observed series, plus the diet line
    labels = [ln.get_label() for ln in axes[0].lines]
    assert {"plasma observed", "whisker observed"} <= set(labels)
    assert sum("fitted" in lab for lab in labels) == 2
    # the enrichment line is the timelines' mean
    np.testing.assert_allclose(
        axes[3].lines[0].get_ydata(), tl[tl["individual"] == "A1"]["enrichment_d15N_mean"]
    )
    _assert_units(fig)


def test_colony_overview_groups_and_ranks_animals(tables):
    fig = figs.colony_overview(tables["timelines"], tables["screening"])
    ax = fig.axes[0]
    ticks = [t.get_text() for t in ax.get_yticklabels()]
    sc = tables["screening"].sort_values(["group", "rank"])
    assert ticks == list(sc["individual"])
    assert len(ax.collections) == len(ANIMALS)  # one shaded row per animal
    assert "probability" in fig.axes[1].get_ylabel()  # colour bar
    _assert_units(fig)


def test_ranking_figure_orders_by_rank_and_shows_intervals(tables):
    sc = tables["screening"]
    fig = figs.ranking_figure(sc)
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_yticklabels()] == list(
        sc.sort_values("rank")["individual"]
    )
    assert "P(episode)" in ax.get_xlabel() and "‰" in fig.axes[1].get_xlabel()
    _assert_units(fig)


def test_isotope_plane_draws_a_path_per_animal_and_both_directions(tables):
    fig = figs.isotope_plane(
        tables["timelines"],
        tables["screening"],
        {"north": -0.1, "south": -0.1},
        np.array([0.3, 0.3]),
        0.6,
    )
    ax = fig.axes[0]
    paths = [ln for ln in ax.lines if len(ln.get_xdata()) > 1]
    assert len(paths) == len(ANIMALS)
    texts = " ".join(t.get_text() for t in ax.texts)
    assert "catabolic" in texts and "diet" in texts
    assert "VPDB" in ax.get_xlabel() and "AIR" in ax.get_ylabel()


def test_direction_vectors():
    cat, diet = figs.direction_vectors(0.0, np.array([1.0, 1.0]), 1.0)
    np.testing.assert_allclose(cat, [0.0, 1.0])  # (δ13C, δ15N): catabolism moves N only
    np.testing.assert_allclose(diet, np.array([1.0, 1.0]) / np.sqrt(2))
    cat, diet = figs.direction_vectors(-0.5, np.array([2.0, 0.1]), 0.0)
    np.testing.assert_allclose(cat, np.array([-0.5, 1.0]) / np.hypot(0.5, 1.0))
    np.testing.assert_allclose(np.abs(diet), [0.0, 1.0], atol=1e-12)  # N dominates


def test_trace_and_ppc_figures(tables):
    rng = np.random.default_rng(1)
    fig = figs.trace_figure(
        {"gamma[north]": rng.normal(size=(2, 40)), "onset_sd": rng.random((2, 40))}
    )
    assert len(fig.axes) == 4
    assert len(fig.axes[0].lines) == 2  # one trace per chain
    assert "‰" in fig.axes[0].get_ylabel() and "(d)" in fig.axes[2].get_ylabel()
    _assert_units(fig)
    fig = figs.ppc_figure(tables["predictions"])
    assert len(fig.axes) == 4  # 2 tissues x 2 isotopes
    assert all("inside the 90 % interval" in ax.get_title() for ax in fig.axes)
    _assert_units(fig)


def test_save_figure_writes_png_and_svg(tables, tmp_path):
    fig = figs.ranking_figure(tables["screening"])
    paths = figs.save_figure(fig, tmp_path / "figures", "ranking")
    assert paths["png"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert paths["png"].stat().st_size > 5000
    assert b"<svg" in paths["svg"].read_bytes()[:2000]


def test_palette_is_okabe_ito():
    # Okabe & Ito 2008: the eight colours of the colour-universal-design palette
    assert figs.OKABE_ITO["vermillion"] == "#D55E00" and figs.OKABE_ITO["blue"] == "#0072B2"
    assert len(set(figs.OKABE_ITO.values())) == 8
    assert {c for c, _ in figs.STATUS_STYLE.values()} - {figs.GREY} <= set(figs.OKABE_ITO.values())
    assert len({m for _, m in figs.STATUS_STYLE.values()}) == len(figs.STATUS_STYLE)

"""report.html from fit-directory files; exports; predictions through the forward model."""

from __future__ import annotations

import json
import re
import shutil
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from fitdir_factory import ANIMALS, make_fit_dir

from nstress.errors import InputError
from nstress.model import forward
from nstress.model.draws import Draws
from nstress.products.exports import TIDY_COLUMNS, run_summary, tidy_timelines
from nstress.products.predictions import PREDICTION_COLUMNS, observation_predictions
from nstress.products.report import write_report
from nstress.products.screening import STATUSES


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    fit = make_fit_dir(root / "unit_north", ok=False)
    path = write_report([fit], root / "out")
    return path, path.read_text(encoding="utf-8")


def test_report_is_one_self_contained_file(report):
    path, page = report
    assert path.name == "report.html"
    # no external references: no URLs, no linked scripts, styles or fonts
    assert not re.search(r"https?://|//cdn|<link\b|@import|url\(", page)
    assert not re.search(r"<script[^>]+src=", page)
    srcs = re.findall(r'src="([^"]*)"', page)
    assert srcs and all(s.startswith("data:image/png;base64,") for s in srcs)
    # the images are real PNGs
    import base64

    for s in srcs[:3]:
        assert base64.b64decode(s.split(",", 1)[1])[:4] == b"\x89PNG"
    # figures also written for publication
    figs = path.parent / "figures"
    assert (figs / "colony_overview.svg").exists() and (figs / "ranking.png").exists()
    assert len(list(figs.glob("individual_*.png"))) == len(ANIMALS)


def test_report_has_summary_cautions_table_individuals_methods_provenance(report):
    _, page = report
    for sid in (
        "summary",
        "cautions",
        "colony",
        "screening",
        "individuals",
        "diagnostics",
        "methods",
        "references",
        "provenance",
    ):
        assert f'id="{sid}"' in page, sid
    assert "not a diagnosis" in page and "permits and ethics approval" in page
    assert "veterinary" in page and "solvents are hazardous" in page
    # summary counts: 6 animals, 2 flagged, 1 inconclusive
    boxes = re.findall(r'<div class="n">(\d+)</div><div>([^<]+)</div>', page)
    assert {v: int(k) for k, v in boxes} == {
        "animals": 6,
        "flagged (catabolic)": 2,
        "possible": 1,
        "inconclusive (cannot tell)": 1,
        "fit failed": 1,
        "clear": 1,
    }
    assert "R-hat of diet_path is 1.300" in page  # the diagnostics warning
    table = page.split('id="screening-table"')[1].split("</table>")[0]
    assert table.count("<tr>") == 1 + len(ANIMALS)
    assert page.count('class="individual"') == len(ANIMALS)
    # priors with their sources and the run's override (gamma mu = 0)
    assert "Cherel et al. 2005" in page and "mu = 0, sigma = 0.3" in page
    assert "Wilson 1927" in page and "Okabe &amp; Ito 2008" in page
    assert "0" * 64 in page and "seed <code>7</code>" in page


def test_merged_report_of_two_units_keeps_both(tmp_path):
    a = make_fit_dir(tmp_path / "a")
    b = make_fit_dir(tmp_path / "b", seed=3)
    page = write_report([a, b], tmp_path / "out", title="Two units").read_text()
    assert "<title>Two units</title>" in page
    assert page.count('class="individual"') == 2 * len(ANIMALS)
    assert 'id="ind-a_A1"' in page and 'id="ind-b_A1"' in page  # same ids, kept apart


def test_report_refuses_an_unfinished_directory(tmp_path):
    fit = make_fit_dir(tmp_path / "fit")
    (fit / "manifest.json").unlink()
    with pytest.raises(InputError, match="no manifest.json"):
        write_report([fit], tmp_path / "out")
    fit = make_fit_dir(tmp_path / "fit2")
    (fit / "screening.csv").unlink()
    with pytest.raises(InputError, match="screening.csv"):
        write_report([fit], tmp_path / "out")
    assert not (tmp_path / "out" / "report.html").exists()


def test_tidy_timelines_round_trip(tmp_path):
    fit = make_fit_dir(tmp_path / "fit")
    tl = pd.read_csv(fit / "timelines.csv")
    long = tidy_timelines(tl)
    assert list(long.columns) == TIDY_COLUMNS
    # 1 statistic for p_catabolic, 3 for each of the other three quantities
    assert len(long) == len(tl) * (1 + 3 * 3)
    back = long.pivot_table(
        index=["individual", "date"], columns=["quantity", "statistic"], values="value"
    )
    row = tl.iloc[17]
    key = (row["individual"], row["date"])
    assert back.loc[key, ("enrichment_d15N", "hi")] == pytest.approx(row["enrichment_d15N_hi"])
    assert back.loc[key, ("p_catabolic", "mean")] == pytest.approx(row["p_catabolic"])
    units = long.groupby("quantity")["unit"].first()
    assert units["diet_d13C"] == "per mil (d13C vs VPDB)" and units["p_catabolic"] == "probability"


def test_run_summary_counts_every_status(tmp_path):
    sc = pd.read_csv(make_fit_dir(tmp_path / "fit") / "screening.csv")
    s = run_summary(
        sc, {"ok": False, "reasons": ["x"]}, seed=3, input_hash="h", versions={"nstress": "0"}
    )
    assert s["status_counts"] == {
        "catabolic": 2,
        "possible": 1,
        "clear": 1,
        "cannot_tell": 1,
        "fit_failed": 1,
    }
    assert set(s["status_counts"]) == set(STATUSES)
    assert s["flagged"] == ["A1", "A2"] and s["inconclusive"] == ["B2"]
    assert s["diagnostics_ok"] is False and s["diagnostics_reasons"] == ["x"]
    json.dumps(s)  # plain data


def test_predictions_use_the_forward_model(tmp_path):
    from nstress.model.simulate import ColonySpec, simulate_colony

    sim = simulate_colony(ColonySpec(n_individuals=4, seed=5))
    p, tb = sim.params, sim.timebase
    truth = sim.truth_individuals.set_index("individual").loc[list(tb.individuals)]
    ep = truth["has_episode"].to_numpy(bool)
    s2 = lambda a: np.stack([np.asarray(a, float)] * 2)  # noqa: E731 - two identical draws
    params = {
        "diet_level": s2(p.baseline),
        "diet_steps": s2(p.steps),
        "onset": s2(p.onset),
        "duration": s2(p.duration),
        "kappa": s2(p.kappa),
        "tau_rec": s2(p.tau_rec),
        "discrimination": s2(p.disc),
        "half_life": s2(np.log(2.0) / p.rate),
        "growth": s2(p.growth),
        "extra_sd": np.zeros((2, len(tb.tissues), 2)),
    }
    if p.shift_size is not None:
        params["shift"], params["shift_start"] = s2(p.shift_size), s2(p.shift_start)
    d = Draws(
        params=params,
        chain_draw=(1, 2),
        p_cond=s2(ep),
        episode=s2(ep).astype(bool),
        gamma_ind=s2(p.gamma),
    )
    built = SimpleNamespace(timebase=tb, grid=sim.grid)
    pr = observation_predictions(built, d, seed=1)
    assert list(pr.columns) == PREDICTION_COLUMNS
    n_obs = int(
        (tb.blood.y_mask & tb.blood.mask[..., None]).sum()
        + (tb.keratin.y_mask & tb.keratin.mask[..., None]).sum()
    )
    assert len(pr) == n_obs
    # identical draws: the band collapses onto the forward model's expected value
    np.testing.assert_allclose(pr["expected_lo"], pr["expected_mean"], atol=1e-9)
    bl, ke = forward.expected(sim.prediction, p.gamma, p.shift_size, episode=ep)
    ref = np.sort(
        np.r_[
            bl[tb.blood.y_mask & tb.blood.mask[..., None]],
            ke[tb.keratin.y_mask & tb.keratin.mask[..., None]],
        ]
    )
    np.testing.assert_allclose(np.sort(pr["expected_mean"].to_numpy()), ref, atol=1e-9)
    # blood rows sit on their draw dates
    blood = pr[(pr["tissue_class"] == "blood") & (pr["isotope"] == "d15N")].iloc[0]
    row = sim.table[sim.table["sample_id"] == blood["sample_id"]].iloc[0]
    assert blood["date"] == str(row["date"])[:10]


def _browser():
    pw = pytest.importorskip("playwright.sync_api", reason="playwright is not installed")
    exe = next(
        (
            shutil.which(n)
            for n in ("chromium", "chromium-browser", "google-chrome")
            if shutil.which(n)
        ),
        None,
    )
    if exe is None:
        pytest.skip("no Chromium on PATH (.ci/run installs Debian's chromium)")
    return pw, exe


@pytest.mark.browser
def test_report_in_a_headless_browser(report):
    pw, exe = _browser()
    path, _ = report
    shot = path.parent / "report_screenshot.png"
    errors: list[str] = []
    with pw.sync_playwright() as p:
        browser = p.chromium.launch(
            executable_path=exe,
            args=[
                "--no-sandbox",
                "--disable-gpu",
                "--no-first-run",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
            ],
        )
        page = browser.new_page(viewport={"width": 1200, "height": 1600})
        page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.goto(path.resolve().as_uri())
        page.wait_for_load_state("load")
        assert page.locator("#summary").is_visible()
        assert page.locator("#screening-table").is_visible()
        assert page.locator("section.individual").count() == len(ANIMALS)
        # every image decoded
        widths = page.eval_on_selector_all("img", "els => els.map(e => e.naturalWidth)")
        assert widths and min(widths) > 0
        # sorting: click "P(episode)" twice -> descending by P(episode)
        col = page.locator("#screening-table th", has_text="P(episode)")
        col.click()
        col.click()
        cells = page.eval_on_selector_all(
            "#screening-table tbody tr td:nth-child(5)", "els => els.map(e => e.dataset.v)"
        )
        vals = [float(v) for v in cells]
        assert vals == sorted(vals, reverse=True)
        page.evaluate("window.scrollTo(0, 0)")
        page.screenshot(path=str(shot), full_page=False)
        browser.close()
    assert not errors, errors
    assert shot.stat().st_size > 10000

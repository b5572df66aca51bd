"""Natural-history presets: their files, their values against published ones, and the layering.

Precedence: package defaults < preset < workflow file < command line. No MCMC here: the
commands that fit are given a stand-in for the fit (``fit_tables``, ``run_workflow``).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from fitdir_factory import make_fit_dir

from nstress.equations import enrichment_incorporated
from nstress.errors import ConfigError
from nstress.growth import make_growth
from nstress.model.priors import PRIORS, resolve_priors
from nstress.prep import resolve_config
from nstress.presets import (
    DIETS,
    MARKERS,
    available,
    describe,
    is_sourced,
    load_preset,
)
from nstress.products.report import write_report
from nstress.tissues import resolve_tissues
from nstress.workflow import pipeline
from nstress.workflow.cli import main
from nstress.workflow.config import load_workflow
from nstress.workflow.layers import _canonical, parse_assignments, study_settings
from nstress.workflow.pipeline import config_hash

ROOT = Path(__file__).resolve().parents[1]
PRESETS = available()
ROWS = [  # synthetic: two invented animals, one whisker and one plasma series
    ("individual", "tissue", "d15N", "d13C", "position_mm", "collected", "date"),
    ("W1", "whisker", "14.0", "-14.6", "0.5", "2025-03-07", ""),
    ("W1", "whisker", "14.3", "-14.4", "1.5", "2025-03-07", ""),
    ("P1", "plasma", "12.0", "-17.0", "", "", "2024-01-05"),
    ("P1", "plasma", "12.4", "-17.1", "", "", "2024-01-12"),
]


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    (tmp_path / "colony.csv").write_text("".join(",".join(r) + "\n" for r in ROWS))
    return tmp_path


def workflow(folder: Path, text: str = "", top: str = "", name: str = "wf.toml") -> Path:
    path = folder / name
    path.write_text(f'{top}[inputs]\ntables = ["colony.csv"]\n{text}')
    return path


def used(record: dict, key: str) -> dict:
    return next(v for v in record["values"] if v["key"] == key)


# ---------------------------------------------------------------- the preset files


def test_the_required_kinds_of_animal_are_there():
    assert {
        "otariid_female",
        "phocid_fast",
        "seabird_fast",
        "herbivore_hair",
        "omnivore_hair",
    } <= set(PRESETS)


@pytest.mark.parametrize("name", PRESETS)
def test_every_value_names_its_source(name):
    p = load_preset(name)
    assert p.values and p.title and p.description and p.diet in DIETS and p.tissues
    for v in p.values:
        assert v.source.strip(), v.key
        assert is_sourced(v.source), f"{name}: {v.key}: {v.source!r}"


def test_the_source_check_tells_a_citation_from_none():
    assert is_sourced("fur seal plasma Δ15N +5.2 (Kurle 2002)")
    assert is_sourced("seal whisker Δ13C (Hobson et al. 1996)")
    assert is_sourced("Thomas & Crowther 2015")
    assert all(is_sourced(f"a rule ({m})") for m in MARKERS)
    assert not is_sourced("a value I like")
    assert not is_sourced("Kurle (no year)")
    assert not is_sourced("since 2002")


@pytest.mark.parametrize("name", PRESETS)
def test_every_value_is_a_valid_setting_that_reaches_the_fit(name):
    """The workflow validator accepts each value, and it lands where the fit reads it."""
    study = study_settings(name)
    priors = resolve_priors(study["priors"])
    tissues = resolve_tissues(study["tissues"])
    qc = resolve_config(study["qc"], tissues)
    fields = {"model": "growth_model", "mm_per_day": "growth_mm_per_day"}
    fields.update({"sd_log": "growth_sd_log", "params": "growth_params"})
    for v in load_preset(name).values:
        section, *rest = v.key.split(".")
        if section == "priors":
            assert priors[rest[0]][rest[1]] == v.value, v.key
        elif section == "tissues":
            assert getattr(tissues[rest[0]], rest[1]) == v.value, v.key
        elif section == "growth":
            assert getattr(tissues[rest[0]], fields[rest[1]]) == v.value, v.key
        else:
            assert qc["lipid"][rest[1]] == v.value, v.key
    assert study["preset"]["name"] == name
    assert not any(v["overridden"] for v in study["preset"]["values"])


def write_preset(folder: Path, name: str, body: str) -> Path:
    d = folder / "presets"
    d.mkdir(exist_ok=True)
    head = '[preset]\ntitle = "t"\ndescription = "d"\ndiet = "mixed"\ntissues = ["hair"]\n'
    (d / f"{name}.toml").write_text(head + body)
    return d


@pytest.mark.parametrize(
    ("body", "expected"),
    [
        ("[priors.gamma]\nmu = -0.1\n", "priors.gamma.mu is written without a source"),
        ('[priors.gamma]\nmu = { value = -0.1, source = "" }\n', "has no source"),
        (
            '[priors.gamma]\nmu = { value = -0.1, source = "my guess" }\n',
            "names no authors and year",
        ),
        ('[sampler]\ndraws = { value = 3, source = "common practice" }\n', r"not \[sampler\]"),
    ],
)
def test_a_malformed_preset_does_not_load(folder, body, expected):
    d = write_preset(folder, "bad", body)
    with pytest.raises(ConfigError, match=expected) as info:
        load_preset("bad", directory=d)
    assert "bad.toml" in str(info.value)


def test_unknown_preset_name_gets_a_hint():
    with pytest.raises(ConfigError, match="did you mean 'phocid_fast'"):
        load_preset("phocid_fats")


def test_the_gamma_prior_follows_the_diet_and_never_forces_a_sign():
    default = PRIORS["gamma"]
    for name in PRESETS:
        p = load_preset(name)
        g = resolve_priors(study_settings(name)["priors"])["gamma"]
        # the sign of the δ13C response is not forced: studies disagree (Williams et al. 2007)
        assert g["mu"] - 2 * g["sigma"] < 0 < g["mu"] + 2 * g["sigma"], name
        if p.diet == "protein_lipid":
            # lipid-derived carbon: δ13C level or falling (Cherel et al. 2005)
            assert g["mu"] <= 0, name
        else:
            # carbohydrate-rich diets: direction less certain; fasting Δδ13C averaged +0.01 ‰
            # across studies, range −1.92 to +2.62 ‰ (Doi et al. 2017): centred near 0, wider
            assert abs(g["mu"]) <= 0.05 and g["sigma"] > default["sigma"], name


# ---------------------------------------------------------------- values against published ones

PUBLISHED = [
    # preset, key, low, high, source of the range
    ("otariid_female", "growth.whisker.mm_per_day", 0.05, 0.17, "Hirons et al. 2001"),
    ("otariid_female", "tissues.plasma.disc_d15N", 5.2, 5.2, "Kurle 2002"),
    ("otariid_female", "tissues.plasma.disc_d13C", 1.0, 1.0, "Kurle 2002"),
    ("otariid_female", "tissues.rbc.disc_d15N", 4.1, 4.1, "Kurle 2002"),
    ("otariid_female", "tissues.rbc.disc_d13C", 1.3, 1.3, "Kurle 2002"),
    ("otariid_female", "tissues.whisker.disc_d13C", 2.0, 3.2, "Hobson et al. 1996"),
    ("phocid_fast", "tissues.whisker.disc_d13C", 2.0, 3.2, "Hobson et al. 1996"),
    ("herbivore_hair", "tissues.hair.disc_d13C", 2.7, 3.5, "Sponheimer et al. 2003"),
    # wild muskox 78 mm/yr (Hee et al. 2024) to domestic horse tail hair 1 cm in 13 d
    ("herbivore_hair", "growth.hair.mm_per_day", 78 / 365, 10 / 13, "Burnik Šturm et al. 2015"),
    ("omnivore_hair", "tissues.hair.disc_d15N", 5.0, 5.3, "O'Connell et al. 2012"),
    ("omnivore_hair", "growth.hair.mm_per_day", 0.35, 0.37, "Barth 1986"),
    # feathers grow up to several mm a day; the 3 mm/d default is from memory
    ("seabird_fast", "growth.feather.mm_per_day", 1.0, 10.0, "Jenni et al. 2020"),
]


@pytest.mark.parametrize(("name", "key", "low", "high", "cited"), PUBLISHED)
def test_preset_values_lie_in_the_published_ranges(name, key, low, high, cited):
    v = next(v for v in load_preset(name).values if v.key == key)
    assert low - 1e-9 <= v.value <= high + 1e-9  # the range published by `cited`
    author, year = cited.rsplit(" ", 1)
    assert author in v.source and year in v.source  # the value names that source


def _blood_enrichment(name: str, days: float, half_life: float) -> float:
    """δ15N enrichment a blood tissue shows ``days`` into a fast, through the model's kernel."""
    pr = resolve_priors(study_settings(name)["priors"])
    kappa = math.exp(pr["kappa_log_mean"]["mu"])
    tau = math.exp(pr["tau_rec_log_mean"]["mu"])
    rate = math.log(2.0) / half_life
    return float(enrichment_incorporated(np.array(days), 0.0, days, kappa, tau, rate))


def test_seabird_enrichment_rate_reproduces_the_penguin_fast():
    tissues = resolve_tissues(study_settings("seabird_fast")["tissues"])
    plasma = _blood_enrichment("seabird_fast", 25.0, tissues["plasma"].half_life_days)
    cells = _blood_enrichment("seabird_fast", 25.0, tissues["rbc"].half_life_days)
    # 25-day fast: plasma δ15N +0.70 ‰, blood cells +0.24 ‰ (Cherel et al. 2005)
    assert plasma == pytest.approx(0.70, abs=0.05)
    assert cells == pytest.approx(0.24, abs=0.05)


def test_phocid_enrichment_rate_gives_the_small_red_cell_change():
    tissues = resolve_tissues(study_settings("phocid_fast")["tissues"])
    hl = tissues["rbc"].half_life_days
    # red cells between days 5 and 22 of the lactation fast (sampling days of Habran et al.
    # 2010): Δ15N 0.05 ‰ in grey seals, 0.1 ‰ in northern elephant seals (Habran et al. 2019)
    change = _blood_enrichment("phocid_fast", 22.0, hl) - _blood_enrichment("phocid_fast", 5.0, hl)
    assert 0.05 <= change <= 0.10


def test_phocid_whisker_growth_curve_starts_at_the_published_rate():
    t = resolve_tissues(study_settings("phocid_fast")["tissues"])["whisker"]
    g = make_growth(t.growth_model, t.growth_mm_per_day, t.growth_params)
    # fast early growth up to 1.4 mm/d (Beltran et al. 2015; McHuron et al. 2016)
    assert g.rate_at_root(0.0) == pytest.approx(1.4, abs=0.05)
    assert g.rate_at_root(0.0) == pytest.approx(t.growth_mm_per_day, rel=0.02)
    # K ≈ 0.03 /d (derived from McHuron et al. 2016, science.md)
    assert t.growth_params["k_per_day"] == pytest.approx(0.03, abs=0.005)
    # L(a) = L∞(1 − e^(−Ka)) (von Bertalanffy 1938, from memory): a whisker of length
    # L∞(1 − e^(−48K)) grew in 48 d, so its tip is 48 d old
    length = 48.0 * (1 - math.exp(-0.029 * 48))
    assert float(g.days_before(length, total_mm=length)) == pytest.approx(48.0, rel=1e-6)


# ---------------------------------------------------------------- precedence


def test_each_layer_beats_the_one_below(folder):
    key = "tissues.whisker.growth_mm_per_day"
    default = resolve_tissues(None)["whisker"].growth_mm_per_day  # package default
    preset = load_workflow(workflow(folder, top='preset = "phocid_fast"\n'))
    assert preset.fit.tissues["whisker"]["growth_mm_per_day"] == 1.4 != default
    # the workflow file spells the same setting the other way ([tissues] rather than [growth])
    path = workflow(
        folder, "[tissues.whisker]\ngrowth_mm_per_day = 1.2\n", 'preset = "phocid_fast"\n'
    )
    wf = load_workflow(path)
    assert wf.fit.tissues["whisker"]["growth_mm_per_day"] == 1.2
    rec = used(wf.fit.preset, "growth.whisker.mm_per_day")
    assert (rec["overridden"], rec["overridden_by"], rec["used"]) == (True, "workflow file", 1.2)
    cli = load_workflow(path, overrides=parse_assignments(["growth.whisker.mm_per_day=1.1"]))
    assert cli.fit.tissues["whisker"]["growth_mm_per_day"] == 1.1
    rec = used(cli.fit.preset, "growth.whisker.mm_per_day")
    assert (rec["overridden_by"], rec["used"]) == ("command line", 1.1)
    assert _canonical("growth.Whisker.mm_per_day") == key


def test_priors_layer_field_by_field(folder):
    path = workflow(folder, "[priors.gamma]\nmu = 0.2\n", 'preset = "seabird_fast"\n')
    wf = load_workflow(path)
    gamma = resolve_priors(wf.fit.priors)["gamma"]
    assert gamma["mu"] == 0.2  # the file's
    assert gamma["sigma"] == 0.4 != PRIORS["gamma"]["sigma"]  # the preset's, not the default
    assert used(wf.fit.preset, "priors.gamma.sigma")["overridden"] is False
    assert used(wf.fit.preset, "priors.gamma.mu")["overridden_by"] == "workflow file"


def test_command_line_preset_replaces_the_files(folder):
    path = workflow(folder, top='preset = "seabird_fast"\n')
    wf = load_workflow(path, overrides={"preset": "herbivore_hair"})
    assert wf.fit.preset["name"] == "herbivore_hair"
    assert resolve_priors(wf.fit.priors)["gamma"]["sigma"] == 0.5


def test_growth_params_merge_key_by_key(folder):
    path = workflow(
        folder, "[growth.whisker]\nparams = { l_inf_mm = 90.0 }\n", 'preset = "phocid_fast"\n'
    )
    wf = load_workflow(path)
    assert wf.fit.tissues["whisker"]["growth_params"] == {"l_inf_mm": 90.0, "k_per_day": 0.029}
    rec = used(wf.fit.preset, "growth.whisker.params")
    assert rec["used"] == {"l_inf_mm": 90.0, "k_per_day": 0.029} and rec["overridden"]


def test_the_report_sources_of_a_tissue_name_the_preset(folder):
    wf = load_workflow(workflow(folder, top='preset = "otariid_female"\n'))
    sources = resolve_tissues(wf.fit.tissues)["plasma"].sources
    assert sources["disc"].startswith("preset otariid_female:") and "Kurle 2002" in sources["disc"]


@pytest.mark.parametrize(
    ("top", "text", "expected"),
    [
        ('preset = "otarid_female"\n', "", "key 'preset': unknown preset 'otarid_female'; did you"),
        ("preset = 3\n", "", "key 'preset': expected text"),
        ("", '[sampler]\npreset = "phocid_fast"\n', "preset is named at the top of the file"),
        ('preset = "phocid_fast"\n', "[priors.gama]\nmu = 0.0\n", "did you mean 'gamma'"),
        ('preset = "phocid_fast"\n', "[priors.gamma]\nsigma = 0.0\n", "expected a value > 0"),
    ],
)
def test_bad_preset_settings_name_the_file_and_key(folder, top, text, expected):
    with pytest.raises(ConfigError, match=expected) as info:
        load_workflow(workflow(folder, text, top))
    assert "wf.toml" in str(info.value)


def test_set_parses_toml_values_and_refuses_other_sections():
    got = parse_assignments(
        ["priors.gamma.mu=0.1", "qc.lipid.plasma=none", "growth.whisker.params={ l_inf_mm = 80 }"]
    )
    assert got == {
        "priors": {"gamma": {"mu": 0.1}},
        "qc": {"lipid": {"plasma": "none"}},
        "growth": {"whisker": {"params": {"l_inf_mm": 80}}},
    }
    with pytest.raises(ConfigError, match="did you mean 'priors'"):
        parse_assignments(["prior.gamma.mu=0"])
    with pytest.raises(ConfigError, match="SECTION.KEY=VALUE"):
        parse_assignments(["gamma=0"])


# ---------------------------------------------------------------- hash and manifest


def test_the_preset_is_hashed_with_the_results(folder):
    def digest(path, **kw):
        wf = load_workflow(path, **kw)
        return config_hash([{"sha256": "0"}], wf.result_config())

    a = workflow(folder, top='preset = "seabird_fast"\n', name="a.toml")
    b = workflow(folder, top='preset = "seabird_fast"\n', name="b.toml")
    none = workflow(folder, name="none.toml")
    other = workflow(folder, top='preset = "phocid_fast"\n', name="other.toml")
    assert digest(a) == digest(b)
    assert len({digest(a), digest(none), digest(other)}) == 3
    assert digest(a) != digest(a, overrides={"priors": {"gamma": {"mu": 0.0}}})
    fit = load_workflow(a).result_config()["fit"]
    assert fit["preset"]["name"] == "seabird_fast"
    assert {"key", "value", "source", "overridden", "used"} <= set(fit["preset"]["values"][0])
    assert "description" not in fit["preset"]  # prose does not change results
    assert "preset" not in load_workflow(none).result_config()["fit"]


def _stub_fit(tables, out, config, log=None):
    """A constructed unit with the hash ``fit_tables`` would record (no MCMC)."""
    make_fit_dir(Path(out))
    m = json.loads((Path(out) / "manifest.json").read_text())
    m["input_hash"] = config_hash(
        [{"sha256": pipeline.sha256_file(t)} for t in tables], config.result_config()
    )
    m["config"] = config.result_config()
    (Path(out) / "manifest.json").write_text(json.dumps(m))
    return m


def test_the_run_manifest_records_the_preset_and_a_new_preset_refits(folder, monkeypatch):
    from nstress.products import report

    calls = []
    monkeypatch.setattr(pipeline, "fit_tables", lambda *a, **k: calls.append(1) or _stub_fit(*a))
    monkeypatch.setattr(report, "write_report", lambda d, o, t=None: Path(o) / "report.html")
    path = workflow(
        folder,
        '[priors.gamma]\nmu = 0.0\n[units]\nsplit = "table"\n[outputs]\nrun_dir = "run"\n'
        "[execution]\nworkers = 0\n",
        'preset = "seabird_fast"\n',
    )
    assert main(["run", str(path), "--quiet"]) == 0
    m = json.loads((folder / "run" / "manifest.json").read_text())
    assert m["preset"]["name"] == "seabird_fast" and m["preset"]["cautions"]
    assert m["config"]["fit"]["preset"]["name"] == "seabird_fast"
    rec = used(m["preset"], "priors.gamma.mu")
    assert rec["source"] and rec["overridden_by"] == "workflow file" and rec["used"] == 0.0
    assert main(["run", str(path), "--quiet"]) == 0 and len(calls) == 1  # same: skipped
    assert main(["run", str(path), "--quiet", "--preset", "phocid_fast"]) == 0
    assert len(calls) == 2  # another preset: refitted


# ---------------------------------------------------------------- commands


def test_presets_lists_and_shows_every_value_with_its_source(capsys):
    assert main(["presets"]) == 0
    out = capsys.readouterr().out
    assert all(name in out for name in PRESETS)
    assert main(["presets", "phocid_fast"]) == 0
    out = capsys.readouterr().out
    p = load_preset("phocid_fast")
    assert out.strip() == describe(p).strip()
    for v in p.values:
        assert f"  {v.key} = " in out
    assert "Habran et al. 2019" in out and "caution:" in out
    assert main(["presets", "phocid"]) == 2
    assert "did you mean 'phocid_fast'" in capsys.readouterr().err
    assert main(["presets", "--help"]) == 0
    out = capsys.readouterr().out
    assert "examples:" in out and "exit codes:" in out


def test_fit_takes_a_preset_and_set(folder, monkeypatch):
    seen = {}

    def fake(tables, out, config, log=None):
        seen["config"] = config
        return {"diagnostics": {"ok": True, "reasons": []}}

    monkeypatch.setattr(pipeline, "fit_tables", fake)
    args = ["fit", str(folder / "colony.csv"), "--out", str(folder / "o"), "--quiet"]
    assert main([*args, "--preset", "seabird_fast", "--set", "priors.gamma.mu=0.1"]) == 0
    cfg = seen["config"]
    assert cfg.preset["name"] == "seabird_fast"
    assert resolve_priors(cfg.priors)["gamma"] == {**PRIORS["gamma"], "mu": 0.1, "sigma": 0.4}
    assert used(cfg.preset, "priors.gamma.mu")["overridden_by"] == "command line"


@pytest.mark.parametrize(
    ("extra", "expected"),
    [
        (["--preset", "seabird"], "did you mean 'seabird_fast'"),
        (["--set", "priors.gama.mu=0"], "did you mean 'gamma'"),
        (["--set", "sampler.draws=3"], "--set changes priors"),
        (["--preset", "phocid_fast", "--set", "growth.whisker.mm_per_day=-1"], "> 0"),
    ],
)
def test_fit_refuses_a_bad_preset_or_setting_and_writes_nothing(folder, capsys, extra, expected):
    out = folder / "o"
    assert main(["fit", str(folder / "colony.csv"), "--out", str(out), *extra]) == 2
    err = capsys.readouterr().err
    assert expected in err and "Traceback" not in err
    assert not out.exists()


def test_run_and_demo_take_a_preset(folder, monkeypatch, capsys):
    from nstress.workflow import run as run_module

    seen = []

    def fake_run(wf, **kwargs):
        seen.append(wf)
        manifest = {"units": [], "failed_units": [], "diagnostics_failed_units": []}
        return run_module.RunOutcome(0, manifest, Path(kwargs["out"] or wf.run_dir))

    monkeypatch.setattr(run_module, "run_workflow", fake_run)
    path = workflow(folder, top='preset = "seabird_fast"\n')
    assert main(["run", str(path), "--quiet", "--set", "priors.gamma.sigma=0.6"]) == 0
    assert seen[-1].fit.preset["name"] == "seabird_fast"
    assert resolve_priors(seen[-1].fit.priors)["gamma"]["sigma"] == 0.6
    assert main(["demo", "--out", str(folder / "d"), "--quiet", "--preset", "otariid_female"]) == 0
    assert seen[-1].fit.preset["name"] == "otariid_female"
    assert main(["run", str(path), "--preset", "nope"]) == 2
    assert "unknown preset 'nope'" in capsys.readouterr().err
    assert len(seen) == 2 and not (folder / "runs").exists()


def test_init_writes_a_workflow_that_starts_from_the_preset(folder, capsys):
    dest = folder / "seals.toml"
    assert (
        main(["init", str(folder / "colony.csv"), "-o", str(dest), "--preset", "phocid_fast"]) == 0
    )
    text = dest.read_text()
    assert text.count('preset = "phocid_fast"') == 1
    assert '#   growth.whisker.model = "von_bertalanffy"' in text
    assert load_workflow(dest).fit.preset["name"] == "phocid_fast"
    bad = folder / "bad.toml"
    assert main(["init", str(folder / "colony.csv"), "-o", str(bad), "--preset", "phocd"]) == 2
    assert "did you mean 'phocid_fast'" in capsys.readouterr().err
    assert not bad.exists()


def test_example_workflow_starts_from_a_preset_and_replaces_one_value():
    wf = load_workflow(ROOT / "workflows" / "otariid_preset.toml")
    assert wf.fit.preset["name"] == "otariid_female"
    assert "synthetic" in (ROOT / "workflows" / "otariid_preset.toml").read_text().lower()
    rec = used(wf.fit.preset, "priors.duration_log_mean.mu")
    assert rec["overridden_by"] == "workflow file" and rec["used"] == 3.4
    assert resolve_priors(wf.fit.priors)["duration_log_mean"]["sigma"] == 0.6  # the preset's
    assert wf.fit.tissues["whisker"]["growth_mm_per_day"] == 0.10


# ---------------------------------------------------------------- report


def test_report_prints_the_starting_values(folder):
    fit = make_fit_dir(folder / "unit")
    path = workflow(folder, "[priors.gamma]\nmu = 0.0\n", 'preset = "seabird_fast"\n')
    record = load_workflow(path).fit.preset
    m = json.loads((fit / "manifest.json").read_text())
    m["preset"] = record
    (fit / "manifest.json").write_text(json.dumps(m))
    page = write_report([fit], folder / "out").read_text(encoding="utf-8")
    start = page.index('<section id="starting-values">')
    section = page[start : page.index("</section>", start)]
    assert "Preset <code>seabird_fast</code>" in section
    for v in record["values"]:
        assert v["key"] in section
    assert "Cherel et al. 2005" in section and "Jenni et al. 2020" in section
    assert "0.0 (set by the workflow file)" in section
    assert section.count("preset value</td>") == len(record["values"]) - 1
    assert "1 of them were replaced" in section
    assert '<a href="#starting-values">' in page
    refs = page[page.index('id="references"') :]
    assert "Jenni et al. 2020" in refs  # a preset's citation reaches the references


def test_report_without_a_preset_says_so(folder):
    fit = make_fit_dir(folder / "unit")
    page = write_report([fit], folder / "out").read_text(encoding="utf-8")
    assert "No natural-history preset" in page

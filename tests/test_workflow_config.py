"""Workflow files: schema validation (messages matched by text), examples, init and render.

No MCMC here: render uses constructed fit directories (``fitdir_factory``).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from fitdir_factory import make_fit_dir

from nstress.errors import ConfigError
from nstress.tissues import Tissue
from nstress.workflow.cli import main
from nstress.workflow.config import _tissue_fields, load_workflow
from nstress.workflow.run import plan_threads, plan_units, render_run, safe_dirname, unit_seed

ROOT = Path(__file__).resolve().parents[1]
TABLE = (
    "individual,tissue,d15N,d13C,date,group\n"
    "A1,plasma,12.0,-17.0,2024-01-05,north\n"
    "A1,plasma,12.4,-17.1,2024-01-12,north\n"
    "B1,plasma,11.8,-16.9,2024-01-05,south\n"
)


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "colony.csv").write_text(TABLE)
    return tmp_path


def write(folder: Path, text: str, name: str = "wf.toml") -> Path:
    path = folder / name
    path.write_text('[inputs]\ntables = ["data/colony.csv"]\n' + text)
    return path


def error_of(path: Path) -> str:
    with pytest.raises(ConfigError) as info:
        load_workflow(path)
    return str(info.value)


def test_minimal_workflow_resolves_inputs_and_defaults(folder):
    wf = load_workflow(write(folder, ""))
    assert wf.tables == [(folder / "data" / "colony.csv").resolve()]
    assert wf.split == "group" and wf.seed == 1
    assert wf.run_dir == (folder / "runs" / "wf").resolve()
    assert wf.fit.sampler["draws"] == 1000 and wf.fit.sampler["chains"] == 2


def test_unknown_key_gets_a_did_you_mean_hint(folder):
    msg = error_of(write(folder, "[sampler]\ndraw = 10\n"))
    assert "key 'sampler.draw'" in msg and "did you mean 'draws'?" in msg
    assert "wf.toml" in msg


def test_unknown_section_gets_a_hint(folder):
    msg = error_of(write(folder, "[samplers]\ndraws = 10\n"))
    assert "unknown section [samplers]" in msg and "did you mean 'sampler'?" in msg


def test_unknown_prior_and_tissue_field_get_hints(folder):
    msg = error_of(write(folder, "[priors.kappa_log_men]\nmu = -3.0\n"))
    assert "key 'priors.kappa_log_men'" in msg and "did you mean 'kappa_log_mean'?" in msg
    msg = error_of(write(folder, "[tissues.whisker]\ngrowth_mm_per_dya = 0.1\n"))
    assert "key 'tissues.whisker.growth_mm_per_dya'" in msg
    assert "did you mean 'growth_mm_per_day'?" in msg
    msg = error_of(write(folder, "[qc]\ncn_tolerence = 0.1\n"))
    assert "key 'qc.cn_tolerence'" in msg and "did you mean 'cn_tolerance'?" in msg


def test_wrong_type_names_the_dotted_key(folder):
    msg = error_of(write(folder, '[sampler]\ndraws = "100"\n'))
    assert "key 'sampler.draws'" in msg and "expected an integer, got text ('100')" in msg
    msg = error_of(write(folder, "[tissues.whisker]\ncn_range = [2.9]\n"))
    assert "key 'tissues.whisker.cn_range'" in msg and "two numbers" in msg
    msg = error_of(write(folder, '[growth.whisker]\nmm_per_day = "fast"\n'))
    assert "key 'growth.whisker.mm_per_day'" in msg and "expected a number" in msg
    msg = error_of(write(folder, "[execution]\nworkers = true\n"))
    assert "key 'execution.workers'" in msg and "expected an integer, got true/false" in msg


def test_missing_input_names_the_resolved_path(folder):
    path = folder / "wf.toml"
    path.write_text('[inputs]\ntables = ["data/nothere.csv"]\n')
    msg = error_of(path)
    assert f"input file not found: {(folder / 'data' / 'nothere.csv').resolve()}" in msg
    path.write_text('[inputs]\ntables = ["data/colony.csv", "more/*.csv"]\n')
    msg = error_of(path)
    assert "key 'inputs.tables[1]'" in msg
    assert f"no file matches {(folder / 'more' / '*.csv').resolve()}" in msg


def test_globs_are_sorted_and_deduplicated(folder):
    (folder / "data" / "b.csv").write_text(TABLE.replace("A1", "C1"))
    path = folder / "wf.toml"
    path.write_text('[inputs]\ntables = ["data/*.csv", "data/b.csv"]\n')
    wf = load_workflow(path)
    assert [t.name for t in wf.tables] == ["b.csv", "colony.csv"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ('[outputs]\nrun_dir = "../elsewhere"\n', "is not inside the workflow's directory"),
        ('[outputs]\nrun_dir = "/tmp/nstress-outside"\n', "is not inside the workflow's directory"),
        ('[outputs]\nrun_dir = "."\n', "is not inside the workflow's directory"),
        ("[sampler]\ndraws = -5\n", "key 'sampler.draws': expected a value >= 1, got -5"),
        ("[sampler]\ntune = -1\n", "key 'sampler.tune': expected a value >= 0, got -1"),
        ("[grid]\nbin_days = inf\n", "key 'grid.bin_days': expected a finite number, got inf"),
        ("[priors.gamma]\nmu = nan\n", "key 'priors.gamma.mu': expected a finite number, got nan"),
        ("[grid]\nbin_days = 0\n", "key 'grid.bin_days': expected a value > 0, got 0"),
        ("[sampler]\ntarget_accept = 1.5\n", "expected a value <= 1, got 1.5"),
        ('[units]\nsplit = "grop"\n', "did you mean 'group'?"),
        (
            '[execution]\nscheduler = "tcp://x:1"\nlocal_cluster = 2\n',
            "either scheduler or local_cluster",
        ),
        ("[growth.plasma]\nmm_per_day = 0.1\n", "growth applies to keratin only"),
        ("[tissues.scute]\ndisc_d15N = 2.0\n", "a new tissue needs klass"),
        ("[workflow]\nversion = 9\n", "schema version 9 is newer"),
    ],
)
def test_unsafe_or_invalid_values_are_rejected(folder, text, expected):
    assert expected in error_of(write(folder, text))


def test_cli_reports_config_errors_with_exit_2(folder, capsys):
    path = write(folder, "[sampler]\nseeed = 3\n")
    assert main(["run", str(path)]) == 2
    err = capsys.readouterr().err
    assert "nstress: error:" in err and "did you mean 'seed'?" in err
    assert "Traceback" not in err
    assert not (folder / "runs").exists()


def test_not_toml_is_a_config_error(folder):
    path = folder / "wf.toml"
    path.write_text("[inputs\ntables = 3\n")
    assert "not a valid TOML file" in error_of(path)


def test_tissue_schema_covers_every_tissue_field():
    assert set(_tissue_fields()) == set(Tissue.__dataclass_fields__) - {"name"}


def test_execution_settings_do_not_change_the_result_hash(folder):
    a = load_workflow(write(folder, "[sampler]\nseed = 3\n"))
    b = load_workflow(
        write(
            folder,
            '[sampler]\nseed = 3\n[execution]\nworkers = 3\nbackend = "numba"\n'
            '[outputs]\nrun_dir = "other"\n',
            "b.toml",
        )
    )
    c = load_workflow(write(folder, "[sampler]\nseed = 4\n", "c.toml"))
    assert a.result_config() == b.result_config()
    assert a.result_config() != c.result_config()


@pytest.mark.parametrize("path", sorted((ROOT / "workflows").glob("*.toml")), ids=lambda p: p.name)
def test_every_example_workflow_validates(path):
    wf = load_workflow(path)
    assert wf.tables and all(t.is_file() for t in wf.tables)
    assert wf.run_dir.is_relative_to(path.parent.resolve())


def test_demo_workflow_keeps_the_demo_defaults():
    wf = load_workflow(ROOT / "workflows" / "demo.toml")
    assert wf.tables == [(ROOT / "demo_data" / "colony_samples.csv").resolve()]
    s = wf.fit.sampler
    assert (s["draws"], s["tune"], s["chains"]) == (1000, 1000, 2)
    assert wf.split == "table"
    # the demo also reports what its own sampling design can detect (power step)
    assert wf.design is not None and wf.design.get("for_data", True)


def test_unit_seeds_depend_on_name_not_order(folder):
    wf = load_workflow(write(folder, "[sampler]\nseed = 11\n"))
    units = plan_units(wf, ["north", "south"])
    again = plan_units(wf, ["south", "north"])
    assert {u.name: u.seed for u in units} == {u.name: u.seed for u in again}
    assert units[0].seed != units[1].seed
    assert unit_seed(11, "north") != unit_seed(12, "north")


def test_unit_directories_cannot_escape_the_run_directory():
    used: set[str] = set()
    names = [safe_dirname(n, used) for n in ("../../etc", "a/b", "..", "A B", "a_b")]
    assert names == ["etc", "a_b", "unit", "A_B-2", "a_b-3"]  # case-insensitive file systems


def test_threads_are_capped_so_workers_times_chains_fit_the_cores():
    assert plan_threads(None, None, chains=2, n_jobs=5, cpus=2) == (1, 2)
    assert plan_threads(None, None, chains=1, n_jobs=5, cpus=4) == (4, 1)
    assert plan_threads(None, None, chains=2, n_jobs=1, cpus=8) == (1, 8)
    assert plan_threads(0, None, chains=2, n_jobs=3, cpus=2) == (0, 2)


def test_init_writes_a_valid_starter_workflow(folder, capsys):
    dest = folder / "study" / "season.toml"
    dest.parent.mkdir()
    assert main(["init", str(folder / "data" / "colony.csv"), "-o", str(dest)]) == 0
    text = dest.read_text()
    assert 'tables = ["../data/colony.csv"]' in text
    assert 'groups found: "north", "south"' in text
    wf = load_workflow(dest)
    assert wf.tables == [(folder / "data" / "colony.csv").resolve()]
    assert wf.run_dir == (dest.parent / "runs" / "season").resolve()
    assert main(["init", str(folder / "data" / "colony.csv"), "-o", str(dest)]) == 2
    assert "--force" in capsys.readouterr().err


def test_init_rejects_a_bad_table(folder, capsys):
    bad = folder / "bad.csv"
    bad.write_text("individual,tissue,d15N,d13C,date\nA1,plasma,abc,-17.0,2024-01-05\n")
    assert main(["init", str(bad), "-o", str(folder / "w.toml")]) == 2
    assert "row 1" in capsys.readouterr().err
    assert not (folder / "w.toml").exists()


def test_render_rerenders_a_run_without_refitting(tmp_path, capsys):
    run = tmp_path / "run"
    make_fit_dir(run / "units" / "north", seed=1)
    make_fit_dir(run / "units" / "south", seed=2)
    (run / "units" / "unfinished").mkdir()
    manifest = {
        "kind": "run",
        "workflow": {"title": "Synthetic run"},
        "units": [{"dir": "units/north"}, {"dir": "units/south"}, {"dir": "units/unfinished"}],
    }
    (run / "manifest.json").write_text(json.dumps(manifest))
    before = {p: p.stat().st_mtime_ns for p in (run / "units").rglob("*") if p.is_file()}
    assert main(["render", str(run)]) == 0
    html = (run / "report.html").read_text()
    assert "Synthetic run" in html and "north" in html and "south" in html
    after = {p: p.stat().st_mtime_ns for p in (run / "units").rglob("*") if p.is_file()}
    assert before == after  # nothing in the units was touched
    assert "report.html" in capsys.readouterr().err


def test_render_a_fit_directory_and_reject_an_empty_one(tmp_path, capsys):
    fit = make_fit_dir(tmp_path / "fit")
    shutil.rmtree(fit / "figures", ignore_errors=True)
    assert render_run(fit) == fit / "report.html"
    (tmp_path / "empty").mkdir()
    assert main(["render", str(tmp_path / "empty")]) == 2
    assert "no finished fit here" in capsys.readouterr().err


def test_every_command_has_help_with_examples_and_exit_codes(capsys):
    for cmd in ("check", "fit", "run", "demo", "init", "render"):
        assert main([cmd, "--help"]) == 0
        out = capsys.readouterr().out
        assert "examples:" in out
        assert "exit code" in out.lower()


def test_demo_runs_the_demo_workflow_with_command_line_overrides(monkeypatch, tmp_path):
    from nstress.workflow import run as run_module

    seen = {}

    def fake_run(wf, **kwargs):
        seen["wf"], seen["kwargs"] = wf, kwargs
        manifest = {"units": [], "failed_units": [], "diagnostics_failed_units": []}
        return run_module.RunOutcome(0, manifest, Path(kwargs["out"]))

    monkeypatch.setattr(run_module, "run_workflow", fake_run)
    out = tmp_path / "demo_run"
    assert main(["demo", "--out", str(out), "--draws", "200", "--tune", "150", "--quiet"]) == 0
    wf = seen["wf"]
    assert wf.path == ROOT / "workflows" / "demo.toml"
    assert (wf.fit.sampler["draws"], wf.fit.sampler["tune"], wf.fit.sampler["chains"]) == (
        200,
        150,
        2,
    )
    assert seen["kwargs"]["out"] == out
    assert main(["demo", "--out", str(out)]) == 0
    assert seen["wf"].fit.sampler["draws"] == 1000


def test_demo_rejects_a_bad_override(capsys):
    assert main(["demo", "--draws", "0"]) == 2
    assert "key 'sampler.draws': expected a value >= 1, got 0" in capsys.readouterr().err


def test_table_units_are_named_after_their_files(folder):
    (folder / "data" / "second.csv").write_text(TABLE.replace("A1", "C1"))
    path = folder / "wf.toml"
    path.write_text(
        '[inputs]\ntables = ["data/colony.csv", "data/second.csv"]\n[units]\nsplit = "table"\n'
    )
    units = plan_units(load_workflow(path), ["north", "south"])
    assert [(u.name, u.group, len(u.tables)) for u in units] == [
        ("colony", None, 1),
        ("second", None, 1),
    ]


def test_bad_execution_options_exit_2(folder, capsys):
    path = write(folder, "")
    assert main(["run", str(path), "--workers", "-1"]) == 2
    assert "--workers must be at least 0" in capsys.readouterr().err
    assert main(["run", str(path), "--local-cluster", "0"]) == 2
    assert "--local-cluster must be at least 1" in capsys.readouterr().err

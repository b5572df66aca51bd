"""Run orchestration without MCMC: the unit fit is replaced by a constructed fit directory.

The report is stubbed too (``tests/test_report.py`` covers it). Checks that a
failing unit is reported and does not stop the others, that the merged
products and the run manifest are written, and that a rerun skips finished
units and refits the failed one.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from fitdir_factory import make_fit_dir

from nstress.errors import FitError
from nstress.products import report
from nstress.workflow import pipeline
from nstress.workflow.cli import main
from nstress.workflow.pipeline import config_hash, sha256_file

TABLE = (
    "individual,tissue,d15N,d13C,date,group\n"
    "A1,plasma,12.0,-17.0,2024-01-05,north\n"
    "A1,plasma,12.4,-17.1,2024-01-12,north\n"
    "B1,plasma,11.8,-16.9,2024-01-05,south\n"
    "B1,plasma,11.9,-16.8,2024-01-12,south\n"
)


@pytest.fixture
def workflow(tmp_path: Path) -> Path:
    (tmp_path / "colony.csv").write_text(TABLE)
    path = tmp_path / "wf.toml"
    path.write_text(
        '[inputs]\ntables = ["colony.csv"]\n[sampler]\nseed = 3\n'
        '[outputs]\nrun_dir = "run"\n[execution]\nworkers = 0\n'
    )
    return path


@pytest.fixture
def fake_fit(monkeypatch):
    calls: list[str] = []
    failing = {"south"}

    def fit_tables(tables, out, config, log=None):
        calls.append(config.group)
        if config.group in failing:
            raise FitError("the sampler failed (constructed failure)")
        make_fit_dir(Path(out), seed=len(calls))
        m = json.loads((Path(out) / "manifest.json").read_text())
        m["input_hash"] = config_hash(
            [{"sha256": sha256_file(t)} for t in tables], config.result_config()
        )
        m["seed"] = config.sampler["seed"]
        (Path(out) / "manifest.json").write_text(json.dumps(m))
        return m

    def write_report(fit_dirs, out_dir, title=None):  # the report is tested on its own
        path = Path(out_dir) / "report.html"
        path.write_text("units: " + ", ".join(Path(d).name for d in fit_dirs))
        return path

    monkeypatch.setattr(pipeline, "fit_tables", fit_tables)
    monkeypatch.setattr(report, "write_report", write_report)
    return calls, failing


def test_failing_unit_is_named_the_others_finish_and_a_rerun_resumes(workflow, fake_fit, capsys):
    calls, failing = fake_fit
    run = workflow.parent / "run"
    assert main(["run", str(workflow)]) == 1
    err = capsys.readouterr().err
    assert "unit south failed: the sampler failed (constructed failure)" in err
    assert "unit(s) failed: south" in err
    assert sorted(calls) == ["north", "south"]
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["failed_units"] == ["south"] and manifest["complete"] is False
    status = {u["name"]: u["status"] for u in manifest["units"]}
    assert status == {"north": "fitted", "south": "failed"}
    assert (run / "report.html").read_text() == "units: north"
    merged = pd.read_csv(run / "screening.csv")
    assert set(merged["unit"]) == {"north"}
    ledger = pd.read_csv(run / "ledger.csv")
    assert len(ledger) == 4  # the whole input, every row
    north_mark = run / "units" / "north" / "manifest.json"
    stamp = north_mark.stat().st_mtime_ns

    failing.clear()
    calls.clear()
    assert main(["run", str(workflow)]) == 0
    err = capsys.readouterr().err
    assert "skipping unit north: finished, inputs and settings unchanged" in err
    assert calls == ["south"]
    assert north_mark.stat().st_mtime_ns == stamp
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["complete"] is True and manifest["failed_units"] == []
    assert {u["name"]: u["status"] for u in manifest["units"]} == {
        "north": "skipped",
        "south": "fitted",
    }
    assert set(pd.read_csv(run / "screening.csv")["unit"]) == {"north", "south"}

    calls.clear()
    assert main(["run", str(workflow), "--force", "--quiet"]) == 0
    assert sorted(calls) == ["north", "south"]
    assert capsys.readouterr().err == ""


def test_changed_settings_refit_but_execution_settings_do_not(workflow, fake_fit, capsys):
    calls, failing = fake_fit
    failing.clear()
    assert main(["run", str(workflow), "--quiet"]) == 0
    calls.clear()
    text = workflow.read_text()
    workflow.write_text(text + 'backend = "numba"\nthreads = 1\n')
    assert main(["run", str(workflow), "--quiet"]) == 0
    assert calls == []  # execution-only changes keep the finished units
    workflow.write_text(text.replace("seed = 3", "seed = 4"))
    assert main(["run", str(workflow), "--quiet"]) == 0
    assert sorted(calls) == ["north", "south"]


def test_run_directory_from_the_command_line_and_the_seeds_in_the_manifest(
    workflow, fake_fit, tmp_path
):
    _, failing = fake_fit
    failing.clear()
    out = tmp_path / "elsewhere"
    assert main(["run", str(workflow), "--out", str(out), "--quiet"]) == 0
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["seed"] == 3
    seeds = {u["name"]: u["seed"] for u in manifest["units"]}
    for name, seed in seeds.items():
        unit = json.loads((out / "units" / name / "manifest.json").read_text())
        assert unit["seed"] == seed
    assert len(set(seeds.values())) == 2
    assert manifest["inputs"][0]["sha256"] == sha256_file(workflow.parent / "colony.csv")
    assert {"check_s", "units_s", "total_s"} <= set(manifest["timings_s"])


def test_model_settings_reach_the_model_spec_and_unknown_ones_are_refused():
    from nstress.errors import ConfigError
    from nstress.workflow.pipeline import FitConfig, model_spec

    spec = model_spec(FitConfig(knot_days=12.0, model={"diet_clock": True, "onset_step_days": 9}))
    assert spec.diet_clock is True and spec.onset_step_days == 9 and spec.knot_days == 12.0
    # a model setting changes results, so it enters the hash; none leaves the hash as before
    assert "model" in FitConfig(model={"diet_clock": True}).result_config()
    assert "model" not in FitConfig().result_config()
    with pytest.raises(ConfigError, match="unknown model setting 'diet_clok'"):
        model_spec(FitConfig(model={"diet_clok": True}))
    with pytest.raises(ConfigError, match="unknown model setting 'knot_days'"):
        model_spec(FitConfig(model={"knot_days": 8.0}))

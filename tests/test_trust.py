"""Trust: no confident status without a sound fit and data that can tell; no code from input.

Statuses are checked on constructed diagnostics and fit directories (no
MCMC, tables synthetic): a fit that fails its diagnostics or its posterior
predictive checks, an animal whose own R-hat fails, and an animal whose
data cannot separate diet from catabolism never get ``catabolic``,
``possible`` or ``clear``, and the reason says why. Then: nothing in nstress
evaluates, unpickles or imports anything named by an input, and names from
input tables cannot place files outside the run directory.
"""

from __future__ import annotations

import ast
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fault_units import install, stub_fit_tables
from fuzz_tally import record

from nstress.intake import read_samples
from nstress.model.diagnose import Diagnostics
from nstress.prep import prepare
from nstress.prep.timebase import build_timebase
from nstress.products.screening import SCREENING_COLUMNS, screening_table
from nstress.workflow.cli import main

ROOT = Path(__file__).resolve().parents[1] / "nstress"


@pytest.fixture
def stubbed(monkeypatch):
    """Stubbed unit fit and report (``fault_units``), restored after the test."""
    from nstress.products import report
    from nstress.workflow import pipeline

    monkeypatch.setattr(pipeline, "fit_tables", pipeline.fit_tables)
    monkeypatch.setattr(report, "write_report", report.write_report)
    install()
    return pipeline


def _timebase(tmp_path: Path, lines: list[str]):
    path = tmp_path / "t.csv"
    path.write_text("individual,tissue,d15N,d13C,date\n" + "\n".join(lines) + "\n")
    intake = read_samples(path)
    prepared = prepare(intake, tissues=intake.tissues)
    return build_timebase(prepared.samples, intake.tissues)


def _episodes(tb, p: list[float]) -> pd.DataFrame:
    added = {"status", "status_reason", "rank", "diagnostics_ok", "approximate"}
    added |= {"n_samples", "n_d13C", "n_tissues", "span_days", "tissues"}
    cols = [c for c in SCREENING_COLUMNS if c not in added]
    ep = pd.DataFrame({c: np.nan for c in cols}, index=range(tb.n_individuals))
    ep["individual"] = list(map(str, tb.individuals))
    ep["group"] = "all"
    ep["p_catabolic_any"] = p
    return ep


def _diag(ok: bool, individual_ok: list[bool], reasons: list[str]) -> Diagnostics:
    n = len(individual_ok)
    return Diagnostics(
        ok=ok,
        reasons=reasons,
        convergence={},
        sampler={},
        ppc={},
        individual_ok=np.asarray(individual_ok),
        individual_rhat=np.ones(n),
    )


def _colony(tmp_path: Path):
    days = pd.date_range("2021-01-05", periods=8, freq="10D")
    lines = [
        f"{a},plasma,{12 + 0.2 * k:.1f},-17.0,{d:%Y-%m-%d}"
        for a in "AB"
        for k, d in enumerate(days)
    ]
    lines += ["T,plasma,12.0,-17.0,2021-01-05", "T,plasma,14.0,-17.0,2021-01-25"]  # two samples
    return _timebase(tmp_path, lines)


@pytest.mark.parametrize("p", [0.99, 0.5, 0.01])
def test_a_fit_that_fails_its_diagnostics_gives_no_confident_status(tmp_path, p):
    tb = _colony(tmp_path)
    reasons = ["R-hat of diet_path is 1.300 (> 1.01)"]
    sc = screening_table(_episodes(tb, [p] * 3), tb, _diag(False, [True] * 3, reasons))
    assert set(sc["status"]) == {"fit_failed"}
    assert sc["status_reason"].str.contains("R-hat of diet_path is 1.300").all()
    assert not sc["diagnostics_ok"].any()
    record("trust", "clear_error")


def test_failed_posterior_predictive_checks_give_no_confident_status(tmp_path):
    tb = _colony(tmp_path)
    ppc = (
        "posterior predictive check of plasma:d15N: 20% of observations inside their 90 % "
        "interval (< 75%)"
    )
    sc = screening_table(_episodes(tb, [0.99, 0.01, 0.99]), tb, _diag(False, [True] * 3, [ppc]))
    assert set(sc["status"]) == {"fit_failed"}
    assert sc["status_reason"].str.contains("posterior predictive check").all()
    record("trust", "clear_error")


def test_an_animal_whose_own_chains_disagree_is_fit_failed_the_others_are_scored(tmp_path):
    tb = _colony(tmp_path)
    sc = screening_table(
        _episodes(tb, [0.99, 0.99, 0.99]), tb, _diag(True, [True, False, True], [])
    )
    st = dict(zip(sc["individual"], sc["status"], strict=True))
    assert st == {"A": "catabolic", "B": "fit_failed", "T": "cannot_tell"}
    record("trust", "result")


def test_data_that_cannot_separate_diet_from_catabolism_is_cannot_tell(tmp_path):
    tb = _colony(tmp_path)
    for p in (0.99, 0.5, 0.01):
        sc = screening_table(_episodes(tb, [p] * 3), tb, _diag(True, [True] * 3, []))
        t = sc.set_index("individual").loc["T"]
        assert t["status"] == "cannot_tell" and "fewer than 4 samples" in t["status_reason"]
    record("trust", "clear_error")


def test_a_unit_that_failed_its_diagnostics_is_fit_failed_in_the_merged_table(
    tmp_path, monkeypatch, stubbed
):
    from fitdir_factory import make_fit_dir

    (tmp_path / "colony.csv").write_text(
        "individual,tissue,d15N,d13C,date,group\n"
        "A1,plasma,12.0,-17.0,2024-01-05,north\nB1,plasma,11.8,-16.9,2024-01-05,south\n"
    )
    wf = tmp_path / "wf.toml"
    wf.write_text(
        '[inputs]\ntables = "colony.csv"\n[outputs]\nrun_dir = "run"\n[execution]\nworkers = 0\n'
    )

    def fit(tables, out, config, log=None):
        m = stub_fit_tables(tables, out, config)
        if config.group == "south":  # its own table still says catabolic: must not survive
            make_fit_dir(Path(out), ok=False)
            bad = json.loads((Path(out) / "manifest.json").read_text())
            m["diagnostics"] = bad["diagnostics"]
            (Path(out) / "manifest.json").write_text(json.dumps(m))
        return m

    monkeypatch.setattr(stubbed, "fit_tables", fit)
    assert main(["run", str(wf), "--quiet"]) == 1
    sc = pd.read_csv(tmp_path / "run" / "screening.csv")
    south = sc[sc["unit"] == "south"]
    assert len(south) and set(south["status"]) == {"fit_failed"}
    assert south["status_reason"].str.contains("R-hat of diet_path").all()
    assert "catabolic" in set(sc.loc[sc["unit"] == "north", "status"])
    m = json.loads((tmp_path / "run" / "manifest.json").read_text())
    assert m["diagnostics_failed_units"] == ["south"]
    record("trust", "clear_error")


# ---------------------------------------------------------------- no code from input

FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__", "execfile", "input"}
FORBIDDEN_MODULES = {"pickle", "cPickle", "dill", "marshal", "shelve", "yaml", "cloudpickle"}
FORBIDDEN_ATTRS = {"read_pickle", "to_pickle", "loads_pickle", "unsafe_load", "full_load"}


def _sources() -> list[Path]:
    return sorted(ROOT.rglob("*.py"))


def violations(source: str, name: str) -> list[str]:
    """Calls, imports and options in ``source`` that could run code named by input."""
    bad = []
    for node in ast.walk(ast.parse(source, filename=name)):
        where = f"{name}:{getattr(node, 'lineno', 0)}"
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            if node.func.id in FORBIDDEN_CALLS:
                bad.append(f"{where} calls {node.func.id}")
        if isinstance(node, ast.Attribute) and node.attr in FORBIDDEN_ATTRS:
            bad.append(f"{where} uses .{node.attr}")
        if isinstance(node, ast.Import | ast.ImportFrom):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else []
            names.append(getattr(node, "module", None) or "")
            bad += [f"{where} imports {n}" for n in names if n.split(".")[0] in FORBIDDEN_MODULES]
        if isinstance(node, ast.keyword) and node.arg == "allow_pickle":
            if not (isinstance(node.value, ast.Constant) and node.value.value is False):
                bad.append(f"{where} allow_pickle")
        if (
            isinstance(node, ast.Call)
            and isinstance(node.func, ast.Attribute)
            and node.func.attr == "import_module"
            and not all(isinstance(a, ast.Constant) for a in node.args)
        ):
            bad.append(f"{where} imports a module named at run time")
    return bad


def test_nothing_in_nstress_evaluates_or_unpickles():
    bad = [v for p in _sources() for v in violations(p.read_text(encoding="utf-8"), p.name)]
    assert len(_sources()) > 30 and not bad, bad
    record("trust", "result")


def test_the_scan_finds_what_it_forbids():
    sample = (
        "import pickle\nimport yaml\nfrom marshal import loads\nx = eval('1')\n"
        "exec('y = 2')\nimport numpy as np\nnp.load('f', allow_pickle=True)\n"
        "import importlib\nimportlib.import_module(name)\nimport pandas as pd\n"
        "pd.read_pickle('f')\nyaml.full_load('a')\n"
    )
    found = violations(sample, "sample.py")
    assert len(found) == 9, found


def test_group_names_cannot_place_files_outside_the_run_directory(tmp_path, stubbed):
    evil = ["../../escape", "/etc/nstress", "..", "~root", "a/../../b", "C:\\x", "ünïcode ☃"]
    lines = [f"A{i},plasma,12.0,-17.0,2024-01-05,{g}" for i, g in enumerate(evil)]
    study = tmp_path / "study"
    study.mkdir()
    (study / "colony.csv").write_text(
        "individual,tissue,d15N,d13C,date,group\n" + "\n".join(lines) + "\n"
    )
    wf = study / "wf.toml"
    wf.write_text(
        '[inputs]\ntables = "colony.csv"\n[outputs]\nrun_dir = "run"\n[execution]\nworkers = 0\n'
    )
    assert main(["run", str(wf), "--quiet"]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study"]
    assert sorted(p.name for p in study.iterdir()) == ["colony.csv", "run", "wf.toml"]
    units = sorted(p.name for p in (study / "run" / "units").iterdir())
    assert len(units) == len(evil)
    for u in (study / "run" / "units").iterdir():
        assert u.resolve().parent == (study / "run" / "units").resolve()
    m = json.loads((study / "run" / "manifest.json").read_text())
    assert sorted(u["name"] for u in m["units"]) == sorted(evil)
    record("trust", "result")

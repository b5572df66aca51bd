"""Fast-mode settings and marks without a fit: config keys, CLI option, report banner."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from fitdir_factory import make_fit_dir

from nstress.errors import ConfigError
from nstress.model.fit import SamplerSettings, resolve_method
from nstress.products.report import APPROXIMATE_BANNER, write_report
from nstress.workflow.cli import build_parser
from nstress.workflow.config import load_workflow

TABLE = "individual,tissue,d15N,d13C,date\nA1,plasma,12.0,-17.0,2024-01-05\n"


def _workflow(tmp_path: Path, sampler: str) -> Path:
    (tmp_path / "colony.csv").write_text(TABLE)
    path = tmp_path / "wf.toml"
    path.write_text(f'[inputs]\ntables = ["colony.csv"]\n[sampler]\n{sampler}\n')
    return path


def test_workflow_method_fast_reaches_the_sampler_settings(tmp_path):
    wf = load_workflow(_workflow(tmp_path, 'method = "fast"\nfast_draws = 50'))
    s = SamplerSettings(**wf.fit.sampler)
    assert s.method == "fast" and s.fast_draws == 50


def test_workflow_without_method_keeps_its_hash_keys(tmp_path):
    wf = load_workflow(_workflow(tmp_path, "draws = 10"))
    assert "method" not in wf.fit.sampler and SamplerSettings(**wf.fit.sampler).method == "nuts"


def test_bad_method_is_refused_with_its_key(tmp_path):
    with pytest.raises(ConfigError, match="sampler.method"):
        load_workflow(_workflow(tmp_path, 'method = "laplace"'))
    with pytest.raises(ConfigError, match="unknown method"):
        resolve_method("quick")


def test_cli_fit_has_fast():
    args = build_parser().parse_args(["fit", "t.csv", "--out", "o", "--fast"])
    assert args.fast is True and args.fast_draws == 200
    assert build_parser().parse_args(["fit", "t.csv", "--out", "o"]).fast is False


def test_report_banner_only_for_approximate_fits(tmp_path):
    nuts = make_fit_dir(tmp_path / "nuts")
    html = write_report([nuts], tmp_path / "r1").read_text()
    assert APPROXIMATE_BANNER not in html
    fast = make_fit_dir(tmp_path / "fast")
    m = json.loads((fast / "manifest.json").read_text())
    m.update({"approximate": True, "method": "fast"})
    m["diagnostics"].update({"method": "fast", "notes": ["R-hat does not apply"]})
    (fast / "manifest.json").write_text(json.dumps(m))
    html = write_report([fast], tmp_path / "r2").read_text()
    assert 'id="approximate-banner"' in html and APPROXIMATE_BANNER in html
    assert "not NUTS diagnostics" in html

"""Stubbed units for the fault tests: constructed fit directories instead of MCMC.

Importable by spawned worker processes and by ``nstress run`` subprocesses
(``python -c "import fault_units; fault_units.main([...])"``), where a
pytest monkeypatch does not reach.
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path
from typing import Any

from fitdir_factory import make_fit_dir

from nstress.workflow.pipeline import FitConfig, config_hash, sha256_file

DIE_ENV = "NSTRESS_TEST_DIE_UNIT"
SLEEP_ENV = "NSTRESS_TEST_UNIT_SLEEP"


def stub_fit_tables(tables: list[Any], out: Any, config: FitConfig, log: Any = None) -> dict:
    """Write a constructed fit directory with the hash ``fit_tables`` would record."""
    out = Path(out)
    make_fit_dir(out, seed=len(str(config.group)))
    m = json.loads((out / "manifest.json").read_text())
    m["input_hash"] = config_hash(
        [{"sha256": sha256_file(t)} for t in tables], config.result_config()
    )
    m["seed"] = config.sampler["seed"]
    m["files"] = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    (out / "manifest.json").write_text(json.dumps(m))
    return m


def stub_report(fit_dirs: list[Any], out_dir: Any, title: str | None = None) -> Path:
    """A one-line report naming the units (the report has its own tests)."""
    path = Path(out_dir) / "report.html"
    path.write_text("units: " + ", ".join(Path(d).name for d in fit_dirs))
    return path


def dying_unit(job: dict[str, Any]) -> dict[str, Any]:
    """A worker's unit that kills its own process when it is the unit named in DIE_ENV."""
    if job["unit"] == os.environ.get(DIE_ENV):
        os._exit(3)  # the worker dies mid-unit: no exception, no result
    stub_fit_tables(job["tables"], job["out"], FitConfig(**job["config"]))
    return {"unit": job["unit"], "status": "fitted", "diagnostics_ok": True, "seconds": 0.0}


def install() -> None:
    """Replace the unit fit and the report in this process."""
    from nstress.products import report
    from nstress.workflow import pipeline

    def slow_fit(tables, out, config, log=None):
        time.sleep(float(os.environ.get(SLEEP_ENV, "0")))
        return stub_fit_tables(tables, out, config, log)

    pipeline.fit_tables = slow_fit
    report.write_report = stub_report


def main(argv: list[str]) -> int:
    """``nstress`` with stubbed units (for subprocess tests)."""
    install()
    from nstress.workflow.cli import main as cli_main

    return cli_main(argv)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

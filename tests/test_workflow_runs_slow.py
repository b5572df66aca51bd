"""Real (tiny) workflow runs: determinism, resume after a kill, and Dask fan-out.

Four synthetic animals in two groups (two units), one chain of 30 + 30 draws
(tree depth capped): the fits fail their diagnostics on purpose, which is
not what is checked here. Each run takes a few minutes on a shared 2-core
machine, hence slow.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation
from nstress.workflow.cli import main

pytest.importorskip("nutpie")
pytestmark = pytest.mark.slow

WORKFLOW = """\
[inputs]
tables = ["data/samples.csv"]
[units]
split = "group"
[sampler]
draws = 30
tune = 30
chains = 1
seed = 5
product_draws = 30
[sampler.options]
maxdepth = 4
[outputs]
run_dir = "run"
"""
UNITS = ("colony_A", "colony_B")
DEADLINE_S = 1800  # a guard against a hung run, not a speed check


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    root = tmp_path_factory.mktemp("workflow")
    spec = ColonySpec(
        n_individuals=4,
        seed=3,
        n_segments=8,
        n_draws=4,
        kind_shares={"faster": 0.5, "neither": 0.5},
    )
    write_simulation(simulate_colony(spec), root / "data")
    wf = root / "wf.toml"
    wf.write_text(WORKFLOW)
    ref = root / "reference"
    assert main(["run", str(wf), "--out", str(ref), "--quiet"]) in (0, 1)
    manifest = json.loads((ref / "manifest.json").read_text())
    assert manifest["failed_units"] == []
    assert [u["name"] for u in manifest["units"]] == list(UNITS)
    return root, wf, ref


def assert_same_products(a: Path, b: Path) -> None:
    for name in ("screening.csv", "timelines.csv"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
        for unit in UNITS:
            rel = Path("units") / unit / name
            assert (a / rel).read_bytes() == (b / rel).read_bytes(), rel


def test_same_workflow_and_seed_give_identical_results(tiny):
    root, wf, ref = tiny
    again = root / "again"
    assert main(["run", str(wf), "--out", str(again), "--quiet"]) in (0, 1)
    assert_same_products(ref, again)
    a = json.loads((ref / "manifest.json").read_text())
    b = json.loads((again / "manifest.json").read_text())
    assert a["config_hash"] == b["config_hash"]
    assert [u["input_hash"] for u in a["units"]] == [u["input_hash"] for u in b["units"]]


def test_killed_run_resumes_without_refitting_the_finished_unit(tiny):
    root, wf, ref = tiny
    out = root / "resumed"
    cmd = [sys.executable, "-m", "nstress", "run", str(wf), "--out", str(out), "--workers", "1"]
    first = out / "units" / UNITS[0] / "manifest.json"
    proc = subprocess.Popen(
        [*cmd, "--quiet"],
        start_new_session=True,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        t0 = time.monotonic()
        while not first.exists():
            assert proc.poll() is None, "the run ended before its first unit finished"
            assert time.monotonic() - t0 < DEADLINE_S
            time.sleep(0.5)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the command and its worker processes
        proc.wait()
    assert not (out / "manifest.json").exists()  # the run is not marked finished
    assert not (out / "units" / UNITS[1] / "manifest.json").exists()
    stamp = first.stat().st_mtime_ns
    rerun = subprocess.run(cmd, capture_output=True, text=True, timeout=DEADLINE_S)
    assert rerun.returncode in (0, 1), rerun.stderr
    assert f"skipping unit {UNITS[0]}: finished, inputs and settings unchanged" in rerun.stderr
    assert first.stat().st_mtime_ns == stamp
    assert_same_products(ref, out)
    assert not list(out.rglob(".*.tmp"))


def test_dask_scheduler_gives_the_local_results(tiny):
    distributed = pytest.importorskip("distributed")
    root, wf, ref = tiny
    out = root / "dask"
    with distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
    ) as cluster:
        address = cluster.scheduler_address
        assert main(["run", str(wf), "--out", str(out), "--scheduler", address, "--quiet"]) in (
            0,
            1,
        )
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["execution"]["scheduler"] == address
    assert manifest["failed_units"] == []
    assert_same_products(ref, out)

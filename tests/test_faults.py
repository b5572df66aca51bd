"""Faults during ``nstress run``: read-only output, full disk, a dying worker, Ctrl-C,
damaged files of a finished unit, and concurrent runs on one run directory.

No MCMC: the unit fit writes a constructed fit directory (``fault_units``,
``fitdir_factory``) and the report is stubbed. Tables are synthetic.
Every fault must end in a clear error (documented exit code, a message
naming what failed), leave no ``manifest.json`` that marks an unfinished
run finished, and be resumable.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from fault_units import DIE_ENV, SLEEP_ENV, dying_unit, install
from fuzz_tally import record

from nstress import atomic
from nstress.workflow import run
from nstress.workflow.cli import main
from nstress.workflow.run import LOCK_FILE, WORKER_DIED, run_lock

TABLE = "individual,tissue,d15N,d13C,date,group\n" + "".join(
    f"{ind},plasma,{12.0 - 0.3 * g + 0.2 * k:.1f},{-17.0 + 0.4 * g:.1f},{day},{grp}\n"
    for g, (ind, grp) in enumerate([("A1", "north"), ("B1", "south"), ("C1", "west")])
    for k, day in enumerate(["2024-01-05", "2024-01-12"])
)
TESTS = Path(__file__).resolve().parent


@pytest.fixture
def workflow(tmp_path: Path, monkeypatch) -> Path:
    (tmp_path / "colony.csv").write_text(TABLE)
    path = tmp_path / "wf.toml"
    path.write_text(
        '[inputs]\ntables = ["colony.csv"]\n[sampler]\nseed = 3\nchains = 1\n'
        '[outputs]\nrun_dir = "run"\n[execution]\nworkers = 0\n'
    )
    _stub_units(monkeypatch)
    return path


def _stub_units(monkeypatch) -> None:
    """Stub the unit fit and the report through ``monkeypatch``.

    The originals are saved on the test's own ``monkeypatch``, so that its undo
    (last in, first out) restores them even after a test patches ``fit_tables``
    again; a separate patch context would hand the stub back to later tests.
    """
    from nstress.products import report
    from nstress.workflow import pipeline

    monkeypatch.setattr(pipeline, "fit_tables", pipeline.fit_tables)
    monkeypatch.setattr(report, "write_report", report.write_report)
    install()


def leftovers(root: Path) -> list[Path]:
    return [p for p in root.rglob(".*.tmp")]


def run_manifest(run_dir: Path) -> dict:
    return json.loads((run_dir / "manifest.json").read_text())


@contextlib.contextmanager
def read_only(path: Path):
    """Make ``path`` unwritable: immutable for root (chattr +i), mode 0o555 otherwise."""
    immutable = os.geteuid() == 0 and shutil.which("chattr")
    if immutable:
        if subprocess.run(["chattr", "+i", str(path)], capture_output=True).returncode:
            pytest.skip("chattr +i is not supported here")
    else:
        path.chmod(0o555)
    try:
        yield
    finally:
        if immutable:
            subprocess.run(["chattr", "-i", str(path)], check=True)
        else:
            path.chmod(0o755)


# ---------------------------------------------------------------- read-only, disk full


def test_read_only_parent_of_the_run_directory(workflow, capsys):
    ro = workflow.parent / "ro"
    ro.mkdir()
    with read_only(ro):
        code = main(["run", str(workflow), "--out", str(ro / "run"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "nstress: error: cannot write" in err and str(ro / "run") in err
    assert not (ro / "run").exists()
    record("fault", "clear_error")


def test_read_only_finished_run_directory_refuses_cleanly_and_keeps_its_results(workflow, capsys):
    out = workflow.parent / "run"
    assert main(["run", str(workflow), "--quiet"]) == 0
    before = (out / "manifest.json").read_bytes()
    with read_only(out):
        code = main(["run", str(workflow), "--force", "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "nstress: error: cannot write" in err
    assert (out / "manifest.json").read_bytes() == before  # the finished run is untouched
    assert "Traceback" not in err
    record("fault", "clear_error")


def _full_disk(monkeypatch, *, when) -> list[str]:
    """Make the atomic writer fail with ENOSPC for the files ``when(path)`` selects."""
    real = atomic.atomic_path
    hit: list[str] = []

    @contextlib.contextmanager
    def full(path):
        with real(path) as tmp:
            yield tmp
            if when(Path(path)):
                hit.append(str(path))
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(atomic, "atomic_path", full)
    return hit


def test_disk_full_while_merging(workflow, monkeypatch, capsys):
    out = workflow.parent / "run"
    hit = _full_disk(monkeypatch, when=lambda p: p.name == "screening.csv" and p.parent == out)
    code = main(["run", str(workflow), "--quiet"])
    err = capsys.readouterr().err
    assert hit and code == 2
    assert "cannot write" in err and "No space left on device" in err
    assert not (out / "manifest.json").exists()  # never marked finished
    assert not (out / "screening.csv").exists() and not leftovers(out)
    monkeypatch.undo()
    _stub_units(monkeypatch)
    assert main(["run", str(workflow)]) == 0  # space again: the units are reused
    assert "skipping unit north" in capsys.readouterr().err
    assert run_manifest(out)["complete"] is True
    record("fault", "clear_error")


def test_disk_full_when_writing_the_run_manifest(workflow, monkeypatch, capsys):
    out = workflow.parent / "run"
    _full_disk(monkeypatch, when=lambda p: p == out / "manifest.json")
    assert main(["run", str(workflow), "--quiet"]) == 2
    assert "No space left on device" in capsys.readouterr().err
    assert not (out / "manifest.json").exists() and not leftovers(out)
    record("fault", "clear_error")


def test_disk_full_inside_one_unit_fails_that_unit_only(workflow, monkeypatch, capsys):
    out = workflow.parent / "run"

    def atomic_fit(tables, unit_out, config, log=None):
        from fault_units import stub_fit_tables

        m = stub_fit_tables(tables, unit_out, config)
        (Path(unit_out) / "manifest.json").unlink()  # rewritten atomically below
        atomic.atomic_write_text(Path(unit_out) / "manifest.json", json.dumps(m))
        return m

    from nstress.workflow import pipeline

    monkeypatch.setattr(pipeline, "fit_tables", atomic_fit)
    _full_disk(monkeypatch, when=lambda p: p.parent.name == "south" and p.name == "manifest.json")
    assert main(["run", str(workflow)]) == 1
    err = capsys.readouterr().err
    assert "unit south failed: cannot write" in err and "No space left on device" in err
    m = run_manifest(out)
    assert m["failed_units"] == ["south"]
    assert {u["name"]: u["status"] for u in m["units"]} == {
        "north": "fitted",
        "south": "failed",
        "west": "fitted",
    }
    assert not (out / "units" / "south" / "manifest.json").exists()
    record("fault", "clear_error")


# ---------------------------------------------------------------- worker death, Ctrl-C


@pytest.mark.slow  # spawns worker processes (a minute or more on a loaded machine)
def test_a_worker_that_dies_fails_its_unit_and_the_others_finish(workflow, monkeypatch, capsys):
    monkeypatch.setenv(DIE_ENV, "south")
    monkeypatch.setattr(run, "execute_unit", dying_unit)  # pickled by name for the workers
    monkeypatch.syspath_prepend(str(TESTS))
    out = workflow.parent / "run"
    code = main(["run", str(workflow), "--workers", "2"])
    err = capsys.readouterr().err
    assert code == 1
    assert f"unit south failed: {WORKER_DIED}" in err
    m = run_manifest(out)
    status = {u["name"]: u["status"] for u in m["units"]}
    assert status == {"north": "fitted", "south": "failed", "west": "fitted"}
    assert m["failed_units"] == ["south"]
    monkeypatch.delenv(DIE_ENV)
    assert main(["run", str(workflow), "--workers", "2", "--quiet"]) == 0  # only south refits
    assert {u["name"]: u["status"] for u in run_manifest(out)["units"]}["north"] == "skipped"
    record("fault", "clear_error")


def test_ctrl_c_stops_cleanly_and_the_rerun_resumes(workflow, monkeypatch, capsys):
    from fault_units import stub_fit_tables

    from nstress.workflow import pipeline

    out = workflow.parent / "run"

    def interrupted(tables, unit_out, config, log=None):
        if config.group == "south":
            with atomic.atomic_path(Path(unit_out) / "screening.csv") as tmp:
                tmp.write_text("half a file")
                raise KeyboardInterrupt
        return stub_fit_tables(tables, unit_out, config)

    monkeypatch.setattr(pipeline, "fit_tables", interrupted)
    assert main(["run", str(workflow)]) == 130
    assert "nstress: interrupted" in capsys.readouterr().err
    assert not (out / "manifest.json").exists()
    assert (out / "units" / "north" / "manifest.json").exists()
    assert not (out / "units" / "south" / "screening.csv").exists() and not leftovers(out)
    with run_lock(out):  # the interrupted run let go of its lock
        pass
    monkeypatch.setattr(pipeline, "fit_tables", stub_fit_tables)
    assert main(["run", str(workflow)]) == 0
    assert "skipping unit north: finished" in capsys.readouterr().err
    assert run_manifest(out)["complete"] is True
    record("fault", "clear_error")


# ---------------------------------------------------------------- damaged files on reuse


@pytest.mark.parametrize("how", ["truncate", "garbage", "delete", "empty"])
def test_damaged_posterior_of_a_finished_unit_is_detected_and_refitted(workflow, capsys, how):
    out = workflow.parent / "run"
    assert main(["run", str(workflow), "--quiet"]) == 0
    post = out / "units" / "north" / "posterior.nc"
    data = post.read_bytes()
    if how == "truncate":
        post.write_bytes(data[: len(data) // 2])
    elif how == "garbage":
        post.write_bytes(b"\x00" * len(data))
    elif how == "delete":
        post.unlink()
    else:
        post.write_bytes(b"")
    assert main(["run", str(workflow)]) == 0
    err = capsys.readouterr().err
    assert "unit north: damaged files (posterior.nc" in err and "refitting" in err
    m = run_manifest(out)
    north = next(u for u in m["units"] if u["name"] == "north")
    assert north["status"] == "fitted" and north["refit_because"]
    assert next(u for u in m["units"] if u["name"] == "south")["status"] == "skipped"
    assert run.damaged_files(out / "units" / "north") == []
    record("fault", "clear_error")


@pytest.mark.parametrize("text", ["", "{not json", '["a list"]', '{"input_hash": 5}'])
def test_damaged_unit_manifest_means_not_finished(workflow, capsys, text):
    out = workflow.parent / "run"
    assert main(["run", str(workflow), "--quiet"]) == 0
    (out / "units" / "south" / "manifest.json").write_text(text)
    assert main(["run", str(workflow)]) == 0
    m = run_manifest(out)
    assert next(u for u in m["units"] if u["name"] == "south")["status"] == "fitted"
    record("fault", "clear_error")


def test_damaged_run_manifest_is_replaced_and_render_still_works(workflow, capsys):
    out = workflow.parent / "run"
    assert main(["run", str(workflow), "--quiet"]) == 0
    (out / "manifest.json").write_text('{"kind": "run", "units": [')  # truncated
    assert main(["render", str(out), "--quiet"]) == 0  # falls back to the finished units
    assert (out / "report.html").read_text() == "units: north, south, west"
    assert main(["run", str(workflow), "--quiet"]) == 0
    assert run_manifest(out)["complete"] is True
    record("fault", "clear_error")


# ---------------------------------------------------------------- the lock


def test_a_held_lock_refuses_a_second_run_with_the_owner_pid(workflow, capsys):
    out = workflow.parent / "run"
    with run_lock(out):
        code = main(["run", str(workflow)])
    err = capsys.readouterr().err
    assert code == 2
    assert f"nstress: error: run directory {out} is in use by pid {os.getpid()}" in err
    assert not (out / "units").exists()  # nothing fitted
    assert main(["run", str(workflow), "--quiet"]) == 0  # released
    record("fault", "clear_error")


def test_a_stale_lock_file_from_a_dead_run_is_taken_over(workflow):
    out = workflow.parent / "run"
    out.mkdir()
    (out / LOCK_FILE).write_text("999999999\n")  # no such process holds it
    assert main(["run", str(workflow), "--quiet"]) == 0
    assert (out / LOCK_FILE).read_text().strip() == str(os.getpid())
    record("fault", "result")


@pytest.mark.slow
def test_ten_runs_at_once_on_one_run_directory(workflow):
    out = workflow.parent / "run"
    env = {**os.environ, SLEEP_ENV: "1.0", "PYTHONPATH": str(TESTS)}
    code = "import sys, fault_units; sys.exit(fault_units.main(sys.argv[1:]))"
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", code, "run", str(workflow)],
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for _ in range(10)
    ]
    results = [(p.wait(timeout=600), p.stderr.read()) for p in procs]
    codes = [c for c, _ in results]
    assert set(codes) <= {0, 2} and 0 in codes, results
    for c, err in results:
        if c == 2:
            assert "is in use by pid" in err, err
        assert "Traceback" not in err
        record("load", "result" if c == 0 else "clear_error")
    m = run_manifest(out)
    assert m["complete"] is True and not leftovers(out)
    for u in m["units"]:
        unit = json.loads((out / u["dir"] / "manifest.json").read_text())
        assert unit["input_hash"] == u["input_hash"]
    assert len([x for x in (out / "units").iterdir()]) == 3

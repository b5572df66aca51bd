"""The ``nstress check`` command (tables invented, synthetic)."""

from __future__ import annotations

import os
import subprocess
import sys
import types
from pathlib import Path

import pandas as pd
import pytest

from nstress.errors import InputError
from nstress.workflow import cli

GOOD = (
    "individual,tissue,d15N,d13C,position_mm,collected,date,group\n"
    "W1,whisker,12.0,-18.0,0,2021-03-04,,north\n"
    "W1,whisker,12.1,-18.1,0,2021-03-04,,north\n"
    "W1,whisker,13.0,-17.5,5,2021-03-04,,north\n"
    "W1,whisker,,,10,2021-03-04,,north\n"
    "P1,plasma,14.2,-19.0,,,2020-11-02,south\n"
    "P1,plasma,45.0,-19.0,,,2020-12-02,south\n"
)


@pytest.fixture
def no_prep(monkeypatch):
    monkeypatch.setattr(cli, "_load_prep", lambda: None)


@pytest.fixture
def good(tmp_path) -> Path:
    p = tmp_path / "good.csv"
    p.write_text(GOOD, encoding="utf-8")
    return p


def test_summary_and_exit_zero(good, capsys, no_prep):
    assert cli.main(["check", str(good)]) == 0
    out = capsys.readouterr().out
    assert "Input: 1 file(s), 6 row(s)" in out
    assert "Samples: 4 (4 usable), individuals: 2" in out
    assert "whisker (keratin): 2" in out and "plasma (blood): 2" in out
    assert "keratin collected 2021-03-04 to 2021-03-04" in out
    assert "blood drawn 2020-11-02 to 2020-12-02" in out
    assert "Rows: 4 used, 1 flagged, 1 excluded" in out
    assert "no d15N or d13C value" in out
    assert "combined with 1 replicate(s)" in out
    assert "d15N outside plausible animal-tissue range" in out
    assert "Verdict: usable" in out


def test_out_writes_ledger_atomically(good, tmp_path, capsys, no_prep):
    out_dir = tmp_path / "qc"
    assert cli.main(["check", str(good), "--out", str(out_dir)]) == 0
    assert sorted(p.name for p in out_dir.iterdir()) == ["ledger.csv"]  # no temporary left
    led = pd.read_csv(out_dir / "ledger.csv", keep_default_na=False)
    assert list(led.columns[:6]) == [
        "source_file",
        "source_row",
        "individual",
        "tissue",
        "status",
        "reason",
    ]
    assert led["source_row"].tolist() == [1, 2, 3, 4, 5, 6]
    assert led["status"].tolist() == ["used", "used", "used", "excluded", "used", "flagged"]
    assert "group" in led.columns
    assert "wrote" in capsys.readouterr().err


def test_quiet_and_verbose(good, capsys, no_prep):
    assert cli.main(["check", str(good), "--quiet"]) == 0
    q = capsys.readouterr()
    assert q.out == "" and q.err == ""
    assert cli.main(["check", str(good), "--verbose"]) == 0
    v = capsys.readouterr().out
    assert f"e.g. {good} row 4" in v
    assert "W1 whisker: 2" in v


def test_two_tables(good, tmp_path, capsys, no_prep):
    other = tmp_path / "other.csv"
    other.write_text(
        "individual,tissue,d15N,d13C,date\nR1,rbc,11,-20,2021-01-01\n", encoding="utf-8"
    )
    assert cli.main(["check", str(good), str(other)]) == 0
    assert "Input: 2 file(s), 7 row(s)" in capsys.readouterr().out


def test_only_reference_rows_is_not_usable(tmp_path, capsys, no_prep):
    p = tmp_path / "refs.csv"
    p.write_text(
        "individual,tissue,d15N,d13C,reference_material\n,,-4.52,-26.39,USGS40\n", encoding="utf-8"
    )
    out_dir = tmp_path / "o"
    assert cli.main(["check", str(p), "--out", str(out_dir)]) == 2
    cap = capsys.readouterr()
    assert "NOT usable" in cap.out
    assert "nstress: error: no usable sample" in cap.err
    assert (out_dir / "ledger.csv").exists()  # the ledger explains why


def test_input_error_message_no_traceback_nothing_written(tmp_path, capsys, no_prep):
    p = tmp_path / "bad.csv"
    p.write_text(
        "individual,tissue,d15N,d13C,date\nA,plasma,twelve,-18,2021-01-01\n", encoding="utf-8"
    )
    out_dir = tmp_path / "o"
    assert cli.main(["check", str(p), "--out", str(out_dir)]) == 2
    err = capsys.readouterr().err
    assert f"nstress: error: file {p}, row 1, column 'd15N': expected a number" in err
    assert "Traceback" not in err
    assert not out_dir.exists()


def test_unwritable_out_is_an_error(good, tmp_path, capsys, no_prep):
    blocker = tmp_path / "file"
    blocker.write_text("x", encoding="utf-8")
    assert cli.main(["check", str(good), "--out", str(blocker / "sub")]) == 2
    assert "nstress: error: cannot write" in capsys.readouterr().err


def test_help_usage_and_no_command(capsys):
    assert cli.main(["check", "--help"]) == 0
    out = capsys.readouterr().out
    assert "nstress check whiskers.csv" in out and "--out DIR" in out
    assert cli.main([]) == 2
    assert cli.main(["check"]) == 2  # TABLE is required (argparse usage error)
    assert "required" in capsys.readouterr().err


def test_commands_are_registered():
    assert "check" in cli.COMMANDS
    seen = []
    cmd = cli.Command(
        "hello", "say hello", lambda p: p.add_argument("--name"), lambda a: seen.append(a.name) or 0
    )
    cli.register(cmd)
    try:
        assert cli.main(["hello", "--name", "x"]) == 0
        assert seen == ["x"]
    finally:
        cli.COMMANDS.pop("hello")


def test_prep_is_used_when_available(good, monkeypatch, capsys):
    calls = {}

    def prepare(intake, *, tissues=None, config=None):
        calls["intake"] = intake
        intake.ledger.flag([0], "fake prep flag")
        return types.SimpleNamespace(samples=intake.samples, ledger=intake.ledger, report={})

    fake = types.SimpleNamespace(prepare=prepare, summarise=lambda p: "FAKE PREP SUMMARY")
    monkeypatch.setattr(cli, "_load_prep", lambda: fake)
    assert cli.main(["check", str(good)]) == 0
    out = capsys.readouterr().out
    assert "FAKE PREP SUMMARY" in out
    assert len(calls["intake"].ledger) == 6


def test_prep_error_is_reported(good, monkeypatch, capsys, tmp_path):
    def prepare(intake, *, tissues=None, config=None):
        raise InputError("unknown reference material 'XYZ'", file=str(good), row=3)

    monkeypatch.setattr(cli, "_load_prep", lambda: types.SimpleNamespace(prepare=prepare))
    out_dir = tmp_path / "o"
    assert cli.main(["check", str(good), "--out", str(out_dir)]) == 2
    err = capsys.readouterr().err
    assert "nstress: error: file" in err and "row 3" in err and "Traceback" not in err
    assert not out_dir.exists()


def test_real_prep_if_present(good, capsys):
    prep = cli._load_prep()
    if prep is None:
        pytest.skip("nstress.prep.prepare not available")
    assert cli.main(["check", str(good)]) == 0
    assert "Verdict: usable" in capsys.readouterr().out


def test_python_dash_m(good):
    env = {**os.environ, "PYTHONPATH": str(Path(cli.__file__).parents[2])}
    res = subprocess.run(
        [sys.executable, "-m", "nstress", "check", str(good), "--quiet"],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert res.returncode == 0, res.stderr
    bad = good.with_name("bad.txt")
    bad.write_text("", encoding="utf-8")
    res = subprocess.run(
        [sys.executable, "-m", "nstress", "check", str(bad)],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert res.returncode == 2
    assert "nstress: error:" in res.stderr and "Traceback" not in res.stderr

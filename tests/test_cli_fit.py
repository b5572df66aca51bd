from nstress.workflow.cli import main


def test_fit_bad_input_exits_2_and_writes_nothing(tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("individual,tissue,d15N,d13C,date\nA1,plasma,abc,-17.0,2024-01-05\n")
    out = tmp_path / "out"
    code = main(["fit", str(bad), "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert "nstress: error:" in err and "Traceback" not in err
    assert "d15N" in err and "row 1" in err
    assert not out.exists() or not any(out.iterdir())


def test_fit_rejects_zero_draws(tmp_path, capsys):
    good = tmp_path / "t.csv"
    good.write_text("individual,tissue,d15N,d13C,date\nA1,plasma,12.0,-17.0,2024-01-05\n")
    code = main(["fit", str(good), "--out", str(tmp_path / "o"), "--draws", "0"])
    assert code == 2
    assert "--draws must be at least 1" in capsys.readouterr().err


def test_every_command_has_help(capsys):
    for cmd in ("check", "fit", "demo"):
        assert main([cmd, "--help"]) == 0
        assert "examples:" in capsys.readouterr().out

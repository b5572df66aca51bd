"""Regression tests of bugs the fuzz, odd-data and fault tests found (synthetic tables)."""

from __future__ import annotations

from pathlib import Path

import pytest

from nstress.errors import InputError
from nstress.intake import read_samples

B = "individual,tissue,d15N,d13C,date\n"
K = "individual,tissue,d15N,d13C,position_mm,collected\n"


@pytest.mark.parametrize("day", ["0001-01-01", "9999-12-31", "1600-05-05"])
def test_date_outside_the_timestamp_range_is_a_clear_error(tmp_path: Path, day: str):
    # found by tests/test_fuzz_intake.py: an OutOfBoundsDatetime escaped from intake
    p = tmp_path / "t.csv"
    p.write_text(K + f"A,whisker,12,-18,1.0,{day}\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"row 1, column 'collected': date out of range") as info:
        read_samples(p)
    assert info.value.file == str(p) and day in str(info.value)


def test_one_table_given_as_text_is_one_path(tmp_path: Path):
    # found by tests/test_fuzz_workflow.py: `tables = "data/colony.csv"` (documented as "a
    # path or glob") was iterated character by character
    from nstress.workflow.config import load_workflow

    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "colony.csv").write_text(B + "A,plasma,12,-18,2021-01-01\n")
    path = tmp_path / "wf.toml"
    path.write_text('[inputs]\ntables = "data/colony.csv"\n')
    assert load_workflow(path).tables == [(tmp_path / "data" / "colony.csv").resolve()]


@pytest.mark.parametrize(
    "text",
    [
        '[inputs]\ntables = "data/colony.csv"\n[outputs]\nrun_dir = "run\\u0000x"\n',
        '[inputs]\ntables = ["data/col\\u0000ony.csv"]\n',
    ],
)
def test_nul_character_in_a_path_is_a_config_error(tmp_path: Path, text: str):
    # found by tests/test_fuzz_workflow.py: "embedded null byte" ValueError from pathlib
    from nstress.errors import ConfigError
    from nstress.workflow.config import load_workflow

    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "colony.csv").write_text(B + "A,plasma,12,-18,2021-01-01\n")
    path = tmp_path / "wf.toml"
    path.write_text(text)
    with pytest.raises(ConfigError, match="NUL character") as info:
        load_workflow(path)
    assert info.value.file == str(path.resolve())

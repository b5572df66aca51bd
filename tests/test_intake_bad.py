"""Malformed sample tables: each must fail with a precise message.

Every table is invented (synthetic). The ratio cases use the reference
ratios R_VPDB = 0.0111802 (13C/12C) and R_AIR = 0.0036765 (15N/14N), both
from memory, with δ = R/R_std - 1 (Coplen 2011): a table that gives R
instead of δ must be rejected.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import pytest

from nstress.errors import InputError, InputErrors
from nstress.intake import read_samples
from nstress.workflow import cli

K = "individual,tissue,d15N,d13C,position_mm,collected\n"
B = "individual,tissue,d15N,d13C,date\n"
R_VPDB, R_AIR = 0.0111802, 0.0036765  # from memory


@dataclass
class Case:
    id: str
    content: str | bytes | None  # None: special (directory)
    match: str
    name: str = "t.csv"
    row: int | None = None
    column: str | None = None
    cli: bool = False


def _ratio_table() -> str:
    rows = []
    for i, (n, c) in enumerate([(12.3, -18.2), (14.0, -17.1), (9.8, -21.5)]):
        rows.append(
            f"A,plasma,{R_AIR * (1 + n / 1000):.7f},{R_VPDB * (1 + c / 1000):.7f},2021-01-0{i + 1}"
        )
    return B + "\n".join(rows) + "\n"


CASES = [
    Case("empty file", "", r"file is empty", cli=True),
    Case("blank lines only", "\n  \n\n", r"file is empty"),
    Case("header only", B, r"header but no data rows", row=None, cli=True),
    Case(
        "missing individual",
        "tissue,d15N,d13C,date\nplasma,12,-18,2021-01-01\n",
        r"required column 'individual' is missing",
        column="individual",
        cli=True,
    ),
    Case(
        "missing tissue",
        "individual,d15N,d13C,date\nA,12,-18,2021-01-01\n",
        r"required column 'tissue' is missing",
        column="tissue",
    ),
    Case(
        "no isotope columns",
        "individual,tissue,date\nA,plasma,2021-01-01\n",
        r"no d15N or d13C column",
        column="d15N",
    ),
    Case(
        "isotopes empty in all rows",
        B + "A,plasma,,,2021-01-01\nB,plasma,NA,NA,2021-01-01\n",
        r"no row has a d15N or d13C value",
        column="d15N",
        cli=True,
    ),
    Case(
        "text in numeric",
        B + "A,plasma,12,-18,2021-01-01\nA,plasma,abc,-18,2021-01-02\n",
        r"row 2, column 'd15N': expected a number \(value 'abc'\)",
        row=2,
        column="d15N",
        cli=True,
    ),
    Case(
        "decimal comma in comma file",
        B + 'A,plasma,"12,5",-18,2021-01-01\n',
        r"'\.' as decimal mark",
        row=1,
        column="d15N",
    ),
    Case(
        "infinite value",
        B + "A,plasma,inf,-18,2021-01-01\n",
        r"expected a number",
        row=1,
        column="d15N",
    ),
    Case(
        "impossible date",
        B + "A,plasma,12,-18,2021-02-30\n",
        r"row 1, column 'date': impossible date.*'2021-02-30'",
        row=1,
        column="date",
        cli=True,
    ),
    Case(
        "mixed date formats",
        B + "A,plasma,12,-18,2021-03-01\nA,plasma,12,-18,03/04/2021\n",
        r"mixed date formats.*ISO 8601",
        row=2,
        column="date",
        cli=True,
    ),
    Case(
        "non-ISO dates",
        B + "A,plasma,12,-18,04.03.2021\n",
        r"expected an ISO 8601 date \(YYYY-MM-DD\)",
        row=1,
        column="date",
    ),
    Case(
        "bad clock time",
        B + "A,plasma,12,-18,2021-03-04T25:00\n",
        r"expected an ISO 8601 date",
        row=1,
        column="date",
    ),
    Case(
        "negative position",
        K + "W,whisker,12,-18,-3,2021-03-04\n",
        r"column 'position_mm': expected a distance >= 0 mm",
        row=1,
        column="position_mm",
        cli=True,
    ),
    Case(
        "zero segment length",
        K.strip() + ",segment_length_mm\nW,whisker,12,-18,3,2021-03-04,0\n",
        r"segment length > 0",
        row=1,
        column="segment_length_mm",
    ),
    Case(
        "negative SD",
        B.strip() + ",sd_d15N\nA,plasma,12,-18,2021-01-01,-0.1\n",
        r"column 'sd_d15N': expected an analytical SD > 0",
        row=1,
        column="sd_d15N",
        cli=True,
    ),
    Case(
        "zero SD",
        B.strip() + ",sd_d13C\nA,plasma,12,-18,2021-01-01,0\n",
        r"analytical SD > 0",
        row=1,
        column="sd_d13C",
    ),
    Case(
        "pct over 100",
        B.strip() + ",pct_C\nA,plasma,12,-18,2021-01-01,145\n",
        r"mass percentage 0-100",
        row=1,
        column="pct_C",
    ),
    Case(
        "unknown tissue",
        B + "A,bone,12,-18,2021-01-01\n",
        r"unknown tissue; expected one of: baleen, claw, feather, hair, plasma, rbc, serum, "
        r"whisker, whole_blood",
        row=1,
        column="tissue",
        cli=True,
    ),
    Case("empty tissue", B + "A,,12,-18,2021-01-01\n", r"tissue is empty", row=1, column="tissue"),
    Case(
        "empty individual",
        B + ",plasma,12,-18,2021-01-01\n",
        r"individual is empty",
        row=1,
        column="individual",
    ),
    Case(
        "keratin without collected",
        "individual,tissue,d15N,d13C,position_mm\nW,whisker,12,-18,3\n",
        r"required column 'collected' is missing: keratin rows need",
        column="collected",
        cli=True,
    ),
    Case(
        "keratin without position",
        "individual,tissue,d15N,d13C,collected\nW,whisker,12,-18,2021-03-04\n",
        r"required column 'position_mm' is missing",
        column="position_mm",
    ),
    Case(
        "keratin row with empty position",
        K + "W,whisker,12,-18,,2021-03-04\n",
        r"row 1, column 'position_mm': keratin rows need the distance",
        row=1,
        column="position_mm",
    ),
    Case(
        "blood without date",
        "individual,tissue,d15N,d13C\nA,plasma,12,-18\n",
        r"required column 'date' is missing: blood rows need",
        column="date",
        cli=True,
    ),
    Case(
        "blood row with empty date",
        B + "A,rbc,12,-18,\n",
        r"blood rows need the ISO date",
        row=1,
        column="date",
    ),
    Case(
        "junk boolean",
        B.strip() + ",lipid_extracted\nA,plasma,12,-18,2021-01-01,maybe\n",
        r"column 'lipid_extracted': expected true or false.*'maybe'",
        row=1,
        column="lipid_extracted",
        cli=True,
    ),
    Case(
        "beyond 100 per mil",
        B + "A,plasma,12,-180.5,2021-01-01\n",
        r"\|d13C\| > 100 ‰ is beyond natural abundance",
        row=1,
        column="d13C",
        cli=True,
    ),
    Case(
        "d13C as fractions",
        B + "A,plasma,12,-0.018,2021-01-01\nA,plasma,12,-0.021,2021-01-02\n",
        r"d13C'.*look like fractions.*expected per-mil d13C values",
        row=1,
        column="d13C",
        cli=True,
    ),
    Case(
        "both as fractions",
        B + "A,plasma,0.012,-0.018,2021-01-01\n",
        r"d15N'.*look like fractions",
        row=1,
        column="d15N",
    ),
    Case(
        "isotope ratios",
        _ratio_table(),
        r"look like 15N/14N isotope ratios.*per-mil",
        row=1,
        column="d15N",
        cli=True,
    ),
    Case(
        "conflicting duplicate sample_id",
        B.strip() + ",sample_id\nA,plasma,12,-18,2021-01-01,S7\nA,plasma,13.4,-18,2021-01-01,S7\n",
        r"row 2, column 'sample_id': sample_id also on row 1 with different d15N: a duplicated "
        r"row with conflicting values",
        row=2,
        column="sample_id",
        cli=True,
    ),
    Case(
        "duplicate sample_id, other individual",
        B.strip() + ",sample_id\nA,plasma,12,-18,2021-01-01,S7\nB,plasma,12,-18,2021-01-01,S7\n",
        r"with different individual: a duplicated row",
        row=2,
        column="sample_id",
    ),
    Case(
        "bad reference role",
        B.strip() + ",reference_material,reference_role\n"
        ",,-4.5,-26.4,,USGS40,standard\nA,plasma,12,-18,2021-01-01,,\n",
        r"expected 'anchor', 'check' or empty",
        row=1,
        column="reference_role",
    ),
    Case(
        "ragged rows",
        B + "A,plasma,12,-18,2021-01-01,extra,fields\n",
        r"cannot parse as comma-separated text.*same number of fields",
        cli=True,
    ),
    Case(
        "clashing headers",
        "individual,tissue,d15N,δ15N (‰),d13C,date\nA,plasma,1,2,-18,2021-01-01\n",
        r"header 'δ15N \(‰\)' clashes with header 'd15N'",
        row=0,
        column="d15N",
    ),
    Case(
        "repeated header",
        "individual,tissue,d15N,d13C,date,note,note\nA,plasma,1,-18,2021-01-01,x,y\n",
        r"header 'note' clashes.*appears twice",
    ),
    Case("unknown extension", "a,b\n1,2\n", r"unknown file type '\.json'", name="t.json", cli=True),
    Case("no extension", "a,b\n1,2\n", r"unknown file type '\(no extension\)'", name="table"),
    Case("directory", None, r"cannot read file", name="dir.csv", cli=True),
    Case("corrupt parquet", b"PAR1 not really", r"cannot read as Parquet", name="t.parquet"),
    Case(
        "corrupt excel",
        b"PK\x03\x04 broken zip",
        r"cannot read as an Excel workbook",
        name="t.xlsx",
    ),
]


def _materialise(case: Case, tmp_path: Path) -> Path:
    p = tmp_path / case.name
    if case.content is None:
        p.mkdir()
    elif isinstance(case.content, bytes):
        p.write_bytes(case.content)
    else:
        p.write_text(case.content, encoding="utf-8")
    return p


def test_suite_is_large_enough():
    assert len(CASES) >= 25
    assert sum(c.cli for c in CASES) >= 12


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_table_message(case: Case, tmp_path: Path):
    p = _materialise(case, tmp_path)
    with pytest.raises(InputError, match=case.match) as info:
        read_samples(p)
    msg = str(info.value)
    assert f"file {p}" in msg
    err = info.value
    errors = err.errors if isinstance(err, InputErrors) else [err]
    hit = [e for e in errors if re.search(case.match, str(e))]
    assert hit, msg
    assert hit[0].file == str(p)
    if case.row is not None:
        assert hit[0].row == case.row
    if case.column is not None:
        assert hit[0].column == case.column


@pytest.mark.parametrize("case", [c for c in CASES if c.cli], ids=[c.id for c in CASES if c.cli])
def test_bad_table_through_cli(case: Case, tmp_path: Path, capsys, monkeypatch):
    monkeypatch.setattr(cli, "_load_prep", lambda: None)
    p = _materialise(case, tmp_path)
    out = tmp_path / "out"
    code = cli.main(["check", str(p), "--out", str(out)])
    captured = capsys.readouterr()
    assert code == 2
    assert any(line.startswith("nstress: error: ") for line in captured.err.splitlines())
    assert re.search(case.match, captured.err)
    assert str(p) in captured.err
    if case.row is not None:
        assert f"row {case.row}" in captured.err
    if case.column is not None:
        assert f"column '{case.column}'" in captured.err
    assert "Traceback" not in captured.err + captured.out
    assert not out.exists() or not any(out.iterdir())


def test_errors_are_gathered_in_one_message(tmp_path):
    p = tmp_path / "many.csv"
    p.write_text(
        B + "A,plasma,abc,-18,2021-01-01\nA,bone,12,-18,2021-02-30\nA,plasma,12,-18,2021-01-03\n",
        encoding="utf-8",
    )
    with pytest.raises(InputErrors, match=r"^3 input error\(s\)") as info:
        read_samples(p)
    rows = [(e.row, e.column) for e in info.value.errors]
    assert rows == [(1, "d15N"), (2, "tissue"), (2, "date")]


def test_many_bad_rows_are_counted_not_all_spelled_out(tmp_path):
    p = tmp_path / "bad.csv"
    p.write_text(
        B + "".join(f"A,plasma,x{i},-18,2021-01-01\n" for i in range(30)), encoding="utf-8"
    )
    with pytest.raises(InputErrors, match=r"20 more row\(s\) with the same problem") as info:
        read_samples(p)
    assert len(info.value.errors) == 11


def test_errors_of_several_files_are_gathered(tmp_path):
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    a.write_text(B + "A,plasma,abc,-18,2021-01-01\n", encoding="utf-8")
    b.write_text(B + "A,plasma,12,-18,2021-13-01\n", encoding="utf-8")
    with pytest.raises(InputErrors) as info:
        read_samples([a, b])
    assert [e.file for e in info.value.errors] == [str(a), str(b)]


def test_same_file_twice(tmp_path):
    a = tmp_path / "a.csv"
    a.write_text(B + "A,plasma,12,-18,2021-01-01\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"file given twice"):
        read_samples([a, a])


def test_no_paths_and_bad_default_sd(tmp_path):
    with pytest.raises(InputError, match="no input file"):
        read_samples([])
    a = tmp_path / "a.csv"
    a.write_text(B + "A,plasma,12,-18,2021-01-01\n", encoding="utf-8")
    from nstress.errors import ConfigError

    with pytest.raises(ConfigError, match="default_sd must be a positive number"):
        read_samples(a, default_sd=0)


def test_single_delta15n_near_zero_is_not_a_fraction(tmp_path):
    # A lone δ15N of 0.05 ‰ can be real (N-fixer based diets); with a normal δ13C it is accepted.
    a = tmp_path / "a.csv"
    a.write_text(B + "A,plasma,0.05,-18,2021-01-01\n", encoding="utf-8")
    assert read_samples(a).samples["d15N"].tolist() == [0.05]

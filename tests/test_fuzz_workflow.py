"""Fuzzing the workflow loader and the command line (no MCMC: the unit fit is stubbed).

Workflow files are generated: known and unknown sections and keys, values of
every TOML type (integers, floats with nan/inf, text, booleans, dates,
arrays, tables), input paths and globs that exist, do not, or point
elsewhere, run directories that stay inside the workflow's folder or try to
leave it (``..``, absolute paths, ``~``, a symlink out). Command lines are
generated from the commands' own words, paths and junk.

Property: a workflow either loads, with every input an existing file and
the run directory strictly inside the workflow's folder, or fails with a
:class:`~nstress.errors.ConfigError` naming the file; the command line
always returns an exit code (0, 1 or 2) with an ``nstress: error:`` line for
a failure and no traceback, and never writes outside its temporary folder.
"""

from __future__ import annotations

import datetime
import json
import math
import os
import tempfile
from pathlib import Path

import pytest
from fuzz_tally import record
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from nstress.errors import ConfigError
from nstress.workflow.config import SECTIONS, _schema, load_workflow

SETTINGS = dict(deadline=None, suppress_health_check=list(HealthCheck), database=None)
TABLE = (
    "individual,tissue,d15N,d13C,date,group\n"
    "A1,plasma,12.0,-17.0,2024-01-05,north\n"
    "A1,plasma,12.4,-17.1,2024-01-12,north\n"
    "B1,plasma,11.8,-16.9,2024-01-05,south\n"
)
TABLE_PATHS = [
    "data/colony.csv",
    "data/*.csv",
    "data/**/*.csv",
    "data/../data/colony.csv",
    "missing.csv",
    "data/*.parquet",
    "../outside.csv",
    "",
    "~/nstress-fuzz-none.csv",
    "data",
    "link/colony.csv",
]
RUN_DIRS = [
    "run",
    "runs/x",
    "../escape",
    "a/../../b",
    ".",
    "",
    "/tmp/nstress-fuzz-abs",
    "~/nstress-fuzz-home",
    "sub/../..",
    "link/run",
    "data/run",
    "run\x00x",
]


SCHEMA = _schema()


def _scalar() -> st.SearchStrategy:
    return st.one_of(
        st.integers(-(2**63), 2**63 - 1),
        st.integers(-3, 2000),
        st.floats(allow_nan=True, allow_infinity=True),
        st.booleans(),
        st.text(max_size=20),
        st.sampled_from(["auto", "group", "table", "pymc", "nutpie", "keratin", "blood", "jax"]),
        st.dates(),
        st.datetimes(timezones=st.just(datetime.UTC)),
    )


_value = st.recursive(
    _scalar(),
    lambda inner: st.one_of(
        st.lists(inner, max_size=3), st.dictionaries(st.text(max_size=8), inner, max_size=3)
    ),
    max_leaves=6,
)


@st.composite
def documents(draw: st.DrawFn) -> dict:
    """A workflow document: mostly known sections and keys, with random values."""
    schema = SCHEMA
    doc: dict = {}
    if draw(st.floats(0, 1)) < 0.9:
        tables = draw(st.lists(st.sampled_from(TABLE_PATHS), min_size=1, max_size=3))
        doc["inputs"] = {"tables": tables if draw(st.booleans()) else tables[0]}
    for section in draw(st.lists(st.sampled_from(SECTIONS), max_size=5, unique=True)):
        body = doc.setdefault(section, {})
        known = list(schema.get(section, {}))
        for _ in range(draw(st.integers(0, 3))):
            if known and draw(st.floats(0, 1)) < 0.8:
                key = draw(st.sampled_from(known))
            else:
                key = draw(st.text(min_size=1, max_size=10))
            body[key] = draw(_value)
    if draw(st.booleans()):
        doc.setdefault("outputs", {})["run_dir"] = draw(st.sampled_from(RUN_DIRS))
    if draw(st.floats(0, 1)) < 0.1:
        doc[draw(st.text(min_size=1, max_size=8))] = draw(_value)
    return doc


def _key(k: str) -> str:
    return json.dumps(k, ensure_ascii=False).replace("\x7f", "\\u007f")


def _toml_value(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _key(v)
    if isinstance(v, datetime.datetime | datetime.date):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def to_toml(doc: dict) -> str:
    """Write a document as TOML (one table per section, values inline)."""
    lines = []
    for section, body in doc.items():
        if isinstance(body, dict):
            lines.append(f"[{_key(section)}]")
            lines.extend(f"{_key(k)} = {_toml_value(v)}" for k, v in body.items())
        else:
            lines.insert(0, f"{_key(section)} = {_toml_value(body)}")
    return "\n".join(lines) + "\n"


def folder(tmp: Path) -> Path:
    """A workflow folder with data, a file beside it and a symlink that points out of it."""
    base = tmp / "study"
    (base / "data").mkdir(parents=True)
    (base / "data" / "colony.csv").write_text(TABLE)
    (tmp / "outside.csv").write_text(TABLE.replace("A1", "Z9"))
    (tmp / "elsewhere").mkdir()
    (tmp / "elsewhere" / "colony.csv").write_text(TABLE)
    os.symlink(tmp / "elsewhere", base / "link")
    return base


def check_workflow(path: Path, base: Path) -> str:
    """Load ``path``; assert the property; return the outcome."""
    try:
        wf = load_workflow(path)
    except ConfigError as exc:
        assert exc.file == str(path.resolve()), str(exc)
        assert str(path.resolve()) in str(exc)
        return "clear_error"
    root = base.resolve()
    assert wf.run_dir.is_relative_to(root) and wf.run_dir != root
    assert wf.tables and all(t.is_file() for t in wf.tables)
    assert all(math.isfinite(float(v)) for v in (wf.fit.bin_days, wf.fit.knot_days))
    return "result"


def _workflow_property(doc: dict, garbage: bytes | None) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        base = folder(Path(tmp))
        path = base / "wf.toml"
        path.write_bytes(garbage if garbage is not None else to_toml(doc).encode("utf-8"))
        try:
            outcome = check_workflow(path, base)
        except BaseException:
            record("workflow", "other")
            raise
        record("workflow", outcome)


@settings(max_examples=150, **SETTINGS)
@given(documents(), st.one_of(st.none(), st.none(), st.none(), st.binary(max_size=200)))
def test_generated_workflow_files_load_or_fail_clearly(doc, garbage):
    _workflow_property(doc, garbage)


@pytest.mark.slow
@settings(max_examples=3000, **SETTINGS)
@given(documents(), st.one_of(st.none(), st.binary(max_size=400)))
def test_generated_workflow_files_large_profile(doc, garbage):
    _workflow_property(doc, garbage)


def test_run_directories_that_escape_are_rejected(tmp_path):
    base = folder(tmp_path)
    for run_dir in ("../escape", "/tmp/nstress-abs", "a/../../b", ".", "link/run", "~/x"):
        path = base / "wf.toml"
        path.write_text(
            to_toml({"inputs": {"tables": "data/colony.csv"}, "outputs": {"run_dir": run_dir}})
        )
        with pytest.raises(ConfigError, match="is not inside the workflow's directory"):
            load_workflow(path)
        record("workflow_paths", "clear_error")


# ---------------------------------------------------------------- command line

WORDS = [
    "check",
    "init",
    "run",
    "render",
    "fit",
    "--out",
    "-o",
    "--quiet",
    "--verbose",
    "--force",
    "--workers",
    "0",
    "-1",
    "2",
    "--local-cluster",
    "--scheduler",
    "--draws",
    "--seed",
    "x",
    "--",
    "-",
    "",
]
PATHS = ["@table", "@bad", "@workflow", "@missing", "@dir", "@out", "@out/new.toml", "@empty"]


def _stub_units(mp: pytest.MonkeyPatch) -> None:
    """Replace the unit fit and the report with constructed files (no MCMC)."""
    import json as _json

    from fitdir_factory import make_fit_dir

    from nstress.products import report
    from nstress.workflow import pipeline, run

    def fit_tables(tables, out, config, log=None):
        make_fit_dir(Path(out))
        m = _json.loads((Path(out) / "manifest.json").read_text())
        m["input_hash"] = run_unit_hash(tables, config)
        (Path(out) / "manifest.json").write_text(_json.dumps(m))
        return m

    def run_unit_hash(tables, config):
        return pipeline.config_hash(
            [{"sha256": pipeline.sha256_file(t)} for t in tables], config.result_config()
        )

    def write_report(fit_dirs, out_dir, title=None):
        path = Path(out_dir) / "report.html"
        path.write_text("stub report")
        return path

    mp.setattr(pipeline, "fit_tables", fit_tables)
    mp.setattr(report, "write_report", write_report)
    # no worker processes or Dask clusters: they would not see the stubs
    mp.setattr(run, "_run_local", lambda jobs, workers, board: run._run_inline(jobs, board))
    mp.setattr(run, "_run_dask", lambda jobs, a, n, board: run._run_inline(jobs, board))


def _materialise(tokens: list[str], tmp: Path) -> list[str]:
    names = {
        "@table": tmp / "colony.csv",
        "@bad": tmp / "bad.csv",
        "@workflow": tmp / "wf.toml",
        "@missing": tmp / "missing.csv",
        "@dir": tmp / "adir",
        "@out": tmp / "out",
        "@out/new.toml": tmp / "out" / "new.toml",
        "@empty": tmp / "empty.csv",
    }
    return [str(names[t]) if t in names else t for t in tokens]


def _cli_files(tmp: Path) -> None:
    (tmp / "colony.csv").write_text(TABLE)
    (tmp / "bad.csv").write_text("individual,tissue,d15N\nA,plasma,abc\n")
    (tmp / "empty.csv").write_text("")
    (tmp / "adir").mkdir()
    (tmp / "wf.toml").write_text(
        '[inputs]\ntables = ["colony.csv"]\n[sampler]\ndraws = 5\ntune = 5\nchains = 1\n'
        '[outputs]\nrun_dir = "run"\n[execution]\nworkers = 0\n'
    )


_junk = st.one_of(st.sampled_from(WORDS), st.text(max_size=6))
_option = st.one_of(
    st.sampled_from(["--quiet", "--verbose", "--force"]).map(lambda o: [o]),
    st.tuples(
        st.sampled_from(["--out", "-o", "--workers", "--local-cluster", "--title", "--draws"]),
        st.one_of(st.sampled_from(PATHS), st.sampled_from(["0", "1", "-1", "2"]), _junk),
    ).map(list),
    _junk.map(lambda t: [t]),
)
argvs = st.tuples(st.lists(st.sampled_from(PATHS), max_size=2), st.lists(_option, max_size=3)).map(
    lambda t: [*t[0], *(w for o in t[1] for w in o)]
)
argvs = argvs.filter(lambda a: not any(t.startswith("--h") or t == "-h" for t in a))
commands = st.tuples(st.sampled_from(["check", "init", "run", "render"]), argvs)


def _cli_property(command: str, rest: list[str], capsys) -> None:
    from nstress.workflow.cli import main

    with tempfile.TemporaryDirectory() as tmp, pytest.MonkeyPatch.context() as mp:
        tmp_path = Path(tmp)
        _cli_files(tmp_path)
        mp.chdir(tmp_path)
        _stub_units(mp)
        argv = [command, *_materialise(rest, tmp_path)]
        try:
            code = main(argv)
        except BaseException:
            record("cli", "other")
            raise
        out = capsys.readouterr()
        assert code in (0, 1, 2), (argv, code)
        assert "Traceback" not in out.err + out.out
        if code != 0:
            assert "nstress: error:" in out.err or "usage:" in out.err, (argv, out.err)
        record("cli", "result" if code == 0 else "clear_error")


@settings(max_examples=120, **SETTINGS)
@given(commands)
def test_generated_command_lines_exit_cleanly(capsys, spec):
    _cli_property(spec[0], spec[1], capsys)


@pytest.mark.slow
@settings(max_examples=1000, **SETTINGS)
@given(commands)
def test_generated_command_lines_large_profile(capsys, spec):
    _cli_property(spec[0], spec[1], capsys)

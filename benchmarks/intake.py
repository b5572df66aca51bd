"""Intake benchmark: read, validate, prepare and place in time a large synthetic sample table.

Run by hand (not by the tests), e.g.::

    python benchmarks/intake.py --rows 1000000 --repeat 3 --out bench_intake

The table is invented (synthetic): many animals, each with whisker segments and, for half of
them, paired plasma and red-cell draws; every contract column; reference-material rows per
analysis batch; and a sprinkling of rows that end flagged or excluded (no isotope value, empty
rows, values outside the soft range, C:N off, replicate analyses that agree or disagree, exact
duplicate rows, ``NA`` spellings, typographic minus signs). It is written once as CSV to a
temporary directory.

Each repeat runs in its own child process, so that its peak memory (max RSS of the child) is
measured alone. A child times, separately:

* ``read``: bytes to stripped strings (``nstress.intake.files.read_raw``);
* ``validate``: parsing and checks (``nstress.intake.validate.check_table``);
* ``ledger_replicates``: the rest of ``read_samples`` (duplicates, ledger marks, replicates);
* ``read_samples``: the three together (``nstress.intake.read_samples``);
* ``ledger_frame``: ``Ledger.to_frame()``;
* ``prepare``: ``nstress.prep.prepare``;
* ``timebase``: ``nstress.prep.timebase.build_timebase`` on the samples not excluded;
* ``intake_prep``: ``read_samples`` + ``prepare``;

and a separate child times the whole ``nstress check TABLE --out DIR`` path in-process
(``check``), plus the same command as a fresh interpreter (``check_cli``, imports included).
Peak RSS per step comes from a sampling thread (psutil, when installed) and the child's
``ru_maxrss``. Writes ``intake.json`` to ``--out`` and a small table (best and median over the
repeats) to stdout.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

STEPS = (
    "read",
    "validate",
    "ledger_replicates",
    "read_samples",
    "ledger_frame",
    "prepare",
    "intake_prep",
    "timebase",
)


# ---------------------------------------------------------------- synthetic table


def make_table(n_rows: int, seed: int = 1):  # noqa: C901 - one linear recipe
    """Return an invented (synthetic) sample table of about ``n_rows`` rows as a DataFrame."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    n_seg, n_draw = 30, 13
    per_animal = n_seg + n_draw  # half of the animals have 2 * 13 blood rows
    n_animals = max(int(n_rows / per_animal), 2)
    groups = np.array([f"colony_{g:02d}" for g in range(12)])
    animal = np.array([f"SYN{a:06d}" for a in range(n_animals)])
    a_group = groups[rng.integers(0, len(groups), n_animals)]
    a_collected = np.datetime64("2023-01-01") + rng.integers(0, 900, n_animals).astype(
        "timedelta64[D]"
    )
    a_level_n = rng.normal(14.0, 1.5, n_animals)
    a_level_c = rng.normal(-17.0, 1.0, n_animals)
    a_blood = rng.random(n_animals) < 0.5

    # whisker segments
    ia = np.repeat(np.arange(n_animals), n_seg)
    seg = np.tile(np.arange(n_seg), n_animals)
    ker = {
        "individual": animal[ia],
        "tissue": np.full(ia.size, "whisker"),
        "d15N": a_level_n[ia] + 0.3 * np.sin(seg / 4.0) + rng.normal(0, 0.15, ia.size),
        "d13C": a_level_c[ia] + rng.normal(0, 0.15, ia.size),
        "position_mm": seg + 0.5,
        "segment_length_mm": np.ones(ia.size),
        "collected": a_collected[ia].astype(str),
        "date": np.full(ia.size, ""),
        "group": a_group[ia],
        "sample_id": np.char.add(np.char.add(animal[ia], "-W-"), seg.astype(str)),
        "pct_C": rng.normal(45.0, 1.0, ia.size),
        "pct_N": rng.normal(15.0, 0.4, ia.size),
        "lipid_extracted": np.where(rng.random(ia.size) < 0.5, "true", "false"),
    }
    # blood draws: plasma and rbc on the same days
    ba = np.flatnonzero(a_blood)
    ib = np.repeat(ba, 2 * n_draw)
    k = np.tile(np.arange(2 * n_draw), ba.size)
    day = a_collected[ib] - (10 * (k // 2)).astype("timedelta64[D]")
    tissue = np.where(k % 2 == 0, "plasma", "rbc")
    pct_c = rng.normal(44.0, 2.0, ib.size)
    bl = {
        "individual": animal[ib],
        "tissue": tissue,
        "d15N": a_level_n[ib] + 1.0 + rng.normal(0, 0.15, ib.size),
        "d13C": a_level_c[ib] + 0.5 + rng.normal(0, 0.15, ib.size),
        "position_mm": np.full(ib.size, np.nan),
        "segment_length_mm": np.full(ib.size, np.nan),
        "collected": np.full(ib.size, ""),
        "date": day.astype(str),
        "group": a_group[ib],
        "sample_id": np.char.add(np.char.add(animal[ib], "-" + tissue + "-"), (k // 2).astype(str)),
        "pct_C": pct_c,
        "pct_N": pct_c / rng.normal(3.6, 0.25, ib.size) * 14.007 / 12.011,
        "lipid_extracted": np.full(ib.size, ""),
    }
    t = pd.concat([pd.DataFrame(ker), pd.DataFrame(bl)], ignore_index=True)
    n = len(t)
    t = t.iloc[rng.permutation(n)].reset_index(drop=True)  # rows arrive in no special order
    t["analysis_batch"] = np.char.add("run", (np.arange(n) // 5000).astype(str))
    t["sd_d15N"] = ""
    t["sd_d13C"] = ""
    t["cn_ratio"] = ""
    t["mass_kg"] = np.round(rng.normal(35.0, 5.0, n), 1).astype(str)
    t["comment"] = np.where(rng.random(n) < 0.02, "re-run, capsule resealed", "")

    # numbers as text, so that cells can carry the odd spellings labs use
    def fmt(x: np.ndarray, digits: int) -> np.ndarray:
        s = np.round(x, digits).astype(str)
        return np.where(np.isnan(x), "", s)

    for c, digits in (("d15N", 2), ("d13C", 2), ("pct_C", 2), ("pct_N", 2)):
        t[c] = fmt(t[c].to_numpy(float), digits)
    for c in ("position_mm", "segment_length_mm"):
        t[c] = fmt(t[c].to_numpy(float), 1)
    ones = np.flatnonzero(rng.random(n) < 0.3)
    t.loc[ones, "sd_d15N"] = "0.2"
    t.loc[ones, "sd_d13C"] = "0.2"

    def pick(frac: float) -> np.ndarray:
        return np.flatnonzero(rng.random(n) < frac)

    t.loc[pick(0.002), ["d15N", "d13C"]] = ""  # excluded: no isotope value
    t.loc[pick(0.002), "d13C"] = "NA"  # one isotope only
    t.loc[pick(0.001), "d15N"] = "n/a"
    t.loc[pick(0.002), "d15N"] = "31.5"  # flagged: outside the soft range
    cn_bad = pick(0.003)  # flagged: C:N in the table disagrees with %C/%N
    t.loc[cn_bad, "cn_ratio"] = "4.1"
    minus = pick(0.0005)  # typographic minus sign
    t.loc[minus, "d13C"] = t.loc[minus, "d13C"].str.replace("-", "\u2212")
    empty = pick(0.0003)  # excluded: every cell empty
    t.loc[empty, :] = ""

    # replicate analyses (own sample_id) and exact duplicate rows (same sample_id)
    rep = t.iloc[pick(0.01)].copy()
    rep = rep[rep["individual"] != ""]
    rep["sample_id"] = rep["sample_id"] + "-rep"
    d = pd.to_numeric(rep["d15N"], errors="coerce")
    shift = np.where(rng.random(len(rep)) < 0.1, 2.0, 0.05)  # some disagree
    rep["d15N"] = np.where(d.notna(), np.round(d + shift, 2).astype(str), rep["d15N"])
    dup = t.iloc[pick(0.001)].copy()
    dup = dup[dup["individual"] != ""]

    # reference materials: two anchors and one check standard per batch
    batches = np.unique(t["analysis_batch"][t["analysis_batch"] != ""])
    refs = []
    for rm, role, n15, c13 in (
        ("USGS40", "anchor", -4.52, -26.39),
        ("USGS41a", "anchor", 47.55, 36.55),
        ("IAEA-600", "check", 1.0, -27.77),
    ):
        for _ in range(3):
            refs.append(
                pd.DataFrame(
                    {
                        "analysis_batch": batches,
                        "reference_material": rm,
                        "reference_role": role,
                        "d15N": fmt(n15 * 1.01 + 0.2 + rng.normal(0, 0.1, batches.size), 2),
                        "d13C": fmt(c13 * 0.99 - 0.1 + rng.normal(0, 0.1, batches.size), 2),
                        "sample_id": np.char.add(f"{rm}-", batches.astype(str)),
                    }
                )
            )
    ref = pd.concat(refs, ignore_index=True)
    ref["sample_id"] = ""  # standards are repeated under one name: no sample_id rule
    out = pd.concat([t, rep, dup, ref], ignore_index=True, sort=False).fillna("")
    extra = ["sd_d15N", "sd_d13C", "cn_ratio", "mass_kg", "analysis_batch"]
    cols = list(ker) + extra + ["reference_material", "reference_role", "comment"]
    return out[cols]


def write_table(n_rows: int, seed: int, directory: Path) -> Path:
    """Write the synthetic table as CSV (cached by size and seed) and return its path."""
    path = directory / f"synthetic_samples_{n_rows}_{seed}.csv"
    if not path.exists():
        t0 = time.perf_counter()
        table = make_table(n_rows, seed)
        tmp = path.with_suffix(".part")
        table.to_csv(tmp, index=False)
        tmp.replace(path)
        print(
            f"wrote {path} ({len(table)} rows, {path.stat().st_size / 1e6:.0f} MB) "
            f"in {time.perf_counter() - t0:.1f} s",
            file=sys.stderr,
        )
    return path


# ---------------------------------------------------------------- memory sampling


class RSSSampler:
    """Peak resident memory per labelled step, from a sampling thread (psutil when installed)."""

    def __init__(self, interval: float = 0.005) -> None:
        try:
            import psutil
        except ImportError:
            self._proc = None
        else:
            self._proc = psutil.Process()
        self.interval = interval
        self.label = "start"
        self.peaks: dict[str, float] = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _rss(self) -> float:
        return self._proc.memory_info().rss / 2**20 if self._proc is not None else float("nan")

    def _run(self) -> None:
        while not self._stop.is_set():
            r = self._rss()
            lab = self.label
            self.peaks[lab] = max(self.peaks.get(lab, 0.0), r)
            time.sleep(self.interval)

    def __enter__(self) -> RSSSampler:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()

    @contextlib.contextmanager
    def step(self, label: str):
        self.label = label
        self.peaks[label] = max(self.peaks.get(label, 0.0), self._rss())
        yield
        self.peaks[label] = max(self.peaks.get(label, 0.0), self._rss())
        self.label = "between"


def _max_rss_mb() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return r / 2**20 if sys.platform == "darwin" else r / 2**10


# ---------------------------------------------------------------- children


def child_steps(table: Path) -> dict:
    t0 = time.perf_counter()
    import nstress.intake.read as read_mod
    from nstress.intake import read_samples
    from nstress.prep import prepare
    from nstress.prep.timebase import build_timebase

    rec: dict = {"import_s": time.perf_counter() - t0, "rss_after_import_mb": _max_rss_mb()}
    inner = {"read": 0.0, "validate": 0.0}
    cpu: dict[str, float] = {}  # CPU time of the process (all threads): less noisy when shared

    def timed(name, func):
        def wrapper(*a, **k):
            t = time.perf_counter()
            try:
                return func(*a, **k)
            finally:
                inner[name] += time.perf_counter() - t

        return wrapper

    read_mod.read_raw = timed("read", read_mod.read_raw)
    read_mod.check_table = timed("validate", read_mod.check_table)
    with RSSSampler() as mem:
        with mem.step("read_samples"):
            t, c = time.perf_counter(), time.process_time()
            intake = read_samples(str(table))
            rec["read_samples"] = time.perf_counter() - t
            cpu["read_samples"] = time.process_time() - c
        rec["read"], rec["validate"] = inner["read"], inner["validate"]
        rec["ledger_replicates"] = rec["read_samples"] - rec["read"] - rec["validate"]
        with mem.step("prepare"):
            t, c = time.perf_counter(), time.process_time()
            prepared = prepare(intake, tissues=intake.tissues)
            rec["prepare"] = time.perf_counter() - t
            cpu["prepare"] = time.process_time() - c
        rec["intake_prep"] = rec["read_samples"] + rec["prepare"]
        cpu["intake_prep"] = cpu["read_samples"] + cpu["prepare"]
        rec["rss_intake_prep_mb"] = _max_rss_mb()
        with mem.step("ledger_frame"):
            t = time.perf_counter()
            frame = prepared.ledger.to_frame()
            rec["ledger_frame"] = time.perf_counter() - t
        with mem.step("timebase"):
            t, c = time.perf_counter(), time.process_time()
            used = prepared.samples
            used = used[~used["key"].isin(prepared.ledger.excluded_keys())]
            tb = build_timebase(used, prepared.tissues)
            rec["timebase"] = time.perf_counter() - t
            cpu["timebase"] = time.process_time() - c
    rec["cpu_s"] = cpu
    rec["rss_peak_mb"] = _max_rss_mb()
    rec["rss_by_step_mb"] = mem.peaks
    status = frame["status"].value_counts()
    rec["rows"] = int(len(frame))
    rec["status"] = {k: int(v) for k, v in status.items()}
    rec["samples"] = int(len(prepared.samples))
    rec["individuals"] = int(tb.n_individuals)
    rec["bins_padded"] = int(tb.T)
    return rec


def child_check(table: Path) -> dict:
    t0 = time.perf_counter()
    from nstress.workflow.cli import main

    rec: dict = {"import_s": time.perf_counter() - t0}
    with tempfile.TemporaryDirectory() as out:
        buf = io.StringIO()
        t = time.perf_counter()
        with contextlib.redirect_stdout(buf):
            code = main(["check", str(table), "--out", out])
        rec["check"] = time.perf_counter() - t
        rec["exit_code"] = code
    rec["rss_peak_mb"] = _max_rss_mb()
    return rec


def _run_child(kind: str, table: Path) -> dict:
    cmd = [sys.executable, __file__, f"--child-{kind}", str(table)]
    res = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if res.returncode != 0:
        raise RuntimeError(f"child {kind} failed:\n{res.stderr}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def _run_cli(table: Path) -> dict:
    with tempfile.TemporaryDirectory() as out:
        t = time.perf_counter()
        res = subprocess.run(
            [sys.executable, "-m", "nstress", "check", str(table), "--out", out, "--quiet"],
            capture_output=True,
            text=True,
            check=False,
            cwd=out,  # not the checkout: `-m` would import nstress from the working directory
        )
        return {"check_cli": time.perf_counter() - t, "exit_code": res.returncode}


# ---------------------------------------------------------------- main


def _stats(values: list[float]) -> dict:
    return {"best": min(values), "median": statistics.median(values), "all": values}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=int, default=1_000_000, help="about this many rows")
    p.add_argument("--repeat", type=int, default=3, help="child processes per measurement")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--tmp", type=Path, default=None, help="where to write the table (cached)")
    p.add_argument("--out", type=Path, default=Path("bench_intake"), help="directory for JSON")
    p.add_argument("--label", default="", help="free text stored in the JSON (e.g. 'before')")
    p.add_argument("--no-check", action="store_true", help="skip the `nstress check` children")
    p.add_argument("--child-steps", type=Path, help=argparse.SUPPRESS)
    p.add_argument("--child-check", type=Path, help=argparse.SUPPRESS)
    p.add_argument("--child-write", type=Path, help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.child_write is not None:
        write_table(a.rows, a.seed, a.child_write)
        return 0
    if a.child_steps is not None:
        print(json.dumps(child_steps(a.child_steps)))
        return 0
    if a.child_check is not None:
        print(json.dumps(child_check(a.child_check)))
        return 0

    tmp = a.tmp or Path(tempfile.gettempdir()) / "nstress_bench_intake"
    tmp.mkdir(parents=True, exist_ok=True)
    table = tmp / f"synthetic_samples_{a.rows}_{a.seed}.csv"
    if not table.exists():  # in a child, so that this process stays small (ru_maxrss is
        # inherited across fork and exec, which would inflate the children's figures)
        cmd = [sys.executable, __file__, "--child-write", str(tmp), "--rows", str(a.rows)]
        subprocess.run(cmd + ["--seed", str(a.seed)], check=True)
    runs, checks, clis = [], [], []
    for i in range(a.repeat):
        runs.append(_run_child("steps", table))
        print(f"repeat {i + 1}: intake+prep {runs[-1]['intake_prep']:.2f} s", file=sys.stderr)
        if not a.no_check:
            checks.append(_run_child("check", table))
            clis.append(_run_cli(table))
    steps = {s: _stats([r[s] for r in runs]) for s in STEPS}
    cpu = {s: _stats([r["cpu_s"][s] for r in runs]) for s in runs[0]["cpu_s"]}
    if checks:
        steps["check"] = _stats([c["check"] for c in checks])
        steps["check_cli"] = _stats([c["check_cli"] for c in clis])
    peak = {
        "intake_prep_max_rss_mb": max(r["rss_intake_prep_mb"] for r in runs),
        "with_timebase_max_rss_mb": max(r["rss_peak_mb"] for r in runs),
        "after_import_rss_mb": max(r["rss_after_import_mb"] for r in runs),
        "sampled_peak_mb": max(max(r["rss_by_step_mb"].values()) for r in runs),
        "by_step_sampled_mb": runs[-1]["rss_by_step_mb"],
        "check_max_rss_mb": max((c["rss_peak_mb"] for c in checks), default=None),
    }
    result = {
        "label": a.label,
        "table": {"path": str(table), "bytes": table.stat().st_size, "seed": a.seed},
        "rows": runs[0]["rows"],
        "samples": runs[0]["samples"],
        "individuals": runs[0]["individuals"],
        "bins_padded": runs[0]["bins_padded"],
        "status": runs[0]["status"],
        "repeat": a.repeat,
        "seconds": steps,
        "cpu_seconds": cpu,
        "load_average": os.getloadavg(),
        "peak_memory": peak,
        "check_exit_codes": [c["exit_code"] for c in checks],
        "machine": {"cpus": os.cpu_count(), "python": platform.python_version()},
        "time": time.strftime("%Y-%m-%dT%H:%M:%S"),
    }
    a.out.mkdir(parents=True, exist_ok=True)
    path = a.out / "intake.json"
    path.write_text(json.dumps(result, indent=2))
    print(f"{result['rows']} rows, {result['samples']} samples, {result['individuals']} animals")
    print(f"rows by status: {result['status']}")
    print(f"{'step':<20}{'best s':>10}{'median s':>10}{'cpu best s':>12}")
    for s, v in steps.items():
        c = f"{cpu[s]['best']:>12.2f}" if s in cpu else ""
        print(f"{s:<20}{v['best']:>10.2f}{v['median']:>10.2f}{c}")
    print(f"load average at the end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")
    print(
        f"peak RSS: intake+prep {peak['intake_prep_max_rss_mb']:.0f} MB, "
        f"with timebase {peak['with_timebase_max_rss_mb']:.0f} MB, "
        f"check {peak['check_max_rss_mb'] or float('nan'):.0f} MB "
        f"(after imports {peak['after_import_rss_mb']:.0f} MB)"
    )
    print(f"wrote {path}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Workflow runs: split the input into units, fit each unit, merge the products.

A run directory looks like::

    RUN_DIR/
      units/<unit>/        one finished fit directory per unit (fit_tables)
      ledger.csv           every input row (the whole input, read once)
      screening.csv        the units' screening tables, with a ``unit`` column
      timelines.csv        the units' timelines, with a ``unit`` column
      trophic_position.csv the units' amino-acid trophic positions (when any unit has them)
      report.html, figures/  one merged report
      manifest.json        written last: inputs, configuration, seeds, units

A unit is one ``group`` (the whole input is read and prepared, the unit
fits that group's animals) or one input table. Its seed is derived from the
workflow's seed and the unit's name, so results do not depend on the order
or the place units run in. A unit whose ``manifest.json`` carries the hash
of its current inputs and result settings is finished and is skipped on a
rerun (``force`` refits it). Units run in local worker processes (spawned,
with thread caps so that workers × chains stay within the cores), in this
process (``workers = 0``), or on a Dask cluster; they return their results
as files in the run directory, which workers must therefore share.

This module imports no numerical package at import time.
"""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import fcntl
import hashlib
import json
import os
import re
import time
import traceback
import uuid
import warnings
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from nstress import __version__
from nstress.atomic import OutputError, atomic_write, atomic_write_text
from nstress.errors import EXIT_FIT_FAILED, EXIT_OK, ConfigError, InputError, NstressError
from nstress.workflow.config import Workflow
from nstress.workflow.pipeline import FINISHED_MARK, FitConfig, config_hash, sha256_file, versions

UNITS_DIR = "units"
UNIT_LOG = "unit.log"
THREAD_VARS = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "NUMEXPR_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
)
XLA_ONE_THREAD = "--xla_cpu_multi_thread_eigen=false intra_op_parallelism_threads=1"
MERGED = ("screening.csv", "timelines.csv")
MERGED_OPTIONAL = ("trophic_position.csv",)
"""Merged when a unit wrote them (amino-acid data)."""
LOCK_FILE = ".nstress-run.lock"
WORKER_DIED = "the worker process died while fitting this unit"


# ---------------------------------------------------------------- units


@dataclass(frozen=True)
class Unit:
    """One independent fit of a run.

    Attributes
    ----------
    name
        The group or the table's file name.
    dirname
        Its sub-directory under ``units/`` (safe characters only).
    tables
        Input tables (absolute paths).
    group
        The group fitted, or ``None`` (the whole table).
    seed
        Derived from the workflow seed and ``name``.
    """

    name: str
    dirname: str
    tables: tuple[str, ...]
    group: str | None
    seed: int


def unit_seed(seed: int, name: str) -> int:
    """Derive a unit's seed from the workflow seed and the unit's name (not its position).

    Parameters
    ----------
    seed
        The workflow's seed.
    name
        The unit's name.

    Returns
    -------
    int
        A seed in ``[0, 2**31)``.
    """
    digest = hashlib.sha256(f"{int(seed)}\x00{name}".encode()).digest()
    return int.from_bytes(digest[:8], "big") % (2**31)


def safe_dirname(name: str, used: set[str]) -> str:
    """Return a directory name for ``name`` that cannot leave its parent and is not in ``used``."""
    base = re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._-") or "unit"
    out, k = base, 2
    while out.lower() in used:
        out, k = f"{base}-{k}", k + 1
    used.add(out.lower())
    return out


@dataclass
class Inspection:
    """The whole input, read and prepared once before any unit runs."""

    groups: list[str]
    ledger: Any
    sources: list[dict[str, Any]]
    n_rows: int


def inspect_inputs(wf: Workflow) -> Inspection:
    """Read, validate and prepare every input table (nothing is written).

    Parameters
    ----------
    wf
        The workflow.

    Returns
    -------
    Inspection

    Raises
    ------
    InputError, ConfigError
        The input is unusable (file, row and column named).
    """
    from nstress.intake import read_samples
    from nstress.prep import prepare
    from nstress.tissues import resolve_tissues

    tissues = resolve_tissues(wf.fit.tissues)
    intake = read_samples([str(t) for t in wf.tables], tissues=tissues)
    prepared = prepare(intake, tissues=tissues, config=wf.fit.qc or None)
    excluded = set(prepared.ledger.excluded_keys().tolist())
    used = prepared.samples[~prepared.samples["key"].isin(excluded)]
    if len(used) == 0:
        raise InputError("no usable sample in the workflow's tables (see `nstress check`)")
    return Inspection(
        groups=sorted(map(str, used["group"].unique())),
        ledger=prepared.ledger,
        sources=intake.sources,
        n_rows=len(prepared.ledger),
    )


def plan_units(wf: Workflow, groups: list[str]) -> list[Unit]:
    """Return the units of a run, in a fixed order (groups or tables sorted as given).

    Parameters
    ----------
    wf
        The workflow.
    groups
        The groups with usable samples (for ``split = "group"``).

    Returns
    -------
    list of Unit
    """
    used: set[str] = set()
    tables = tuple(str(t) for t in wf.tables)
    if wf.split == "group":
        return [Unit(g, safe_dirname(g, used), tables, g, unit_seed(wf.seed, g)) for g in groups]
    units = []
    for t in wf.tables:
        name = Path(t).stem
        dirname = safe_dirname(name, used)
        units.append(Unit(name, dirname, (str(t),), None, unit_seed(wf.seed, name)))
    return units


def unit_config(wf: Workflow, unit: Unit, cores: int | None = None) -> FitConfig:
    """Return a unit's :class:`FitConfig`: the workflow's, with the unit's group and seed."""
    return dataclasses.replace(
        wf.fit, group=unit.group, sampler={**wf.fit.sampler, "seed": unit.seed}, cores=cores
    )


def unit_hash(unit: Unit, config: FitConfig) -> str:
    """Return the hash ``fit_tables`` records for a unit (inputs' sha256s, result settings)."""
    return config_hash([{"sha256": sha256_file(t)} for t in unit.tables], config.result_config())


def finished_hash(unit_dir: Path) -> str | None:
    """Return the ``input_hash`` of a finished unit directory (``None``: not finished)."""
    try:
        return json.loads((unit_dir / FINISHED_MARK).read_text()).get("input_hash")
    except (OSError, ValueError, AttributeError):
        return None


def damaged_files(unit_dir: Path) -> list[str]:
    """Return what is wrong with a finished unit's files (empty: intact).

    The files its manifest lists must exist, be non-empty, and the NetCDF
    ones (``posterior.nc``, ``timelines.nc``) must open as HDF5 (a truncated
    or overwritten file does not).

    Parameters
    ----------
    unit_dir
        A unit directory with a ``manifest.json``.

    Returns
    -------
    list of str
        One line per damaged or missing file.
    """
    try:
        manifest = json.loads((unit_dir / FINISHED_MARK).read_text())
        files = [str(f) for f in manifest.get("files", [])]
    except (OSError, ValueError, AttributeError, TypeError):
        return [f"{FINISHED_MARK} unreadable"]
    problems = []
    for name in files:
        path = unit_dir / name
        if Path(name).name != name or name == FINISHED_MARK or path.is_dir():
            continue  # plain file names the fit wrote (figures/ is re-renderable)
        if not path.is_file() or path.stat().st_size == 0:
            problems.append(f"{name} missing or empty")
        elif path.suffix == ".nc":
            problem = _netcdf_problem(path)
            if problem:
                problems.append(f"{name} unreadable ({problem})")
    return problems


def _netcdf_problem(path: Path) -> str | None:
    """Open ``path`` as HDF5 (what h5netcdf writes); return the error, or ``None``."""
    try:
        import h5py
    except ImportError:  # pragma: no cover - h5netcdf depends on h5py
        return None
    try:
        with h5py.File(path, "r") as f:
            list(f.keys())
    except Exception as exc:  # noqa: BLE001 - h5py raises OSError and others for damage
        return f"{type(exc).__name__}: {exc}".splitlines()[0][:200]
    return None


def unlink_output(path: Path) -> None:
    """Remove an output file if it is there; a failure is an :class:`OutputError`."""
    try:
        path.unlink(missing_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot write {path.parent}: {exc.strerror or exc}") from exc


class RunDirectoryBusy(NstressError):
    """Another ``nstress run`` holds the run directory's lock."""

    exit_code = 2


@contextlib.contextmanager
def run_lock(run_dir: Path) -> Iterator[Path]:
    """Hold an exclusive lock on ``run_dir`` for the length of a run.

    The lock is an ``fcntl.flock`` on ``RUN_DIR/.nstress-run.lock``, which
    holds the owner's pid. The kernel releases it when the owner exits, even
    when it is killed, so a lock file left behind by a dead run is stale and
    is simply taken over; the file itself is never removed (removing it
    would let two runs lock two different files).

    Parameters
    ----------
    run_dir
        The run directory (created).

    Yields
    ------
    pathlib.Path
        The lock file.

    Raises
    ------
    RunDirectoryBusy
        Another live process holds the lock ("run directory is in use by pid N").
    OutputError
        The directory cannot be created or written.
    """
    path = run_dir / LOCK_FILE
    try:
        run_dir.mkdir(parents=True, exist_ok=True)
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError as exc:
        raise OutputError(f"cannot write {run_dir}: {exc.strerror or exc}") from exc
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as exc:
        holder = os.pread(fd, 64, 0).decode("ascii", "replace").strip() or "unknown"
        os.close(fd)
        if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
            raise RunDirectoryBusy(
                f"run directory {run_dir} is in use by pid {holder}; wait for that run to "
                f"finish, or give another directory with --out"
            ) from None
        raise OutputError(f"cannot lock {path}: {exc.strerror or exc}") from exc
    try:
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()}\n".encode(), 0)
        yield path
    finally:
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)


# ---------------------------------------------------------------- one unit (in a worker)


@contextlib.contextmanager
def thread_env(threads: int) -> Iterator[None]:
    """Set the thread-count variables of BLAS/OpenMP/XLA for processes started inside.

    Parameters
    ----------
    threads
        Threads per process.
    """
    wanted = {v: str(threads) for v in THREAD_VARS}
    if "XLA_FLAGS" not in os.environ:
        wanted["XLA_FLAGS"] = XLA_ONE_THREAD
    old = {k: os.environ.get(k) for k in wanted}
    os.environ.update(wanted)
    try:
        yield
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def clear_partial(unit_dir: Path) -> None:
    """Remove temporary files an interrupted fit left in ``unit_dir``."""
    for tmp in unit_dir.glob(".*.tmp"):
        tmp.unlink(missing_ok=True)


def execute_unit(job: dict[str, Any]) -> dict[str, Any]:
    """Fit one unit into its directory; run in a worker process (local or Dask).

    Parameters
    ----------
    job
        Plain data: ``unit`` (name), ``tables``, ``out`` (the unit
        directory), ``config`` (a :class:`FitConfig` as a dict), ``threads``.

    Returns
    -------
    dict
        ``unit``, ``status`` (``"fitted"`` or ``"failed"``), ``error``,
        ``seconds``. The results themselves are the files in ``out``.
    """
    out = Path(job["out"])
    t0 = time.perf_counter()
    try:
        out.mkdir(parents=True, exist_ok=True)
        clear_partial(out)
        fh = open(out / UNIT_LOG, "a", encoding="utf-8")  # noqa: SIM115 - closed below
    except OSError as exc:
        error = f"cannot write {out}: {exc.strerror or exc}"
        return {"unit": job["unit"], "status": "failed", "error": error, "seconds": _since(t0)}
    for var in THREAD_VARS:  # for libraries this process has not loaded yet (Dask workers)
        os.environ.setdefault(var, str(job["threads"]))
    os.environ.setdefault("XLA_FLAGS", XLA_ONE_THREAD)
    with fh:

        def log(message: str) -> None:
            fh.write(f"{time.strftime('%Y-%m-%dT%H:%M:%S')} {message}\n")
            fh.flush()

        def to_log(message: Any, category: type, *args: Any, **kwargs: Any) -> None:
            log(f"warning: {category.__name__}: {message}")

        log(f"unit {job['unit']}: fitting {len(job['tables'])} table(s), pid {os.getpid()}")
        try:
            from threadpoolctl import threadpool_limits

            with warnings.catch_warnings(), threadpool_limits(limits=job["threads"]):
                warnings.showwarning = to_log
                from nstress.workflow.pipeline import fit_tables

                manifest = fit_tables(job["tables"], out, FitConfig(**job["config"]), log=log)
        except Exception as exc:  # noqa: BLE001 - a unit's failure is reported, not raised
            log(traceback.format_exc())
            error = str(exc) if isinstance(exc, NstressError) else f"{type(exc).__name__}: {exc}"
            return {"unit": job["unit"], "status": "failed", "error": error, "seconds": _since(t0)}
        log(f"finished in {_since(t0):.1f} s")
    ok = bool(manifest["diagnostics"]["ok"])
    return {"unit": job["unit"], "status": "fitted", "diagnostics_ok": ok, "seconds": _since(t0)}


def _since(t0: float) -> float:
    return round(time.perf_counter() - t0, 3)


# ---------------------------------------------------------------- progress


class Board:
    """rich progress on stderr: one row per unit and one overall; log lines above them.

    Parameters
    ----------
    units
        Unit names.
    quiet
        Show nothing.
    verbose
        Show ``detail`` log lines as well.
    """

    def __init__(self, units: list[str], quiet: bool = False, verbose: bool = False) -> None:
        from rich.console import Console
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            Progress,
            SpinnerColumn,
            TextColumn,
            TimeElapsedColumn,
        )

        self.quiet, self.verbose = quiet, verbose
        self.console = Console(stderr=True, quiet=quiet, highlight=False)
        self.progress = Progress(
            SpinnerColumn(),
            TextColumn("{task.description}"),
            BarColumn(),
            MofNCompleteColumn(),
            TimeElapsedColumn(),
            console=self.console,
            disable=quiet,
        )
        self.overall = self.progress.add_task("all units", total=len(units))
        self.rows = {u: self.progress.add_task(f"{u}: queued", total=1, start=False) for u in units}

    def __enter__(self) -> Board:
        self.progress.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.progress.stop()

    def log(self, message: str, *, detail: bool = False) -> None:
        """Print ``message`` (``detail`` lines only when verbose)."""
        if self.quiet or (detail and not self.verbose):
            return
        self.console.print(f"nstress: {message}", markup=False)

    def start(self, unit: str) -> None:
        """Mark ``unit`` as running."""
        self.progress.start_task(self.rows[unit])
        self.progress.update(self.rows[unit], description=f"{unit}: fitting")

    def finish(self, unit: str, status: str) -> None:
        """Mark ``unit`` as done with ``status``."""
        self.progress.start_task(self.rows[unit])
        self.progress.update(self.rows[unit], completed=1, description=f"{unit}: {status}")
        self.progress.advance(self.overall)


# ---------------------------------------------------------------- executors


def cpu_count() -> int:
    """Cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def plan_threads(
    workers: int | None, threads: int | None, chains: int, n_jobs: int, cpus: int
) -> tuple[int, int]:
    """Choose worker processes and threads per worker so that workers × chains ≤ cores.

    Parameters
    ----------
    workers, threads
        The execution settings (``None``: choose).
    chains
        Chains per fit.
    n_jobs
        Units to fit.
    cpus
        Available cores.

    Returns
    -------
    tuple of int
        ``(workers, threads)``; ``workers == 0`` means in this process.
    """
    if workers is None:
        workers = max(1, cpus // max(chains, 1))
    if workers > 0:
        workers = max(1, min(workers, n_jobs))
    threads = threads or max(1, cpus // max(workers, 1))
    return workers, threads


def _run_inline(jobs: list[dict[str, Any]], board: Board) -> list[dict[str, Any]]:
    results = []
    for job in jobs:
        board.start(job["unit"])
        results.append(execute_unit(job))
        _report(results[-1], board)
    return results


def _run_local(jobs: list[dict[str, Any]], workers: int, board: Board) -> list[dict[str, Any]]:
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    results = []
    broken: list[dict[str, Any]] = []  # jobs lost when a worker died and broke the pool
    context = multiprocessing.get_context("spawn")
    with thread_env(jobs[0]["threads"]):
        pool = ProcessPoolExecutor(workers, mp_context=context)
        try:
            pending = {pool.submit(execute_unit, job): job for job in jobs}
            for job in jobs[:workers]:
                board.start(job["unit"])
            queued = [j["unit"] for j in jobs[workers:]]
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    job = pending.pop(fut)
                    if isinstance(fut.exception(), BrokenProcessPool):
                        broken.append(job)
                        continue
                    results.append(_result(fut, job))
                    _report(results[-1], board)
                    if queued:
                        board.start(queued.pop(0))
        except BaseException:
            pool.shutdown(wait=False, cancel_futures=True)
            raise
        pool.shutdown()
        # one dead worker fails every unit in flight: refit each alone, so that only
        # the unit whose own worker dies is reported failed
        for job in broken:
            board.start(job["unit"])
            results.append(_run_alone(job, context))
            _report(results[-1], board)
    return results


def _run_alone(job: dict[str, Any], context: Any) -> dict[str, Any]:
    """Run one job in a fresh worker process; its death fails this job only."""
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    with ProcessPoolExecutor(1, mp_context=context) as pool:
        fut = pool.submit(execute_unit, job)
        try:
            return fut.result()
        except BrokenProcessPool:
            return {"unit": job["unit"], "status": "failed", "error": WORKER_DIED, "seconds": None}
        except Exception:  # noqa: BLE001 - reported as the unit's failure
            return _result(fut, job)


def _run_dask(
    jobs: list[dict[str, Any]], address: str | None, n_local: int | None, board: Board
) -> list[dict[str, Any]]:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise ConfigError(
            "Dask execution needs the 'distributed' package (pip install nstress[dask])",
            key="execution.scheduler",
        ) from None
    with contextlib.ExitStack() as stack:
        if n_local:
            board.log(f"starting a Dask LocalCluster with {n_local} worker(s)")
            with thread_env(jobs[0]["threads"]):
                cluster = stack.enter_context(
                    LocalCluster(
                        n_workers=n_local,
                        threads_per_worker=1,
                        processes=True,
                        host="127.0.0.1",
                        dashboard_address=None,
                    )
                )
            client = stack.enter_context(Client(cluster))
        else:
            try:
                client = stack.enter_context(Client(address, timeout="20s"))
            except (OSError, TimeoutError) as exc:
                raise ConfigError(
                    f"cannot reach the Dask scheduler at {address} ({exc})",
                    key="execution.scheduler",
                ) from None
            board.log(f"submitting {len(jobs)} unit(s) to the Dask scheduler at {address}")
        futures = {}
        for job in jobs:
            key = f"nstress-{job['dirname']}-{uuid.uuid4().hex[:8]}"  # never shared by runs
            fut = client.submit(execute_unit, job, key=key, pure=False)
            futures[fut] = job
            board.start(job["unit"])
        results = []
        for fut in as_completed(list(futures)):
            results.append(_result(fut, futures[fut]))
            _report(results[-1], board)
    return results


def _result(fut: Any, job: dict[str, Any]) -> dict[str, Any]:
    """Return a finished future's result; a lost worker becomes a failed unit."""
    try:
        return fut.result()
    except Exception as exc:  # noqa: BLE001 - the worker itself died or the task was lost
        return {
            "unit": job["unit"],
            "status": "failed",
            "error": f"worker failed: {type(exc).__name__}: {exc}",
            "seconds": None,
        }


def _report(result: dict[str, Any], board: Board) -> None:
    unit, status = result["unit"], result["status"]
    if status == "failed":
        board.finish(unit, "FAILED")
        board.log(f"unit {unit} failed: {result['error']}")
        return
    ok = result.get("diagnostics_ok", True)
    board.finish(unit, "done" if ok else "done, diagnostics failed")
    board.log(f"unit {unit} fitted in {result['seconds']:.0f} s", detail=True)


# ---------------------------------------------------------------- the run


@dataclass
class RunOutcome:
    """What a run did."""

    exit_code: int
    manifest: dict[str, Any]
    run_dir: Path


def run_workflow(
    wf: Workflow,
    *,
    out: str | Path | None = None,
    force: bool = False,
    scheduler: str | None = None,
    local_cluster: int | None = None,
    workers: int | None = None,
    quiet: bool = False,
    verbose: bool = False,
) -> RunOutcome:
    """Fit every unit of a workflow that is not finished, then merge and report.

    Parameters
    ----------
    wf
        The validated workflow.
    out
        Run directory (default: the workflow's ``run_dir``).
    force
        Refit finished units too.
    scheduler, local_cluster, workers
        Override the workflow's execution settings.
    quiet, verbose
        Progress and log detail on stderr.

    Returns
    -------
    RunOutcome
        Exit code 0 when every unit fitted and passed its diagnostics, 1 when
        a unit failed or failed its diagnostics (the others are finished and
        merged).

    Raises
    ------
    InputError, ConfigError
        Unusable input or settings (nothing is written).
    """
    t_start = time.perf_counter()
    ex = wf.execution
    scheduler = scheduler or (None if local_cluster else ex.scheduler)
    local_cluster = local_cluster or (None if scheduler else ex.local_cluster)
    run_dir = Path(out).resolve() if out is not None else wf.run_dir
    inspection = inspect_inputs(wf)
    units = plan_units(wf, inspection.groups)
    if not units:
        raise InputError("the workflow has no unit to fit")
    chains = int(wf.fit.sampler["chains"])
    cpus = cpu_count()
    n_workers, threads = plan_threads(
        ex.workers if workers is None else workers, ex.threads, chains, len(units), cpus
    )
    cores = min(chains, threads)
    t_check = time.perf_counter() - t_start

    with run_lock(run_dir):  # one run at a time per directory (RunDirectoryBusy otherwise)
        unlink_output(run_dir / FINISHED_MARK)  # the run is unfinished until the end
        entries: dict[str, dict[str, Any]] = {}
        jobs = []
        with Board([u.name for u in units], quiet, verbose) as board:
            where = (
                f"Dask scheduler {scheduler}"
                if scheduler
                else f"a Dask LocalCluster of {local_cluster}"
                if local_cluster
                else "this process"
                if n_workers == 0
                else f"{n_workers} local worker process(es)"
            )
            board.log(f"run directory {run_dir}: {len(units)} unit(s) on {where}")
            if not (scheduler or local_cluster) and max(n_workers, 1) * cores > cpus:
                board.log(
                    f"warning: {n_workers} worker(s) x {cores} chain(s) exceed {cpus} core(s)"
                )
            for unit in units:
                cfg = unit_config(wf, unit, cores)
                digest = unit_hash(unit, cfg)
                unit_dir = run_dir / UNITS_DIR / unit.dirname
                entries[unit.name] = {
                    "name": unit.name,
                    "dir": f"{UNITS_DIR}/{unit.dirname}",
                    "group": unit.group,
                    "tables": list(unit.tables),
                    "seed": unit.seed,
                    "input_hash": digest,
                }
                if not force and finished_hash(unit_dir) == digest:
                    damage = damaged_files(unit_dir)
                    if not damage:
                        entries[unit.name]["status"] = "skipped"
                        board.finish(unit.name, "skipped (finished, unchanged)")
                        board.log(
                            f"skipping unit {unit.name}: finished, inputs and settings unchanged"
                        )
                        continue
                    entries[unit.name]["refit_because"] = damage
                    board.log(
                        f"unit {unit.name}: damaged files ({'; '.join(damage[:3])}); refitting"
                    )
                    unlink_output(unit_dir / FINISHED_MARK)
                jobs.append(
                    {
                        "unit": unit.name,
                        "dirname": unit.dirname,
                        "tables": list(unit.tables),
                        "out": str(unit_dir),
                        "config": dataclasses.asdict(cfg),
                        "threads": threads,
                    }
                )
            t0 = time.perf_counter()
            if jobs:
                if scheduler or local_cluster:
                    results = _run_dask(jobs, scheduler, local_cluster, board)
                elif n_workers == 0:
                    results = _run_inline(jobs, board)
                else:
                    results = _run_local(jobs, n_workers, board)
                for r in results:
                    entries[r["unit"]].update(
                        status=r["status"], seconds=r.get("seconds"), error=r.get("error")
                    )
            t_units = time.perf_counter() - t0
            t0 = time.perf_counter()
            power = _power_step(wf, run_dir, board, force)
            t_power = time.perf_counter() - t0
            board.log("merging the units and rendering the report")
            t0 = time.perf_counter()
            finished = _finished_units(run_dir, units, entries)
            _write_merged(run_dir, inspection, units, finished, entries)
            if finished:
                from nstress.products.report import write_report

                write_report(
                    [run_dir / entries[u.name]["dir"] for u in finished], run_dir, wf.title
                )
            t_merge = time.perf_counter() - t0

        failed = [e["name"] for e in entries.values() if e.get("status") == "failed"]
        bad_diag = [
            e["name"] for e in entries.values() if e.get("diagnostics", {}).get("ok") is False
        ]
        manifest = {
            "nstress_version": __version__,
            "kind": "run",
            "complete": not failed,
            "workflow": {
                "path": str(wf.path),
                "sha256": wf.sha256,
                "name": wf.name,
                "title": wf.title,
            },
            "inputs": inspection.sources,
            "config": wf.result_config(),
            "config_hash": config_hash(inspection.sources, wf.result_config()),
            "preset": wf.fit.preset,
            "seed": wf.seed,
            "execution": {
                "workers": n_workers,
                "threads_per_worker": threads,
                "parallel_chains": cores,
                "cores": cpus,
                "scheduler": scheduler,
                "local_cluster": local_cluster,
                "backend": wf.execution.backend,
            },
            "versions": versions(),
            "timings_s": {
                "check_s": round(t_check, 3),
                "units_s": round(t_units, 3),
                "power_s": round(t_power, 3),
                "merge_report_s": round(t_merge, 3),
                "total_s": round(time.perf_counter() - t_start, 3),
            },
            "units": list(entries.values()),
            "failed_units": failed,
            "diagnostics_failed_units": bad_diag,
            "power": power,
            "files": sorted(p.name for p in run_dir.iterdir() if not p.name.startswith(".")),
        }
        atomic_write_text(run_dir / FINISHED_MARK, json.dumps(manifest, indent=2, default=str))
        code = EXIT_FIT_FAILED if failed or bad_diag else EXIT_OK
        return RunOutcome(code, manifest, run_dir)


def _power_step(wf: Workflow, run_dir: Path, board: Board, force: bool) -> dict[str, Any] | None:
    """Run the ``[design]`` power analysis of the data's design; its outcome for the manifest.

    A failure here is reported (manifest and progress), not raised: the fits
    are finished and stay valid; the report then says no power analysis ran.
    """
    if wf.design is None:
        return None
    from nstress.workflow.power import power_for_workflow

    try:
        out = power_for_workflow(wf, run_dir, log=board.log, force=force)
    except (NstressError, ValueError, RuntimeError) as exc:
        board.log(f"power analysis failed: {exc}")
        return {"ok": False, "error": str(exc)}
    return {"ok": out is not None, "dir": out.name if out is not None else None}


def _finished_units(
    run_dir: Path, units: list[Unit], entries: dict[str, dict[str, Any]]
) -> list[Unit]:
    """Units whose directory is finished; adds their diagnostics to ``entries``."""
    out = []
    for u in units:
        path = run_dir / entries[u.name]["dir"] / FINISHED_MARK
        if entries[u.name].get("status") == "failed" or not path.exists():
            continue
        m = json.loads(path.read_text())
        diag = m.get("diagnostics", {})
        entries[u.name]["diagnostics"] = {
            "ok": diag.get("ok"),
            "reasons": list(diag.get("reasons", []))[:10],
        }
        entries[u.name]["counts"] = m.get("counts", {})
        entries[u.name]["fit_timings_s"] = m.get("timings_s", {})
        out.append(u)
    return out


def _write_merged(
    run_dir: Path,
    inspection: Inspection,
    units: list[Unit],
    finished: list[Unit],
    entries: dict[str, dict[str, Any]] | None = None,
) -> None:
    """Write the whole input's ledger and the units' merged screening and timelines.

    A unit whose manifest says its diagnostics failed carries no confident
    status into the merged screening table, whatever its own table says:
    its animals are ``fit_failed`` with the unit's reasons.
    """
    import pandas as pd

    from nstress.workflow.cli import write_csv

    atomic_write(run_dir / "ledger.csv", lambda p: write_csv(inspection.ledger.to_frame(), p))
    for name in MERGED + MERGED_OPTIONAL:
        frames = []
        for u in finished:
            src = run_dir / UNITS_DIR / u.dirname / name
            if name in MERGED_OPTIONAL and not src.exists():
                continue
            f = pd.read_csv(src, dtype={"individual": str, "group": str})
            diag = (entries or {}).get(u.name, {}).get("diagnostics", {})
            if name == "screening.csv" and diag.get("ok") is False and "status" in f:
                why = "; ".join(map(str, diag.get("reasons", [])[:3])) or "see the unit's report"
                f["status"] = "fit_failed"
                f["diagnostics_ok"] = False
                f["status_reason"] = f"the unit's fit failed its diagnostics: {why}"
            frames.append(f.assign(unit=u.name))
        if not frames:
            unlink_output(run_dir / name)
            continue
        merged = pd.concat(frames, ignore_index=True)
        atomic_write(
            run_dir / name, lambda p, m=merged: m.to_csv(p, index=False, float_format="%.5g")
        )


def render_run(run_dir: str | Path, title: str | None = None) -> Path:
    """Re-render ``report.html`` of a run (or of one fit directory) without refitting.

    Parameters
    ----------
    run_dir
        A run directory (``units/*/``) or a fit directory (``nstress fit``).
    title
        Report title (default: the run's workflow title, else the units' names).

    Returns
    -------
    pathlib.Path
        The report.

    Raises
    ------
    InputError
        No finished fit directory was found.
    """
    from nstress.products.report import write_report

    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise InputError("not a directory", file=str(run_dir))
    try:
        manifest = json.loads((run_dir / FINISHED_MARK).read_text())
    except (OSError, ValueError):
        manifest = {}
    if manifest.get("kind") == "run":
        units = [run_dir / u["dir"] for u in manifest.get("units", [])]
        title = title or manifest.get("workflow", {}).get("title")
    else:  # a fit directory, or a run that did not finish: whatever units finished
        units = sorted((run_dir / UNITS_DIR).glob("*"))
    units = [u for u in units if (u / FINISHED_MARK).exists()]
    if units:
        return write_report(units, run_dir, title)
    if manifest:
        return write_report([run_dir], run_dir, title)
    raise InputError(
        "no finished fit here (neither manifest.json nor units/*/manifest.json)",
        file=str(run_dir),
    )

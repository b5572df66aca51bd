"""The ``nstress`` command line.

Each subcommand is a :class:`Command` (name, help, a function that adds its
arguments, a function that runs it and returns an exit code) put into the
registry with :func:`register`; :func:`main` builds the parser from the
registry. Add a command by writing its two functions and registering it
(see ``check`` below).

Exit codes (see :mod:`nstress.errors`): 0 success; 1 a fit failed; 2 bad
input or configuration, or a table with no usable sample. Errors are printed
as ``nstress: error: <message>`` on stderr, without a traceback. Results go
to files, the summary to stdout, progress to stderr.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TextIO

import pandas as pd

from nstress import __version__
from nstress.atomic import atomic_write
from nstress.errors import EXIT_BAD_INPUT, EXIT_OK, NstressError


@dataclass(frozen=True)
class Command:
    """One subcommand.

    Parameters
    ----------
    name
        What the user types (``nstress NAME``).
    help
        One line for ``nstress --help``.
    add_arguments
        Adds the command's arguments to its sub-parser.
    run
        Carries the command out; returns the exit code.
    description, epilog
        Shown by ``nstress NAME --help``.
    """

    name: str
    help: str
    add_arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]
    description: str = ""
    epilog: str = ""


COMMANDS: dict[str, Command] = {}


def register(command: Command) -> Command:
    """Add ``command`` to the registry (a later one with the same name replaces it).

    Parameters
    ----------
    command
        The command.

    Returns
    -------
    Command
        ``command``, unchanged.
    """
    COMMANDS[command.name] = command
    return command


def build_parser() -> argparse.ArgumentParser:
    """Return the top-level parser with one sub-parser per registered command."""
    parser = argparse.ArgumentParser(
        prog="nstress",
        description="Detect and date catabolic (nutritional-stress) episodes from serial "
        "δ15N/δ13C of keratin segments and blood.",
        epilog="Run 'nstress COMMAND --help' for the options of a command.\n\n" + EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"nstress {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for cmd in COMMANDS.values():
        p = sub.add_parser(
            cmd.name,
            help=cmd.help,
            description=cmd.description or cmd.help,
            epilog=cmd.epilog,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        cmd.add_arguments(p)
        p.set_defaults(_command=cmd)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line.

    Parameters
    ----------
    argv
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        The exit code.
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, or a usage error (argparse printed it)
        return exc.code if isinstance(exc.code, int) else EXIT_BAD_INPUT
    command: Command | None = getattr(args, "_command", None)
    if command is None:
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    try:
        return command.run(args)
    except NstressError as exc:
        print(f"nstress: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("nstress: interrupted", file=sys.stderr)
        return 130


class Progress:
    """Progress lines on stderr, silenced by ``--quiet``."""

    def __init__(self, quiet: bool = False, verbose: bool = False, stream: TextIO | None = None):
        self.quiet, self.verbose = quiet, verbose
        self.stream = stream

    def __call__(self, message: str, *, detail: bool = False) -> None:
        """Print ``message`` (``detail`` lines only with ``--verbose``)."""
        if self.quiet or (detail and not self.verbose):
            return
        print(f"nstress: {message}", file=self.stream or sys.stderr, flush=True)


# ---------------------------------------------------------------- check

_CHECK_EPILOG = """\
examples:
  nstress check whiskers.csv
  nstress check whiskers.csv plasma.csv --out qc/     # also writes qc/ledger.csv

The table is long format, one row per measured sample, with columns
individual, tissue, d15N, d13C, and position_mm + collected (keratin) or
date (blood). Exit code 0: usable (at least one used or flagged sample);
2: not usable, or the input has errors (listed on stderr).
"""


def _check_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "tables", nargs="+", metavar="TABLE", help="sample table(s): CSV, Parquet, Excel"
    )
    p.add_argument("--out", metavar="DIR", type=Path, help="write DIR/ledger.csv (every input row)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--quiet", action="store_true", help="print nothing but errors")
    g.add_argument("--verbose", action="store_true", help="more detail (rows per reason, notes)")


def _load_prep() -> Any:
    """Return the :mod:`nstress.prep` module if it offers ``prepare``, else ``None``."""
    try:
        module = importlib.import_module("nstress.prep")
    except ModuleNotFoundError as exc:
        if exc.name in ("nstress.prep", "nstress"):
            return None
        raise
    return module if callable(getattr(module, "prepare", None)) else None


def _run_check(args: argparse.Namespace) -> int:
    from nstress.intake import read_samples

    progress = Progress(args.quiet, args.verbose)
    progress(f"reading {len(args.tables)} table(s)", detail=True)
    intake = read_samples(args.tables)
    samples, ledger, prep_text = intake.samples, intake.ledger, ""
    prep = _load_prep()
    if prep is not None:
        progress("preparing (quality control, corrections)", detail=True)
        prepared = prep.prepare(intake, tissues=intake.tissues)
        samples, ledger = prepared.samples, prepared.ledger
        summarise = getattr(prep, "summarise", None)
        prep_text = summarise(prepared) if callable(summarise) else ""
    usable = _usable_count(samples, ledger)
    frame = ledger.to_frame()
    if args.out is not None:
        path = atomic_write(Path(args.out) / "ledger.csv", lambda p: write_csv(frame, p))
        progress(f"wrote {path}")
    if not args.quiet:
        print(
            summarise_check(
                intake,
                samples,
                ledger,
                usable,
                verbose=args.verbose,
                prep_text=prep_text,
                frame=frame,
            )
        )
    if usable == 0:
        print(
            "nstress: error: no usable sample (every row was excluded; see the reasons above)",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    return EXIT_OK


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """Write ``frame`` (without its index) as CSV, with pyarrow's fast writer when it can.

    Parameters
    ----------
    frame
        The table.
    path
        Destination (normally a temporary path from :mod:`nstress.atomic`).
    """
    simple = all(
        pd.api.types.is_string_dtype(t) or pd.api.types.is_numeric_dtype(t) for t in frame.dtypes
    )
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv
    except ImportError:
        simple = False
    if simple:
        try:
            table = pa.Table.from_pandas(frame, preserve_index=False)
        except (pa.ArrowException, TypeError, ValueError):
            simple = False
    if not simple:  # dates, mixed objects or no pyarrow: pandas formats them
        frame.to_csv(path, index=False)
        return
    pacsv.write_csv(table, path)


def _usable_count(samples: pd.DataFrame, ledger: Any) -> int:
    """Count the samples whose (first) ledger row is used or flagged."""
    if "key" not in samples.columns or len(samples) == 0:
        return len(samples)
    status = ledger.status_of(samples["key"].to_numpy())
    return int((status != "excluded").sum())


def summarise_check(
    intake: Any,
    samples: pd.DataFrame,
    ledger: Any,
    usable: int,
    *,
    verbose: bool = False,
    prep_text: str = "",
    frame: pd.DataFrame | None = None,
) -> str:
    """Return the text summary printed by ``nstress check``.

    Parameters
    ----------
    intake
        The :class:`~nstress.intake.Intake` (sources, notes, references).
    samples
        The samples to describe (the intake's, or after preparation).
    ledger
        The ledger to count.
    usable
        Number of usable samples.
    verbose
        Add per-individual counts, rows per reason and notes.
    prep_text
        The preparation layer's own summary; when given it replaces the
        sample and row counts computed here (it covers the same items).
    frame
        ``ledger.to_frame()`` if already at hand (saves time on big tables).

    Returns
    -------
    str
    """
    lines: list[str] = []
    n_rows = len(ledger)
    lines.append(f"Input: {len(intake.sources)} file(s), {n_rows} row(s)")
    for s in intake.sources:
        lines.append(f"  {s['path']}: {s['rows']} row(s), sha256 {str(s['sha256'])[:12]}")
    ind = samples["individual"] if "individual" in samples else pd.Series(dtype=str)
    lines.append(f"Samples: {len(samples)} ({usable} usable), individuals: {ind.nunique()}")
    if prep_text:
        lines.extend(prep_text.rstrip().splitlines())
    else:
        frame = ledger.to_frame() if frame is None else frame
        lines.extend(_own_counts(intake, samples, frame, verbose))
    if verbose:
        for note in intake.notes:
            lines.append(f"Note: {note}")
        if len(samples) and "individual" in samples:
            per = samples.groupby(["individual", "tissue"]).size()
            lines.append("Samples per individual and tissue:")
            lines.extend(f"  {i} {t}: {m}" for (i, t), m in per.items())
    lines.append("Verdict: " + ("usable" if usable else "NOT usable (no used or flagged sample)"))
    return "\n".join(lines)


def _own_counts(
    intake: Any, samples: pd.DataFrame, frame: pd.DataFrame, verbose: bool
) -> list[str]:
    """Describe groups, tissues, dates and ledger rows by reason."""
    lines = []
    if "group" in samples and len(samples):
        groups = samples["group"].value_counts(sort=False)
        lines.append("Groups: " + ", ".join(f"{g} ({n})" for g, n in groups.items()))
    if "tissue" in samples and len(samples):
        parts = []
        for (t, k), m in samples.groupby(["tissue", "tissue_class"]).size().items():
            parts.append(f"{t} ({k}): {m}")
        lines.append("Tissues: " + ", ".join(parts))
    span = _date_span(samples)
    if span:
        lines.append(f"Dates: {span}")
    if len(intake.references):
        rm = intake.references["reference_material"].value_counts()
        lines.append("Reference material rows: " + ", ".join(f"{r} ({n})" for r, n in rm.items()))
    counts = frame["status"].value_counts()
    lines.append(
        "Rows: " + ", ".join(f"{counts.get(s, 0)} {s}" for s in ("used", "flagged", "excluded"))
    )
    summary = (
        frame.assign(reason=frame["reason"].replace("", "-"))
        .groupby(["status", "reason"])
        .size()
        .rename("rows")
        .reset_index()
    )
    for _, r in summary.iterrows():
        lines.append(f"  {r['status']:<9} {int(r['rows']):>8}  {r['reason']}")
        if verbose and r["status"] != "used":
            reason = "" if r["reason"] == "-" else r["reason"]
            hit = frame[(frame["status"] == r["status"]) & (frame["reason"] == reason)]
            where = ", ".join(
                f"{f} row {n}"
                for f, n in zip(hit["source_file"].head(5), hit["source_row"].head(5), strict=True)
            )
            lines.append(f"            e.g. {where}{' ...' if len(hit) > 5 else ''}")
    return lines


def _date_span(samples: pd.DataFrame) -> str:
    parts = []
    for col, what in (("collected", "keratin collected"), ("date", "blood drawn")):
        if col in samples and samples[col].notna().any():
            d = pd.to_datetime(samples[col])
            parts.append(f"{what} {d.min():%Y-%m-%d} to {d.max():%Y-%m-%d}")
    return "; ".join(parts)


register(
    Command(
        name="check",
        help="read, validate and quality-check sample tables; print a summary",
        add_arguments=_check_arguments,
        run=_run_check,
        description="Read, validate and quality-check sample tables without fitting. "
        "Prints individuals, tissues, date span and rows used / flagged / excluded by reason.",
        epilog=_CHECK_EPILOG,
    )
)


# ---------------------------------------------------------------- fit

_FIT_EPILOG = """\
examples:
  nstress fit colony.csv --out results/
  nstress fit whiskers.csv plasma.csv --out results/ --draws 1000 --tune 1000 --seed 7
  nstress fit season.csv --out screen/ --fast     # approximate first pass, not final
  nstress fit colony.csv --out results/ --preset otariid_female --set priors.gamma.sigma=0.5

--preset starts from a natural-history preset (`nstress presets` lists them);
--set overrides one setting of it, or of the package defaults.

Writes ledger.csv, timelines.csv, screening.csv, colony_summary.csv,
timelines.nc, posterior.nc and manifest.json (last) into DIR.
Exit code 0: fitted and diagnostics passed; 1: the fit failed or failed its
diagnostics (products are still written, marked); 2: bad input.
With --fast, the outputs are an approximation for screening (marked
"approximate" in screening.csv, manifest.json, posterior.nc and the report);
exit 0 means its sanity checks passed, never that NUTS diagnostics did.
"""


def _model_arguments(p: argparse.ArgumentParser, from_workflow: bool = False) -> None:
    """Sampler, grid and verbosity options shared by ``fit`` and ``demo``.

    With ``from_workflow`` the defaults are the workflow file's (an option
    given on the command line overrides the file).
    """

    def default(value: Any) -> Any:
        return None if from_workflow else value

    def said(text: str, value: Any) -> str:
        return f"{text} (default: {'the workflow' + chr(39) + 's' if from_workflow else value})"

    p.add_argument("--seed", type=int, default=default(1), help=said("random seed", 1))
    p.add_argument(
        "--draws", type=int, default=default(1000), help=said("kept draws per chain", 1000)
    )
    p.add_argument(
        "--tune", type=int, default=default(1000), help=said("warm-up draws per chain", 1000)
    )
    p.add_argument("--chains", type=int, default=default(2), help=said("chains", 2))
    p.add_argument(
        "--sampler",
        choices=["auto", "nutpie", "pymc"],
        default=default("auto"),
        help=said("NUTS implementation", "nutpie when installed"),
    )
    p.add_argument(
        "--bin-days", type=float, default=default(4.0), help=said("grid bin width in days", 4.0)
    )
    _verbosity(p)


def _verbosity(p: argparse.ArgumentParser) -> None:
    """``--quiet`` / ``--verbose``."""
    g = p.add_mutually_exclusive_group()
    g.add_argument("--quiet", action="store_true", help="print nothing but errors")
    g.add_argument("--verbose", action="store_true", help="more detail")


def _fit_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("tables", nargs="+", metavar="TABLE", help="sample table(s)")
    p.add_argument("--out", metavar="DIR", type=Path, required=True, help="output directory")
    p.add_argument(
        "--fast",
        action="store_true",
        help="approximate first-pass screening (MAP + Laplace approximation, minutes for "
        "thousands of animals); every output is marked approximate: not a final posterior",
    )
    p.add_argument(
        "--fast-draws",
        type=int,
        default=200,
        help="approximate posterior draws of --fast (default: 200)",
    )
    _study_arguments(p)
    from nstress.aminoacids import DEFAULT_FOOD_WEB, FOOD_WEBS

    p.add_argument(
        "--food-web",
        choices=list(FOOD_WEBS),
        default=None,
        help="food web whose β and TDF give the trophic position from d15N_Glu and d15N_Phe "
        f"(default: {DEFAULT_FOOD_WEB}; only used when the table has amino-acid columns)",
    )
    _model_arguments(p)


def _study_arguments(p: argparse.ArgumentParser, from_workflow: bool = False) -> None:
    """``--preset NAME`` and ``--set KEY=VALUE`` (study settings on the command line)."""
    p.add_argument(
        "--preset",
        metavar="NAME",
        help="start from a natural-history preset (`nstress presets` lists them)"
        + ("; replaces the workflow's preset" if from_workflow else ""),
    )
    p.add_argument(
        "--set",
        metavar="KEY=VALUE",
        action="append",
        default=[],
        help="override one setting of a workflow section (priors, tissues, growth, qc, "
        "screening, diagnostics), e.g. --set priors.gamma.mu=0.1; repeatable; beats the "
        + ("workflow file and the " if from_workflow else "")
        + "preset",
    )


def _study_overrides(args: argparse.Namespace) -> dict[str, Any]:
    """Return the command line's ``--preset`` and ``--set`` as workflow overrides."""
    from nstress.workflow.config import PRESET_KEY
    from nstress.workflow.layers import parse_assignments

    out = parse_assignments(args.set)
    if args.preset is not None:
        out[PRESET_KEY] = args.preset
    return out


def _run_fit(args: argparse.Namespace) -> int:
    from nstress.workflow.layers import parse_assignments, study_settings
    from nstress.workflow.pipeline import FitConfig, fit_tables

    for name in ("draws", "tune", "chains"):
        if getattr(args, name) < 1:
            raise NstressError(f"--{name} must be at least 1")
    progress = Progress(args.quiet, args.verbose)
    study = study_settings(args.preset, parse_assignments(args.set))
    if study["preset"] is not None:
        progress(f"starting from preset {study['preset']['name']}: {study['preset']['title']}")
    cfg = FitConfig(
        bin_days=args.bin_days,
        **study,
        sampler={
            "draws": args.draws,
            "tune": args.tune,
            "chains": args.chains,
            "seed": args.seed,
            "sampler": args.sampler,
            **({"method": "fast", "fast_draws": args.fast_draws} if args.fast else {}),
        },
        progress=not args.quiet,
        trophic={"food_web": args.food_web} if args.food_web else {},
    )
    if args.fast and args.fast_draws < 1:
        raise NstressError("--fast-draws must be at least 1")
    manifest = fit_tables(args.tables, args.out, cfg, log=progress)
    if manifest.get("approximate"):
        progress(f"{manifest['approximate_note']}")
    if not manifest["diagnostics"]["ok"]:
        for r in manifest["diagnostics"]["reasons"][:10]:
            progress(f"diagnostics: {r}")
        return 1
    return EXIT_OK


register(
    Command(
        name="fit",
        help="fit the model to sample tables and write timelines, screening and diagnostics",
        add_arguments=_fit_arguments,
        run=_run_fit,
        description="The whole pipeline on one or more tables with default settings.",
        epilog=_FIT_EPILOG,
    )
)


# ---------------------------------------------------------------- run

EXIT_CODES = """\
exit codes:
  0  success (every unit fitted and passed its diagnostics)
  1  a fit or unit failed, or failed its diagnostics (the others are written)
  2  bad input or configuration (nothing is fitted)
"""

_RUN_EPILOG = (
    """\
examples:
  nstress run workflows/two_colonies.toml
  nstress run season.toml --out runs/2025/             # another run directory
  nstress run season.toml --force                      # refit finished units too
  nstress run season.toml --local-cluster 2            # units on a Dask LocalCluster
  nstress run season.toml --scheduler tcp://10.0.0.5:8786
  nstress run season.toml --set priors.gamma.mu=0.0    # beats the file and its preset

Fits each unit (one per group, or per table: [units] split) into
RUN_DIR/units/<unit>/, then writes RUN_DIR/ledger.csv, screening.csv,
timelines.csv (merged, with a unit column), report.html and manifest.json
(last). A rerun skips the units whose inputs and result settings are
unchanged. Dask workers must see the same file system as this command.
The workflow file's schema: DEVELOPERS.md, "Workflow files".

"""
    + EXIT_CODES
)


def _run_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("workflow", metavar="WORKFLOW", type=Path, help="workflow file (.toml)")
    p.add_argument("--out", metavar="DIR", type=Path, help="run directory (overrides the file's)")
    _study_arguments(p, from_workflow=True)
    _execution_arguments(p)
    _verbosity(p)


def _execution_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--force", action="store_true", help="refit units that are finished")
    where = p.add_mutually_exclusive_group()
    where.add_argument(
        "--scheduler", metavar="ADDRESS", help="fit the units on this Dask scheduler"
    )
    where.add_argument(
        "--local-cluster",
        metavar="N",
        type=int,
        help="start a Dask LocalCluster of N workers for the units",
    )
    where.add_argument(
        "--workers",
        metavar="N",
        type=int,
        help="local worker processes (0: in this process; default: cores / chains)",
    )


def _run_run(args: argparse.Namespace) -> int:
    from nstress.workflow.config import load_workflow

    return _execute(load_workflow(args.workflow, overrides=_study_overrides(args)), args, args.out)


def _execute(wf: Any, args: argparse.Namespace, out: Path | None) -> int:
    """Run a loaded workflow with the command line's execution options."""
    from nstress.workflow.run import run_workflow

    for name, low in (("local_cluster", 1), ("workers", 0)):
        value = getattr(args, name, None)
        if value is not None and value < low:
            raise NstressError(f"--{name.replace('_', '-')} must be at least {low}")
    outcome = run_workflow(
        wf,
        out=out,
        force=args.force,
        scheduler=args.scheduler,
        local_cluster=args.local_cluster,
        workers=args.workers,
        quiet=args.quiet,
        verbose=args.verbose,
    )
    m = outcome.manifest
    progress = Progress(args.quiet, args.verbose)
    states = [u.get("status", "?") for u in m["units"]]
    progress(
        f"wrote {outcome.run_dir}: "
        + ", ".join(f"{states.count(s)} {s}" for s in dict.fromkeys(states))
    )
    if m["failed_units"]:
        print(
            "nstress: error: unit(s) failed: " + ", ".join(m["failed_units"]) + " (see "
            "units/<unit>/unit.log)",
            file=sys.stderr,
        )
    if m["diagnostics_failed_units"]:
        progress("diagnostics failed in unit(s): " + ", ".join(m["diagnostics_failed_units"]))
    return outcome.exit_code


register(
    Command(
        name="run",
        help="run a workflow file: fit each unit, merge, report",
        add_arguments=_run_arguments,
        run=_run_run,
        description="Run a reproducible workflow (TOML): inputs, settings, outputs, execution.",
        epilog=_RUN_EPILOG,
    )
)


# ---------------------------------------------------------------- demo

_DEMO_EPILOG = (
    """\
examples:
  nstress demo --out demo_run/
  nstress demo --out demo_run/ --draws 300 --tune 300     # quicker, may fail diagnostics

Runs the demo workflow workflows/demo.toml on the invented (synthetic) demo
colony in demo_data/ and writes a run directory (see `nstress run --help`).
Options given here override the workflow file's settings.

"""
    + EXIT_CODES
)


def demo_table() -> Path:
    """Path of the synthetic demo colony's sample table."""
    here = Path(__file__).resolve().parents[2] / "demo_data" / "colony_samples.csv"
    if not here.exists():
        raise NstressError(f"demo data not found at {here}; run from a source checkout")
    return here


def demo_workflow() -> Path:
    """Path of the demo workflow file (``workflows/demo.toml``)."""
    here = Path(__file__).resolve().parents[2] / "workflows" / "demo.toml"
    if not here.exists():
        raise NstressError(f"demo workflow not found at {here}; run from a source checkout")
    return here


def _demo_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--out",
        metavar="DIR",
        type=Path,
        default=Path("demo_run"),
        help="run directory (default demo_run/)",
    )
    _study_arguments(p, from_workflow=True)
    _model_arguments(p, from_workflow=True)
    _execution_arguments(p)


def _run_demo(args: argparse.Namespace) -> int:
    from nstress.workflow.config import load_workflow

    keys = ("draws", "tune", "chains", "seed", "sampler")
    sampler = {k: getattr(args, k) for k in keys if getattr(args, k) is not None}
    grid = {"bin_days": args.bin_days} if args.bin_days is not None else {}
    overrides = {"sampler": sampler, "grid": grid, **_study_overrides(args)}
    wf = load_workflow(demo_workflow(), overrides=overrides)
    return _execute(wf, args, args.out)


register(
    Command(
        name="demo",
        help="run the demo workflow on the invented demo colony",
        add_arguments=_demo_arguments,
        run=_run_demo,
        description="Run workflows/demo.toml on the synthetic demo colony (demo_data/).",
        epilog=_DEMO_EPILOG,
    )
)


# ---------------------------------------------------------------- init

_INIT_EPILOG = (
    """\
examples:
  nstress init colony.csv -o season.toml
  nstress init whiskers.csv plasma.csv -o study/workflow.toml --force
  nstress init seals.csv -o seals.toml --preset phocid_fast

Reads and checks the table(s), then writes a commented workflow file that
names them (relative to the file) and lists the groups found; edit it and
run it with `nstress run`. An existing file is kept unless --force.

"""
    + EXIT_CODES
)


def _init_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("tables", nargs="+", metavar="TABLE", help="sample table(s)")
    p.add_argument(
        "-o",
        "--output",
        metavar="WORKFLOW",
        type=Path,
        default=Path("workflow.toml"),
        help="workflow file to write (default workflow.toml)",
    )
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.add_argument(
        "--preset",
        metavar="NAME",
        help="start the workflow from a natural-history preset (`nstress presets` lists them)",
    )
    _verbosity(p)


def _run_init(args: argparse.Namespace) -> int:
    from nstress.atomic import atomic_write_text
    from nstress.intake import read_samples
    from nstress.presets import load_preset
    from nstress.workflow.config import load_workflow, starter_workflow

    progress = Progress(args.quiet, args.verbose)
    dest = Path(args.output)
    if dest.exists() and not args.force:
        raise NstressError(f"{dest} exists; give --force to overwrite it")
    if args.preset is not None:
        load_preset(args.preset)  # an unknown name fails before anything is written
    intake = read_samples([str(t) for t in args.tables])
    s = intake.samples
    groups = sorted(map(str, s["group"].unique())) if len(s) else []
    tissues = sorted(map(str, s["tissue"].unique())) if len(s) else []
    text = starter_workflow(
        [Path(t) for t in args.tables],
        dest,
        groups,
        tissues,
        len(intake.ledger),
        preset=args.preset,
    )
    atomic_write_text(dest, text)
    load_workflow(dest)  # what was written must be a valid workflow
    progress(f"wrote {dest} ({len(groups)} group(s): {', '.join(groups)})")
    return EXIT_OK


register(
    Command(
        name="init",
        help="write a starter workflow file for sample tables",
        add_arguments=_init_arguments,
        run=_run_init,
        description="Write a starter workflow file (TOML) naming the tables and their groups.",
        epilog=_INIT_EPILOG,
    )
)


# ---------------------------------------------------------------- render

_RENDER_EPILOG = (
    """\
examples:
  nstress render runs/season/
  nstress render results/ --title "Colony A, 2025 (synthetic)"

Re-renders report.html and figures/ from the files of a run directory
(its finished units) or of a fit directory, without refitting.

"""
    + EXIT_CODES
)


def _render_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", metavar="RUN_DIR", type=Path, help="run or fit directory")
    p.add_argument("--title", help="report title")
    _verbosity(p)


def _run_render(args: argparse.Namespace) -> int:
    from nstress.workflow.run import render_run

    path = render_run(args.run_dir, args.title)
    Progress(args.quiet, args.verbose)(f"wrote {path}")
    return EXIT_OK


register(
    Command(
        name="render",
        help="re-render the report of a run or fit directory without refitting",
        add_arguments=_render_arguments,
        run=_run_render,
        description="Re-render report.html from an existing run or fit directory.",
        epilog=_RENDER_EPILOG,
    )
)


# ---------------------------------------------------------------- power

_POWER_EPILOG = (
    """\
examples:
  nstress power --out plan/                                  # the default grid
  nstress power --segment-mm 1 3 6 --fast-days 10 20 40 --rate 0.03 0.06 --out plan/
  nstress power --segment-mm 2 --draw-interval-days 0 7 14 --tissue whisker --out plan/
  nstress power season.toml --out plan/        # the workflow's [design], tissues and priors

Simulates animals that fast for each length and rate (and animals that do
not), sampled with each design, fits them (the fast screening mode unless
--nuts) and writes power.csv (detection share with its 90 % interval, median
onset error, controls flagged), power_limits.csv, power.png/svg and
power.json (last) into DIR. A fast counts as detected when the screening
calls the animal catabolic. A few animals per cell give coarse shares:
raise --animals for a decision.

"""
    + EXIT_CODES
)


def _power_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "workflow",
        nargs="?",
        type=Path,
        metavar="WORKFLOW",
        help="workflow file whose [design], tissues, growth, priors and screening are used",
    )
    p.add_argument("--out", metavar="DIR", type=Path, required=True, help="output directory")
    many = {"nargs": "+", "type": float, "default": None}
    p.add_argument("--segment-mm", metavar="MM", help="segment lengths (mm)", **many)
    p.add_argument(
        "--draw-interval-days",
        metavar="D",
        nargs="+",
        type=int,
        default=None,
        help="days between blood draws (0 = no blood)",
    )
    p.add_argument("--fast-days", metavar="D", help="fast lengths (days)", **many)
    p.add_argument("--rate", metavar="R", help="enrichment rates (‰ δ15N per day)", **many)
    p.add_argument("--animals", type=int, help="fasting animals per cell (default 6)")
    p.add_argument("--controls", type=int, help="non-fasting animals per cell (default 2)")
    p.add_argument("--tissue", help="keratin tissue cut into segments (default whisker)")
    p.add_argument("--record-mm", type=float, help="keratin length analysed (mm, default 30)")
    p.add_argument("--nuts", action="store_true", help="fit with full NUTS (slow), not --fast")
    p.add_argument("--seed", type=int, help="seed of the simulations (default 1)")
    _verbosity(p)


def _run_power(args: argparse.Namespace) -> int:
    from nstress.workflow.config import load_workflow
    from nstress.workflow.pipeline import FitConfig
    from nstress.workflow.power import describe_limits, design_from_section, run_power, write_power

    progress = Progress(args.quiet, args.verbose)
    section: dict[str, Any] = {}
    fit = FitConfig()
    if args.workflow is not None:
        wf = load_workflow(args.workflow)
        section, fit = dict(wf.design or {}), wf.fit
    given = {
        "segment_mm": args.segment_mm,
        "draw_interval_days": args.draw_interval_days,
        "fast_days": args.fast_days,
        "rate_per_day": args.rate,
        "animals": args.animals,
        "controls": args.controls,
        "keratin_tissue": args.tissue,
        "record_mm": args.record_mm,
        "seed": args.seed,
        "method": "nuts" if args.nuts else None,
    }
    section.update({k: v for k, v in given.items() if v is not None})
    design = design_from_section(section)
    cells = len(design.segment_mm) * len(design.draw_interval_days)
    progress(
        f"{cells} sampling design(s) x {len(design.fast_days) * len(design.rate_per_day)} "
        f"fast scenario(s), {design.animals} + {design.controls} animals each"
    )
    result = run_power(design, fit, log=progress)
    write_power(result, args.out)
    for line in describe_limits(result.limits, design.power):
        print(line)
    print(f"wrote {args.out} (power.csv, power_limits.csv, power.png, power.json)")
    return EXIT_OK


register(
    Command(
        name="power",
        help="plan a sampling design: how often a fast of X days at Y ‰/d would be detected",
        add_arguments=_power_arguments,
        run=_run_power,
        description="Power analysis of a sampling design by simulation: detection share and "
        "onset error of fasts against segment length, blood-draw interval, fast length and rate.",
        epilog=_POWER_EPILOG,
    )
)


# ---------------------------------------------------------------- presets

_PRESETS_EPILOG = (
    """\
examples:
  nstress presets                       # list the presets
  nstress presets otariid_female        # what it assumes and every value it sets

A preset is a starting point for a kind of animal: priors, tissue
discrimination, keratin growth and QC settings, each with its source. Name
one at the top of a workflow file (preset = "NAME"), or give --preset NAME
to `nstress fit`, `run`, `demo` or `init`. Precedence: package defaults <
preset < workflow file < command-line options (--set KEY=VALUE).

"""
    + EXIT_CODES
)


def _presets_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("name", nargs="?", metavar="NAME", help="show this preset")


def _run_presets(args: argparse.Namespace) -> int:
    from nstress.presets import available, describe, load_preset

    if args.name is not None:
        print(describe(load_preset(args.name)))
        return EXIT_OK
    names = available()
    width = max(len(n) for n in names)
    for n in names:
        print(f"{n:<{width}}  {load_preset(n).title}")
    print('\nShow one with `nstress presets NAME`; use it with preset = "NAME" in a workflow file.')
    return EXIT_OK


register(
    Command(
        name="presets",
        help="list the natural-history presets, or show what one assumes and sets",
        add_arguments=_presets_arguments,
        run=_run_presets,
        description="List the natural-history presets (starting values for a kind of animal, "
        "each with its source), or show one.",
        epilog=_PRESETS_EPILOG,
    )
)

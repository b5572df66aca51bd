"""Study-design power analysis: how often nstress detects a fast, and how well it dates it.

Before a field season the question is: "if an animal fasts for X days at Y ‰/d,
and I cut segments of L mm (or bleed every D days), how often will the
screening detect the fast, and how well will it date its onset?" This module
answers it by simulation with the package's own forward model
(:func:`nstress.model.simulate.simulate_colony`, the same equations the
model fits) and the package's own fit (:func:`nstress.workflow.pipeline.fit_tables`:
the fast screening mode by default, full NUTS when asked).

One *sampling design* is a segment length and a blood-draw interval (0: no
blood). One *fast scenario* is a fast length and an enrichment rate. For
every sampling design one synthetic colony is simulated and fitted: each
fast scenario is its own group (the model's unit of partial pooling) of
``animals`` fasting animals (fast length and rate within ±10 % of the
scenario's) and ``controls`` animals that do not fast (half with no diet
change, half with a trophic diet shift). A faster counts as *detected* when
the screening calls it ``catabolic`` (P(episode) at or above the
screening's ``flag`` threshold, default 0.8, with enough data to tell: what
a field team acts on); the onset error is |fitted onset − true onset| of the
detected fasters; the false-flag share is the share of controls called
``catabolic``.

The *detection limit* of a design is, per rate, the shortest simulated fast
detected in at least ``power`` (default 0.8, the conventional power of
Cohen 1988) of the animals. With a handful of animals per cell the
detection share is coarse: its 90 % interval (Wilson score) is reported
beside it.
"""

from __future__ import annotations

import dataclasses
import json
import math
import shutil
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from nstress.atomic import atomic_write, atomic_write_text
from nstress.errors import ConfigError
from nstress.products.screening import wilson_interval
from nstress.workflow.pipeline import FitConfig

FLAG_STATUS = "catabolic"
"""The screening status that counts as a detection (P(episode) >= the ``flag`` threshold)."""
SPREAD = 0.10
"""Fast length and rate of a scenario's animals vary by ± this share."""


@dataclass(frozen=True)
class PowerDesign:
    """The grid of a power analysis and how it is simulated.

    Attributes
    ----------
    segment_mm
        Keratin segment lengths to compare (mm).
    draw_interval_days
        Days between blood draws to compare; 0 = no blood sampled.
    fast_days
        Fast lengths to simulate (days).
    rate_per_day
        Enrichment rates while fasting (‰ δ15N per day).
    animals
        Fasting animals simulated per cell (sampling design × fast scenario).
    controls
        Animals that do not fast, per cell.
    keratin_tissue
        The keratin tissue cut into segments (a tissue of the registry).
    record_mm
        Length of keratin analysed per animal (mm); it is cut into
        ``round(record_mm / segment_mm)`` segments.
    blood_tissues
        Blood tissues measured at each draw.
    blood_window_days
        Draws are spread over this many days around the breeding date.
    method
        ``"fast"`` (the approximate screening mode) or ``"nuts"``.
    power
        Detection share that defines the detection limit.
    seed
        Seed of the simulations (the fits take the sampler's seed).
    """

    segment_mm: tuple[float, ...] = (1.0, 3.0, 6.0)
    draw_interval_days: tuple[int, ...] = (0,)
    fast_days: tuple[float, ...] = (10.0, 20.0, 40.0)
    rate_per_day: tuple[float, ...] = (0.03, 0.06)
    animals: int = 6
    controls: int = 2
    keratin_tissue: str = "whisker"
    record_mm: float = 30.0
    blood_tissues: tuple[str, ...] = ("plasma", "rbc")
    blood_window_days: int = 84
    method: str = "fast"
    power: float = 0.8
    seed: int = 1

    def __post_init__(self) -> None:
        """Check the grid (raises :class:`ConfigError` naming the key)."""
        for key in ("segment_mm", "draw_interval_days", "fast_days", "rate_per_day"):
            values = getattr(self, key)
            if not len(values):
                raise ConfigError("expected at least one value", key=f"design.{key}")
            object.__setattr__(self, key, tuple(sorted(set(values))))
        if min(self.segment_mm) <= 0 or min(self.fast_days) <= 0 or min(self.rate_per_day) <= 0:
            raise ConfigError("segment lengths, fast lengths and rates must be > 0", key="design")
        bad = [d for d in self.draw_interval_days if d != 0 and d < 3]
        if bad or min(self.draw_interval_days) < 0:
            raise ConfigError(
                "draw intervals are 0 (no blood) or at least 3 days",
                key="design.draw_interval_days",
            )
        if self.record_mm < max(self.segment_mm):
            raise ConfigError(
                f"record_mm ({self.record_mm:g}) is shorter than a segment", key="design.record_mm"
            )
        if self.animals < 1 or self.controls < 0:
            raise ConfigError("animals >= 1 and controls >= 0", key="design")
        if not 0 < self.power < 1:
            raise ConfigError("power is a share between 0 and 1", key="design.power")
        if self.method not in ("fast", "nuts"):
            raise ConfigError("method is 'fast' or 'nuts'", key="design.method")

    def to_dict(self) -> dict[str, Any]:
        """Return the design as plain data (for the result file)."""
        return {
            k: list(v) if isinstance(v, tuple) else v for k, v in dataclasses.asdict(self).items()
        }


@dataclass
class PowerResult:
    """What a power analysis found.

    Attributes
    ----------
    table
        One row per sampling design × fast scenario (see :func:`run_power`).
    limits
        One row per sampling design and rate: the shortest fast detected in
        at least ``design.power`` of the animals (NaN: none of the simulated
        fasts was).
    design
        The design that was simulated.
    info
        Timings, method and the growth rate used.
    """

    table: pd.DataFrame
    limits: pd.DataFrame
    design: PowerDesign
    info: dict[str, Any] = field(default_factory=dict)


def _cell_seed(seed: int, *values: float) -> int:
    """Return a seed from the design seed and a scenario (independent of the grid's order)."""
    words = [int(seed)] + [int(round(v * 1e6)) for v in values]
    return int(np.random.SeedSequence(words).generate_state(1)[0])


def _scenario_spec(
    design: PowerDesign, segment_mm: float, interval: int, fast: float, rate: float, k: int
) -> Any:
    """Return the :class:`~nstress.model.simulate.ColonySpec` of one cell (scenario ``k``)."""
    from nstress.model.simulate import ColonySpec

    n = design.animals + design.controls
    shares = {"faster": design.animals / n}
    if design.controls:
        half = design.controls // 2
        shares["neither"] = (design.controls - half) / n
        if half:
            shares["trophic_shift"] = half / n
    blood = interval > 0 and bool(design.blood_tissues)
    n_draws = design.blood_window_days // interval + 1 if blood else 1
    return ColonySpec(
        n_individuals=n,
        seed=_cell_seed(design.seed, fast, rate),
        groups=(f"fast{fast:g}d_rate{rate:g}",),
        id_prefixes=(f"S{k + 1:02d}_",),
        breeding_dates=("2025-01-10",),
        diet_means=((12.0, -17.0),),
        kind_shares=shares,
        keratin_tissue=design.keratin_tissue,
        n_segments=max(2, round(design.record_mm / segment_mm)),
        n_segments_spread=0,
        segment_mm=segment_mm,
        blood_share=1.0 if blood else 0.0,
        blood_tissues=tuple(design.blood_tissues) if blood else (),
        n_draws=n_draws,
        draw_interval_days=max(interval, 3),
        draw_lead_days=design.blood_window_days // 3,
        draw_jitter_days=min(1, (max(interval, 3) - 1) // 2),
        duration_days=(fast * (1 - SPREAD), fast * (1 + SPREAD)),
        kappa_per_day=(rate * (1 - SPREAD), rate * (1 + SPREAD)),
    )


def simulate_design(
    design: PowerDesign, segment_mm: float, interval: int, tissues: Any = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Simulate one sampling design: every fast scenario as its own group.

    Parameters
    ----------
    design
        The power design.
    segment_mm, interval
        The sampling design (segment length, mm; days between draws, 0 = none).
    tissues
        Tissue registry (default: the package's); growth and turnover come from it.

    Returns
    -------
    tuple
        The sample table (input format) and the truth per animal (with
        ``fast_days`` and ``rate_per_day`` of its scenario).
    """
    from nstress.model.simulate import simulate_colony

    tables, truths = [], []
    scenarios = [(f, r) for f in design.fast_days for r in design.rate_per_day]
    for k, (fast, rate) in enumerate(scenarios):
        spec = _scenario_spec(design, segment_mm, interval, fast, rate, k)
        if tissues is not None:
            spec = dataclasses.replace(spec, tissues=tissues)
        sim = simulate_colony(spec)
        tables.append(sim.table)
        truth = sim.truth_individuals.assign(fast_days=fast, rate_per_day=rate)
        truths.append(truth)
    return pd.concat(tables, ignore_index=True), pd.concat(truths, ignore_index=True)


def score_design(truth: pd.DataFrame, screening: pd.DataFrame) -> pd.DataFrame:
    """Score detection, onset error and false flags of one fitted sampling design.

    An animal counts as *flagged* when the screening gives it the status
    ``catabolic`` (P(episode) at or above the screening's ``flag`` threshold,
    with enough data to tell), which is what a field team acts on.

    Parameters
    ----------
    truth
        Truth per animal from :func:`simulate_design`.
    screening
        The fit's screening table (``status``, ``p_catabolic_any``, ``onset_date``).

    Returns
    -------
    pandas.DataFrame
        One row per fast scenario: ``fast_days``, ``rate_per_day``,
        ``n_fasters``, ``n_detected``, ``detected`` (share) with its 90 %
        interval ``detected_lo90``/``detected_hi90``,
        ``onset_error_median_days`` (detected fasters),
        ``p_episode_fasters_median``, ``n_controls``, ``false_flag_share``
        and ``p_episode_controls_median`` (over all controls of the design).
    """
    ti = truth.merge(
        screening[["individual", "status", "p_catabolic_any", "onset_date"]],
        on="individual",
        how="left",
        suffixes=("", "_fit"),
    )
    flagged = (ti["status"] == FLAG_STATUS).to_numpy()
    fasted = ti["has_episode"].astype(bool).to_numpy()
    err = (pd.to_datetime(ti["onset_date_fit"]) - pd.to_datetime(ti["onset_date"])).dt.days.abs()
    ti = ti.assign(_flag=flagged, _fasted=fasted, _err=err)
    controls = ti[~ti["_fasted"]]
    rows = []
    for (fast, rate), g in ti.groupby(["fast_days", "rate_per_day"], sort=True):
        f = g[g["_fasted"]]
        hit = f[f["_flag"]]
        rows.append(
            {
                "fast_days": fast,
                "rate_per_day": rate,
                "n_fasters": len(f),
                "n_detected": int(f["_flag"].sum()),
                "onset_error_median_days": float(hit["_err"].median()) if len(hit) else math.nan,
                "p_episode_fasters_median": float(f["p_catabolic_any"].median()),
            }
        )
    out = pd.DataFrame(rows)
    out["detected"] = out["n_detected"] / out["n_fasters"]
    lo, hi = wilson_interval(out["n_detected"].to_numpy(), out["n_fasters"].to_numpy())
    out["detected_lo90"], out["detected_hi90"] = lo, hi
    out["n_controls"] = len(controls)
    out["false_flag_share"] = float(controls["_flag"].mean()) if len(controls) else math.nan
    out["p_episode_controls_median"] = (
        float(controls["p_catabolic_any"].median()) if len(controls) else math.nan
    )
    return out


def detection_limits(table: pd.DataFrame, power: float) -> pd.DataFrame:
    """Find the shortest fast detected in at least ``power`` of the animals, per design, rate.

    Parameters
    ----------
    table
        :attr:`PowerResult.table`.
    power
        Detection share required.

    Returns
    -------
    pandas.DataFrame
        ``segment_mm``, ``draw_interval_days``, ``rate_per_day``,
        ``limit_fast_days`` (NaN: no simulated fast reached ``power``) and
        ``longest_fast_days`` (the longest fast simulated).
    """
    rows = []
    keys = ["segment_mm", "draw_interval_days", "rate_per_day"]
    for (seg, interval, rate), g in table.groupby(keys, sort=True):
        ok = g.loc[g["detected"] >= power, "fast_days"]
        rows.append(
            {
                "segment_mm": seg,
                "draw_interval_days": interval,
                "rate_per_day": rate,
                "limit_fast_days": float(ok.min()) if len(ok) else math.nan,
                "longest_fast_days": float(g["fast_days"].max()),
            }
        )
    return pd.DataFrame(rows)


def describe_limits(limits: pd.DataFrame, power: float) -> list[str]:
    """Say in one plain sentence per sampling design what it detects (report, CLI)."""
    out = []
    for (seg, interval), g in limits.groupby(["segment_mm", "draw_interval_days"], sort=True):
        where = f"{seg:g} mm segments" + (
            f", blood every {interval:g} d" if interval else ", no blood"
        )
        parts = []
        for _, r in g.iterrows():
            rate = f"at {r['rate_per_day']:g} ‰/d"
            if math.isnan(r["limit_fast_days"]):
                longest = r["longest_fast_days"]
                parts.append(f"{rate} none up to {longest:g} d (the longest simulated)")
            else:
                parts.append(f"{rate} fasts of ≥ {r['limit_fast_days']:g} d")
        out.append(
            f"{where}: fasts detected in ≥ {power:.0%} of the animals: " + "; ".join(parts) + "."
        )
    return out


def run_power(
    design: PowerDesign,
    config: FitConfig | None = None,
    work_dir: str | Path | None = None,
    log: Callable[[str], None] | None = None,
) -> PowerResult:
    """Simulate and fit every sampling design of ``design``; score detection and dating.

    Parameters
    ----------
    design
        The grid.
    config
        Fit settings (priors, tissues, grid, QC, model, sampler); its
        ``method`` is replaced by ``design.method``.
    work_dir
        Scratch directory for the fits (a temporary one by default; removed).
    log
        Progress callback.

    Returns
    -------
    PowerResult
        ``table`` has one row per sampling design × fast scenario with
        ``segment_mm``, ``days_per_segment``, ``draw_interval_days``,
        ``fast_days``, ``rate_per_day``, ``n_fasters``, ``n_detected``,
        ``detected`` with its 90 % interval, ``onset_error_median_days``,
        ``n_controls`` and ``false_flag_share``.
    """
    from nstress.tissues import resolve_tissues
    from nstress.workflow.pipeline import fit_tables

    say = log or (lambda m: None)
    base = config or FitConfig()
    tissues = resolve_tissues(base.tissues)
    if design.keratin_tissue not in tissues or tissues[design.keratin_tissue].klass != "keratin":
        raise ConfigError(
            f"{design.keratin_tissue!r} is not a keratin tissue", key="design.keratin_tissue"
        )
    growth = tissues[design.keratin_tissue].growth_mm_per_day
    sampler = {**base.sampler, "method": design.method}
    cfg = dataclasses.replace(base, sampler=sampler, report=False, progress=False, group=None)
    if work_dir is not None:
        Path(work_dir).mkdir(parents=True, exist_ok=True)
    scratch = Path(tempfile.mkdtemp(prefix="nstress-power-", dir=work_dir))
    rows, t0 = [], time.perf_counter()
    designs = [(s, d) for s in design.segment_mm for d in design.draw_interval_days]
    try:
        for n, (seg, interval) in enumerate(designs, 1):
            say(
                f"design {n}/{len(designs)}: {seg:g} mm segments, "
                + (f"blood every {interval} d" if interval else "no blood")
            )
            table, truth = simulate_design(design, seg, interval, tissues)
            folder = scratch / f"d{n}"
            folder.mkdir()
            table.to_csv(folder / "samples.csv", index=False)
            fit_tables([folder / "samples.csv"], folder / "fit", cfg)
            screening = pd.read_csv(folder / "fit" / "screening.csv")
            scored = score_design(truth, screening)
            scored.insert(0, "segment_mm", seg)
            scored.insert(1, "days_per_segment", seg / growth)
            scored.insert(2, "draw_interval_days", interval)
            rows.append(scored)
            shutil.rmtree(folder, ignore_errors=True)
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    table = pd.concat(rows, ignore_index=True)
    info = {
        "method": design.method,
        "approximate": design.method == "fast",
        "growth_mm_per_day": growth,
        "detected_status": FLAG_STATUS,
        "elapsed_s": round(time.perf_counter() - t0, 1),
    }
    return PowerResult(table, detection_limits(table, design.power), design, info)


def write_power(result: PowerResult, out: str | Path) -> dict[str, Path]:
    """Write ``power.csv``, ``power_limits.csv``, the figure and ``power.json`` (last).

    Parameters
    ----------
    result
        From :func:`run_power`.
    out
        Directory (created).

    Returns
    -------
    dict
        Name -> path of every file written.
    """
    from nstress.products.figures import power_figure, save_figure

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    paths = {"power.csv": out / "power.csv", "power_limits.csv": out / "power_limits.csv"}
    atomic_write(
        paths["power.csv"], lambda p: result.table.to_csv(p, index=False, float_format="%.4g")
    )
    atomic_write(
        paths["power_limits.csv"],
        lambda p: result.limits.to_csv(p, index=False, float_format="%.4g"),
    )
    fig = power_figure(
        result.table, power=result.design.power, approximate=result.info["approximate"]
    )
    for ext, path in save_figure(fig, out, "power").items():
        paths[f"power.{ext}"] = path
    doc = {
        "design": result.design.to_dict(),
        "info": result.info,
        "limits": describe_limits(result.limits, result.design.power),
        "limits_table": json.loads(result.limits.to_json(orient="records")),
        "units": {
            "segment_mm": "mm",
            "days_per_segment": "d",
            "draw_interval_days": "d (0 = no blood)",
            "fast_days": "d",
            "rate_per_day": "‰ δ15N per day",
            "detected": "share of fasting animals the screening calls catabolic",
            "onset_error_median_days": "d",
            "false_flag_share": "share of non-fasting animals the screening calls catabolic",
            "p_episode_fasters_median": "probability",
            "p_episode_controls_median": "probability",
        },
    }
    paths["power.json"] = out / "power.json"
    atomic_write_text(paths["power.json"], json.dumps(doc, indent=2, default=str))
    return paths


def observed_design(samples: pd.DataFrame, tissues: Any) -> dict[str, Any]:
    """Read the sampling design of real data: segment length, record length, draw interval.

    Parameters
    ----------
    samples
        Prepared samples (``tissue``, ``individual``, ``position_mm``,
        ``segment_length_mm``, ``date``).
    tissues
        Tissue registry (to tell keratin from blood).

    Returns
    -------
    dict
        ``keratin_tissue`` and its median ``segment_mm`` and ``record_mm``
        (``None`` without keratin), ``blood_tissues`` and the median
        ``draw_interval_days`` between an animal's draws (0 without blood).
    """
    out: dict[str, Any] = {"keratin_tissue": None, "segment_mm": None, "record_mm": None}
    klass = samples["tissue"].map(lambda t: tissues[t].klass if t in tissues else "")
    ker = samples[klass == "keratin"]
    if len(ker):
        out["keratin_tissue"] = str(ker["tissue"].mode().iloc[0])
        k = ker[ker["tissue"] == out["keratin_tissue"]]
        pos = pd.to_numeric(k["position_mm"], errors="coerce")
        seg = pd.to_numeric(
            k.get("segment_length_mm", pd.Series(np.nan, index=k.index)), errors="coerce"
        )
        if seg.isna().all():
            seg = pos.groupby(k["individual"]).transform(lambda s: s.sort_values().diff().median())
        out["segment_mm"] = float(np.nanmedian(seg))
        span = (pos + seg / 2).groupby(k["individual"]).max()
        out["record_mm"] = float(np.nanmedian(span))
    blood = samples[klass == "blood"]
    out["blood_tissues"] = sorted(map(str, blood["tissue"].unique())) if len(blood) else []
    out["draw_interval_days"] = 0
    if len(blood):
        days = pd.to_datetime(blood["date"], errors="coerce")
        per = (
            pd.DataFrame({"i": blood["individual"], "d": days})
            .drop_duplicates()
            .sort_values(["i", "d"])
        )
        gaps = per.groupby("i")["d"].diff().dt.days.dropna()
        if len(gaps):
            out["draw_interval_days"] = max(3, int(round(float(gaps.median()))))
    return out


def design_for_data(
    observed: dict[str, Any], section: dict[str, Any] | None = None
) -> PowerDesign | None:
    """Return a :class:`PowerDesign` for the data's own sampling design (``None`` without keratin).

    The fast lengths, rates and animal counts come from the workflow's
    ``[design]`` section (``section``); the segment length, record length,
    tissues and draw interval come from the data.
    """
    if observed.get("keratin_tissue") is None:
        return None
    keep = {
        k: v
        for k, v in (section or {}).items()
        if k in ("fast_days", "rate_per_day", "animals", "controls", "method", "power", "seed")
    }
    return PowerDesign(
        segment_mm=(round(observed["segment_mm"], 3),),
        draw_interval_days=(int(observed["draw_interval_days"]),),
        keratin_tissue=observed["keratin_tissue"],
        record_mm=max(observed["record_mm"], observed["segment_mm"]),
        blood_tissues=tuple(observed["blood_tissues"]) or ("plasma", "rbc"),
        **{k: tuple(v) if isinstance(v, list) else v for k, v in keep.items()},
    )


def design_from_section(section: dict[str, Any]) -> PowerDesign:
    """Return a :class:`PowerDesign` from a validated ``[design]`` section."""
    known = {f.name for f in dataclasses.fields(PowerDesign)}
    values = {k: tuple(v) if isinstance(v, list) else v for k, v in section.items() if k in known}
    return PowerDesign(**values)


def power_for_workflow(
    wf: Any, run_dir: str | Path, log: Callable[[str], None] | None = None, force: bool = False
) -> Path | None:
    """Run the power analysis of a workflow's own data design into ``RUN_DIR/power``.

    The segment length, record length, tissues and draw interval are read
    from the data (:func:`observed_design`); the fasts, rates and animal
    counts from the workflow's ``[design]`` section. A finished analysis of
    the same design and settings is kept (not redone) unless ``force``.

    Parameters
    ----------
    wf
        A :class:`nstress.workflow.config.Workflow` with a ``design`` section.
    run_dir
        The run directory.
    log
        Progress callback.
    force
        Redo a finished analysis.

    Returns
    -------
    pathlib.Path or None
        The directory written (or kept); ``None`` when the data have no
        keratin (the simulator needs a keratin record) or no design section.
    """
    from nstress.intake import read_samples
    from nstress.prep import prepare
    from nstress.products.report import POWER_DIR
    from nstress.tissues import resolve_tissues
    from nstress.workflow.pipeline import config_hash

    say = log or (lambda m: None)
    if wf.design is None or not wf.design.get("for_data", True):
        return None
    tissues = resolve_tissues(wf.fit.tissues)
    intake = read_samples([str(t) for t in wf.tables], tissues=tissues)
    prepared = prepare(intake, tissues=tissues, config=wf.fit.qc or None)
    used = prepared.samples[~prepared.samples["key"].isin(set(prepared.ledger.excluded_keys()))]
    observed = observed_design(used, tissues)
    section = {"seed": wf.seed, **wf.design}
    design = design_for_data(observed, section)
    if design is None:
        say("power analysis skipped: the data have no keratin record to simulate")
        return None
    out = Path(run_dir) / POWER_DIR
    key = config_hash(intake.sources, {"design": design.to_dict(), "fit": wf.fit.result_config()})
    done = out / "power.json"
    if not force and done.exists():
        try:
            if json.loads(done.read_text()).get("info", {}).get("key") == key:
                say("power analysis of this design is finished and unchanged; kept")
                return out
        except (OSError, ValueError):
            pass
    say(f"power analysis of the data's design ({design.segment_mm[0]:g} mm segments)")
    result = run_power(design, wf.fit, work_dir=run_dir, log=say)
    result.info.update({"observed": observed, "key": key})
    write_power(result, out)
    for line in describe_limits(result.limits, design.power):
        say(line)
    return out

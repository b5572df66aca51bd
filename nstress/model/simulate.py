"""Forward simulator: synthetic colonies with known truth.

Every colony made here is **synthetic**. The simulator draws a sampling
design (whisker segments for every animal, serial paired blood draws for a
share of them), places it on the exact time base the model will build from
the resulting table (:func:`nstress.prep.timebase.build_timebase`,
:func:`nstress.model.forward.make_grid`), draws true parameters, and
evaluates the *same* deterministic model that the PyMC model uses
(:func:`nstress.model.forward.predict` and
:func:`nstress.model.forward.with_episode`); there is no second copy of the
physics. Observation noise is then added and the values rounded as a lab
would report them.

The result is a sample table in the input format of the contract plus truth
tables (one row per animal, one row per animal and bin) for recovery checks.
Everything is drawn from one :class:`numpy.random.Generator` seeded from
:attr:`ColonySpec.seed`, in a fixed order, so that the same spec gives
byte-identical files.

Kinds of animal
---------------
``faster``
    one catabolic episode (fasting while breeding), no diet shift;
``trophic_shift``
    one diet shift along the food web (δ15N and δ13C move together), no fast;
``habitat_shift``
    one diet shift that mostly moves δ13C (inshore/offshore), no fast;
``faster+shift``
    an episode and a shift (trophic or habitat, half and half);
``neither``
    neither; the diet only wanders a little;
``baseline_shift``
    no fast and no diet change, but the food web's baseline δ15N rises for a
    while (a stay in a region of higher baseline δ15N around the breeding
    date) and falls back: bulk δ15N and phenylalanine rise together, δ13C
    stays flat. Without amino-acid data it looks like a fast in δ15N; with
    them, phenylalanine says it was the baseline (share 0 by default).

Amino acids (optional, :attr:`ColonySpec.amino_acid_every`)
-----------------------------------------------------------
Every k-th sample of each animal and tissue (in table order: a whisker's
segments from the root, blood draws by date) gets δ15N of phenylalanine and
glutamic acid: Phe = the animal's Phe level + PHE_TDF·(TP − 1) + the baseline path
over the sample's window (the same forward model and kernels as the bulk
values, :func:`nstress.model.forward.predict`) + noise, and
Glu = Phe + β + TDF·(TP − 1) + noise (Chikaraishi et al. 2009), with TP the
animal's trophic position (plus ΔN/3.4 of a trophic shift, Post 2002).
These draws, and the baseline shifts, come from a second generator seeded
from the spec's seed, so that switching them on leaves every other value of
the colony as it was (and the defaults leave every file byte-identical).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from nstress import equations as eq
from nstress.aminoacids import FOOD_WEBS, PHE_TDF
from nstress.errors import ConfigError
from nstress.model.forward import (
    DEFAULT_KNOT_DAYS,
    Grid,
    Params,
    Prediction,
    expected,
    make_grid,
    predict,
)
from nstress.prep.timebase import DEFAULT_BIN_DAYS, TimeBase, build_timebase
from nstress.tissues import DEFAULT_TISSUES, Tissue

KINDS = ("faster", "trophic_shift", "habitat_shift", "faster+shift", "neither", "baseline_shift")
"""Kinds of simulated animal, in a fixed order (see the module docstring)."""

DEFAULT_KIND_SHARES: dict[str, float] = {
    "faster": 0.35,
    "trophic_shift": 0.15,
    "habitat_shift": 0.15,
    "faster+shift": 0.15,
    "neither": 0.20,
}
"""Default share of each kind of animal in a colony."""

EPISODE_KINDS = ("faster", "faster+shift")
SHIFT_KINDS = ("trophic_shift", "habitat_shift", "faster+shift")

SAMPLE_COLUMNS = [
    "individual",
    "tissue",
    "d15N",
    "d13C",
    "position_mm",
    "segment_length_mm",
    "collected",
    "date",
    "group",
    "sample_id",
    "sd_d15N",
    "sd_d13C",
    "mass_kg",
    "pct_C",
    "pct_N",
    "cn_ratio",
    "lipid_extracted",
    "d15N_Glu",
    "d15N_Phe",
    "sd_d15N_Glu",
    "sd_d15N_Phe",
]
"""Columns of :attr:`Simulation.table`, in order (optional ones only when switched on)."""

_EPOCH = np.datetime64("1970-01-01", "D")
_TRUTH_DECIMALS = 5


@dataclass(frozen=True)
class ColonySpec:
    """Everything that defines a synthetic colony; every knob has a default.

    Dates are ISO strings; "days" are calendar days; δ values are ‰.

    Parameters
    ----------
    n_individuals
        Number of animals (split as evenly as possible over ``groups``).
    seed
        Seed of the :class:`numpy.random.Generator`; same spec and seed give
        identical output.
    groups
        Names of the groups (colonies), the unit of partial pooling. The
        default names are invented.
    id_prefixes
        Prefix of the animal identifiers per group (default ``"A"``, ``"B"``
        ...); identifiers are ``<prefix><number>``, zero-padded.
    breeding_dates
        Per group: the colony's breeding date, the mean onset of fasting
        (ISO). Blood draws, whisker collection and diet-shift windows are
        placed relative to it.
    kind_shares
        Share of each kind (keys from :data:`KINDS`; missing kinds get 0).
        Counts are rounded by largest remainder; when ``n_individuals`` ≥ 10
        every kind with a positive share gets at least one animal. Use
        ``{"neither": 1.0}`` (with ``walk_sd=0``) for a colony with no
        fasting and no diet change.
    keratin_tissue
        Keratin tissue sampled from every animal (a name in the registry).
    n_segments
        Typical number of contiguous segments per keratin piece.
    n_segments_spread
        Each piece has ``n_segments ± U{0..spread}`` segments (pieces differ
        in length).
    segment_mm
        Length of every segment (mm); positions are midpoints from the root.
    collection_offset_days
        The keratin is pulled this many days after the group's breeding date
        (end of the season) ...
    collection_spread_days
        ... plus ``U{0..spread}`` days per animal (captures over a week or so).
    blood_share
        Share of animals with serial blood draws (0 gives a keratin-only
        colony). The animals are spread evenly over the kinds.
    blood_tissues
        Blood tissues measured at each draw (paired: all from every draw).
    n_draws
        Number of draws per animal with blood.
    draw_interval_days
        Nominal days between draws.
    draw_lead_days
        First draw this many days before the group's breeding date.
    draw_jitter_days
        Each draw is moved by ``U{−j..j}`` days (must be < interval / 2).
    bin_width
        Width Δ of the time base's bins (days), passed to ``build_timebase``.
    knot_days
        Knot spacing of the diet random walk (days), passed to ``make_grid``.
    onset_sd_days
        SD of an animal's episode onset around its group's breeding date (d).
    duration_days
        Range of the episode duration (uniform, days).
    kappa_per_day
        Range of the enrichment rate κ while catabolic (uniform, ‰ δ15N/d).
    tau_rec_days
        Range of the recovery time τ (uniform, days).
    gamma_mean, gamma_sd
        Colony value and between-animal SD of γ, the δ13C change per ‰ of
        catabolic δ15N (δ13C level or falling under catabolism).
    diet_means
        Per group: mean (δ15N, δ13C) of the assimilated diet at the
        body-pool level (‰).
    baseline_sd, baseline_corr
        Between-animal SD of the diet level (each isotope, ‰) and the N–C
        correlation.
    walk_sd, walk_corr
        SD of the diet random-walk increment per knot (each isotope, ‰) and
        the N–C correlation of the increments. 0 gives a constant diet.
    trophic_shift_d15N
        Range of |ΔN| of a trophic shift (uniform, ‰; sign ±1 at random).
    trophic_c_per_n
        Range of ΔC/ΔN of a trophic shift (uniform); a full trophic step is
        about +3.4 ‰ N with +0.4 to +1 ‰ C (Post 2002).
    habitat_shift_d13C
        Range of |ΔC| of a habitat shift (uniform, ‰; sign ±1 at random).
    habitat_shift_d15N_sd
        SD of the small ΔN of a habitat shift (‰).
    shift_window_days
        Diet shifts fall in this window of days relative to the group's
        breeding date, clipped to the keratin record (one knot spacing in
        from both of its ends). The shift is one random-walk increment, so
        it ramps over one knot interval; its recorded date is the middle of
        that ramp.
    analytical_sd
        Analytical SD of every measurement (‰), written to ``sd_d15N`` and
        ``sd_d13C``.
    extra_sd
        Extra (tissue) SD added in quadrature to the analytical SD (‰).
    decimals
        Round δ values to this many decimals (``None``: no rounding).
    with_d13C
        ``False`` leaves ``d13C`` (and ``sd_d13C``) empty: δ15N-only data.
    include_chemistry
        Write ``pct_C``, ``pct_N`` and an atomic ``cn_ratio`` inside the
        tissue's accepted C:N range (they carry no signal).
    include_mass
        Write ``mass_kg`` per animal (log-normal around ``mass_kg_mean``).
        The true turnover rates do *not* follow it: they are the tissue
        defaults.
    mass_kg_mean
        Median body mass for ``include_mass`` (kg).
    tissues
        Tissue registry (default :data:`nstress.tissues.DEFAULT_TISSUES`):
        discrimination, half-lives, growth and growth SD come from here.
    amino_acid_every
        0 (default): no amino-acid columns. k ≥ 1: every k-th sample of each
        animal and tissue (in table order, the first included) gets
        ``d15N_Phe`` and ``d15N_Glu`` with their SDs (see the module
        docstring).
    amino_acid_sd
        Analytical SD of the amino-acid values (‰), written to the sd columns
        and used as their noise.
    phe_level
        Mean δ15N of phenylalanine of the primary producers (‰; invented).
    phe_level_sd
        Between-animal SD of that level (‰).
    trophic_position
        Range of the animals' trophic position (uniform).
    food_web
        Food web whose β and TDF make the Glu values (:data:`nstress.aminoacids.FOOD_WEBS`).
    baseline_shift_d15N
        Range of the rise of the baseline δ15N of a ``baseline_shift`` animal (‰).
    baseline_shift_window_days
        Its start, in days relative to the group's breeding date (uniform).
    baseline_stay_days
        How long the baseline stays up before it falls back (uniform, days).
    """

    n_individuals: int = 36
    seed: int = 0
    groups: tuple[str, ...] = ("colony_A", "colony_B")
    id_prefixes: tuple[str, ...] | None = None
    breeding_dates: tuple[str, ...] = ("2024-11-28", "2024-12-06")
    kind_shares: Mapping[str, float] = field(default_factory=lambda: dict(DEFAULT_KIND_SHARES))
    keratin_tissue: str = "whisker"
    n_segments: int = 30
    n_segments_spread: int = 3
    segment_mm: float = 1.0
    collection_offset_days: int = 100
    collection_spread_days: int = 6
    blood_share: float = 0.5
    blood_tissues: tuple[str, ...] = ("plasma", "rbc")
    n_draws: int = 13
    draw_interval_days: int = 7
    draw_lead_days: int = 14
    draw_jitter_days: int = 1
    bin_width: float = DEFAULT_BIN_DAYS
    knot_days: float = DEFAULT_KNOT_DAYS
    onset_sd_days: float = 10.0
    duration_days: tuple[float, float] = (20.0, 60.0)
    kappa_per_day: tuple[float, float] = (0.03, 0.08)
    tau_rec_days: tuple[float, float] = (20.0, 60.0)
    gamma_mean: float = -0.1
    gamma_sd: float = 0.05
    diet_means: tuple[tuple[float, float], ...] = ((12.0, -17.0), (12.4, -16.6))
    baseline_sd: float = 0.5
    baseline_corr: float = 0.5
    walk_sd: float = 0.05
    walk_corr: float = 0.6
    trophic_shift_d15N: tuple[float, float] = (1.0, 2.5)
    trophic_c_per_n: tuple[float, float] = (0.12, 0.3)
    habitat_shift_d13C: tuple[float, float] = (1.0, 2.0)
    habitat_shift_d15N_sd: float = 0.15
    shift_window_days: tuple[float, float] = (-180.0, 60.0)
    analytical_sd: float = 0.15
    extra_sd: float = 0.05
    decimals: int | None = 2
    with_d13C: bool = True
    include_chemistry: bool = True
    include_mass: bool = False
    mass_kg_mean: float = 35.0
    tissues: Mapping[str, Tissue] | None = None
    amino_acid_every: int = 0
    amino_acid_sd: float = 0.5
    phe_level: float = 4.0
    phe_level_sd: float = 0.5
    trophic_position: tuple[float, float] = (3.0, 4.0)
    food_web: str = "aquatic"
    baseline_shift_d15N: tuple[float, float] = (1.5, 2.5)
    baseline_shift_window_days: tuple[float, float] = (-15.0, 5.0)
    baseline_stay_days: tuple[float, float] = (30.0, 60.0)

    def registry(self) -> dict[str, Tissue]:
        """Return the tissue registry the simulation uses."""
        return dict(self.tissues) if self.tissues is not None else dict(DEFAULT_TISSUES)

    def validate(self) -> None:
        """Check the spec's consistency.

        Raises
        ------
        ConfigError
            If a knob is out of range or the per-group tuples do not match
            ``groups``.
        """
        G = len(self.groups)
        if self.n_individuals < 1:
            raise ConfigError("n_individuals must be >= 1", key="n_individuals")
        if G < 1 or len(set(self.groups)) != G:
            raise ConfigError("groups must be one or more distinct names", key="groups")
        for name in ("breeding_dates", "diet_means"):
            if len(getattr(self, name)) != G:
                raise ConfigError(f"{name} needs one entry per group ({G})", key=name)
        if self.id_prefixes is not None and len(set(self.id_prefixes)) != G:
            raise ConfigError("id_prefixes needs one distinct prefix per group", key="id_prefixes")
        unknown = set(self.kind_shares) - set(KINDS)
        if unknown:
            raise ConfigError(
                f"unknown kind(s) {sorted(unknown)}; expected some of {list(KINDS)}",
                key="kind_shares",
            )
        if any(v < 0 for v in self.kind_shares.values()) or sum(self.kind_shares.values()) <= 0:
            raise ConfigError("kind shares must be >= 0 and not all 0", key="kind_shares")
        reg = self.registry()
        if self.keratin_tissue not in reg or not reg[self.keratin_tissue].is_keratin:
            raise ConfigError(
                f"{self.keratin_tissue!r} is not a keratin tissue of the registry",
                key="keratin_tissue",
            )
        for t in self.blood_tissues:
            if t not in reg or reg[t].is_keratin:
                raise ConfigError(
                    f"{t!r} is not a blood tissue of the registry", key="blood_tissues"
                )
        if not 0.0 <= self.blood_share <= 1.0:
            raise ConfigError("blood_share must be in [0, 1]", key="blood_share")
        if self.n_segments - self.n_segments_spread < 1 or self.segment_mm <= 0:
            raise ConfigError("need at least one segment of positive length", key="n_segments")
        if self.draw_interval_days <= 2 * self.draw_jitter_days:
            raise ConfigError(
                "draw_jitter_days must be < draw_interval_days / 2 so draws stay in order",
                key="draw_jitter_days",
            )
        if self.n_draws < 1 and self.blood_share > 0:
            raise ConfigError("n_draws must be >= 1 when blood_share > 0", key="n_draws")
        for name in ("duration_days", "tau_rec_days"):
            lo, hi = getattr(self, name)
            if not 0 < lo <= hi:
                raise ConfigError(f"{name} must be a range of positive days", key=name)
        lo, hi = self.kappa_per_day
        if not 0 <= lo <= hi:
            raise ConfigError("kappa_per_day must be a range of values >= 0", key="kappa_per_day")
        if self.analytical_sd < 0 or self.extra_sd < 0:
            raise ConfigError("noise SDs must be >= 0", key="analytical_sd")
        if self.amino_acid_every < 0:
            raise ConfigError("amino_acid_every must be >= 0", key="amino_acid_every")
        if not self.amino_acid_sd > 0:
            raise ConfigError("amino_acid_sd must be > 0 ‰", key="amino_acid_sd")
        if self.food_web not in FOOD_WEBS:
            raise ConfigError(
                f"unknown food web {self.food_web!r}; expected one of {list(FOOD_WEBS)}",
                key="food_web",
            )
        lo, hi = self.baseline_stay_days
        if not 0 < lo <= hi:
            raise ConfigError(
                "baseline_stay_days must be a range of positive days", key="baseline_stay_days"
            )


@dataclass
class Simulation:
    """A simulated colony and its truth.

    Attributes
    ----------
    spec
        The spec it was made from.
    table
        Sample table in the input format (:data:`SAMPLE_COLUMNS`; dates as
        ISO strings).
    truth_individuals
        One row per animal: kind, episode, shift, growth, blood.
    truth_bins
        One row per animal and real bin of :attr:`timebase`: diet,
        enrichment and the share of the bin inside the episode.
    params
        The true :class:`nstress.model.forward.Params` (NumPy), indexed like
        ``timebase.individuals`` and ``timebase.tissues``.
    timebase
        The time base built from the design (the one the model will build
        from :attr:`table`).
    grid
        Knots and walk basis of :attr:`timebase`.
    prediction
        Noise-free :class:`nstress.model.forward.Prediction`.
    """

    spec: ColonySpec
    table: pd.DataFrame
    truth_individuals: pd.DataFrame
    truth_bins: pd.DataFrame
    params: Params
    timebase: TimeBase
    grid: Grid
    prediction: Prediction


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------
def table_to_samples(table: pd.DataFrame) -> pd.DataFrame:
    """Turn a sample table (contract format) into the prepared samples ``build_timebase`` reads.

    A convenience for tests and benchmarks that bypass intake: it parses the
    dates, lower-cases tissues, adds the canonical columns the time base
    needs when they are missing (``sd_d15N``, ``sd_d13C``,
    ``segment_length_mm``, ``growth_mm_per_day``, ``growth_sd_mm_per_day``
    as NaN; ``group`` as ``"all"``; ``source_file`` and 1-based
    ``source_row``) and drops rows with neither δ15N nor δ13C. It does no
    validation, QC or row accounting; real input goes through intake.

    Parameters
    ----------
    table
        Sample table with at least ``individual``, ``tissue``, ``d15N``,
        ``d13C`` and, per tissue class, ``position_mm`` + ``collected`` or
        ``date``.

    Returns
    -------
    pandas.DataFrame
        Prepared samples.
    """
    df = table.copy()
    n = len(df)
    if "source_row" not in df:
        df["source_row"] = np.arange(1, n + 1)
    if "source_file" not in df:
        df["source_file"] = "<table>"
    for col in ("collected", "date"):
        df[col] = pd.to_datetime(df[col], errors="coerce") if col in df else pd.NaT
    for col in (
        "d15N",
        "d13C",
        "sd_d15N",
        "sd_d13C",
        "position_mm",
        "segment_length_mm",
        "growth_mm_per_day",
        "growth_sd_mm_per_day",
    ):
        df[col] = pd.to_numeric(df[col], errors="coerce") if col in df else np.nan
    df["individual"] = df["individual"].astype(str)
    df["tissue"] = df["tissue"].astype(str).str.strip().str.lower()
    df["group"] = df["group"].astype(str) if "group" in df else "all"
    keep = df[["d15N", "d13C"]].notna().any(axis=1)
    return df.loc[keep].reset_index(drop=True)


def _days(iso: str | np.ndarray) -> np.ndarray:
    """Days since 1970-01-01 (midnight) of ISO dates, as float."""
    return (np.asarray(iso, dtype="datetime64[D]") - _EPOCH).astype(float)


def _iso(days: np.ndarray) -> np.ndarray:
    """ISO strings of float days since 1970-01-01 (floor to the day); NaN -> None."""
    d = np.asarray(days, dtype=float)
    ok = np.isfinite(d)
    out = np.full(d.shape, None, dtype=object)
    if ok.any():
        dates = _EPOCH + np.floor(d[ok]).astype("timedelta64[D]")
        out[ok] = np.datetime_as_string(dates, unit="D")
    return out


def _corr_normal(rng: np.random.Generator, shape: tuple[int, ...], sd: float, corr: float):
    """Draws of (N, C) pairs with SD ``sd`` and correlation ``corr``, shape ``shape + (2,)``."""
    chol = np.linalg.cholesky(np.array([[1.0, corr], [corr, 1.0]]))
    return sd * (rng.standard_normal(shape + (2,)) @ chol.T)


def kind_counts(n: int, shares: Mapping[str, float]) -> dict[str, int]:
    """Return the number of animals of each kind.

    Largest-remainder rounding of ``n · share`` (ties in :data:`KINDS`
    order); when ``n`` ≥ 10 (and ≥ the number of kinds), every kind with a
    positive share gets at least one animal, taken from the largest kind.

    Parameters
    ----------
    n
        Number of animals.
    shares
        Share per kind (need not sum to 1).

    Returns
    -------
    dict
        Kind -> count, in :data:`KINDS` order, summing to ``n``.
    """
    kinds = [k for k in KINDS if shares.get(k, 0.0) > 0]
    w = np.array([shares[k] for k in kinds], dtype=float)
    raw = n * w / w.sum()
    counts = np.floor(raw).astype(int)
    rest = n - counts.sum()
    order = np.argsort(-(raw - counts), kind="stable")
    counts[order[:rest]] += 1
    if n >= max(10, len(kinds)):
        for j in range(len(kinds)):
            if counts[j] == 0:
                counts[int(np.argmax(counts))] -= 1
                counts[j] = 1
    out = {k: 0 for k in KINDS}
    out.update({k: int(c) for k, c in zip(kinds, counts, strict=True)})
    return out


# --------------------------------------------------------------------------
# the design
# --------------------------------------------------------------------------
def _design(spec: ColonySpec, rng: np.random.Generator) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Draw the sampling design: the table without measured values, and per-animal facts."""
    n = spec.n_individuals
    G = len(spec.groups)
    sizes = np.array([len(a) for a in np.array_split(np.arange(n), G)])
    group_of = np.repeat(np.arange(G), sizes)
    prefixes = spec.id_prefixes or tuple(chr(ord("A") + g) for g in range(G))
    width = max(2, len(str(int(sizes.max()))))
    within = np.arange(n) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    ids = np.array(
        [f"{prefixes[g]}{k + 1:0{width}d}" for g, k in zip(group_of, within, strict=True)]
    )

    # kinds, then blood spread evenly over the kinds
    counts = kind_counts(n, spec.kind_shares)
    kinds = np.array([k for k in KINDS for _ in range(counts[k])], dtype=object)
    kinds = kinds[rng.permutation(n)]
    tiebreak = rng.random(n)
    by_kind = np.lexsort((tiebreak, [KINDS.index(k) for k in kinds]))
    j = np.arange(n)
    pick = np.floor((j + 1) * spec.blood_share + 1e-9) > np.floor(j * spec.blood_share + 1e-9)
    has_blood = np.zeros(n, bool)
    has_blood[by_kind[pick]] = True
    if not spec.blood_tissues:
        has_blood[:] = False

    breed = _days(list(spec.breeding_dates))[group_of]
    collect = breed + spec.collection_offset_days
    collect = collect + rng.integers(0, spec.collection_spread_days + 1, n)
    n_seg = spec.n_segments + rng.integers(-spec.n_segments_spread, spec.n_segments_spread + 1, n)
    first = breed - spec.draw_lead_days
    nd = max(spec.n_draws, 1)
    jitter = rng.integers(-spec.draw_jitter_days, spec.draw_jitter_days + 1, (n, nd))
    draws = first[:, None] + spec.draw_interval_days * np.arange(nd) + jitter

    # keratin rows
    ki = np.repeat(np.arange(n), n_seg)
    kj = np.arange(ki.size) - np.repeat(np.cumsum(n_seg) - n_seg, n_seg)
    ker = pd.DataFrame(
        {
            "_i": ki,
            "_order": kj,
            "tissue": spec.keratin_tissue,
            "position_mm": np.round((kj + 0.5) * spec.segment_mm, 6),
            "segment_length_mm": float(spec.segment_mm),
            "collected": _iso(collect[ki]),
            "date": None,
            "sample_id": [
                f"{ids[i]}-{spec.keratin_tissue}-{k + 1:02d}" for i, k in zip(ki, kj, strict=True)
            ],
        }
    )
    # blood rows: every draw of an animal with blood, every blood tissue
    bi_ind = np.flatnonzero(has_blood)
    nt = len(spec.blood_tissues)
    if bi_ind.size and nt:
        bi = np.repeat(bi_ind, spec.n_draws * nt)
        bd = np.tile(np.repeat(np.arange(spec.n_draws), nt), bi_ind.size)
        bt = np.tile(np.array(spec.blood_tissues, dtype=object), bi_ind.size * spec.n_draws)
        blood = pd.DataFrame(
            {
                "_i": bi,
                "_order": 10_000 + bd * nt + np.tile(np.arange(nt), bi_ind.size * spec.n_draws),
                "tissue": bt,
                "position_mm": np.nan,
                "segment_length_mm": np.nan,
                "collected": None,
                "date": _iso(draws[bi, bd]),
                "sample_id": [
                    f"{ids[i]}-{t}-{d + 1:02d}" for i, t, d in zip(bi, bt, bd, strict=True)
                ],
            }
        )
        design = pd.concat([ker, blood], ignore_index=True)
    else:
        design = ker
    design = design.sort_values(["_i", "_order"], kind="stable").reset_index(drop=True)
    design.insert(0, "individual", ids[design["_i"].to_numpy()])
    design["group"] = np.asarray(spec.groups, dtype=object)[group_of[design["_i"].to_numpy()]]
    design["_i"] = design["_i"].astype(int)

    animals = pd.DataFrame(
        {
            "individual": ids,
            "group": np.asarray(spec.groups, dtype=object)[group_of],
            "_g": group_of,
            "kind": kinds,
            "has_blood": has_blood,
            "_breed": breed,
            "_collect": collect,
            "n_segments": n_seg,
        }
    )
    return design, animals


# --------------------------------------------------------------------------
# the simulator
# --------------------------------------------------------------------------
def simulate_colony(spec: ColonySpec | None = None) -> Simulation:
    """Simulate a synthetic colony with known truth.

    Parameters
    ----------
    spec
        The colony's knobs (default :class:`ColonySpec`).

    Returns
    -------
    Simulation
        Sample table, truth tables, true parameters and the time base.

    Raises
    ------
    ConfigError
        If the spec is inconsistent (:meth:`ColonySpec.validate`).
    """
    spec = spec or ColonySpec()
    spec.validate()
    rng = np.random.default_rng(spec.seed)
    reg = spec.registry()

    # (1) design, (2) the exact time base and grid the model will see
    design, animals = _design(spec, rng)
    samples = table_to_samples(
        design.assign(d15N=0.0, d13C=0.0, sd_d15N=spec.analytical_sd, sd_d13C=spec.analytical_sd)
    )
    tb = build_timebase(samples, reg, bin_width=spec.bin_width)
    grid = make_grid(tb, knot_days=spec.knot_days)
    order = pd.Index(animals["individual"]).get_indexer(tb.individuals)
    a = animals.iloc[order].reset_index(drop=True)
    I = tb.n_individuals  # noqa: E741
    K = grid.n_steps
    origin = (tb.origin - _EPOCH).astype(float)
    kind = a["kind"].to_numpy()
    g = a["_g"].to_numpy()
    breed = a["_breed"].to_numpy() - origin  # days since each animal's origin
    collect = a["_collect"].to_numpy() + 0.5 - origin

    # (3) true parameters -------------------------------------------------
    # growth multipliers per animal and keratin tissue
    n_ker = max(len(tb.keratin_tissues), 1)
    sd_log = np.array([reg[t].growth_sd_log for t in tb.keratin_tissues] or [0.0])
    growth = np.exp(rng.standard_normal((I, n_ker)) * sd_log[None, :])
    # episodes (drawn for everyone so the stream does not depend on kinds)
    has_ep = np.isin(kind, EPISODE_KINDS)
    onset = breed + spec.onset_sd_days * rng.standard_normal(I)
    duration = rng.uniform(*spec.duration_days, I)
    kappa = rng.uniform(*spec.kappa_per_day, I)
    tau = rng.uniform(*spec.tau_rec_days, I)
    gamma = spec.gamma_mean + spec.gamma_sd * rng.standard_normal(I)
    kappa = np.where(has_ep, kappa, 0.0)
    # diet: level, random walk, one shift for shifters
    means = np.asarray(spec.diet_means, dtype=float)[g]
    baseline = means + _corr_normal(rng, (I,), spec.baseline_sd, spec.baseline_corr)
    steps = _corr_normal(rng, (I, K), spec.walk_sd, spec.walk_corr)
    has_shift = np.isin(kind, SHIFT_KINDS)
    trophic = (kind == "trophic_shift") | ((kind == "faster+shift") & (rng.random(I) < 0.5))
    sign_n = rng.choice([-1.0, 1.0], I)
    sign_c = rng.choice([-1.0, 1.0], I)
    dn_t = sign_n * rng.uniform(*spec.trophic_shift_d15N, I)
    dc_t = dn_t * rng.uniform(*spec.trophic_c_per_n, I)
    dc_h = sign_c * rng.uniform(*spec.habitat_shift_d13C, I)
    dn_h = spec.habitat_shift_d15N_sd * rng.standard_normal(I)
    shift_dn = np.where(has_shift, np.where(trophic, dn_t, dn_h), 0.0)
    shift_dc = np.where(has_shift, np.where(trophic, dc_t, dc_h), 0.0)
    # shift date: inside the window and the keratin record, snapped to a knot step
    k = tb.keratin
    rec_start = np.where(k.mask, k.t - k.h_hi / growth[np.arange(I)[:, None], k.slot], np.inf)
    rec_start = rec_start.min(axis=1)
    rec_start = np.where(np.isfinite(rec_start), rec_start, 0.0)
    margin = float(np.diff(grid.knots[:2])[0])
    lo = np.maximum(breed + spec.shift_window_days[0], rec_start + margin)
    hi = np.minimum(breed + spec.shift_window_days[1], collect - margin)
    bad = lo >= hi
    lo = np.where(bad, rec_start + margin, lo)
    hi = np.where(bad, np.maximum(collect - margin, rec_start + margin + 1e-6), hi)
    when = rng.uniform(0.0, 1.0, I) * (hi - lo) + lo
    step_at = np.clip(np.searchsorted(grid.knots, when, side="right") - 1, 0, K - 1)
    shift_t = 0.5 * (grid.knots[step_at] + grid.knots[step_at + 1])
    # the shift is the model's explicit shift term: a ramp over one knot interval
    shift_size = np.stack([shift_dn, shift_dc], axis=-1)
    shift_start = grid.knots[step_at].astype(float)
    # tissues
    tdef = [reg[t] for t in tb.tissues]
    disc = np.array([[t.disc_d15N, t.disc_d13C] for t in tdef])
    rate = np.array([1.0 if t.is_keratin else t.rate_per_day for t in tdef])
    params = Params(
        baseline=baseline,
        steps=steps,
        onset=onset,
        duration=duration,
        kappa=kappa,
        tau_rec=tau,
        gamma=gamma,
        disc=disc,
        rate=rate,
        growth=growth,
        shift_size=shift_size,
        shift_start=shift_start,
    )

    # (4) the same forward model the PyMC model uses, then noise ---------------
    pred = predict(tb, grid, params)
    yb, yk = expected(pred, gamma, shift_size)
    aa = _amino_acid_truth(spec, tb, grid, params, pred, kind, breed, trophic, shift_dn)
    if aa is not None:  # the baseline moves bulk δ15N with phenylalanine
        yb[..., 0] += aa.baseline["blood"]
        yk[..., 0] += aa.baseline["keratin"]
    sigma = math.hypot(spec.analytical_sd, spec.extra_sd)
    yb = yb + sigma * rng.standard_normal(yb.shape)
    yk = yk + sigma * rng.standard_normal(yk.shape)
    values = np.full((len(design), 2), np.nan)
    for obs, y in ((tb.blood, yb), (tb.keratin, yk)):
        values[obs.sample[obs.mask]] = y[obs.mask]
    if spec.decimals is not None:
        values = np.round(values, spec.decimals)

    table = _finish_table(spec, design, a, values, rng, reg)
    if aa is not None:
        table = _amino_acid_columns(spec, table, tb, aa)
    truth_ind = _truth_individuals(
        a,
        tb,
        origin,
        has_ep,
        onset,
        duration,
        kappa,
        tau,
        gamma,
        growth,
        has_shift,
        trophic,
        shift_t,
        shift_dn,
        shift_dc,
        margin,
    )
    truth_bins = _truth_bins(tb, pred, has_ep, onset, duration)
    if aa is not None:
        truth_ind = truth_ind.assign(
            trophic_position=np.round(aa.tp, 8),
            phe_level=np.round(aa.phe_level, 8),
            baseline_shift_d15N=np.round(aa.rise, 8),
            baseline_shift_date=_iso(np.where(aa.rise != 0, origin + aa.start, np.nan)),
            baseline_return_date=_iso(np.where(aa.rise != 0, origin + aa.end, np.nan)),
        )
    return Simulation(spec, table, truth_ind, truth_bins, params, tb, grid, pred)


@dataclass
class _AminoTruth:
    """True baseline path and amino-acid values of a simulation (per animal / observation)."""

    rise: np.ndarray
    start: np.ndarray
    end: np.ndarray
    tp: np.ndarray
    phe_level: np.ndarray
    baseline: dict[str, np.ndarray]
    tp_obs: dict[str, np.ndarray]
    rng: np.random.Generator


def _amino_acid_truth(spec, tb, grid, params, pred, kind, breed, trophic, shift_dn):
    """Draw the baseline shifts and trophic positions (second generator); ``None`` if off.

    The baseline path is B(t) = rise·(ramp(t; start) − ramp(t; end)) on the
    diet's own time, seen by each observation through the same forward model
    as the diet (a diet shift of size (rise, 0) through
    :func:`nstress.model.forward.predict`), un-anchored so that B = 0 before
    the rise.
    """
    is_shift = kind == "baseline_shift"
    if spec.amino_acid_every == 0 and not is_shift.any():
        return None
    rng = np.random.default_rng([spec.seed, 1])
    n = tb.n_individuals
    rise = np.where(is_shift, rng.uniform(*spec.baseline_shift_d15N, n), 0.0)
    start = breed + rng.uniform(*spec.baseline_shift_window_days, n)
    end = start + rng.uniform(*spec.baseline_stay_days, n)
    tp = rng.uniform(*spec.trophic_position, n)
    phe_level = spec.phe_level + spec.phe_level_sd * rng.standard_normal(n)
    anchor_t = grid.knots[grid.anchor]
    seen = {"blood": np.zeros(tb.blood.mask.shape), "keratin": np.zeros(tb.keratin.mask.shape)}
    for t0, sign in ((start, 1.0), (end, -1.0)):
        one = dataclasses.replace(params, shift_start=t0, shift_size=None)
        p = predict(tb, grid, one)
        at_anchor = eq.ramp(anchor_t, t0, grid.spacing)[:, None]
        seen["blood"] += sign * rise[:, None] * (p.blood_s + at_anchor)
        seen["keratin"] += sign * rise[:, None] * (p.keratin_s + at_anchor)
    # trophic position per observation: a trophic shift moves it by ΔN / 3.4 (Post 2002)
    step = np.where(trophic, shift_dn, 0.0)[:, None] / TROPHIC_STEP_D15N
    tp_obs = {
        "blood": tp[:, None] + step * pred.blood_s,
        "keratin": tp[:, None] + step * pred.keratin_s,
    }
    return _AminoTruth(rise, start, end, tp, phe_level, seen, tp_obs, rng)


TROPHIC_STEP_D15N = 3.4
"""Bulk δ15N per trophic level (Post 2002), for the simulated trophic position of a shift."""


def _amino_acid_columns(spec, table, tb, aa: _AminoTruth) -> pd.DataFrame:
    """Write ``d15N_Phe``/``d15N_Glu`` (and SDs) on every k-th sample of each animal and tissue."""
    n = len(table)
    if spec.amino_acid_every == 0:
        return table
    web = FOOD_WEBS[spec.food_web]
    rank = table.groupby(["individual", "tissue"], sort=False).cumcount().to_numpy()
    pick = rank % spec.amino_acid_every == 0
    base = np.full(n, np.nan)
    tp = np.full(n, np.nan)
    level = np.full(n, np.nan)
    for name, o in (("blood", tb.blood), ("keratin", tb.keratin)):
        rows = o.sample[o.mask]  # rows of the design, i.e. of the table
        base[rows] = aa.baseline[name][o.mask]
        tp[rows] = aa.tp_obs[name][o.mask]
        level[rows] = np.broadcast_to(aa.phe_level[:, None], o.mask.shape)[o.mask]
    noise = aa.rng.standard_normal((2, n)) * spec.amino_acid_sd
    phe = level + PHE_TDF * (tp - 1.0) + base + noise[0]
    glu = phe - noise[0] + web.beta + web.tdf * (tp - 1.0) + noise[1]
    if spec.decimals is not None:
        phe, glu = np.round(phe, spec.decimals), np.round(glu, spec.decimals)
    t = table.copy()
    t["d15N_Glu"] = np.where(pick, glu, np.nan)
    t["d15N_Phe"] = np.where(pick, phe, np.nan)
    t["sd_d15N_Glu"] = np.where(pick, spec.amino_acid_sd, np.nan)
    t["sd_d15N_Phe"] = np.where(pick, spec.amino_acid_sd, np.nan)
    return t


def _finish_table(spec, design, a, values, rng, reg) -> pd.DataFrame:
    """Fill in measured values and the optional columns."""
    n = len(design)
    t = design.copy()
    t["d15N"] = values[:, 0]
    t["d13C"] = values[:, 1] if spec.with_d13C else np.nan
    t["sd_d15N"] = spec.analytical_sd
    t["sd_d13C"] = spec.analytical_sd if spec.with_d13C else np.nan
    is_ker = t["tissue"].map(lambda x: reg[x].is_keratin).to_numpy(bool)
    if spec.include_mass:
        mass = spec.mass_kg_mean * np.exp(0.12 * rng.standard_normal(len(a)))
        by_id = pd.Series(np.round(mass, 1), index=a["individual"].to_numpy())
        t["mass_kg"] = by_id.reindex(t["individual"].to_numpy()).to_numpy()
    if spec.include_chemistry:
        # plausible, signal-free: keratin ~15 %N, C:N 3.35; blood ~14 %N, C:N 3.6
        pct_n = np.where(is_ker, 15.0, 14.0) + 0.4 * rng.standard_normal(n)
        lo_hi = np.array([reg[x].cn_range for x in t["tissue"]])
        centre = np.where(is_ker, 3.35, 3.6)
        cn = np.clip(centre + 0.07 * rng.standard_normal(n), lo_hi[:, 0] + 0.05, lo_hi[:, 1] - 0.05)
        pct_n = np.round(pct_n, 2)
        pct_c = np.round(eq.cn_mass_from_atomic(cn) * pct_n, 2)
        t["pct_C"] = pct_c
        t["pct_N"] = pct_n
        t["cn_ratio"] = np.round(eq.cn_atomic(pct_c, pct_n), 3)
    t["lipid_extracted"] = True
    cols = [c for c in SAMPLE_COLUMNS if c in t]
    return t[cols].reset_index(drop=True)


def _truth_individuals(
    a,
    tb,
    origin,
    has_ep,
    onset,
    duration,
    kappa,
    tau,
    gamma,
    growth,
    has_shift,
    trophic,
    shift_t,
    shift_dn,
    shift_dc,
    ramp,
) -> pd.DataFrame:
    """One row per animal (in time-base order)."""
    nan = np.nan
    peak = np.where(has_ep, kappa * tau * (1.0 - np.exp(-duration / tau)), 0.0)
    shift_type = np.where(has_shift, np.where(trophic, "trophic", "habitat"), "none")
    r = 8
    out = pd.DataFrame(
        {
            "individual": tb.individuals.astype(str),
            "group": a["group"].to_numpy(),
            "kind": a["kind"].to_numpy(),
            "has_episode": has_ep,
            "onset_date": _iso(np.where(has_ep, origin + onset, nan)),
            "end_date": _iso(np.where(has_ep, origin + onset + duration, nan)),
            "duration_days": np.round(np.where(has_ep, duration, nan), r),
            "kappa_per_day": np.round(kappa, r),
            "tau_rec_days": np.round(np.where(has_ep, tau, nan), r),
            "gamma": np.round(gamma, r),
            "growth_multiplier": np.round(growth[:, 0], r),
            "has_shift": has_shift,
            "shift_type": shift_type,
            "shift_date": _iso(np.where(has_shift, origin + shift_t, nan)),
            "shift_ramp_days": np.where(has_shift, round(ramp, 3), nan),
            "shift_d15N": np.round(shift_dn, r),
            "shift_d13C": np.round(shift_dc, r),
            "peak_enrichment_d15N": np.round(peak, r),
            "has_blood": a["has_blood"].to_numpy(bool),
            "n_segments": a["n_segments"].to_numpy(int),
            "collected": _iso(a["_collect"].to_numpy()),
        }
    )
    return out


def _truth_bins(tb: TimeBase, pred: Prediction, has_ep, onset, duration) -> pd.DataFrame:
    """One row per animal and real bin of the time base."""
    ii, tt = np.nonzero(tb.bin_mask)
    frac = eq.episode_overlap(tb.bin_lo[None, :], tb.bin_width, onset[:, None], duration[:, None])
    frac = np.where(has_ep[:, None], frac, 0.0)[ii, tt]
    d = _TRUTH_DECIMALS
    return pd.DataFrame(
        {
            "individual": tb.individuals.astype(str)[ii],
            "group": tb.groups.astype(str)[tb.group_index[ii]],
            "date": np.datetime_as_string(tb.bin_dates()[ii, tt], unit="D"),
            "bin": tt.astype(int),
            "diet_d15N": np.round(pred.diet[ii, tt, 0], d),
            "diet_d13C": np.round(pred.diet[ii, tt, 1], d),
            "enrichment_d15N": np.round(pred.enrich[ii, tt], d),
            "catabolic_fraction": np.round(frac, d),
            "catabolic": frac >= 0.5,
        }
    )


def write_simulation(
    sim: Simulation, folder: str | Path, *, samples_name: str = "samples.csv"
) -> dict[str, Path]:
    """Write a simulation's sample table and truth tables as CSV files.

    Writes ``samples.csv`` (or ``samples_name``), ``truth_individuals.csv``
    and ``truth_bins.csv``, nothing else. Output is byte-identical for the
    same spec.

    Parameters
    ----------
    sim
        The simulation.
    folder
        Target folder (created if missing).
    samples_name
        File name of the sample table.

    Returns
    -------
    dict
        ``{"samples": path, "truth_individuals": path, "truth_bins": path}``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = {
        "samples": folder / samples_name,
        "truth_individuals": folder / "truth_individuals.csv",
        "truth_bins": folder / "truth_bins.csv",
    }
    for key, frame in (
        ("samples", sim.table),
        ("truth_individuals", sim.truth_individuals),
        ("truth_bins", sim.truth_bins),
    ):
        frame.to_csv(paths[key], index=False, lineterminator="\n")
    return paths

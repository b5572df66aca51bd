"""Place every sample in time: each individual's grid of bins and observation arrays.

The time base turns the prepared sample table into padded arrays, one row
per individual (model.md section 1):

* a grid of bins of width Δ per individual, from early enough to cover the
  memory of its slowest tissue (≈ 3 half-lives, or the slowest plausible
  keratin growth) to its last sample;
* blood draws as draw times on that grid (the one-compartment weights are
  computed from them in :func:`nstress.equations.blood_weights`);
* keratin segments as their collection time and the *nominal* days before
  collection of their two edges, h(x ± ℓ/2), so that the model can scale
  them by an uncertain growth multiplier r and average the pool over the
  growth window (:mod:`nstress.model.forward`).

All arrays are padded to the largest individual; masks say what is real.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from nstress.errors import InputError
from nstress.growth import make_growth
from nstress.prep.amino import phe_baseline_offsets
from nstress.tissues import DEFAULT_TISSUES, Tissue

DEFAULT_BIN_DAYS = 4.0
DEFAULT_SEGMENT_MM = 2.0  # fallback segment length for a lone segment (common practice)
MEMORY_HALF_LIVES = 3.0
GROWTH_SD_SPAN = 2.5  # grid covers growth this many SDs slower than nominal


@dataclass
class ObsSet:
    """Observations of one tissue class, padded to ``(individual, obs)``.

    Attributes
    ----------
    mask
        ``(I, N)`` bool: real observation.
    sample
        ``(I, N)`` int: row position in :attr:`TimeBase.samples` (−1 = pad).
    tissue
        ``(I, N)`` int: index into :attr:`TimeBase.tissues`.
    y, y_mask, sd
        ``(I, N, 2)``: value (‰), observed, analytical SD (‰), isotope order
        (δ15N, δ13C).
    t
        ``(I, N)`` days since the individual's origin: draw time (blood) or
        collection time (keratin).
    h_lo, h_hi
        Keratin only: nominal days before collection of the segment's
        root-side and tip-side edges (at growth multiplier r = 1).
    slot
        Keratin only: ``(I, N)`` index into the individual's keratin tissues
        (the growth multiplier's second axis).
    offset
        ``(I, N)`` known baseline offset of the expected δ15N (‰), from the
        row's δ15N_Phe (:func:`nstress.prep.amino.phe_baseline_offsets`); 0
        without Phe. ``sd[..., 0]`` then includes the Phe analytical SD in
        quadrature, so ``sd`` is the observation SD of the row.
    """

    mask: np.ndarray
    sample: np.ndarray
    tissue: np.ndarray
    y: np.ndarray
    y_mask: np.ndarray
    sd: np.ndarray
    t: np.ndarray
    h_lo: np.ndarray | None = None
    h_hi: np.ndarray | None = None
    slot: np.ndarray | None = None
    offset: np.ndarray | None = None

    @property
    def has_offset(self) -> bool:
        """Whether any observation carries a non-zero baseline offset."""
        return self.offset is not None and bool(np.any(self.offset != 0.0))

    @property
    def n(self) -> int:
        """Padded number of observations per individual."""
        return self.mask.shape[1]


@dataclass
class TimeBase:
    """Every sample placed in time, as padded arrays over individuals.

    Attributes
    ----------
    bin_width
        Δ (days).
    individuals, groups
        Names; ``group_index`` maps individuals to groups.
    origin
        ``(I,)`` datetime64[D]: left edge of each individual's bin 0.
    origin_offset
        ``(I,)`` days from the group's earliest origin to the individual's.
    n_bins
        ``(I,)`` real bins per individual; ``T`` is the padded number.
    bin_mask
        ``(I, T)``.
    tissues, tissue_class
        Tissues present, and their classes.
    keratin_tissues
        Keratin tissues present (the growth multiplier's second axis).
    growth_sd_log
        ``(I, K)`` prior SD of the log growth multiplier per individual and
        keratin tissue (NaN where the individual has none).
    samples
        The prepared samples that were placed, in the row order that
        ``ObsSet.sample`` refers to.
    """

    bin_width: float
    individuals: np.ndarray
    groups: np.ndarray
    group_index: np.ndarray
    origin: np.ndarray
    origin_offset: np.ndarray
    n_bins: np.ndarray
    bin_mask: np.ndarray
    tissues: list[str]
    tissue_class: list[str]
    keratin_tissues: list[str]
    blood: ObsSet
    keratin: ObsSet
    growth_sd_log: np.ndarray
    softness: np.ndarray
    samples: pd.DataFrame
    tissue_defs: dict[str, Tissue] = field(default_factory=dict)

    @property
    def n_individuals(self) -> int:
        """Number of individuals I."""
        return len(self.individuals)

    @property
    def T(self) -> int:  # noqa: N802
        """Padded number of bins."""
        return self.bin_mask.shape[1]

    @property
    def bin_lo(self) -> np.ndarray:
        """Left bin edges (days since origin), shape ``(T,)``."""
        return np.arange(self.T) * self.bin_width

    @property
    def bin_mid(self) -> np.ndarray:
        """Bin centres (days since origin), shape ``(T,)``."""
        return self.bin_lo + 0.5 * self.bin_width

    def bin_dates(self) -> np.ndarray:
        """``(I, T)`` datetime64[D] of bin centres (NaT beyond an individual's grid)."""
        days = np.floor(self.bin_mid).astype("timedelta64[D]")
        d = self.origin[:, None] + days[None, :]
        return np.where(self.bin_mask, d, np.datetime64("NaT"))


def _segment_lengths(df: pd.DataFrame) -> pd.Series:
    """Infer missing segment lengths from neighbouring midpoints of the same piece."""
    length = df["segment_length_mm"].astype(float).copy()
    missing = length.isna()
    if not missing.any():
        return length
    piece = [df["individual"], df["tissue"], df["collected"]]
    x = df["position_mm"].astype(float)
    order = np.lexsort((x.to_numpy(), *[pd.factorize(p)[0] for p in piece[::-1]]))
    xs = x.to_numpy()[order]
    pid = pd.factorize(pd.MultiIndex.from_arrays(piece))[0][order]
    prev_gap = np.full(xs.size, np.nan)
    next_gap = np.full(xs.size, np.nan)
    same_prev = np.r_[False, pid[1:] == pid[:-1]]
    same_next = np.r_[pid[:-1] == pid[1:], False]
    prev_gap[same_prev] = np.diff(xs)[same_prev[1:]]
    next_gap[same_next] = np.diff(xs)[same_next[:-1]]
    both = ~np.isnan(prev_gap) & ~np.isnan(next_gap)
    est = np.where(both, 0.5 * (prev_gap + next_gap), np.fmax(prev_gap, next_gap))
    est = np.where(np.isnan(est) | (est <= 0), DEFAULT_SEGMENT_MM, est)
    inferred = pd.Series(est, index=df.index[order]).reindex(df.index)
    return length.where(~missing, inferred)


def build_timebase(
    samples: pd.DataFrame,
    tissues: dict[str, Tissue] | None = None,
    *,
    bin_width: float = DEFAULT_BIN_DAYS,
    phe_mode: str = "interpolate",
) -> TimeBase:
    """Place the prepared samples in time.

    Parameters
    ----------
    samples
        Prepared samples (one row per sample, canonical columns; rows that
        the ledger excluded must already be gone).
    tissues
        Tissue registry (default :data:`nstress.tissues.DEFAULT_TISSUES`).
    bin_width
        Grid bin width Δ (days).
    phe_mode
        How δ15N_Phe sets a known offset of each row's expected bulk δ15N
        (:func:`nstress.prep.amino.phe_baseline_offsets`): ``"interpolate"``
        (default; rows between two Phe rows of one animal and tissue get the
        interpolated offset), ``"measured"`` (Phe rows only) or ``"off"``
        (Phe is ignored here). Rows are placed in time for this by a blood
        draw's date or a keratin segment's growth-window midpoint at nominal
        growth.

    Returns
    -------
    TimeBase

    Raises
    ------
    InputError
        If no sample is left, or a sample lacks what its tissue class needs.
    """
    tissues = tissues or DEFAULT_TISSUES
    if bin_width <= 0:
        raise InputError("bin width must be > 0 days", column="bin_width", value=bin_width)
    df = samples.reset_index(drop=True)  # a new frame (copy-on-write): samples stay as they are
    if df.empty:
        raise InputError("no usable samples are left to place in time")
    df["tissue"] = df["tissue"].astype(str)
    present = sorted(df["tissue"].unique(), key=lambda t: (tissues[t].is_keratin, t))
    tdef = {t: tissues[t] for t in present}
    t_index = {t: j for j, t in enumerate(present)}
    codes, names = pd.factorize(df["tissue"])
    tix = np.array([t_index[str(t)] for t in names], dtype=np.int64)[codes]  # into ``present``
    is_ker = np.array([tdef[t].is_keratin for t in present], dtype=bool)[tix]
    ker_tissues = [t for t in present if tdef[t].is_keratin]
    kslot = np.array([ker_tissues.index(t) if t in ker_tissues else -1 for t in present])[tix]

    # ---- nominal ages of keratin edges -----------------------------------
    n = len(df)
    h_lo = np.full(n, np.nan)
    h_hi = np.full(n, np.nan)
    gsd = np.full(n, np.nan)
    if is_ker.any():
        needed = ["individual", "tissue", "collected", "position_mm", "segment_length_mm"]
        needed += [c for c in ("growth_mm_per_day", "growth_sd_mm_per_day") if c in df]
        kd = df.loc[is_ker, needed]  # only what the keratin ages need, not every column
        kd["segment_length_mm"] = _segment_lengths(kd)
        x = kd["position_mm"].astype(float).to_numpy()
        half = 0.5 * kd["segment_length_mm"].to_numpy()
        tip = (
            (kd["position_mm"] + 0.5 * kd["segment_length_mm"])
            .groupby([kd["individual"], kd["tissue"], kd["collected"]])
            .transform("max")
            .to_numpy()
        )
        g_table = kd.get("growth_mm_per_day", pd.Series(np.nan, index=kd.index)).astype(float)
        gsd_table = kd.get("growth_sd_mm_per_day", pd.Series(np.nan, index=kd.index)).astype(float)
        lo = np.empty(len(kd))
        hi = np.empty(len(kd))
        sdl = np.empty(len(kd))
        for tname in kd["tissue"].unique():
            m = (kd["tissue"] == tname).to_numpy()
            td = tdef[tname]
            rate = g_table.to_numpy()[m]
            rate = np.where(np.isnan(rate), td.growth_mm_per_day, rate)
            if td.growth_model == "linear":
                lo[m] = np.clip(x[m] - half[m], 0, None) / rate
                hi[m] = (x[m] + half[m]) / rate
            else:
                gm = make_growth(td.growth_model, td.growth_mm_per_day, td.growth_params)
                lo[m] = gm.days_before(np.clip(x[m] - half[m], 0, None), tip[m])
                hi[m] = gm.days_before(x[m] + half[m], tip[m])
            sd_rel = gsd_table.to_numpy()[m] / rate
            sdl[m] = np.where(np.isnan(sd_rel), td.growth_sd_log, np.log1p(sd_rel))
        h_lo[is_ker], h_hi[is_ker], gsd[is_ker] = lo, hi, sdl

    # ---- absolute times (days since epoch, float) ------------------------
    epoch = np.datetime64("1970-01-01", "D")

    def _days(col: str) -> np.ndarray:
        v = (
            pd.to_datetime(df[col], errors="coerce")
            if col in df
            else pd.Series(pd.NaT, index=df.index)
        )
        arr = v.to_numpy(dtype="datetime64[D]")
        days = (arr - epoch).astype("timedelta64[D]").astype(float)
        return np.where(np.isnat(arr), np.nan, days)  # NaT would cast to -9.2e18, not NaN

    t_event = np.where(is_ker, _days("collected"), _days("date")) + 0.5
    bad = np.isnan(t_event)
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        col = "collected" if is_ker[j] else "date"
        raise InputError(
            f"sample has no {col}",
            file=str(df.get("source_file", pd.Series([None] * n))[j]),
            row=int(df["source_row"][j]) if "source_row" in df else None,
            column=col,
        )
    slowest = np.exp(-GROWTH_SD_SPAN * np.nan_to_num(gsd))
    soft = np.array([tdef[t].softness_days if tdef[t].is_keratin else 0.0 for t in present])
    t_soft = soft[tix]
    hl = np.array([tdef[t].half_life_days if not tdef[t].is_keratin else 0.0 for t in present])
    t_hl = hl[tix]
    earliest = np.where(
        is_ker,
        t_event - h_hi / slowest - 3 * t_soft,
        t_event - MEMORY_HALF_LIVES * t_hl,
    )

    # ---- individuals, groups and grids -----------------------------------
    ind_codes, individuals = pd.factorize(df["individual"].astype(str), sort=True)
    group_col = df["group"].astype(str) if "group" in df else pd.Series("all", index=df.index)
    ind_group = group_col.groupby(ind_codes).first()
    grp_codes, groups = pd.factorize(ind_group.to_numpy(), sort=True)
    I = len(individuals)  # noqa: E741
    start = np.floor(pd.Series(earliest).groupby(ind_codes).min().to_numpy())
    stop = pd.Series(t_event).groupby(ind_codes).max().to_numpy()
    n_bins = np.maximum(np.ceil((stop - start) / bin_width).astype(int) + 1, 2)
    T = int(n_bins.max())
    bin_mask = np.arange(T)[None, :] < n_bins[:, None]
    origin = epoch + start.astype("timedelta64[D]")
    group_start = pd.Series(start).groupby(grp_codes).transform("min").to_numpy()
    origin_offset = start - group_start

    t_rel = t_event - start[ind_codes]
    t_mid = np.where(is_ker, t_event - 0.5 * (h_lo + h_hi), t_event)  # nominal growth
    aa_offset, aa_var = phe_baseline_offsets(df, t_mid=t_mid, mode=phe_mode)
    df["_individual_index"] = ind_codes
    df["_t_days"] = t_rel

    def _obs(mask_rows: np.ndarray, keratin: bool) -> ObsSet:
        rows = np.flatnonzero(mask_rows)
        counts = np.bincount(ind_codes[rows], minlength=I)
        N = max(int(counts.max()) if rows.size else 0, 1)
        order = rows[np.lexsort((t_rel[rows], ind_codes[rows]))]
        ii = ind_codes[order]
        first = np.r_[0, np.cumsum(counts)[:-1]]
        pos = np.arange(order.size) - first[ii]
        shape = (I, N)
        o = ObsSet(
            mask=np.zeros(shape, bool),
            sample=np.full(shape, -1),
            tissue=np.zeros(shape, int),
            y=np.zeros(shape + (2,)),
            y_mask=np.zeros(shape + (2,), bool),
            sd=np.full(shape + (2,), 0.15),
            t=np.zeros(shape),
            offset=np.zeros(shape),
        )
        o.mask[ii, pos] = True
        o.sample[ii, pos] = order
        o.tissue[ii, pos] = tix[order]
        yv = df[["d15N", "d13C"]].to_numpy(float)[order]
        sdv = df[["sd_d15N", "sd_d13C"]].to_numpy(float)[order]
        o.y_mask[ii, pos] = ~np.isnan(yv)
        o.y[ii, pos] = np.nan_to_num(yv)
        sdv = np.where(np.isnan(sdv), 0.15, sdv)
        var = aa_var[order]
        # only rows with Phe change: elsewhere the SD stays bit for bit the analytical one
        sdv[:, 0] = np.where(var > 0, np.sqrt(sdv[:, 0] ** 2 + var), sdv[:, 0])
        o.sd[ii, pos] = sdv
        o.offset[ii, pos] = aa_offset[order]
        o.t[ii, pos] = t_rel[order]
        if keratin:
            o.h_lo = np.zeros(shape)
            o.h_hi = np.ones(shape)
            o.slot = np.zeros(shape, int)
            o.h_lo[ii, pos] = h_lo[order]
            o.h_hi[ii, pos] = h_hi[order]
            o.slot[ii, pos] = kslot[order]
        else:
            # pads sit on the last real bin so their (masked) weights stay finite
            o.t[~o.mask] = bin_width * 0.5
        return o

    blood = _obs(~is_ker, keratin=False)
    keratin = _obs(is_ker, keratin=True)
    growth_sd = np.full((I, max(len(ker_tissues), 1)), np.nan)
    if is_ker.any():
        for j in range(len(ker_tissues)):
            m = is_ker & (kslot == j)
            s = pd.Series(gsd[m]).groupby(ind_codes[m]).median()
            growth_sd[s.index.to_numpy(), j] = s.to_numpy()
    return TimeBase(
        bin_width=float(bin_width),
        individuals=np.asarray(individuals, dtype=object),
        groups=np.asarray(groups, dtype=object),
        group_index=grp_codes.astype(int),
        origin=origin,
        origin_offset=origin_offset,
        n_bins=n_bins,
        bin_mask=bin_mask,
        tissues=present,
        tissue_class=[tdef[t].klass for t in present],
        keratin_tissues=ker_tissues,
        blood=blood,
        keratin=keratin,
        growth_sd_log=growth_sd,
        softness=np.where(soft > 0, soft, 1.0),
        samples=df,
        tissue_defs=tdef,
    )

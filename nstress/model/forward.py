"""The generative model's deterministic part, for the simulator and the PyMC model.

:func:`predict` maps parameters to expected tissue values. The forward
simulator calls it with NumPy arrays (true values); the PyMC model calls it
with PyTensor tensors. Both therefore use exactly the same equations
(:mod:`nstress.equations` and
:func:`predict`).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import ModuleType
from typing import Any

import numpy as np

from nstress import equations as eq
from nstress.prep.timebase import TimeBase

DEFAULT_KNOT_DAYS = 16.0
DEFAULT_KERATIN_POINTS = 6
DEFAULT_ONSET_STEP_DAYS = 6.0
DEFAULT_SHIFT_STEP_DAYS = 8.0
ONSET_LEAD_DAYS = 30.0
"""Candidate onsets start this long before an individual's earliest sampled time."""


@dataclass
class Grid:
    """Constant arrays of one time base: knots, walk matrices, blood lags, candidates, clock.

    Attributes
    ----------
    knots
        Knot times of the diet walk (days since origin), equally spaced.
    walk
        ``(I, K, K − 1)`` anchored walk matrices (:func:`nstress.equations.anchored_walk_matrix`).
    anchor
        ``(I,)`` knot at which each individual's walk is 0 (the median time of its samples).
    blood_bin
        ``(I, Nb)`` bin b of each draw.
    blood_phi
        ``(I, Nb)`` offset of each draw into its bin (days).
    blood_individuals
        Indices of the individuals with at least one blood draw.
    blood_tissues
        Tissue indices of the blood tissues present.
    blood_tissue_slot
        ``(I, Nb)`` position of each draw's tissue in ``blood_tissues``.
    onset_days
        ``(I, M)`` candidate episode onsets (days since each individual's
        origin), every ``onset_step`` days across the time its samples can
        see (see :func:`onset_grid`); the model sums over them exactly.
    onset_mask
        ``(I, M)`` which candidates are real (rows are padded to M).
    onset_step
        Spacing of the candidate onsets (days).
    onset_ref
        ``(I,)`` middle of each individual's sampled span (days), the
        reference time of the separated exponentials of the episode response.
    shift_days
        ``(I, J)`` candidate starts of a diet shift: the knots whose ramp
        (to the next knot) overlaps what the individual's samples see.
    shift_mask
        ``(I, J)`` which candidates are real (rows are padded to J).
    warp_pivot
        ``(I,)`` pivot p of each individual's diet clock (days since origin):
        the collection time of its latest-collected keratin (see :func:`diet_clock`).
    warp_slot
        ``(I,)`` keratin slot whose growth multiplier r sets the clock's rate.
    warp_on
        ``(I,)`` which individuals have keratin (the others' clock is time itself).
    keratin_points
        Quadrature points per keratin growth window (diet path).
    """

    knots: np.ndarray
    walk: np.ndarray
    anchor: np.ndarray
    blood_bin: np.ndarray
    blood_phi: np.ndarray
    blood_individuals: np.ndarray
    blood_tissues: list[int]
    blood_tissue_slot: np.ndarray
    onset_days: np.ndarray
    onset_mask: np.ndarray
    onset_step: float
    onset_ref: np.ndarray
    shift_days: np.ndarray
    shift_mask: np.ndarray
    warp_pivot: np.ndarray
    warp_slot: np.ndarray
    warp_on: np.ndarray
    keratin_points: int = DEFAULT_KERATIN_POINTS

    @property
    def n_steps(self) -> int:
        """Number of walk increments per individual and isotope (K − 1)."""
        return self.walk.shape[2]

    @property
    def spacing(self) -> float:
        """Knot spacing (days)."""
        return float(self.knots[1] - self.knots[0])


def make_grid(
    tb: TimeBase,
    knot_days: float = DEFAULT_KNOT_DAYS,
    keratin_points: int = DEFAULT_KERATIN_POINTS,
    onset_step: float = DEFAULT_ONSET_STEP_DAYS,
    shift_step: float | None = None,
    diet_clock: bool = False,
) -> Grid:
    """Knots every ``knot_days`` across the padded grid, walk matrices, blood lags, candidates.

    Parameters
    ----------
    tb
        Time base.
    knot_days
        Knot spacing of the diet random walk (days).
    keratin_points
        Quadrature points per keratin growth window (diet path).
    onset_step
        Spacing of the candidate episode onsets (days), see :func:`onset_grid`.
    shift_step
        Spacing of the candidate diet-shift starts (days; default the knot
        spacing), see :func:`shift_grid`.
    diet_clock
        Pivot each keratin animal's diet clock at its latest keratin
        collection (:func:`diet_clock`); off, every clock is time itself.
    """
    span = tb.T * tb.bin_width
    n_knots = max(int(np.ceil(span / knot_days)) + 1, 2)
    knots = np.arange(n_knots) * float(knot_days)
    b_bin = np.clip(np.floor(tb.blood.t / tb.bin_width), 0, tb.T - 1).astype(np.int64)
    anchor = _anchor_knots(tb, knots)
    blood_tissues = [j for j, c in enumerate(tb.tissue_class) if c == "blood"]
    slot = np.zeros(tb.tissue_class.__len__(), dtype=np.int64)
    slot[blood_tissues] = np.arange(len(blood_tissues))
    onsets, onset_mask = onset_grid(tb, onset_step)
    shifts, shift_mask = shift_grid(tb, knots, shift_step)
    k, n_ind = tb.keratin, tb.n_individuals
    warp_on, pivot, wslot = np.zeros(n_ind, bool), np.zeros(n_ind), np.zeros(n_ind, np.int64)
    if diet_clock and k.n:
        rows = np.arange(n_ind)
        latest = np.argmax(np.where(k.mask, k.t, -np.inf), axis=1)
        warp_on = k.mask.any(axis=1)
        pivot = np.where(warp_on, k.t[rows, latest], 0.0)
        wslot = np.where(warp_on, k.slot[rows, latest], 0)
    return Grid(
        knots=knots,
        walk=eq.anchored_walk_matrix(n_knots, anchor),
        anchor=anchor,
        blood_bin=b_bin,
        blood_phi=tb.blood.t - b_bin * tb.bin_width,
        blood_individuals=np.flatnonzero(tb.blood.mask.any(axis=1)),
        blood_tissues=blood_tissues,
        blood_tissue_slot=slot[tb.blood.tissue],
        onset_days=onsets,
        onset_mask=onset_mask,
        onset_step=float(onset_step),
        onset_ref=0.5 * np.add(*sampled_span(tb)),
        shift_days=shifts,
        shift_mask=shift_mask,
        warp_pivot=pivot.astype(float),
        warp_slot=wslot.astype(np.int64),
        warp_on=warp_on,
        keratin_points=int(keratin_points),
    )


def sampled_span(tb: TimeBase) -> tuple[np.ndarray, np.ndarray]:
    """Earliest and latest time each individual's samples see (days since its origin).

    Keratin windows are taken at the tissue's nominal growth (multiplier 1);
    a blood draw sees its own date (and, fading, the weeks before it).
    """
    b, k = tb.blood, tb.keratin
    lo = np.concatenate(
        [np.where(b.mask, b.t, np.inf), np.where(k.mask, k.t - k.h_hi, np.inf)], axis=1
    ).min(axis=1)
    hi = np.concatenate(
        [np.where(b.mask, b.t, -np.inf), np.where(k.mask, k.t - k.h_lo, -np.inf)], axis=1
    ).max(axis=1)
    ok = np.isfinite(lo) & np.isfinite(hi)
    return np.where(ok, lo, 0.0), np.where(ok, hi, 0.0)


def onset_grid(tb: TimeBase, step: float) -> tuple[np.ndarray, np.ndarray]:
    """Candidate episode onsets per individual, padded to a common count.

    From :data:`ONSET_LEAD_DAYS` before the earliest sampled time (not before
    the grid start) to the latest sampled time, every ``step`` days. An
    episode starting after the last sample leaves no trace in the data, so it
    is not a candidate.

    Returns
    -------
    tuple
        ``onsets`` ``(I, M)`` (days since each individual's origin) and a
        ``(I, M)`` bool mask of the real candidates.
    """
    if not step > 0:
        raise ValueError("onset step must be > 0 days")
    lo, hi = sampled_span(tb)
    lo = np.maximum(lo - ONSET_LEAD_DAYS, 0.0)
    hi = np.maximum(hi, lo)
    n = np.floor((hi - lo) / step).astype(int) + 1
    m = np.arange(max(int(n.max(initial=1)), 1))
    onsets = lo[:, None] + step * m[None, :]
    mask = m[None, :] < n[:, None]
    return np.where(mask, onsets, lo[:, None]), mask


def shift_grid(
    tb: TimeBase, knots: np.ndarray, step: float | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Candidate diet-shift starts per individual, where the shift's ramp meets the samples.

    A shift is a ramp over one knot spacing (:func:`nstress.equations.ramp`);
    candidates start every ``step`` days (default: the knot spacing) from the
    first knot, keeping those whose ramp overlaps the sampled span (one that
    starts after the last sample or ends before the earliest leaves no
    trace). A step finer than the knots matters: with knot-aligned starts a
    keratin-only animal's growth rate had one mode per knot (the rate that
    puts the shift exactly on a knot). Rows are padded to a common count J.

    Returns
    -------
    tuple
        ``starts`` ``(I, J)`` (days since each individual's origin) and a bool mask.
    """
    lo, hi = sampled_span(tb)
    spacing = float(knots[1] - knots[0])
    step = spacing if step is None else float(step)
    starts = knots[0] + step * np.arange(-1, int(np.floor((knots[-1] - knots[0]) / step)) + 2)
    # one candidate more at each end (a ramp done before the samples, one starting after
    # them): both leave no trace, so a phase offset (phase_offset) wrapping from one
    # step to the next changes nothing
    ok = (starts[None, :] + spacing > lo[:, None] - step) & (starts[None, :] < hi[:, None] + step)
    ok[~ok.any(axis=1), 0] = True
    n = ok.sum(axis=1)
    J = int(n.max())
    mask = np.arange(J)[None, :] < n[:, None]
    order = np.argsort(~ok, axis=1, kind="stable")[:, :J]  # the candidates, in time order
    out = np.where(mask, starts[order], starts[order][:, :1])
    return out, mask


RING_SD = 0.25
"""Radial SD of the phase variables around the unit circle (:func:`phase_offset`)."""


def phase_offset(xy: Any, step: float, xp: ModuleType = np) -> Any:
    """Offset in ``[0, step)`` days from a point ``(..., 2)`` on the plane, by its angle.

    The candidate onsets and shift starts sit on grids of spacing ``step``;
    each individual's candidates move together by a continuous offset, so
    that grid index (summed exactly) and offset (sampled) together give a
    continuous time with a uniform prior within each grid cell. The offset
    is the angle of ``xy`` (prior: rotation-invariant, so the angle is
    uniform): it wraps from one cell to the next without a boundary, and
    one sharp optimum in time is one optimum in angle. (A grid alone made
    the likelihood of a keratin-only animal's growth rate rugged, with one
    bump each time an optimum crossed a grid point.)
    """
    return step * (xp.arctan2(xy[..., 1], xy[..., 0]) / (2.0 * np.pi) + 0.5)


def shift_log_prior(grid: Grid, enabled: bool = True) -> np.ndarray:
    """Log prior ``(I, J)`` of the candidate shift starts: uniform over each row's real ones.

    Without a shift (``enabled=False``) a single column of zeros.
    """
    if not enabled:
        return np.zeros((grid.shift_days.shape[0], 1))
    n = grid.shift_mask.sum(axis=1, keepdims=True)
    return np.where(grid.shift_mask, -np.log(n), -1e10)


def clock_rate(grid: Grid, growth: Any, xp: ModuleType = np) -> Any:
    """Rate r ``(..., I)`` of each individual's diet clock: its pivot keratin's growth multiplier.

    ``growth`` is ``(..., I, K_keratin)``; individuals without keratin get 1.
    ``None`` when no individual has a clock (every clock is time itself).
    """
    if not grid.warp_on.any():
        return None
    rows = np.arange(grid.warp_pivot.shape[0])
    r = growth[..., rows, grid.warp_slot] if xp is np else growth[rows, grid.warp_slot]
    return xp.where(grid.warp_on, r, 1.0)


def diet_clock(grid: Grid, t: Any, rate: Any, xp: ModuleType = np) -> Any:
    """Diet-clock time w = p + r·(t − p) of absolute times ``t`` ``(..., I, n...)``.

    The diet (level, walk knots, shift) lives on this clock. A keratin
    segment grown at multiplier r over [t_c − h_hi/r, t_c − h_lo/r]
    (collection time t_c) maps to [t_c − h_hi, t_c − h_lo] when p = t_c:
    the diet a whisker records does not move when its growth rate does, so
    growth and diet are not traded against each other along a ridge (with
    diet on absolute time, a faster growth moved every segment and the whole
    walk and shift had to follow; chains settled at different growth rates).
    Growth is then told by what runs on absolute time: the episode and the
    blood draws. ``rate`` is ``(..., I)`` (:func:`clock_rate`); ``None``: w = t.
    """
    if rate is None:
        return t
    extra = t.ndim - rate.ndim
    idx = (Ellipsis,) + (None,) * extra
    p = grid.warp_pivot[idx]
    return p + rate[idx] * (t - p)


def diet_on_times(grid: Grid, t: Any, values: Any, rate: Any, xp: ModuleType = np) -> Any:
    """Return the walk's diet ``(I, n..., 2)`` at absolute times ``t`` ``(I, n...)`` (clock).

    ``values`` are the knot values ``(I, K, 2)`` on the diet clock
    (:func:`nstress.equations.walk_values`).
    """
    return eq.interpolate_knots(
        diet_clock(grid, t, rate, xp=xp), grid.spacing, values, len(grid.knots), xp=xp
    )


def shift_path(grid: Grid, w: Any, start: Any, size: Any, xp: ModuleType = np) -> Any:
    """Return a diet shift at clock times ``w`` ``(..., I, T)``: size × (ramp(w) − ramp at anchor).

    ``start`` is ``(..., I)`` and ``size`` ``(..., I, 2)`` (both on the diet
    clock, :func:`diet_clock`); the result is ``(..., I, T, 2)``, zero at each
    individual's anchor knot (as the walk is). The ramp rises over one knot
    spacing (:func:`nstress.equations.ramp`).
    """
    at_anchor = eq.ramp(grid.knots[grid.anchor], start, grid.spacing, xp=xp)  # (..., I)
    r = eq.ramp(w, start[..., None], grid.spacing, xp=xp) - at_anchor[..., None]
    return r[..., None] * size[..., None, :]


def _anchor_knots(tb: TimeBase, knots: np.ndarray) -> np.ndarray:
    """Knot nearest the median time of each individual's samples (keratin at nominal growth)."""
    times = []
    b, k = tb.blood, tb.keratin
    times.append(np.where(b.mask, b.t, np.nan))
    times.append(np.where(k.mask, k.t - 0.5 * (k.h_lo + k.h_hi), np.nan))
    allt = np.concatenate(times, axis=1)
    med = np.nanmedian(np.where(np.isfinite(allt), allt, np.nan), axis=1)
    med = np.where(np.isfinite(med), med, 0.0)
    return np.clip(np.rint(med / (knots[1] - knots[0])), 0, len(knots) - 1).astype(int)


@dataclass
class Params:
    """Parameters of the generative model (NumPy arrays or tensors).

    Attributes
    ----------
    baseline
        ``(I, 2)`` diet level at the first knot, body-pool scale (‰).
    steps
        ``(I, K−1, 2)`` diet random-walk increments (‰).
    onset, duration
        ``(I,)`` episode start (days since the individual's origin) and length (days).
    kappa
        ``(I,)`` enrichment rate while catabolic (‰ δ15N / d).
    tau_rec
        ``(I,)`` recovery time (days).
    gamma
        ``(I,)`` δ13C change per ‰ catabolic δ15N.
    disc
        ``(n_tissues, 2)`` discrimination Δ (‰).
    rate
        ``(n_tissues,)`` incorporation rate λ (1/d; keratin entries unused).
    growth
        ``(I, K_keratin)`` growth multipliers r.
    shift_size
        ``(I, 2)`` size of one explicit diet shift (Δδ15N, Δδ13C, ‰), or ``None``.
    shift_start
        ``(I,)`` start of the shift's ramp on the diet clock (:func:`diet_clock`;
        it reaches its full size one knot spacing of the clock later), or
        ``(I, J)`` candidate starts.
    """

    baseline: Any
    steps: Any
    onset: Any
    duration: Any
    kappa: Any
    tau_rec: Any
    gamma: Any
    disc: Any
    rate: Any
    growth: Any
    shift_size: Any = None
    shift_start: Any = None


@dataclass
class Prediction:
    """Expected tissue values.

    ``blood0``/``keratin0`` are ``(I, N, 2)`` without an episode;
    ``blood_e``/``keratin_e`` are the episode's δ15N contribution (the δ13C
    contribution is γ times it): ``(I, N)`` for one onset per individual, or
    ``(I, N, M)`` for M candidate onsets. ``blood0``/``keratin0`` include
    each row's known δ15N baseline offset from phenylalanine
    (:func:`with_baseline_offset`). ``blood_s``/``keratin_s`` are
    the response to a unit diet shift (anchored: 0 at the walk's anchor knot),
    ``(I, N)`` or ``(I, N, J)`` for J candidate starts; the shift adds
    Δ·s to each isotope. ``blood0``/``keratin0`` exclude the shift and the
    episode (see :func:`expected`). ``diet`` ``(I, T, 2)`` includes a single
    shift; ``enrich`` ``(I, T)`` is the enrichment for one onset (``None``
    with candidate onsets).
    """

    diet: Any
    enrich: Any
    blood0: Any
    blood_e: Any
    keratin0: Any
    keratin_e: Any
    blood_s: Any = None
    keratin_s: Any = None


def predict(tb: TimeBase, grid: Grid, p: Params, xp: ModuleType = np) -> Prediction:
    """Return the expected values of every observation given the parameters.

    * Diet D(w(t)): level + knot random walk + shift, piecewise linear on the
      individual's diet clock w (:func:`diet_clock`).
    * Enrichment E(t): closed form (:func:`nstress.equations.enrichment`).
    * Blood: the diet through one-compartment weights on the bins
      (:func:`nstress.equations.blood_from_filtered`); the enrichment through
      the exact one-compartment response
      (:func:`nstress.equations.enrichment_incorporated`).
    * Keratin: the diet averaged over the segment's growth window
      [t_c − h_hi/r, t_c − h_lo/r] by the midpoint rule; the enrichment
      averaged exactly (:func:`nstress.equations.enrichment_window_mean`).

    ``p.onset`` is ``(I,)`` (one onset per individual) or ``(I, M)`` (the
    candidate onsets of :attr:`Grid.onset_days`); the episode outputs then
    carry a trailing ``M`` axis.

    Parameters
    ----------
    tb
        Time base.
    grid
        Constant arrays from :func:`make_grid`.
    p
        Parameters.
    xp
        ``numpy`` or ``pytensor.tensor``.

    Returns
    -------
    Prediction
    """
    n_ind = tb.n_individuals
    knot_values = eq.walk_values(p.baseline, p.steps, grid.walk, xp=xp)
    clock = clock_rate(grid, p.growth, xp=xp)  # (I,)
    bins_abs = np.broadcast_to(tb.bin_mid, (n_ind, tb.T))
    diet = diet_on_times(grid, bins_abs, knot_values, clock, xp=xp)  # (I, T, 2)
    single = p.onset.ndim == 1
    on = (p.onset[:, None] if single else p.onset)[:, None, :]  # (I, 1, M)
    duration = p.duration[:, None, None]
    kappa, tau = p.kappa[:, None, None], p.tau_rec[:, None, None]
    enrich = None  # on the bins: only for one onset per individual (not needed for candidates)
    if single:
        enrich = eq.enrichment(
            tb.bin_mid[None, :],
            p.onset[:, None],
            p.duration[:, None],
            p.kappa[:, None],
            p.tau_rec[:, None],
            xp=xp,
        )

    # blood: one-compartment filter of the diet on the bins, for animals with blood
    b = tb.blood
    with_blood = grid.blood_individuals
    if with_blood.size:
        pool_b = diet[with_blood]  # (Ib, T, 2)
        filtered = []
        for k in grid.blood_tissues:
            F = eq.exponential_filter_matrix(tb.T, tb.bin_width, p.rate[k], xp=xp)
            filtered.append(xp.tensordot(pool_b, F, axes=[[1], [1]]))  # (Ib, 2, T)
        S = xp.stack(filtered)  # (Kb, Ib, 2, T)
        kb = grid.blood_tissue_slot[with_blood]  # (Ib, Nb)
        ib = np.arange(with_blood.size)[:, None]
        bin_b = grid.blood_bin[with_blood]
        s_prev = S[kb, ib, :, np.maximum(bin_b - 1, 0)]  # (Ib, Nb, 2)
        p_here = pool_b[ib, bin_b]
        p_first = pool_b[:, :1, :]
        rate_obs = p.rate[b.tissue[with_blood]]
        vals = eq.blood_from_filtered(
            s_prev,
            p_here,
            p_first,
            grid.blood_phi[with_blood],
            b.t[with_blood],
            rate_obs,
            tb.bin_width,
            (bin_b >= 1).astype(float),
            xp=xp,
        )  # (Ib, Nb, 2)
        full = xp.zeros((n_ind, b.n, 2))
        if xp is np:
            full = _np_set(full, with_blood, vals)
        else:
            full = xp.set_subtensor(full[with_blood], vals)
        blood_diet = full
    else:
        blood_diet = xp.zeros((n_ind, b.n, 2))
    ref = grid.onset_ref[:, None, None]
    blood_e = eq.enrichment_incorporated(
        b.t[..., None], on, duration, kappa, tau, p.rate[b.tissue][..., None], ref=ref, xp=xp
    )

    # keratin: average of the pool over each growth window
    k = tb.keratin
    r = p.growth[np.arange(n_ind)[:, None], k.slot]
    t_lo, t_hi = k.t - k.h_hi / r, k.t - k.h_lo / r
    tq = eq.window_points(t_lo, t_hi, grid.keratin_points)
    diet_k = diet_on_times(grid, tq, knot_values, clock, xp=xp).mean(axis=2)
    keratin_e = eq.enrichment_window_mean(
        t_lo[..., None], t_hi[..., None], on, duration, kappa, tau, ref=ref, xp=xp
    )
    if single:
        blood_e, keratin_e = blood_e[..., 0], keratin_e[..., 0]

    # diet shift: a ramp over one knot spacing of the diet clock, anchored (0 at the
    # anchor knot); on absolute time it starts at p + (st − p)/r and lasts W/r
    blood_s = keratin_s = None
    if p.shift_start is not None:
        one_shift = p.shift_start.ndim == 1
        st = (p.shift_start[:, None] if one_shift else p.shift_start)[:, None, :]  # (I, 1, J)
        w = grid.spacing
        at_anchor = eq.ramp(grid.knots[grid.anchor][:, None, None], st, w, xp=xp)
        st_abs, w_abs = st, w  # the ramp on absolute time, for the blood draws
        if clock is not None:
            r3, p3 = clock[:, None, None], grid.warp_pivot[:, None, None]
            st_abs, w_abs = p3 + (st - p3) / r3, w / r3
        blood_s = (
            eq.ramp_incorporated(
                b.t[..., None], st_abs, w_abs, p.rate[b.tissue][..., None], ref=ref, xp=xp
            )
            - at_anchor
        )
        w_lo, w_hi = diet_clock(grid, t_lo, clock, xp=xp), diet_clock(grid, t_hi, clock, xp=xp)
        keratin_s = eq.ramp_window_mean(w_lo[..., None], w_hi[..., None], st, w, xp=xp) - at_anchor
        if one_shift:
            blood_s, keratin_s = blood_s[..., 0], keratin_s[..., 0]
            if p.shift_size is not None:
                diet = diet + shift_path(
                    grid,
                    diet_clock(grid, bins_abs, clock, xp=xp),
                    p.shift_start,
                    p.shift_size,
                    xp=xp,
                )
    return Prediction(
        diet=diet,
        enrich=enrich,
        blood0=with_baseline_offset(b, p.disc[b.tissue] + blood_diet),
        blood_e=blood_e,
        keratin0=with_baseline_offset(k, p.disc[k.tissue] + diet_k),
        keratin_e=keratin_e,
        blood_s=blood_s,
        keratin_s=keratin_s,
    )


def with_baseline_offset(o: Any, y0: Any) -> Any:
    """Add each observation's known δ15N baseline offset (from phenylalanine) to ``y0``.

    ``y0`` is ``(I, N, 2)`` (or with leading draw axes); the offset
    (:attr:`nstress.prep.timebase.ObsSet.offset`, ‰) moves δ15N only. An
    observation set without any offset returns ``y0`` itself, so a table
    without amino-acid data gives the same graph and the same numbers as
    before the offset existed.
    """
    if not o.has_offset:
        return y0
    return y0 + np.stack([o.offset, np.zeros_like(o.offset)], axis=-1)


def _np_set(full: np.ndarray, rows: np.ndarray, vals: np.ndarray) -> np.ndarray:
    full = full.copy()
    full[rows] = vals
    return full


def with_episode(y0, ye, gamma, xp: ModuleType = np):
    """Return the expected values with the episode: ``y0 + ye·(1, γ)``."""
    g = gamma[:, None] if getattr(gamma, "ndim", 0) == 1 else gamma
    return eq.body_pool(y0, ye, g, xp=xp)


def expected(pred: Prediction, gamma, shift_size=None, episode=None) -> tuple[Any, Any]:
    """Return the expected (blood, keratin) values ``(I, N, 2)`` of one draw (NumPy).

    y = y0 + Δ·s + z·e·(1, γ), with the shift Δ (``shift_size``, if any) and
    the episode indicator z (``episode`` ``(I,)``; all ones if ``None``).
    """
    out = []
    for y0, ye, ys in (
        (pred.blood0, pred.blood_e, pred.blood_s),
        (pred.keratin0, pred.keratin_e, pred.keratin_s),
    ):
        z = 1.0 if episode is None else np.asarray(episode, float)[:, None]
        y = with_episode(y0, z * ye, gamma)
        if shift_size is not None and ys is not None:
            y = y + ys[..., None] * shift_size[:, None, :]
        out.append(y)
    return out[0], out[1]


def shift_precision(Q, sd, rho) -> tuple[Any, Any, Any]:
    """Entries ``(p11, p12, p22)`` of the shift's conditional precision P = diag(Q) + Σ⁻¹.

    Σ = [[σ₁², ρσ₁σ₂], [ρσ₁σ₂, σ₂²]] is the prior covariance of the shift size
    (``sd`` = (σ₁, σ₂) in ‰, ``rho`` = ρ); ``Q`` ``(..., 2)`` the likelihood's
    quadratic coefficients per isotope.
    """
    one_m = 1.0 - rho**2
    p12 = -rho / (sd[0] * sd[1] * one_m)
    return Q[..., 0] + 1.0 / (sd[0] ** 2 * one_m), p12, Q[..., 1] + 1.0 / (sd[1] ** 2 * one_m)


def shift_marginal(L, Q, sd, rho, xp: ModuleType = np):
    """Log of the shift's Gaussian integral.

    For a log-likelihood ΔᵀL − ½ Σ_c Q_c Δ_c² in the shift size Δ (‰ per
    isotope) and a prior Δ ~ Normal(0, Σ), Σ = [[σ₁², ρσ₁σ₂], [ρσ₁σ₂, σ₂²]],

        log ∫ exp(ΔᵀL − ½ΔᵀQΔ) N(Δ; 0, Σ) dΔ = ½ LᵀP⁻¹L − ½ log|P| − ½ log|Σ|,

    with P = Q + Σ⁻¹ the conditional precision (:func:`shift_precision`; the
    conditional mean is P⁻¹L).

    Parameters
    ----------
    L, Q
        ``(..., 2)`` linear and (diagonal) quadratic coefficients.
    sd
        ``(2,)`` prior SDs σ of the shift (‰).
    rho
        Prior correlation of the (δ15N, δ13C) shift.
    xp
        Array namespace.

    Returns
    -------
    array
        The log integral ``(...)``.
    """
    p11, b, p22 = shift_precision(Q, sd, rho)
    det = p11 * p22 - b**2
    quad = (p22 * L[..., 0] ** 2 - 2.0 * b * L[..., 0] * L[..., 1] + p11 * L[..., 1] ** 2) / det
    log_sigma = xp.log(sd[0] ** 2) + xp.log(sd[1] ** 2) + xp.log(1.0 - rho**2)
    return 0.5 * quad - 0.5 * xp.log(det) - 0.5 * log_sigma


def draw_shift(L, Q, sd, rho, rng: np.random.Generator) -> np.ndarray:
    """Draw shift sizes Δ ``(..., 2)`` from their conditional Normal(P⁻¹L, P⁻¹) (NumPy)."""
    p11, p12, p22 = shift_precision(Q, sd, rho)
    det = p11 * p22 - p12**2
    c11, c12, c22 = p22 / det, -p12 / det, p11 / det  # P⁻¹
    m1, m2 = c11 * L[..., 0] + c12 * L[..., 1], c12 * L[..., 0] + c22 * L[..., 1]
    z = rng.standard_normal(L.shape)
    l11 = np.sqrt(c11)
    l21 = c12 / l11
    l22 = np.sqrt(np.maximum(c22 - l21**2, 0.0))
    return np.stack([m1 + l11 * z[..., 0], m2 + l21 * z[..., 0] + l22 * z[..., 1]], axis=-1)


@dataclass
class ShiftTerms:
    """Sufficient terms of the shift size in the likelihood (see :func:`candidate_logliks`).

    ``L_none`` ``(I, J, 2)`` and ``L_episode`` ``(I, J, M, 2)`` are the linear
    coefficients without and with an episode at each candidate onset, ``Q``
    ``(I, J, 2)`` the quadratic ones (per isotope).
    """

    L_none: Any
    L_episode: Any
    Q: Any


def _over_samples(a, b, xp: ModuleType = np):
    """``Σ_n a[i, n, j] · b[i, n, m]`` ``(I, J, M)``: one batched matrix product."""
    if xp is np:
        return np.einsum("inj,inm->ijm", a, b)
    return xp.matmul(a.dimshuffle(0, 2, 1), b)


def candidate_logliks(
    tb: TimeBase,
    pred: Prediction,
    gamma,
    shift_size,
    extra_sd,
    xp: ModuleType = np,
    shift_prior: tuple[Any, Any] | None = None,
    return_terms: bool = False,
):
    """Log-likelihood tables over candidate shift starts j and episode onsets m.

    y ~ Normal(Y, sqrt(sd_row² + σ_k²)) over every observed (sample, isotope)
    entry. With residuals r = y − Y0 (no shift, no episode), the shift's
    unit response s_nj (times Δ per isotope) and the episode's e_nm (times
    g = (1, γ)), the Gaussian log-likelihood expands exactly into

        ll(j, m) = ll0 + Σ_n [s A − s² B/2]_nj + Σ_n [e a − e² b/2]_nm − Σ_n s_nj C_n e_nm

    with A = Σ_c Δ_c r_c/s²_c, B = Σ_c Δ_c²/s²_c, a = Σ_c g_c r_c/s²_c,
    b = Σ_c g_c²/s²_c, C = Σ_c Δ_c g_c/s²_c: every candidate pair costs a
    few products, and the cross term is one batched matrix product.

    With ``shift_prior`` = (σ, ρ) instead of a shift size, Δ ~ Normal(0, Σ)
    is integrated out exactly (:func:`shift_marginal`): per isotope c the
    log-likelihood is Δ_c L_c − ½ Δ_c² Q_c with L_c = Σ_n s_nj (r_nc − g_c e_nm)/s²_nc
    and Q_c = Σ_n s_nj²/s²_nc, one batched matrix product per isotope.

    Parameters
    ----------
    tb
        Time base (observations, masks, analytical SDs).
    pred
        Output of :func:`predict`: episode terms ``(I, N)`` or ``(I, N, M)``,
        shift terms ``(I, N)``, ``(I, N, J)`` or ``None`` (no shift).
    gamma
        ``(I,)`` δ13C response per ‰ catabolic δ15N.
    shift_size
        ``(I, 2)`` shift Δ (‰), or ``None``.
    extra_sd
        ``(n_tissues, 2)`` extra SD per tissue and isotope (‰).
    xp
        Array namespace.
    shift_prior
        ``(sd (2,), rho)`` of the shift's prior, to integrate Δ out (then
        ``shift_size`` must be ``None``).
    return_terms
        Also return the :class:`ShiftTerms` (with ``shift_prior``).

    Returns
    -------
    tuple
        ``ll_none`` ``(I, J)`` (no episode) and ``ll_episode`` ``(I, J, M)``;
        J = 1 without candidate shifts and M = 1 with one onset (and the
        :class:`ShiftTerms` if ``return_terms``).
    """
    if shift_prior is not None and shift_size is not None:
        raise ValueError("give a shift size or a shift prior, not both")
    marginal = shift_prior is not None
    ll0 = 0.0
    shift_gain = 0.0
    ep_gain = 0.0
    cross = 0.0
    g = xp.stack([xp.ones_like(gamma * 1.0), gamma * 1.0], axis=-1)[:, None, :]  # (I, 1, 2)
    has_shift = shift_size is not None
    dv = shift_size[:, None, :] if has_shift else None
    # shift terms per isotope (marginal shift), summed over the observation sets
    A_m, Q_m, X_m = [0.0, 0.0], [0.0, 0.0], [0.0, 0.0]
    seen_shift = False
    for o, y0, ye, ys in (
        (tb.blood, pred.blood0, pred.blood_e, pred.blood_s),
        (tb.keratin, pred.keratin0, pred.keratin_e, pred.keratin_s),
    ):
        if not o.mask.any():
            continue
        mask = o.y_mask & o.mask[..., None]
        s2 = o.sd**2 + extra_sd[o.tissue] ** 2
        norm = -0.5 * xp.log(2 * np.pi * s2)
        resid = xp.where(mask, o.y - y0, 0.0)
        inv = xp.where(mask, 1.0 / s2, 0.0)
        ll0 = ll0 + xp.sum(xp.where(mask, norm, 0.0) - 0.5 * resid**2 * inv, axis=(1, 2))
        e = ye if ye.ndim == 3 else ye[..., None]  # (I, N, M)
        a = xp.sum(g * resid * inv, axis=2)[..., None]
        bq = xp.sum(g**2 * inv, axis=2)[..., None]
        ep_gain = ep_gain + xp.sum(e * a - 0.5 * e**2 * bq, axis=1)  # (I, M)
        sj = None if ys is None else (ys if ys.ndim == 3 else ys[..., None])  # (I, N, J)
        if has_shift and sj is not None:
            A = xp.sum(dv * resid * inv, axis=2)[..., None]
            B = xp.sum(dv**2 * inv, axis=2)[..., None]
            C = xp.sum(dv * g * inv, axis=2)[..., None]
            shift_gain = shift_gain + xp.sum(sj * A - 0.5 * sj**2 * B, axis=1)  # (I, J)
            cross = cross + _over_samples(sj * C, e, xp)
        if marginal and sj is not None:
            seen_shift = True
            for c in range(2):
                ws = sj * inv[..., c][..., None]  # (I, N, J)
                A_m[c] = A_m[c] + xp.sum(ws * resid[..., c][..., None], axis=1)  # (I, J)
                Q_m[c] = Q_m[c] + xp.sum(ws * sj, axis=1)
                X_m[c] = X_m[c] + _over_samples(ws, e, xp)  # (I, J, M)
    ll0 = ll0[:, None] if getattr(ll0, "ndim", 0) == 1 else xp.zeros((tb.n_individuals, 1))
    if getattr(shift_gain, "ndim", 0) == 0:
        shift_gain = xp.zeros((tb.n_individuals, 1))
    if getattr(ep_gain, "ndim", 0) == 0:
        ep_gain = xp.zeros((tb.n_individuals, 1))
    if marginal and seen_shift:
        sd, rho = shift_prior
        g2 = g[:, 0, :]  # (I, 2)
        L_none = xp.stack(A_m, axis=-1)  # (I, J, 2)
        Q = xp.stack(Q_m, axis=-1)
        L_ep = xp.stack(
            [A_m[c][:, :, None] - g2[:, c][:, None, None] * X_m[c] for c in range(2)], axis=-1
        )  # (I, J, M, 2)
        m_none = shift_marginal(L_none, Q, sd, rho, xp=xp)
        m_ep = shift_marginal(L_ep, Q[:, :, None, :], sd, rho, xp=xp)
        ll_none = ll0 + m_none
        ll_episode = ll0[:, :, None] + ep_gain[:, None, :] + m_ep
        if return_terms:
            return ll_none, ll_episode, ShiftTerms(L_none=L_none, L_episode=L_ep, Q=Q)
        return ll_none, ll_episode
    ll_none = ll0 + shift_gain  # (I, J)
    ll_episode = ll_none[:, :, None] + ep_gain[:, None, :] - cross  # (I, J, M)
    if return_terms:
        return ll_none, ll_episode, None
    return ll_none, ll_episode

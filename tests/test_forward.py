"""The forward model (nstress.model.forward.predict) against brute-force references."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from nstress import equations as eq
from nstress.model.forward import Params, make_grid, predict, with_episode
from nstress.model.simulate import ColonySpec, simulate_colony, table_to_samples
from nstress.prep.timebase import build_timebase

EPOCH = np.datetime64("1970-01-01", "D")
N_FINE = 2000  # points of the brute-force window average


@pytest.fixture(scope="module")
def sim():
    # A small synthetic colony: fasters (one also shifts diet), one diet-shifter; two animals
    # with paired blood draws, two keratin-only (exercises the blood scatter into padded rows).
    spec = ColonySpec(
        n_individuals=4,
        seed=21,
        kind_shares={"faster": 0.5, "faster+shift": 0.25, "trophic_shift": 0.25},
        blood_share=0.5,
    )
    s = simulate_colony(spec)
    tb = build_timebase(table_to_samples(s.table))
    grid = make_grid(tb, knot_days=spec.knot_days, diet_clock=True)
    return s, tb, grid


def _knot_values(p: Params, grid) -> np.ndarray:
    """(I, K, 2) diet at the knots: baseline + cumulative walk, 0 at each animal's anchor knot."""
    walk = np.concatenate([np.zeros_like(p.steps[:, :1]), np.cumsum(p.steps, axis=1)], axis=1)
    at_anchor = walk[np.arange(walk.shape[0]), grid.anchor][:, None, :]
    return p.baseline[:, None, :] + walk - at_anchor


def _clock(tb, growth):
    """Pivot p and rate r of each animal's diet clock w = p + r (t - p), from the table itself.

    p is the collection time (noon) of the animal's latest-collected keratin and r that
    keratin's growth multiplier; animals without keratin run on time itself (r = 1).
    """
    n = tb.n_individuals
    pivot, rate = np.zeros(n), np.ones(n)
    ker = tb.samples[tb.samples["tissue"].map(lambda t: tb.tissue_defs[t].is_keratin)]
    for i, ind in enumerate(tb.individuals):
        rows = ker[ker["individual"] == ind]
        if not len(rows):
            continue
        last = rows.iloc[np.argmax(pd.to_datetime(rows["collected"]).to_numpy())]
        day = (np.datetime64(pd.Timestamp(last["collected"]).date(), "D") - EPOCH).astype(float)
        pivot[i] = day + 0.5 - (tb.origin[i] - EPOCH).astype(float)
        rate[i] = growth[i, tb.keratin_tissues.index(last["tissue"])]
    return pivot, rate


def _reference_diet(p: Params, grid, w: np.ndarray):
    """Walk and shift ``(I, T, 2)`` at clock times ``w`` ``(I, T)``, by numpy's interpolation.

    The walk interpolates the knot values linearly (held constant outside); the shift is a
    ramp over one knot interval of the clock that is 0 at the walk's anchor knot.
    """
    kv = _knot_values(p, grid)
    diet = np.stack(
        [
            np.stack([np.interp(w[i], grid.knots, kv[i, :, c]) for i in range(len(kv))])
            for c in (0, 1)
        ],
        axis=-1,
    )
    ramp = np.clip((w - p.shift_start[:, None]) / grid.spacing, 0, 1)
    ramp_a = np.clip((grid.knots[grid.anchor] - p.shift_start) / grid.spacing, 0, 1)
    shift = (ramp - ramp_a[:, None])[..., None] * p.shift_size[:, None, :]
    return diet, shift


def _windows(tb, growth):
    """Growth window of every keratin segment from the sample table itself.

    A segment at midpoint x (mm from the root), length l, pulled on t_c, grew over
    [t_c - (x + l/2)/g, t_c - (x - l/2)/g] with g = r * g0 (model.md section 1).
    """
    k = tb.keratin
    rows = tb.samples.loc[k.sample[k.mask]]
    x = rows["position_mm"].to_numpy(float)
    seg = rows["segment_length_mm"].to_numpy(float)
    g0 = np.array([tb.tissue_defs[t].growth_mm_per_day for t in rows["tissue"]])
    assert all(tb.tissue_defs[t].growth_model == "linear" for t in rows["tissue"])
    ii = np.nonzero(k.mask)[0]
    origin = (tb.origin[ii] - EPOCH).astype(float)
    collected = pd.to_datetime(rows["collected"]).to_numpy().astype("datetime64[D]")
    t_c = (collected - EPOCH).astype(float) + 0.5 - origin  # noon of the collection day
    r = growth[ii, k.slot[k.mask]]
    start = t_c - (x + seg / 2) / (g0 * r)
    end = t_c - np.clip(x - seg / 2, 0.0, None) / (g0 * r)
    return ii, start, end


def _midpoint_bound(ii, start, end, n, p: Params, grid, clock=None):
    """Error bound of the n-point midpoint rule for the window mean of D and of E.

    Midpoint rule on a sub-interval of width h (e.g. Burden & Faires, Numerical Analysis,
    from memory): |error| <= h^3/24 max|f''| for smooth f, and <= |jump of f'| h^2/8 for a
    kink (the worst case is a kink at the sub-interval's midpoint). D is piecewise linear
    with kinks at the knots (slope jumps by the change of step / spacing, and to 0 outside
    the knots); E has kinks of size kappa at onset and end of the episode and |E''| <=
    kappa/tau elsewhere. Divided by the window length L for the mean. D's bound is taken on
    the diet clock (``clock`` = (p, r) of each segment), where D is piecewise linear on the
    knots; the mean over a window does not change under the clock's linear map.
    """
    L = end - start
    h = L / n
    p_, r_ = clock if clock is not None else (np.zeros_like(start), np.ones_like(start))
    ws, we = p_ + r_ * (start - p_), p_ + r_ * (end - p_)
    hw = (we - ws) / n
    s = grid.spacing
    slopes = np.concatenate(
        [np.zeros_like(p.steps[:, :1]), p.steps / s, np.zeros_like(p.steps[:, :1])], axis=1
    )  # (I, K + 1, 2): slope left of knot 0, between knots, right of the last knot
    jump = np.abs(np.diff(slopes, axis=1))  # (I, K, 2) at each knot
    inside = (grid.knots[None, :] >= ws[:, None]) & (grid.knots[None, :] <= we[:, None])
    kink_d = (jump[ii] * inside[..., None]).sum(axis=1)  # (n_seg, 2)
    bound_d = kink_d * (hw**2 / (8 * (we - ws)))[:, None]
    kappa, tau = p.kappa[ii], p.tau_rec[ii]
    edges = np.stack([p.onset[ii], p.onset[ii] + p.duration[ii]], axis=1)
    n_kinks = ((edges >= start[:, None]) & (edges <= end[:, None])).sum(axis=1)
    bound_e = n_kinks * kappa * h**2 / (8 * L) + kappa / tau * h**2 / 24
    return bound_d, bound_e


@pytest.mark.parametrize("growth_scale", [1.0, 0.7, 1.6])
@pytest.mark.parametrize("n_points", [6, 2])
def test_keratin_is_window_mean_of_pool(sim, growth_scale, n_points):
    s, tb, _ = sim
    grid = make_grid(tb, knot_days=s.spec.knot_days, keratin_points=n_points, diet_clock=True)
    p = dataclasses.replace(s.params, growth=s.params.growth * growth_scale)
    pred = predict(tb, grid, p)
    ii, start, end = _windows(tb, p.growth)

    # brute force: fine midpoint grid over each window; D by numpy's own linear interpolation
    # of the knot values (held constant outside the knots), E by the closed form (checked
    # against an ODE solver in test_equations.py)
    f = (np.arange(N_FINE) + 0.5) / N_FINE
    tt = start[:, None] + (end - start)[:, None] * f  # (n_seg, N_FINE)
    kv = _knot_values(p, grid)
    pivot, rate = _clock(tb, p.growth)
    ww = pivot[ii, None] + rate[ii, None] * (tt - pivot[ii, None])  # the diet clock
    diet = np.stack(
        [
            np.stack([np.interp(ww[j], grid.knots, kv[i, :, c]) for j, i in enumerate(ii)])
            for c in range(2)
        ],
        axis=-1,
    ).mean(axis=1)
    enrich = eq.enrichment(
        tt, p.onset[ii, None], p.duration[ii, None], p.kappa[ii, None], p.tau_rec[ii, None]
    ).mean(axis=1)

    # tolerance: the midpoint-rule bound for the model's n points plus that of the
    # brute force's 2,000 points, plus rounding
    seg_clock = (pivot[ii], rate[ii])
    bd, be = _midpoint_bound(ii, start, end, n_points, p, grid, seg_clock)
    bd_f, be_f = _midpoint_bound(ii, start, end, N_FINE, p, grid, seg_clock)
    k = tb.keratin
    disc = p.disc[k.tissue[k.mask]]
    err_d = np.abs(pred.keratin0[k.mask] - disc - diet)
    err_e = np.abs(pred.keratin_e[k.mask] - enrich)
    assert np.all(err_d <= bd + bd_f + 1e-12), (err_d.max(), (bd + bd_f).max())
    # the enrichment's window mean is exact (closed-form integral): only the brute force errs
    assert np.all(err_e <= be_f + 1e-10), (err_e.max(), be_f.max())
    # the observable: delta15N = D_N + E, delta13C = D_C + gamma E
    y = with_episode(pred.keratin0, pred.keratin_e, p.gamma)[k.mask]
    g = p.gamma[ii]
    ref = disc + diet + np.stack([enrich, g * enrich], axis=-1)
    tol = np.stack([bd[:, 0] + be, bd[:, 1] + np.abs(g) * be], axis=-1) * (1 + N_FINE**-2)
    assert np.all(np.abs(y - ref) <= tol + 1e-12)
    # the data really exercise the check: episodes inside the keratin record, and windows
    # that cross knots
    assert (p.kappa[ii] > 0).any() and (enrich > 0.1).any()
    assert (bd > 0).any()
    if n_points == 6:
        # with the default 6 points the quadrature error is far below the analytical SD
        # (0.15 permil, common practice) of a measurement
        assert bd.max() < 0.01 and be.max() < 0.01


def test_keratin_windows_follow_growth(sim):
    # r scales growth: a faster whisker (r = 2) records each segment twice as close to the
    # collection date, on absolute time. The diet runs on the animal's clock
    # w = p + r (t - p) pivoted at that collection date, so the diet record of the whisker
    # does not move with r while the episode (absolute time) and the blood draws do.
    s, tb, grid = sim
    p0 = s.params
    k, b = tb.keratin, tb.blood
    preds = {}
    for r in (1.0, 2.0):
        p = dataclasses.replace(p0, growth=np.full_like(p0.growth, r))
        preds[r] = predict(tb, grid, p)
    np.testing.assert_allclose(preds[1.0].keratin0[k.mask], preds[2.0].keratin0[k.mask], atol=1e-12)
    np.testing.assert_allclose(
        preds[1.0].keratin_s[k.mask], preds[2.0].keratin_s[k.mask], atol=1e-12
    )
    fasting = (p0.kappa > 0)[:, None] & k.mask
    moved_e = np.abs(preds[1.0].keratin_e - preds[2.0].keratin_e)[fasting]
    assert moved_e.max() > 0.05
    moved_b = np.abs(preds[1.0].blood0 - preds[2.0].blood0)[b.mask]
    assert moved_b.max() > 0.05
    # on absolute time: with constant walk steps (a diet linear on the clock) and no episode,
    # the window mean is the diet at the window's centre, exactly for the midpoint rule
    steps = np.full_like(p0.steps, 0.05)
    pivot, _ = _clock(tb, p0.growth)
    for r in (1.0, 2.0):
        p = dataclasses.replace(
            p0, steps=steps, kappa=np.zeros_like(p0.kappa), growth=np.full_like(p0.growth, r)
        )
        y = predict(tb, grid, p).keratin0 - p.disc[k.tissue]
        age = k.t - 0.5 * (k.h_lo + k.h_hi) / r  # window centre, absolute time
        w = pivot[:, None] + r * (age - pivot[:, None])
        anchor_t = grid.knots[grid.anchor][:, None, None]
        expected = p.baseline[:, None, :] + 0.05 * (w[..., None] - anchor_t) / grid.spacing
        inside = k.mask & (k.t - k.h_hi / r >= 0) & (w - 0.5 * (k.h_hi - k.h_lo) >= 0)
        np.testing.assert_allclose(y[inside], expected[inside], atol=1e-10)


def test_blood_prediction_equals_reference_weights(sim):
    # The fast form inside predict (filtered pool, gathered per draw) must equal the reference
    # one-compartment weights (blood_weights) applied to the pool on the bins.
    s, tb, grid = sim
    p = s.params
    pred = predict(tb, grid, p)
    # latent paths on the bins: D by numpy interpolation of the knot values, E closed form
    pivot, rate = _clock(tb, p.growth)
    w = pivot[:, None] + rate[:, None] * (tb.bin_mid[None, :] - pivot[:, None])  # diet clock
    diet, shift = _reference_diet(p, grid, w)
    assert np.abs(shift).max() > 0.5  # the colony has shifters
    np.testing.assert_allclose(pred.diet, diet + shift, atol=1e-12)
    enrich = eq.enrichment(
        tb.bin_mid[None, :],
        p.onset[:, None],
        p.duration[:, None],
        p.kappa[:, None],
        p.tau_rec[:, None],
    )
    np.testing.assert_allclose(pred.enrich, enrich, atol=1e-12)
    b = tb.blood
    assert b.mask.any() and (~b.mask.any(axis=1)).any()  # some animals have no blood
    rate = p.rate[b.tissue][..., None]
    w = eq.blood_weights(b.t[..., None], tb.bin_lo, tb.bin_width, rate)
    ref0 = p.disc[b.tissue] + np.einsum("int,itc->inc", w, diet)
    np.testing.assert_allclose(pred.blood0[b.mask], ref0[b.mask], rtol=0, atol=1e-12)


def test_blood_enrichment_solves_the_one_compartment_ode(sim):
    # The episode's contribution to a blood tissue is the exact solution of the
    # one-compartment model dY/dt = λ(E(t) − Y) (Tieszen et al. 1983; Martínez del Rio et al.
    # 2009), checked against a general-purpose ODE solver (scipy's solve_ivp).
    from scipy.integrate import solve_ivp

    s, tb, grid = sim
    p = s.params
    pred = predict(tb, grid, p)
    b = tb.blood
    checked = 0
    for i in np.flatnonzero(b.mask.any(axis=1) & (p.kappa > 0)):
        for k in np.unique(b.tissue[i][b.mask[i]]):
            sel = b.mask[i] & (b.tissue[i] == k)
            ts = np.sort(b.t[i][sel])
            lam = p.rate[k]

            def rhs(t, y, i=i, lam=lam):
                e = eq.enrichment(t, p.onset[i], p.duration[i], p.kappa[i], p.tau_rec[i])
                return lam * (e - y)

            sol = solve_ivp(
                rhs, (0.0, ts[-1]), [0.0], t_eval=ts, rtol=1e-10, atol=1e-12, max_step=1.0
            )
            got = pred.blood_e[i][sel][np.argsort(b.t[i][sel])]
            np.testing.assert_allclose(got, sol.y[0], rtol=0, atol=1e-7)
            checked += 1
    assert checked >= 2
    assert pred.blood_e[b.mask].max() > 0.1  # the draws see the episode


def test_blood_enrichment_is_stable_when_rates_coincide():
    # λ = 1/τ is a removable singularity of the closed form: there the value must still be
    # the ODE's solution and continuous in λ, to far below a measurement's 0.15 permil
    # analytical SD (common practice)
    from scipy.integrate import solve_ivp

    t = np.array([5.0, 30.0, 60.0, 120.0])
    base = dict(onset=10.0, duration=30.0, kappa=0.05, tau_rec=25.0)
    lam = 1 / 25.0
    at = eq.enrichment_incorporated(t, rate=lam, **base)

    def rhs(tt, y):
        return lam * (eq.enrichment(tt, **base) - y)

    sol = solve_ivp(rhs, (0, t[-1]), [0.0], t_eval=t, rtol=1e-10, atol=1e-12, max_step=1.0)
    np.testing.assert_allclose(at, sol.y[0], atol=1e-4)
    for gap in (1e-9, 1e-7, 1e-6):
        lo = eq.enrichment_incorporated(t, rate=lam - gap, **base)
        hi = eq.enrichment_incorporated(t, rate=lam + gap, **base)
        np.testing.assert_allclose(lo, at, atol=1e-4)
        np.testing.assert_allclose(hi, at, atol=1e-4)


# --------------------------------------------------------------------------
# the same graph in PyTensor
# --------------------------------------------------------------------------
_OUTPUTS = (
    "diet",
    "enrich",
    "blood0",
    "blood_e",
    "keratin0",
    "keratin_e",
    "blood_s",
    "keratin_s",
)


def _symbolic(p: Params):
    import pytensor.tensor as pt

    return {
        f.name: pt.tensor(f.name, shape=(None,) * np.ndim(getattr(p, f.name)), dtype="float64")
        for f in dataclasses.fields(Params)
    }


def _compile(tb, grid, p, mode):
    import pytensor
    import pytensor.tensor as pt

    sym = _symbolic(p)
    pred = predict(tb, grid, Params(**sym), xp=pt)
    outs = [getattr(pred, n) for n in _OUTPUTS]
    outs.append(with_episode(pred.keratin0, pred.keratin_e, sym["gamma"], xp=pt))
    outs.append(with_episode(pred.blood0, pred.blood_e, sym["gamma"], xp=pt))
    fn = pytensor.function(list(sym.values()), outs, mode=mode, on_unused_input="raise")
    return fn, sym, pred


def _check_same_numbers(sim, mode):
    s, tb, grid = sim
    p = s.params
    fn, _, _ = _compile(tb, grid, p, mode)
    got = fn(*[getattr(p, f.name) for f in dataclasses.fields(Params)])
    ref = predict(tb, grid, p)
    want = [getattr(ref, n) for n in _OUTPUTS]
    want.append(with_episode(ref.keratin0, ref.keratin_e, p.gamma))
    want.append(with_episode(ref.blood0, ref.blood_e, p.gamma))
    for name, g, w in zip(_OUTPUTS + ("keratin", "blood"), got, want, strict=True):
        assert g.shape == w.shape, name
        np.testing.assert_allclose(g, w, rtol=1e-12, atol=1e-12, err_msg=name)


def test_pytensor_graph_gives_numpy_numbers(sim):
    # FAST_COMPILE runs the PyTensor graph with each op's own implementation and compiles in
    # about a second; a cold C or numba build of the same graph takes one to two minutes.
    pytest.importorskip("pytensor")
    _check_same_numbers(sim, "FAST_COMPILE")


@pytest.mark.slow
@pytest.mark.parametrize("mode", ["NUMBA", None])
def test_pytensor_compiled_backends_give_numpy_numbers(sim, mode):
    pytest.importorskip("numba" if mode == "NUMBA" else "pytensor")
    _check_same_numbers(sim, mode)


def test_pytensor_gradient_matches_finite_differences(sim):
    # The growth multipliers move the keratin windows, and turnover rates the blood kernels;
    # NUTS needs both gradients. Compare PyTensor's gradient with central differences of the
    # NumPy forward model.
    import pytensor
    import pytensor.tensor as pt

    s, tb, grid = sim
    p = s.params
    rng = np.random.default_rng(0)
    ck = rng.normal(size=tb.keratin.mask.shape + (2,)) * tb.keratin.mask[..., None]
    cb = rng.normal(size=tb.blood.mask.shape + (2,)) * tb.blood.mask[..., None]

    def loss(pred, gamma, xp):
        yk = with_episode(pred.keratin0, pred.keratin_e, gamma, xp=xp)
        yb = with_episode(pred.blood0, pred.blood_e, gamma, xp=xp)
        return (yk * ck).sum() + (yb * cb).sum()

    sym = _symbolic(p)
    lsym = loss(predict(tb, grid, Params(**sym), xp=pt), sym["gamma"], pt)
    grads = pt.grad(lsym, [sym["growth"], sym["rate"]])
    fn = pytensor.function(list(sym.values()), grads, mode="FAST_COMPILE", on_unused_input="ignore")
    g_growth, g_rate = fn(*[getattr(p, f.name) for f in dataclasses.fields(Params)])

    def numeric(name, x0, eps):
        out = np.zeros_like(x0)
        for idx in np.ndindex(x0.shape):
            vals = []
            for sign in (1.0, -1.0):
                x = x0.copy()
                x[idx] += sign * eps
                q = dataclasses.replace(p, **{name: x})
                vals.append(loss(predict(tb, grid, q), q.gamma, np))
            out[idx] = (vals[0] - vals[1]) / (2 * eps)
        return out

    n_growth = numeric("growth", p.growth, 1e-6)
    n_rate = numeric("rate", p.rate, 1e-7)
    np.testing.assert_allclose(g_growth, n_growth, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(g_rate, n_rate, rtol=1e-5, atol=1e-6)
    # growth moves what runs on absolute time: the episode in keratin and the diet the blood
    # reads; a keratin-only animal without an episode has a diet record independent of its
    # growth (the diet clock, forward.diet_clock)
    told = (p.kappa > 0) | tb.blood.mask.any(axis=1)
    assert told.any() and (~told).any()
    assert np.abs(g_growth[told]).min() > 1e-3
    np.testing.assert_allclose(g_growth[~told], 0.0, atol=1e-9)
    ker = [j for j, c in enumerate(tb.tissue_class) if c == "keratin"]
    assert np.all(g_rate[ker] == 0) and np.all(np.abs(np.delete(g_rate, ker)) > 1e-3)


def test_phase_offset_is_uniform_and_wraps_smoothly():
    from scipy import stats

    from nstress.model.forward import phase_offset

    step = 8.0
    rng = np.random.default_rng(5)
    off = phase_offset(rng.standard_normal((20000, 2)), step)
    assert off.min() >= 0.0 and off.max() < step
    # a rotation-invariant prior on the plane gives a uniform offset
    assert stats.kstest(off / step, "uniform").pvalue > 0.01
    # continuous in the angle away from the cut at angle ±π, where it wraps by one step
    ang = np.linspace(-np.pi + 1e-6, np.pi - 1e-6, 1001)
    o = phase_offset(np.stack([np.cos(ang), np.sin(ang)], axis=-1), step)
    np.testing.assert_allclose(np.diff(o), step / 1000 * (1 - 2e-6 / (2 * np.pi)), rtol=1e-4)
    assert o[0] < 1e-5 and o[-1] > step - 1e-5


def test_shift_candidates_reach_past_both_ends_of_the_samples(sim):
    from nstress.model.forward import sampled_span

    _, tb, grid = sim
    lo, hi = sampled_span(tb)
    n = grid.shift_mask.sum(axis=1)
    first = grid.shift_days[:, 0]
    last = grid.shift_days[np.arange(len(n)), n - 1]
    # the first candidate's ramp is done before the earliest sample, the last starts after the
    # latest: both leave no trace, so wrapping the offset from one step to the next is seamless
    assert np.all(first + grid.spacing <= lo + 1e-9)
    assert np.all(last >= hi - 1e-9)
    assert np.all(np.diff(grid.shift_days, axis=1)[grid.shift_mask[:, 1:]] > 0)


def test_without_the_clock_the_diet_runs_on_time(sim):
    # ModelSpec(diet_clock=False) (the default is True): every animal's clock is time itself, so the
    # diet on the bins is the knots' interpolation at the bin centres whatever the growth
    s, tb, _ = sim
    grid = make_grid(tb, knot_days=s.spec.knot_days)
    assert not grid.warp_on.any()
    p = dataclasses.replace(s.params, growth=s.params.growth * 1.5)
    pred = predict(tb, grid, p)
    diet, shift = _reference_diet(p, grid, np.broadcast_to(tb.bin_mid, (tb.n_individuals, tb.T)))
    np.testing.assert_allclose(pred.diet, diet + shift, atol=1e-12)

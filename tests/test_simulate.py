"""The forward simulator: determinism, truth tables, and physics against published curves."""

from __future__ import annotations

import dataclasses
import re
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from nstress import equations as eq
from nstress.errors import ConfigError
from nstress.model.forward import predict, with_episode
from nstress.model.simulate import (
    KINDS,
    SAMPLE_COLUMNS,
    ColonySpec,
    kind_counts,
    simulate_colony,
    table_to_samples,
    write_simulation,
)
from nstress.prep.timebase import build_timebase
from nstress.tissues import DEFAULT_TISSUES

ISO = re.compile(r"^\d{4}-\d{2}-\d{2}$")

# Discrimination (tissue - diet): fur seal plasma +5.2 / +1.0 and RBC +4.1 / +1.3 permil
# (Kurle 2002 Can J Zool 80:902); whisker defaults 3.0 / 2.8 (Delta13C inside the +2 to +3.2
# keratin range of Hobson et al. 1996 and Newsome et al. 2010; Delta15N from memory).
DISC = {"plasma": (5.2, 1.0), "rbc": (4.1, 1.3), "whisker": (3.0, 2.8)}
# Half-lives: plasma 4.3 d (Hahn et al. 2012 PLoS ONE 7:e30242); red cells 30 d (about 32 d,
# Hahn et al. 2012; residence 21-31 d, Tsahar et al. 2008 J Exp Biol 211:459).
HALF_LIFE = {"plasma": 4.3, "rbc": 30.0}


@pytest.fixture(scope="module")
def sim():
    return simulate_colony(ColonySpec(n_individuals=36, seed=1))


def _reread(folder):
    return pd.read_csv(folder / "samples.csv")


# --------------------------------------------------------------------------
# determinism and files
# --------------------------------------------------------------------------
def test_same_seed_identical_files_other_seed_differs(tmp_path):
    spec = ColonySpec(n_individuals=12, seed=7)
    p1 = write_simulation(simulate_colony(spec), tmp_path / "a")
    p2 = write_simulation(simulate_colony(ColonySpec(n_individuals=12, seed=7)), tmp_path / "b")
    p3 = write_simulation(simulate_colony(ColonySpec(n_individuals=12, seed=8)), tmp_path / "c")
    assert sorted(p.name for p in (tmp_path / "a").iterdir()) == [
        "samples.csv",
        "truth_bins.csv",
        "truth_individuals.csv",
    ]
    for key in p1:
        assert p1[key].read_bytes() == p2[key].read_bytes(), key
    assert p1["samples"].read_bytes() != p3["samples"].read_bytes()
    assert p1["truth_individuals"].read_bytes() != p3["truth_individuals"].read_bytes()


def test_table_follows_the_contract(sim):
    t = sim.table
    assert list(t.columns) == [c for c in SAMPLE_COLUMNS if c in t.columns]
    for col in (
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
        "lipid_extracted",
    ):
        assert col in t.columns
    ker = t["tissue"] == "whisker"
    assert set(t["tissue"]) == {"whisker", "plasma", "rbc"}
    assert t.loc[ker, "collected"].map(lambda s: bool(ISO.match(s))).all()
    assert t.loc[~ker, "date"].map(lambda s: bool(ISO.match(s))).all()
    assert t.loc[ker, "date"].isna().all() and t.loc[~ker, "collected"].isna().all()
    assert t.loc[~ker, "position_mm"].isna().all()
    assert t["sample_id"].is_unique
    assert set(t["group"]) == {"colony_A", "colony_B"}
    # two decimals, analytical SD 0.15
    assert np.allclose(t["d15N"], t["d15N"].round(2))
    assert (t["sd_d15N"] == 0.15).all() and (t["sd_d13C"] == 0.15).all()
    # one collection date per whisker; ~30 contiguous 1 mm segments from the root
    for _, w in t[ker].groupby("individual"):
        assert w["collected"].nunique() == 1
        x = np.sort(w["position_mm"].to_numpy())
        np.testing.assert_allclose(x, np.arange(len(x)) + 0.5)
        assert 27 <= len(x) <= 33
    # paired blood draws about a week apart
    b = t[~ker]
    pairs = b.groupby(["individual", "date"])["tissue"].apply(lambda s: tuple(sorted(s)))
    assert set(pairs) == {("plasma", "rbc")}
    gaps = (
        b[b["tissue"] == "plasma"]
        .groupby("individual")["date"]
        .apply(
            lambda s: np.diff(pd.to_datetime(s).sort_values().to_numpy()).astype("timedelta64[D]")
        )
    )
    all_gaps = np.concatenate(gaps.to_list()).astype(int)
    assert all_gaps.min() >= 5 and all_gaps.max() <= 9
    assert (b.groupby("individual")["date"].nunique() == 13).all()
    # chemistry inside the accepted ranges, consistent C:N
    cn = eq.cn_atomic(t["pct_C"], t["pct_N"])
    np.testing.assert_allclose(t["cn_ratio"], cn, atol=6e-4)
    assert t.loc[ker, "cn_ratio"].between(2.9, 3.8).all()


# --------------------------------------------------------------------------
# kinds and truth
# --------------------------------------------------------------------------
def test_all_kinds_present(sim):
    ti = sim.truth_individuals
    counts = ti["kind"].value_counts().to_dict()
    assert set(counts) == {k for k, v in ColonySpec().kind_shares.items() if v > 0}
    assert set(counts) <= set(KINDS)
    assert counts == {k: v for k, v in kind_counts(36, ColonySpec().kind_shares).items() if v}
    assert counts["faster"] == 13  # 35 % of 36 = 12.6, largest remainder
    assert ti["has_blood"].sum() == 18
    assert ti.groupby("kind")["has_blood"].any().all()  # blood spread over the kinds
    for n in (10, 11, 17):
        c = kind_counts(n, ColonySpec().kind_shares)
        shared = [v for k, v in c.items() if ColonySpec().kind_shares.get(k, 0) > 0]
        assert sum(c.values()) == n and min(shared) >= 1
    assert kind_counts(3, {"faster": 1.0}) == {
        "faster": 3,
        "trophic_shift": 0,
        "habitat_shift": 0,
        "faster+shift": 0,
        "neither": 0,
        "baseline_shift": 0,
    }


def test_truth_individuals_consistent(sim):
    ti = sim.truth_individuals
    ep = ti["has_episode"]
    assert (ep == ti["kind"].isin(["faster", "faster+shift"])).all()
    assert (ti.loc[~ep, "kappa_per_day"] == 0).all()
    assert ti.loc[ep, "kappa_per_day"].between(0.03, 0.08).all()
    assert ti.loc[ep, "duration_days"].between(20, 60).all()
    assert ti.loc[ep, "tau_rec_days"].between(20, 60).all()
    assert ti.loc[~ep, ["onset_date", "end_date"]].isna().all().all()
    assert ti["gamma"].between(-0.35, 0.15).all()
    np.testing.assert_allclose(
        ti["peak_enrichment_d15N"],
        np.where(
            ep,
            ti["kappa_per_day"]
            * ti["tau_rec_days"]
            * (1 - np.exp(-ti["duration_days"] / ti["tau_rec_days"])),
            0.0,
        ),
        rtol=1e-5,
        atol=1e-6,
    )
    sh = ti["has_shift"]
    assert (sh == ti["kind"].isin(["trophic_shift", "habitat_shift", "faster+shift"])).all()
    tro = ti["shift_type"] == "trophic"
    # trophic: |dN| in [1, 2.5], dC/dN in [0.12, 0.3] (Post 2002: a trophic step moves both)
    assert ti.loc[tro, "shift_d15N"].abs().between(1.0, 2.5).all()
    assert (ti.loc[tro, "shift_d13C"] / ti.loc[tro, "shift_d15N"]).between(0.12, 0.3).all()
    hab = ti["shift_type"] == "habitat"
    assert ti.loc[hab, "shift_d13C"].abs().between(1.0, 2.0).all()
    assert (ti.loc[~sh, ["shift_d15N", "shift_d13C"]] == 0).all().all()
    # shift dates inside the whisker record (collection minus ~30 mm at ~0.1 mm/d)
    coll = pd.to_datetime(ti.loc[sh, "collected"])
    shift = pd.to_datetime(ti.loc[sh, "shift_date"])
    age = (coll - shift).dt.days
    assert (age > 0).all()
    assert (age < ti.loc[sh, "n_segments"] / (0.1 * ti.loc[sh, "growth_multiplier"])).all()


def test_truth_bins_match_timebase_of_reread_table(sim, tmp_path):
    write_simulation(sim, tmp_path)
    tb = build_timebase(table_to_samples(_reread(tmp_path)))
    tbins = pd.read_csv(tmp_path / "truth_bins.csv")
    assert len(tbins) == tb.bin_mask.sum() == len(sim.truth_bins)
    dates = tb.bin_dates()
    for i, name in enumerate(tb.individuals):
        rows = tbins[tbins["individual"] == name].sort_values("bin")
        real = np.datetime_as_string(dates[i, tb.bin_mask[i]], unit="D")
        assert rows["date"].tolist() == real.tolist()
        assert rows["bin"].tolist() == list(range(tb.n_bins[i]))
    assert np.array_equal(tb.origin, sim.timebase.origin)
    assert tb.T == sim.timebase.T
    np.testing.assert_array_equal(tb.keratin.h_hi, sim.timebase.keratin.h_hi)
    np.testing.assert_array_equal(tb.blood.t, sim.timebase.blood.t)
    # the catabolic flag follows the fraction; only episode animals have catabolic bins
    assert (tbins["catabolic"] == (tbins["catabolic_fraction"] >= 0.5)).all()
    ep = set(sim.truth_individuals.loc[sim.truth_individuals["has_episode"], "individual"])
    assert set(tbins.loc[tbins["catabolic"], "individual"]) == ep
    # catabolic days = duration (to rounding), enrichment peaks near the episode's end
    ti = sim.truth_individuals.set_index("individual")
    days = tbins.groupby("individual")["catabolic_fraction"].sum() * tb.bin_width
    np.testing.assert_allclose(days[list(ep)], ti.loc[list(ep), "duration_days"], atol=1e-3)
    peak = tbins.groupby("individual")["enrichment_d15N"].max()
    assert (peak[list(ep)] <= ti.loc[list(ep), "peak_enrichment_d15N"] + 1e-4).all()
    assert (peak[list(ep)] >= 0.9 * ti.loc[list(ep), "peak_enrichment_d15N"]).all()


def test_noise_free_table_equals_forward_model_on_reread_grid(tmp_path):
    spec = ColonySpec(n_individuals=10, seed=3, analytical_sd=0.0, extra_sd=0.0, decimals=None)
    s = simulate_colony(spec)
    tb = build_timebase(table_to_samples(s.table))
    pred = predict(tb, s.grid, s.params)
    for obs, y0, ye, ys in (
        (tb.blood, pred.blood0, pred.blood_e, pred.blood_s),
        (tb.keratin, pred.keratin0, pred.keratin_e, pred.keratin_s),
    ):
        y = with_episode(y0, ye, s.params.gamma) + ys[..., None] * s.params.shift_size[:, None]
        rows = obs.sample[obs.mask]
        np.testing.assert_allclose(
            s.table.loc[rows, ["d15N", "d13C"]].to_numpy(), y[obs.mask], atol=1e-12
        )


# --------------------------------------------------------------------------
# physics checks
# --------------------------------------------------------------------------
def test_null_colony_sits_at_diet_plus_discrimination():
    # No fasting, no diet change: every tissue = diet + its discrimination (Kurle 2002 for
    # blood), scattered by the stated noise sqrt(0.15^2 + 0.05^2).
    spec = ColonySpec(
        n_individuals=60, seed=11, kind_shares={"neither": 1.0}, walk_sd=0.0, blood_share=0.5
    )
    s = simulate_colony(spec)
    assert (s.truth_individuals["kind"] == "neither").all()
    assert not s.truth_bins["catabolic"].any() and (s.truth_bins["enrichment_d15N"] == 0).all()
    diet = s.truth_bins.groupby("individual")[["diet_d15N", "diet_d13C"]].agg(["min", "max"])
    np.testing.assert_allclose(diet[("diet_d15N", "min")], diet[("diet_d15N", "max")])
    level = s.truth_bins.groupby("individual")[["diet_d15N", "diet_d13C"]].first()
    t = s.table.join(level, on="individual")
    sigma = np.hypot(0.15, 0.05)
    for tissue, (dn, dc) in DISC.items():
        m = t["tissue"] == tissue
        for iso, disc in (("d15N", dn), ("d13C", dc)):
            res = t.loc[m, iso] - t.loc[m, f"diet_{iso}"] - disc
            n = int(m.sum())
            assert abs(res.mean()) < 4 * sigma / np.sqrt(n), (tissue, iso)
            assert res.std() == pytest.approx(sigma, rel=0.12), (tissue, iso)


@pytest.mark.parametrize("bin_width", [1.0, 4.0])
def test_step_diet_change_follows_incorporation_curve(bin_width):
    # One trophic step, no walk, no noise, daily paired draws: each blood tissue must follow
    # delta(t) = d_inf + (d0 - d_inf) exp(-lambda (t - t0)) (one-compartment model, Tieszen
    # et al. 1983, from memory) with the published half-lives (HALF_LIFE above).
    spec = ColonySpec(
        n_individuals=3,
        seed=5,
        kind_shares={"trophic_shift": 1.0},
        walk_sd=0.0,
        analytical_sd=0.0,
        extra_sd=0.0,
        decimals=None,
        blood_share=1.0,
        n_draws=90,
        draw_interval_days=1,
        draw_jitter_days=0,
        draw_lead_days=20,
        shift_window_days=(5.0, 30.0),
        bin_width=bin_width,
        knot_days=bin_width,
        # whiskers at their nominal growth: the diet clock (forward.diet_clock) is time itself
        tissues={
            **DEFAULT_TISSUES,
            "whisker": dataclasses.replace(DEFAULT_TISSUES["whisker"], growth_sd_log=0.0),
        },
    )
    s = simulate_colony(spec)
    ti = s.truth_individuals.set_index("individual")
    for name, bins in s.truth_bins.groupby("individual"):
        bins = bins.sort_values("bin")
        dn = ti.loc[name, "shift_d15N"]
        dc = ti.loc[name, "shift_d13C"]
        before = bins[["diet_d15N", "diet_d13C"]].iloc[0].to_numpy()
        after = bins[["diet_d15N", "diet_d13C"]].iloc[-1].to_numpy()
        np.testing.assert_allclose(after - before, [dn, dc], atol=1e-4)
        # with knots on the bin edges the shift is one half-way bin s: a step at its centre
        half = (bins["diet_d15N"] - before[0]) / dn
        s_bin = int(bins.loc[np.isclose(half, 0.5, atol=1e-3), "bin"].iloc[0])
        origin = np.datetime64(bins["date"].iloc[0]) - np.timedelta64(int(bin_width // 2), "D")
        t0 = (s_bin + 0.5) * bin_width
        for tissue in ("plasma", "rbc"):
            lam = np.log(2.0) / HALF_LIFE[tissue]
            rows = s.table[(s.table["individual"] == name) & (s.table["tissue"] == tissue)]
            t = (pd.to_datetime(rows["date"]).to_numpy().astype("datetime64[D]") - origin).astype(
                float
            ) + 0.5
            far = np.abs(t - t0) >= bin_width / 2  # draws inside the half-way bin are skipped
            assert far.sum() >= 80
            t = t[far]
            for iso, k, delta in (("d15N", 0, dn), ("d13C", 1, dc)):
                y = rows[iso].to_numpy()[far]
                d0 = before[k] + DISC[tissue][k]
                d_inf = after[k] + DISC[tissue][k]
                expect = np.where(t < t0, d0, eq.incorporation_curve(t - t0, d0, d_inf, lam))
                # discretisation bound: a step at a bin centre vs half a step over the bin,
                # 0.5 (1 - a)^2 |delta| exp(-lambda (t - t_end)), a = exp(-lambda bin/2);
                # the history before the grid is the constant pre-step diet, held in bin 0
                a = np.exp(-lam * bin_width / 2)
                t_end = t0 + bin_width / 2
                decay = np.exp(-lam * np.clip(t - t_end, 0, None))
                disc_err = 0.5 * (1 - a) ** 2 * abs(delta) * decay
                # (+ 2e-5: the truth tables round diet values to 5 decimals)
                tol = np.where(t < t0, 0.0, disc_err) + 2e-5
                err = np.abs(y - expect)
                assert np.all(err <= tol), (name, tissue, iso, err.max(), tol[np.argmax(err)])
                # and the curve really moved: within 5 % of the new level after 5 half-lives
                late = t > t0 + 5 * HALF_LIFE[tissue]
                if late.any():
                    assert np.all(np.abs(y[late] - d_inf) < 0.05 * abs(delta) + tol[late])
        # plasma leads, red cells lag (Hahn et al. 2012)
        p = s.table[(s.table["individual"] == name) & (s.table["tissue"] == "plasma")]
        r = s.table[(s.table["individual"] == name) & (s.table["tissue"] == "rbc")]
        mid = pd.to_datetime(p["date"]).to_numpy().astype("datetime64[D]") - origin
        after_step = mid.astype(float) + 0.5 > t0 + 2 * bin_width
        assert np.all(
            np.abs(p["d15N"].to_numpy() - before[0] - DISC["plasma"][0])[after_step]
            > np.abs(r["d15N"].to_numpy() - before[0] - DISC["rbc"][0])[after_step]
        )


def test_fast_moves_plasma_more_than_red_cells():
    # During a fast plasma delta15N rises more than red-cell delta15N (penguins after 25 d:
    # plasma +0.70, cells +0.24 permil; Cherel et al. 2005 Ecology 86:2881), and delta13C
    # moves by gamma times delta15N only (catabolism direction (1, gamma)).
    spec = ColonySpec(
        n_individuals=8,
        seed=2,
        kind_shares={"faster": 1.0},
        walk_sd=0.0,
        analytical_sd=0.0,
        extra_sd=0.0,
        decimals=None,
        blood_share=1.0,
        gamma_sd=0.0,
    )
    s = simulate_colony(spec)
    t = s.table
    ti = s.truth_individuals.set_index("individual")
    level = s.truth_bins.groupby("individual")[["diet_d15N", "diet_d13C"]].first()
    for name in ti.index:
        onset = np.datetime64(ti.loc[name, "onset_date"])
        rows = {k: t[(t["individual"] == name) & (t["tissue"] == k)] for k in ("plasma", "rbc")}
        rise = {}
        for k, r in rows.items():
            dd = pd.to_datetime(r["date"]).to_numpy().astype("datetime64[D]")
            j = np.argmin(np.abs((dd - onset).astype(float) - 25.0))
            rise[k] = r["d15N"].to_numpy()[j] - level.loc[name, "diet_d15N"] - DISC[k][0]
            drop = r["d13C"].to_numpy()[j] - level.loc[name, "diet_d13C"] - DISC[k][1]
            assert drop == pytest.approx(-0.1 * rise[k], abs=2e-5)  # truth rounded to 1e-5
        assert rise["plasma"] > rise["rbc"] > 0


# --------------------------------------------------------------------------
# switches and errors
# --------------------------------------------------------------------------
def test_d15N_only_and_keratin_only_switches():
    base = simulate_colony(ColonySpec(n_individuals=12, seed=4))
    n_only = simulate_colony(ColonySpec(n_individuals=12, seed=4, with_d13C=False))
    assert n_only.table["d13C"].isna().all() and n_only.table["sd_d13C"].isna().all()
    np.testing.assert_array_equal(n_only.table["d15N"], base.table["d15N"])
    ker = simulate_colony(ColonySpec(n_individuals=12, seed=4, blood_share=0.0))
    assert set(ker.table["tissue"]) == {"whisker"}
    assert not ker.truth_individuals["has_blood"].any()
    assert not ker.timebase.blood.mask.any()
    tb = build_timebase(table_to_samples(ker.table))
    assert tb.tissues == ["whisker"]


def test_bad_spec_raises_config_error():
    with pytest.raises(ConfigError, match="unknown kind"):
        simulate_colony(ColonySpec(kind_shares={"hibernator": 1.0}))
    with pytest.raises(ConfigError, match="breeding_dates needs one entry per group"):
        simulate_colony(ColonySpec(groups=("a", "b", "c")))
    with pytest.raises(ConfigError, match="not a blood tissue"):
        simulate_colony(ColonySpec(blood_tissues=("whisker",)))


def test_large_colony_is_fast():
    start = time.perf_counter()
    s = simulate_colony(ColonySpec(n_individuals=500, seed=9))
    elapsed = time.perf_counter() - start
    assert s.truth_individuals.shape[0] == 500
    assert elapsed < 20.0  # vectorised: about 1 s on a laptop core (common practice bound)


def test_demo_data_are_what_make_demo_writes_today(tmp_path):
    """The committed demo files are the current simulator's output (so they follow the
    model's current equations): ``demo_data/make_demo.py`` rewrites them byte for byte."""
    import importlib.util

    root = Path(__file__).resolve().parents[1] / "demo_data"
    spec = importlib.util.spec_from_file_location("make_demo", root / "make_demo.py")
    make_demo = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(make_demo)
    written = make_demo.main(tmp_path)
    assert len(written) == 6
    for path in written.values():
        committed = root / path.relative_to(tmp_path)
        assert path.read_bytes() == committed.read_bytes(), (
            f"{committed} is stale: rerun make_demo.py"
        )

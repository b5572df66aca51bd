"""Compound-specific amino acids: trophic position, Phe baseline offsets, intake, simulator, report.

Every table here is invented (synthetic). External checks:

* TP = (δ15N_Glu − δ15N_Phe − β)/TDF + 1 with β = 3.4 ‰ and TDF = 7.6 ‰ for
  aquatic food webs (Chikaraishi et al. 2009, Limnol. Oceanogr. Methods
  7:740, abstract; verified);
* the same equation written with β′ = −β: β′ = −3.4 (aquatic), +8.4 (C3
  plants), −0.4 ‰ (C4 plants), Glu +8.0 ‰ and Phe +0.4 ‰ per trophic level
  (Chikaraishi et al. 2011, Res. Org. Geochem. 27:3, abstract; verified);
* the SDs of β and TDF (0.9, 1.6, 1.7, 1.2 ‰) are from memory;
* the delta method is checked against a Monte Carlo estimate, the offset
  variances against the exact covariance of a linear combination
  (Var(Wx) = W Σ Wᵀ).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fitdir_factory import make_fit_dir

from nstress import equations as eq
from nstress.aminoacids import FOOD_WEBS, PHE_TDF, TrophicSettings, resolve_trophic
from nstress.errors import ConfigError, InputError, InputErrors
from nstress.intake import read_samples
from nstress.model.simulate import (
    DEFAULT_KIND_SHARES,
    ColonySpec,
    simulate_colony,
    table_to_samples,
    write_simulation,
)
from nstress.prep.amino import phe_baseline_offsets
from nstress.prep.timebase import build_timebase
from nstress.products.report import write_report
from nstress.products.trophic import (
    SCREENING_COLUMNS,
    SCREENING_UNITS,
    TROPHIC_COLUMNS,
    TROPHIC_UNITS,
    trophic_positions,
    trophic_summary,
)
from nstress.workflow.config import load_workflow
from nstress.workflow.pipeline import PHE_FAST_NOTE

AA = ["d15N_Glu", "d15N_Phe", "sd_d15N_Glu", "sd_d15N_Phe"]
ONE_GROUP = dict(groups=("g",), breeding_dates=("2024-11-28",), diet_means=((12.0, -17.0),))


# --------------------------------------------------------------------------
# the trophic-position equation and its constants
# --------------------------------------------------------------------------
def test_trophic_position_equation_against_published_values():
    web = FOOD_WEBS["aquatic"]
    # Chikaraishi et al. 2009: TL = (Glu - Phe - 3.4)/7.6 + 1 for aquatic food webs
    assert (web.beta, web.tdf) == (3.4, 7.6)
    phe = np.array([2.0, 5.0, -1.0])
    # a primary producer has Glu - Phe = beta: TP 1 (Chikaraishi et al. 2009)
    tp, _ = eq.trophic_position_glu_phe(phe + 3.4, phe, 3.4, 7.6)
    np.testing.assert_allclose(tp, 1.0, atol=1e-12)
    # one trophic step adds TDF = 7.6 permil to Glu - Phe: TP 2 (Chikaraishi et al. 2009)
    tp, _ = eq.trophic_position_glu_phe(phe + 3.4 + 7.6, phe, 3.4, 7.6)
    np.testing.assert_allclose(tp, 2.0, atol=1e-12)
    # two steps: TP 3; a value half-way: TP 2.5 (the same linear equation)
    tp, _ = eq.trophic_position_glu_phe(np.array([3.4 + 15.2, 3.4 + 11.4]), 0.0, 3.4, 7.6)
    np.testing.assert_allclose(tp, [3.0, 2.5], atol=1e-12)


@pytest.mark.parametrize(
    ("web", "beta_prime"),
    # Chikaraishi et al. 2011 review: TL = (Glu - Phe + beta')/7.6 + 1 with beta' = -3.4
    # (aquatic), +8.4 (terrestrial C3 plants), -0.4 permil (terrestrial C4 plants)
    [("aquatic", -3.4), ("terrestrial_c3", 8.4), ("terrestrial_c4", -0.4)],
)
def test_food_webs_match_the_published_review_form(web, beta_prime):
    w = FOOD_WEBS[web]
    assert w.beta == pytest.approx(-beta_prime) and w.tdf == 7.6  # Chikaraishi et al. 2011
    d = np.array([-10.0, 0.0, 4.2, 15.0, 22.8])  # Glu - Phe, permil
    tp, _ = eq.trophic_position_glu_phe(d, 0.0, w.beta, w.tdf)
    np.testing.assert_allclose(tp, (d + beta_prime) / 7.6 + 1.0, rtol=1e-12)
    # every constant says where it comes from and whether it was checked
    assert set(w.sources) == {"beta", "beta_sd", "tdf", "tdf_sd"}
    assert all(("verified" in s) or ("from memory" in s) for s in w.sources.values())
    assert "from memory" in w.sources["beta_sd"] and "from memory" in w.sources["tdf_sd"]


def test_phe_trophic_discrimination_is_the_published_value():
    # Chikaraishi et al. 2011: phenylalanine +0.4 permil per trophic level
    assert PHE_TDF == 0.4


def test_delta_method_sd_matches_monte_carlo():
    rng = np.random.default_rng(20240)
    n = 400_000
    cases = [
        # (glu, phe, beta, tdf, sd_glu, sd_phe, sd_beta, sd_tdf)
        (25.0, 4.0, 3.4, 7.6, 0.5, 0.4, 0.9, 0.0),  # linear in every input: exact
        (25.0, 4.0, 3.4, 7.6, 0.5, 0.4, 0.9, 0.25),  # small TDF uncertainty
    ]
    for glu, phe, beta, tdf, sg, sp, sb, st in cases:
        _, sd = eq.trophic_position_glu_phe(glu, phe, beta, tdf, sg, sp, sb, st)
        g = glu + sg * rng.standard_normal(n)
        p = phe + sp * rng.standard_normal(n)
        b = beta + sb * rng.standard_normal(n)
        t = tdf + st * rng.standard_normal(n)
        mc = np.std((g - p - b) / t + 1.0)
        # Tolerance: the Monte Carlo SD has a relative standard error of 1/sqrt(2n) = 0.11 %;
        # 5 such errors are allowed, plus the delta method's own first-order error, which for
        # a ratio with TDF's coefficient of variation cv is about 1.5 cv^2 of the TDF part
        # (second-order Taylor term of 1/TDF): 0 in the first case, < 0.2 % in the second.
        cv = st / tdf
        tol = 5.0 / math.sqrt(2 * n) + 1.5 * cv**2
        assert mc == pytest.approx(float(sd), rel=tol)


def test_delta_method_sd_grows_with_distance_from_the_producers():
    # Var(TP) has d^2 sd_tdf^2 / TDF^4: at TP 1 (d = 0) TDF's error does not matter
    _, at_one = eq.trophic_position_glu_phe(3.4, 0.0, 3.4, 7.6, 0.5, 0.5, 0.9, 1.2)
    _, no_tdf = eq.trophic_position_glu_phe(3.4, 0.0, 3.4, 7.6, 0.5, 0.5, 0.9, 0.0)
    assert float(at_one) == pytest.approx(float(no_tdf))
    _, at_four = eq.trophic_position_glu_phe(3.4 + 3 * 7.6, 0.0, 3.4, 7.6, 0.5, 0.5, 0.9, 1.2)
    assert float(at_four) > float(at_one)


# --------------------------------------------------------------------------
# intake
# --------------------------------------------------------------------------
HEAD = "individual,tissue,d15N,d13C,date,d15N_Glu,d15N_Phe,sd_d15N_Glu,sd_d15N_Phe\n"


def _write(tmp_path: Path, body: str, name: str = "aa.csv") -> Path:
    p = tmp_path / name
    p.write_text(HEAD + body)
    return p


@pytest.mark.parametrize(
    ("cell", "column", "match"),
    [
        ("A,plasma,12,-17,2024-01-05,abc,4.0,,", "d15N_Glu", "abc"),
        ("A,plasma,12,-17,2024-01-05,22,140,,", "d15N_Phe", "beyond natural abundance"),
        ("A,plasma,12,-17,2024-01-05,22,4.0,,-0.3", "sd_d15N_Phe", "analytical SD > 0"),
        ("A,plasma,12,-17,2024-01-05,22,4.0,0,", "sd_d15N_Glu", "analytical SD > 0"),
    ],
)
def test_bad_amino_acid_value_names_file_row_and_column(tmp_path, cell, column, match):
    good = "A,plasma,12.1,-17.0,2024-01-01,22.0,4.1,,\n"
    path = _write(tmp_path, good + cell + "\n")
    with pytest.raises(InputError, match=match) as info:
        read_samples([path])
    err = info.value
    errors = err.errors if isinstance(err, InputErrors) else [err]
    hit = [e for e in errors if e.column == column]
    assert hit, [str(e) for e in errors]
    assert hit[0].file == str(path) and hit[0].row == 2


def test_amino_acid_rows_are_all_accounted_for(tmp_path):
    path = _write(
        tmp_path,
        "A,plasma,12.0,-17.0,2024-01-05,22.1,4.0,0.4,0.3\n"
        "A,plasma,12.3,-17.0,2024-01-12,,4.5,,\n"
        "A,plasma,12.1,-17.1,2024-01-19,21.0,,,\n"
        "A,plasma,12.1,-17.1,2024-01-26,,,,\n"
        "B,plasma,12.0,-17.0,2024-01-05,22.1,55,,\n"
        "B,plasma,,,2024-01-12,22.0,4.0,,\n",
    )
    intake = read_samples([path])
    led = intake.ledger.to_frame().sort_values("source_row")
    assert led["source_row"].tolist() == [1, 2, 3, 4, 5, 6]  # every input row, once
    assert led["status"].isin(["used", "flagged", "excluded"]).all()
    reason = dict(zip(led["source_row"], led["reason"].fillna(""), strict=True))
    status = dict(zip(led["source_row"], led["status"], strict=True))
    assert reason[1] == "" and status[1] == "used"
    assert "d15N_Phe without d15N_Glu" in reason[2] and status[2] == "used"
    assert "d15N_Glu without d15N_Phe" in reason[3] and status[3] == "used"
    assert reason[4] == "" and status[4] == "used"  # no amino acids: nothing to note
    assert "d15N_Phe outside plausible amino-acid range" in reason[5] and status[5] == "flagged"
    assert status[6] == "excluded" and reason[6]  # no bulk isotope: excluded with a reason
    s = intake.samples.set_index("source_row") if "source_row" in intake.samples else None
    assert s is not None
    # given SDs are kept, missing ones get the default (0.5 permil, from memory)
    assert s.loc[1, "sd_d15N_Glu"] == 0.4 and s.loc[1, "sd_d15N_Phe"] == 0.3
    assert s.loc[2, "sd_d15N_Phe"] == 0.5


def test_amino_acid_headers_are_recognised(tmp_path):
    p = tmp_path / "h.csv"
    p.write_text(
        "individual,tissue,d15N,d13C,date,δ15N Glu,d15N phenylalanine\n"
        "A,plasma,12,-17,2024-01-05,22.5,4.25\n"
    )
    s = read_samples([p]).samples
    assert s["d15N_Glu"].iloc[0] == 22.5 and s["d15N_Phe"].iloc[0] == 4.25


# --------------------------------------------------------------------------
# Phe baseline offsets
# --------------------------------------------------------------------------
def _frame(rows: list[tuple[str, str, float, float | None, float | None]]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["individual", "tissue", "t", "d15N_Phe", "sd_d15N_Phe"])


def _exact(phe: np.ndarray, sd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offsets x - mean(x) and their variances as W x, diag(W Σ Wᵀ) (independent rows)."""
    n = phe.size
    w = np.eye(n) - np.full((n, n), 1.0 / n)
    return w @ phe, np.diag(w @ np.diag(sd**2) @ w.T)


def test_measured_offsets_and_variances_are_exact():
    f = _frame(
        [
            ("A", "plasma", 0.0, 4.0, 0.3),
            ("A", "plasma", 10.0, 5.0, 0.5),
            ("A", "plasma", 20.0, None, None),
            ("A", "plasma", 30.0, 6.5, 0.4),
            ("A", "rbc", 0.0, 9.0, 0.5),  # lone Phe row of its tissue
            ("B", "plasma", 0.0, 1.0, None),  # default SD 0.5
            ("B", "plasma", 5.0, 2.0, None),
        ]
    )
    off, var = phe_baseline_offsets(f, f["t"].to_numpy(), mode="measured")
    ref_off, ref_var = _exact(np.array([4.0, 5.0, 6.5]), np.array([0.3, 0.5, 0.4]))
    np.testing.assert_allclose(off[[0, 1, 3]], ref_off, atol=1e-12)
    np.testing.assert_allclose(var[[0, 1, 3]], ref_var, atol=1e-12)
    assert off[2] == 0.0 and var[2] == 0.0  # no Phe, "measured": nothing
    assert off[4] == 0.0 and var[4] == 0.0  # a lone row is its own reference
    ref_off, ref_var = _exact(np.array([1.0, 2.0]), np.array([0.5, 0.5]))
    np.testing.assert_allclose(off[5:], ref_off, atol=1e-12)
    np.testing.assert_allclose(var[5:], ref_var, atol=1e-12)
    # the reference is per animal and tissue: offsets of each sum to zero
    assert off[[0, 1, 3]].sum() == pytest.approx(0.0) and off[5:].sum() == pytest.approx(0.0)


def test_interpolated_offsets_use_the_two_neighbouring_phe_rows():
    f = _frame(
        [
            ("A", "plasma", 30.0, 6.5, 0.4),  # rows out of time order on purpose
            ("A", "plasma", 0.0, 4.0, 0.3),
            ("A", "plasma", 17.5, None, None),  # between 10 and 30: weight 0.625 on t = 10
            ("A", "plasma", 10.0, 5.0, 0.5),
            ("A", "plasma", -5.0, None, None),  # before the first Phe row
            ("A", "plasma", 45.0, None, None),  # after the last
            ("A", "rbc", 20.0, None, None),  # another tissue: not interpolated from plasma
            ("B", "plasma", 20.0, None, None),  # another animal
        ]
    )
    t = f["t"].to_numpy()
    measured_off, measured_var = phe_baseline_offsets(f, t, mode="measured")
    off, var = phe_baseline_offsets(f, t, mode="interpolate")
    has = f["d15N_Phe"].notna().to_numpy()
    np.testing.assert_array_equal(off[has], measured_off[has])  # measured rows unchanged
    np.testing.assert_array_equal(var[has], measured_var[has])
    w = (30.0 - 17.5) / (30.0 - 10.0)
    assert w == 0.625
    assert off[2] == pytest.approx(w * off[3] + (1 - w) * off[0])
    assert var[2] == pytest.approx(w**2 * var[3] + (1 - w) ** 2 * var[0])
    # nothing is extrapolated, nothing crosses tissues or animals
    np.testing.assert_array_equal(off[4:], 0.0)
    np.testing.assert_array_equal(var[4:], 0.0)


def test_interpolation_at_a_phe_row_time_and_known_numbers():
    # Phe 4, 6 at t = 0, 8; mean 5: offsets -1, +1. A row at t = 2 gets 0.75*(-1) + 0.25*1.
    f = _frame(
        [
            ("A", "hair", 0.0, 4.0, 0.2),
            ("A", "hair", 2.0, None, None),
            ("A", "hair", 8.0, 6.0, 0.2),
        ]
    )
    off, var = phe_baseline_offsets(f, f["t"].to_numpy())
    np.testing.assert_allclose(off, [-1.0, -0.5, 1.0], atol=1e-12)
    v = 0.04 * (1 - 2 / 2) + 2 * 0.04 / 4  # sd^2 (1 - 2/n) + sum sd^2 / n^2, n = 2
    np.testing.assert_allclose(var, [v, (0.75**2 + 0.25**2) * v, v], atol=1e-12)


def test_off_mode_and_missing_columns_give_zero_offsets():
    f = _frame([("A", "plasma", 0.0, 4.0, 0.3), ("A", "plasma", 10.0, 6.0, 0.3)])
    for off, var in (
        phe_baseline_offsets(f, f["t"].to_numpy(), mode="off"),
        phe_baseline_offsets(f.drop(columns=["d15N_Phe", "sd_d15N_Phe"]), f["t"].to_numpy()),
        phe_baseline_offsets(f.assign(d15N_Phe=np.nan), f["t"].to_numpy()),
    ):
        np.testing.assert_array_equal(off, 0.0)
        np.testing.assert_array_equal(var, 0.0)


def test_bad_mode_and_missing_times_are_refused():
    f = _frame([("A", "plasma", 0.0, 4.0, 0.3), ("A", "plasma", 10.0, 6.0, 0.3)])
    with pytest.raises(ConfigError, match="unknown Phe baseline mode 'nearest'") as info:
        phe_baseline_offsets(f, f["t"].to_numpy(), mode="nearest")
    assert info.value.key == "phe_mode"
    with pytest.raises(ValueError, match="t_mid"):
        phe_baseline_offsets(f, None, mode="interpolate")
    with pytest.raises(ValueError, match="one time per row"):
        phe_baseline_offsets(f, np.zeros(3), mode="interpolate")


def _blood_table(phe: list[float | None]) -> pd.DataFrame:
    n = len(phe)
    days = pd.date_range("2024-01-01", periods=n, freq="7D")
    return pd.DataFrame(
        {
            "individual": "A",
            "tissue": "plasma",
            "d15N": 12.0 + 0.1 * np.arange(n),
            "d13C": -17.0,
            "sd_d15N": 0.15,
            "date": days.strftime("%Y-%m-%d"),
            "d15N_Phe": phe,
            "sd_d15N_Phe": [0.3 if v is not None else None for v in phe],
        }
    )


def test_time_base_interpolates_between_draws_and_adds_the_variance():
    samples = table_to_samples(_blood_table([4.0, None, 6.0, None]))
    samples["d15N_Phe"] = pd.to_numeric(samples["d15N_Phe"])
    samples["sd_d15N_Phe"] = pd.to_numeric(samples["sd_d15N_Phe"])
    tb = build_timebase(samples)  # default mode: interpolate
    o = tb.blood
    rows = o.sample[0, o.mask[0]]
    off = np.empty(len(samples))
    sd = np.empty(len(samples))
    off[rows], sd[rows] = o.offset[0, o.mask[0]], o.sd[0, o.mask[0], 0]
    # Phe 4 and 6 (mean 5): offsets -1, +1; the draw half-way between gets 0; the last
    # draw, after the last Phe, gets nothing
    np.testing.assert_allclose(off, [-1.0, 0.0, 1.0, 0.0], atol=1e-12)
    v = 0.09 * (1 - 2 / 2) + 2 * 0.09 / 4
    np.testing.assert_allclose(sd**2, 0.15**2 + np.array([v, 0.5 * v, v, 0.0]), atol=1e-12)
    tb_m = build_timebase(samples, phe_mode="measured")
    np.testing.assert_allclose(tb_m.blood.offset[0, :4], [-1.0, 0.0, 1.0, 0.0], atol=1e-12)
    assert tb_m.blood.sd[0, 1, 0] == pytest.approx(0.15)  # no Phe, not interpolated
    tb_off = build_timebase(samples, phe_mode="off")
    assert not tb_off.blood.has_offset


# --------------------------------------------------------------------------
# the model
# --------------------------------------------------------------------------
def _logp(model, point):
    # Python implementations of each op, graph not rewritten: compiles in about a second
    # (FAST_COMPILE's rewrites trip over one op here; C or numba builds take minutes cold)
    from pytensor.compile.mode import Mode

    return float(model.compile_logp(mode=Mode(linker="py", optimizer=None))(point))


def _tiny_colony() -> pd.DataFrame:
    return table_to_samples(simulate_colony(ColonySpec(n_individuals=2, seed=5, **ONE_GROUP)).table)


def test_log_density_is_unchanged_by_empty_phe_columns():
    pytest.importorskip("pytensor")
    from nstress.model.build import build_model

    plain = _tiny_colony()
    empty = plain.assign(**{c: np.nan for c in AA})
    m1 = build_model(build_timebase(plain)).model
    m2 = build_model(build_timebase(empty)).model
    rng = np.random.default_rng(3)
    for scale in (0.0, 0.3):  # the initial point and a point away from it
        point = {
            k: v + scale * rng.standard_normal(np.shape(v)) for k, v in m1.initial_point().items()
        }
        a, b = _logp(m1, point), _logp(m2, point)
        assert np.isfinite(a) and a == b


def test_phe_offsets_move_the_log_density():
    # the reverse check: a table whose Phe values vary gives a different density
    pytest.importorskip("pytensor")
    from nstress.model.build import build_model

    plain = _tiny_colony()
    rng = np.random.default_rng(1)
    phe = plain.assign(d15N_Phe=4.0 + rng.normal(0, 1.0, len(plain)), sd_d15N_Phe=0.3)
    m1 = build_model(build_timebase(plain)).model
    m2 = build_model(build_timebase(phe)).model
    point = m1.initial_point()
    a, b = _logp(m1, point), _logp(m2, point)
    assert np.isfinite(a) and np.isfinite(b) and a != b


# --------------------------------------------------------------------------
# simulator
# --------------------------------------------------------------------------
def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_simulator_defaults_are_byte_identical_with_the_feature_off(tmp_path):
    base = dict(n_individuals=8, seed=17)
    write_simulation(simulate_colony(ColonySpec(**base)), tmp_path / "absent")
    off = ColonySpec(
        **base,
        amino_acid_every=0,
        kind_shares={**DEFAULT_KIND_SHARES, "baseline_shift": 0.0},
    )
    write_simulation(simulate_colony(off), tmp_path / "off")
    a, b = _files(tmp_path / "absent"), _files(tmp_path / "off")
    assert a == b
    assert "d15N_Phe" not in a["samples.csv"].decode().splitlines()[0]


def test_simulator_amino_acids_every_kth_sample_leave_the_rest_unchanged():
    base = dict(n_individuals=6, seed=23)
    plain = simulate_colony(ColonySpec(**base)).table
    sim = simulate_colony(ColonySpec(**base, amino_acid_every=3))
    t = sim.table
    # switching amino acids on leaves every other value as it was (a second generator)
    pd.testing.assert_frame_equal(t.drop(columns=AA), plain)
    rank = t.groupby(["individual", "tissue"], sort=False).cumcount().to_numpy()
    has = t["d15N_Phe"].notna().to_numpy()
    np.testing.assert_array_equal(has, rank % 3 == 0)
    np.testing.assert_array_equal(t["d15N_Glu"].notna().to_numpy(), has)
    assert (t.loc[has, "sd_d15N_Phe"] == 0.5).all()
    # Glu - Phe follows beta + TDF (TP - 1) (Chikaraishi et al. 2009): the trophic position
    # recovered per animal is the true one within the noise (SD 0.5*sqrt(2)/7.6 per sample)
    tp, _ = eq.trophic_position_glu_phe(t["d15N_Glu"], t["d15N_Phe"], 3.4, 7.6)
    est = pd.Series(tp[has], index=t.loc[has, "individual"]).groupby(level=0).agg(["mean", "size"])
    ti = sim.truth_individuals.set_index("individual")
    steady = ti.index[ti["shift_type"].fillna("") != "trophic"]  # a trophic shift moves TP
    est = est.loc[est.index.isin(steady)]
    assert len(est) >= 3
    err = (est["mean"] - ti.loc[est.index, "trophic_position"]).abs()
    bound = 4 * 0.5 * math.sqrt(2) / 7.6 / np.sqrt(est["size"]) + 0.01  # + rounding to 0.01
    assert (err < bound).all(), err.to_dict()


def test_baseline_shift_raises_bulk_d15N_and_phe_together():
    spec = ColonySpec(
        n_individuals=4,
        seed=31,
        **ONE_GROUP,
        kind_shares={"baseline_shift": 1.0},
        amino_acid_every=1,
        amino_acid_sd=1e-9,
        analytical_sd=0.0,
        extra_sd=0.0,
        walk_sd=0.0,
        decimals=None,
    )
    sim = simulate_colony(spec)
    t = sim.table
    rise = sim.truth_individuals.set_index("individual")["baseline_shift_d15N"]
    assert ((rise >= 1.5) & (rise <= 2.5)).all()
    keys = [t["individual"], t["tissue"]]
    d_bulk = t["d15N"] - t.groupby(keys)["d15N"].transform("mean")
    d_phe = t["d15N_Phe"] - t.groupby(keys)["d15N_Phe"].transform("mean")
    # no fast and no diet change: every change of bulk d15N is the baseline, seen by Phe
    np.testing.assert_allclose(d_bulk, d_phe, atol=1e-6)
    spread = t.groupby(keys)["d15N_Phe"].agg(lambda x: x.max() - x.min())
    assert (spread.groupby(level=0).max() > 0.5).all()  # the rise is seen in every animal
    # and delta13C stays flat
    np.testing.assert_allclose(t.groupby(keys)["d13C"].transform("std").fillna(0), 0, atol=1e-9)


# --------------------------------------------------------------------------
# configuration
# --------------------------------------------------------------------------
def _workflow(tmp_path: Path, trophic: str) -> Path:
    (tmp_path / "colony.csv").write_text(
        "individual,tissue,d15N,d13C,date\nA1,plasma,12.0,-17.0,2024-01-05\n"
    )
    p = tmp_path / "wf.toml"
    p.write_text(f'[inputs]\ntables = ["colony.csv"]\n[trophic]\n{trophic}\n')
    return p


@pytest.mark.parametrize(
    ("text", "key", "match"),
    [
        ('food_web = "marine"', "trophic.food_web", "marine"),
        ('foodweb = "aquatic"', "trophic.foodweb", "food_web"),
        ("tdf = 0", "trophic.tdf", "0"),
        ("beta_sd = -1.0", "trophic.beta_sd", "-1"),
        ('phe_baseline = "yes"', "trophic.phe_baseline", "yes"),
        ('phe_mode = "nearest"', "trophic.phe_mode", "nearest"),
        ('phe_baseline = false\nphe_mode = "measured"', "trophic.phe_mode", "no effect"),
    ],
)
def test_trophic_config_errors_name_the_key(tmp_path, text, key, match):
    with pytest.raises(ConfigError, match=match) as info:
        load_workflow(_workflow(tmp_path, text))
    assert info.value.key == key


def test_trophic_config_resolves_and_reaches_the_fit(tmp_path):
    wf = load_workflow(_workflow(tmp_path, 'food_web = "terrestrial_c3"\nphe_mode = "measured"'))
    s = resolve_trophic(wf.fit.trophic)
    assert (s.food_web, s.beta, s.phe_mode, s.baseline_mode) == (
        "terrestrial_c3",
        -8.4,  # Chikaraishi et al. 2011: beta' = +8.4 permil for C3 plants, beta = -beta'
        "measured",
        "measured",
    )
    assert resolve_trophic({"phe_baseline": False}).baseline_mode == "off"
    assert resolve_trophic(None) == TrophicSettings()
    assert TrophicSettings().baseline_mode == "interpolate"
    with pytest.raises(ConfigError, match="unknown food web 'aquatc'; .*did you mean 'aquatic'"):
        resolve_trophic({"food_web": "aquatc"})


# --------------------------------------------------------------------------
# products and report
# --------------------------------------------------------------------------
def test_trophic_columns_carry_units():
    assert list(TROPHIC_UNITS) == TROPHIC_COLUMNS
    assert list(SCREENING_UNITS) == SCREENING_COLUMNS
    for c in ("d15N_Glu", "d15N_Phe", "phe_baseline_offset_d15N"):
        assert "AIR" in TROPHIC_UNITS[c]
    assert all(TROPHIC_UNITS[c] == "ISO 8601 date" for c in ("date", "collected"))
    assert "trophic level" in TROPHIC_UNITS["trophic_position"]
    assert TROPHIC_UNITS["position_mm"].startswith("mm")


def test_trophic_positions_of_a_time_base():
    table = _blood_table([4.0, None, 6.0, 5.0])
    table["d15N_Glu"] = [22.0, 21.0, 24.0, None]
    table["sd_d15N_Glu"] = 0.4
    samples = table_to_samples(table)
    for c in AA:
        samples[c] = pd.to_numeric(samples[c])
    tb = build_timebase(samples)
    s = TrophicSettings()
    tp = trophic_positions(tb, s)
    assert list(tp.columns) == TROPHIC_COLUMNS
    assert tp["date"].tolist() == ["2024-01-01", "2024-01-15"]  # rows with both amino acids
    # Chikaraishi et al. 2009: (Glu - Phe - 3.4)/7.6 + 1
    np.testing.assert_allclose(
        tp["trophic_position"], [(22 - 4 - 3.4) / 7.6 + 1, (24 - 6 - 3.4) / 7.6 + 1]
    )
    np.testing.assert_allclose(tp["phe_baseline_offset_d15N"], [-1.0, 1.0])
    summary = trophic_summary(tp, tb, s)
    row = summary.iloc[0]
    assert row["n_aa_samples"] == 2 and row["n_phe_samples"] == 3
    assert row["trophic_position_mean"] == pytest.approx((23 - 5 - 3.4) / 7.6 + 1)


def _with_amino_acids(fit: Path) -> Path:
    sc = pd.read_csv(fit / "screening.csv")
    has = sc["individual"].isin(["A1", "A2"])
    sc["trophic_position_median"] = np.where(has, 3.21, np.nan)
    sc["trophic_position_mean"] = np.where(has, 3.25, np.nan)
    sc["trophic_position_sd"] = np.where(has, 0.18, np.nan)
    sc["n_aa_samples"] = np.where(has, 4, 0)
    sc["n_phe_samples"] = np.where(has, 8, 0)
    sc.to_csv(fit / "screening.csv", index=False)
    rows = [
        {
            "individual": ind,
            "group": "north",
            "tissue": "whisker",
            "tissue_class": "keratin",
            "date": "2024-10-01",
            "d15N_Glu": 24.3,
            "d15N_Phe": 4.0,
            "trophic_position": 3.22,
            "trophic_position_sd": 0.2,
            "food_web": "aquatic",
            "beta": 3.4,
            "beta_sd": 0.9,
            "tdf": 7.6,
            "tdf_sd": 1.2,
        }
        for ind in ("A1", "A2")
    ]
    pd.DataFrame(rows).reindex(columns=TROPHIC_COLUMNS).to_csv(
        fit / "trophic_position.csv", index=False
    )
    m = json.loads((fit / "manifest.json").read_text())
    m["amino_acids"] = {**TrophicSettings().to_dict(), "samples_with_pair": 8}
    (fit / "manifest.json").write_text(json.dumps(m))
    return fit


def test_report_has_the_trophic_section_only_with_amino_acid_data(tmp_path):
    plain = make_fit_dir(tmp_path / "plain")
    html = write_report([plain], tmp_path / "r1").read_text()
    assert 'id="trophic"' not in html and "Trophic position (amino acids)" not in html
    aa = _with_amino_acids(make_fit_dir(tmp_path / "aa"))
    html = write_report([aa], tmp_path / "r2").read_text()
    assert 'id="trophic"' in html and "Trophic position (amino acids)" in html
    assert 'href="#trophic"' in html
    assert "3.21" in html  # the median of A1 and A2
    assert "interpolated" in html  # the Phe mode used
    assert "Chikaraishi et al. 2009" in html
    assert "not a health statement" in html
    assert "not calibrated" not in html
    # a fast-mode fit with Phe offsets carries its warning into the report
    m = json.loads((aa / "manifest.json").read_text())
    m["amino_acids"]["fast_mode_note"] = PHE_FAST_NOTE
    (aa / "manifest.json").write_text(json.dumps(m))
    html = write_report([aa], tmp_path / "r3").read_text()
    assert "not calibrated with phenylalanine baseline offsets" in html


# --------------------------------------------------------------------------
# science: Phe tells a baseline rise from a fast (fast screening mode)
# --------------------------------------------------------------------------
@pytest.mark.slow
def test_phe_lowers_p_episode_of_baseline_shifts_in_fast_mode(tmp_path):
    # Two fast-mode fits (MAP + Laplace, JAX compile about a minute each) of one synthetic
    # colony: six animals whose food-web baseline rises by 1.5-2.5 permil for 30-60 days
    # (bulk d15N and Phe together, d13C flat) and two fasters; Phe and Glu on every second
    # sample of each animal and tissue (SD 0.5 permil). Measured on this colony: mean
    # P(episode) of the baseline shifters 0.92 without Phe, 0.34 with Phe interpolated
    # between measured samples (0.88 with phe_mode = "measured"). The fasters' P(episode)
    # also fell (0.88 -> 0.42 for the one found without Phe): Phe's own noise enters every
    # offset, so the bulk d15N says less.
    pytest.importorskip("jax")
    from nstress.workflow.pipeline import FitConfig, fit_tables

    spec = ColonySpec(
        n_individuals=8,
        seed=11,
        kind_shares={"baseline_shift": 0.75, "faster": 0.25},
        amino_acid_every=2,
        **ONE_GROUP,
    )
    sim = simulate_colony(spec)
    write_simulation(sim, tmp_path / "data")
    with_phe = tmp_path / "data" / "samples.csv"
    without = tmp_path / "no_phe.csv"
    pd.read_csv(with_phe).drop(columns=AA).to_csv(without, index=False)
    p = {}
    for name, table in (("without", without), ("with", with_phe)):
        cfg = FitConfig(
            sampler={"seed": 3, "method": "fast", "fast_draws": 100},
            progress=False,
            product_draws=100,
            report=False,
        )
        out = tmp_path / name
        fit_tables([table], out, cfg)
        sc = pd.read_csv(out / "screening.csv", dtype={"individual": str})
        p[name] = sc.set_index("individual")["p_catabolic_any"]
    kind = sim.truth_individuals.set_index("individual")["kind"]
    shifted = kind.index[kind == "baseline_shift"]
    assert len(shifted) == 6
    mean_without, mean_with = p["without"][shifted].mean(), p["with"][shifted].mean()
    assert mean_without > 0.6  # without Phe a baseline rise looks like a fast
    assert mean_with < mean_without - 0.3
    # the products of the fit with amino acids, with their units
    tp = pd.read_csv(tmp_path / "with" / "trophic_position.csv")
    assert list(tp.columns) == TROPHIC_COLUMNS and len(tp) > 0
    m = json.loads((tmp_path / "with" / "manifest.json").read_text())
    assert m["amino_acids"]["phe_mode"] == "interpolate"
    # the fast mode is not calibrated with Phe offsets, and the fit says so
    assert "not calibrated" in m["amino_acids"]["fast_mode_note"]
    assert m["amino_acids"]["column_units"]["trophic_position.csv"] == TROPHIC_UNITS
    assert not (tmp_path / "without" / "trophic_position.csv").exists()

"""Odd but valid colony data: each case ends in a result or a clear per-animal status.

Every table is invented (synthetic). The default tests run intake, prep, the
time base, the screening statuses from data support (with a constructed
P(episode), no sampling) and, for a few cases, the model build. Tiny real
fits (3 animals, 25 draws, one chain) and a 2,000-animal build are marked
slow.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fuzz_tally import record

from nstress.intake import read_samples
from nstress.prep import prepare
from nstress.prep.timebase import build_timebase
from nstress.products.screening import assign_status, data_support

HEAD = "individual,tissue,d15N,d13C,position_mm,segment_length_mm,collected,date,group\n"


def blood(ind: str, n: int, *, start: str = "2021-01-05", step: int = 12, d13c: bool = True):
    """``n`` plasma draws of one animal, ``step`` days apart."""
    days = pd.date_range(start, periods=n, freq=f"{step}D")
    c = lambda k: f"{-17 - 0.05 * k:.2f}" if d13c else ""  # noqa: E731
    return [f"{ind},plasma,{12 + 0.1 * k:.2f},{c(k)},,,,{d:%Y-%m-%d},g" for k, d in enumerate(days)]


def whisker(ind: str, n: int, *, length: float = 2.0, step: float = 2.0, on: str = "2021-06-01"):
    """``n`` whisker segments of one animal, midpoints ``step`` mm apart."""
    out = []
    for k in range(n):
        d15, d13, x = 13 + 0.05 * k, -16.5 - 0.02 * k, 1 + step * k
        out.append(f"{ind},whisker,{d15:.2f},{d13:.2f},{x:g},{length:g},{on},,g")
    return out


def pipeline(tmp_path: Path, lines: list[str], name: str = "odd.csv"):
    """Intake, prep and time base of a table; returns (intake, prepared, used, time base)."""
    path = tmp_path / name
    path.write_text(HEAD + "\n".join(lines) + "\n", encoding="utf-8")
    intake = read_samples(path)
    prepared = prepare(intake, tissues=intake.tissues)
    led = prepared.ledger.to_frame()
    assert len(led) == len(lines)  # every row accounted for
    excluded = set(prepared.ledger.excluded_keys().tolist())
    used = prepared.samples[~prepared.samples["key"].isin(excluded)]
    tb = build_timebase(used, intake.tissues)
    return intake, prepared, used, tb


def statuses(tb, p: float = 0.95) -> dict[str, tuple[str, str]]:
    """Status per animal for a constructed P(episode) (no sampling), from the data support."""
    sup = data_support(tb)
    status, reason = assign_status(
        np.full(len(sup), p),
        sup["n_samples"].to_numpy(),
        sup["n_d13C"].to_numpy(),
        np.ones(len(sup), bool),
        span_days=sup["span_days"].to_numpy(),
        n_tissues=sup["n_tissues"].to_numpy(),
        n_d15n=sup["n_d15N"].to_numpy(),
    )
    return {i: (s, r) for i, s, r in zip(sup["individual"], status, reason, strict=True)}


def test_one_animal(tmp_path):
    *_, tb = pipeline(tmp_path, blood("A", 8))
    assert tb.n_individuals == 1 and tb.blood.mask.sum() == 8
    assert statuses(tb)["A"][0] == "catabolic"
    record("odd_data", "result")


def test_one_sample_per_animal_is_cannot_tell_and_the_rest_is_scored(tmp_path):
    lines = blood("A", 8) + blood("B", 1) + whisker("C", 1)
    *_, tb = pipeline(tmp_path, lines)
    st = statuses(tb)
    assert st["A"][0] == "catabolic"
    assert st["B"] == ("cannot_tell", "fewer than 4 samples")
    assert st["C"] == ("cannot_tell", "fewer than 4 samples")
    record("odd_data", "result")


def test_only_blood_and_only_keratin(tmp_path):
    *_, tb = pipeline(tmp_path, blood("A", 6) + blood("B", 6), "blood.csv")
    assert tb.keratin.mask.sum() == 0 and tb.keratin_tissues == []
    assert {s for s, _ in statuses(tb).values()} == {"catabolic"}
    *_, tb = pipeline(tmp_path, whisker("A", 10) + whisker("B", 10), "keratin.csv")
    assert tb.blood.mask.sum() == 0 and tb.keratin_tissues == ["whisker"]
    assert np.all(tb.keratin.h_lo[tb.keratin.mask] < tb.keratin.h_hi[tb.keratin.mask])
    assert {s for s, _ in statuses(tb).values()} == {"catabolic"}
    record("odd_data", "result")
    record("odd_data", "result")


def test_d15n_without_d13c_cannot_tell_a_rise_but_clears_a_flat_series(tmp_path):
    lines = blood("A", 8) + blood("N", 8, d13c=False)
    *_, tb = pipeline(tmp_path, lines)
    st = statuses(tb)
    assert st["A"][0] == "catabolic"
    assert st["N"][0] == "cannot_tell" and "δ13C" in st["N"][1]
    assert statuses(tb, p=0.05)["N"][0] == "clear"
    record("odd_data", "result")


def test_d13c_without_d15n_never_carries_a_confident_status(tmp_path):
    # δ15N carries the catabolic signal: an animal with δ13C only must not be catabolic or clear
    lines = blood("A", 8) + [
        line.replace(f",{12 + 0.1 * k:.2f},", ",,", 1) for k, line in enumerate(blood("C", 8))
    ]
    *_, tb = pipeline(tmp_path, lines)
    for p in (0.95, 0.05):
        st = statuses(tb, p)
        assert st["C"] == ("cannot_tell", "fewer than 4 δ15N values")
        assert st["A"][0] in ("catabolic", "clear")
    record("odd_data", "result")


def test_a_file_without_a_d13c_column(tmp_path):
    path = tmp_path / "n_only.csv"
    path.write_text(
        "individual,tissue,d15N,date\n"
        + "".join(f"A,plasma,{12 + k * 0.2},2021-01-{k + 10}\n" for k in range(6))
    )
    intake = read_samples(path)
    assert any("no d13C column" in n for n in intake.notes)
    prepared = prepare(intake, tissues=intake.tissues)
    tb = build_timebase(prepared.samples, intake.tissues)
    assert statuses(tb)["A"][0] == "cannot_tell"
    record("odd_data", "result")


def test_all_values_identical(tmp_path):
    days = pd.date_range("2021-03-01", periods=6, freq="9D")
    lines = [f"{a},plasma,12.00,-17.00,,,,{d:%Y-%m-%d},g" for a in "AB" for d in days]
    *_, tb = pipeline(tmp_path, lines)
    assert np.all(tb.blood.y[tb.blood.mask] == [12.0, -17.0])
    assert {s for s, _ in statuses(tb, 0.05).values()} == {"clear"}
    record("odd_data", "result")


def test_animal_sampled_years_apart_is_excluded_cleanly_and_the_grid_stays_small(tmp_path):
    lines = blood("A", 6) + blood("B", 6) + blood("Z", 3, start="2009-01-10", step=2000)
    intake, prepared, used, tb = pipeline(tmp_path, lines)
    led = prepared.ledger.to_frame()
    z = led[led["individual"] == "Z"]
    assert (z["status"] == "excluded").all()
    assert z["reason"].str.contains(r"span 4000 days, more than qc.max_span_days").all()
    assert list(tb.individuals) == ["A", "B"]
    assert tb.T < 100  # the others' grid is not padded to Z's 11 years
    assert prepared.report["span"]["excluded_individuals"] == {"Z": 4000}
    record("odd_data", "clear_error")


def test_years_apart_within_the_limit_fit_the_padded_grid(tmp_path):
    # raising the limit is allowed; the padded grid then covers the long animal
    path = tmp_path / "long.csv"
    path.write_text(HEAD + "\n".join(blood("A", 6) + blood("Z", 3, step=700)) + "\n")
    intake = read_samples(path)
    prepared = prepare(intake, tissues=intake.tissues, config={"max_span_days": 3000})
    tb = build_timebase(prepared.samples, intake.tissues)
    assert tb.n_individuals == 2 and tb.T >= 1400 / tb.bin_width
    assert tb.bin_mask.sum(axis=1)[0] < 100  # A's own bins stay few; only padding grows
    record("odd_data", "result")


def test_max_span_days_is_checked(tmp_path):
    from nstress.errors import ConfigError
    from nstress.prep import resolve_config
    from nstress.tissues import DEFAULT_TISSUES

    with pytest.raises(ConfigError, match="expected a positive number"):
        resolve_config({"max_span_days": -1}, DEFAULT_TISSUES)
    record("odd_data", "clear_error")


@pytest.mark.parametrize("length,step", [(4.0, 1.0), (0.5, 5.0)], ids=["overlap", "gaps"])
def test_overlapping_and_gapped_segments(tmp_path, length, step):
    *_, tb = pipeline(tmp_path, whisker("A", 8, length=length, step=step) + blood("A", 4))
    k = tb.keratin
    lo, hi = k.h_lo[k.mask], k.h_hi[k.mask]
    assert np.all(np.isfinite(lo)) and np.all(lo < hi) and np.all(lo >= 0)
    if length > step:  # each window reaches into its neighbours'
        assert np.all(hi[:-1] > lo[1:])
    else:
        assert np.all(hi[:-1] < lo[1:])
    assert statuses(tb)["A"][0] == "catabolic"
    record("odd_data", "result")


def test_segments_without_lengths_are_inferred_from_neighbours(tmp_path):
    lines = [f"A,whisker,13,-16.5,{x},,2021-06-01,,g" for x in (1, 2, 4, 8)]
    *_, tb = pipeline(tmp_path, lines)
    k = tb.keratin
    assert np.all(k.h_hi[k.mask] > k.h_lo[k.mask])
    record("odd_data", "result")


def test_blood_draws_on_the_same_day(tmp_path):
    lines = blood("A", 6) + [
        "A,plasma,12.9,-17.4,,,,2021-01-05,g",
        "A,rbc,12.2,-17.1,,,,2021-01-05,g",
    ]
    intake, prepared, used, tb = pipeline(tmp_path, lines)
    led = prepared.ledger.to_frame()
    assert (led["status"] != "excluded").all()
    a = intake.samples
    same = a[(a["tissue"] == "plasma") & (a["date"] == pd.Timestamp("2021-01-05"))]
    assert len(same) == 1 and same["n_replicates"].iloc[0] == 2  # same day, same tissue: replicates
    assert tb.blood.mask.sum() == len(used) == 7
    record("odd_data", "result")


def test_dates_with_times_and_time_zones_keep_the_calendar_day(tmp_path):
    lines = [
        "A,plasma,12.0,-17.0,,,,2021-03-04T23:30:00-05:00,g",
        "A,plasma,12.1,-17.0,,,,2021-03-16 00:10Z,g",
        "A,plasma,12.2,-17.0,,,,2021-03-28T12:00:00.5+09:30,g",
        "A,whisker,13.0,-16.5,1,2,2021-04-10T08:00+02:00,,g",
    ]
    intake, _, _, tb = pipeline(tmp_path, lines)
    days = sorted(intake.samples["date"].dropna().dt.strftime("%Y-%m-%d"))
    assert days == ["2021-03-04", "2021-03-16", "2021-03-28"]
    assert intake.samples["collected"].dropna().iloc[0] == pd.Timestamp("2021-04-10")
    assert tb.blood.mask.sum() == 3 and tb.keratin.mask.sum() == 1
    record("odd_data", "result")


def test_model_builds_for_odd_colonies(tmp_path):
    from nstress.model.build import ModelSpec, build_model

    lines = (
        blood("A", 6)
        + blood("B", 1)
        + whisker("C", 6, length=4, step=1)
        + blood("N", 5, d13c=False)
        + [f"S,plasma,12.00,-17.00,,,,2021-02-0{k + 1},g" for k in range(4)]
    )
    *_, tb = pipeline(tmp_path, lines)
    built = build_model(tb, ModelSpec())
    assert built.model is not None and tb.n_individuals == 5
    record("odd_data", "result")


# ---------------------------------------------------------------- slow: tiny real fits


@pytest.mark.slow
def test_tiny_fit_of_an_odd_colony_scores_every_animal(tmp_path):
    from nstress.workflow.pipeline import FitConfig, fit_tables

    lines = blood("A", 6) + blood("B", 1) + blood("N", 6, d13c=False)
    path = tmp_path / "odd.csv"
    path.write_text(HEAD + "\n".join(lines) + "\n")
    cfg = FitConfig(
        sampler={"draws": 25, "tune": 25, "chains": 1, "seed": 3, "sampler": "pymc"},
        product_draws=25,
        progress=False,
        report=False,
    )
    manifest = fit_tables([path], tmp_path / "out", cfg)
    sc = pd.read_csv(tmp_path / "out" / "screening.csv", dtype={"individual": str})
    st = dict(zip(sc["individual"], sc["status"], strict=True))
    assert set(st) == {"A", "B", "N"}
    assert st["B"] in ("cannot_tell", "fit_failed")
    assert st["N"] in ("cannot_tell", "clear", "fit_failed")
    assert manifest["counts"]["rows"] == len(lines)
    record("odd_data", "result")


@pytest.mark.slow
def test_two_thousand_animals_through_intake_prep_timebase_and_build(tmp_path):
    from nstress.model.build import ModelSpec, build_model

    rng = np.random.default_rng(5)
    lines = []
    for a in range(2000):
        if a % 2:
            lines += blood(f"P{a:04d}", 4, start=f"2021-0{1 + a % 5}-0{1 + a % 9}")
        else:
            lines += whisker(f"W{a:04d}", 5, step=float(rng.uniform(1.5, 3.0)))
    intake, prepared, used, tb = pipeline(tmp_path, lines)
    assert tb.n_individuals == 2000 and len(prepared.ledger) == len(lines)
    assert tb.T < 200
    built = build_model(tb, ModelSpec())
    assert built.model is not None
    st = statuses(tb)
    assert set(s for s, _ in st.values()) <= {"catabolic", "cannot_tell"}
    record("odd_data", "result")

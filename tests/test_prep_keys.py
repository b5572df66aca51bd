"""Ledger keys of sample rows, and scale normalisation over many interleaved batches.

All tables here are small synthetic (invented) data.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from nstress._chem_equations import two_point_normalise
from nstress.intake.ledger import Ledger
from nstress.prep import prepare
from nstress.prep.qc import RowKeys, ledger_keys, text, tissue_names


def _samples(rng: np.random.Generator, n: int) -> pd.DataFrame:
    key = np.arange(n) * 3
    keys = []
    for k in key.tolist():
        m = int(rng.integers(1, 4))  # replicate sets of 1-3 input rows
        keys.append(tuple(range(k, k + m)))
    return pd.DataFrame({"key": key, "keys": pd.Series(keys, dtype=object)})


@pytest.mark.parametrize("seed", [0, 1])
def test_row_keys_equal_ledger_keys(seed):
    rng = np.random.default_rng(seed)
    s = _samples(rng, 300)
    rk = RowKeys(s)
    for frac in (0.0, 0.01, 0.3, 1.0):
        mask = rng.random(len(s)) < frac
        got, want = rk.of(mask), ledger_keys(s, mask)
        assert got.dtype == np.int64 and np.array_equal(got, want)
    # odd cells: a list, an array, a missing cell, a missing key
    s.loc[0, "keys"] = [0, 1000]
    s.loc[1, "keys"] = None
    s.at[2, "keys"] = np.array([6, 7], dtype=np.int64)
    s["key"] = s["key"].astype(float)
    s.loc[3, "key"] = np.nan
    rk = RowKeys(s)
    mask = np.zeros(len(s), bool)
    mask[:5] = True
    assert np.array_equal(rk.of(mask), ledger_keys(s, mask))
    assert 1000 in rk.of(mask).tolist() and 3 in rk.of(mask).tolist()
    # neither column: no keys
    none = pd.DataFrame({"x": [1, 2]})
    assert RowKeys(none).of(np.ones(2, bool)).size == 0


def test_many_interleaved_batches_each_normalised_by_its_own_anchors():
    """Samples of 7 batches in shuffled order; each batch has its own (invented) offset."""
    # assigned values: USGS40 δ15N −4.52, δ13C −26.39 (Qi et al. 2003, 2016);
    # USGS41a δ15N +47.55, δ13C +36.55 (Qi et al. 2016)
    assigned = {"USGS40": (-4.52, -26.39), "USGS41a": (47.55, 36.55)}
    rng = np.random.default_rng(3)
    batches = [f"run{j}" for j in range(7)]
    n = 140
    batch = np.array(batches)[rng.permutation(np.arange(n) % 7)]
    shift = {b: 0.3 * j - 1.0 for j, b in enumerate(batches)}
    d15 = rng.normal(14.0, 1.0, n) + np.array([shift[b] for b in batch])
    d13 = rng.normal(-17.0, 1.0, n) - np.array([shift[b] for b in batch])
    samples = pd.DataFrame(
        {
            "key": np.arange(n),
            "keys": pd.Series([(k,) for k in range(n)], dtype=object),
            "source_file": "samples.csv",
            "source_row": np.arange(1, n + 1),
            "individual": "A1",
            "tissue": "whisker",
            "tissue_class": "keratin",
            "group": "g",
            "d15N": d15,
            "d13C": d13,
            "sd_d15N": 0.15,
            "sd_d13C": 0.15,
            "cn_ratio": 3.3,
            "lipid_extracted": pd.array([pd.NA] * n, dtype="boolean"),
            "collected": pd.Timestamp("2021-03-01"),
            "analysis_batch": batch,
        }
    )
    refs = []
    for b in batches:
        for rm, (n15, c13) in assigned.items():
            for rep in range(2):
                refs.append(
                    {
                        "reference_material": rm,
                        "reference_role": "anchor",
                        "analysis_batch": b,
                        "d15N": n15 + shift[b] + 0.01 * rep,
                        "d13C": c13 - shift[b] - 0.01 * rep,
                    }
                )
    r = pd.DataFrame(refs)
    r.insert(0, "key", np.arange(n, n + len(r)))
    r["source_file"] = "refs.csv"
    r["source_row"] = np.arange(1, len(r) + 1)
    frame = pd.concat(
        [
            samples[["key", "source_file", "source_row", "individual", "tissue"]],
            r[["key", "source_file", "source_row"]],
        ]
    ).set_index("key")

    class _Intake:
        pass

    intake = _Intake()
    intake.samples, intake.references, intake.ledger, intake.sources = (
        samples,
        r,
        Ledger(frame),
        [],
    )
    p = prepare(intake)
    led = p.ledger.to_frame()
    for b in batches:
        m = batch == b
        for iso, j in (("d15N", 0), ("d13C", 1)):
            sign = 1.0 if iso == "d15N" else -1.0
            lo = [assigned["USGS40"][j] + sign * shift[b] + sign * 0.005]
            hi = [assigned["USGS41a"][j] + sign * shift[b] + sign * 0.005]
            want = two_point_normalise(
                samples[iso].to_numpy()[m],
                lo[0],
                assigned["USGS40"][j],
                hi[0],
                assigned["USGS41a"][j],
            )
            np.testing.assert_allclose(p.samples[iso].to_numpy()[m], want, rtol=0, atol=1e-9)
        label = (
            "δ15N scale-normalised (two-point (Paul et al. 2007), anchors USGS40, USGS41a, "
            f"batch {b})"
        )
        rows = led.loc[np.flatnonzero(m), "reason"]
        assert rows.str.contains(label, regex=False).all()
        others = led.loc[np.flatnonzero(~m)[: n // 2], "reason"]
        assert not others.str.contains(f"batch {b})", regex=False).any()
    assert p.samples["d15N_scaled"].all() and p.samples["d13C_scaled"].all()
    cals = p.report["scale"]["calibrations"]
    assert [(c["batch"], c["isotope"]) for c in cals] == [
        (b, iso) for b in batches for iso in ("d15N", "d13C")
    ]
    assert all(c["n_samples"] == 20 for c in cals)
    # every reference row is noted as an anchor of its batch
    ref_reasons = led.loc[r["key"].to_numpy(), "reason"].tolist()
    for b, why in zip(r["analysis_batch"], ref_reasons, strict=True):
        assert f"reference material: δ15N anchor (batch {b})" in why


def test_text_helpers_same_on_string_and_object_columns():
    values = [" Whisker", "plasma ", None, "RBC", " Whisker", "", "rbc", np.nan, "Plasma"]
    as_str = pd.DataFrame({"tissue": pd.Series(values, dtype="str"), "b": pd.Series(values)})
    as_obj = as_str.astype(object)
    assert isinstance(as_str["tissue"].dtype, pd.StringDtype)
    for frame in (as_str, as_obj):
        assert tissue_names(frame).tolist() == [
            "whisker",
            "plasma",
            "",
            "rbc",
            "whisker",
            "",
            "rbc",
            "",
            "plasma",
        ]
    assert text(as_str, "tissue").tolist() == text(as_obj, "tissue").tolist()
    assert text(as_str, "tissue").tolist()[:4] == ["Whisker", "plasma", "", "RBC"]


def test_row_keys_by_positions_equal_by_mask():
    rng = np.random.default_rng(5)
    s = _samples(rng, 50)
    rk = RowKeys(s)
    rows = np.array([3, 7, 8, 20, 49])
    mask = np.zeros(50, bool)
    mask[rows] = True
    assert np.array_equal(rk.of_rows(rows), rk.of(mask))
    assert rk.of_rows(np.array([], dtype=np.int64)).size == 0

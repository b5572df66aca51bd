"""prepare(): C:N QC, lipid normalisation, scale normalisation, report and summary.

All tables here are small synthetic (invented) data.
"""

import json
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pytest

from nstress.errors import ConfigError, InputError
from nstress.intake.ledger import Ledger
from nstress.prep import Prepared, prepare, summarise
from nstress.prep.refmaterials import REFERENCE_MATERIALS, lookup

# Assigned values used below: USGS40 δ15N −4.52, δ13C −26.39 (Qi et al. 2003, 2016);
# USGS41a δ15N +47.55, δ13C +36.55 (Qi et al. 2016); IAEA-N-2 δ15N +20.41 and
# IAEA-N-1 δ15N +0.43 (IUPAC-CIAAW table).
TRUE = {
    "USGS40": {"d15N": -4.52, "d13C": -26.39},
    "USGS41a": {"d15N": 47.55, "d13C": 36.55},
    "IAEA-N-2": {"d15N": 20.41, "d13C": np.nan},
    "IAEA-N-1": {"d15N": 0.43, "d13C": np.nan},
}


@dataclass
class StubIntake:
    """Stand-in with the attributes of nstress.intake.Intake."""

    samples: pd.DataFrame
    references: pd.DataFrame
    ledger: Ledger
    sources: list = field(default_factory=list)


SAMPLE_DEFAULTS = {
    "individual": "A1",
    "tissue": "whisker",
    "group": "colony1",
    "d15N": 15.0,
    "d13C": -17.0,
    "sd_d15N": 0.15,
    "sd_d13C": 0.15,
    "cn_ratio": 3.3,
    "pct_C": np.nan,
    "pct_N": np.nan,
    "lipid_extracted": pd.NA,
    "collected": pd.Timestamp("2021-03-01"),
    "date": pd.NaT,
}


def make_intake(samples: list[dict], refs: list[dict] | None = None) -> StubIntake:
    rows = [{**SAMPLE_DEFAULTS, **r} for r in samples]
    s = pd.DataFrame(rows)
    n = len(s)
    s.insert(0, "key", np.arange(n))
    if "keys" not in s:
        s["keys"] = [(k,) for k in range(n)]
    s["source_file"] = "samples.csv"
    s["source_row"] = np.arange(1, n + 1)
    s["tissue_class"] = np.where(s["tissue"].isin(["plasma", "rbc"]), "blood", "keratin")
    s["lipid_extracted"] = s["lipid_extracted"].astype("boolean")
    r = pd.DataFrame(refs or [])
    if len(r):
        r.insert(0, "key", np.arange(n, n + len(r)))
        r["source_file"] = "refs.csv"
        r["source_row"] = np.arange(1, len(r) + 1)
        for c in ("reference_role", "analysis_batch"):
            if c not in r:
                r[c] = ""
    frame = pd.concat(
        [
            s[["key", "source_file", "source_row", "individual", "tissue"]],
            r[["key", "source_file", "source_row"]] if len(r) else None,
        ]
    ).set_index("key")
    return StubIntake(samples=s, references=r, ledger=Ledger(frame))


def reasons(p: Prepared, key: int) -> str:
    return p.ledger.to_frame().loc[key, "reason"]


def status(p: Prepared, key: int) -> str:
    return p.ledger.to_frame().loc[key, "status"]


# --- C:N ----------------------------------------------------------------------------------
def test_cn_computed_from_percent_and_range_flags():
    intake = make_intake(
        [
            # %C 45, %N 15 -> atomic C:N = 3·14.007/12.011 = 3.4985 (by hand): inside 2.9-3.8
            {"cn_ratio": np.nan, "pct_C": 45.0, "pct_N": 15.0},
            {"cn_ratio": 4.2},  # keratin above 3.8
            {"cn_ratio": np.nan},  # unknown
            {"tissue": "plasma", "cn_ratio": 2.5, "date": pd.Timestamp("2021-01-05")},
            # %C 48, %N 13 -> (48/12.011)/(13/14.007) = 3.99634/0.92811 = 4.3059: above 3.8
            {"cn_ratio": np.nan, "pct_C": 48.0, "pct_N": 13.0},
        ]
    )
    p = prepare(intake)
    s = p.samples
    assert s.loc[0, "cn_ratio"] == pytest.approx(3.49854, abs=1e-5)
    assert s["cn_source"].tolist() == ["computed", "table", "", "table", "computed"]
    assert s.loc[4, "cn_ratio"] == pytest.approx(4.3059, abs=1e-4)
    assert status(p, 0) == "used" and status(p, 2) == "used"
    assert status(p, 1) == "flagged"
    assert "C:N outside the whisker range 2.9-3.8" in reasons(p, 1)
    assert "DeNiro 1985" in reasons(p, 1)  # the range's source is named
    assert "C:N as given" in reasons(p, 1)
    assert "C:N from %C/%N" in reasons(p, 4)
    assert "plasma range 3-4.2" in reasons(p, 3)
    assert "above 3.8" in s.loc[1, "qc"] and "below 3" in s.loc[3, "qc"]
    assert s.loc[0, "qc"] == ""
    rng = p.report["cn"]["range"]
    assert rng["whisker"]["n_above"] == 2 and rng["whisker"]["n_without_cn"] == 1
    assert rng["plasma"]["n_below"] == 1
    assert p.report["cn"]["computed"] == 2 and p.report["cn"]["missing"] == 1
    # the intake's table is not changed
    assert np.isnan(intake.samples.loc[0, "cn_ratio"])


def test_cn_table_disagreeing_with_percent_is_flagged():
    # table says 3.0 but %C 45 / %N 15 gives atomic 3.4985 (a mass C:N entered as atomic)
    p = prepare(make_intake([{"cn_ratio": 3.0, "pct_C": 45.0, "pct_N": 15.0}, {}]))
    assert "disagrees with %C/%N" in reasons(p, 0)
    assert status(p, 1) == "used"
    assert p.report["cn"]["table_disagrees_with_percent"] == 1
    # cn_check off: no C:N flags at all
    p2 = prepare(
        make_intake([{"cn_ratio": 3.0, "pct_C": 45.0, "pct_N": 15.0}, {"cn_ratio": 5.0}]),
        config={"cn_check": False},
    )
    assert (p2.ledger.to_frame()["status"] == "used").all()


def test_flags_reach_every_replicate_key():
    intake = make_intake([{"cn_ratio": 4.5}, {"cn_ratio": 3.3}])
    intake.samples.at[0, "keys"] = (0, 1)  # sample 0 combines input rows 0 and 1
    p = prepare(intake)
    assert status(p, 0) == "flagged" and status(p, 1) == "flagged"


# --- lipid --------------------------------------------------------------------------------
def plasma(**kw):
    return {"tissue": "plasma", "date": pd.Timestamp("2021-02-01"), "collected": pd.NaT, **kw}


def test_lipid_normalisation_only_where_it_should():
    intake = make_intake(
        [
            plasma(cn_ratio=4.0, d13C=-20.0, lipid_extracted=False),  # corrected
            plasma(cn_ratio=4.0, d13C=-20.0, lipid_extracted=True),  # extracted: untouched
            plasma(cn_ratio=3.2, d13C=-20.0, lipid_extracted=False),  # low C:N: untouched
            plasma(cn_ratio=4.0, d13C=-21.0),  # extraction unknown: corrected
            {"cn_ratio": 3.7, "d13C": -16.0},  # whisker, method none: untouched, noted
            plasma(cn_ratio=np.nan, d13C=-20.0, lipid_extracted=False),  # C:N unknown
        ]
    )
    p = prepare(intake, config={"lipid": {"plasma": "post2007"}})
    s = p.samples
    # Post et al. 2007 (from memory): −20.0 − 3.32 + 0.99·4.0 = −19.36; −21.0 → −20.36 (by hand)
    assert s.loc[0, "d13C"] == pytest.approx(-19.36)
    assert s.loc[3, "d13C"] == pytest.approx(-20.36)
    np.testing.assert_allclose(s["d13C_raw"], [-20.0, -20.0, -20.0, -21.0, -16.0, -20.0])
    np.testing.assert_allclose(s.loc[[1, 2, 4, 5], "d13C"], [-20.0, -20.0, -16.0, -20.0])
    assert s["lipid_correction"].tolist() == ["post2007", "", "", "post2007", "", ""]
    for k in (0, 3):
        assert "δ13C lipid-normalised (post2007" in reasons(p, k)
        assert "C:N > 3.5" in reasons(p, k)
        assert status(p, k) == "used"  # a note, not a flag
        assert "+0.64 ‰" in s.loc[k, "qc"]  # −3.32 + 3.96 = +0.64
    assert reasons(p, 1) == "" and reasons(p, 2) == ""
    assert "suggests lipid" in reasons(p, 4) and "not lipid-normalised" in reasons(p, 4)
    assert "C:N unknown" in reasons(p, 5)
    rep = p.report["lipid"]
    assert rep["n_corrected"] == 2
    assert rep["tissues"]["plasma"]["n_corrected"] == 2
    assert rep["tissues"]["plasma"]["method"] == "post2007"
    assert rep["tissues"]["plasma"]["mean_shift_d13C"] == pytest.approx(0.64)
    assert rep["tissues"]["plasma"]["n_extracted"] == 1
    assert rep["tissues"]["whisker"]["n_corrected"] == 0
    assert rep["tissues"]["whisker"]["n_suggests_lipid_not_corrected"] == 1


def test_lipid_defaults_leave_everything_untouched_and_kiljunen_override():
    rows = [plasma(cn_ratio=4.0, d13C=-20.0, lipid_extracted=False), {"cn_ratio": 3.6}]
    p = prepare(make_intake(rows))  # all default tissue methods are 'none'
    np.testing.assert_allclose(p.samples["d13C"], p.samples["d13C_raw"])
    assert p.report["lipid"]["n_corrected"] == 0
    # Kiljunen et al. 2006 constants (from memory), C:N 4.0: −20.0 + 1.78874 = −18.21126 (by hand,
    # see test_prep_equations)
    p = prepare(make_intake(rows), config={"lipid": {"plasma": "kiljunen2006"}})
    assert p.samples.loc[0, "d13C"] == pytest.approx(-18.21126, abs=1e-4)
    assert "kiljunen2006" in reasons(p, 0)
    # mass basis: C:N 4.0 atomic = 3.4300 by mass; Post: −20 − 3.32 + 0.99·3.43003 = −19.92427
    p = prepare(
        make_intake(rows), config={"lipid": {"plasma": "post2007"}, "lipid_cn_basis": "mass"}
    )
    assert p.samples.loc[0, "d13C"] == pytest.approx(-19.92427, abs=1e-4)


# --- scale normalisation ------------------------------------------------------------------
def measured(rm, iso, stretch, shift):
    return stretch * TRUE[rm][iso] + shift


def ref_rows(batch, maps, rms=("USGS40", "USGS41a", "IAEA-N-2"), roles=None, reps=2):
    """Reference rows measured through per-isotope maps {iso: (stretch, shift)}."""
    out = []
    for rm in rms:
        for _ in range(reps):
            out.append(
                {
                    "reference_material": rm,
                    "reference_role": (roles or {}).get(rm, ""),
                    "analysis_batch": batch,
                    **{iso: measured(rm, iso, *maps[iso]) for iso in ("d15N", "d13C")},
                }
            )
    return out


MAP_B1 = {"d15N": (0.98, 0.35), "d13C": (1.01, -0.5)}
MAP_B2 = {"d15N": (1.02, -0.6), "d13C": (0.99, 0.4)}
ROLES = {"USGS40": "anchor", "USGS41a": "anchor", "IAEA-N-2": "check"}


def test_scale_normalisation_per_batch_recovers_truth():
    truth = [(12.0, -18.0), (16.5, -15.5), (14.0, -17.2), (-10.0, -17.0)]
    samples = []
    for i, (n15, c13) in enumerate(truth):
        b, mp = ("B1", MAP_B1) if i % 2 == 0 else ("B2", MAP_B2)
        samples.append(
            {
                "analysis_batch": b,
                "d15N": mp["d15N"][0] * n15 + mp["d15N"][1],
                "d13C": mp["d13C"][0] * c13 + mp["d13C"][1],
            }
        )
    refs = ref_rows("B1", MAP_B1, roles=ROLES) + ref_rows("B2", MAP_B2, roles=ROLES)
    intake = make_intake(samples, refs)
    p = prepare(intake)
    s = p.samples
    np.testing.assert_allclose(s["d15N"], [t[0] for t in truth], atol=1e-9)
    np.testing.assert_allclose(s["d13C"], [t[1] for t in truth], atol=1e-9)
    np.testing.assert_allclose(s["d15N_raw"], intake.samples["d15N"])
    np.testing.assert_allclose(s["d13C_measured"], intake.samples["d13C"])
    assert s["d15N_scaled"].all() and s["d13C_scaled"].all()
    cals = {(c["batch"], c["isotope"]): c for c in p.report["scale"]["calibrations"]}
    assert set(cals) == {("B1", "d15N"), ("B1", "d13C"), ("B2", "d15N"), ("B2", "d13C")}
    for (b, iso), c in cals.items():
        st, sh = (MAP_B1 if b == "B1" else MAP_B2)[iso]
        assert c["slope"] == pytest.approx(1 / st) and c["intercept"] == pytest.approx(-sh / st)
        assert [a["rm"] for a in c["anchors"]] == ["USGS40", "USGS41a"]
        assert c["method"].startswith("two-point")
    # the check standard IAEA-N-2 (+20.41 ‰) comes back on its assigned value
    chk = cals[("B1", "d15N")]["checks"]
    assert [c["rm"] for c in chk] == ["IAEA-N-2"]
    assert chk[0]["normalised_mean"] == pytest.approx(20.41, abs=1e-9)
    assert cals[("B1", "d13C")]["checks"] == []  # IAEA-N-2 has no δ13C value
    # notes on samples and reference rows; the −10 ‰ sample lies below USGS40: flagged
    assert "δ15N scale-normalised (two-point" in reasons(p, 0)
    assert "batch B1" in reasons(p, 0) and "batch B2" in reasons(p, 1)
    assert "δ15N outside the anchor range" in reasons(p, 3) and status(p, 3) == "flagged"
    assert cals[("B2", "d15N")]["n_outside_anchor_range"] == 1
    assert "δ15N anchor (batch B1)" in reasons(p, 4)  # first reference row (USGS40, B1)
    assert "δ15N check standard" in reasons(p, 8)  # IAEA-N-2
    json.dumps(p.report)  # plain data


def test_scale_auto_roles_check_residual_and_least_squares():
    mp = {"d15N": (0.97, 1.2), "d13C": (1.0, 0.0)}
    refs = ref_rows("", mp, rms=("USGS40", "USGS41a", "IAEA-N-2", "IAEA-N-1"))
    refs[4]["d15N"] += 0.8  # one IAEA-N-2 replicate badly off -> mean residual ≈ 0.41 ‰
    p = prepare(make_intake([{"d15N": 0.97 * 14.0 + 1.2}], refs))
    cal = {c["isotope"]: c for c in p.report["scale"]["calibrations"]}["d15N"]
    assert cal["anchor_choice"].startswith("most extreme")
    assert [a["rm"] for a in cal["anchors"]] == ["USGS40", "USGS41a"]
    assert p.samples.loc[0, "d15N"] == pytest.approx(14.0)
    chk = {c["rm"]: c for c in cal["checks"]}
    assert chk["IAEA-N-1"]["mean_residual"] == pytest.approx(0.0, abs=1e-9)
    assert chk["IAEA-N-2"]["mean_residual"] == pytest.approx(0.4 / 0.97, abs=1e-9)
    assert "check standard IAEA-N-2 off by +0.41" in reasons(p, 0)
    # four anchors by role: least squares, and the report says so
    roles = dict.fromkeys(("USGS40", "USGS41a", "IAEA-N-2", "IAEA-N-1"), "anchor")
    refs = ref_rows("", mp, rms=tuple(roles), roles=roles)
    p = prepare(make_intake([{"d15N": 0.97 * 14.0 + 1.2}], refs))
    cal = {c["isotope"]: c for c in p.report["scale"]["calibrations"]}["d15N"]
    assert cal["method"].startswith("least squares through 4 anchors")
    assert p.samples.loc[0, "d15N"] == pytest.approx(14.0)


def test_scale_missing_batch_anchors_auto_flags_and_on_raises():
    samples = [{"analysis_batch": "B1", "d15N": 14.0}, {"analysis_batch": "B2", "d15N": 14.0}]
    refs = ref_rows("B1", MAP_B1, roles=ROLES)
    p = prepare(make_intake(samples, refs))
    assert p.samples["d15N_scaled"].tolist() == [True, False]
    assert p.samples.loc[1, "d15N"] == 14.0
    assert "not scale-normalised in batch B2" in reasons(p, 1)
    nn = p.report["scale"]["not_normalised"]
    assert {(x["batch"], x["isotope"]) for x in nn} == {("B2", "d15N"), ("B2", "d13C")}
    with pytest.raises(ConfigError, match="scale_normalisation.*B2"):
        prepare(make_intake(samples, refs), config={"scale_normalisation": "on"})
    with pytest.raises(ConfigError, match="no(ne)?.*reference"):
        prepare(make_intake(samples), config={"scale_normalisation": "on"})
    # only one δ13C anchor material (USGS40) plus two δ15N-only RMs: δ13C cannot be normalised
    refs = ref_rows("", MAP_B1, rms=("USGS40", "IAEA-N-1", "IAEA-N-2"))
    with pytest.raises(ConfigError, match="δ13C"):
        prepare(make_intake([{"d15N": 14.0}], refs), config={"scale_normalisation": "on"})


def test_scale_off_changes_nothing():
    samples = [{"analysis_batch": "B1", "d15N": 14.0, "d13C": -17.0}]
    p = prepare(
        make_intake(samples, ref_rows("B1", MAP_B1, roles=ROLES)),
        config={"scale_normalisation": "off"},
    )
    assert p.samples.loc[0, "d15N"] == 14.0 and p.samples.loc[0, "d13C"] == -17.0
    assert p.report["scale"]["calibrations"] == []


# --- errors -------------------------------------------------------------------------------
def test_unknown_reference_material_names_file_row_column_and_known_names():
    refs = ref_rows("", MAP_B1, rms=("USGS40",), reps=1) + [
        {"reference_material": "USGS99", "d15N": 1.0, "d13C": -20.0}
    ]
    with pytest.raises(InputError) as err:
        prepare(make_intake([{}], refs))
    e = err.value
    assert (e.file, e.row, e.column, e.value) == ("refs.csv", 2, "reference_material", "USGS99")
    assert "USGS40" in str(e) and "IAEA-N-2" in str(e) and "USGS99" in str(e)
    refs[0]["reference_role"] = "primary"
    with pytest.raises(InputError, match="reference_role"):
        prepare(make_intake([{}], refs))


def test_reference_names_are_spelling_tolerant():
    assert lookup("usgs 41A") is REFERENCE_MATERIALS["USGS41a"]
    assert lookup("IAEA_N2") is REFERENCE_MATERIALS["IAEA-N-2"]
    assert lookup("USGS99") is None
    # every built-in value states its source; unverified ones say "from memory"
    for rm in REFERENCE_MATERIALS.values():
        for iso in ("d13C", "d15N"):
            if not np.isnan(rm.value(iso)):
                assert rm.sources[iso]
                assert iso in rm.verified or "from memory" in rm.sources[iso]


def test_config_errors():
    intake = make_intake([{}])
    with pytest.raises(ConfigError, match="did you mean 'scale_normalisation'"):
        prepare(intake, config={"scale_normalization": "on"})
    with pytest.raises(ConfigError, match="unknown lipid method"):
        prepare(intake, config={"lipid": {"whisker": "magic"}})
    with pytest.raises(ConfigError, match="lipid.whiskr"):
        prepare(intake, config={"lipid": {"whiskr": "post2007"}})
    with pytest.raises(ConfigError, match="scale_normalisation"):
        prepare(intake, config={"scale_normalisation": "sometimes"})


# --- summary ------------------------------------------------------------------------------
def test_summary_text():
    samples = [
        {"individual": "A1", "cn_ratio": 4.5},
        {"individual": "A1", "collected": pd.Timestamp("2021-04-10")},
        {"individual": "B7", "group": "colony2"},
        plasma(individual="B7", date=pd.Timestamp("2020-12-24"), cn_ratio=4.0, d13C=-20.0),
    ]
    p = prepare(make_intake(samples), config={"lipid": {"plasma": "post2007"}})
    out = summarise(p)
    assert "Individuals: 2 in 2 group(s): colony1, colony2" in out
    assert "plasma 1 rows" in out and "whisker 3 rows" in out
    assert "2020-12-24 to 2021-04-10" in out
    assert "used 3, flagged 1, excluded 0" in out
    assert "C:N outside the whisker range" in out
    assert "plasma: 1 rows by post2007" in out
    assert "Scale normalisation (auto): 0" in out


def test_every_ledger_reason_is_one_piece():
    # the ledger joins reasons with "; ": no reason written here may contain that separator
    samples = [
        {"analysis_batch": "B1", "d15N": 14.0, "cn_ratio": 4.5},
        {"analysis_batch": "B2", "d15N": -12.0, "cn_ratio": 3.0, "pct_C": 45.0, "pct_N": 15.0},
        plasma(cn_ratio=4.0, d13C=-20.0, analysis_batch="B1"),
        {"analysis_batch": "B3", "tissue": "scute"},
    ]
    refs = ref_rows("B1", MAP_B1, roles=ROLES) + ref_rows("B2", MAP_B2)
    refs[-1]["d15N"] += 2.0  # a check standard off in B2
    p = prepare(make_intake(samples, refs), config={"lipid": {"plasma": "post2007"}})
    parts = [x for r in p.ledger.to_frame()["reason"] if r for x in r.split("; ")]
    assert len(parts) > 10
    starts = ("C:N", "cn_ratio", "δ15N", "δ13C", "reference material", "check standard", "tissue")
    bad = [x for x in parts if not x.startswith(starts)]
    assert bad == []
    assert any(x.startswith("tissue 'scute' has no defaults") for x in parts)
    assert any(x.startswith("check standard IAEA-N-2 off") for x in parts)
    assert p.report["tissues_without_defaults"] == ["scute"]

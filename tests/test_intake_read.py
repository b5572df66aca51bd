"""Intake: reading, column handling, references, replicates and duplicates.

All tables here are invented (synthetic) for the tests.
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from nstress.intake import REFERENCE_COLUMNS, SAMPLE_COLUMNS, Intake, read_samples
from nstress.intake.columns import canonical_name, compact_key
from nstress.intake.ledger import Ledger
from nstress.intake.replicates import DISAGREE, DUPLICATE
from nstress.intake.validate import soft_range_reason
from nstress.tissues import DEFAULT_TISSUES, Tissue

KERATIN_HEADER = "individual,tissue,d15N,d13C,position_mm,collected"


def write(tmp_path: Path, text: str, name: str = "t.csv", encoding: str = "utf-8") -> Path:
    p = tmp_path / name
    p.write_bytes(text.encode(encoding))
    return p


def ledger_of(intake: Intake) -> pd.DataFrame:
    return intake.ledger.to_frame()


# ---------------------------------------------------------------- basic shape


def test_public_api_and_columns(tmp_path):
    p = write(
        tmp_path,
        KERATIN_HEADER + ",comment\n"
        "W1,whisker,12.1,-18.0,0,2021-03-04,first\n"
        "W1,whisker,12.6,-17.8,5.5,2021-03-04,\n",
    )
    intake = read_samples(p)
    assert isinstance(intake, Intake)
    assert isinstance(intake.ledger, Ledger)
    s = intake.samples
    assert list(s.columns) == SAMPLE_COLUMNS + ["comment"]
    assert s["key"].tolist() == [0, 1]
    assert s["keys"].tolist() == [(0,), (1,)]
    assert s["source_row"].tolist() == [1, 2]
    assert s["source_file"].tolist() == [str(p), str(p)]
    assert s["tissue_class"].tolist() == ["keratin", "keratin"]
    assert s["group"].tolist() == ["all", "all"]
    assert s["d15N"].tolist() == [12.1, 12.6]
    assert s["position_mm"].tolist() == [0.0, 5.5]
    assert s["sd_d15N"].tolist() == [0.15, 0.15]
    assert s["n_replicates"].dtype == np.int64
    assert s["rep_sd_d15N"].isna().all()
    assert pd.api.types.is_datetime64_any_dtype(s["collected"])
    assert s["collected"].iloc[0] == pd.Timestamp("2021-03-04")
    assert s["date"].isna().all()
    assert s["segment_length_mm"].isna().all()
    assert str(s["lipid_extracted"].dtype) == "boolean"
    assert s["comment"].tolist() == ["first", ""]
    assert intake.references.empty
    assert list(intake.references.columns) == REFERENCE_COLUMNS
    digest = hashlib.sha256(p.read_bytes()).hexdigest()
    assert intake.sources == [{"path": str(p), "sha256": digest, "rows": 2}]
    led = ledger_of(intake)
    assert led["status"].tolist() == ["used", "used"]
    assert list(led.columns[:6]) == [
        "source_file",
        "source_row",
        "individual",
        "tissue",
        "status",
        "reason",
    ]
    assert "comment" in led.columns


def test_default_sd_argument(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,sd_d13C\nA,plasma,12,-18,2020-01-01,\n"
        "A,plasma,12,-18,2020-01-02,0.3\n",
    )
    s = read_samples(p, default_sd=0.2).samples
    assert s["sd_d15N"].tolist() == [0.2, 0.2]
    assert s["sd_d13C"].tolist() == [0.2, 0.3]


def test_aliases_case_and_whitespace(tmp_path):
    p = write(
        tmp_path,
        " INDIVIDUAL ;Tissue Type;δ15N (‰ vs AIR);Delta 13 C (o/oo);Position (mm);Date Collected;"
        "%C;N (%)\n"
        "  W1 ; Whisker ; 12,5 ; -18,25 ; 1,5 ; 2021-03-04 ; 44,1; 15,2\n",
    )
    s = read_samples(p).samples
    row = s.iloc[0]
    assert row["individual"] == "W1"
    assert row["tissue"] == "whisker"
    assert row["d15N"] == 12.5 and row["d13C"] == -18.25  # decimal comma in a ';' file
    assert row["position_mm"] == 1.5
    assert row["pct_C"] == 44.1 and row["pct_N"] == 15.2
    assert row["cn_ratio"] != row["cn_ratio"]  # not computed here (prep does)


def test_canonical_names_map_to_themselves():
    from nstress.intake.columns import CANONICAL

    for name in CANONICAL:
        assert canonical_name(name) == name
        assert canonical_name(f"  {name.upper()} ") == name


def test_typographic_minus(tmp_path):
    p = write(tmp_path, "individual,tissue,d15N,d13C,date\nA,plasma,12.5,\u221218.25,2021-01-01\n")
    assert read_samples(p).samples["d13C"].tolist() == [-18.25]


def test_compact_keys():
    assert compact_key("d15N (‰)") == "d15n"
    assert compact_key("δ¹⁵N") == "d15n"
    assert compact_key("Delta 15 N (o/oo)") == "delta15n"
    assert canonical_name("  D13C [per mil VPDB] ") == "d13C"
    assert canonical_name("C:N") == "cn_ratio"
    assert canonical_name("Segment length (mm)") == "segment_length_mm"
    assert canonical_name("Segment length (cm)") is None  # wrong unit: an extra column
    assert canonical_name("Body Mass (g)") is None
    assert canonical_name("mass (kg)") == "mass_kg"
    assert canonical_name("Growth (mm/d)") == "growth_mm_per_day"
    assert canonical_name("sd_d15N") == "sd_d15N"
    assert canonical_name("lab id") == "sample_id"


def test_bom_latin1_and_tab(tmp_path):
    body = (
        "individual\ttissue\td15N\td13C\tdate\tsite\nÅsa\tplasma\t10.5\t-20.1\t2020-05-01\tSøndre\n"
    )
    p1 = write(tmp_path, "\ufeff" + body, "bom.tsv")
    p2 = write(tmp_path, body, "latin.txt", encoding="latin-1")
    a, b = read_samples(p1), read_samples(p2)
    for intake in (a, b):
        assert intake.samples["individual"].tolist() == ["Åsa"]
        assert intake.samples["site"].tolist() == ["Søndre"]
        assert intake.samples["d13C"].tolist() == [-20.1]
    assert not a.notes
    assert any("Latin-1" in n for n in b.notes)


def test_missing_tokens_and_one_isotope_column(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,date\nA,plasma,NA,2020-01-01\n"
        "A,plasma,9.5,2020-01-02\nA,plasma,null,2020-01-03\nA,plasma,-,2020-01-04\nA,plasma,NaN,2020-01-05\n",
    )
    intake = read_samples(p)
    assert intake.samples["d15N"].tolist() == [9.5]
    assert intake.samples["d13C"].isna().all()
    assert any("no d13C column" in n for n in intake.notes)
    led = ledger_of(intake)
    assert (led["status"] == "excluded").sum() == 4
    assert led["reason"].str.contains("no d13C column in file").all()


def test_datetime_with_time_zone_is_local_calendar_day(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date\n"
        "A,plasma,12,-18,2021-03-04T10:00:00+02:00\n"
        "A,plasma,12,-18,2021-03-05T23:30:00-05:00\n"
        "A,plasma,12,-18,2021-03-06 08:15\n"
        "A,plasma,12,-18,2021-03-07T01:00Z\n",
    )
    d = read_samples(p).samples["date"]
    assert d.dt.strftime("%Y-%m-%d").tolist() == [
        "2021-03-04",
        "2021-03-05",
        "2021-03-06",
        "2021-03-07",
    ]
    assert (d == d.dt.normalize()).all()


def test_lipid_extracted_words(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,lipid_extracted\n"
        "A,plasma,12,-18,2021-01-01,Yes\nA,plasma,12,-18,2021-01-02,0\n"
        "A,plasma,12,-18,2021-01-03,\nA,plasma,12,-18,2021-01-04,TRUE\n",
    )
    v = read_samples(p).samples["lipid_extracted"]
    assert v.tolist()[:2] == [True, False]
    assert v.isna().tolist() == [False, False, True, False]


def test_group_given_and_extra_reserved_names(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,group,status\n"
        "A,plasma,12,-18,2021-01-01,colonyA,alive\nB,plasma,12,-18,2021-01-01,,dead\n",
    )
    intake = read_samples(p)
    assert intake.samples["group"].tolist() == ["colonyA", "all"]
    assert intake.samples["input_status"].tolist() == ["alive", "dead"]
    assert any("renamed 'input_status'" in n for n in intake.notes)


def test_tissue_aliases_and_custom_tissue(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,position_mm,collected\n"
        "A,Red blood cells,12,-18,2021-01-01,,\nA,Whole blood,12,-18,2021-01-01,,\n"
        "A,scute,9,-16,,2,2021-02-02\n",
    )
    tissues = dict(DEFAULT_TISSUES)
    tissues["scute"] = Tissue("scute", "keratin", growth_mm_per_day=0.05)
    s = read_samples(p, tissues).samples
    assert s["tissue"].tolist() == ["rbc", "whole_blood", "scute"]
    assert s["tissue_class"].tolist() == ["blood", "blood", "keratin"]


def test_several_files_keys_and_union_of_columns(tmp_path):
    a = write(tmp_path, KERATIN_HEADER + ",note\nW1,whisker,12,-18,0,2021-03-04,x\n", "a.csv")
    b = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date\nP1,plasma,14,-19,2021-05-05\nP1,plasma,,,2021-05-06\n",
        "b.csv",
    )
    intake = read_samples([a, str(b)])
    led = ledger_of(intake)
    assert led.index.tolist() == [0, 1, 2]
    assert led["source_file"].tolist() == [str(a), str(b), str(b)]
    assert led["source_row"].tolist() == [1, 1, 2]
    assert intake.samples["note"].tolist() == ["x", ""]
    assert [s["rows"] for s in intake.sources] == [1, 2]


def test_parquet_and_excel_round_trip(tmp_path):
    pytest.importorskip("pyarrow")
    pytest.importorskip("openpyxl")
    df = pd.DataFrame(
        {
            "Individual": ["A", "A", "B"],
            "tissue": ["plasma", "plasma", "whisker"],
            "d15N": [12.0, np.nan, 11.5],
            "d13C": [-18.0, -19.0, -17.5],
            "date": pd.to_datetime(["2021-01-02", "2021-01-03", None]),
            "position_mm": [np.nan, np.nan, 3.0],
            "collected": pd.to_datetime([None, None, "2021-05-01 10:30"]),
            "note": ["x", None, "z"],
        }
    )
    df.to_parquet(tmp_path / "t.parquet")
    df.to_excel(tmp_path / "t.xlsx", index=False)
    for name in ("t.parquet", "t.xlsx"):
        s = read_samples(tmp_path / name).samples
        assert s["individual"].tolist() == ["A", "A", "B"]
        assert s["d15N"].iloc[[0, 2]].tolist() == [12.0, 11.5]
        assert np.isnan(s["d15N"].iloc[1])
        assert s["date"].iloc[1] == pd.Timestamp("2021-01-03")
        assert s["collected"].iloc[2] == pd.Timestamp("2021-05-01")
        assert s["note"].tolist() == ["x", "", "z"]


# ---------------------------------------------------------------- flags and exclusions


def test_empty_rows_and_soft_range_flags(tmp_path):
    p = write(
        tmp_path,
        KERATIN_HEADER + "\n"
        "W1,whisker,12,-18,0,2021-03-04\n"
        ",,,,,\n"
        "W1,whisker,,,2,2021-03-04\n"
        "W1,whisker,35.2,-18,4,2021-03-04\n"
        "W1,whisker,12,-2.5,6,2021-03-04\n",
    )
    intake = read_samples(p)
    led = ledger_of(intake)
    assert led["status"].tolist() == ["used", "excluded", "excluded", "flagged", "flagged"]
    assert led["reason"].tolist()[1:3] == ["empty row", "no d15N or d13C value"]
    assert led["reason"].iloc[3] == soft_range_reason("d15N")
    assert led["reason"].iloc[4] == soft_range_reason("d13C")
    assert len(intake.samples) == 3  # flagged samples stay in


def test_reference_rows(tmp_path):
    # USGS40 δ13C -26.39, δ15N -4.52 (Qi et al. 2003); USGS41a δ13C +36.55, δ15N +47.55
    # (Qi et al. 2016): certified values far outside animal-tissue ranges are not flagged.
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,reference_material,reference_role,"
        "analysis_batch\n"
        ",,-4.52,-26.39,,USGS40,anchor,run1\n"
        ",,47.55,36.55,,USGS41a,anchor,run1\n"
        "A,plasma,12,-18,2021-01-01,,,run1\n",
    )
    intake = read_samples(p)
    refs = intake.references
    assert refs["reference_material"].tolist() == ["USGS40", "USGS41a"]
    assert refs["reference_role"].tolist() == ["anchor", "anchor"]
    assert refs["d15N"].tolist() == [-4.52, 47.55]
    assert refs["key"].tolist() == [0, 1]
    assert intake.samples["key"].tolist() == [2]
    assert intake.samples["analysis_batch"].tolist() == ["run1"]
    led = ledger_of(intake)
    assert led["status"].tolist() == ["used", "used", "used"]
    assert led["reason"].tolist()[:2] == ["reference material", "reference material"]


def test_reference_value_as_a_sample_is_flagged(tmp_path):
    # USGS41a δ15N +47.55 ‰ (Qi et al. 2016) entered as an animal sample is implausible.
    p = write(tmp_path, "individual,tissue,d15N,d13C,date\nA,plasma,47.55,36.55,2021-01-01\n")
    led = ledger_of(read_samples(p))
    assert led["status"].tolist() == ["flagged"]
    assert soft_range_reason("d15N") in led["reason"].iloc[0]


# ---------------------------------------------------------------- replicates


def test_replicates_combined_mean_sd_of_mean_and_spread(tmp_path):
    p = write(
        tmp_path,
        KERATIN_HEADER + ",sd_d15N,sample_id\n"
        "W1,whisker,12.0,-18.0,3,2021-03-04,0.2,a\n"
        "W1,whisker,12.2,-18.1,3,2021-03-04,0.2,b\n"
        "W1,whisker,12.1,,3,2021-03-04,0.2,c\n"
        "W1,whisker,13.0,-17.0,6,2021-03-04,0.2,d\n",
    )
    intake = read_samples(p)
    s = intake.samples
    assert len(s) == 2
    r = s.iloc[0]
    assert r["keys"] == (0, 1, 2) and r["key"] == 0 and r["n_replicates"] == 3
    assert r["sample_id"] == "a"
    vals = np.array([12.0, 12.2, 12.1])
    assert r["d15N"] == pytest.approx(vals.mean())
    assert r["rep_sd_d15N"] == pytest.approx(vals.std(ddof=1))
    # SD of the mean: larger of sqrt(sum sd²)/n and s/sqrt(n) (standard error of a mean)
    expected = max(math.sqrt(3 * 0.2**2) / 3, vals.std(ddof=1) / math.sqrt(3))
    assert r["sd_d15N"] == pytest.approx(expected)
    assert r["d13C"] == pytest.approx(-18.05)  # empty cell ignored
    se13 = np.std([-18.0, -18.1], ddof=1) / math.sqrt(2)
    assert r["sd_d13C"] == pytest.approx(max(math.sqrt(2 * 0.15**2) / 2, se13))
    led = ledger_of(intake)
    assert led["reason"].tolist()[:3] == ["combined with 2 replicate(s)"] * 3
    assert led["status"].tolist() == ["used"] * 4


def test_replicates_that_disagree_are_flagged(tmp_path):
    # 3·√2·0.15 = 0.636 ‰: a difference of 0.5 passes, 0.7 is flagged (common practice).
    p = write(
        tmp_path,
        KERATIN_HEADER + "\n"
        "W1,whisker,12.0,-18.0,3,2021-03-04\nW1,whisker,12.5,-18.0,3,2021-03-04\n"
        "W1,whisker,12.0,-18.0,6,2021-03-04\nW1,whisker,12.0,-18.7,6,2021-03-04\n",
    )
    led = ledger_of(read_samples(p))
    assert led["status"].tolist() == ["used", "used", "flagged", "flagged"]
    assert DISAGREE in led["reason"].iloc[2]


def test_different_dates_and_lipid_states_are_not_replicates(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,position_mm,collected,lipid_extracted\n"
        "A,plasma,12,-18,2021-01-01,,,\nA,plasma,12,-18,2021-01-02,,,\n"
        "A,rbc,12,-18,2021-01-01,,,\nB,plasma,12,-18,2021-01-01,,,\n"
        "W,whisker,12,-18,,3,2021-03-04,true\nW,whisker,12,-18,,3,2021-03-04,false\n"
        "W,whisker,12,-18,,3,2022-03-04,true\n",
    )
    s = read_samples(p).samples
    assert len(s) == 7
    assert (s["n_replicates"] == 1).all()


def test_blood_replicates_on_one_day_combine_across_files(tmp_path):
    a = write(tmp_path, "individual,tissue,d15N,d13C,date\nA,plasma,12,-18,2021-01-01\n", "a.csv")
    b = write(
        tmp_path, "individual,tissue,d15N,d13C,date\nA,plasma,12.2,-18,2021-01-01T09:00\n", "b.csv"
    )
    s = read_samples([a, b]).samples
    assert len(s) == 1 and s["keys"].iloc[0] == (0, 1)
    assert s["d15N"].iloc[0] == pytest.approx(12.1)


# ---------------------------------------------------------------- duplicates


def test_exact_duplicate_rows_of_a_sample_id_are_excluded(tmp_path):
    p = write(
        tmp_path,
        KERATIN_HEADER + ",sample_id,comment\n"
        "W1,whisker,12.0,-18.0,3,2021-03-04,S1,a\n"
        "W1,whisker,12.00,-18.0,3,2021-03-04,S1,a\n"
        "W1,whisker,12.0,-18.0,3,2021-03-04,S1,pasted again\n",
    )
    intake = read_samples(p)
    led = ledger_of(intake)
    assert led["status"].tolist() == ["used", "excluded", "excluded"]
    assert led["reason"].tolist()[1:] == [DUPLICATE, DUPLICATE]
    assert len(intake.samples) == 1 and intake.samples["n_replicates"].iloc[0] == 1


def test_standards_may_repeat_their_name_in_sample_id(tmp_path):
    p = write(
        tmp_path,
        "individual,tissue,d15N,d13C,date,sample_id,reference_material\n"
        ",,-4.5,-26.4,,USGS40,USGS40\n,,-4.6,-26.3,,USGS40,USGS40\n"
        "A,plasma,12,-18,2021-01-01,A1,\n",
    )
    intake = read_samples(p)
    assert len(intake.references) == 2

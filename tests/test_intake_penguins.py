"""Intake on a real, messy open dataset: Palmer penguins, raw table.

Data: Gorman, Williams & Fraser 2014, PLoS ONE 9:e90081, shipped by the
PyPI package ``palmerpenguins`` (``load_penguins_raw``): one blood sample
per adult at clutch initiation, 344 rows, seasons 2007-2009, δ15N and δ13C
with missing values and free-text comments. The paper analysed red blood
cells, so the adapter uses tissue ``rbc``.

Every expected number below is an independent pandas computation on the raw
table, not a value from the paper.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from nstress.intake import read_samples

penguins = pytest.importorskip("palmerpenguins")

N15, C13 = "Delta 15 N (o/oo)", "Delta 13 C (o/oo)"


@pytest.fixture(scope="module")
def raw() -> pd.DataFrame:
    return penguins.load_penguins_raw()


def _adapt(raw: pd.DataFrame, with_study: bool = True) -> pd.DataFrame:
    """Map the raw table to the sample-table contract (other columns carried as they are)."""
    ident = raw["Individual ID"].astype(str)
    out = pd.DataFrame(
        {
            "individual": ident + "_" + raw["studyName"] if with_study else ident,
            "tissue": "rbc",
            "date": raw["Date Egg"],
            "group": raw["Species"],
            # the raw headers themselves are accepted aliases of d15N / d13C
            N15: raw[N15],
            C13: raw[C13],
        }
    )
    # "Individual ID" is itself an alias of `individual`; keep it under another name
    rest = raw.drop(columns=[N15, C13, "Date Egg"]).rename(columns={"Individual ID": "nest_id"})
    return pd.concat([out, rest], axis=1)


@pytest.fixture(scope="module")
def intake(raw, tmp_path_factory):
    path = tmp_path_factory.mktemp("penguins") / "penguins_raw.csv"
    _adapt(raw).to_csv(path, index=False)
    return read_samples(path)


def test_every_row_accounted_for(raw, intake):
    led = intake.ledger.to_frame()
    assert len(raw) == 344
    assert len(led) == len(raw)
    assert led["source_row"].tolist() == list(range(1, 345))
    assert set(led["status"]) <= {"used", "flagged", "excluded"}


def test_rows_without_isotopes_are_excluded(raw, intake):
    led = intake.ledger.to_frame()
    both_missing = raw[N15].isna() & raw[C13].isna()  # independent count
    excluded = led["status"] == "excluded"
    assert excluded.sum() == both_missing.sum()
    assert excluded.sum() > 0
    assert (excluded.to_numpy() == both_missing.to_numpy()).all()
    assert (led.loc[excluded, "reason"] == "no d15N or d13C value").all()
    # comments travel with the rows (e.g. "Not enough blood for isotopes.")
    assert led.loc[excluded, "Comments"].str.contains("blood", case=False).any()


def test_one_sample_per_measured_row(raw, intake):
    measured = ~(raw[N15].isna() & raw[C13].isna())
    assert len(intake.samples) == measured.sum()
    assert (intake.samples["n_replicates"] == 1).all()
    assert set(intake.samples["tissue_class"]) == {"blood"}
    assert intake.samples["Comments"].notna().all()


def test_same_id_in_several_seasons_is_not_merged(raw, tmp_path):
    # Nest/adult IDs recur across seasons; without the study in the identifier
    # the same "individual" has draws on different dates, which must stay apart.
    counts = raw.groupby(["Species", "Individual ID"]).size()
    assert (counts > 1).any()
    path = tmp_path / "no_study.csv"
    _adapt(raw, with_study=False).to_csv(path, index=False)
    intake = read_samples(path)
    measured = raw[~(raw[N15].isna() & raw[C13].isna())]
    same_day = measured.groupby(["Individual ID", "Date Egg"]).size()
    assert (same_day == 1).all()
    assert len(intake.samples) == len(measured)
    repeated = intake.samples["individual"].value_counts()
    assert (repeated > 1).any()


def test_species_means_match_independent_computation(raw, intake):
    # Compared against an independent pandas computation on the raw table of
    # Gorman, Williams & Fraser 2014 (palmerpenguins), not against intake code.
    expected = raw.groupby("Species")[[N15, C13]].mean()
    got = intake.samples.groupby("group")[["d15N", "d13C"]].mean()
    assert sorted(got.index) == sorted(expected.index)
    for species in expected.index:
        assert np.isclose(got.loc[species, "d15N"], expected.loc[species, N15], atol=1e-9)
        assert np.isclose(got.loc[species, "d13C"], expected.loc[species, C13], atol=1e-9)
    counts = intake.samples.groupby("group")["d15N"].count()
    assert counts.to_dict() == raw.groupby("Species")[N15].count().to_dict()


def test_no_value_outside_animal_ranges(intake):
    led = intake.ledger.to_frame()
    assert (led["status"] != "flagged").all()

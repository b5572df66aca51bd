"""Property-based tests of intake: layout must not matter, every row is accounted for.

Tables are generated (synthetic): random individuals, keratin segments and
blood draws, replicates, empty rows; then columns and rows are shuffled,
header case is mixed, stray whitespace is added and optional columns are
dropped.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from nstress.intake import read_samples

OPTIONAL = ["group", "sample_id", "sd_d15N", "pct_C", "comment"]


@st.composite
def tables(draw):
    n_ind = draw(st.integers(1, 4))
    rows = []
    for i in range(n_ind):
        keratin = draw(st.booleans())
        n_times = draw(st.integers(1, 4))
        for t in range(n_times):
            n_rep = draw(st.sampled_from([1, 1, 1, 2, 3]))
            for _ in range(n_rep):
                d15 = draw(st.integers(400, 2000)) / 100  # 4.00 .. 20.00 ‰
                d13 = -draw(st.integers(1200, 3000)) / 100  # -12.00 .. -30.00 ‰
                rows.append(
                    {
                        "individual": f"ind{i}",
                        "tissue": "whisker" if keratin else "plasma",
                        "d15N": f"{d15:.2f}",
                        "d13C": f"{d13:.2f}",
                        "position_mm": f"{2.5 * t:g}" if keratin else "",
                        "collected": "2021-03-04" if keratin else "",
                        "date": "" if keratin else f"2020-0{t + 1}-15",
                        "group": f"g{i % 2}",
                        "sample_id": "",
                        "sd_d15N": "0.2",
                        "pct_C": "45.1",
                        "comment": f"c{len(rows)}",
                        "_sample": (i, t),
                        "_empty": False,
                    }
                )
        if draw(st.booleans()):  # a row without isotope values
            rows.append(
                {
                    **rows[-1],
                    "d15N": "",
                    "d13C": "NA",
                    "_sample": None,
                    "_empty": True,
                    "comment": f"c{len(rows)}",
                }
            )
    table = pd.DataFrame(rows)
    table["sample_id"] = [f"S{k}" for k in range(len(table))]
    keep_optional = [c for c in OPTIONAL if draw(st.booleans())]
    columns = ["individual", "tissue", "d15N", "d13C", "position_mm", "collected", "date"]
    columns = columns + keep_optional
    order = draw(st.permutations(columns))
    row_order = draw(st.permutations(list(range(len(table)))))
    table = table.iloc[list(row_order)].reset_index(drop=True)
    cases = draw(
        st.lists(
            st.sampled_from(["lower", "upper", "title", "same"]),
            min_size=len(order),
            max_size=len(order),
        )
    )
    pad = draw(st.sampled_from(["", " ", "  "]))
    return table, list(order), cases, pad


def _header(name: str, how: str, pad: str) -> str:
    name = {"lower": name.lower(), "upper": name.upper(), "title": name.title()}.get(how, name)
    return f"{pad}{name}{pad}"


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tables())
def test_layout_does_not_matter(spec):
    table, order, cases, pad = spec
    out = pd.DataFrame(
        {
            _header(c, h, pad): table[c].map(lambda v: f"{pad}{v}{pad}")
            for c, h in zip(order, cases, strict=True)
        }
    )
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "t.csv"
        out.to_csv(path, index=False)
        intake = read_samples(path)

    led = intake.ledger.to_frame()
    n = len(table)
    # every input row exactly once, in order
    assert len(led) == n
    assert led.index.tolist() == list(range(n))
    assert led["source_row"].tolist() == list(range(1, n + 1))
    assert set(led["status"]) <= {"used", "flagged", "excluded"}
    excluded = led["status"] == "excluded"
    assert excluded.tolist() == table["_empty"].tolist()
    assert (led.loc[excluded, "reason"] == "no d15N or d13C value").all()

    # one sample per (individual, time); replicates combined
    full = table[~table["_empty"]]
    expected = full.groupby(full["_sample"].astype(str))
    s = intake.samples
    assert len(s) == expected.ngroups
    assert sorted(k for ks in s["keys"] for k in ks) == full.index.tolist()
    assert (s["n_replicates"] == s["keys"].map(len)).all()

    # values round-trip: each sample's δ is the mean of its rows as written
    for _, row in s.iterrows():
        rows = table.loc[list(row["keys"])]
        assert rows["_sample"].nunique() == 1
        assert np.isclose(row["d15N"], rows["d15N"].astype(float).mean())
        assert np.isclose(row["d13C"], rows["d13C"].astype(float).mean())
        assert row["individual"] == rows["individual"].iloc[0]
        assert row["tissue"] == rows["tissue"].iloc[0]
        if "group" in order:
            assert row["group"] == rows["group"].iloc[0]
        else:
            assert row["group"] == "all"
        if "comment" in order:  # an extra column keeps its header as written (stripped)
            how = cases[order.index("comment")]
            assert row[_header("comment", how, "")] == rows["comment"].iloc[0]
        if "sd_d15N" in order and len(rows) == 1:
            assert row["sd_d15N"] == 0.2
        if "sd_d15N" not in order and len(rows) == 1:
            assert row["sd_d15N"] == 0.15
        if row["tissue"] == "whisker":
            assert row["position_mm"] == float(rows["position_mm"].iloc[0])
            assert row["collected"] == pd.Timestamp("2021-03-04")
        else:
            assert row["date"] == pd.Timestamp(rows["date"].iloc[0])
    # no soft flags on plausible values; only replicate disagreement may flag
    flagged = led[led["status"] == "flagged"]
    assert flagged["reason"].str.contains("replicates disagree").all()

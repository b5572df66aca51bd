"""Study-design power analysis: intervals, scoring, limits, the design section, the command.

The scoring and limit functions are checked on constructed frames (known
answers); one small real run (fast screening mode, a few animals) goes
through the command end to end; the comparison of a coarse and a dense
sampling design fits two colonies and is marked slow.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from nstress.errors import ConfigError
from nstress.products.report import write_report
from nstress.products.screening import wilson_interval
from nstress.tissues import resolve_tissues
from nstress.workflow.cli import main
from nstress.workflow.config import load_workflow
from nstress.workflow.power import (
    PowerDesign,
    PowerResult,
    describe_limits,
    design_for_data,
    detection_limits,
    observed_design,
    run_power,
    score_design,
    simulate_design,
    write_power,
)

ROOT = Path(__file__).resolve().parents[1]


# ------------------------------------------------------------ scoring


def _truth_and_screening():
    truth = pd.DataFrame(
        {
            "individual": ["F1", "F2", "F3", "F4", "G1", "G2", "C1", "C2"],
            "has_episode": [True, True, True, True, True, True, False, False],
            "onset_date": ["2025-01-01"] * 6 + [None, None],
            "fast_days": [10.0] * 4 + [40.0] * 2 + [10.0, 40.0],
            "rate_per_day": [0.05] * 8,
        }
    )
    screening = pd.DataFrame(
        {
            "individual": ["F1", "F2", "F3", "F4", "G1", "G2", "C1", "C2"],
            "status": [
                "catabolic",
                "catabolic",
                "possible",
                "cannot_tell",
                "catabolic",
                "catabolic",
                "catabolic",
                "not_catabolic",
            ],
            "p_catabolic_any": [0.9, 0.95, 0.6, 0.5, 0.99, 0.97, 0.85, 0.1],
            "onset_date": [
                "2025-01-05",
                "2024-12-29",
                "2025-01-20",
                None,
                "2025-01-02",
                "2025-01-09",
                "2025-02-01",
                None,
            ],
        }
    )
    return truth, screening


def test_score_design_counts_detections_onset_errors_and_false_flags():
    truth, screening = _truth_and_screening()
    out = score_design(truth, screening).set_index("fast_days")
    short, long = out.loc[10.0], out.loc[40.0]
    assert (short["n_fasters"], short["n_detected"]) == (4, 2)
    assert short["detected"] == 0.5
    # only detected fasters give onset errors: |+4| and |-3| days -> median 3.5
    assert short["onset_error_median_days"] == 3.5
    assert short["p_episode_fasters_median"] == pytest.approx(0.75)
    assert (long["n_detected"], long["onset_error_median_days"]) == (2, 4.5)
    # one of the two controls is called catabolic: a false flag
    assert (out["n_controls"] == 2).all() and (out["false_flag_share"] == 0.5).all()
    assert (out["detected_lo90"] <= out["detected"]).all()
    assert (out["detected"] <= out["detected_hi90"]).all()


def test_detection_limits_take_the_shortest_fast_reaching_power():
    table = pd.DataFrame(
        {
            "segment_mm": [1.0] * 3 + [6.0] * 3,
            "draw_interval_days": [0] * 6,
            "rate_per_day": [0.05] * 6,
            "fast_days": [10.0, 20.0, 40.0] * 2,
            # not monotone on purpose: the shortest that reaches power counts
            "detected": [0.5, 0.8, 1.0, 0.0, 0.2, 0.6],
        }
    )
    lim = detection_limits(table, power=0.8).set_index("segment_mm")
    assert lim.loc[1.0, "limit_fast_days"] == 20.0
    assert math.isnan(lim.loc[6.0, "limit_fast_days"])
    assert lim.loc[6.0, "longest_fast_days"] == 40.0
    text = describe_limits(lim.reset_index(), 0.8)
    assert text[0].startswith("1 mm segments, no blood: fasts detected in ≥ 80% of the animals")
    assert "fasts of ≥ 20 d" in text[0]
    assert "at 0.05 ‰/d none up to 40 d (the longest simulated)" in text[1]


# ------------------------------------------------------------ designs


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [
        ({"segment_mm": ()}, "design.segment_mm"),
        ({"draw_interval_days": (1,)}, "design.draw_interval_days"),
        ({"record_mm": 2.0, "segment_mm": (6.0,)}, "design.record_mm"),
        ({"power": 1.0}, "design.power"),
        ({"method": "mcmc"}, "design.method"),
    ],
)
def test_power_design_rejects_bad_grids_naming_the_key(kwargs, key):
    with pytest.raises(ConfigError) as info:
        PowerDesign(**kwargs)
    assert info.value.key == key


def test_simulated_design_has_the_asked_segments_draws_and_animals():
    design = PowerDesign(
        segment_mm=(3.0,),
        draw_interval_days=(14,),
        fast_days=(20.0,),
        rate_per_day=(0.04, 0.08),
        animals=3,
        controls=2,
        record_mm=30.0,
        blood_window_days=56,
    )
    table, truth = simulate_design(design, 3.0, 14)
    # two fast scenarios, each its own group of 3 + 2 animals
    assert truth.groupby(["fast_days", "rate_per_day"]).size().tolist() == [5, 5]
    assert truth["has_episode"].sum() == 6
    fasted = truth[truth["has_episode"].astype(bool)]
    assert fasted["duration_days"].between(18.0, 22.0).all()
    ker = table[table["tissue"] == "whisker"]
    assert ker.groupby("individual").size().eq(10).all()  # 30 mm / 3 mm
    assert np.allclose(ker["segment_length_mm"], 3.0)
    draws = table[table["tissue"] == "plasma"].groupby("individual")["date"].nunique()
    assert draws.eq(56 // 14 + 1).all()
    # the data's own design is read back from the table
    obs = observed_design(table, resolve_tissues(None))
    assert obs["keratin_tissue"] == "whisker" and obs["segment_mm"] == pytest.approx(3.0)
    assert obs["record_mm"] == pytest.approx(30.0)
    assert obs["draw_interval_days"] == 14 and obs["blood_tissues"] == ["plasma", "rbc"]
    again = design_for_data(obs, {"fast_days": [15.0], "animals": 4})
    assert again.segment_mm == (3.0,) and again.draw_interval_days == (14,)
    assert again.fast_days == (15.0,) and again.animals == 4


def test_same_seed_same_colony_and_scenarios_independent_of_grid_order():
    a = PowerDesign(segment_mm=(2.0,), fast_days=(10.0, 40.0), rate_per_day=(0.05,), seed=3)
    b = PowerDesign(segment_mm=(2.0,), fast_days=(40.0,), rate_per_day=(0.05,), seed=3)
    ta, _ = simulate_design(a, 2.0, 0)
    tb, _ = simulate_design(b, 2.0, 0)
    pd.testing.assert_frame_equal(ta, simulate_design(a, 2.0, 0)[0])
    long_a = ta[ta["group"] == "fast40d_rate0.05"].reset_index(drop=True)
    long_b = tb[tb["group"] == "fast40d_rate0.05"].reset_index(drop=True)
    np.testing.assert_array_equal(long_a["d15N"].to_numpy(), long_b["d15N"].to_numpy())


# ------------------------------------------------------------ workflow section


def _folder(tmp_path: Path, design: str) -> Path:
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "c.csv").write_text(
        "individual,tissue,d15N,d13C,date,group\nA1,plasma,12.0,-17.0,2024-01-05,north\n"
    )
    path = tmp_path / "wf.toml"
    path.write_text('[inputs]\ntables = ["data/c.csv"]\n' + design)
    return path


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("[design]\nsegment_mm = [0.0]\n", "design"),
        ("[design]\nkeratin_tissue = 'plasma'\n", "key 'design.keratin_tissue'"),
        ("[design]\nblood_tissues = ['whisker']\n", "key 'design.blood_tissues'"),
        ("[design]\nfast_dayz = [10.0]\n", "did you mean 'fast_days'?"),
        ("[design]\nmethod = 'slow'\n", "key 'design.method'"),
    ],
)
def test_design_section_errors_name_file_and_key(tmp_path, text, message):
    with pytest.raises(ConfigError) as info:
        load_workflow(_folder(tmp_path, text))
    assert message in str(info.value) and "wf.toml" in str(info.value)


def test_design_section_does_not_change_the_result_hash(tmp_path):
    from nstress.workflow.pipeline import config_hash

    wf = load_workflow(_folder(tmp_path, "[design]\nfast_days = [10.0, 30.0]\n"))
    assert wf.design == {"fast_days": [10.0, 30.0]}
    bare = tmp_path / "bare.toml"
    bare.write_text('[inputs]\ntables = ["data/c.csv"]\n')
    plain = load_workflow(bare)
    assert config_hash([], plain.fit.result_config()) == config_hash([], wf.fit.result_config())


def test_example_design_workflow_loads():
    wf = load_workflow(ROOT / "workflows" / "design_plan.toml")
    assert wf.design is not None
    assert len(wf.design["segment_mm"]) >= 2 and wf.design["for_data"] is False


# ------------------------------------------------------------ files and report


def _fake_result() -> PowerResult:
    """A constructed result (not a fit) to check the files and the report section."""
    design = PowerDesign(segment_mm=(1.0, 6.0), fast_days=(10.0, 40.0), rate_per_day=(0.05,))
    rows = []
    for seg, det in ((1.0, (2, 5)), (6.0, (0, 1))):
        for fast, k in zip((10.0, 40.0), det, strict=True):
            lo, hi = wilson_interval(k, 5)
            rows.append(
                {
                    "segment_mm": seg,
                    "days_per_segment": seg / 0.1,
                    "draw_interval_days": 0,
                    "fast_days": fast,
                    "rate_per_day": 0.05,
                    "n_fasters": 5,
                    "n_detected": k,
                    "onset_error_median_days": 6.0 if k else math.nan,
                    "p_episode_fasters_median": 0.5,
                    "detected": k / 5,
                    "detected_lo90": float(lo),
                    "detected_hi90": float(hi),
                    "n_controls": 2,
                    "false_flag_share": 0.0,
                    "p_episode_controls_median": 0.2,
                }
            )
    table = pd.DataFrame(rows)
    info = {"method": "fast", "approximate": True, "growth_mm_per_day": 0.1}
    return PowerResult(table, detection_limits(table, design.power), design, info)


def test_write_power_files_units_and_report_section(tmp_path):
    from fitdir_factory import make_fit_dir

    out = tmp_path / "out"
    paths = write_power(_fake_result(), out / "power")
    for name in ("power.csv", "power_limits.csv", "power.png", "power.svg", "power.json"):
        assert paths[name].stat().st_size > 0
    doc = json.loads(paths["power.json"].read_text())
    assert doc["units"]["rate_per_day"] == "‰ δ15N per day"
    assert doc["units"]["fast_days"] == "d"
    assert any("1 mm segments" in s and "fasts of ≥ 40 d" in s for s in doc["limits"])
    limits = pd.read_csv(paths["power_limits.csv"])
    assert limits["limit_fast_days"].isna().tolist() == [False, True]
    page = write_report([make_fit_dir(tmp_path / "fit")], out).read_text()
    assert 'id="power"' in page and "What this sampling design can detect" in page
    assert "fasts of ≥ 40 d" in page


def test_report_without_power_says_none_ran(tmp_path):
    from fitdir_factory import make_fit_dir

    page = write_report([make_fit_dir(tmp_path / "fit")], tmp_path / "out").read_text()
    assert 'id="power"' in page and "nstress power" in page


# ------------------------------------------------------------ real runs


def test_power_command_end_to_end_small(tmp_path, capsys):
    """A real (fast-mode) run of a tiny design through the command."""
    out = tmp_path / "plan"
    rc = main(
        [
            "power",
            "--segment-mm",
            "2",
            "--fast-days",
            "30",
            "--rate",
            "0.06",
            "--animals",
            "2",
            "--controls",
            "1",
            "--record-mm",
            "16",
            "--out",
            str(out),
            "--quiet",
        ]
    )
    assert rc == 0
    table = pd.read_csv(out / "power.csv")
    assert len(table) == 1
    row = table.iloc[0]
    assert (row["n_fasters"], row["n_controls"]) == (2, 1)
    assert 0 <= row["n_detected"] <= 2 and row["detected"] == row["n_detected"] / 2
    assert row["detected_lo90"] <= row["detected"] <= row["detected_hi90"]
    assert row["days_per_segment"] == pytest.approx(20.0)  # 2 mm at 0.1 mm/d
    doc = json.loads((out / "power.json").read_text())
    assert doc["design"]["segment_mm"] == [2.0] and doc["info"]["approximate"] is True
    assert "2 mm segments, no blood" in capsys.readouterr().out


def test_power_command_rejects_bad_grid_without_writing(tmp_path):
    out = tmp_path / "plan"
    rc = main(["power", "--draw-interval-days", "1", "--out", str(out), "--quiet"])
    assert rc != 0 and not (out / "power.json").exists()


@pytest.mark.slow
def test_coarse_design_misses_short_fasts_that_a_dense_design_detects():
    """Detection rises with sampling resolution (the point of planning a design).

    Common practice: a fast shorter than the time one segment spans cannot be
    resolved by that segment. 6 mm whisker segments at 0.1 mm/d span 60 days,
    so a 10-day fast is diluted six-fold; 1 mm segments with weekly blood
    resolve a 40-day fast.
    """
    coarse = PowerDesign(
        segment_mm=(6.0,),
        draw_interval_days=(0,),
        fast_days=(10.0,),
        rate_per_day=(0.05,),
        animals=5,
        controls=2,
        seed=11,
    )
    dense = dataclasses.replace(
        coarse, segment_mm=(1.0,), draw_interval_days=(7,), fast_days=(40.0,)
    )
    low = run_power(coarse).table.iloc[0]
    high = run_power(dense).table.iloc[0]
    assert low["detected"] <= 0.2, low.to_dict()
    assert high["detected"] >= 0.6, high.to_dict()
    assert high["onset_error_median_days"] <= 14
    assert low["false_flag_share"] <= 0.5 and high["false_flag_share"] <= 0.5


@pytest.mark.slow
def test_run_simulates_the_data_design_and_reports_it(tmp_path):
    """``nstress run`` with a ``[design]`` section: RUN_DIR/power, manifest and report."""
    from nstress.model.simulate import ColonySpec, simulate_colony
    from nstress.workflow.run import run_workflow

    (tmp_path / "data").mkdir()
    sim = simulate_colony(ColonySpec(n_individuals=4, seed=5, blood_share=0.0, n_segments=8))
    sim.table.to_csv(tmp_path / "data" / "c.csv", index=False)
    wf_path = tmp_path / "wf.toml"
    wf_path.write_text(
        '[inputs]\ntables = ["data/c.csv"]\n[units]\nsplit = "table"\n'
        '[sampler]\nmethod = "fast"\n'
        "[design]\nfast_days = [30.0]\nrate_per_day = [0.06]\nanimals = 2\ncontrols = 1\n"
    )
    outcome = run_workflow(load_workflow(wf_path), out=tmp_path / "run", quiet=True)
    power = outcome.manifest["power"]
    assert power == {"ok": True, "dir": "power"}
    doc = json.loads((tmp_path / "run" / "power" / "power.json").read_text())
    seg = doc["info"]["observed"]["segment_mm"]
    assert doc["design"]["segment_mm"] == [pytest.approx(seg, abs=1e-3)]
    assert doc["design"]["draw_interval_days"] == [0]
    page = (tmp_path / "run" / "report.html").read_text()
    assert "What this sampling design can detect" in page and f"{seg:g}"[:3] in page

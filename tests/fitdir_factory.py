"""A constructed fit directory (no MCMC): the files the report reads, with known content.

Six synthetic animals in two groups, one per status plus a second
``catabolic``; the posterior file holds a few hyperparameters only.
"""

from __future__ import annotations

import json
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd

from nstress.model import posterior as post
from nstress.products.screening import SCREENING_COLUMNS, colony_summary

ANIMALS = [  # id, group, status, p(episode)
    ("A1", "north", "catabolic", 0.97),
    ("A2", "north", "catabolic", 0.91),
    ("A3", "north", "possible", 0.55),
    ("B1", "south", "clear", 0.04),
    ("B2", "south", "cannot_tell", 0.60),
    ("B3", "south", "fit_failed", 0.70),
]


def make_fit_dir(root: Path, seed: int = 0, ok: bool = True) -> Path:
    rng = np.random.default_rng(seed)
    root.mkdir(parents=True, exist_ok=True)
    dates = pd.date_range("2024-09-01", periods=40, freq="4D")
    tl_rows, pr_rows, sc_rows = [], [], []
    for k, (ind, grp, status, p) in enumerate(ANIMALS):
        onset = dates[15 + k]
        inside = (dates >= onset) & (dates < onset + pd.Timedelta(days=30))
        e = np.where(dates >= onset, np.minimum((dates - onset).days * 0.04, 1.2), 0.0) * p
        for j, d in enumerate(dates):
            tl_rows.append(
                {
                    "individual": ind,
                    "group": grp,
                    "date": d.strftime("%Y-%m-%d"),
                    "bin": j,
                    "day_since_start": 4.0 * j + 2,
                    "p_catabolic": p * inside[j],
                    "enrichment_d15N_mean": e[j],
                    "enrichment_d15N_lo": 0.7 * e[j],
                    "enrichment_d15N_hi": 1.3 * e[j],
                    "diet_d15N_mean": 12.0 + 0.01 * j,
                    "diet_d15N_lo": 11.6,
                    "diet_d15N_hi": 12.8,
                    "diet_d13C_mean": -17.0,
                    "diet_d13C_lo": -17.4,
                    "diet_d13C_hi": -16.6,
                }
            )
        for tissue, klass, off in (("plasma", "blood", 2.5), ("whisker", "keratin", 3.0)):
            for j in range(0, 40, 5):
                for iso, base, g in (("d15N", 12.0 + off, 1.0), ("d13C", -17.0 + 1.0, -0.1)):
                    mu = base + g * e[j]
                    pr_rows.append(
                        {
                            "individual": ind,
                            "group": grp,
                            "tissue": tissue,
                            "tissue_class": klass,
                            "sample_id": f"{ind}-{tissue}-{j}",
                            "date": dates[j].strftime("%Y-%m-%d"),
                            "day_since_start": 4.0 * j,
                            "isotope": iso,
                            "observed": mu + rng.normal(0, 0.15),
                            "expected_mean": mu,
                            "expected_lo": mu - 0.1,
                            "expected_hi": mu + 0.1,
                            "predictive_lo": mu - 0.3,
                            "predictive_hi": mu + 0.3,
                            "z": 0.0,
                        }
                    )
        sc_rows.append(
            {
                "individual": ind,
                "group": grp,
                "status": status,
                "status_reason": f"constructed {status}",
                "p_catabolic_any": p,
                "p_catabolic_any_lo": max(p - 0.1, 0),
                "p_catabolic_any_hi": min(p + 0.05, 1),
                "catabolic_days_mean": 30 * p,
                "peak_enrichment_d15N_mean": e.max(),
                "peak_enrichment_d15N_lo": 0.7 * e.max(),
                "peak_enrichment_d15N_hi": 1.3 * e.max(),
                "onset_date": onset.strftime("%Y-%m-%d"),
                "onset_date_lo": (onset - pd.Timedelta(days=6)).strftime("%Y-%m-%d"),
                "onset_date_hi": (onset + pd.Timedelta(days=6)).strftime("%Y-%m-%d"),
                "end_date": (onset + pd.Timedelta(days=30)).strftime("%Y-%m-%d"),
                "end_date_lo": None,
                "end_date_hi": None,
                "duration_days_median": 30.0,
                "body_N_loss_mean": 0.2 * p,
                "body_N_loss_lo": 0.1 * p,
                "body_N_loss_hi": 0.3 * p,
                "n_samples": 16,
                "n_d13C": 16,
                "n_tissues": 2,
                "span_days": 160.0,
                "tissues": "plasma+whisker",
                "diagnostics_ok": status != "fit_failed",
                "approximate": False,
            }
        )
    sc = pd.DataFrame(sc_rows)
    order = {"catabolic": 0, "possible": 1, "cannot_tell": 2, "fit_failed": 3, "clear": 4}
    sc = sc.sort_values(
        ["status", "p_catabolic_any"], key=lambda s: s.map(order) if s.name == "status" else -s
    ).reset_index(drop=True)
    sc["rank"] = np.arange(1, len(sc) + 1)
    sc = sc[SCREENING_COLUMNS]
    sc.to_csv(root / "screening.csv", index=False)
    pd.DataFrame(tl_rows).to_csv(root / "timelines.csv", index=False)
    pd.DataFrame(pr_rows).to_csv(root / "predictions.csv", index=False)
    colony_summary(sc).to_csv(root / "colony_summary.csv", index=False)
    n_chain, n_draw = 2, 50
    idata = az.from_dict(
        posterior={
            "gamma": rng.normal(-0.1, 0.05, (n_chain, n_draw, 2)),
            "p_episode_group": rng.beta(4, 4, (n_chain, n_draw, 2)),
            "onset_sd": np.abs(rng.normal(8, 1, (n_chain, n_draw))),
            "walk_sd": np.abs(rng.normal(0.3, 0.02, (n_chain, n_draw, 2))),
            "walk_corr": rng.normal(0.6, 0.05, (n_chain, n_draw)),
        },
        coords={"group": ["north", "south"], "isotope": ["d15N", "d13C"]},
        dims={"gamma": ["group"], "p_episode_group": ["group"], "walk_sd": ["isotope"]},
    )
    post.save(idata, root / "posterior.nc", {"config": {}, "input_hash": "abc"})
    reasons = [] if ok else ["R-hat of diet_path is 1.300 (> 1.01)"]
    manifest = {
        "nstress_version": "0.1.0",
        "inputs": [{"path": "synthetic.csv", "sha256": "0" * 64, "rows": 96}],
        "config": {"priors": {"gamma": {"mu": 0.0}}, "tissues": {}, "sampler": {"draws": 50}},
        "execution": {"cores": None, "backend": "numpy"},
        "seed": 7,
        "input_hash": "f" * 64,
        "sampler": "constructed",
        "versions": {"python": "3.11", "nstress": "0.1.0"},
        "timings_s": {"total_s": 1.0},
        "diagnostics": {
            "ok": ok,
            "reasons": reasons,
            "convergence": {
                "diet_path": {
                    "rhat_max": 1.3 if not ok else 1.0,
                    "ess_bulk_min": 500,
                    "ess_tail_min": 500,
                    "size": 9,
                }
            },
            "sampler": {"divergences": 0},
            "ppc": {"plasma:d15N": {"n": 48, "coverage90": 0.9, "mean_z": 0.0, "sd_z": 1.0}},
            "covered": ["diet_path"],
        },
        "counts": {"individuals": 6},
        "files": [],
    }
    (root / "manifest.json").write_text(json.dumps(manifest))
    return root

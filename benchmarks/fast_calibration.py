"""Calibrate the fast screening mode against full NUTS on simulated colonies (run by hand).

Two parts:

* **agreement**: for each seed a colony of ``--n`` animals is simulated, fitted by full NUTS
  (or an earlier NUTS fit is reused: ``--reuse FOLDER`` with ``data/samples.csv`` and
  ``fit/screening.csv``, e.g. the folders ``benchmarks/recovery.py`` writes) and by the fast
  mode, and the screening calls per animal are compared. Calls are recomputed from
  P(episode) and the data support with the fit's diagnostics set aside (a short NUTS run that
  fails R-hat would otherwise read ``fit_failed`` everywhere), so the comparison is of what the
  two posteriors say;
* **time**: the fast mode on a colony of ``--time-n`` animals (default 1,000), wall time of
  the whole ``fit_tables`` (intake, model build, compile, optimiser, Laplace, products; no
  report).

Example::

    python benchmarks/fast_calibration.py --reuse /tmp/fastcal/nuts/n36_seed202 \\
        --time-n 1000 --out bench_out/fast

Writes ``fast_calibration.json`` and prints a table. The machine's load average is recorded
(it is shared; times under load are upper bounds).
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation
from nstress.products.screening import ScreeningRules, assign_status
from nstress.workflow.pipeline import FitConfig, fit_tables


def calls(screening: pd.DataFrame, rules: ScreeningRules | None = None) -> pd.Series:
    """Screening call per animal from P(episode) and data support, diagnostics set aside."""
    status, _ = assign_status(
        screening["p_catabolic_any"].to_numpy(),
        screening["n_samples"].to_numpy(),
        screening["n_d13C"].to_numpy(),
        np.ones(len(screening), bool),
        rules,
        span_days=screening["span_days"].to_numpy(),
        n_tissues=screening["n_tissues"].to_numpy(),
    )
    return pd.Series(status, index=screening["individual"].astype(str), name="call")


def fast_fit_dir(samples: Path, out: Path, seed: int, draws: int) -> tuple[dict, float]:
    """Fit ``samples`` with the fast mode into ``out``; return the manifest and wall time."""
    cfg = FitConfig(
        sampler={"seed": seed, "method": "fast", "fast_draws": draws},
        progress=False,
        product_draws=draws,
        report=False,
    )
    t0 = time.perf_counter()
    m = fit_tables([samples], out, cfg, log=lambda s: print(s, file=sys.stderr))
    return m, time.perf_counter() - t0


def agreement(folder: Path, out: Path, seed: int, draws: int) -> dict:
    """Compare the fast mode's calls with a finished NUTS fit in ``folder``."""
    nuts = pd.read_csv(folder / "fit" / "screening.csv")
    m, wall = fast_fit_dir(folder / "data" / "samples.csv", out, seed, draws)
    fast = pd.read_csv(out / "screening.csv")
    a, b = calls(nuts), calls(fast).reindex(calls(nuts).index)
    p = nuts.set_index("individual")["p_catabolic_any"]
    q = fast.set_index("individual")["p_catabolic_any"].reindex(p.index)
    nuts_manifest = json.loads((folder / "fit" / "manifest.json").read_text())
    return {
        "folder": str(folder),
        "n": int(len(a)),
        "agreement": float((a == b).mean()),
        "confusion": pd.crosstab(a.rename("nuts"), b.rename("fast")).to_dict(),
        "p_episode_abs_diff_mean": float((p - q).abs().mean()),
        "p_episode_abs_diff_max": float((p - q).abs().max()),
        "fast_wall_s": wall,
        "fast_timings_s": m["timings_s"],
        "fast_info": {k: v for k, v in m["fast"].items() if k != "settings"},
        "fast_sanity_ok": m["diagnostics"]["ok"],
        "nuts_timings_s": nuts_manifest.get("timings_s"),
        "nuts_diagnostics_ok": nuts_manifest["diagnostics"]["ok"],
        "nuts_draws": nuts_manifest["config"]["sampler"],
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--reuse", type=Path, nargs="*", default=[], help="finished NUTS folders")
    ap.add_argument("--n", type=int, default=36, help="animals per agreement colony")
    ap.add_argument("--seeds", type=int, nargs="*", default=[], help="new NUTS colonies")
    ap.add_argument("--draws", type=int, default=500, help="NUTS draws = tune per chain")
    ap.add_argument("--fast-draws", type=int, default=200)
    ap.add_argument("--time-n", type=int, default=1000, help="animals of the timing colony")
    ap.add_argument("--out", type=Path, default=Path("bench_out/fast"))
    a = ap.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(message)s")
    for noisy in ("pymc", "pytensor", "jax", "numba", "matplotlib"):
        logging.getLogger(noisy).setLevel(logging.WARNING)
    a.out.mkdir(parents=True, exist_ok=True)
    folders = list(a.reuse)
    for seed in a.seeds:
        folder = a.out / f"nuts_n{a.n}_seed{seed}"
        if not (folder / "fit" / "manifest.json").exists():
            sim = simulate_colony(ColonySpec(n_individuals=a.n, seed=seed))
            write_simulation(sim, folder / "data")
            cfg = FitConfig(
                sampler={"draws": a.draws, "tune": a.draws, "chains": 2, "seed": seed},
                progress=False,
                report=False,
            )
            fit_tables([folder / "data" / "samples.csv"], folder / "fit", cfg)
        folders.append(folder)
    record: dict = {"load_average": os.getloadavg(), "agreement": []}
    for k, folder in enumerate(folders):
        rec = agreement(folder, a.out / f"fast_{folder.name}", seed=1 + k, draws=a.fast_draws)
        record["agreement"].append(rec)
        print(
            f"{folder.name}: n={rec['n']} agreement {rec['agreement']:.1%} "
            f"|ΔP| mean {rec['p_episode_abs_diff_mean']:.3f} max "
            f"{rec['p_episode_abs_diff_max']:.3f}; fast {rec['fast_wall_s']:.0f} s"
        )
    if folders:
        n_all = sum(r["n"] for r in record["agreement"])
        agree = sum(r["agreement"] * r["n"] for r in record["agreement"]) / n_all
        record["agreement_pooled"] = {"n": n_all, "agreement": agree}
        print(f"pooled: n={n_all} agreement {agree:.1%}")
    if a.time_n:
        sim = simulate_colony(ColonySpec(n_individuals=a.time_n, seed=7))
        data = a.out / f"time_n{a.time_n}" / "data"
        write_simulation(sim, data)
        m, wall = fast_fit_dir(
            data / "samples.csv", a.out / f"time_n{a.time_n}" / "fit", 7, a.fast_draws
        )
        record["time"] = {
            "n": a.time_n,
            "wall_s": wall,
            "timings_s": m["timings_s"],
            "fast_info": {k: v for k, v in m["fast"].items() if k != "settings"},
            "load_average_after": os.getloadavg(),
        }
        print(f"fast mode on {a.time_n} animals: {wall:.0f} s wall; {m['timings_s']}")
    (a.out / "fast_calibration.json").write_text(json.dumps(record, indent=2, default=str))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

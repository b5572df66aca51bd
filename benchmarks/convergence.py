"""Per-animal convergence of a recovery fit, joined with the simulated truth.

Run by hand after ``benchmarks/recovery.py``, e.g.::

    python benchmarks/convergence.py bench_out/n36_seed101

Reads ``fit/posterior.nc`` and ``data/truth_individuals.csv`` and prints, per animal, the worst
R-hat of every sampled variable that has an ``individual`` dimension, with the animal's true
kind and whether it has blood draws: the animals and variables that hold a fit back.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd


def per_individual_rhat(posterior) -> pd.DataFrame:
    """Worst rank-normalised R-hat per (individual, variable)."""
    out = {}
    for name, da in posterior.data_vars.items():
        if "individual" not in da.dims:
            continue
        r = az.rhat(da.to_dataset(name=name))[name]
        other = [d for d in r.dims if d != "individual"]
        out[name] = r.max(dim=other).to_pandas() if other else r.to_pandas()
    return pd.DataFrame(out)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("folder", type=Path, help="a recovery folder (with fit/ and data/)")
    ap.add_argument("--top", type=int, default=15, help="animals to show")
    a = ap.parse_args(argv)
    idata = az.from_netcdf(a.folder / "fit" / "posterior.nc")
    rh = per_individual_rhat(idata.posterior)
    truth = pd.read_csv(a.folder / "data" / "truth_individuals.csv").set_index("individual")
    cols = ("kind", "has_blood", "growth_multiplier", "shift_d15N", "shift_d13C")
    keep = [c for c in cols if c in truth]
    rh["worst"] = rh.max(axis=1)
    table = rh.join(truth[keep]).sort_values("worst", ascending=False)
    pd.set_option("display.width", 250)
    pd.set_option("display.max_columns", 40)
    print(table.head(a.top).round(3).to_string())
    print("\nworst R-hat per variable:")
    print(rh.drop(columns="worst").max().sort_values(ascending=False).round(3).to_string())
    by_kind = (
        table.groupby("kind")["worst"].agg(["median", "max", "count"]) if "kind" in table else None
    )
    if by_kind is not None:
        print("\nby kind:\n" + by_kind.round(3).to_string())
    return 0 if np.isfinite(rh["worst"]).all() else 1


if __name__ == "__main__":
    raise SystemExit(main())

"""Write the synthetic demo data set of nstress (run: ``python demo_data/make_demo.py``).

The data are invented: two colonies of a fur-seal-like pinniped, made by
nstress's forward simulator with a fixed seed. Rerunning this script writes
byte-identical files. See ``demo_data/README.md``.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
try:
    import nstress  # noqa: F401
except ModuleNotFoundError:  # running from a source checkout without installing
    sys.path.insert(0, str(HERE.parent))

from nstress.model.simulate import ColonySpec, simulate_colony, write_simulation  # noqa: E402

DEMO_SPEC = ColonySpec(
    n_individuals=36,
    seed=20241126,
    groups=("Northreach", "Saltmere"),
    id_prefixes=("NR", "SM"),
    breeding_dates=("2024-11-26", "2024-12-04"),
    diet_means=((12.0, -17.0), (12.6, -16.4)),
)
"""The demo colony: 18 females per colony, every one with a whisker, half with serial blood."""

AMINO_SPEC = ColonySpec(
    n_individuals=12,
    seed=20250310,
    groups=("Greyhaven",),
    id_prefixes=("GH",),
    breeding_dates=("2024-12-01",),
    diet_means=((12.3, -16.8),),
    kind_shares={"faster": 0.34, "baseline_shift": 0.33, "trophic_shift": 0.33},
    amino_acid_every=2,
    food_web="aquatic",
)
"""A third invented colony with compound-specific δ15N (Glu, Phe) on every second sample.

Its animals fast, or see the food web's baseline rise (bulk δ15N and Phe together), or
shift their diet; written to ``demo_data/amino_acids/``.
"""


def main(folder: Path = HERE) -> dict[str, Path]:
    """Simulate the demo colony and write its CSV files into ``folder``.

    Parameters
    ----------
    folder
        Target folder (default: the folder of this script).

    Returns
    -------
    dict
        Paths of ``colony_samples.csv``, ``truth_individuals.csv`` and ``truth_bins.csv``,
        and (keys prefixed ``amino_``) those of ``amino_acids/``.
    """
    sim = simulate_colony(DEMO_SPEC)
    paths = write_simulation(sim, folder, samples_name="colony_samples.csv")
    ti = sim.truth_individuals
    print(
        f"wrote {len(sim.table)} samples of {len(ti)} synthetic animals "
        f"({int(ti['has_blood'].sum())} with blood) to {folder}",
        file=sys.stderr,
    )
    amino = simulate_colony(AMINO_SPEC)
    aa_paths = write_simulation(amino, folder / "amino_acids", samples_name="amino_samples.csv")
    print(
        f"wrote {len(amino.table)} samples of {len(amino.truth_individuals)} synthetic animals "
        f"with amino acids to {folder / 'amino_acids'}",
        file=sys.stderr,
    )
    return {**paths, **{f"amino_{k}": v for k, v in aa_paths.items()}}


if __name__ == "__main__":
    main()

"""Fixed names of dimensions, coordinates and isotopes, used everywhere.

The PyMC model, the posterior file, ``timelines.nc`` and every table use
these names; change them only with a deprecation path.
"""

INDIVIDUAL = "individual"
BIN = "bin"
TISSUE = "tissue"
ISOTOPE = "isotope"
EPISODE = "episode"
GROUP = "group"
KNOT = "knot"
OBS = "obs"

ISOTOPES = ("d15N", "d13C")
"""Isotope order on every ``isotope`` axis: δ15N (‰ vs AIR), δ13C (‰ vs VPDB)."""

N, C = 0, 1
"""Positions of δ15N and δ13C on an ``isotope`` axis."""

UNITS = {
    "d15N": "per mil vs AIR",
    "d13C": "per mil vs VPDB",
    "time": "days",
    "rate": "per mil per day",
}

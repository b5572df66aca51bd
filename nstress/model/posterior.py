"""Everything that touches the posterior object (ArviZ ``InferenceData``).

Kept in one module so that a move to the next ArviZ/PyMC major version
(xarray DataTree) changes one file. Other modules get plain NumPy arrays
with a leading ``(chain, draw)`` shape from here.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import arviz as az
import numpy as np
import xarray as xr

from nstress.atomic import atomic_path
from nstress.errors import InputError

POSTERIOR_FORMAT = "nstress-posterior-1"


def var(idata: Any, name: str) -> np.ndarray:
    """Posterior draws of a variable, shape ``(chain, draw, ...)``."""
    return np.asarray(idata.posterior[name].values)


def has_var(idata: Any, name: str) -> bool:
    """Whether the posterior holds ``name``."""
    return name in idata.posterior


def n_chains_draws(idata: Any) -> tuple[int, int]:
    """Return the number of chains and draws per chain."""
    p = idata.posterior
    return int(p.sizes["chain"]), int(p.sizes["draw"])


def sample_stat(idata: Any, *names: str) -> np.ndarray | None:
    """Return the first of ``names`` in ``sample_stats`` (samplers name them differently)."""
    ss = getattr(idata, "sample_stats", None)
    if ss is None:
        return None
    for n in names:
        if n in ss:
            return np.asarray(ss[n].values)
    return None


def summarise_arrays(arrays: dict[str, np.ndarray]) -> dict[str, dict[str, float]]:
    """R-hat (rank-normalised), bulk and tail ESS of ``(chain, draw, ...)`` arrays.

    Parameters
    ----------
    arrays
        Name -> array with leading ``(chain, draw)``.

    Returns
    -------
    dict
        Name -> ``{"rhat_max", "ess_bulk_min", "ess_tail_min", "size"}``
        (non-finite entries, e.g. constant quantities, are ignored).
    """
    out: dict[str, dict[str, float]] = {}
    for name, a in arrays.items():
        a = np.asarray(a, dtype=float)
        flat = a.reshape(a.shape[0], a.shape[1], -1)
        # constant columns (e.g. masked, fixed) carry no information
        keep = np.ptp(flat.reshape(-1, flat.shape[-1]), axis=0) > 1e-12
        if not keep.any():
            continue
        da = xr.DataArray(flat[..., keep], dims=("chain", "draw", "k"))
        ds = xr.Dataset({name: da})
        rhat = az.rhat(ds, method="rank")[name].values
        ess_b = az.ess(ds, method="bulk")[name].values
        ess_t = az.ess(ds, method="tail")[name].values
        out[name] = {
            "rhat_max": float(np.nanmax(rhat)),
            "ess_bulk_min": float(np.nanmin(ess_b)),
            "ess_tail_min": float(np.nanmin(ess_t)),
            "size": int(keep.sum()),
        }
    return out


def sampler_stats(idata: Any) -> dict[str, float]:
    """Divergences and tree-depth statistics of the sampler."""
    div = sample_stat(idata, "diverging")
    depth = sample_stat(idata, "tree_depth", "depth")
    maxd = sample_stat(idata, "reached_max_treedepth", "maxdepth_reached")
    steps = sample_stat(idata, "n_steps")
    out = {"divergences": int(np.sum(div)) if div is not None else 0}
    if depth is not None:
        out["tree_depth_max"] = int(np.max(depth))
        out["tree_depth_mean"] = float(np.mean(depth))
    if maxd is not None:
        out["max_treedepth_hits"] = int(np.sum(maxd))
    if steps is not None:
        out["gradient_evals"] = int(np.sum(steps))
    return out


def subset_draws(
    idata: Any, names: list[str], max_draws: int | None = None
) -> dict[str, np.ndarray]:
    """Return variables as arrays, thinned to at most ``max_draws`` per chain."""
    out = {}
    _, n = n_chains_draws(idata)
    step = 1 if not max_draws or n <= max_draws else int(np.ceil(n / max_draws))
    for name in names:
        out[name] = var(idata, name)[:, ::step]
    return out


def save(idata: Any, path: str | Path, attrs: dict[str, Any]) -> Path:
    """Write the posterior as NetCDF with rebuild information in its attributes.

    Parameters
    ----------
    idata
        InferenceData.
    path
        Target file (written atomically).
    attrs
        Plain data: configuration, package version, input hash, diagnostics.
        Stored as JSON strings in the posterior group's attributes.
    """
    idata.posterior.attrs["nstress_format"] = POSTERIOR_FORMAT
    for k, v in attrs.items():
        idata.posterior.attrs[f"nstress_{k}"] = json.dumps(v, default=str)
    with atomic_path(path) as tmp:
        idata.to_netcdf(str(tmp), engine="h5netcdf")
    return Path(path)


def load(path: str | Path) -> tuple[Any, dict[str, Any]]:
    """Reopen a posterior written by :func:`save`; return it and its attributes.

    Raises
    ------
    InputError
        If the file is missing, truncated, corrupt or not an nstress posterior.
    """
    try:
        idata = az.from_netcdf(str(path), engine="h5netcdf")
        idata.posterior.load()
    except Exception as exc:  # noqa: BLE001 - any reader failure means an unusable file
        raise InputError(
            f"cannot read posterior file ({type(exc).__name__}: {exc})", file=str(path)
        ) from None
    a = dict(idata.posterior.attrs)
    if a.get("nstress_format") != POSTERIOR_FORMAT:
        raise InputError("not an nstress posterior file", file=str(path))
    attrs = {
        k[len("nstress_") :]: json.loads(v)
        for k, v in a.items()
        if k.startswith("nstress_") and k != "nstress_format"
    }
    return idata, attrs


def rhat_per_column(a: np.ndarray) -> np.ndarray:
    """Rank-normalised R-hat of each column of a ``(chain, draw, k)`` array (1 where constant)."""
    a = np.asarray(a, dtype=float)
    out = np.ones(a.shape[2])
    keep = np.ptp(a.reshape(-1, a.shape[2]), axis=0) > 1e-12
    if keep.any() and a.shape[0] > 1:
        ds = xr.Dataset({"x": xr.DataArray(a[..., keep], dims=("chain", "draw", "k"))})
        out[keep] = az.rhat(ds, method="rank")["x"].values
    return out

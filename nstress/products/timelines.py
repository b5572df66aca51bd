"""Per-individual stress timelines and episodes from the posterior (model.md section 6).

* P(catabolic) per bin = P(episode) × P(bin inside the episode | episode),
  averaged over draws (Rao-Blackwellised: the episode indicator's
  conditional probability is used, not its sampled value);
* enrichment E with mean and 90 % interval, over draws whose sampled
  indicator says "episode" (E = 0 otherwise);
* diet path (δ15N, δ13C) with 90 % intervals;
* episodes: onset, end, duration with intervals (given an episode);
* body-N loss by the Rayleigh relation with ε uncertain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from nstress import dims
from nstress import equations as eq
from nstress.model.build import BuiltModel
from nstress.model.draws import Draws

Q_LO, Q_HI = 0.05, 0.95


@dataclass
class Products:
    """Timelines (long table and Dataset) and per-individual episode summaries."""

    timelines: pd.DataFrame
    dataset: xr.Dataset
    episodes: pd.DataFrame


def _weighted_quantiles(x: np.ndarray, w: np.ndarray, qs: tuple[float, ...]) -> np.ndarray:
    """Quantiles of each column of ``x`` ``(S, I)`` with weights ``w`` ``(S, I)``."""
    order = np.argsort(x, axis=0)
    xs = np.take_along_axis(x, order, 0)
    ws = np.take_along_axis(w, order, 0)
    cw = np.cumsum(ws, axis=0)
    tot = cw[-1]
    out = np.full((len(qs), x.shape[1]), np.nan)
    for j, q in enumerate(qs):
        k = (cw >= q * tot[None, :]).argmax(axis=0)
        out[j] = xs[k, np.arange(x.shape[1])]
    out[:, tot <= 1e-12] = np.nan
    return out


def compute_products(
    built: BuiltModel,
    d: Draws,
    paths: dict[str, np.ndarray],
    *,
    epsilon_mu: float,
    epsilon_sd: float,
    seed: int = 0,
) -> Products:
    """Timelines, episodes and body-N loss from collected draws.

    Parameters
    ----------
    built
        Built model.
    d
        Collected draws.
    paths
        Output of :func:`nstress.model.draws.latent_paths`.
    epsilon_mu, epsilon_sd
        Prior of the fractionation ε of N loss (‰) for the Rayleigh estimate.
    seed
        Seed of the ε draws.

    Returns
    -------
    Products
    """
    tb = built.timebase
    T = tb.T
    pc = d.p_cond  # (S, I)
    z = d.episode.astype(float)  # (S, I)
    p_cat = (pc[..., None] * paths["inside"]).mean(0)  # (I, T)
    e_eff = z[..., None] * paths["enrich"]  # (S, I, T)
    e_mean = (pc[..., None] * paths["enrich"]).mean(0)
    e_lo, e_hi = np.quantile(e_eff, [Q_LO, Q_HI], axis=0)
    diet = paths["diet"]
    d_mean = diet.mean(0)
    d_lo, d_hi = np.quantile(diet, [Q_LO, Q_HI], axis=0)

    # episodes (given an episode), in days since each individual's origin
    on = d.params["onset"]
    du = d.params["duration"]
    w = np.maximum(pc, 1e-12)
    on_q = _weighted_quantiles(on, w, (Q_LO, 0.5, Q_HI))
    end_q = _weighted_quantiles(on + du, w, (Q_LO, 0.5, Q_HI))
    du_q = _weighted_quantiles(du, w, (Q_LO, 0.5, Q_HI))
    peak = e_eff.max(axis=2)  # (S, I)
    rng = np.random.default_rng(seed)
    eps = np.minimum(rng.normal(epsilon_mu, epsilon_sd, size=peak.shape), -0.5)
    loss = 1.0 - eq.rayleigh_fraction_remaining(peak, eps)
    # days inside the grid that the animal was catabolic (expected)
    cat_days = (pc[..., None] * paths["inside"] * tb.bin_mask[None]).sum(2) * tb.bin_width
    gmask = tb.bin_mask

    dates = tb.bin_dates()
    ii, tt = np.nonzero(gmask)
    ind = np.asarray(tb.individuals)[ii]
    grp = np.asarray(tb.groups)[tb.group_index][ii]
    timelines = pd.DataFrame(
        {
            "individual": ind,
            "group": grp,
            "date": pd.to_datetime(dates[ii, tt]).strftime("%Y-%m-%d"),
            "bin": tt,
            "day_since_start": tb.bin_mid[tt] + tb.origin_offset[ii],
            "p_catabolic": p_cat[ii, tt],
            "enrichment_d15N_mean": e_mean[ii, tt],
            "enrichment_d15N_lo": e_lo[ii, tt],
            "enrichment_d15N_hi": e_hi[ii, tt],
            "diet_d15N_mean": d_mean[ii, tt, 0],
            "diet_d15N_lo": d_lo[ii, tt, 0],
            "diet_d15N_hi": d_hi[ii, tt, 0],
            "diet_d13C_mean": d_mean[ii, tt, 1],
            "diet_d13C_lo": d_lo[ii, tt, 1],
            "diet_d13C_hi": d_hi[ii, tt, 1],
        }
    )

    def _date(days: np.ndarray) -> list[str | None]:
        out: list[str | None] = []
        for o, x in zip(tb.origin, days, strict=True):
            out.append(None if not np.isfinite(x) else str(o + np.timedelta64(int(round(x)), "D")))
        return out

    episodes = pd.DataFrame(
        {
            "individual": np.asarray(tb.individuals),
            "group": np.asarray(tb.groups)[tb.group_index],
            "p_catabolic_any": pc.mean(0),
            "p_catabolic_any_lo": np.quantile(pc, Q_LO, axis=0),
            "p_catabolic_any_hi": np.quantile(pc, Q_HI, axis=0),
            "catabolic_days_mean": cat_days.mean(0),
            "peak_enrichment_d15N_mean": peak.mean(0),
            "peak_enrichment_d15N_lo": np.quantile(peak, Q_LO, axis=0),
            "peak_enrichment_d15N_hi": np.quantile(peak, Q_HI, axis=0),
            "onset_date": _date(on_q[1]),
            "onset_date_lo": _date(on_q[0]),
            "onset_date_hi": _date(on_q[2]),
            "end_date": _date(end_q[1]),
            "end_date_lo": _date(end_q[0]),
            "end_date_hi": _date(end_q[2]),
            "duration_days_median": du_q[1],
            "duration_days_lo": du_q[0],
            "duration_days_hi": du_q[2],
            "kappa_per_day_mean": (d.params["kappa"] * w).sum(0) / w.sum(0),
            "body_N_loss_mean": loss.mean(0),
            "body_N_loss_lo": np.quantile(loss, Q_LO, axis=0),
            "body_N_loss_hi": np.quantile(loss, Q_HI, axis=0),
        }
    )
    coords = {
        dims.INDIVIDUAL: [str(x) for x in tb.individuals],
        dims.BIN: np.arange(T),
        dims.ISOTOPE: list(dims.ISOTOPES),
    }

    def _masked(a: np.ndarray) -> np.ndarray:
        m = gmask if a.ndim == 2 else gmask[..., None]
        return np.where(m, a, np.nan)

    ds = xr.Dataset(
        {
            "p_catabolic": ((dims.INDIVIDUAL, dims.BIN), _masked(p_cat), {"units": "probability"}),
            "enrichment_d15N_mean": (
                (dims.INDIVIDUAL, dims.BIN),
                _masked(e_mean),
                {"units": "per mil (d15N vs AIR)"},
            ),
            "enrichment_d15N_lo": (
                (dims.INDIVIDUAL, dims.BIN),
                _masked(e_lo),
                {"units": "per mil (d15N vs AIR)", "quantile": Q_LO},
            ),
            "enrichment_d15N_hi": (
                (dims.INDIVIDUAL, dims.BIN),
                _masked(e_hi),
                {"units": "per mil (d15N vs AIR)", "quantile": Q_HI},
            ),
            "diet_mean": (
                (dims.INDIVIDUAL, dims.BIN, dims.ISOTOPE),
                _masked(d_mean),
                {"units": "per mil; d15N vs AIR, d13C vs VPDB"},
            ),
            "diet_lo": (
                (dims.INDIVIDUAL, dims.BIN, dims.ISOTOPE),
                _masked(d_lo),
                {"units": "per mil", "quantile": Q_LO},
            ),
            "diet_hi": (
                (dims.INDIVIDUAL, dims.BIN, dims.ISOTOPE),
                _masked(d_hi),
                {"units": "per mil", "quantile": Q_HI},
            ),
            "date": (
                (dims.INDIVIDUAL, dims.BIN),
                dates.astype("datetime64[ns]"),
                {"description": "bin centre"},
            ),
        },
        coords=coords,
        attrs={"bin_width_days": tb.bin_width, "interval": "90 % (5 % to 95 %)"},
    )
    return Products(timelines=timelines, dataset=ds, episodes=episodes)

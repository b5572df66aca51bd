"""Expected tissue values per observation, with bands, from posterior draws.

The fitted tissue curves of the report and the posterior predictive checks
come from here. Every value is computed with the model's own forward
equations (:func:`nstress.model.draws.predictions` and
:func:`nstress.model.forward.expected`) on retained posterior draws; no
equation is repeated.

The result is one long table (``predictions.csv``), one row per observed
(sample, isotope):

``individual``, ``group``, ``tissue``, ``tissue_class``, ``sample_id``,
``date`` (ISO; blood: draw date; keratin: posterior median date of the
segment's growth-window midpoint), ``day_since_start`` (days since the
group's earliest bin edge), ``isotope`` (``d15N`` vs AIR, ``d13C`` vs VPDB),
``observed`` (‰), ``expected_mean``/``expected_lo``/``expected_hi`` (the
tissue curve: mean and 90 % interval of the expected value, ‰),
``predictive_lo``/``predictive_hi`` (90 % posterior predictive interval of a
new measurement, with analytical and extra SD, ‰), ``z`` (standardised
residual against the predictive draws).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from nstress import dims
from nstress.model.build import BuiltModel
from nstress.model.draws import Draws, Replicates, predictive_replicates

Q_LO, Q_HI = 0.05, 0.95
PREDICTION_COLUMNS = [
    "individual",
    "group",
    "tissue",
    "tissue_class",
    "sample_id",
    "date",
    "day_since_start",
    "isotope",
    "observed",
    "expected_mean",
    "expected_lo",
    "expected_hi",
    "predictive_lo",
    "predictive_hi",
    "z",
]


def observation_predictions(
    built: BuiltModel,
    d: Draws,
    *,
    max_draws: int = 200,
    seed: int = 0,
    reps: Replicates | None = None,
) -> pd.DataFrame:
    """Return expected and predicted values of every observation (long table, see module doc).

    Parameters
    ----------
    built
        Built model (time base with the observations).
    d
        Collected draws (:func:`nstress.model.draws.collect`).
    max_draws
        At most this many draws (evenly spaced) are pushed through the forward model.
    seed
        Seed of the predictive noise.
    reps
        The draws' replicates (:func:`nstress.model.draws.predictive_replicates`
        with ``max_draws`` and ``seed``) if already computed, e.g. for the
        posterior predictive checks.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`PREDICTION_COLUMNS`.
    """
    tb = built.timebase
    reps = reps or predictive_replicates(built, d, n_rep=max_draws, seed=seed)
    k = tb.keratin
    r = d.params["growth"][reps.index][:, np.arange(tb.n_individuals)[:, None], k.slot]
    ker_t = np.median(k.t - 0.5 * (k.h_lo + k.h_hi) / r, axis=0)  # window centres
    frames = [
        _long(
            tb,
            o,
            name,
            ker_t if name == "keratin" else o.t,
            reps.expected[name],
            reps.replicated[name],
        )
        for name, o in (("blood", tb.blood), ("keratin", tb.keratin))
        if o.mask.any()
    ]
    out = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    return out.reindex(columns=PREDICTION_COLUMNS)


def _long(tb, o, klass: str, t: np.ndarray, e: np.ndarray, y: np.ndarray) -> pd.DataFrame:
    """One tissue class's predictions as long rows over the observed (sample, isotope)."""
    e_lo, e_hi = np.quantile(e, [Q_LO, Q_HI], axis=0)
    p_lo, p_hi = np.quantile(y, [Q_LO, Q_HI], axis=0)
    z = (o.y - y.mean(0)) / (y.std(0) + 1e-9)
    ii, nn, cc = np.nonzero(o.y_mask & o.mask[..., None])
    day = np.floor(t[ii, nn]).astype("timedelta64[D]")
    dates = pd.to_datetime(tb.origin[ii] + day).strftime("%Y-%m-%d")
    samples = tb.samples
    sid = (
        samples["sample_id"].astype("string").to_numpy()[o.sample[ii, nn]]
        if "sample_id" in samples
        else np.full(ii.size, None, dtype=object)
    )
    return pd.DataFrame(
        {
            "individual": np.asarray(tb.individuals)[ii],
            "group": np.asarray(tb.groups)[tb.group_index][ii],
            "tissue": np.asarray(tb.tissues, dtype=object)[o.tissue[ii, nn]],
            "tissue_class": klass,
            "sample_id": sid,
            "date": dates,
            "day_since_start": t[ii, nn] + tb.origin_offset[ii],
            "isotope": np.asarray(dims.ISOTOPES, dtype=object)[cc],
            "observed": o.y[ii, nn, cc],
            "expected_mean": e.mean(0)[ii, nn, cc],
            "expected_lo": e_lo[ii, nn, cc],
            "expected_hi": e_hi[ii, nn, cc],
            "predictive_lo": p_lo[ii, nn, cc],
            "predictive_hi": p_hi[ii, nn, cc],
            "z": z[ii, nn, cc],
        }
    )

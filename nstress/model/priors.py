"""Every prior of the model, in one place, with its source.

Each entry is plain data (JSON-serialisable) so that it can be stored with
the posterior and overridden from a workflow file's ``[priors]`` table::

    [priors.kappa_log_mean]
    mu = -3.0

Tissue-specific priors (discrimination, half-lives, growth) come from
:mod:`nstress.tissues`.
"""

from __future__ import annotations

import copy
import difflib
from typing import Any

from nstress.errors import ConfigError

PRIORS: dict[str, dict[str, Any]] = {
    "p_episode": {
        "dist": "beta",
        "alpha": 1.0,
        "beta": 1.0,
        "doc": "share of animals with a catabolic episode, per group",
        "source": "uninformative (common practice)",
    },
    "kappa_log_mean": {
        "dist": "normal",
        "mu": -3.2,
        "sigma": 0.5,
        "doc": "group mean of log κ, the δ15N enrichment rate while catabolic (‰/d); "
        "exp(-3.2) ≈ 0.04",
        "source": "fasting Δδ15N mean +0.5 ‰, up to several ‰ "
        "(Hertz et al. 2015; Doi et al. 2017); "
        "plasma +0.70 ‰ over a 25-day fast (Cherel et al. 2005)",
    },
    "kappa_log_sd": {
        "dist": "halfnormal",
        "sigma": 0.3,
        "doc": "between-animal SD of log κ",
        "source": "common practice",
    },
    "duration_log_mean": {
        "dist": "normal",
        "mu": 3.4,
        "sigma": 0.5,
        "doc": "group mean of log episode duration (days); exp(3.4) ≈ 30 d",
        "source": "breeding/moult fasts of weeks, e.g. 25 d (Cherel et al. 2005)",
    },
    "duration_log_sd": {
        "dist": "halfnormal",
        "sigma": 0.3,
        "doc": "between-animal SD of log duration",
        "source": "common practice",
    },
    "onset_sd": {
        "dist": "halfnormal",
        "sigma": 10.0,
        "doc": "between-animal SD of onset within a group (days)",
        "source": "breeders fast at similar times; about 10 d (common practice)",
    },
    "tau_rec_log_mean": {
        "dist": "normal",
        "mu": 3.4,
        "sigma": 0.4,
        "doc": "group mean of log recovery time τ (days) of the catabolic enrichment",
        "source": "body-protein turnover of weeks (from memory)",
    },
    "tau_rec_log_sd": {
        "dist": "halfnormal",
        "sigma": 0.2,
        "doc": "between-animal SD of log τ",
        "source": "common practice",
    },
    "gamma": {
        "dist": "normal",
        "mu": -0.1,
        "sigma": 0.3,
        "doc": "δ13C change per ‰ of catabolic δ15N, per group; sign not forced",
        "source": "plasma δ13C fell in fasting penguins (Cherel et al. 2005); "
        "unchanged in rationed "
        "birds (Hobson et al. 1993); reversed in restricted chicks (Williams et al. 2007)",
    },
    "baseline_sd": {
        "dist": "halfnormal",
        "sigma": 1.5,
        "doc": "between-animal SD of diet level (‰), per isotope",
        "source": "common practice",
    },
    "baseline_mean_sd": {
        "dist": "normal",
        "sigma": 5.0,
        "doc": "prior SD of a group's mean diet level around the data's mean (‰)",
        "source": "weakly informative (common practice)",
    },
    "walk_sd": {
        "dist": "halfnormal",
        "sigma": 0.3,
        "doc": "SD of diet random-walk increments per knot (‰), per isotope and group",
        "source": "common practice",
    },
    "walk_df": {
        "dist": "fixed",
        "value": 3.0,
        "doc": "degrees of freedom of Student-t diet increments: most steps small, an "
        "occasional diet shift large, without a per-animal scale (a funnel for NUTS)",
        "source": "common practice",
    },
    "walk_scale_log_sd": {
        "dist": "fixed",
        "value": 0.7,
        "doc": "between-animal SD of the log walk scale (lets diet shifters move)",
        "source": "common practice",
    },
    "walk_corr": {
        "dist": "normal",
        "mu": 0.3,
        "sigma": 0.5,
        "doc": "atanh of the N-C correlation of diet increments; trophic steps move both "
        "(≈ +3.4 ‰ N, +0.4 to +1 ‰ C per level, Post 2002)",
        "source": "Post 2002",
    },
    "shift_sd": {
        "dist": "halfnormal",
        "sigma": 1.5,
        "doc": "SD of the size of one explicit diet shift per animal (‰), per isotope",
        "source": "a trophic step moves δ15N ≈ +3.4 ‰ and δ13C +0.4 to +1 ‰ (Post 2002); "
        "habitat shifts move δ13C by several ‰ (common practice)",
    },
    "shift_corr": {
        "dist": "normal",
        "mu": 0.3,
        "sigma": 0.5,
        "doc": "atanh of the N-C correlation of diet-shift sizes",
        "source": "trophic steps move both isotopes the same way (Post 2002)",
    },
    "growth_log_mean_sd": {
        "dist": "fixed",
        "value": 0.1,
        "doc": "prior SD of a group's mean log growth multiplier (about 10 %): growth and "
        "episode onset trade off in keratin-only animals",
        "source": "common practice",
    },
    "extra_sd": {
        "dist": "halfnormal",
        "sigma": 0.15,
        "doc": "extra observation SD per tissue and isotope (‰) beyond analytical SD",
        "source": "EA-IRMS precision 0.1-0.2 ‰ (science.md); common practice",
    },
    "epsilon_loss": {
        "dist": "normal",
        "mu": -3.8,
        "sigma": 0.6,
        "doc": "ε of N loss (‰) for the Rayleigh body-N estimate (not in the likelihood)",
        "source": "urine ≈3.8 ‰ below plasma (Lee et al. 2012)",
    },
}


POSITIVE_FIELDS = ("sigma", "alpha", "beta")
"""Prior fields that must be > 0 (scales and Beta shapes)."""


def resolve_priors(overrides: dict[str, dict[str, Any]] | None = None) -> dict[str, dict[str, Any]]:
    """Merge user overrides into the default priors.

    Parameters
    ----------
    overrides
        ``{prior_name: {field: value}}``.

    Returns
    -------
    dict
        A deep copy of :data:`PRIORS` with the overrides applied.

    Raises
    ------
    ConfigError
        On an unknown prior or field, with a "did you mean" hint; on a value
        that is not a number, or a scale or Beta shape that is not > 0.
    """
    out = copy.deepcopy(PRIORS)
    for name, fields in (overrides or {}).items():
        if name not in out:
            hint = difflib.get_close_matches(name, out, n=1)
            extra = f"; did you mean '{hint[0]}'?" if hint else ""
            raise ConfigError(f"unknown prior '{name}'{extra}", key=f"priors.{name}")
        if not isinstance(fields, dict):
            raise ConfigError("expected a table of prior fields", key=f"priors.{name}")
        for f, v in fields.items():
            allowed = set(out[name]) - {"dist", "doc", "source"}
            if f not in allowed:
                hint = difflib.get_close_matches(f, allowed, n=1)
                extra = f"; did you mean '{hint[0]}'?" if hint else ""
                raise ConfigError(f"unknown field '{f}'{extra}", key=f"priors.{name}.{f}")
            if not isinstance(v, int | float) or isinstance(v, bool):
                raise ConfigError(f"expected a number, got {v!r}", key=f"priors.{name}.{f}")
            if f in POSITIVE_FIELDS and not v > 0:
                raise ConfigError(f"expected a value > 0, got {v!r}", key=f"priors.{name}.{f}")
            out[name][f] = float(v)
    return out

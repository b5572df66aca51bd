"""Keratin growth models: from a position along the tissue to the time it grew.

A growth model turns a distance ``x`` (mm) from the growing end (root/base,
the newest tissue) into *nominal days before collection* h(x), the age of
that tissue at the nominal growth rate. An individual's actual rate is the
nominal rate times a multiplier r (uncertain, log-normal); the model places
the tissue at ``collected − h(x)/r``. Linear growth and von Bertalanffy
growth both have this form, so the model needs only h(x) and r.

Add a growth model by subclassing :class:`GrowthModel` and registering it in
:data:`GROWTH_MODELS` (see ``DEVELOPERS.md``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nstress.errors import ConfigError


class GrowthModel:
    """Base class: maps positions to nominal days before collection and back."""

    name = "base"

    def days_before(
        self, x_mm: np.ndarray, total_mm: np.ndarray | float | None = None
    ) -> np.ndarray:
        """Nominal days before collection at which position ``x_mm`` grew.

        Parameters
        ----------
        x_mm
            Distance from the growing end (mm, ≥ 0).
        total_mm
            Total length of the piece (mm), needed by models whose rate
            depends on length.
        """
        raise NotImplementedError

    def position_at(
        self, days: np.ndarray, total_mm: np.ndarray | float | None = None
    ) -> np.ndarray:
        """Inverse of :meth:`days_before`: position (mm) that grew ``days`` before collection."""
        raise NotImplementedError


@dataclass(frozen=True)
class LinearGrowth(GrowthModel):
    """Constant growth rate: h(x) = x / g.

    Parameters
    ----------
    rate_mm_per_day
        Nominal growth rate g (mm/d), e.g. otariid whiskers 0.05–0.17 mm/d
        (Hirons et al. 2001; McHuron et al. 2016).
    """

    rate_mm_per_day: float
    name = "linear"

    def days_before(self, x_mm, total_mm=None):  # noqa: D102
        return np.asarray(x_mm, dtype=float) / self.rate_mm_per_day

    def position_at(self, days, total_mm=None):  # noqa: D102
        return np.asarray(days, dtype=float) * self.rate_mm_per_day


@dataclass(frozen=True)
class VonBertalanffyGrowth(GrowthModel):
    """Growth that slows as the piece approaches its asymptotic length.

    L(a) = L∞(1 − e^(−K a)) (von Bertalanffy; for phocid whiskers Beltran et
    al. 2015, McHuron et al. 2016). The newest tissue is at the root; the tip
    is the oldest. With total length L_c at collection, the tissue at x mm
    from the root grew when the piece was L_c − x long::

        h(x) = [ln(1 − (L_c − x)/L∞) − ln(1 − L_c/L∞)] / K

    Parameters
    ----------
    l_inf_mm
        Asymptotic length L∞ (mm).
    k_per_day
        Growth coefficient K (1/d); ≈ 0.03 /d for phocid whiskers (derived,
        science.md).
    """

    l_inf_mm: float
    k_per_day: float
    name = "von_bertalanffy"

    def _total(self, x, total_mm):
        if total_mm is None:
            raise ConfigError(
                "von Bertalanffy growth needs the total length of each piece", key="growth_model"
            )
        total = np.minimum(np.asarray(total_mm, dtype=float), 0.999 * self.l_inf_mm)
        return total

    def days_before(self, x_mm, total_mm=None):  # noqa: D102
        x = np.asarray(x_mm, dtype=float)
        total = self._total(x, total_mm)
        remaining = np.clip(total - x, 0.0, None)
        return (
            np.log1p(-remaining / self.l_inf_mm) - np.log1p(-total / self.l_inf_mm)
        ) / self.k_per_day

    def position_at(self, days, total_mm=None):  # noqa: D102
        d = np.asarray(days, dtype=float)
        total = self._total(d, total_mm)
        x = (self.l_inf_mm - total) * np.expm1(self.k_per_day * d)
        return np.minimum(x, total)

    def rate_at_root(self, total_mm: float) -> float:
        """Growth rate at the root at collection, K(L∞ − L_c) (mm/d)."""
        return self.k_per_day * (self.l_inf_mm - total_mm)


GROWTH_MODELS: dict[str, type[GrowthModel]] = {
    "linear": LinearGrowth,
    "von_bertalanffy": VonBertalanffyGrowth,
}


def make_growth(name: str, rate_mm_per_day: float, params: dict | None = None) -> GrowthModel:
    """Build a growth model by name.

    Parameters
    ----------
    name
        ``"linear"`` or ``"von_bertalanffy"``.
    rate_mm_per_day
        Nominal rate (linear models).
    params
        Extra parameters (``l_inf_mm``, ``k_per_day`` for von Bertalanffy).

    Returns
    -------
    GrowthModel
    """
    params = dict(params or {})
    if name == "linear":
        return LinearGrowth(float(rate_mm_per_day))
    if name == "von_bertalanffy":
        try:
            return VonBertalanffyGrowth(float(params["l_inf_mm"]), float(params["k_per_day"]))
        except KeyError as exc:
            raise ConfigError(
                f"von Bertalanffy growth needs {exc.args[0]!r}", key=f"growth_params.{exc.args[0]}"
            ) from None
    raise ConfigError(
        f"unknown growth model {name!r}; expected one of {sorted(GROWTH_MODELS)}",
        key="growth_model",
    )

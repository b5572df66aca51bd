"""External checks of the keratin growth models (position along the tissue -> time)."""

from __future__ import annotations

import numpy as np
import pytest

from nstress.errors import ConfigError
from nstress.growth import LinearGrowth, VonBertalanffyGrowth, make_growth


def _vb_length(age, l_inf, k):
    """Von Bertalanffy length L(a) = L_inf (1 - exp(-K a)) (von Bertalanffy 1938, from memory;
    phocid whiskers: Beltran et al. 2015 MEPS 523:243)."""
    return l_inf * (1.0 - np.exp(-k * age))


def _vb_age(length, l_inf, k):
    return -np.log1p(-length / l_inf) / k


def test_linear_growth_is_position_over_rate():
    # Linear growth h = x / g; otariid whiskers grow about 0.05-0.17 mm/d
    # (Hirons et al. 2001 Can J Zool 79:1053; McHuron et al. 2016 MEPS 554:213).
    g = LinearGrowth(0.10)
    x = np.array([0.0, 0.5, 3.0, 29.5])
    np.testing.assert_allclose(g.days_before(x), x / 0.10)
    assert g.days_before(3.0) == pytest.approx(30.0)
    np.testing.assert_allclose(g.position_at(g.days_before(x)), x)
    slow, fast = LinearGrowth(0.05), LinearGrowth(0.17)
    assert slow.days_before(10.0) == pytest.approx(200.0)
    assert fast.days_before(10.0) == pytest.approx(10.0 / 0.17)


@pytest.mark.parametrize("total", [20.0, 55.0, 90.0])
def test_von_bertalanffy_against_growth_curve(total):
    # K about 0.03 /d for phocid whiskers (derived; Beltran et al. 2015, McHuron et al. 2016).
    l_inf, k = 100.0, 0.03
    g = VonBertalanffyGrowth(l_inf, k)
    x = np.linspace(0.0, total, 23)
    # independently: the piece is `total` long at collection (age a_c); the tissue x mm from
    # the root grew when the piece was total - x long (age a); days before = a_c - a
    a_c = _vb_age(total, l_inf, k)
    a = _vb_age(total - x, l_inf, k)
    np.testing.assert_allclose(g.days_before(x, total), a_c - a, rtol=1e-10, atol=1e-10)
    # and forward through L(a): the length at (a_c - h) is total - x
    np.testing.assert_allclose(_vb_length(a_c - g.days_before(x, total), l_inf, k), total - x)


@pytest.mark.parametrize("total", [20.0, 55.0, 90.0])
def test_von_bertalanffy_inversion_round_trip(total):
    g = VonBertalanffyGrowth(100.0, 0.03)
    x = np.linspace(0.0, total * 0.999, 31)
    np.testing.assert_allclose(g.position_at(g.days_before(x, total), total), x, atol=1e-9)
    d = np.linspace(0.0, 50.0, 11)
    back = g.days_before(g.position_at(d, total), total)
    # positions beyond the tip are capped at the tip
    ok = g.position_at(d, total) < total
    np.testing.assert_allclose(back[ok], d[ok], rtol=1e-9, atol=1e-9)


def test_von_bertalanffy_rate_at_root():
    # dL/da = K (L_inf - L) (derivative of the von Bertalanffy curve); at the root at collection
    # the piece grows at K (L_inf - L_c) mm/d.
    l_inf, k, total = 100.0, 0.03, 40.0
    g = VonBertalanffyGrowth(l_inf, k)
    assert g.rate_at_root(total) == pytest.approx(k * (l_inf - total))
    eps = 1e-6
    numeric = (g.position_at(eps, total) - g.position_at(0.0, total)) / eps
    assert numeric == pytest.approx(g.rate_at_root(total), rel=1e-5)
    a_c = _vb_age(total, l_inf, k)
    curve = (_vb_length(a_c + eps, l_inf, k) - _vb_length(a_c - eps, l_inf, k)) / (2 * eps)
    assert curve == pytest.approx(g.rate_at_root(total), rel=1e-6)
    # growth was fastest while the piece was short: each tip-side mm took fewer days
    h = g.days_before(np.array([0.0, 10.0, 20.0, 30.0, 40.0]), total)
    assert np.all(np.diff(np.diff(h)) < 0)


def test_make_growth_and_errors():
    assert make_growth("linear", 0.1) == LinearGrowth(0.1)
    vb = make_growth("von_bertalanffy", 0.0, {"l_inf_mm": 80, "k_per_day": 0.02})
    assert isinstance(vb, VonBertalanffyGrowth) and vb.l_inf_mm == 80.0
    with pytest.raises(ConfigError, match="k_per_day"):
        make_growth("von_bertalanffy", 0.0, {"l_inf_mm": 80})
    with pytest.raises(ConfigError, match="unknown growth model 'cubic'"):
        make_growth("cubic", 0.1)
    with pytest.raises(ConfigError, match="total length"):
        vb.days_before(np.array([1.0]))

"""External checks of the preparation-layer equations (nstress._chem_equations)."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from nstress import _chem_equations as ce


# --- δ definition -------------------------------------------------------------------------
def test_delta_definition_on_air_nitrogen():
    # δ = R/R_std − 1, in ‰ (Coplen 2011). R_AIR(15N/14N) = 1/272: IUPAC recommendation
    # n(14N)/n(15N) = 272 for N2 in air (CIAAW, 1991). A sample 1 % richer in 15N:
    # R = 1.01/272 -> δ = (1.01 − 1)·1000 = +10 ‰ by hand.
    assert ce.R_AIR_15N == pytest.approx(1 / 272)
    assert ce.delta_from_ratio(1.01 / 272, ce.R_AIR_15N) == pytest.approx(10.0, abs=1e-9)
    # and back: R = (1/272)·(1 + 10/1000) = 1.01/272
    assert ce.ratio_from_delta(10.0, ce.R_AIR_15N) == pytest.approx(1.01 / 272, rel=1e-12)


def test_delta_on_vpdb_carbon_from_memory():
    # R_VPDB(13C/12C) = 0.0111802 is from memory. R = 0.0111802·0.975 is 2.5 % poorer in 13C:
    # δ = (0.975 − 1)·1000 = −25 ‰ by hand (Coplen 2011 definition).
    assert ce.delta_from_ratio(0.0111802 * 0.975, ce.R_VPDB_13C) == pytest.approx(-25.0)


@given(st.floats(min_value=-500, max_value=2000, allow_nan=False))
def test_delta_ratio_identity(d):
    # delta(ratio(δ)) = δ for any δ, both scales (Coplen 2011 definition is invertible)
    for std in (ce.R_AIR_15N, ce.R_VPDB_13C):
        assert ce.delta_from_ratio(ce.ratio_from_delta(d, std), std) == pytest.approx(
            d, abs=1e-9 * max(1.0, abs(d))
        )


# --- C:N ----------------------------------------------------------------------------------
def test_cn_atomic_from_mass_percent():
    # (45/12.011)/(15/14.007) = 3 · 14.007/12.011 = 3 · 1.166181 = 3.49854 by hand
    # (atomic weights 12.011, 14.007; atomic C:N as used for collagen QC, DeNiro 1985)
    assert ce.cn_atomic(45.0, 15.0) == pytest.approx(3.49854, abs=1e-5)
    # mass C:N 3.0 -> atomic 3.4985 -> back to mass 3.0
    assert ce.cn_mass_from_atomic(ce.cn_atomic(45.0, 15.0)) == pytest.approx(3.0)
    out = ce.cn_atomic(np.array([45.0, 40.0, np.nan]), np.array([0.0, 14.0, 15.0]))
    assert np.isnan(out[0]) and np.isnan(out[2])
    # 40/12.011 = 3.330281; 14/14.007 = 0.999500; ratio = 3.331947 by hand
    assert out[1] == pytest.approx(3.331947, abs=1e-5)


# --- lipid normalisation ------------------------------------------------------------------
def test_post2007_worked_number():
    # Post et al. 2007 (coefficients from memory): δ13C − 3.32 + 0.99·C:N
    # δ13C −20.0, C:N 4.0: −20.0 − 3.32 + 3.96 = −19.36 by hand
    assert ce.lipid_post2007(-20.0, 4.0) == pytest.approx(-19.36)
    # C:N 3.5 (Post's "no correction needed" limit): −3.32 + 3.465 = +0.145 ‰ shift
    assert ce.lipid_post2007(-18.0, 3.5) - (-18.0) == pytest.approx(0.145)


def test_kiljunen2006_worked_number():
    # McConnaughey & McRoy 1979 model, Kiljunen et al. 2006 constants (from memory):
    # C:N 4.0: x = 0.246·4 − 0.775 = 0.209; L = 93/(1 + 1/0.209) = 93·0.209/1.209 = 16.0769 %
    # 287/L = 17.8517; 3.90/(1 + 17.8517) = 0.206878; shift = 7.018·(0.048 + 0.206878) = 1.78874
    # δ13C′ = −20.0 + 1.78874 = −18.21126
    assert ce.kiljunen_lipid_percent(4.0) == pytest.approx(16.0769, abs=1e-4)
    assert ce.lipid_kiljunen2006(-20.0, 4.0) == pytest.approx(-18.21126, abs=1e-4)
    # C:N 5.0: x = 0.455; L = 93·0.455/1.455 = 29.0825; 287/L = 9.86849;
    # 3.90/10.86849 = 0.358836; shift = 7.018·0.406836 = 2.85517
    assert ce.lipid_kiljunen2006(-22.0, 5.0) == pytest.approx(-22.0 + 2.85517, abs=1e-4)


def test_kiljunen_zero_lipid_limit():
    # At C:N ≤ 0.775/0.246 = 3.150 the model's lipid L reaches 0; the shift is D·I = 7.018·0.048
    # = 0.336864 ‰ (by hand), reached continuously from above.
    assert ce.kiljunen_lipid_percent(3.0) == 0.0
    assert ce.lipid_kiljunen2006(0.0, 3.0) == pytest.approx(0.336864)
    just_above = ce.lipid_kiljunen2006(0.0, 0.775 / 0.246 + 1e-9)
    assert just_above == pytest.approx(0.336864, abs=1e-6)
    assert np.isnan(ce.lipid_kiljunen2006(-20.0, np.nan))


# --- two-point scale normalisation --------------------------------------------------------
# Assigned values: USGS40 δ15N −4.52, δ13C −26.39; USGS41a δ15N +47.55, δ13C +36.55
# (Qi et al. 2003; Qi et al. 2016); IAEA-N-2 δ15N +20.41 (IUPAC-CIAAW table).
USGS40 = {"d15N": -4.52, "d13C": -26.39}
USGS41A = {"d15N": 47.55, "d13C": 36.55}
IAEA_N2_D15N = 20.41


@pytest.mark.parametrize("iso, stretch, shift", [("d15N", 0.98, 0.35), ("d13C", 1.015, -0.8)])
def test_two_point_recovers_reference_values(iso, stretch, shift):
    # Simulate a working scale: measured = stretch·true + shift; normalise (Paul et al. 2007)
    m1 = stretch * USGS40[iso] + shift
    m2 = stretch * USGS41A[iso] + shift
    back = ce.two_point_normalise(np.array([m1, m2]), m1, USGS40[iso], m2, USGS41A[iso])
    np.testing.assert_allclose(back, [USGS40[iso], USGS41A[iso]], atol=1e-12)
    slope, intercept = ce.two_point_line(m1, USGS40[iso], m2, USGS41A[iso])
    assert slope == pytest.approx(1 / stretch)
    assert intercept == pytest.approx(-shift / stretch)


def test_two_point_check_standard_within_tolerance():
    # IAEA-N-2 (+20.41 ‰) measured on the same working scale with 0.04 ‰ measurement error
    stretch, shift = 0.97, 1.2  # measured IAEA-N-2 = 0.97·20.41 + 1.2 + 0.04 = 21.1377
    m1 = stretch * USGS40["d15N"] + shift
    m2 = stretch * USGS41A["d15N"] + shift
    m_check = stretch * IAEA_N2_D15N + shift + 0.04
    got = ce.two_point_normalise(m_check, m1, USGS40["d15N"], m2, USGS41A["d15N"])
    assert got == pytest.approx(IAEA_N2_D15N, abs=0.1)
    assert abs(m_check - IAEA_N2_D15N) > 0.5  # uncorrected it would fail the check


def test_least_squares_line_equals_two_point_and_fits_three_anchors():
    x = np.array([-4.0796, 46.949])
    y = np.array([USGS40["d15N"], USGS41A["d15N"]])
    assert ce.scale_line_lstsq(x, y) == pytest.approx(ce.two_point_line(x[0], y[0], x[1], y[1]))
    # three anchors on one line (USGS25 −30.41, IAEA-N-1 +0.43, USGS41a +47.55; CIAAW, Qi 2016)
    true = np.array([-30.41, 0.43, 47.55])
    meas = 0.97 * true + 0.2
    slope, intercept = ce.scale_line_lstsq(meas, true)
    assert slope == pytest.approx(1 / 0.97) and intercept == pytest.approx(-0.2 / 0.97)
    with pytest.raises(ValueError):
        ce.scale_line_lstsq([1.0, 1.0], [0.0, 5.0])
    with pytest.raises(ZeroDivisionError):
        ce.two_point_line(1.0, 0.0, 1.0, 5.0)

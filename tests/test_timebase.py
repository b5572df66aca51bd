"""The time base: grids, keratin segment edges, masks, padding and growth overrides."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from nstress import equations as eq
from nstress.errors import InputError
from nstress.model.simulate import table_to_samples
from nstress.prep.timebase import DEFAULT_SEGMENT_MM, GROWTH_SD_SPAN, build_timebase
from nstress.tissues import DEFAULT_TISSUES, resolve_tissues

EPOCH = np.datetime64("1970-01-01", "D")


def _whisker(ind, positions, collected, lengths=None, group="g1", **extra):
    n = len(positions)
    return pd.DataFrame(
        {
            "individual": ind,
            "tissue": "whisker",
            "d15N": np.linspace(15.0, 16.0, n),
            "d13C": np.linspace(-14.0, -14.5, n),
            "position_mm": positions,
            "segment_length_mm": lengths if lengths is not None else np.nan,
            "collected": collected,
            "group": group,
            **extra,
        }
    )


def _blood(ind, tissue, dates, group="g1"):
    return pd.DataFrame(
        {
            "individual": ind,
            "tissue": tissue,
            "d15N": 17.0,
            "d13C": -16.0,
            "date": dates,
            "group": group,
        }
    )


def _tb(*frames, tissues=None, **kw):
    return build_timebase(table_to_samples(pd.concat(frames, ignore_index=True)), tissues, **kw)


@pytest.mark.parametrize("tissue", ["rbc", "plasma"])
def test_grid_covers_three_half_lives_before_first_blood(tissue):
    # Half-lives: plasma 4.3 d, red cells about 30 d (Hahn et al. 2012 PLoS ONE 7:e30242); a
    # one-compartment tissue forgets all but 2^-3 of its past after three half-lives
    # (Tieszen et al. 1983, from memory).
    dates = ["2024-03-10", "2024-03-17", "2024-03-24"]
    tb = _tb(_blood("X1", tissue, dates), bin_width=4.0)
    t12 = DEFAULT_TISSUES[tissue].half_life_days
    first = tb.blood.t[0, 0]
    assert first >= 3 * t12
    assert first < 3 * t12 + 4.0 + 1.0  # not much more than needed
    # draws sit at noon of their dates
    drawn = tb.origin[0] + np.floor(tb.blood.t[0]).astype("timedelta64[D]")
    assert list(np.datetime_as_string(drawn, unit="D")) == dates
    np.testing.assert_allclose(tb.blood.t[0] % 1.0, 0.5)
    # the grid holds at least 1 - 2^-3 of the first draw's kernel weight
    lam = np.log(2) / t12
    edges = tb.bin_lo
    raw = np.exp(-lam * np.clip(first - edges - 4.0, 0, None)) - np.exp(
        -lam * np.clip(first - edges, 0, None)
    )
    assert raw.sum() >= 1 - 2.0**-3 - 1e-12
    # the last bin contains the last draw
    assert tb.blood.t[0, -1] <= tb.n_bins[0] * tb.bin_width


def test_keratin_segment_edges_linear_growth():
    # Linear growth h = x / g with the whisker default g = 0.10 mm/d (otariid whiskers
    # 0.05-0.17 mm/d, Hirons et al. 2001; McHuron et al. 2016).
    x = np.array([0.5, 1.5, 2.5, 3.5, 4.5])
    tb = _tb(_whisker("X1", x, "2024-03-01", lengths=1.0))
    k = tb.keratin
    order = np.argsort(k.h_lo[0])
    np.testing.assert_allclose(k.h_lo[0, order], (x - 0.5) / 0.10)
    np.testing.assert_allclose(k.h_hi[0, order], (x + 0.5) / 0.10)
    # collection at noon of the collection date, relative to the origin
    t_c = (np.datetime64("2024-03-01") - tb.origin[0]).astype(float) + 0.5
    np.testing.assert_allclose(k.t[0], t_c)
    # the grid reaches back to the slowest plausible growth plus the soft edges
    td = DEFAULT_TISSUES["whisker"]
    need = 50.0 / np.exp(-GROWTH_SD_SPAN * td.growth_sd_log) + 3 * td.softness_days
    assert t_c >= need
    assert t_c < need + 1.0 + 1e-9
    np.testing.assert_allclose(tb.growth_sd_log[0], td.growth_sd_log)


def test_table_growth_rate_overrides_default():
    x = np.array([0.5, 1.5])
    tb = _tb(
        _whisker(
            "X1", x, "2024-03-01", lengths=1.0, growth_mm_per_day=0.05, growth_sd_mm_per_day=0.01
        )
    )
    np.testing.assert_allclose(np.sort(tb.keratin.h_hi[0]), (x + 0.5) / 0.05)
    np.testing.assert_allclose(tb.growth_sd_log[0, 0], np.log1p(0.01 / 0.05))


def test_masks_padding_and_bin_dates():
    a = pd.concat(
        [
            _whisker("A", [0.5, 1.5, 2.5, 3.5, 4.5], "2024-03-01", lengths=1.0),
            _blood("A", "plasma", ["2024-01-05", "2024-01-12"]),
        ]
    )
    b = _whisker("B", [0.5, 1.5, 2.5], "2024-02-01", lengths=1.0, group="g2")
    tb = _tb(a, b)
    assert list(tb.individuals) == ["A", "B"]
    assert list(tb.groups) == ["g1", "g2"] and list(tb.group_index) == [0, 1]
    assert tb.tissues == ["plasma", "whisker"] and tb.keratin_tissues == ["whisker"]
    assert tb.keratin.mask.sum(1).tolist() == [5, 3]
    assert tb.blood.mask.sum(1).tolist() == [2, 0]
    assert np.all(tb.keratin.sample[1, 3:] == -1) and np.all(tb.blood.sample[1] == -1)
    # every real observation points at its own row of the placed samples
    s = tb.samples
    rows = tb.keratin.sample[tb.keratin.mask]
    assert sorted(rows.tolist()) == sorted(np.flatnonzero(s["tissue"] == "whisker").tolist())
    assert set(s.loc[tb.blood.sample[0, :2], "tissue"]) == {"plasma"}
    # padding: T is the largest grid; masks follow n_bins
    assert tb.T == tb.n_bins.max()
    assert tb.bin_mask.sum(1).tolist() == tb.n_bins.tolist()
    assert tb.n_bins[0] > tb.n_bins[1]
    dates = tb.bin_dates()
    assert np.all(np.isnat(dates[1, tb.n_bins[1] :]))
    expected = tb.origin[0] + np.floor(tb.bin_mid[: tb.n_bins[0]]).astype("timedelta64[D]")
    assert np.array_equal(dates[0, : tb.n_bins[0]], expected)
    # the last bin contains the last sample
    last = np.r_[tb.keratin.t[0][tb.keratin.mask[0]], tb.blood.t[0][tb.blood.mask[0]]].max()
    assert (tb.n_bins[0] - 1) * tb.bin_width <= last + tb.bin_width
    assert last < tb.n_bins[0] * tb.bin_width
    # origin offsets are relative to each group's earliest origin (one animal per group here)
    np.testing.assert_allclose(tb.origin_offset, 0.0)


def test_missing_isotope_masked_and_default_sd():
    w = _whisker("A", [0.5, 1.5], "2024-03-01", lengths=1.0)
    w.loc[1, "d13C"] = np.nan
    w["sd_d15N"] = [0.2, np.nan]
    tb = _tb(w)
    k = tb.keratin
    row = np.flatnonzero(tb.samples.loc[k.sample[0], "d13C"].isna().to_numpy())[0]
    assert k.y_mask[0, row].tolist() == [True, False]
    assert k.y_mask[0, 1 - row].tolist() == [True, True]
    assert sorted(k.sd[0, :, 0].tolist()) == [0.15, 0.2]  # missing SD -> 0.15 (common practice)


def test_inferred_segment_lengths_from_neighbours():
    # midpoints 1, 2, 4 mm: the first segment takes its only gap (1), the middle one the mean
    # of its gaps (1.5), the last its only gap (2)
    tb = _tb(_whisker("A", [1.0, 2.0, 4.0], "2024-03-01"), _whisker("B", [3.0], "2024-03-01"))
    k = tb.keratin
    lengths = (k.h_hi - k.h_lo) * 0.10
    order = np.argsort(k.h_lo[0])
    np.testing.assert_allclose(lengths[0, order], [1.0, 1.5, 2.0])
    np.testing.assert_allclose(k.h_lo[0, order], np.array([0.5, 1.25, 3.0]) / 0.10)
    # a lone segment falls back to the default length
    assert lengths[1, 0] == pytest.approx(DEFAULT_SEGMENT_MM)


def test_von_bertalanffy_tissue_via_override():
    # Von Bertalanffy L(a) = L_inf (1 - exp(-K a)) for phocid whiskers, K about 0.03 /d
    # (Beltran et al. 2015 MEPS 523:243; McHuron et al. 2016).
    l_inf, kk = 100.0, 0.03
    reg = resolve_tissues(
        {
            "whisker": {
                "growth_model": "von_bertalanffy",
                "growth_params": {"l_inf_mm": l_inf, "k_per_day": kk},
            }
        }
    )
    x = np.arange(10) + 0.5
    tb = _tb(_whisker("A", x, "2024-03-01", lengths=1.0), tissues=reg)
    total = 10.0  # tip of the piece: last midpoint + half a segment

    def age(length):
        return -np.log1p(-length / l_inf) / kk

    a_c = age(total)
    k = tb.keratin
    order = np.argsort(k.h_lo[0])
    np.testing.assert_allclose(k.h_lo[0, order], a_c - age(total - (x - 0.5)), atol=1e-9)
    np.testing.assert_allclose(k.h_hi[0, order], a_c - age(total - (x + 0.5)), atol=1e-9)
    # near the root the rate is K (L_inf - L_c) = 2.7 mm/d: the root segment spans ~0.37 d
    assert k.h_hi[0, order[0]] == pytest.approx(1.0 / (kk * (l_inf - total)), rel=0.02)


def test_draws_and_growth_windows_fit_on_the_grid():
    tb = _tb(
        _whisker("A", np.arange(20) + 0.5, "2024-03-01", lengths=1.0),
        _blood("A", "plasma", ["2024-01-05", "2024-01-12", "2024-01-19"]),
        _blood("A", "rbc", ["2024-01-05", "2024-01-12", "2024-01-19"]),
        _whisker("B", np.arange(5) + 0.5, "2024-02-01", lengths=1.0),  # B has no blood
    )
    # every draw (real or pad) has one-compartment weights on the grid that sum to 1 (the
    # pool is held constant before the grid); half-lives 4.3 d and 30 d (Hahn et al. 2012)
    half = {"plasma": 4.3, "rbc": 30.0, "whisker": np.inf}
    rate = np.log(2) / np.array([half[t] for t in tb.tissues])
    b = tb.blood
    assert b.mask.sum(1).tolist() == [6, 0]
    w = eq.blood_weights(b.t[..., None], tb.bin_lo, tb.bin_width, rate[b.tissue][..., None])
    assert w.shape == (2, 6, tb.T)
    np.testing.assert_allclose(w.sum(-1), 1.0, rtol=0, atol=1e-12)
    assert np.all(b.t[b.mask] < tb.n_bins[np.nonzero(b.mask)[0]] * tb.bin_width)
    assert set(tb.tissues[j] for j in b.tissue[b.mask]) == {"plasma", "rbc"}
    # every growth window [t_c - h_hi/r, t_c - h_lo/r] lies on the individual's grid for
    # growth from the slowest plausible (GROWTH_SD_SPAN SDs below nominal) to twice nominal
    k = tb.keratin
    ii = np.nonzero(k.mask)[0]
    slowest = np.exp(-GROWTH_SD_SPAN * tb.growth_sd_log[ii, k.slot[k.mask]])
    for r in (slowest, 1.0, 2.0):
        start = k.t[k.mask] - k.h_hi[k.mask] / r
        end = k.t[k.mask] - k.h_lo[k.mask] / r
        assert np.all(start >= 0.0) and np.all(start < end)
        assert np.all(end <= tb.n_bins[ii] * tb.bin_width)


def test_missing_date_raises_input_error():
    b = _blood("A", "plasma", ["2024-01-05", None])
    with pytest.raises(InputError, match=r"row 2.*column 'date'"):
        _tb(b)

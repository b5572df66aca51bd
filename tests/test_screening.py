import numpy as np
import pytest

from nstress.errors import ConfigError
from nstress.model.priors import resolve_priors
from nstress.products.recovery import auc
from nstress.products.screening import (
    STATUSES,
    ScreeningRules,
    assign_status,
    wilson_interval,
)


def test_every_status_is_reachable():
    p = np.array([0.95, 0.5, 0.05, 0.9, 0.9, 0.6])
    n = np.array([30, 30, 30, 2, 30, 30])
    n_c = np.array([30, 30, 30, 2, 30, 0])
    ok = np.array([True, True, True, True, False, True])
    status, reason = assign_status(p, n, n_c, ok, ScreeningRules())
    assert list(status) == [
        "catabolic",
        "possible",
        "clear",
        "cannot_tell",
        "fit_failed",
        "cannot_tell",
    ]
    assert set(status) == set(STATUSES)
    assert "fewer than 4 samples" in reason[3]
    assert "δ13C" in reason[5]


def test_flat_d15n_without_d13c_is_still_clear():
    # a flat δ15N excludes both a fast and a trophic shift, δ13C or not
    status, _ = assign_status(np.array([0.05]), np.array([20]), np.array([0]), np.array([True]))
    assert status[0] == "clear"


def test_thresholds_are_configurable():
    rules = ScreeningRules(flag=0.6, clear=0.1)
    status, _ = assign_status(
        np.array([0.65, 0.15]), np.array([9, 9]), np.array([9, 9]), np.array([True, True]), rules
    )
    assert list(status) == ["catabolic", "possible"]


def test_auc_matches_textbook_example():
    # The standard worked example: labels (0, 0, 1, 1) with scores (0.1, 0.4, 0.35, 0.8)
    # give AUC 0.75 (Fawcett 2006, Pattern Recognit Lett 27:861; the Mann-Whitney form).
    assert auc(np.array([0.1, 0.4, 0.35, 0.8]), np.array([0, 0, 1, 1])) == pytest.approx(0.75)
    assert auc(np.array([0.2, 0.2]), np.array([0, 1])) == pytest.approx(0.5)  # ties count 1/2


def test_prior_overrides_and_hints():
    pr = resolve_priors({"gamma": {"mu": 0.2}})
    assert pr["gamma"]["mu"] == 0.2 and pr["gamma"]["sigma"] == 0.3
    with pytest.raises(ConfigError, match="did you mean 'gamma'"):
        resolve_priors({"gama": {"mu": 0.0}})
    with pytest.raises(ConfigError, match="did you mean 'sigma'"):
        resolve_priors({"gamma": {"sigmaa": 1.0}})
    with pytest.raises(ConfigError, match="expected a number"):
        resolve_priors({"gamma": {"mu": "x"}})


def test_short_period_and_too_few_tissues_cannot_tell():
    from nstress.products.screening import assign_status

    p = np.array([0.95, 0.95, 0.05, 0.95])
    n = np.array([30, 30, 30, 30])
    status, reason = assign_status(
        p,
        n,
        n,
        np.ones(4, bool),
        ScreeningRules(min_tissues=2),
        span_days=np.array([200.0, 8.0, 8.0, 200.0]),
        n_tissues=np.array([2, 2, 2, 1]),
    )
    assert list(status) == ["catabolic", "cannot_tell", "cannot_tell", "cannot_tell"]
    assert "less than 16 days" in reason[1] and "fewer than 2 tissues" in reason[3]
    # default: one tissue with δ13C is enough
    status, _ = assign_status(
        p[:1],
        n[:1],
        n[:1],
        np.ones(1, bool),
        span_days=np.array([200.0]),
        n_tissues=np.array([1]),
    )
    assert status[0] == "catabolic"


def test_rules_from_config_check_keys_and_values():
    assert ScreeningRules.from_config({"flag": 0.9, "min_span_days": 30}).flag == 0.9
    with pytest.raises(ConfigError, match="did you mean 'min_samples'"):
        ScreeningRules.from_config({"min_sample": 3})
    with pytest.raises(ConfigError, match="clear < flag"):
        ScreeningRules.from_config({"flag": 0.3, "clear": 0.5})
    with pytest.raises(ConfigError, match="expected a number"):
        ScreeningRules.from_config({"flag": "high"})


def test_wilson_interval_matches_published_values():
    # Newcombe 1998 (Stat Med 17:857), Table II, method 3 (score, no continuity correction),
    # 95 % limits (from memory; the closed form of Wilson 1927 gives the same four places)
    cases = [
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ]
    for k, n, lo, hi in cases:
        got = wilson_interval(k, n, 0.95)
        assert float(got[0]) == pytest.approx(lo, abs=6e-5)
        assert float(got[1]) == pytest.approx(hi, abs=6e-5)
    lo90, hi90 = wilson_interval(15, 148, 0.9)
    assert 0.0624 < lo90 < 15 / 148 < hi90 < 0.1605  # narrower at 90 %


def test_colony_summary_counts_shares_and_onsets():
    import pandas as pd

    from nstress.products.screening import colony_summary

    sc = pd.DataFrame(
        {
            "individual": ["a", "b", "c", "d", "e"],
            "group": ["g1", "g1", "g1", "g1", "g2"],
            "status": ["catabolic", "catabolic", "possible", "clear", "cannot_tell"],
            "onset_date": ["2024-11-01", "2024-11-09", "2024-11-05", None, "2024-12-01"],
            "catabolic_days_mean": [30.0, 20.0, 5.0, 0.5, 3.0],
        }
    )
    episode = np.array([[1, 1, 0, 0, 1], [1, 1, 1, 0, 0]], bool)
    cs = colony_summary(sc, episode, np.array(["g1", "g2"]), np.array([0, 0, 0, 0, 1]))
    g1 = cs.set_index("group").loc["g1"]
    assert g1["n_animals"] == 4 and g1["n_catabolic"] == 2 and g1["share_flagged"] == 0.5
    lo, hi = wilson_interval(2, 4, 0.9)
    assert g1["share_flagged_lo"] == pytest.approx(lo) and g1["share_flagged_hi"] == pytest.approx(
        hi
    )
    assert g1["onset_n"] == 3 and g1["onset_first"] == "2024-11-01"
    assert g1["onset_median"] == "2024-11-05" and g1["onset_last"] == "2024-11-09"
    assert g1["catabolic_days_total"] == pytest.approx(55.5)
    assert g1["share_with_episode_mean"] == pytest.approx((0.5 + 0.75) / 2)
    g2 = cs.set_index("group").loc["g2"]
    assert g2["n_cannot_tell"] == 1 and g2["onset_n"] == 0 and pd.isna(g2["onset_median"])


def test_wilson_interval_matches_statsmodels():
    # Wilson 1927 score interval, as implemented independently by statsmodels
    # (proportion_confint, method="wilson")
    from statsmodels.stats.proportion import proportion_confint

    k = np.array([0, 1, 3, 5, 6, 17])
    n = np.array([6, 6, 6, 6, 6, 40])
    lo, hi = wilson_interval(k, n)
    ref_lo, ref_hi = proportion_confint(k, n, alpha=0.10, method="wilson")
    np.testing.assert_allclose(lo, ref_lo, atol=1e-12)
    np.testing.assert_allclose(hi, ref_hi, atol=1e-12)


def test_wilson_interval_closed_forms_at_the_edges():
    # Wilson 1927: with k = 0 the interval is [0, z²/(n + z²)], with k = n it
    # is [n/(n + z²), 1]
    z = 1.6448536269514722
    lo, hi = wilson_interval(0, 5)
    assert lo == 0 and hi == pytest.approx(z * z / (5 + z * z))
    lo, hi = wilson_interval(5, 5)
    assert hi == 1 and lo == pytest.approx(5 / (5 + z * z))

import numpy as np
import pytest

from nstress.errors import ConfigError
from nstress.model.priors import resolve_priors
from nstress.products.recovery import auc
from nstress.products.screening import STATUSES, ScreeningRules, assign_status


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

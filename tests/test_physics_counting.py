"""Counting distributions of prompt optical crosstalk against their published formulas.

Outside references used here:
- the generalised Poisson distribution P(k) = mu (mu + k lam)^(k-1) exp(-mu - k lam) / k!, its mean
  mu / (1 - lam) and variance mu / (1 - lam)^3 (Vinogradov, NIM A 695, 247, 2012; Consul and Jain,
  Technometrics 15, 791, 1973), evaluated here term by term in plain Python (math.exp, math.factorial);
- its lam = 0 limit, the Poisson distribution of scipy.stats.poisson;
- the Borel distribution P(k) = exp(-lam k) (lam k)^(k-1) / k! (Borel 1942), mean 1 / (1 - lam) and
  variance lam / (1 - lam)^3 (quoted from memory; checked here by summing the series);
- p = 1 - exp(-lambda) for a Poisson number of secondaries (Vinogradov 2012).
"""

from math import exp, factorial

import numpy as np
import pytest
from scipy import stats

from compensator.errors import ModelError
from compensator.physics.counting import (
    borel_pmf,
    crosstalk_probability_from_branching_ratio,
    generalized_poisson_pmf,
)
from compensator.physics.sipm import crosstalk_branching_ratio


def _gp_by_hand(k, mu, lam):
    # Vinogradov 2012, term by term in plain floats.
    return mu * (mu + k * lam) ** (k - 1) * exp(-mu - k * lam) / factorial(k)


def _borel_by_hand(k, lam):
    # Borel distribution, term by term.
    return exp(-lam * k) * (lam * k) ** (k - 1) / factorial(k)


def test_generalized_poisson_term_by_term():
    for mu, lam in ((0.4, 0.0), (1.5, 0.15), (3.0, 0.45), (0.02, 0.9)):
        k = np.arange(12)
        expected = [_gp_by_hand(int(n), mu, lam) for n in k]
        np.testing.assert_allclose(generalized_poisson_pmf(k, mu, lam), expected, rtol=1e-12, atol=0)
    # k = 0 is the pedestal exp(-mu) whatever the crosstalk; k = 1 is mu exp(-mu - lam).
    assert float(generalized_poisson_pmf(0, 2.0, 0.3)) == pytest.approx(exp(-2.0), rel=1e-14, abs=0)
    assert float(generalized_poisson_pmf(1, 2.0, 0.3)) == pytest.approx(2.0 * exp(-2.3), rel=1e-14, abs=0)
    # scipy.stats.poisson without crosstalk, far into the tail.
    k = np.arange(80)
    np.testing.assert_allclose(generalized_poisson_pmf(k, 9.5, 0.0), stats.poisson.pmf(k, 9.5), rtol=1e-11, atol=0)


def test_generalized_poisson_moments_and_the_dark_pedestal():
    # Mean mu/(1-lam), variance mu/(1-lam)^3 (Vinogradov 2012), from the probabilities.
    k = np.arange(300)
    p = generalized_poisson_pmf(k, 2.0, 0.3)
    mean = float(np.sum(k * p))
    assert p.sum() == pytest.approx(1.0, abs=1e-12)
    assert mean == pytest.approx(2.0 / 0.7, rel=1e-10, abs=0)
    assert float(np.sum((k - mean) ** 2 * p)) == pytest.approx(2.0 / 0.7 ** 3, rel=1e-9, abs=0)
    # mu = 0 next to mu > 0 in one call: no light fires no cell, with probability 1.
    out = generalized_poisson_pmf(np.array([[0], [1], [2]]), np.array([0.0, 0.5]), 0.2)
    expected = [[1.0, exp(-0.5)], [0.0, _gp_by_hand(1, 0.5, 0.2)], [0.0, _gp_by_hand(2, 0.5, 0.2)]]
    np.testing.assert_allclose(out, expected, rtol=1e-13, atol=0)
    assert out.shape == (3, 2) and out.dtype == np.float64


@pytest.mark.parametrize("k, mu, lam, reason", [
    (-1, 1.0, 0.1, "generalized_poisson_pmf: k must be non-negative integers"),
    (1.5, 1.0, 0.1, "generalized_poisson_pmf: k must be non-negative integers"),
    (np.inf, 1.0, 0.1, "generalized_poisson_pmf: k must be non-negative integers"),
    (1, 1.0, 1.0, "generalized_poisson_pmf: lam must lie in [0, 1)"),
    (1, 1.0, -0.01, "generalized_poisson_pmf: lam must lie in [0, 1)"),
    (1, 1.0, np.nan, "generalized_poisson_pmf: lam must lie in [0, 1)"),
    (1, -0.1, 0.1, "generalized_poisson_pmf: mu must be finite and >= 0"),
    (1, np.inf, 0.1, "generalized_poisson_pmf: mu must be finite and >= 0"),
])
def test_generalized_poisson_refusals(k, mu, lam, reason):
    with pytest.raises(ModelError) as info:
        generalized_poisson_pmf(k, mu, lam)
    assert info.value.reason == reason


def test_borel_term_by_term_and_moments():
    k = np.arange(1, 15)
    for lam in (0.05, 0.3, 0.7):
        np.testing.assert_allclose(borel_pmf(k, lam), [_borel_by_hand(int(n), lam) for n in k], rtol=1e-12, atol=0)
    # Mean 1/(1-lam), variance lam/(1-lam)^3 (Borel distribution), summed far into the tail.
    k = np.arange(0, 2000)
    p = borel_pmf(k, 0.4)
    mean = float(np.sum(k * p))
    assert p.sum() == pytest.approx(1.0, abs=1e-12)
    assert mean == pytest.approx(1 / 0.6, rel=1e-10, abs=0)
    assert float(np.sum((k - mean) ** 2 * p)) == pytest.approx(0.4 / 0.6 ** 3, rel=1e-9, abs=0)
    # No avalanche without a primary: P(0) = 0; without crosstalk exactly one cell fires.
    assert borel_pmf([0, 1, 2, 3], 0.0).tolist() == [0.0, 1.0, 0.0, 0.0]
    assert float(borel_pmf(0, 0.4)) == 0.0
    # It is the mu -> 0 limit of the generalised Poisson given at least one cell fired (Vinogradov 2012).
    mu = 1e-7
    gp = generalized_poisson_pmf(np.arange(1, 8), mu, 0.4)
    np.testing.assert_allclose(gp / (1 - exp(-mu)), borel_pmf(np.arange(1, 8), 0.4), rtol=1e-6)
    out = borel_pmf(np.arange(1, 4)[:, None], np.array([0.0, 0.2]))
    assert out.shape == (3, 2)
    np.testing.assert_allclose(out[:, 1], [_borel_by_hand(n, 0.2) for n in (1, 2, 3)], rtol=1e-13)


@pytest.mark.parametrize("k, lam, reason", [
    (-2, 0.2, "borel_pmf: k must be non-negative integers"),
    (2.5, 0.2, "borel_pmf: k must be non-negative integers"),
    (2, 1.0, "borel_pmf: lam must lie in [0, 1)"),
    (2, -0.2, "borel_pmf: lam must lie in [0, 1)"),
    (2, np.inf, "borel_pmf: lam must lie in [0, 1)"),
])
def test_borel_refusals(k, lam, reason):
    with pytest.raises(ModelError) as info:
        borel_pmf(k, lam)
    assert info.value.reason == reason


def test_probability_from_branching_ratio_and_back():
    # p = 1 - exp(-lambda) (Vinogradov 2012); first-order error exp(-lambda) d_lambda, by hand.
    p, err = crosstalk_probability_from_branching_ratio([0.0, 0.2, 0.9], [0.0, 0.01, 0.02])
    np.testing.assert_allclose(p, [0.0, 1 - exp(-0.2), 1 - exp(-0.9)], rtol=1e-15, atol=0)
    np.testing.assert_allclose(err, [0.0, 0.01 * exp(-0.2), 0.02 * exp(-0.9)], rtol=1e-15, atol=0)
    np.testing.assert_allclose(crosstalk_branching_ratio(p), [0.0, 0.2, 0.9], rtol=1e-14, atol=0)
    p, err = crosstalk_probability_from_branching_ratio(0.3)
    assert float(p) == pytest.approx(1 - exp(-0.3), rel=1e-15, abs=0) and float(err) == 0.0


@pytest.mark.parametrize("lam, err, key, reason", [
    (1.0, 0.0, "branching_ratio", "branching_ratio must lie in [0, 1)"),
    (-0.1, 0.0, "branching_ratio", "branching_ratio must lie in [0, 1)"),
    (np.nan, 0.0, "branching_ratio", "branching_ratio must lie in [0, 1)"),
    (0.2, -0.01, "branching_ratio_err", "branching_ratio_err must be finite and non-negative"),
    (0.2, np.inf, "branching_ratio_err", "branching_ratio_err must be finite and non-negative"),
])
def test_probability_from_branching_ratio_refusals(lam, err, key, reason):
    with pytest.raises(ModelError) as info:
        crosstalk_probability_from_branching_ratio(lam, err)
    assert info.value.key == key and info.value.reason == reason

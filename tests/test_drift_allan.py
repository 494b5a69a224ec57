"""Overlapping Allan deviation: against allantools, the IEEE Std 1139 white-noise and drift laws, and gaps."""

from __future__ import annotations

import numpy as np
import pytest

from compensator.drift.allan import allan_curve, octave_factors, overlapping_adev, resample_to_grid
from compensator.errors import ModelError

allantools = pytest.importorskip("allantools", reason="allantools (a test extra) is the reference implementation")


def test_matches_allantools_oadev_on_white_and_random_walk_noise():
    # Reference: allantools.oadev (overlapping Allan deviation, IEEE Std 1139 definitions), frequency data.
    rng = np.random.default_rng(11)
    y = rng.normal(0.0, 1.0, 5000) + np.cumsum(rng.normal(0.0, 0.05, 5000)) + 20.0
    factors = octave_factors(y.size)
    ours, terms = overlapping_adev(y, tau0_s=0.5, factors=factors)
    taus, ref, _err, ns = allantools.oadev(y, rate=2.0, data_type="freq", taus=factors * 0.5)
    assert np.allclose(taus, factors * 0.5)
    assert np.allclose(ours, ref, rtol=1e-9, atol=0)
    assert np.array_equal(terms, ns)


def test_white_frequency_noise_falls_as_tau_to_the_minus_half():
    # IEEE Std 1139: for white frequency noise of variance s^2 per sample, sigma_y^2(m tau0) = s^2 / m,
    # so the deviation falls as tau^-1/2. The estimate at factor m has about (N / m) equivalent degrees
    # of freedom for overlapping estimates; allow three of its relative standard errors.
    rng = np.random.default_rng(5)
    n, s = 1 << 17, 0.3
    y = rng.normal(0.0, s, n)
    factors = octave_factors(n, min_terms=128)
    dev, _ = overlapping_adev(y, tau0_s=1.0, factors=factors)
    expected = s / np.sqrt(factors)
    rel_err = 1.0 / np.sqrt(2.0 * (n / factors) * 0.75)
    assert np.all(np.abs(dev / expected - 1.0) < 3.0 * rel_err)
    slope = np.polyfit(np.log(factors), np.log(dev), 1)[0]
    assert slope == pytest.approx(-0.5, abs=0.02)


def test_linear_drift_rises_as_tau_with_the_known_factor():
    # A linear frequency drift D gives sigma_y(tau) = D tau / sqrt(2) exactly (IEEE Std 1139; slope +1).
    drift_per_s, tau0 = 3e-4, 2.0
    y = drift_per_s * tau0 * np.arange(4096)
    factors = octave_factors(y.size)
    dev, _ = overlapping_adev(y, tau0_s=tau0, factors=factors)
    assert np.allclose(dev, drift_per_s * factors * tau0 / np.sqrt(2.0), rtol=1e-9)


def _brute_force_adev(y, m):
    # The definition term by term, skipping any window pair that touches a missing sample.
    terms = []
    for j in range(y.size - 2 * m + 1):
        block = y[j:j + 2 * m]
        if np.all(np.isfinite(block)):
            terms.append(block[m:].mean() - block[:m].mean())
    terms = np.asarray(terms)
    return np.sqrt(np.mean(terms ** 2) / 2.0), terms.size


def test_gaps_leave_out_exactly_the_terms_that_touch_them():
    rng = np.random.default_rng(3)
    y = rng.normal(0.0, 1.0, 600)
    y[100:130] = np.nan
    y[400] = np.nan
    factors = np.array([1, 2, 4, 8, 16, 32])
    dev, terms = overlapping_adev(y, tau0_s=1.0, factors=factors)
    for m, d, k in zip(factors, dev, terms):
        ref, count = _brute_force_adev(y, m)
        assert k == count
        assert d == pytest.approx(ref, rel=1e-10)


def test_a_step_across_a_gap_does_not_show_up():
    rng = np.random.default_rng(8)
    y = rng.normal(0.0, 1.0, 2000)
    y[1000:1100] = np.nan
    stepped = y.copy()
    stepped[1100:] += 50.0                     # e.g. the enclosure warmed during a long outage
    factors = octave_factors(900)
    a, _ = overlapping_adev(y, tau0_s=1.0, factors=factors)
    b, _ = overlapping_adev(stepped, tau0_s=1.0, factors=factors)
    assert np.allclose(a, b, rtol=1e-9)


def test_resample_to_grid_places_jittered_samples_and_marks_missing_ones():
    rng = np.random.default_rng(1)
    t = 1000.0 + np.arange(50) * 2.0 + rng.uniform(-0.2, 0.2, 50)
    keep = np.ones(50, dtype=bool)
    keep[[10, 11, 30]] = False
    values = np.arange(50.0)
    values[5] = np.nan                                      # a sample without a value is left out too
    grid = resample_to_grid(t[keep], values[keep])
    assert grid.start_s == t[0]
    assert np.isnan(grid.values[5])
    values[5] = 5.0
    assert grid.tau0_s == pytest.approx(2.0, abs=0.1)
    assert grid.values.size == 50
    assert np.isnan(grid.values[[10, 11, 30]]).all()
    keep[5] = False
    assert np.array_equal(grid.values[keep], np.arange(50.0)[keep])
    late = resample_to_grid(t, np.where(np.arange(50) < 3, np.nan, 1.0))   # leading samples without a value
    assert late.start_s == t[3] and late.values.size == 47


def test_allan_curve_reports_the_averaging_time_of_the_minimum():
    # White noise plus drift: the deviation falls as tau^-1/2 then rises as tau; the minimum of
    # s^2/m + D^2 m^2 tau0^2 / 2 lies at m = (s^2 / (D^2 tau0^2))^(1/3).
    rng = np.random.default_rng(2)
    s, drift, n = 1.0, 2e-4, 1 << 16
    t = np.arange(n, dtype=float)
    curve = allan_curve("gain_pct", t, rng.normal(0.0, s, n) + drift * t)
    m_best = (s ** 2 / drift ** 2) ** (1.0 / 3.0)      # about 292
    assert m_best / 2 <= curve.minimum_tau_s <= m_best * 2
    assert curve.minimum_deviation_in_quantity_unit == pytest.approx(np.min(curve.deviation_in_quantity_unit))
    assert curve.quantity == "gain_pct"


def test_too_few_samples_is_a_model_error():
    with pytest.raises(ModelError):
        resample_to_grid([0.0], [1.0])
    with pytest.raises(ModelError):
        resample_to_grid([0.0, 1e9], [1.0, 2.0], tau0_s=1.0)


def test_many_scattered_gaps_take_the_mask_path_with_the_same_result():
    # More runs of missing samples than the slice path handles: the mask path must agree with the definition.
    rng = np.random.default_rng(4)
    y = rng.normal(0.0, 1.0, 20500)
    y[::10] = np.nan                                         # 2050 runs of one missing sample
    factors = np.array([1, 4])
    dev, terms = overlapping_adev(y, tau0_s=1.0, factors=factors)
    for m, d, k in zip(factors, dev, terms):
        ref, count = _brute_force_adev(y, m)
        assert k == count > 0
        assert d == pytest.approx(ref, rel=1e-10)

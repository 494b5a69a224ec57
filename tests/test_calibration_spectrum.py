"""Charge-spectrum fit: generalised Poisson, start values, truth recovery, errors.

Outside references used here:
- generalised-Poisson moments, mean mu/(1-lambda) and variance
  mu/(1-lambda)**3 (Vinogradov, NIM A 695, 247, 2012);
- scipy.stats.poisson (lambda = 0 limit) and scipy.stats.chisquare;
- Borel distribution moments, mean 1/(1-lambda) and variance
  lambda/(1-lambda)**3 (quoted from memory), and its identity with the
  mu -> 0 limit of the generalised Poisson given at least one cell fired.
Truth recovery uses seeded synthetic spectra from :func:`simulate_spectrum`.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from compensator.calibration.spectrum import (
    SpectrumFit,
    bin_events,
    borel_pmf,
    fit_spectrum,
    generalized_poisson_pmf,
    simulate_events,
    simulate_spectrum,
    spectrum_start_values,
)
from compensator.errors import CompensatorError, InputError, ModelError

TRUTH = dict(gain=1.0, pedestal=0.3, sigma0=0.1, sigma1=0.05, mean_pe=1.5, crosstalk=0.15)


def _spectrum(seed, n_events=20000, bin_width=0.05, **over):
    truth = dict(TRUTH, **over)
    x, c = simulate_spectrum(np.random.default_rng(seed), n_events=n_events, bin_width=bin_width, **truth)
    return truth, x, c


# ---------------------------------------------------------------------------
# generalised Poisson (Vinogradov, NIM A 695, 247, 2012)


@pytest.mark.parametrize("mu,lam", [(0.3, 0.0), (1.5, 0.15), (4.0, 0.3), (2.0, 0.5)])
def test_generalized_poisson_normalised_with_published_moments(mu, lam):
    # Mean mu/(1-lam) and variance mu/(1-lam)^3: Vinogradov 2012.
    k = np.arange(400)
    p = generalized_poisson_pmf(k, mu, lam)
    assert p.sum() == pytest.approx(1.0, abs=1e-10)
    mean = np.sum(k * p)
    var = np.sum((k - mean) ** 2 * p)
    assert mean == pytest.approx(mu / (1 - lam), rel=1e-9)
    assert var == pytest.approx(mu / (1 - lam) ** 3, rel=1e-8)


def test_generalized_poisson_reduces_to_poisson_without_crosstalk():
    # Reference: scipy.stats.poisson.
    k = np.arange(60)
    for mu in (0.1, 1.0, 7.5):
        np.testing.assert_allclose(generalized_poisson_pmf(k, mu, 0.0), stats.poisson.pmf(k, mu), rtol=1e-12, atol=1e-300)


def test_generalized_poisson_special_values_and_broadcasting():
    assert generalized_poisson_pmf(0, 2.0, 0.3) == pytest.approx(np.exp(-2.0))
    # P(1) = mu exp(-mu - lam) straight from the formula
    assert generalized_poisson_pmf(1, 2.0, 0.3) == pytest.approx(2.0 * np.exp(-2.3))
    np.testing.assert_array_equal(generalized_poisson_pmf([0, 1, 2], 0.0, 0.2), [1.0, 0.0, 0.0])
    out = generalized_poisson_pmf(np.arange(5)[:, None], np.array([0.5, 1.0, 2.0]), 0.1)
    assert out.shape == (5, 3)


@pytest.mark.parametrize("k,mu,lam", [(-1, 1.0, 0.1), (1.5, 1.0, 0.1), (1, -0.1, 0.1), (1, 1.0, 1.0), (1, 1.0, -0.2), (1, np.nan, 0.1)])
def test_generalized_poisson_rejects_bad_domain(k, mu, lam):
    with pytest.raises(ModelError):
        generalized_poisson_pmf(k, mu, lam)


def test_simulated_branching_process_follows_the_generalised_poisson():
    # The simulator draws crosstalk as a branching Poisson chain; its total
    # must follow the closed form (Vinogradov 2012). Goodness of fit by
    # scipy.stats.chisquare; fixed seed.
    mu, lam, n = 1.7, 0.25, 200000
    q = simulate_events(np.random.default_rng(11), gain=1.0, pedestal=0.0, sigma0=1e-6, sigma1=0.0,
                        mean_pe=mu, crosstalk=lam, n_events=n)
    k = np.rint(q).astype(int)
    kmax = 12
    observed = np.bincount(np.minimum(k, kmax), minlength=kmax + 1)
    p = generalized_poisson_pmf(np.arange(kmax), mu, lam)
    expected = n * np.append(p, 1.0 - p.sum())
    assert stats.chisquare(observed, expected).pvalue > 1e-3
    assert k.mean() == pytest.approx(mu / (1 - lam), rel=0.01)


# ---------------------------------------------------------------------------
# start values and the naive baseline


@pytest.mark.parametrize("over,bin_width", [
    (dict(), 0.05),
    (dict(mean_pe=0.3), 0.05),
    (dict(mean_pe=5.0, crosstalk=0.25), 0.05),
    (dict(sigma0=0.2, sigma1=0.08), 0.05),
    (dict(pedestal=-40.0), 0.05),
    # sharp peaks in coarse bins: the Fourier line of the first harmonic is
    # the strongest, so the octave check in the charge domain must fix it
    (dict(sigma0=0.05, sigma1=0.02, mean_pe=1.0, crosstalk=0.1), 0.125),
    # wide pedestal, few photoelectrons: the comb line sits on the flank of
    # the envelope's lobe
    (dict(sigma0=0.2, sigma1=0.05, mean_pe=0.5, crosstalk=0.3), 0.05),
])
def test_start_values_are_close_to_truth(over, bin_width):
    truth, x, c = _spectrum(3, bin_width=bin_width, **over)
    sv = spectrum_start_values(x, c)
    assert sv["gain"] == pytest.approx(truth["gain"], rel=0.03)
    assert sv["pedestal"] == pytest.approx(truth["pedestal"], abs=0.1 * truth["gain"])
    assert sv["mean_pe"] == pytest.approx(truth["mean_pe"], rel=0.25)
    assert sv["sigma0"] == pytest.approx(truth["sigma0"], rel=0.5)
    assert 2 <= sv["n_peaks"] <= 64


def test_naive_gain_on_a_clean_spectrum_and_its_failure_mode():
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tools" / "bench"))
    from spectrum_baseline import naive_gain  # the benchmark's baseline

    sys.path.pop(0)
    _, x, c = _spectrum(4, n_events=50000, sigma0=0.05, sigma1=0.02)
    assert naive_gain(x, c) == pytest.approx(1.0, abs=0.06)
    _, x, c = _spectrum(4, mean_pe=0.01, crosstalk=0.0)
    with pytest.raises(ModelError):
        naive_gain(x, c)


# ---------------------------------------------------------------------------
# truth recovery


CASES = [
    dict(),
    dict(mean_pe=0.4, crosstalk=0.05),
    dict(mean_pe=3.5, crosstalk=0.3),
    dict(sigma0=0.18, sigma1=0.08),
    dict(mean_pe=1.0, crosstalk=0.0, sigma0=0.06, sigma1=0.03),
]


@pytest.mark.parametrize("over", CASES)
def test_truth_recovery_over_seeds(over):
    fits, truth = [], None
    for seed in range(8):
        truth, x, c = _spectrum(100 + seed, **over)
        fits.append(fit_spectrum(x, c))
    g = np.array([f.gain for f in fits])
    assert abs(np.median(g) / truth["gain"] - 1) < 0.003
    assert np.median([abs(f.pedestal - truth["pedestal"]) for f in fits]) < 0.01 * truth["gain"]
    assert np.median([f.mean_pe for f in fits]) == pytest.approx(truth["mean_pe"], rel=0.02)
    assert np.median([f.crosstalk for f in fits]) == pytest.approx(truth["crosstalk"], abs=0.01)
    assert np.median([f.sigma0 for f in fits]) == pytest.approx(truth["sigma0"], rel=0.05)
    for f in fits:
        assert f.method == "gpoisson"
        assert f.model_counts.sum() == pytest.approx(f.counts.sum(), rel=1e-3)
        assert f.ndf == f.charge.size - 7


@pytest.mark.parametrize("amplitudes", ["gpoisson", "free"])
def test_uncertainties_match_the_spread_over_seeds(amplitudes):
    # pulls (fit - truth)/error over 60 seeds must have a width near 1
    pulls = {k: [] for k in ("gain", "pedestal", "mean_pe", "crosstalk", "sigma0")}
    chi2_per_ndf = []
    for seed in range(60):
        truth, x, c = _spectrum(1000 + seed, n_events=10000)
        f = fit_spectrum(x, c, amplitudes=amplitudes)
        for k in pulls:
            pulls[k].append((getattr(f, k) - truth[k]) / getattr(f, k + "_err"))
        chi2_per_ndf.append(f.chi2_per_ndf)
    for k, v in pulls.items():
        v = np.asarray(v)
        assert 0.7 < np.std(v) < 1.35, (k, np.std(v))
        assert abs(np.mean(v)) < 0.5, (k, np.mean(v))
    assert 0.6 < np.mean(chi2_per_ndf) < 1.2


def test_free_amplitudes_agree_with_the_generalised_poisson():
    truth, x, c = _spectrum(7, n_events=50000)
    gp = fit_spectrum(x, c)
    free = fit_spectrum(x, c, amplitudes="free")
    assert free.method == "free"
    assert free.gain == pytest.approx(gp.gain, abs=gp.gain_err)
    assert free.mean_pe == pytest.approx(truth["mean_pe"], abs=4 * free.mean_pe_err)
    assert free.crosstalk == pytest.approx(truth["crosstalk"], abs=4 * free.crosstalk_err)
    assert free.peak_amplitudes.size == free.n_peaks
    assert free.ndf == free.charge.size - 4 - free.n_peaks


# ---------------------------------------------------------------------------
# units, event lists, bins


def test_results_do_not_depend_on_the_charge_unit():
    _, x, c = _spectrum(21)
    ref = fit_spectrum(x, c)
    for scale in (1e-12, 1000.0):
        f = fit_spectrum(x * scale, c)
        for k in ("gain", "gain_err", "pedestal", "pedestal_err", "sigma0", "sigma1", "sigma1_err"):
            assert getattr(f, k) == pytest.approx(getattr(ref, k) * scale, rel=1e-6), k
        for k in ("mean_pe", "mean_pe_err", "crosstalk", "crosstalk_err", "chi2"):
            assert getattr(f, k) == pytest.approx(getattr(ref, k), rel=1e-6), k


def test_event_list_gives_the_histogram_gain():
    truth = dict(TRUTH)
    q = simulate_events(np.random.default_rng(31), n_events=30000, **truth)
    from_events = fit_spectrum(q)
    edges = np.arange(q.min() - 0.01, q.max() + 0.05, 0.04)
    counts, edges = np.histogram(q, edges)
    from_hist = fit_spectrum(0.5 * (edges[1:] + edges[:-1]), counts)
    assert from_events.gain == pytest.approx(from_hist.gain, abs=0.3 * from_hist.gain_err)
    assert from_events.mean_pe == pytest.approx(from_hist.mean_pe, abs=0.3 * from_hist.mean_pe_err)
    assert from_events.n_events == q.size


def test_event_binning_rule():
    q = simulate_events(np.random.default_rng(32), n_events=20000, **TRUTH)
    x, c = bin_events(q)
    width = np.diff(x)
    assert np.allclose(width, width[0])
    # half the pedestal width or an eighth of the spacing, whichever is smaller
    assert 0.03 < width[0] < 0.07
    assert c.sum() == q.size
    assert x[0] - width[0] / 2 <= q.min() and q.max() <= x[-1] + width[0] / 2


def test_non_uniform_bins_are_integrated_exactly():
    truth, x, c = _spectrum(41, n_events=50000, bin_width=0.025)
    n = x.size - x.size % 2
    x, c = x[:n], c[:n]
    half = (n // 2) & ~1
    # merge pairs of bins in the upper half: bins twice as wide there
    xm = np.concatenate((x[:half], 0.5 * (x[half::2] + x[half + 1::2])))
    cm = np.concatenate((c[:half], c[half::2] + c[half + 1::2]))
    assert cm.sum() == c.sum()
    ref = fit_spectrum(x, c)
    f = fit_spectrum(xm, cm)
    assert f.gain == pytest.approx(ref.gain, abs=0.5 * ref.gain_err)
    assert f.gain == pytest.approx(truth["gain"], abs=4 * f.gain_err)


def test_weak_pedestal_is_still_found():
    # mean_pe 6: the pedestal holds 0.25 % of the events
    truth, x, c = _spectrum(51, n_events=40000, mean_pe=6.0, crosstalk=0.1, sigma0=0.08, sigma1=0.03)
    f = fit_spectrum(x, c)
    assert f.pedestal == pytest.approx(truth["pedestal"], abs=0.05)
    assert f.mean_pe == pytest.approx(6.0, rel=0.05)


def test_result_arrays_are_read_only_and_summary_is_plain():
    _, x, c = _spectrum(61)
    f = fit_spectrum(x, c)
    assert isinstance(f, SpectrumFit)
    with pytest.raises(ValueError):
        f.model_counts[0] = 1.0
    s = f.summary()
    assert s["gain"] == f.gain and s["method"] == "gpoisson"
    assert f.covariance.shape == (7, 7) and len(f.parameter_names) == 7
    assert f.mean_fired == pytest.approx(f.mean_pe / (1 - f.crosstalk))


# ---------------------------------------------------------------------------
# bad input


@pytest.mark.parametrize("charge,counts,error,words", [
    ([], [], InputError, "empty"),
    ([1, 2, 3], [1, 2], InputError, "lengths differ"),
    (np.arange(10.0), -np.ones(10), InputError, "negative"),
    (np.arange(10.0), np.zeros(10), InputError, "empty"),
    (np.r_[np.arange(9.0), np.nan], np.ones(10), InputError, "non-finite"),
    (np.arange(10.0), np.r_[np.ones(9), np.inf], InputError, "non-finite"),
    (np.r_[np.arange(5.0), np.arange(5.0)], np.full(10, 10.0), InputError, "increase"),
    (np.arange(10.0), np.ones(10), ModelError, "too few"),
    (np.ones((3, 4)), np.ones((3, 4)), InputError, "one-dimensional"),
])
def test_bad_histograms_raise_documented_errors(charge, counts, error, words):
    with pytest.raises(error, match=words):
        fit_spectrum(charge, counts)


def test_spectrum_without_peaks_is_rejected():
    rng = np.random.default_rng(71)
    x = np.linspace(0, 10, 400)
    flat = rng.poisson(50.0, x.size).astype(float)
    blob = rng.poisson(2000.0 * np.exp(-0.5 * ((x - 5) / 1.5) ** 2)).astype(float)
    for c in (flat, blob):
        with pytest.raises(ModelError, match="peak"):
            fit_spectrum(x, c)


def test_pedestal_only_is_rejected():
    _, x, c = _spectrum(72, mean_pe=0.0, crosstalk=0.0)
    with pytest.raises(ModelError):
        fit_spectrum(x, c)


def test_bad_event_lists_and_options():
    with pytest.raises(InputError, match="empty"):
        fit_spectrum(np.array([]))
    with pytest.raises(ModelError, match="too few"):
        fit_spectrum(np.arange(10.0))
    with pytest.raises(ModelError, match="same charge"):
        fit_spectrum(np.ones(500))
    with pytest.raises(InputError, match="amplitudes"):
        fit_spectrum([1.0], [1.0], amplitudes="poisson")
    # every error is a CompensatorError and a ValueError
    assert issubclass(InputError, CompensatorError) and issubclass(ModelError, ValueError)


# ---------------------------------------------------------------------------
# the model itself


@pytest.mark.parametrize("method", ["gpoisson", "free"])
def test_banded_model_matches_dense_bin_integrals_and_its_jacobian(method):
    # Reference: the normal distribution function scipy.special.ndtr over
    # every bin edge (no band), and central differences for the Jacobian.
    from scipy import special

    from compensator.calibration.spectrum.model import _Model

    edges = np.linspace(-3.0, 40.0, 700)
    K = 20
    model = _Model(edges, K, method)
    if method == "gpoisson":
        p = np.array([0.3, 1.7, 0.2, 0.08, 1e4, 2.0, 0.2])
    else:
        p = np.r_[0.3, 1.7, 0.2, 0.08, np.linspace(100.0, 10.0, K)]
    m, J = model(p)
    n = np.arange(K)
    sig = np.hypot(p[2], np.sqrt(n) * p[3])
    shape = np.diff(special.ndtr((edges[None, :] - (p[0] + n * p[1])[:, None]) / sig[:, None]), axis=1)
    amp = p[4] * generalized_poisson_pmf(n, p[5], p[6]) if method == "gpoisson" else p[4:]
    np.testing.assert_allclose(m, amp @ shape, rtol=1e-9, atol=1e-9 * m.max())
    numeric = np.empty_like(J)
    for j in range(p.size):
        h = 1e-6 * max(abs(p[j]), 1.0)
        up, down = p.copy(), p.copy()
        up[j] += h
        down[j] -= h
        numeric[:, j] = (model(up, jac=False)[0] - model(down, jac=False)[0]) / (2 * h)
    np.testing.assert_allclose(J, numeric, rtol=0, atol=1e-6 * np.abs(J).max())


def test_fit_range_drops_an_overflow_bin_and_a_threshold_region():
    truth, x, c = _spectrum(81, n_events=30000)
    c = c.copy()
    c[-1] += 5000.0  # an ADC overflow bin piles up at the end
    ref = fit_spectrum(x, c, fit_range=(x[0] - 1.0, x[-2]))
    assert ref.charge[-1] == x[-2]
    assert ref.gain == pytest.approx(truth["gain"], abs=4 * ref.gain_err)
    assert ref.mean_pe == pytest.approx(truth["mean_pe"], abs=4 * ref.mean_pe_err)
    # the same cut on the event list
    q = simulate_events(np.random.default_rng(82), n_events=30000, **TRUTH)
    f = fit_spectrum(np.r_[q, np.full(3000, 50.0)], fit_range=(-5.0, 20.0))
    assert f.n_events == q.size
    assert f.gain == pytest.approx(truth["gain"], abs=4 * f.gain_err)
    with pytest.raises(InputError, match="fit_range"):
        fit_spectrum(x, c, fit_range=(3.0, 1.0))
    with pytest.raises(InputError, match="fit_range"):
        fit_spectrum(x, c, fit_range=(1.0,))
    with pytest.raises(InputError, match="inside fit_range"):
        fit_spectrum(x, c, fit_range=(100.0, 200.0))


# ---------------------------------------------------------------------------
# dark-count spectra (no pedestal): Borel amplitudes


@pytest.mark.parametrize("lam", [0.02, 0.2, 0.45])
def test_borel_normalised_with_its_moments_and_the_generalised_poisson_limit(lam):
    k = np.arange(1, 600)
    p = borel_pmf(k, lam)
    assert p.sum() == pytest.approx(1.0, abs=1e-9)
    mean = np.sum(k * p)
    assert mean == pytest.approx(1 / (1 - lam), rel=1e-9)  # from memory
    assert np.sum((k - mean) ** 2 * p) == pytest.approx(lam / (1 - lam) ** 3, rel=1e-7)  # from memory
    # mu -> 0 limit of Vinogradov's generalised Poisson, given k >= 1
    mu = 1e-9
    limit = generalized_poisson_pmf(k[:30], mu, lam) / -np.expm1(-mu)
    np.testing.assert_allclose(p[:30], limit, rtol=1e-6)
    assert borel_pmf(0, lam) == 0.0
    with pytest.raises(ModelError):
        borel_pmf(1, 1.0)


def test_dark_simulation_follows_the_borel_distribution():
    lam, n = 0.3, 100000
    q = simulate_events(np.random.default_rng(91), gain=1.0, pedestal=0.0, sigma0=1e-6, sigma1=0.0,
                        mean_pe=5.0, crosstalk=lam, n_events=n, dark=True)
    k = np.rint(q).astype(int)
    assert k.min() == 1
    kmax = 10
    observed = np.bincount(np.minimum(k, kmax), minlength=kmax + 1)[1:]
    p = borel_pmf(np.arange(1, kmax), lam)
    assert stats.chisquare(observed, n * np.append(p, 1.0 - p.sum())).pvalue > 1e-3


def test_dark_count_spectra_recover_gain_crosstalk_and_the_zero_cell_charge():
    pulls_g, pulls_l, gains = [], [], []
    for seed in range(30):
        truth, x, c = _spectrum(300 + seed, n_events=20000, crosstalk=0.15, dark=True)
        f = fit_spectrum(x, c, amplitudes="borel")
        assert f.method == "borel" and np.isnan(f.mean_pe)
        assert f.peak_amplitudes.size == f.n_peaks and f.ndf == f.charge.size - 6
        gains.append(f.gain)
        pulls_g.append((f.gain - truth["gain"]) / f.gain_err)
        pulls_l.append((f.crosstalk - truth["crosstalk"]) / f.crosstalk_err)
        assert f.pedestal == pytest.approx(truth["pedestal"], abs=5 * f.pedestal_err)
        assert f.mean_fired == pytest.approx(1 / (1 - f.crosstalk))
    assert abs(np.median(gains) / truth["gain"] - 1) < 0.003
    for v in (pulls_g, pulls_l):
        assert 0.7 < np.std(v) < 1.35
        assert abs(np.mean(v)) < 0.6
    # the generalised-Poisson fit takes the first peak for the pedestal here
    wrong = fit_spectrum(x, c)
    assert wrong.pedestal == pytest.approx(truth["pedestal"] + truth["gain"], abs=0.02)


def test_dark_count_spectrum_with_a_single_peak_is_rejected():
    _, x, c = _spectrum(95, crosstalk=0.0, dark=True)
    with pytest.raises(ModelError):
        fit_spectrum(x, c, amplitudes="borel")


def test_empty_bins_left_out_of_an_export_are_put_back():
    truth, x, c = _spectrum(97, n_events=20000)
    full = fit_spectrum(x, c)
    kept = c > 0
    assert (~kept).sum() > 20  # the comb has empty valleys at this resolution
    sparse_export = fit_spectrum(x[kept], c[kept])
    assert sparse_export.charge.size == x.size
    assert sparse_export.gain == pytest.approx(full.gain, rel=1e-9)
    assert sparse_export.chi2 == pytest.approx(full.chi2, rel=1e-9)


def test_crosstalk_probability_from_the_branching_ratio():
    # p = 1 - exp(-lambda) (Vinogradov, NIM A 695, 247, 2012): at lambda = 0.3 the probability is
    # 0.2592 (computed by hand: 1 - 0.740818), 14 % below lambda; the profile's model inverts it.
    from compensator.physics.counting import crosstalk_probability_from_branching_ratio
    from compensator.physics.sipm import crosstalk_branching_ratio

    p, err = crosstalk_probability_from_branching_ratio(np.array([0.0, 0.3]), np.array([0.0, 0.01]))
    assert p == pytest.approx([0.0, 0.2591818], abs=1e-7)
    assert err == pytest.approx([0.0, 0.00740818], abs=1e-8)
    assert crosstalk_branching_ratio(p[1]) == pytest.approx(0.3, rel=1e-12)
    with pytest.raises(ModelError):
        crosstalk_probability_from_branching_ratio(1.0)
    rng = np.random.default_rng(4)
    x, c = simulate_spectrum(rng, gain=1.0, pedestal=0.0, sigma0=0.08, sigma1=0.03, mean_pe=1.5,
                             crosstalk=0.3, n_events=40000, bin_width=0.02)
    fit = fit_spectrum(x, c)
    assert fit.crosstalk == fit.crosstalk_branching_ratio and fit.crosstalk_err == fit.crosstalk_branching_ratio_err
    assert fit.crosstalk_probability == pytest.approx(-np.expm1(-fit.crosstalk_branching_ratio), rel=1e-12)
    assert fit.crosstalk_probability == pytest.approx(0.2592, abs=4 * fit.crosstalk_probability_err)

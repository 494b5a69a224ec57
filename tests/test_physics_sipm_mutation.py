"""SiPM model: refusals, defaults, shapes and the crosstalk models, each against a hand calculation.

The formulas are those of the module docstring: G = C (V - Vbd) / q (common practice); the branching Poisson
crosstalk with lambda = -ln(1 - p) and the Borel mean 1 / (1 - lambda) (Vinogradov, NIM A 695, 247, 2012);
N_fired = N_cells (1 - exp(-N_ph PDE / N_cells)) (Klanner, NIM A 926, 36, 2019).
"""

import warnings
from dataclasses import replace
from math import exp, log

import numpy as np
import pytest

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import ModelError
from compensator.physics import sipm as M

Q = 1.602176634e-19  # elementary charge, coulomb (SI 2019, exact)


def make(**kw):
    base = dict(breakdown=M.Breakdown(25.0, 25.0, 25.0), cell_capacitance_f=100e-15, cell_count=10_000)
    base.update(kw)
    return M.Sipm(**base)


@pytest.mark.parametrize("kw, key, reason", [
    (dict(cell_capacitance_f=0.0), "cell_capacitance_f", "must be positive, got 0.0"),
    (dict(cell_count=0), "cell_count", "must be positive, got 0"),
    (dict(crosstalk_probability=-0.01), "crosstalk_probability", "must be in [0, 1), got -0.01"),
    (dict(crosstalk_probability=1.0), "crosstalk_probability", "must be in [0, 1), got 1.0"),
    (dict(crosstalk_model="chain"), "crosstalk_model", "must be one of geometric, branching_poisson, got 'chain'"),
    # lambda = 1 exactly (p = 1 - 1/e): the Borel mean 1/(1 - lambda) diverges.
    (dict(crosstalk_model="branching_poisson", crosstalk_probability=1.0 - exp(-1.0)), "crosstalk_probability",
     f"must be below 1 - 1/e = 0.632 for the branching Poisson model (lambda < 1), got {1.0 - exp(-1.0)!r}"),
])
def test_sipm_refusals(kw, key, reason):
    with pytest.raises(ModelError) as info:
        make(**kw)
    assert info.value.key == key and info.value.reason == reason


def test_sipm_edges_are_accepted():
    assert make(cell_count=1).cell_count == 1
    assert make(crosstalk_probability=0.0, crosstalk_model="branching_poisson").crosstalk_probability == 0.0
    assert make(crosstalk_probability=0.63, crosstalk_model="branching_poisson").crosstalk_probability == 0.63
    assert make(crosstalk_probability=0.99).crosstalk_probability == 0.99  # the geometric chain allows any p < 1


def test_crosstalk_means_against_vinogradov():
    # p = 0.2 at the reference overvoltage. Geometric chain: 1/(1 - p) = 1.25. Branching Poisson: lambda =
    # -ln(0.8) = 0.223144, Borel mean 1/(1 - lambda) = 1.287239 (Vinogradov 2012).
    geo = make(crosstalk_probability=0.2)
    bra = replace(geo, crosstalk_model="branching_poisson")
    assert float(M.crosstalk_mean_multiplier(geo, 3.0)) == pytest.approx(1.25, rel=1e-14, abs=0)
    assert float(M.crosstalk_mean_multiplier(bra, 3.0)) == pytest.approx(1 / (1 + log(0.8)), rel=1e-14, abs=0)
    assert float(M.crosstalk_mean_multiplier(bra, 3.0)) == pytest.approx(1.287239, abs=1e-6)
    # At 6 V, p = 1 - 0.8^4 = 0.5904 and lambda = 4 ln(1.25) = 0.8926; at 7 V lambda = (49/9) 0.2231 = 1.215 >= 1:
    # the branching mean is infinite there, the chain's is 1/0.8^(49/9).
    means = M.crosstalk_mean_multiplier(bra, [6.0, 7.0])
    assert means[0] == pytest.approx(1 / (1 - 4 * log(1.25)), rel=1e-12, abs=0) and means[1] == np.inf
    assert float(M.crosstalk_mean_multiplier(geo, 7.0)) == pytest.approx(0.8 ** (-49 / 9), rel=1e-12, abs=0)
    # Without crosstalk both are exactly 1, with the shape of the input.
    none = make()
    assert M.crosstalk_probability(none, [1.0, 2.0, 3.0]).tolist() == [0.0, 0.0, 0.0]
    none_branching = replace(none, crosstalk_model="branching_poisson")
    assert M.crosstalk_mean_multiplier(none_branching, [1.0, 2.0]).tolist() == [1.0, 1.0]


def test_current_with_branching_crosstalk_and_capacitance_tempco_by_hand():
    # I = q G (DCR + R PDE) M at 35 C, Vbd = 25 + 0.025 x 10 = 25.25 V, V = 28.25 V: Vov = 3 V.
    # C = 100 fF (1 + 200e-6 x 10) = 100.2 fF; G = 100.2e-15 x 3 / q.
    # DCR = 1e5 (3/3)^2 2^(10/8); PDE = 0.4 (1 - exp(-3/2)); M = 1/(1 + ln(1 - 0.1)) (Borel mean, lambda = 0.10536).
    dev = make(capacitance_tempco_ppm_per_k=200.0, dark_rate_hz=1e5, dark_overvoltage_exponent=2.0,
               pde_max_fraction=0.4, crosstalk_probability=0.1, crosstalk_model="branching_poisson")
    g = 100.2e-15 * 3.0 / Q
    assert float(M.cell_capacitance_f(dev, 35.0)) == pytest.approx(100.2e-15, rel=1e-14, abs=0)
    assert float(M.gain(dev, 28.25, 35.0)) == pytest.approx(g, rel=1e-12, abs=0)
    dcr = 1e5 * 2 ** 1.25
    pde = 0.4 * (1 - exp(-1.5))
    mult = 1 / (1 + log(0.9))
    assert float(M.dark_rate_hz(dev, 35.0, 3.0)) == pytest.approx(dcr, rel=1e-13, abs=0)
    current = Q * g * (dcr + 1e7 * pde) * mult
    assert float(M.steady_current_a(dev, 28.25, 35.0, 1e7)) == pytest.approx(current, rel=1e-12, abs=0)
    # The photon rate defaults to darkness, in the function and in the whole-model evaluation.
    dark = Q * g * dcr * mult
    assert float(M.steady_current_a(dev, 28.25, 35.0)) == pytest.approx(dark, rel=1e-12, abs=0)
    state = M.evaluate(dev, 35.0, bias_v=28.25)
    assert float(state.current_a) == pytest.approx(dark, rel=1e-12, abs=0)
    lit = M.evaluate(dev, 35.0, bias_v=28.25, photon_rate_hz=1e7)
    assert float(lit.current_a) == pytest.approx(current, rel=1e-12, abs=0)
    # Relative gain change -(dVbd/dT)/Vov + alpha_C: -0.025/3 + 200e-6, in percent per kelvin.
    assert float(state.gain_change_pct_per_k) == pytest.approx(100 * (-0.025 / 3 + 200e-6), rel=1e-12, abs=0)
    assert ELEMENTARY_CHARGE_C == Q


def test_relative_gain_change_with_curvature_at_a_temperature():
    # Vbd = 30 + 0.040 (T - 20) + 1e-4 (T - 20)^2: slope at 40 C is 0.040 + 2e-4 x 20 = 0.044 V/K; at 2 V overvoltage
    # the gain changes by -0.022 per kelvin; at the reference temperature (default) by -0.020.
    dev = make(breakdown=M.Breakdown(30.0, 20.0, 40.0, 0.1))
    assert float(M.relative_gain_change_per_k(dev, 2.0, 40.0)) == pytest.approx(-0.022, rel=1e-12, abs=0)
    assert float(M.relative_gain_change_per_k(dev, 2.0)) == pytest.approx(-0.020, rel=1e-12, abs=0)
    state = M.evaluate(dev, [20.0, 40.0], overvoltage_v=2.0)
    np.testing.assert_allclose(state.gain_change_pct_per_k, [-2.0, -2.2], rtol=1e-12)
    np.testing.assert_allclose(state.breakdown_v, [30.0, 30.84], rtol=1e-14)


def test_evaluate_keeps_two_dimensional_shapes_and_float_outputs():
    dev = make(dark_rate_hz=1e5)
    temps = np.array([[-20], [0], [30]])  # integers on purpose: the state holds floats
    biases = np.array([[24, 26, 28, 30]])
    s = M.evaluate(dev, temps, bias_v=biases)
    for name in ("temp_c", "bias_v", "breakdown_v", "overvoltage_v", "gain", "current_a", "gain_change_pct_per_k"):
        assert getattr(s, name).shape == (3, 4) and getattr(s, name).dtype == np.float64, name
    # Vbd = 25 + 0.025 (T - 25): -20 C -> 23.875 V, 0 C -> 24.375 V, 30 C -> 25.125 V (hand calculation).
    np.testing.assert_allclose(s.overvoltage_v[:, 0], [24 - 23.875, 24 - 24.375, 24 - 25.125], rtol=1e-12)
    np.testing.assert_array_equal(s.temp_c[:, 2], [-20.0, 0.0, 30.0])
    np.testing.assert_array_equal(s.bias_v[1], [24.0, 26.0, 28.0, 30.0])
    np.testing.assert_allclose(s.gain[2, 3], 100e-15 * (30 - 25.125) / Q, rtol=1e-12)


def test_evaluate_below_and_at_breakdown_warns_nothing():
    # At and below breakdown the relative gain change is NaN by definition, without numpy warnings
    # (0/0 with a zero tempco, x/0 with a non-zero one).
    flat = make(breakdown=M.Breakdown(25.0, 25.0, 0.0))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for dev in (flat, make()):
            s = M.evaluate(dev, [25.0, 25.0, 25.0], bias_v=[24.0, 25.0, 27.0])
            assert np.isnan(s.gain_change_pct_per_k[:2]).all() and np.isfinite(s.gain_change_pct_per_k[2])


def test_fired_cells_by_hand():
    # Klanner 2019: 1000 cells, 2000 photons at PDE 0.25: 1000 (1 - exp(-0.5)) = 393.469 cells.
    assert float(M.fired_cells(1000, 2000, 0.25)) == pytest.approx(1000 * (1 - exp(-0.5)), rel=1e-14, abs=0)
    np.testing.assert_allclose(M.fired_cells([100, 1000], [400, 400], [0.5, 0.5]),
                               [100 * (1 - exp(-2.0)), 1000 * (1 - exp(-0.2))], rtol=1e-14)


def test_branching_mean_diverges_at_lambda_one():
    # p = 0.5 at 1 V, linear in overvoltage: lambda = ln(2) Vov, exactly 1 at Vov = 1/ln 2 = 1.4426950408889634 V,
    # where the Borel mean 1/(1 - lambda) is infinite (Vinogradov 2012); just below, it is large but finite.
    dev = make(crosstalk_probability=0.5, crosstalk_ref_overvoltage_v=1.0, crosstalk_overvoltage_exponent=1.0,
               crosstalk_model="branching_poisson")
    at_one = 1.4426950408889634
    assert float(M.crosstalk_branching_ratio(M.crosstalk_probability(dev, at_one))) == 1.0
    means = M.crosstalk_mean_multiplier(dev, [at_one, 1.4])
    assert means[0] == np.inf and means[1] == pytest.approx(1 / (1 - 1.4 * log(2.0)), rel=1e-12, abs=0)

"""SiPM device model."""

from dataclasses import replace

import numpy as np
import pytest

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import ModelError
from compensator.physics import sipm as M


def make(**kw):
    base = dict(breakdown=M.Breakdown(25.0, 25.0, 25.0), cell_capacitance_f=100e-15, cell_count=10_000)
    base.update(kw)
    return M.Sipm(**base)


def test_gain_worked_example():
    # G = C (V - Vbd) / q: 100 fF at 3 V overvoltage -> 1.87e6 (common practice; q is the exact SI value).
    dev = make()
    assert M.gain(dev, 28.0, 25.0) == pytest.approx(100e-15 * 3.0 / 1.602176634e-19, rel=1e-12)
    assert M.gain(dev, 28.0, 25.0) == pytest.approx(1.87e6, rel=2e-3)
    assert M.gain(dev, 24.0, 25.0) == 0.0


def test_breakdown_linear_and_quadratic():
    dev = make(breakdown=M.Breakdown(30.0, 20.0, 40.0, 0.1))
    assert M.breakdown_v(dev, 20.0) == pytest.approx(30.0)
    assert M.breakdown_v(dev, 30.0) == pytest.approx(30.0 + 0.4 + 0.01)
    assert dev.breakdown.slope_v_per_k(30.0) == pytest.approx(0.042)


def test_relative_gain_change_is_minus_tempco_over_overvoltage():
    # (1/G) dG/dT = -(dVbd/dT) / Vov at fixed bias (common practice).
    dev = make()
    assert M.relative_gain_change_per_k(dev, 2.5) == pytest.approx(-0.025 / 2.5)
    # Numerical derivative of the model agrees.
    h = 1e-3
    g = M.gain(dev, 27.5, [25.0 - h, 25.0 + h])
    assert (g[1] - g[0]) / (2 * h) / M.gain(dev, 27.5, 25.0) == pytest.approx(-0.01, rel=1e-6)
    with pytest.raises(ModelError):
        M.relative_gain_change_per_k(dev, 0.0)


def test_capacitance_tempco_enters_gain_change():
    dev = make(capacitance_tempco_ppm_per_k=200.0)
    assert M.relative_gain_change_per_k(dev, 2.5) == pytest.approx(-0.01 + 200e-6)


def test_pde_saturates():
    dev = make(pde_max_fraction=0.5, pde_saturation_overvoltage_v=2.0)
    assert M.pde(dev, 0.0) == 0.0
    assert M.pde(dev, 2.0) == pytest.approx(0.5 * (1 - np.exp(-1)))
    assert M.pde(dev, 100.0) == pytest.approx(0.5)
    assert M.pde(dev, -1.0) == 0.0


def test_dark_rate_doubles_per_doubling_temperature_and_scales_with_overvoltage():
    dev = make(dark_rate_hz=1e5, dark_ref_temp_c=25.0, dark_ref_overvoltage_v=3.0, dark_doubling_temp_k=8.0,
               dark_overvoltage_exponent=1.0)
    assert M.dark_rate_hz(dev, 33.0, 3.0) == pytest.approx(2e5)
    assert M.dark_rate_hz(dev, 25.0, 6.0) == pytest.approx(2e5)
    assert M.dark_rate_hz(dev, 25.0, -1.0) == 0.0


def test_crosstalk_reference_point_and_bound():
    dev = make(crosstalk_probability=0.1, crosstalk_ref_overvoltage_v=3.0)
    assert M.crosstalk_probability(dev, 3.0) == pytest.approx(0.1)
    assert M.crosstalk_probability(dev, 50.0) < 1.0
    assert np.all(np.diff(M.crosstalk_probability(dev, np.linspace(0, 8, 50))) > 0)


def test_saturation_limits():
    # N_fired = N_cells (1 - exp(-N_ph PDE / N_cells)) (Klanner, NIM A 926, 36, 2019):
    # linear for N_ph PDE << N_cells, asymptote N_cells (output proportional to fired cells; common practice).
    assert M.fired_cells(10_000, 100, 0.4) == pytest.approx(40.0, rel=3e-3)
    assert M.fired_cells(10_000, 1e9, 0.4) == pytest.approx(10_000.0)
    n = M.fired_cells(10_000, np.logspace(1, 6, 20), 0.4)
    assert np.all(np.diff(n) > 0) and np.all(n <= 10_000)


def test_steady_current_formula():
    dev = make(dark_rate_hz=1e6, dark_ref_overvoltage_v=3.0, crosstalk_probability=0.2, crosstalk_ref_overvoltage_v=3.0,
               pde_max_fraction=0.5, pde_saturation_overvoltage_v=1e-9)
    g = M.gain(dev, 28.0, 25.0)
    # I = q G (DCR + R_ph PDE) / (1 - p): mean avalanches per primary with branching crosstalk is 1/(1 - p)
    # (Vinogradov, NIM A 695, 247, 2012).
    expected = ELEMENTARY_CHARGE_C * g * (1e6 + 2e6 * 0.5) / 0.8
    assert M.steady_current_a(dev, 28.0, 25.0, photon_rate_hz=2e6) == pytest.approx(expected, rel=1e-9, abs=0)


def test_evaluate_broadcasts_and_needs_one_mode(sipm_a):
    dev = sipm_a.device
    state = M.evaluate(dev, np.linspace(-25, 45, 8), overvoltage_v=3.0)
    np.testing.assert_allclose(state.overvoltage_v, 3.0)
    np.testing.assert_allclose(state.gain_change_pct_per_k, -100 * 0.0215 / 3.0)
    with pytest.raises(ModelError):
        M.evaluate(dev, 25.0)
    fixed = M.evaluate(dev, [-25.0, 45.0], bias_v=[20.0, 27.5])
    assert np.isnan(fixed.gain_change_pct_per_k[0]) and fixed.gain[0] == 0.0


def test_invalid_parameters_raise():
    with pytest.raises(ModelError):
        make(cell_capacitance_f=-1e-15)
    with pytest.raises(ModelError):
        make(crosstalk_probability=1.0)


@pytest.mark.parametrize("name", ["sipm_a", "sipm_b", "sipm_c"])
def test_evaluate_equals_the_individual_functions(name, request):
    dev = request.getfixturevalue(name).device
    rng = np.random.default_rng(3)
    temps = rng.uniform(-30, 50, 40_000)
    vbd0 = dev.breakdown.breakdown_v_at_ref
    bias = rng.uniform(vbd0 - 2, vbd0 + 8, 40_000)  # spans below breakdown too, across several blocks
    photons = rng.uniform(0, 1e7, 40_000)
    # A first call with other inputs of the same size: a block left unwritten would show its stale values.
    M.evaluate(dev, temps[::-1], bias_v=bias + 1.0, photon_rate_hz=photons[::-1])
    s = M.evaluate(dev, temps, bias_v=bias, photon_rate_hz=photons)
    ov = bias - M.breakdown_v(dev, temps)
    np.testing.assert_allclose(s.breakdown_v, M.breakdown_v(dev, temps), rtol=1e-14)
    np.testing.assert_array_equal(s.temp_c, temps)
    np.testing.assert_array_equal(s.bias_v, bias)
    np.testing.assert_allclose(s.gain, M.gain(dev, bias, temps), rtol=1e-12)
    np.testing.assert_allclose(s.pde_fraction, M.pde(dev, ov), rtol=1e-12)
    np.testing.assert_allclose(s.dark_rate_hz, M.dark_rate_hz(dev, temps, ov), rtol=1e-12)
    np.testing.assert_allclose(s.crosstalk_probability, M.crosstalk_probability(dev, ov), rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(s.current_a, M.steady_current_a(dev, bias, temps, photons), rtol=1e-12, atol=1e-300)
    above = ov > 0
    np.testing.assert_allclose(s.gain_change_pct_per_k[above],
                               100 * M.relative_gain_change_per_k(dev, ov[above], temps[above]), rtol=1e-12)
    assert np.all(np.isnan(s.gain_change_pct_per_k[~above]))


def test_evaluate_with_branching_crosstalk_odd_exponents_and_no_crosstalk(sipm_c):
    # The block-wise model equals the individual functions also for the branching Poisson crosstalk model, a cubic
    # dark-rate exponent, a cubic crosstalk exponent and a device without crosstalk.
    rng = np.random.default_rng(5)
    base = sipm_c.device
    temps = rng.uniform(-30, 50, 3000)
    bias = rng.uniform(base.breakdown.breakdown_v_at_ref - 1, base.breakdown.breakdown_v_at_ref + 6, 3000)
    photons = rng.uniform(0, 1e7, 3000)
    variants = (
        replace(base, crosstalk_model="branching_poisson"),
        replace(base, dark_overvoltage_exponent=3.0, crosstalk_overvoltage_exponent=3.0),
        replace(base, crosstalk_probability=0.0, dark_overvoltage_exponent=0.0),
    )
    for dev in variants:
        s = M.evaluate(dev, temps, bias_v=bias, photon_rate_hz=photons)
        ov = bias - M.breakdown_v(dev, temps)
        np.testing.assert_allclose(s.dark_rate_hz, M.dark_rate_hz(dev, temps, ov), rtol=1e-12)
        np.testing.assert_allclose(s.crosstalk_probability, M.crosstalk_probability(dev, ov), rtol=1e-12, atol=1e-300)
        np.testing.assert_allclose(s.current_a, M.steady_current_a(dev, bias, temps, photons), rtol=1e-12,
                                   atol=1e-300)


def test_evaluate_shapes_and_the_breakdown_point(sipm_a):
    dev = sipm_a.device
    temps = np.linspace(-25, 45, 5)
    # Each argument may carry the shape: temperatures, biases or photon rates.
    assert M.evaluate(dev, temps, bias_v=27.5).gain.shape == (5,)
    assert M.evaluate(dev, 25.0, bias_v=np.linspace(25, 30, 4)).gain.shape == (4,)
    lit = M.evaluate(dev, 25.0, bias_v=27.5, photon_rate_hz=np.array([0.0, 1e6, 1e7]))
    assert lit.current_a.shape == (3,) and np.all(np.diff(lit.current_a) > 0)
    assert lit.temp_c.shape == (3,) and lit.bias_v.tolist() == [27.5] * 3
    # Exactly at breakdown the relative gain change is undefined (zero gain): NaN, not infinity.
    at_bd = M.evaluate(dev, 25.0, bias_v=24.5)
    assert at_bd.gain == 0.0 and np.isnan(at_bd.gain_change_pct_per_k)
    with pytest.raises(ModelError) as info:
        M.evaluate(dev, 25.0, bias_v=27.5, overvoltage_v=3.0)
    assert info.value.key == "bias_v" and info.value.reason == "give exactly one of bias_v and overvoltage_v"
    with pytest.raises(ModelError) as info:
        M.relative_gain_change_per_k(dev, [3.0, -1.0])
    assert info.value.key == "overvoltage_v" and info.value.reason == "must be positive for a relative gain change"

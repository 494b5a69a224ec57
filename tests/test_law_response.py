"""The constant-response law, the crosstalk models and mixed breakdown definitions."""

from dataclasses import replace
from math import exp, factorial, log

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.findings import Severity
from compensator.law import build_law, gain_error_budget
from compensator.physics.scintillator import Scintillator, relative_light_yield, response_per_photon
from compensator.physics.sipm import breakdown_v, crosstalk_branching_ratio, crosstalk_mean_multiplier, pde

TEMPS_C = np.linspace(-25.0, 45.0, 15)
CRYSTAL = Scintillator(ref_temp_c=25.0, light_yield_tempco_pct_per_k=-0.3, light_yield_curvature_pct_per_k2=-0.002,
                       light_yield_tempco_err_pct_per_k=0.02)


def _with_crystal(sipm_profile):
    return replace(sipm_profile, scintillator=CRYSTAL)


def test_geometric_chain_mean():
    # Geometric chain: P(n) = (1 - p) p^(n-1), n >= 1; its mean is 1/(1 - p) (summed here independently).
    from compensator.physics.sipm import Breakdown, Sipm
    dev = Sipm(Breakdown(25.0), 100e-15, 1000, crosstalk_probability=0.2, crosstalk_ref_overvoltage_v=3.0)
    series = sum(n * (1 - 0.2) * 0.2 ** (n - 1) for n in range(1, 200))
    assert float(crosstalk_mean_multiplier(dev, 3.0)) == pytest.approx(series, rel=1e-12)
    assert series == pytest.approx(1.25, rel=1e-12)


def test_branching_poisson_mean_is_the_borel_mean():
    # Branching Poisson (Vinogradov, NIM A 695, 247, 2012): lambda = -ln(1 - p); the total number of avalanches
    # is Borel distributed, P(n) = (n lambda)^(n-1) exp(-n lambda) / n!, with mean 1/(1 - lambda).
    from compensator.physics.sipm import Breakdown, Sipm
    p = 0.2
    lam = -log(1 - p)
    borel_mean = sum(n * (n * lam) ** (n - 1) * exp(-n * lam) / factorial(n) for n in range(1, 150))
    assert borel_mean == pytest.approx(1 / (1 - lam), rel=1e-9)
    dev = Sipm(Breakdown(25.0), 100e-15, 1000, crosstalk_probability=p, crosstalk_ref_overvoltage_v=3.0,
               crosstalk_model="branching_poisson")
    assert float(crosstalk_branching_ratio(p)) == pytest.approx(lam, rel=1e-15)
    assert float(crosstalk_mean_multiplier(dev, 3.0)) == pytest.approx(borel_mean, rel=1e-9)
    assert float(crosstalk_mean_multiplier(dev, 3.0)) == pytest.approx(1.2872, abs=1e-4)  # 1/(1 - 0.22314)
    with pytest.raises(ModelError) as info:
        replace(dev, crosstalk_probability=0.7)
    assert info.value.key == "crosstalk_probability"


def test_crosstalk_overvoltage_exponent():
    # p(V) = 1 - exp(-k V^n), k from the reference point: with n = 2, doubling V from the reference multiplies
    # -ln(1 - p) by 4 (hand calculation): p(6 V) = 1 - (1 - 0.08)^4 = 0.28361.
    from compensator.physics.sipm import Breakdown, Sipm, crosstalk_probability
    dev = Sipm(Breakdown(25.0), 100e-15, 1000, crosstalk_probability=0.08, crosstalk_ref_overvoltage_v=3.0,
               crosstalk_overvoltage_exponent=2.0)
    assert float(crosstalk_probability(dev, 6.0)) == pytest.approx(1 - 0.92 ** 4, rel=1e-12)
    cubic = replace(dev, crosstalk_overvoltage_exponent=3.0)
    assert float(crosstalk_probability(cubic, 6.0)) == pytest.approx(1 - 0.92 ** 8, rel=1e-12)


def test_light_yield_polynomial():
    y = relative_light_yield(CRYSTAL, [25.0, -25.0, 45.0])
    assert y.tolist() == pytest.approx([1.0, 1 + 0.01 * (-50) * (-0.3 - 0.002 * -50), 1 + 0.01 * 20 * (-0.3 - 0.04)])


def test_constant_response_holds_the_product(sipm_a, board_ntc):
    law = build_law(_with_crystal(sipm_a), board_ntc, 3.0, kind="constant_response", drop_correction="none")
    dev = sipm_a.device
    held = response_per_photon(dev, CRYSTAL, law.target_overvoltage_v(TEMPS_C), TEMPS_C)
    ref = response_per_photon(dev, CRYSTAL, 3.0, 25.0)
    assert np.allclose(held / ref, 1.0, atol=1e-8)
    # Independent check at -25 C: the crystal gives 1 + 0.5 * 0.2 = ... more light, so the SiPM must give
    # exactly that much less: gain x PDE x crosstalk at the target over that at 3 V equals 1/Y(-25 C).
    ov = float(law.target_overvoltage_v(-25.0))
    product = lambda v: v * float(pde(dev, v)) * float(crosstalk_mean_multiplier(dev, v))  # noqa: E731
    assert product(ov) / product(3.0) == pytest.approx(1.0 / float(relative_light_yield(CRYSTAL, -25.0)), rel=1e-8)
    assert ov < 3.0  # colder crystal, more light, less overvoltage
    assert law.quantity == "response"
    # A constant-gain law leaves the light-yield drift: about 0.3 %/K x 50 K = 10 % at -25 C.
    gain_law = build_law(_with_crystal(sipm_a), board_ntc, 3.0, kind="constant_gain", drop_correction="none")
    ratio = response_per_photon(dev, CRYSTAL, gain_law.target_overvoltage_v(-25.0), -25.0) / ref
    assert float(ratio) - 1 == pytest.approx(0.01 * 50 * (0.3 - 0.1), rel=1e-9)


def test_response_law_budget(sipm_a, board_ntc):
    law = build_law(_with_crystal(sipm_a), board_ntc, 3.0, kind="constant_response", drop_correction="none")
    budget = gain_error_budget(law, board_ntc, samples=0)
    assert budget.quantity == "response"
    term = budget.term("light_yield_tempco")
    # 0.02 %/K one sigma over 50 K from 25 C: 1 % at -25 C, the response law puts it on the response itself.
    assert term.std_pct_by_temp[0] == pytest.approx(0.02 * 50 / float(relative_light_yield(CRYSTAL, -25.0)), rel=1e-3)
    # A bias error weighs more on the response than on the gain: PDE and crosstalk rise with overvoltage too.
    per_v = law.error_pct_per_v(25.0)
    assert per_v > 100.0 / 3.0
    v = 3.0
    dev = sipm_a.device
    h = 1e-5
    by_hand = 100 * (np.log(v + h) - np.log(v - h) + np.log(pde(dev, v + h)) - np.log(pde(dev, v - h))
                     + np.log(crosstalk_mean_multiplier(dev, v + h)) - np.log(crosstalk_mean_multiplier(dev, v - h))) \
        / (2 * h)
    assert float(per_v) == pytest.approx(float(by_hand), rel=1e-6)


def test_response_law_needs_a_crystal(sipm_a, sipm_b, board_ntc):
    from compensator.errors import ProfileError
    with pytest.raises(ProfileError, match="scintillator: missing section"):
        build_law(replace(sipm_a, scintillator=None), board_ntc, 3.0, kind="constant_response")
    # The bundled hut-sipm-a reads an invented crystal; hut-sipm-b reads none.
    assert sipm_a.scintillator == Scintillator(ref_temp_c=25.0, light_yield_tempco_pct_per_k=-0.25,
                                               light_yield_curvature_pct_per_k2=-0.002,
                                               light_yield_tempco_err_pct_per_k=0.03)
    assert sipm_b.scintillator is None


def test_iv_breakdown_is_refused_without_an_offset(sipm_a, board_ntc):
    bd = sipm_a.device.breakdown
    iv = replace(sipm_a, device=replace(sipm_a.device, breakdown=replace(bd, definition="iv_inverse_log_derivative")))
    with pytest.raises(ModelError) as info:
        build_law(iv, board_ntc, 3.0)
    assert info.value.key == "breakdown.definition" and "gain-intercept" in info.value.reason
    # With a known offset the law shifts the breakdown and says so.
    known = replace(iv, device=replace(iv.device, breakdown=replace(
        iv.device.breakdown, definition_offset_v=-0.12, definition_offset_err_v=0.02)))
    law = build_law(known, board_ntc, 3.0)
    (finding,) = law.findings
    assert finding.code == "breakdown_definitions_mixed" and finding.severity is Severity.WARNING
    assert "-120.0 mV" in finding.message and "iv_inverse_log_derivative" in finding.message
    assert float(breakdown_v(law.sipm, 25.0)) == pytest.approx(24.5 - 0.12, abs=1e-12)
    budget = gain_error_budget(law, board_ntc, samples=0)
    term = budget.term("breakdown_definition")
    # A breakdown offset of one sigma, like the breakdown calibration's 30 mV: the two terms scale as 20 : 30.
    assert term.std_pct_by_temp == pytest.approx(budget.term("breakdown_calibration").std_pct_by_temp * 2 / 3,
                                                 rel=1e-6)
    assert term.calibrated_std_pct < 0.03 * term.std_pct  # a constant voltage: the calibration removes most of it
    assert budget.findings == law.findings
    # An explicit offset wins over the profile's.
    assert float(breakdown_v(build_law(known, board_ntc, 3.0, breakdown_offset_v=0.05).sipm, 25.0)) == \
        pytest.approx(24.55, abs=1e-12)


def test_constant_response_law_shorthand(sipm_a, board_ntc):
    from compensator.law import constant_response_law
    law = constant_response_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    assert law.kind == "constant_response" and law.overvoltage_v == 3.0 and law.scintillator == sipm_a.scintillator
    assert law.board_name == "hut-board-ntc" and law.sipm_name == "hut-sipm-a"
    assert law.drop_correction == "none"  # the options reach build_law (default "modelled")


def test_light_yield_error_and_zero_light():
    # Y = 1 + 0.01 dT (a + e + b dT): an error e = +0.1 %/K at -25 C (dT = -50 K) lowers Y by 0.05.
    y = float(relative_light_yield(CRYSTAL, -25.0, 0.1))
    assert y == pytest.approx(1 + 0.01 * (-50) * (-0.3 + 0.1 - 0.002 * -50), rel=1e-12)
    # a = -2 %/K takes the light to exactly zero 50 K above the reference: refused.
    dark = Scintillator(light_yield_tempco_pct_per_k=-2.0)
    with pytest.raises(ModelError) as info:
        relative_light_yield(dark, [25.0, 75.0])
    assert info.value.key == "light_yield_tempco_pct_per_k"
    assert info.value.reason == "the light yield falls to zero inside the temperature range"


def test_response_per_photon_by_hand(sipm_a):
    # R = C (Vov) / q x PDE x 1/(1 - p) x Y, hut-sipm-a at 25 C (Y = 1): 160 fF, PDE 0.5 (1 - exp(-Vov/2.3 V)),
    # p = 1 - 0.92^((Vov/3 V)^2) (hand calculation of the model's formulas).
    from math import exp
    dev = sipm_a.device
    for ov in (0.5, 3.0):
        p = 1 - 0.92 ** ((ov / 3.0) ** 2)
        by_hand = 160e-15 * ov / 1.602176634e-19 * 0.5 * (1 - exp(-ov / 2.3)) / (1 - p)
        assert float(response_per_photon(dev, CRYSTAL, ov, 25.0)) == pytest.approx(by_hand, rel=1e-12)
    assert float(response_per_photon(dev, CRYSTAL, -1.0, 25.0)) == 0.0


def test_overvoltage_for_response_meets_its_tolerance(sipm_a):
    # Bisection on [0, 8 V] to a 0.1 V bracket: the answer lies within 0.05 V of the root. The root 3.001 V sits
    # just above a multiple of 1/8 V, where a bisection stopped two steps early would be 0.06 V off.
    from compensator.physics.scintillator import overvoltage_for_response
    dev = sipm_a.device
    target = response_per_photon(dev, CRYSTAL, 3.001, 25.0)
    ov = float(overvoltage_for_response(dev, CRYSTAL, target, 25.0, max_overvoltage_v=8.0, tol_v=0.1))
    assert abs(ov - 3.001) <= 0.05
    exact = overvoltage_for_response(dev, CRYSTAL, target, [25.0, 25.0], max_overvoltage_v=8.0)
    np.testing.assert_allclose(exact, 3.001, rtol=0, atol=1e-9)


def test_constant_response_table_meets_its_bound_in_response_terms(sipm_a, board_ntc):
    # The table is sized with what the response law holds, not with the gain's 100/Vov: at every ADC code of the
    # range, the response (gain x PDE x crosstalk x light yield) at the table's DAC code stays within the bound.
    # Everything below is computed here from the profiles' numbers, independently of the library:
    #   supply (feedback injection): Vout = 1.25 (1 + 1e6/43.2e3 + 1e6/250e3) - code x 2.5/65536 x 1e6/250e3;
    #   breakdown 24.5 V + 21.5 mV/K (T - 25 C); response ~ Vov x (1 - exp(-Vov/2.3)) / 0.92^((Vov/3)^2) x Y(T),
    #   Y(T) = 1 - 0.25e-2 dT - 0.002e-2 dT^2 (the bundled crystal); the reference is Vov = 3 V at 25 C.
    from compensator.firmware.tables import build_table
    bound_pct = 0.05
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_response", drop_correction="none")
    table = build_table(law, board_ntc, bound_pct)
    codes = np.arange(table.code_lo, table.code_hi + 1)
    temps = board_ntc.temperature.temp_at(codes + 0.5)
    dac, _ = table.lookup(codes)
    v_out = 1.25 * (1 + 1e6 / 43.2e3 + 1e6 / 250e3) - dac * 2.5 / 65536 * 1e6 / 250e3
    dt = temps - 25.0

    def response(ov, dt_k):
        return ov * (1 - np.exp(-ov / 2.3)) / 0.92 ** ((ov / 3.0) ** 2) * (1 - 0.25e-2 * dt_k - 0.002e-2 * dt_k ** 2)

    err_pct = 100 * (response(v_out - (24.5 + 0.0215 * dt), dt) / response(3.0, 0.0) - 1)
    # The table's own check is first order in the bias error; the second-order part is below 1e-3 of the bound.
    assert np.max(np.abs(err_pct)) <= bound_pct * (1 + 1e-3)
    assert np.max(np.abs(err_pct)) > 0.5 * bound_pct  # the table spends its bound: the check has teeth
    # Sized with the gain's 100/Vov the same bound would allow 1.65 times the error (hand calculation at 3 V:
    # d ln R/dV = 1/3 + 0.162 (PDE) + 0.056 (crosstalk) = 0.551 per volt, against 0.333 for the gain).
    assert float(law.error_pct_per_v(25.0)) == pytest.approx(55.1, rel=2e-3)


def _refused_crystal(field, value):
    with pytest.raises(ModelError) as info:
        replace(CRYSTAL, **{field: value})
    assert info.value.key == field
    return info.value.reason


@pytest.mark.parametrize("field", ["ref_temp_c", "light_yield_tempco_pct_per_k", "light_yield_curvature_pct_per_k2",
                                   "light_yield_tempco_err_pct_per_k"])
def test_scintillator_fields_are_finite(field):
    for bad in (float("nan"), float("inf")):
        assert _refused_crystal( field, bad) == f"must be finite, got {bad!r}"


def test_scintillator_uncertainty_is_non_negative():
    for fine in (0.0, 0.5, 2.0):
        assert replace(CRYSTAL, light_yield_tempco_err_pct_per_k=fine).light_yield_tempco_err_pct_per_k == fine
    assert _refused_crystal( "light_yield_tempco_err_pct_per_k", -0.01) == "must be non-negative"

"""Temperature sensors and front ends against published values."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from compensator.errors import ModelError
from compensator.physics import sensors as S

# IEC 60751 Pt100 table (ITS-90 Callendar-Van Dusen), ohm.
IEC60751_PT100 = {
    -200: 18.5201, -100: 60.2558, -50: 80.3063, 0: 100.0000, 25: 109.7347, 100: 138.5055,
    200: 175.8560, 300: 212.0515, 400: 247.0920, 500: 280.9775, 850: 390.4811,
}


def test_pt100_matches_iec60751_table_to_1_milliohm():
    # Source: IEC 60751 reference table for Pt100.
    temps = np.array(list(IEC60751_PT100), dtype=float)
    expected = np.array(list(IEC60751_PT100.values()))
    np.testing.assert_allclose(S.rtd_resistance_ohm(temps, 100.0), expected, atol=1e-3, rtol=0)


def test_pt100_inverse_to_1_millikelvin():
    # Source: IEC 60751 reference table for Pt100 (table resistances read back to their temperatures).
    temps = np.array(list(IEC60751_PT100), dtype=float)
    resistances = np.array(list(IEC60751_PT100.values()))
    # The table is rounded to 0.1 mohm, which is at most 0.3 mK on a Pt100.
    np.testing.assert_allclose(S.rtd_temp_c(resistances, 100.0), temps, atol=1e-3, rtol=0)


def test_rtd_round_trip_dense_and_scalar():
    temps = np.linspace(-200, 850, 10001)
    np.testing.assert_allclose(S.rtd_temp_c(S.rtd_resistance_ohm(temps, 1000.0), 1000.0), temps, rtol=0, atol=1e-9)
    assert float(S.rtd_temp_c(S.rtd_resistance_ohm(-37.5, 100.0), 100.0)) == pytest.approx(-37.5, abs=1e-9)


def test_rtd_range_is_enforced():
    with pytest.raises(ModelError):
        S.rtd_resistance_ohm(900.0)
    with pytest.raises(ModelError):
        S.rtd_temp_c(10.0, 100.0)


def test_rtd_tolerance_classes():
    # IEC 60751 classes A and B: +-(0.15 + 0.002|t|) and +-(0.3 + 0.005|t|).
    assert S.rtd_tolerance_k(100.0, "A") == pytest.approx(0.35)
    assert S.rtd_tolerance_k(-50.0, "B") == pytest.approx(0.55)
    with pytest.raises(ModelError):
        S.rtd_tolerance_k(0.0, "Z")


def test_steinhart_hart_reference_coefficients_give_10k_at_25c():
    # A widely used coefficient set for a 10 kohm NTC (Steinhart and Hart, Deep-Sea Research 15, 497, 1968
    # form) maps 10 kohm to 298.15 K (computed; to about 1 mK).
    sh = S.SteinhartHart(1.129148e-3, 2.34125e-4, 8.76741e-8)
    assert S.steinhart_hart_temp_c(10_000.0, sh) == pytest.approx(25.0, abs=2e-3)


def test_steinhart_hart_three_point_fit_reproduces_points_exactly():
    temps = np.array([-20.0, 25.0, 60.0])
    resistances = np.array([96_000.0, 10_000.0, 2_490.0])
    sh = S.fit_steinhart_hart(temps, resistances)
    np.testing.assert_allclose(S.steinhart_hart_temp_c(resistances, sh), temps, atol=1e-9)
    np.testing.assert_allclose(S.steinhart_hart_resistance_ohm(temps, sh), resistances, rtol=1e-9)


@settings(max_examples=50, deadline=None)
@given(st.floats(min_value=-40, max_value=120))
def test_steinhart_hart_forward_inverse_round_trip(temp_c):
    sh = S.SteinhartHart(1.129148e-3, 2.34125e-4, 8.76741e-8)
    r = S.steinhart_hart_resistance_ohm(temp_c, sh)
    assert S.steinhart_hart_temp_c(r, sh) == pytest.approx(temp_c, abs=1e-9)


def test_steinhart_hart_fit_recovers_beta_curve_closely():
    temps = np.linspace(-25, 45, 15)
    r = S.ntc_beta_resistance_ohm(temps, 10_000.0, 3435.0)
    sh = S.fit_steinhart_hart(temps, r)
    assert np.max(np.abs(S.steinhart_hart_temp_c(r, sh) - temps)) < 0.05


def test_fit_needs_three_points():
    with pytest.raises(ModelError):
        S.fit_steinhart_hart([0.0, 25.0], [30_000.0, 10_000.0])


def test_beta_model_identities():
    # Beta model R = R25 exp(B (1/T - 1/298.15 K)): R(25 C) = R25; ln(R1/R2) = B (1/T1 - 1/T2).
    assert S.ntc_beta_resistance_ohm(25.0, 10_000.0, 3435.0) == pytest.approx(10_000.0, rel=1e-12)
    r0, r50 = S.ntc_beta_resistance_ohm([0.0, 50.0], 10_000.0, 3435.0)
    assert np.log(r0 / r50) == pytest.approx(3435.0 * (1 / 273.15 - 1 / 323.15), rel=1e-12)
    temps = np.linspace(-40, 125, 100)
    np.testing.assert_allclose(
        S.ntc_beta_temp_c(S.ntc_beta_resistance_ohm(temps, 10_000.0, 3435.0), 10_000.0, 3435.0), temps, atol=1e-9)
    # The local Beta of a Beta-model NTC is the Beta constant itself.
    ntc = S.NtcSensor(10_000.0, beta_k=3435.0)
    np.testing.assert_allclose(ntc.effective_beta_k([-20.0, 25.0, 40.0]), 3435.0, rtol=1e-5)


def test_ntc_tolerance_grows_away_from_25c():
    ntc = S.NtcSensor(10_000.0, beta_k=3435.0, r25_tolerance_pct=1.0, beta_tolerance_pct=1.0)
    tol = ntc.tolerance_k([-25.0, 25.0, 45.0])
    # At 25 C only the R25 term remains: 1 % of R reads as 0.01 T^2 / B kelvin.
    assert tol[1] == pytest.approx(0.01 * 298.15 ** 2 / 3435.0, rel=1e-4)
    assert tol[0] > tol[1] and tol[2] > tol[1]


@pytest.mark.parametrize("position", ["low", "high"])
@pytest.mark.parametrize("ratiometric", [True, False])
def test_front_end_code_resistance_round_trip(position, ratiometric):
    fe = S.FrontEnd(position, 10_000.0, 3.3, ratiometric, 12, 3.0)
    codes = np.arange(1, fe.full_scale_code)
    r = fe.resistance_ohm(codes)
    ok = np.isfinite(r)
    # The centre of each code's interval converts back to the same code.
    np.testing.assert_array_equal(fe.adc_code(r[ok]), codes[ok])


def test_front_end_hand_example():
    # Low-side sensor of 10 kohm against 10 kohm: half of the excitation -> code 2048 of a ratiometric 12-bit ADC.
    fe = S.FrontEnd("low", 10_000.0, 3.3, True, 12, 3.3)
    assert int(fe.adc_code(10_000.0)) == 2048
    # Absolute 2.5 V reference, 3.3 V excitation: node 1.65 V -> floor(1.65 / 2.5 * 4096) = 2703.
    fe_abs = S.FrontEnd("low", 10_000.0, 3.3, False, 12, 2.5)
    assert int(fe_abs.adc_code(10_000.0)) == 2703


def test_channel_flags_rail_codes(board_ntc):
    ch = board_ntc.temperature
    t = ch.temp_c([0, 2048, ch.front_end.full_scale_code])
    assert np.isnan(t[0]) and np.isnan(t[2]) and t[1] == pytest.approx(25.0, abs=0.05)


def test_channel_quantisation_error_within_half_code(board_pt1000, board_ntc):
    for board in (board_ntc, board_pt1000):
        ch = board.temperature
        temps = np.linspace(board.min_temp_c, board.max_temp_c, 2001)
        err = ch.temp_c(ch.adc_code(temps)) - temps
        assert np.all(np.abs(err) <= 0.51 * ch.temp_per_code_k(temps) + 1e-9)


def test_dew_point_magnus():
    # Magnus formula (Alduchov and Eskridge, J. Appl. Meteor. 35, 601, 1996): 25 C at 50 % RH -> about 13.86 C.
    from compensator.physics.thermal import dew_point_c
    assert dew_point_c(25.0, 50.0) == pytest.approx(13.86, abs=0.01)
    assert dew_point_c(10.0, 100.0) == pytest.approx(10.0, abs=1e-9)
    with pytest.raises(ModelError):
        dew_point_c(20.0, 0.0)


def test_ntc_models_refuse_absolute_zero():
    sh = S.SteinhartHart(1.129148e-3, 2.34125e-4, 8.76741e-8)
    with pytest.raises(ModelError, match="absolute zero"):
        S.ntc_beta_resistance_ohm(-280.0, 10_000.0, 3435.0)
    with pytest.raises(ModelError, match="absolute zero"):
        S.steinhart_hart_resistance_ohm(-273.15, sh)


def test_ntc_tolerance_terms_by_hand():
    # Beta model 1/T = 1/T25 + ln(R/R25)/B: a relative resistance error e reads as dT = e T^2 / B, a Beta error
    # dB/B at fixed R as dT = T^2 |1/T - 1/T25| dB/B (differentiating the published Beta equation by hand).
    # At 0 C, 1 % and 1 %, B = 3435 K: 0.01 * 273.15^2 / 3435 = 0.217208 K and
    # 0.01 * 273.15 * (1 - 273.15/298.15) = 0.229037 K.
    ntc = S.NtcSensor(10_000.0, beta_k=3435.0, r25_tolerance_pct=1.0, beta_tolerance_pct=1.0)
    from_r25 = 0.01 * 273.15 ** 2 / 3435.0
    from_beta = 0.01 * 273.15 ** 2 * (1 / 273.15 - 1 / 298.15)
    assert from_r25 == pytest.approx(0.217208, abs=1e-6) and from_beta == pytest.approx(0.229037, abs=1e-6)
    assert float(ntc.tolerance_k(0.0)) == pytest.approx(from_r25 + from_beta, rel=1e-6)
    beta_only = S.NtcSensor(10_000.0, beta_k=3435.0, r25_tolerance_pct=0.0, beta_tolerance_pct=2.0)
    assert float(beta_only.tolerance_k(0.0)) == pytest.approx(2 * from_beta, rel=1e-6)
    assert float(beta_only.tolerance_k(25.0)) == pytest.approx(0.0, abs=1e-9)  # no Beta error at 25 C


def test_rtd_tolerance_classes_aa_and_c_and_the_sensor_record():
    # Classes AA and C of IEC 60751:2008, from memory: +-(0.1 + 0.0017|t|) and +-(0.6 + 0.01|t|).
    assert S.rtd_tolerance_k(-100.0, "AA") == pytest.approx(0.27)
    assert S.rtd_tolerance_k(200.0, "C") == pytest.approx(2.6)
    # The sensor record uses its own class: class B at -50 C is 0.3 + 0.005 x 50 = 0.55 K (IEC 60751).
    assert S.RtdSensor(r0_ohm=1000.0, tolerance_class="B").tolerance_k(-50.0) == pytest.approx(0.55)
    with pytest.raises(ModelError) as info:
        S.rtd_tolerance_k(0.0, "Z")
    assert info.value.key == "tolerance_class" and info.value.reason == "must be one of AA, A, B, C"


def test_steinhart_hart_fit_refuses_what_it_cannot_fit():
    for temps, resistances in (([0.0, 25.0], [30_000.0, 10_000.0]), ([0.0, 25.0, 50.0], [30e3, 10e3])):
        with pytest.raises(ModelError) as info:
            S.fit_steinhart_hart(temps, resistances)
        assert info.value.key == "temp_c"
        assert info.value.reason == "needs at least three (temp_c, resistance_ohm) pairs of equal length"
    for temps, resistances in (([0.0, 25.0, 50.0], [30e3, 0.0, 3e3]), ([-273.15, 25.0, 50.0], [30e3, 10e3, 3e3])):
        with pytest.raises(ModelError) as info:
            S.fit_steinhart_hart(temps, resistances)
        assert info.value.key == "resistance_ohm"
        assert info.value.reason == "resistances and absolute temperatures must be positive"


def test_steinhart_hart_three_point_fit_at_any_scale():
    # Three points fix a, b, c exactly whatever the units: resistances below 1 ohm, temperatures below 1 K.
    for temps, resistances in (([-20.0, 25.0, 60.0], [0.96, 0.1, 0.0249]), ([-272.9, -272.5, -272.0], [9e3, 4e3, 2e3])):
        sh = S.fit_steinhart_hart(temps, resistances)
        np.testing.assert_allclose(S.steinhart_hart_temp_c(resistances, sh), temps, rtol=0, atol=1e-9)


def test_front_end_codes_clip_to_the_converter_and_are_integers():
    fe = S.FrontEnd("low", 10_000.0, 3.3, True, 12, 3.3)
    codes = fe.adc_code([0.0, 10_000.0, 1e12])
    # A shorted sensor reads code 0, an open one the full-scale code 4095 (clipped), 10 kohm code 2048.
    assert codes.tolist() == [0, 2048, 4095] and codes.dtype == np.int64


def test_channel_rails_and_code_range_by_hand(board_ntc):
    from math import exp, floor
    ch = board_ntc.temperature
    # Only codes 0 and 4095 are rails: code 1 still reads a (very hot) temperature.
    assert np.isfinite(ch.temp_c(1)) and np.isfinite(ch.temp_c(4094))
    # Beta model (R25 10 kohm, B 3435 K) low in a 10 kohm divider, ratiometric 12 bits:
    # code = floor(4096 R / (R + 10 kohm)), computed here independently.
    def code(t_c):
        r = 10_000.0 * exp(3435.0 * (1 / (t_c + 273.15) - 1 / 298.15))
        return floor(4096 * r / (r + 10_000.0))
    assert ch.code_range(-25.0, 45.0) == (code(45.0), code(-25.0))
    assert ch.code_range(45.0, -25.0) == (code(45.0), code(-25.0))


def test_rtd_range_edges_and_messages():
    # IEC 60751 defines the curve from -200 to 850 C: half a kelvin beyond either end is refused.
    for t in (-200.5, 850.5):
        with pytest.raises(ModelError) as info:
            S.rtd_resistance_ohm(t)
        assert info.value.key == "temp_c" and info.value.reason == "outside the IEC 60751 range -200 to 850 C"
    assert S.rtd_resistance_ohm([-200.0, 850.0]) == pytest.approx([18.5201, 390.4811], abs=1e-4)  # IEC 60751 table
    for r in (18.5201 * 0.999, 390.4811 * 1.001):
        with pytest.raises(ModelError) as info:
            S.rtd_temp_c(r)
        assert info.value.key == "resistance_ohm" and info.value.reason == "outside the IEC 60751 range (-200 to 850 C)"


def test_rtd_between_0_and_1_c_uses_no_c_term():
    # Above 0 C the Callendar-Van Dusen C term is zero (IEC 60751): R(0.5 C) = 100 (1 + A 0.5 + B 0.25) exactly,
    # and the inverse returns 0.5 C to 1e-12 K (the C term there would shift it by about 1e-8 K).
    r = 100.0 * (1 + 3.9083e-3 * 0.5 - 5.775e-7 * 0.25)
    assert float(S.rtd_resistance_ohm(0.5)) == pytest.approx(r, rel=1e-15)
    assert float(S.rtd_temp_c(r)) == pytest.approx(0.5, abs=1e-12)


def test_kelvin_bound_and_the_steinhart_hart_sensor():
    # Any temperature above absolute zero is a temperature: 0.65 K with a Beta of 1 K gives R25 exp(1/0.65 - 1/298.15).
    from math import exp
    assert float(S.ntc_beta_resistance_ohm(-272.5, 10_000.0, 1.0)) == pytest.approx(
        10_000.0 * exp(1 / 0.65 - 1 / 298.15), rel=1e-9)
    with pytest.raises(ModelError) as info:
        S.ntc_beta_resistance_ohm(-273.15, 10_000.0, 3435.0)
    assert info.value.key == "temp_c" and info.value.reason == "must be above absolute zero (-273.15 C)"
    # Without the cubic term Steinhart-Hart is 1/T = a + b ln R: R = exp((1/T - a)/b), solved here by hand.
    sh2 = S.SteinhartHart(1.0e-3, 2.5e-4, 0.0)
    r_by_hand = exp((1 / 298.15 - 1.0e-3) / 2.5e-4)
    assert float(S.steinhart_hart_resistance_ohm(25.0, sh2)) == pytest.approx(r_by_hand, rel=1e-12)
    # An NTC described by Steinhart-Hart coefficients: the widely used 10 kohm set maps 10 kohm to 25 C (to 2 mK).
    sh = S.SteinhartHart(1.129148e-3, 2.34125e-4, 8.76741e-8)
    ntc = S.NtcSensor(10_000.0, steinhart_hart=sh)
    assert float(ntc.temp_c(10_000.0)) == pytest.approx(25.0, abs=2e-3)
    assert float(ntc.resistance_ohm(25.0)) == pytest.approx(10_000.0, rel=1e-3)
    assert float(ntc.temp_c(ntc.resistance_ohm(-20.0))) == pytest.approx(-20.0, abs=1e-9)


def test_ntc_needs_exactly_one_model():
    sh = S.SteinhartHart(1.129148e-3, 2.34125e-4, 8.76741e-8)
    for kwargs in ({}, {"beta_k": 3435.0, "steinhart_hart": sh}):
        with pytest.raises(ModelError) as info:
            S.NtcSensor(10_000.0, **kwargs)
        assert info.value.key == "beta_k"
        assert info.value.reason == "an NTC needs exactly one of beta_k and steinhart_hart"

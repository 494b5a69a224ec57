"""Temperature sensors and channels: defaults, range edges, positions and the code step, by hand.

Sources: IEC 60751 (Callendar-Van Dusen, A = 3.9083e-3, B = -5.775e-7, closed-form inverse at and above 0 C;
class A tolerance 0.15 K + 0.002 |t|); the NTC Beta model R = R25 exp(B (1/T - 1/298.15 K)) and its derivative
dR/dT = -B R / T^2, differentiated by hand.
"""

from math import exp, floor, sqrt

import numpy as np
import pytest

from compensator.physics import sensors as S

A, B = 3.9083e-3, -5.775e-7  # IEC 60751


def _rtd_inverse_above_zero(r_ohm, r0_ohm):
    # IEC 60751 at and above 0 C: R/R0 = 1 + A t + B t^2, solved for t.
    return (-A + sqrt(A * A - 4 * B * (1 - r_ohm / r0_ohm))) / (2 * B)


def test_rtd_tolerance_defaults_to_class_a():
    # IEC 60751 class A at 100 C: 0.15 + 0.002 x 100 = 0.35 K.
    assert float(S.rtd_tolerance_k(100.0)) == pytest.approx(0.35, rel=1e-14, abs=0)
    assert float(S.RtdSensor().tolerance_k(-100.0)) == pytest.approx(0.35, rel=1e-14, abs=0)


def test_rtd_range_keeps_its_rounding_slack():
    # The range -200 to 850 C admits 1e-9 K of rounding at either end (and 1e-12 of the resistance ratio in the
    # inverse), no more: the end values themselves are IEC 60751's 18.5201 and 390.4811 ohm (Pt100 table).
    assert float(S.rtd_resistance_ohm(-200.0 - 1e-9)) == pytest.approx(18.5201, abs=1e-4)
    assert float(S.rtd_resistance_ohm(850.0 + 1e-9)) == pytest.approx(390.4811, abs=1e-4)
    lo, hi = S.rtd_resistance_ohm([-200.0, 850.0], 1.0)
    assert float(S.rtd_temp_c(lo * (1 - 1e-12), 1.0)) == pytest.approx(-200.0, abs=1e-6)
    assert float(S.rtd_temp_c(hi * (1 + 1e-12), 1.0)) == pytest.approx(850.0, abs=1e-6)


def test_rtd_channel_positions_in_and_out_of_the_standard_range():
    # Pt1000 low in a 1 kohm ratiometric 12-bit divider: position p reads R = 1000 x / (1 - x), x = p / 4096.
    ch = S.TemperatureChannel(S.RtdSensor(r0_ohm=1000.0), S.FrontEnd("low", 1000.0, 3.3, True, 12, 3.3))
    positions = np.array([100.0, 2048.5, 2600.0, 3500.0, 0.0, 4096.0])
    t = ch.temp_at(positions)
    x = positions[1:3] / 4096
    expected = [_rtd_inverse_above_zero(1000 * xi / (1 - xi), 1000.0) for xi in x]
    # 100 reads 25.0 ohm (below -200 C), 3500 reads 5.9 kohm (above 850 C), 0 and 4096 have no divider solution.
    assert t.dtype == np.float64 and np.isnan(t[[0, 3, 4, 5]]).all()
    np.testing.assert_allclose(t[1:3], expected, rtol=0, atol=1e-9)
    assert float(ch.temp_at(2048.5)) == pytest.approx(expected[0], abs=1e-9)
    assert np.isnan(ch.temp_at(3500.0))


def test_ntc_channel_continuous_code_and_code_step_by_hand():
    # Beta NTC (10 kohm, 3435 K) low in a 10 kohm ratiometric 12-bit divider: position = 4096 R / (R + 10 kohm);
    # one code is dT = (1/4096) / |d(R/(R+Rf))/dT| with d(R/(R+Rf))/dT = Rf R' / (R + Rf)^2, R' = -B R / T^2.
    ch = S.TemperatureChannel(S.NtcSensor(10_000.0, beta_k=3435.0), S.FrontEnd("low", 10_000.0, 3.3, True, 12, 3.3))
    for t_c in (-25.0, 0.0, 25.0, 45.0):
        t_k = t_c + 273.15
        r = 10_000.0 * exp(3435.0 * (1 / t_k - 1 / 298.15))
        assert float(ch.continuous_code(t_c)) == pytest.approx(4096 * r / (r + 10_000.0), rel=1e-12, abs=0)
        assert int(ch.adc_code(t_c)) == floor(4096 * r / (r + 10_000.0))
        slope = 10_000.0 * (3435.0 * r / t_k ** 2) / (r + 10_000.0) ** 2
        # The module's central difference (0.05 K) is off by at most 3e-7 (relative) here.
        assert float(ch.temp_per_code_k(t_c)) == pytest.approx(1 / 4096 / slope, rel=1e-6, abs=0)


@pytest.mark.parametrize("position", ["low", "high"])
def test_divider_positions_without_a_solution_are_nan_and_quiet(position):
    # x = p / 4096 of the excitation: a positive resistance needs 0 < x < 1 (R = Rf x/(1-x) low, Rf (1-x)/x high).
    import warnings
    fe = S.FrontEnd(position, 1000.0, 3.3, True, 12, 3.3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = fe.resistance_at([-1.0, 0.0, 1024.0, 4096.0, 6144.0, np.inf])
    assert np.isnan(r[[0, 1, 3, 4, 5]]).all()
    assert r[2] == pytest.approx(1000.0 / 3 if position == "low" else 3000.0, rel=1e-14, abs=0)


def test_ntc_channel_reads_sub_ohm_resistances():
    # Every positive resistance is a reading: a 0.1 ohm NTC (Beta 3435 K) against 0.1 ohm reads 25 C at the
    # divider's midpoint, x = 1/2 (position 2048 of 4096): R = R25, so T = 298.15 K exactly.
    ch = S.TemperatureChannel(S.NtcSensor(0.1, beta_k=3435.0), S.FrontEnd("low", 0.1, 3.3, True, 12, 3.3))
    assert float(ch.temp_at(2048.0)) == pytest.approx(25.0, abs=1e-9)


def test_absolute_adc_clips_an_open_sensor_to_full_scale():
    # Absolute 2.5 V reference, 3.3 V excitation: an open sensor (1e12 ohm, low side) puts almost all of 3.3 V on
    # the ADC, 4096 x 3.3 / 2.5 = 5406.7 codes: the converter saturates at its full-scale code 4095. A shorted
    # sensor reads 0; 10 kohm against 10 kohm reads floor(4096 x 1.65 / 2.5) = 2703.
    fe = S.FrontEnd("low", 10_000.0, 3.3, False, 12, 2.5)
    assert float(fe.continuous_code(1e12)) == pytest.approx(4096 * 3.3 / 2.5, rel=1e-7, abs=0)
    assert fe.adc_code([1e12, 0.0, 10_000.0]).tolist() == [4095, 0, 2703]


def test_rtd_channel_reads_the_ends_of_the_standard_range():
    # Mid-scale of a low-side divider (x = 1/2) reads R = Rf exactly: with Rf = R(-200 C) or R(850 C) of a Pt100
    # (IEC 60751 table: 18.5201 and 390.4811 ohm) the channel reads the ends of the range, not NaN.
    for t_end in (-200.0, 850.0):
        r_end = float(S.rtd_resistance_ohm(t_end))
        ch = S.TemperatureChannel(S.RtdSensor(), S.FrontEnd("low", r_end, 3.3, True, 12, 3.3))
        assert float(ch.temp_at(2048.0)) == pytest.approx(t_end, abs=1e-9)

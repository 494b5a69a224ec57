"""The chain's response to one signed deviation of each error source, by hand (direction and size).

The budget's terms only see the size of each error (a tolerance is symmetric); the chain itself, and
``gain_error_at_light_pct(deviations=...)``, take signed deviations. Pinned where mutation testing
(tools/mutation.md) found the signs unchecked. Boards without a series resistor (no current feedback), no
quantisation, so that every figure is a hand calculation: dG/G = dV / Vov (common practice).
"""

from dataclasses import replace

import numpy as np
import pytest

from compensator.constants import ZERO_C_IN_K
from compensator.law import build_law
from compensator.law.error_chain import chain_gain_error_pct, gain_error_at_light_pct

T25_K = 25.0 + ZERO_C_IN_K


def _no_resistor(board):
    return replace(board, supply=replace(board.supply, series_resistor_ohm=0.0))


@pytest.fixture(scope="module")
def ntc_law(sipm_a, board_ntc):
    board = _no_resistor(board_ntc)
    return build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="none"), board


@pytest.fixture(scope="module")
def rtd_law(sipm_b, board_pt1000):
    board = _no_resistor(board_pt1000)
    return build_law(sipm_b, board, 4.0, kind="constant_overvoltage", drop_correction="none"), board


def _err(law_board, dev, temp_c):
    """The gain error the deviation adds to the nominal chain's (the law's own residual), percent."""
    law, board = law_board
    out = chain_gain_error_pct(law, board, dev, np.array([temp_c]), False)
    return float(out[0] - chain_gain_error_pct(law, board, {}, np.array([temp_c]), False)[0])


def test_temperature_reading_errors_on_the_ntc_board(ntc_law):
    # hut-sipm-a: Vbd linear at 21.5 mV/K, no capacitance coefficient, 3 V: a reading dT off moves the gain by
    # 100 x 0.0215 dT / 3 percent exactly. NTC beta model, B = 3435 K (ln R = ln R25 + B (1/T - 1/T25)):
    # R x 1.01 reads 1/T' = 1/T + ln(1.01) / B; a reference resistor x 1.01 reads R / 1.01; a Beta 1 % high
    # reads 1/T' = 1/T + 0.01 (1/T - 1/T25) (hand algebra).
    per_k = 100.0 * 0.0215 / 3.0
    law, board = ntc_law
    assert float(chain_gain_error_pct(law, board, {}, 25.0, False)) == pytest.approx(0.0, abs=1e-9)
    assert _err(ntc_law, {"sensor_to_die_k": 0.1}, 25.0) == pytest.approx(0.1 * per_k, rel=1e-5)
    assert _err(ntc_law, {"self_heating_k": 0.1}, 25.0) == pytest.approx(0.1 * per_k, rel=1e-5)
    assert _err(ntc_law, {"sensor_lag_k": 0.1}, 25.0) == pytest.approx(-0.1 * per_k, rel=1e-5)

    def read_k(inverse_t):
        return 1.0 / inverse_t

    for temp_c in (25.0, 45.0):
        t_k = temp_c + ZERO_C_IN_K
        colder = read_k(1.0 / t_k + np.log(1.01) / 3435.0) - t_k
        assert _err(ntc_law, {"ntc_r25": 0.01}, temp_c) == pytest.approx(colder * per_k, rel=1e-4)
        warmer = read_k(1.0 / t_k - np.log(1.01) / 3435.0) - t_k
        assert _err(ntc_law, {"reference_resistor": 0.01}, temp_c) == pytest.approx(warmer * per_k, rel=1e-4)
    t_k = 45.0 + ZERO_C_IN_K
    beta = read_k(1.0 / t_k + 0.01 * (1.0 / t_k - 1.0 / T25_K)) - t_k
    assert beta > 0.2  # the reading is 0.21 K warm at 45 C
    assert _err(ntc_law, {"ntc_beta": 0.01}, 45.0) == pytest.approx(beta * per_k, rel=1e-4)
    # A drift of 100 ppm/K with the electronics at 55 C, 30 K from their 25 C reference: x 1.003.
    drift = read_k(1.0 / t_k - np.log(1.003) / 3435.0) - t_k
    assert _err(ntc_law, {"reference_resistor_drift": 100.0}, 45.0) == pytest.approx(drift * per_k, rel=1e-4)


def test_converter_and_network_directions_on_the_ntc_board(ntc_law):
    # Ratiometric ADC, NTC in the low position: a higher reading means a higher resistance, a colder sensor, a
    # lower bias. The ADC reference cancels. INL and offset add to the reading alike. The feedback-injection
    # output Vout = Vfb (1 + R1/R2 + R1/R3) - Vdac R1/R3 falls with the DAC, rises with R1, R3 (Vdac > Vfb here)
    # and Vfb, falls with R2 (hand calculation).
    assert _err(ntc_law, {"adc_reference": 0.01}, 25.0) == pytest.approx(0.0, abs=1e-9)
    for key, dev in (("adc_gain", 1e-3), ("adc_offset", 1.0), ("adc_inl", 1.0)):
        assert _err(ntc_law, {key: dev}, 25.0) < -1e-3, key
    assert _err(ntc_law, {"adc_inl": 2.0}, 25.0) == pytest.approx(_err(ntc_law, {"adc_offset": 2.0}, 25.0), rel=1e-9)
    for key, dev in (("dac_reference", 1e-3), ("dac_gain", 1e-3), ("dac_offset", 1.0), ("dac_inl", 1.0),
                     ("r2", 1e-3), ("dac_reference_drift", 20.0), ("r2_drift", 20.0)):
        assert _err(ntc_law, {key: dev}, 45.0) < -1e-3, key
    for key, dev in (("r1", 1e-3), ("r3", 1e-3), ("feedback", 1e-3), ("r1_drift", 20.0), ("r3_drift", 20.0),
                     ("feedback_drift", 20.0)):
        assert _err(ntc_law, {key: dev}, 45.0) > 1e-3, key
    assert _err(ntc_law, {"dac_inl": 2.0}, 25.0) == pytest.approx(_err(ntc_law, {"dac_offset": 2.0}, 25.0), rel=1e-9)


def test_device_calibration_errors(ntc_law):
    # The real device's breakdown 10 mV higher: 10 mV less overvoltage, -100 x 0.01 / 3 %; the same for the
    # offset between breakdown definitions. A tempco 0.1 mV/K high: 2 mV at 45 C, none at 25 C.
    assert _err(ntc_law, {"breakdown_v": 0.01}, 25.0) == pytest.approx(-100 * 0.01 / 3.0, rel=1e-6)
    assert _err(ntc_law, {"breakdown_definition_v": 0.01}, 25.0) == pytest.approx(-100 * 0.01 / 3.0, rel=1e-6)
    assert _err(ntc_law, {"tempco_mv_per_k": 0.1}, 45.0) == pytest.approx(-100 * 0.002 / 3.0, rel=1e-6)
    assert _err(ntc_law, {"tempco_mv_per_k": 0.1}, 25.0) == pytest.approx(0.0, abs=1e-9)


def test_reading_and_converter_directions_on_the_rtd_board(rtd_law):
    # hut-sipm-b, constant overvoltage 4 V: at 25 C (its reference) a reading dT off gives
    # 100 (0.034 dT + 2e-5 dT^2) / 4 percent. Pt1000 in the low position of an absolute-reference ADC: a higher
    # reading is a warmer sensor; the reference lowers it, the excitation raises it by the same to first order.
    # The direct supply Vout = 30 V + 14 Vdac rises with the DAC and the amplifier gain.
    def by_hand(dt_k):
        return 100.0 * (0.034 * dt_k + 2e-5 * dt_k ** 2) / 4.0

    assert _err(rtd_law, {"rtd_offset_k": 0.1}, 25.0) == pytest.approx(by_hand(0.1), rel=1e-5)
    assert _err(rtd_law, {"rtd_slope": 0.002}, 25.0) == pytest.approx(by_hand(0.05), rel=1e-5)  # 0.002 x 25 K
    reference = _err(rtd_law, {"adc_reference": 1e-3}, 25.0)
    assert reference < -1e-3
    # (to first order: the divider's curvature, 2 dR / (R + Rref) = 0.2 % for the 0.6 K read here, acts each way)
    assert _err(rtd_law, {"excitation": 1e-3}, 25.0) == pytest.approx(-reference, rel=1e-2)
    for key, dev in (("adc_gain", 1e-3), ("adc_offset", 4.0), ("adc_inl", 4.0), ("excitation_drift", 20.0),
                     ("dac_reference", 1e-3), ("dac_gain", 1e-3), ("dac_offset", 1.0), ("amp_gain", 1e-3),
                     ("amp_gain_drift", 20.0), ("dac_reference_drift", 20.0)):
        assert _err(rtd_law, {key: dev}, 45.0) > 1e-4, key
    for key, dev in (("reference_resistor", 1e-3), ("adc_reference_drift", 20.0),
                     ("reference_resistor_drift", 20.0)):
        assert _err(rtd_law, {key: dev}, 45.0) < -1e-4, key


def test_drop_correction_errors_by_hand(sipm_a, board_ntc):
    # hut-board-ntc: 10 kohm series resistor; the modelled law's drop at 45 C is R I at the target bias (about
    # 34 mV, 1.136 % of the 3 V). With the measured correction a current channel reading 1 % high over-corrects
    # by 1 % of it, an ADC reference 1 % high reads 1/1.01 of it, a sense-gain drift of 100 ppm/K with the
    # electronics 30 K from their reference adds 0.3 %; an input offset of 1 nA adds R x 1 nA = 10 uV exactly,
    # an offset drift of 0.1 nA/K 3 nA. With the modelled correction a current 1 % above the model leaves 1 %
    # of the drop. Within the drop's own feedback through R dI/dV (3e-4 of these), no quantisation.
    drop_pct = 100.0 * float(build_law(sipm_a, board_ntc, 3.0).drop_v(45.0)) / 3.0
    assert drop_pct == pytest.approx(1.136, abs=1e-3)
    measured = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured")

    def err(law, deviations):
        return float(gain_error_at_light_pct(law, board_ntc, 0.0, 45.0, deviations=deviations, quantise=False))

    assert err(measured, {}) == pytest.approx(0.0, abs=1e-9)
    assert err(measured, {"isense_gain": 0.01}) == pytest.approx(0.01 * drop_pct, rel=1e-3)
    assert err(measured, {"isense_reference": 0.01}) == pytest.approx(-0.01 / 1.01 * drop_pct, rel=1e-3)
    assert err(measured, {"isense_gain_drift": 100.0}) == pytest.approx(0.003 * drop_pct, rel=1e-3)
    assert err(measured, {"isense_offset_a": 1e-9}) == pytest.approx(100.0 * 1e4 * 1e-9 / 3.0, rel=1e-6)
    assert err(measured, {"isense_offset_drift": 1e-10}) == pytest.approx(100.0 * 1e4 * 3e-9 / 3.0, rel=1e-6)
    modelled = build_law(sipm_a, board_ntc, 3.0)
    assert err(modelled, {}) == pytest.approx(0.0, abs=1e-6)
    # The lower bias lowers the current in turn (R dI/dV, 3 %), as it does for the uncorrected law's whole drop
    # (checked against the supply's operating point in test_law_budget): 1 % of that, to 6e-4.
    whole = err(build_law(sipm_a, board_ntc, 3.0, drop_correction="none"), {})
    assert whole == pytest.approx(-1.103, abs=1e-3)
    assert err(modelled, {"current": 0.01}) == pytest.approx(0.01 * whole, rel=2e-3)


def test_sensor_in_the_high_position_reads_the_same_ratio(sipm_a, board_ntc):
    # With the NTC on the high side of the divider the ADC reads Rref / (R + Rref): the nominal chain still reads
    # the die exactly, and a reference resistor 1 % high still reads R / 1.01 (the divider depends on R / Rref
    # alone), so the same 0.185 % at 25 C as in the low position (hand formula above).
    fe = replace(board_ntc.temperature.front_end, sensor_position="high")
    board = replace(_no_resistor(board_ntc), temperature=replace(board_ntc.temperature, front_end=fe))
    law = build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="none")
    assert _err((law, board), {}, 45.0) == 0.0
    assert float(chain_gain_error_pct(law, board, {}, np.array([25.0, 45.0]), False).max()) == pytest.approx(0.0,
                                                                                                          abs=1e-9)
    t_k = 25.0 + ZERO_C_IN_K
    warmer = 1.0 / (1.0 / t_k - np.log(1.01) / 3435.0) - t_k
    assert _err((law, board), {"reference_resistor": 0.01}, 25.0) == pytest.approx(warmer * 100 * 0.0215 / 3.0,
                                                                                  rel=1e-4)


def test_measured_correction_through_the_integer_path(sipm_a, board_ntc):
    # Quantised: the firmware reads the current once at the operating point and adds floor(per_code x code + 0.5)
    # DAC codes. Over 701 temperatures the rounding errors average out (mean within 0.001 %; one DAC code is
    # 0.15 mV, 0.005 % of gain), and a sense gain 10 % high over-corrects by 10 % of the drop, here averaged over
    # 40 to 45 C against the modelled law's drop R I (a current code is 40 nA x 10 kohm = 0.4 mV, 0.013 %).
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured")
    temps_c = np.linspace(-25.0, 45.0, 701)
    assert abs(float(np.mean(gain_error_at_light_pct(law, board_ntc, 0.0, temps_c)))) < 1e-3
    hot = temps_c[temps_c >= 40.0]
    over = gain_error_at_light_pct(law, board_ntc, 0.0, hot, deviations={"isense_gain": 0.1})
    drop_pct = 100.0 * build_law(sipm_a, board_ntc, 3.0).drop_v(hot) / 3.0
    assert float(np.mean(over)) == pytest.approx(float(np.mean(0.1 * drop_pct)), abs=3e-3)


def test_steinhart_hart_ntc_beta_error_by_hand(sipm_a, board_ntc):
    # A Steinhart-Hart NTC (1/T = a + b x + c x^3, x = ln R; the common 10 kohm coefficients) has no Beta of its
    # own: its Beta tolerance acts through the local Beta at 25 C, B = 1 / (b + 3 c x25^2) (implicit
    # differentiation). A Beta 1 % high at 45 C: x' = x + 0.01 B (1/T - 1/T25), read back through the same
    # formula (hand algebra; R at 45 C from the formula by scipy's brentq).
    from scipy.optimize import brentq

    from compensator.physics.sensors import NtcSensor, SteinhartHart

    a, b, c = 1.129148e-3, 2.34125e-4, 8.76741e-8
    sensor = replace(board_ntc.temperature.sensor, beta_k=None, steinhart_hart=SteinhartHart(a, b, c))
    assert isinstance(sensor, NtcSensor)
    board = replace(_no_resistor(board_ntc), temperature=replace(board_ntc.temperature, sensor=sensor))
    law = build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="none")

    def ln_r(t_k):
        return brentq(lambda x: a + b * x + c * x ** 3 - 1.0 / t_k, 0.0, 20.0, xtol=1e-14)

    beta_25 = 1.0 / (b + 3.0 * c * ln_r(T25_K) ** 2)
    t_k = 45.0 + ZERO_C_IN_K
    x = ln_r(t_k) + 0.01 * beta_25 * (1.0 / t_k - 1.0 / T25_K)
    read_k = 1.0 / (a + b * x + c * x ** 3)
    assert float(chain_gain_error_pct(law, board, {}, 45.0, False)) == pytest.approx(0.0, abs=1e-9)
    assert _err((law, board), {"ntc_beta": 0.01}, 45.0) == pytest.approx((read_k - t_k) * 100 * 0.0215 / 3.0,
                                                                         rel=1e-5)

"""The safe bias: the lowest settable output against the coldest breakdown, every tolerance against it."""

from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.findings import Severity
from compensator.law import build_law, lowest_breakdown_v, safe_bias
from compensator.law.safety import highest_output_v
from compensator.physics.supply import Dac


def _plain(board):
    """The board with tolerances only: no drifts, no converter offset or gain error, no regulator reference error."""
    dac = board.supply.dac
    supply = replace(board.supply, dac=Dac(dac.bits, dac.reference_v, dac.reference_tolerance_pct),
                     resistor_tempco_ppm_per_k=0.0, feedback_tolerance_pct=0.0, feedback_tempco_ppm_per_k=0.0)
    return replace(board, supply=supply)


def test_coldest_breakdown_by_hand(sipm_a, board_ntc):
    # hut-sipm-a: 24.5 V at 25 C, 21.5 mV/K, u(Vbd) 30 mV, u(tempco) 0.3 mV/K. At -25 C: 24.5 - 0.0215 * 50 =
    # 23.425 V; three sigma of (0.030 + 0.0003 * 50) = 0.135 V against it: 23.290 V (hand calculation).
    law = build_law(sipm_a, board_ntc, 3.0)
    floor_v, at_c = lowest_breakdown_v(law)
    assert at_c == pytest.approx(-25.0)
    assert floor_v == pytest.approx(23.290, abs=1e-9)
    assert lowest_breakdown_v(law, sigmas=0.0)[0] == pytest.approx(23.425, abs=1e-9)


def test_feedback_injection_worst_corner_by_hand(sipm_a, board_ntc):
    board_ntc = _plain(board_ntc)
    # Feedback injection, Vout = Vfb (1 + R1/R2 + R1/R3) - Vdac R1/R3; the lowest output is the highest code.
    # Worst (highest) corner: DAC reference 0.05 % low, R1 0.1 % high, R2 0.1 % low, R3 0.1 % high (Vdac > Vfb,
    # so a larger R3 raises the output) -- computed here independently of the library's corner search.
    law = build_law(sipm_a, board_ntc, 3.0)
    vdac = 2.5 * 65535 / 65536 * (1 - 5e-4)
    r1, r2, r3 = 1e6 * 1.001, 43.2e3 * 0.999, 250e3 * 1.001
    by_hand = 1.25 * (1 + r1 / r2 + r1 / r3) - vdac * r1 / r3
    safe = safe_bias(law, board_ntc)
    assert safe.dac_code == 65535
    assert safe.nominal_output_v == pytest.approx(1.25 * (1 + 1e6 / 43.2e3 + 4.0) - 2.5 * 65535 / 65536 * 4.0)
    assert safe.highest_output_v == pytest.approx(by_hand, abs=1e-9)
    # 25.2 V against a 23.29 V breakdown: not safe, and said loudly.
    assert not safe.below_breakdown and safe.margin_v == pytest.approx(23.290 - by_hand, abs=1e-9)
    (finding,) = safe.findings
    assert finding.severity is Severity.DANGER and "shutdown line" in finding.message


def test_a_supply_that_reaches_below_breakdown_is_safe(sipm_b, board_pt1000):
    board_pt1000 = _plain(board_pt1000)
    # Direct supply: 30 V at code 0 (0.1 % gain tolerance acts on the DAC part only: zero at code 0), against a
    # breakdown near 36.5 V at -25 C: safe with several volts of margin.
    law = build_law(sipm_b, board_pt1000, 4.0)
    safe = safe_bias(law, board_pt1000)
    assert safe.dac_code == 0 and safe.highest_output_v == pytest.approx(30.0, abs=1e-12)
    assert safe.below_breakdown and safe.margin_v > 5.0 and safe.findings == ()


def test_drift_raises_the_worst_corner(sipm_a, board_ntc):
    board_ntc = _plain(board_ntc)
    law = build_law(sipm_a, board_ntc, 3.0)
    plain = safe_bias(law, board_ntc).highest_output_v
    drifting = replace(law, supply=replace(law.supply, resistor_tempco_ppm_per_k=25.0))
    # 25 ppm/K over 45 K from 25 C (the electronics reach -20 C and 55 C) adds 0.11 % to each resistor's bound.
    assert safe_bias(drifting, board_ntc).highest_output_v > plain + 0.02
    assert np.isfinite(plain)


def test_every_tolerance_of_the_bundled_board_counts(sipm_a, board_ntc):
    # The bundled board adds a 0.5 % regulator reference, 30 ppm/K on it, DAC offset, gain error and INL:
    # the worst corner sits well above the tolerance-only one (1.25 V x 28.15 x 0.5 % alone is 0.18 V).
    law = build_law(sipm_a, board_ntc, 3.0)
    full = safe_bias(law, board_ntc).highest_output_v
    plain = safe_bias(build_law(sipm_a, _plain(board_ntc), 3.0), _plain(board_ntc)).highest_output_v
    assert full - plain > 0.17


def test_feedback_injection_worst_corner_of_the_bundled_board_by_hand(sipm_a, board_ntc):
    # Every tolerance and drift of hut-board-ntc at its worst corner, computed here by hand. The electronics sit
    # at -20 to 55 C, tolerances hold at 25 C: the largest distance is 45 K.
    #   DAC: reference 0.05 % + gain error 0.05 % + 10 ppm/K x 45 K = 0.145 %, offset 2 + INL 2 = 4 LSB (low);
    #   resistors 0.1 % + 25 ppm/K x 45 K = 0.2125 % each (R1 and R3 high, R2 low);
    #   regulator reference 0.5 % + 30 ppm/K x 45 K = 0.635 % (high).
    law = build_law(sipm_a, board_ntc, 3.0)
    vdac = (65535 - 4) * 2.5 / 65536 * (1 - 0.00145)
    r1, r2, r3 = 1e6 * 1.002125, 43.2e3 * 0.997875, 250e3 * 1.002125
    by_hand = 1.25 * 1.00635 * (1 + r1 / r2 + r1 / r3) - vdac * r1 / r3
    safe = safe_bias(law, board_ntc)
    assert safe.dac_code == 65535
    assert safe.highest_output_v == pytest.approx(by_hand, abs=1e-9)
    assert safe.coldest_temp_c == -25.0 and safe.lowest_breakdown_v == pytest.approx(23.290, abs=1e-9)
    assert safe.margin_v == pytest.approx(23.290 - by_hand, abs=1e-9) and not safe.below_breakdown
    (finding,) = safe.findings
    assert finding.code == "safe_state_above_breakdown"
    assert f"{by_hand:.3f} V" in finding.message and "23.290 V at -25 C" in finding.message
    assert finding.message.endswith("a hardware enable or shutdown line that removes the bias is needed")


def test_direct_supply_worst_corner_by_hand(sipm_b, board_pt1000):
    # hut-board-pt1000: Vout = 30 V + 14 (1 + e) Vdac; the lowest output is code 0, where only the DAC's offset
    # and INL (1 + 1 LSB) leave a voltage: 2 x 2.5 V / 65536, raised by the DAC's reference and gain error and
    # drift (0.05 % + 0.02 % + 5 ppm/K x 50 K = 0.095 %) and by the amplifier's gain: 0.1 % tolerance plus each
    # resistor's share of the drift (the network tracks to 2 ppm/K: 1 ppm/K each, two resistors) over 50 K,
    # 0.1 % + 2 x 1e-6 x 50 = 0.11 % (hand calculation; the board's electronics follow the SiPM, -25 to 45 C).
    law = build_law(sipm_b, board_pt1000, 4.0)
    by_hand = 30.0 + 14.0 * 1.0011 * 2 * 2.5 / 65536 * 1.00095
    safe = safe_bias(law, board_pt1000)
    assert safe.dac_code == 0 and safe.nominal_output_v == 30.0
    assert safe.highest_output_v == pytest.approx(by_hand, abs=1e-12)
    # The public worst corner at any code, here mid-scale (same hand calculation, 32768 + 2 codes):
    mid = 30.0 + 14.0 * 1.0011 * 32770 * 2.5 / 65536 * 1.00095
    assert highest_output_v(law, board_pt1000, np.int64(32768)) == pytest.approx(mid, abs=1e-12)


def test_a_small_positive_margin_is_safe(sipm_b, board_pt1000):
    # Breakdown lowered until the coldest one, three sigma under, sits 0.4 V above the 30 V floor: still safe.
    board = _plain(board_pt1000)
    law = build_law(sipm_b, board, 4.0)
    floor_v, _ = lowest_breakdown_v(law)
    bd = law.sipm.breakdown
    lowered = replace(law, sipm=replace(law.sipm, breakdown=replace(
        bd, breakdown_v_at_ref=bd.breakdown_v_at_ref - (floor_v - 30.4))))
    safe = safe_bias(lowered, board)
    assert safe.margin_v == pytest.approx(0.4, abs=1e-9)
    assert safe.below_breakdown and safe.findings == ()


def test_sigmas_reach_the_safe_bias(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    # Zero sigmas: the nominal breakdown at -25 C, 24.5 - 0.0215 x 50 = 23.425 V (hand calculation).
    assert safe_bias(law, board_ntc, sigmas=0.0).lowest_breakdown_v == pytest.approx(23.425, abs=1e-9)
    for bad in (-1.0, float("nan")):
        with pytest.raises(ModelError) as info:
            lowest_breakdown_v(law, sigmas=bad)
        assert info.value.key == "sigmas" and "non-negative" in info.value.reason


def test_coldest_breakdown_inside_the_range_by_hand(sipm_a, board_ntc):
    # With curvature the lowest breakdown (three sigma under) is inside the range: Vbd(T) - 3 (u_V + u_a |dT|),
    # dT = T - 25 C, is lowest where 21.5 + 2 b dT + 3 x 0.3 = 0 (below T0): dT = -22.4 / (2 b); with
    # b = 0.5 mV/K^2, dT = -22.4 K, T = 2.6 C, and the breakdown there is
    # 24.5 + 1e-3 (21.5 dT + 0.5 dT^2) - 3 (0.030 + 0.0003 x 22.4) (hand calculation).
    law = build_law(sipm_a, board_ntc, 3.0)
    bd = law.sipm.breakdown
    curved = replace(law, sipm=replace(law.sipm, breakdown=replace(bd, curvature_mv_per_k2=0.5)))
    dt = -22.4
    by_hand = 24.5 + 1e-3 * (21.5 * dt + 0.5 * dt * dt) - 3 * (0.030 + 0.0003 * 22.4)
    floor_v, at_c = lowest_breakdown_v(curved)
    assert at_c == pytest.approx(2.6, abs=1e-9)
    assert floor_v == pytest.approx(by_hand, abs=1e-9)


def test_shifted_breakdown_definitions_count_against_the_safe_state(sipm_a, board_ntc):
    # An I-V breakdown 120 mV below the gain intercept (+-20 mV): the law works 120 mV higher, but the safe state
    # keeps the lower of the two and adds the offset's uncertainty: 23.425 - 3 (0.030 + 0.020 + 0.015) V at
    # -25 C (hand calculation).
    bd = sipm_a.device.breakdown
    iv = replace(sipm_a, device=replace(sipm_a.device, breakdown=replace(
        bd, definition="iv_inverse_log_derivative", definition_offset_v=0.12, definition_offset_err_v=0.02)))
    law = build_law(iv, board_ntc, 3.0)
    floor_v, at_c = lowest_breakdown_v(law)
    assert at_c == -25.0
    assert floor_v == pytest.approx(23.425 - 3 * (0.030 + 0.020 + 0.015), abs=1e-9)

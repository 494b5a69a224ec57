"""The safe bias: the lowest settable output against the coldest breakdown, every tolerance against it."""

from dataclasses import replace

import numpy as np
import pytest

from compensator.findings import Severity
from compensator.law import build_law, lowest_breakdown_v, safe_bias
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

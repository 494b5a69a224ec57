"""The sensor-fault state: below breakdown at the coldest temperature with every tolerance, or a named need."""

import itertools
from dataclasses import replace

import numpy as np
import pytest

from compensator.findings import Severity
from compensator.firmware.safe_state import lowest_breakdown_v, safe_state, worst_case_output_v
from compensator.firmware.table_c import render_table_c
from compensator.firmware.tables import STATUS_SENSOR_FAULT, build_table
from compensator.law import build_law


def test_feedback_injection_worst_output_by_hand(board_ntc):
    # Vout = Vfb (1 + R1/R2 + R1/R3) - Vdac R1/R3 (the divider equation of a feedback-injection regulator),
    # every resistor +-0.1 % and the DAC reference +-0.05 % of the profile, at the lowest-output code 65535.
    best = -np.inf
    for s1, s2, s3, sr in itertools.product((-1, 1), repeat=4):
        r1, r2, r3 = 1e6 * (1 + s1 * 1e-3), 43.2e3 * (1 + s2 * 1e-3), 250e3 * (1 + s3 * 1e-3)
        vdac = 65535 * 2.5 * (1 + sr * 5e-4) / 65536
        best = max(best, 1.25 * (1 + r1 / r2 + r1 / r3) - vdac * r1 / r3)
    assert worst_case_output_v(board_ntc.supply, 65535) == pytest.approx(best, abs=1e-12)
    assert best == pytest.approx(25.248, abs=5e-4)  # about 63 mV above the nominal 25.185 V


def test_direct_supply_worst_output_is_the_regulator_floor(board_pt1000):
    # Direct drive: Vout = 30 V + 14 Vdac; at code 0 every corner gives 30 V, the regulator's minimum output.
    assert worst_case_output_v(board_pt1000.supply, 0) == pytest.approx(30.0, abs=1e-12)
    # At code 1000: 30 + 14 (1 + 0.001) 1000 2.5 (1 + 0.0005) / 65536.
    assert worst_case_output_v(board_pt1000.supply, 1000) == pytest.approx(
        30 + 14 * 1.001 * 1000 * 2.5 * 1.0005 / 65536, abs=1e-12)


def test_lowest_breakdown_by_hand(sipm_a, sipm_b):
    # hut-sipm-a: 24.5 V at 25 C, 21.5 mV/K, breakdown 30 mV and tempco 0.3 mV/K (1 sigma); at -25 C:
    # 24.5 - 50 * 0.0215 = 23.425 V, less 3 (0.030 + 0.3e-3 * 50) = 0.135 V.
    assert lowest_breakdown_v(sipm_a.device, -25.0) == pytest.approx(23.290, abs=1e-9)
    # hut-sipm-b: 38.2 V, 34 mV/K, 0.02 mV/K^2: 38.2 - 1.7 + 0.02e-3 * 2500 = 36.55 V; less 3 (0.05 + 0.025).
    assert lowest_breakdown_v(sipm_b.device, -25.0) == pytest.approx(36.55 - 0.225, abs=1e-9)


def test_ntc_board_cannot_reach_below_breakdown(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    state = safe_state(law, board_ntc)
    assert not state.below_breakdown and state.needs_shutdown_line
    assert state.dac_code == 65535 and state.margin_v == pytest.approx(23.290 - 25.248, abs=1e-3)
    (finding,) = state.findings
    assert finding.severity == Severity.DANGER and finding.code == "safe_state_needs_shutdown_line"
    assert "enable (shutdown)" in finding.message and "1.958 V above" in finding.message
    table = build_table(law, board_ntc, 0.05, "uniform")
    header = render_table_c(table, [])["bias_dac_from_adc.h"]
    assert "NO SAFE DAC CODE" in header and "enable (shutdown)" in header
    assert "BIAS_DAC_FROM_ADC_SAFE_STATE_NEEDS_SHUTDOWN_LINE 1u" in header


def test_pt1000_board_is_safe_and_the_header_says_by_how_much(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    state = safe_state(law, board_pt1000)
    assert state.below_breakdown and not state.needs_shutdown_line and state.findings == ()
    assert state.margin_v == pytest.approx(36.325 - 30.0, abs=1e-9)
    header = render_table_c(build_table(law, board_pt1000, 0.05, "uniform"), [])["bias_dac_from_adc.h"]
    assert "6.325 V of margin" in header and "SAFE_STATE_NEEDS_SHUTDOWN_LINE 0u" in header


def test_an_unsafe_profile_code_is_replaced_by_the_lowest_output(sipm_b, board_pt1000):
    # Code 40000 gives about 51 V: above the breakdown. Code 0 (30 V) is safe, so the table uses it and says so.
    board = replace(board_pt1000, safe_dac_code=40000)
    law = build_law(sipm_b, board, 4.0)
    table = build_table(law, board, 0.05, "uniform")
    assert table.safe_dac_code == 0 and table.safe_state.profile_dac_code == 40000
    (finding,) = table.safe_state.findings
    assert finding.severity == Severity.WARNING and "40000" in finding.message
    dac, status = table.lookup([0, 65535])
    assert np.all(status == STATUS_SENSOR_FAULT) and np.all(dac == 0)

"""The sensor-fault state: below breakdown at the coldest temperature with every tolerance, or a named need."""

import itertools
from dataclasses import replace

import numpy as np
import pytest

from compensator.findings import Severity
from compensator.firmware.safe_state import safe_state
from compensator.law.safety import highest_output_v, safe_bias
from compensator.firmware.table_c import render_table_c
from compensator.firmware.tables import STATUS_SENSOR_FAULT, build_table
from compensator.law import build_law


def test_the_numbers_are_the_laws_safe_bias(sipm_a, board_ntc):
    # The worst-case physics lives in compensator.law.safety (tested there); the table's state takes its numbers.
    law = build_law(sipm_a, board_ntc, 3.0)
    state, bias = safe_state(law, board_ntc), safe_bias(law, board_ntc)
    assert state.max_output_v == bias.highest_output_v and state.min_breakdown_v == bias.lowest_breakdown_v
    assert state.lowest_output_dac_code == bias.dac_code == 65535  # feedback injection: the top code is lowest
    # hut-sipm-a: 24.5 V at 25 C, 21.5 mV/K, breakdown 30 mV and tempco 0.3 mV/K (1 sigma); at -25 C:
    # 24.5 - 50 * 0.0215 = 23.425 V, less 3 (0.030 + 0.3e-3 * 50) = 0.135 V.
    assert state.min_breakdown_v == pytest.approx(23.290, abs=1e-9) and state.coldest_temp_c == -25.0
    assert highest_output_v(law, board_ntc, 0) > 35.0  # and code 0 is the highest output


def test_ntc_board_cannot_reach_below_breakdown(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    state = safe_state(law, board_ntc)
    assert not state.below_breakdown and state.needs_shutdown_line
    assert state.dac_code == 65535 and state.margin_v == pytest.approx(23.290 - state.max_output_v, abs=1e-12)
    assert 25.2 < state.max_output_v < 25.6  # nominal 25.185 V plus the tolerances and drifts of the supply
    (finding,) = state.findings
    assert finding.severity == Severity.DANGER and finding.code == "safe_state_needs_shutdown_line"
    assert "enable (shutdown)" in finding.message and f"{-state.margin_v:.3f} V above" in finding.message
    table = build_table(law, board_ntc, 0.05, "uniform")
    header = render_table_c(table, [])["bias_dac_from_adc.h"]
    assert "NO SAFE DAC CODE" in header and "enable (shutdown)" in header
    assert "BIAS_DAC_FROM_ADC_SAFE_STATE_NEEDS_SHUTDOWN_LINE 1u" in header


def test_pt1000_board_is_safe_and_the_header_says_by_how_much(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    state = safe_state(law, board_pt1000)
    assert state.below_breakdown and not state.needs_shutdown_line and state.findings == ()
    # hut-sipm-b at -25 C: 38.2 - 1.7 + 0.02e-3 * 2500 = 36.55 V less 3 (0.05 + 0.5e-3 * 50) = 36.325 V; the
    # direct supply's floor is 30 V plus its offset tolerances
    assert state.min_breakdown_v == pytest.approx(36.325, abs=1e-9) and 30.0 <= state.max_output_v < 30.01
    header = render_table_c(build_table(law, board_pt1000, 0.05, "uniform"), [])["bias_dac_from_adc.h"]
    assert f"{state.margin_v:.3f} V of margin" in header and "SAFE_STATE_NEEDS_SHUTDOWN_LINE 0u" in header


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


def test_a_safe_profile_code_is_kept_even_when_another_is_lower(sipm_b, board_pt1000):
    # Code 100 of the direct supply is 30 V + 100 x 14 x 2.5 V / 2^16 = 30.053 V nominal: above the lowest
    # output (code 0) but well below the 36.325 V breakdown, so the profile's code stays, with its own output.
    board = replace(board_pt1000, safe_dac_code=100)
    law = build_law(sipm_b, board, 4.0)
    state = safe_state(law, board)
    assert (state.dac_code, state.profile_dac_code, state.lowest_output_dac_code) == (100, 100, 0)
    assert state.max_output_v == highest_output_v(law, board, 100) and state.findings == ()
    assert state.max_output_v == pytest.approx(30.0 + 100 * 14 * 2.5 / 65536, abs=0.01)
    assert state.margin_v == pytest.approx(36.325 - state.max_output_v, abs=1e-9) and state.below_breakdown


def test_the_findings_word_for_word(sipm_a, sipm_b, board_ntc, board_pt1000):
    # The messages carry the numbers of the decision: the profile's code and its output, the breakdown and the
    # coldest temperature, the replacement code and its output; or how far above breakdown the lowest output is.
    board = replace(board_pt1000, safe_dac_code=40000)
    law = build_law(sipm_b, board, 4.0)
    state, bias = safe_state(law, board), safe_bias(law, board)
    profile_v = highest_output_v(law, board, 40000)
    (finding,) = state.findings
    assert finding.code == "safe_dac_code_replaced" and finding.message == (
        f"the board's safe_dac_code 40000 gives up to {profile_v:.3f} V, not below the SiPM breakdown of "
        f"36.325 V at -25 C (with tolerances); the table uses code 0 instead ({bias.highest_output_v:.3f} V at most)")
    law = build_law(sipm_a, board_ntc, 3.0)
    state = safe_state(law, board_ntc)
    (finding,) = state.findings
    assert finding.message.startswith(
        f"NO SAFE DAC CODE: the supply's lowest output is up to {state.max_output_v:.3f} V (code 65535), "
        f"{state.max_output_v - 23.29:.3f} V above the SiPM breakdown of 23.290 V at -25 C (with tolerances), so a "
        "sensor fault leaves the SiPM biased above breakdown; the board needs a hardware enable (shutdown) input")

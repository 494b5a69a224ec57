"""What ``prepare_table_files`` hands the command line: the table, its baseline, checks, findings and files.

Fixed layouts except where said (the uniform, segmented and optimised sizings take milliseconds; the polynomial
search takes seconds, so the one test of ``layout="smallest"`` replaces it by a refusal).
"""

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware import tables as tables_module
from compensator.firmware.table_files import SWEEP_FILE, prepare_table_files
from compensator.firmware.tables import TableError
from compensator.law import build_law


@pytest.fixture(scope="module")
def law_b(sipm_b, board_pt1000):
    return build_law(sipm_b, board_pt1000, 4.0)


def test_a_fixed_uniform_layout(law_b, sipm_b, board_pt1000):
    built = prepare_table_files(law_b, board_pt1000, profiles=[sipm_b, board_pt1000], max_gain_error_pct=0.05,
                                layout="uniform", settings={"layout": "uniform", "max_gain_error_pct": "0.05"})
    table = built.table
    # 26 bytes: the documented uniform table of this pair (build_table's example); it is its own baseline.
    assert table.layout == "uniform" and table.table_bytes == 26 and built.uniform_table is table
    assert built.candidates == () and built.findings == ()  # the Pt1000 board's safe code is safe: no finding
    assert list(built.files) == ["bias_dac_from_adc.h", "bias_dac_from_adc.c", SWEEP_FILE]
    assert built.sweep_mode == "full"  # a 16-bit ADC
    assert " * layout = uniform\n * max_gain_error_pct = 0.05\n" in built.files["bias_dac_from_adc.h"]
    assert "hut-sipm-b" in built.files["bias_dac_from_adc.c"] and "hut-board-pt1000" in built.files["bias_dac_from_adc.c"]
    rows = built.files[SWEEP_FILE].splitlines()
    assert len(rows) == 1 + table.code_hi - table.code_lo + 1 and rows[1].startswith(f"{table.code_lo},")
    assert built.sweep.within_bound and built.sweep.adc_code.size == table.code_hi - table.code_lo + 1
    # Half an ADC code of temperature as gain: half the law's output step over one code at each code of the range,
    # 100 / Vov per volt (constant overvoltage law); a finite difference over one code against the tool's
    # derivative times the code width: they agree to 1e-8 relative on this 16-bit channel.
    channel = board_pt1000.temperature
    n = np.arange(table.code_lo, table.code_hi + 2)
    step_v = np.abs(np.diff(law_b.output_v(channel.temp_at(n))))
    hand = 0.5 * step_v * 100 / law_b.target_overvoltage_v(channel.temp_at(n[:-1] + 0.5))
    assert built.adc_quantisation_gain_error_pct == pytest.approx(hand.max(), rel=1e-6)


def test_a_fixed_layout_builds_its_uniform_baseline_and_keeps_the_safe_state_findings(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    built = prepare_table_files(law, board_ntc, profiles=[], max_gain_error_pct=0.05, layout="segmented",
                                name="bias", prefix="hut_", sweep="none")
    assert built.table.layout == "segmented" and built.uniform_table.layout == "uniform"
    assert built.uniform_table.table_bytes == 78  # 39 nodes of 2 bytes (test_firmware_table_c's golden uniform file)
    assert list(built.files) == ["hut_bias.h", "hut_bias.c"] and built.sweep_mode == "none"
    # No sweep file, yet every code was checked.
    assert built.sweep.adc_code.size == built.table.code_hi - built.table.code_lo + 1 and built.sweep.within_bound
    # The NTC board's lowest output stays above breakdown at -25 C: the danger finding of the safe state.
    assert [f.code for f in built.findings] == ["safe_state_needs_shutdown_line"]
    assert built.findings == built.table.safe_state.findings


def test_fault_margin_reaches_the_table(law_b, board_pt1000):
    built = prepare_table_files(law_b, board_pt1000, profiles=[], max_gain_error_pct=0.05, layout="optimised",
                                fault_margin_k=5.0, sweep="summary")
    # The Pt1000 code rises with temperature: the fault band starts at the code holding -25 - 5 = -30 C.
    channel = board_pt1000.temperature
    lo = built.table.fault_lo
    assert channel.temp_at(lo) <= -30.0 < channel.temp_at(lo + 1)
    assert built.sweep_mode == "summary" and built.files[SWEEP_FILE].startswith("adc_code_first,adc_code_last,")
    # The uniform baseline is built with the same margin.
    assert (built.uniform_table.fault_lo, built.uniform_table.fault_hi) == (lo, built.table.fault_hi)


@pytest.mark.parametrize("kw, key, reason", [
    ({"sweep": "some"}, "sweep", "sweep must be one of none, summary, full, got 'some'"),
    ({"name": "int"}, "name", None),
    ({"prefix": "9x_"}, "prefix", None),
])
def test_refusals_before_any_work(law_b, board_pt1000, monkeypatch, kw, key, reason):
    def no_work(*args, **kwargs):
        raise AssertionError("a table was built before the options were checked")

    monkeypatch.setattr("compensator.firmware.table_files.build_table", no_work)
    monkeypatch.setattr("compensator.firmware.table_files.compare_layouts", no_work)
    with pytest.raises(ModelError) as exc:
        prepare_table_files(law_b, board_pt1000, profiles=[], max_gain_error_pct=0.05, **kw)
    assert exc.value.key == key
    if reason:
        assert exc.value.reason == reason


def test_smallest_reports_every_candidate(law_b, board_pt1000, monkeypatch):
    def refuse(*args, **kwargs):
        raise TableError("DAC quantisation", "no polynomial table here")

    monkeypatch.setattr(tables_module, "size_polynomial", refuse)
    built = prepare_table_files(law_b, board_pt1000, profiles=[], max_gain_error_pct=0.05, fault_margin_k=5.0)
    # The margin reaches every candidate (the fault band of test_fault_margin_reaches_the_table).
    channel = board_pt1000.temperature
    assert channel.temp_at(built.table.fault_lo) <= -30.0 < channel.temp_at(built.table.fault_lo + 1)
    # uniform 26 B, segmented 38 B, optimised 36 B (test_firmware_tables' layout bytes by hand): uniform is chosen
    # and, not being half of itself, gets the finding.
    assert [c.layout for c in built.candidates] == ["uniform", "segmented", "optimised", "polynomial"]
    assert [c.table_bytes for c in built.candidates] == [26, 38, 36, None]
    assert built.table.layout == "uniform" and built.uniform_table is built.table
    assert [f.code for f in built.findings] == ["table_not_half_of_uniform"]

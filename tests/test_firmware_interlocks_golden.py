"""The interlocks' generated C for fixed limits, compared with reviewed golden files (a regression net).

The behavioural check of this C is ``test_c_is_bit_exact_over_long_random_sequences`` in
``tests/test_firmware_interlocks.py``: compiled with the real compiler and run against the Python reference.
This file only pins the text the emitter writes, in milliseconds. The golden files are never rewritten by a
test; after an intended change regenerate them with ``python tests/golden/update.py`` and review the diff.
The limits are literals (not built from the profiles), so the files change only when the emitter does.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from compensator.errors import InputError, ModelError
from compensator.firmware.interlocks import InterlockLimits
from compensator.firmware.interlocks_c import render_interlocks_c, write_interlocks_c
from golden_check import assert_golden

GOLDEN = Path(__file__).parent / "golden" / "interlocks"

#: Feedback-injection supply (bias falls as the code rises), a cooler, a bias read-back channel, NTC on the
#: divider's low side (a short reads low).
FALLING = InterlockLimits(
    tick_ms=100, dac_full_scale=65535, bias_rises_with_code=False, safe_dac_code=65535, bias_limit_level=65535,
    ov_limit_ref_mdegc=-45000, ov_limit_level_at_ref=31519, ov_limit_slope_q=2363949, slew_levels_per_tick=1310,
    adc_fault_lo=834, adc_fault_hi=3979, adc_low_is_open=False, max_step_mdegc=695, over_current_na=200000,
    hot_side_max_mdegc=70000, dew_margin_mdegc=3000, heartbeat_timeout_ms=5000, readback_at_level0_q=163894246,
    readback_per_level_q=993, readback_min_code=2501, readback_max_code=3494, supply_fault_codes=84,
    supply_fault_ticks=3, bias_v_at_level0=25.18533777307581, volts_per_level=0.000152587890625,
    safe_margin_v=-2.1903377730758073)

#: Direct supply (bias rises with the code), no cooler, no read-back channel, the sensor on the divider's high
#: side (an open sensor reads low).
RISING = InterlockLimits(
    tick_ms=50, dac_full_scale=4095, bias_rises_with_code=True, safe_dac_code=7, bias_limit_level=4000,
    ov_limit_ref_mdegc=-40000, ov_limit_level_at_ref=1739, ov_limit_slope_q=-1049248, slew_levels_per_tick=23,
    adc_fault_lo=39051, adc_fault_hi=48087, adc_low_is_open=True, max_step_mdegc=200, over_current_na=100000,
    heartbeat_timeout_ms=0, bias_v_at_level0=30.0, volts_per_level=0.008544921875, safe_margin_v=5.918)

GOLDEN_CASES = {"falling": (FALLING, "ilk"), "rising": (RISING, "hut_guard")}


def golden_files(case: str) -> dict:
    """The files the golden test compares (also what ``tests/golden/update.py`` writes)."""
    limits, name = GOLDEN_CASES[case]
    return render_interlocks_c(limits, name=name, settings={"case": case})


@pytest.mark.parametrize("case", sorted(GOLDEN_CASES))
def test_golden_files(case):
    assert_golden(golden_files(case), GOLDEN / case)


def test_render_refuses_bad_names_and_limits():
    for bad in ("Ilk", "1ilk", "int", "abs", "a" * 32, "", None):
        with pytest.raises(ModelError) as info:
            render_interlocks_c(FALLING, name=bad)
        assert info.value.key == "name"
    assert set(render_interlocks_c(FALLING, name="a" * 31)) == {"a" * 31 + ".h", "a" * 31 + ".c"}
    with pytest.raises(ModelError) as info:
        render_interlocks_c(dataclasses.asdict(FALLING), name="ilk")
    assert info.value.key == "limits" and info.value.reason == "need InterlockLimits, got dict"
    # the default name
    assert set(render_interlocks_c(FALLING)) == {"interlocks.h", "interlocks.c"}


def test_write_defaults_and_the_profiles_in_the_banner(tmp_path, sipm_a, board_ntc):
    paths = write_interlocks_c(FALLING, tmp_path, profiles=[sipm_a, board_ntc])
    assert [p.name for p in paths] == ["interlocks.h", "interlocks.c"]
    for path in paths:
        assert f"profile hut-sipm-a (hut-sipm-a.yaml) sha256 {sipm_a.sha256[:16]}" in path.read_text()
        assert f"profile hut-board-ntc (hut-board-ntc.yaml) sha256 {board_ntc.sha256[:16]}" in path.read_text()


def test_write_is_all_or_nothing_and_refuses_to_overwrite(tmp_path):
    files = render_interlocks_c(RISING, name="hut_guard", profiles=(), settings={"case": "rising"})
    paths = write_interlocks_c(RISING, tmp_path, name="hut_guard", settings={"case": "rising"})
    assert [p.name for p in paths] == ["hut_guard.h", "hut_guard.c"]
    assert {p.name: p.read_text() for p in paths} == files
    with pytest.raises(InputError):
        write_interlocks_c(FALLING, tmp_path, name="hut_guard")
    assert (tmp_path / "hut_guard.c").read_text() == files["hut_guard.c"]   # nothing half-written
    write_interlocks_c(FALLING, tmp_path, name="hut_guard", overwrite=True)
    assert (tmp_path / "hut_guard.c").read_text() == render_interlocks_c(FALLING, name="hut_guard")["hut_guard.c"]
    with pytest.raises(InputError) as info:
        write_interlocks_c(FALLING, tmp_path / "hut_guard.c", name="hut_guard")
    assert "(wanted for the C output)" in str(info.value)

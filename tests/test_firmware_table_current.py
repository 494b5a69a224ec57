"""The measured series-resistor drop correction in the firmware path: integer arithmetic, C, faults, clamps."""

import subprocess
from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware.table_c import c_current_function_signature, render_table_c
from compensator.firmware.tables import (
    STATUS_OK,
    STATUS_SENSOR_FAULT,
    build_current_correction,
    build_table,
)
from compensator.law import build_law
from compensator.physics.sipm import breakdown_v, steady_current_a
from compensator.physics.supply import sipm_bias_v
from compensator.profiles import load_board

from cbuild import PEDANTIC, build, needs_cc  # noqa: E402

#: A current channel for the direct-supply demo board (invented values): 14-bit ADC, 2.5 V, 10 kohm transimpedance.
DIRECT_SENSE = """
current_sense:
  adc_bits: 14
  reference_v: 2.5
  reference_tolerance_pct: 0.1
  sense_gain_v_per_a: 10000.0
  gain_tolerance_pct: 0.2
  offset_a: 5.0e-9
"""


@pytest.fixture(scope="module")
def board_direct(tmp_path_factory, profiles_dir):
    """The Pt1000 board (direct supply) with a current channel added."""
    path = tmp_path_factory.mktemp("boards") / "hut-board-pt1000-isense.yaml"
    path.write_text((profiles_dir / "hut-board-pt1000.yaml").read_text() + DIRECT_SENSE)
    return load_board(path)


def measured_table(sipm, board, ov, layout="optimised", bound=0.05):
    law = build_law(sipm, board, ov, kind="constant_gain", drop_correction="measured")
    return law, build_table(law, board, bound, layout)


def test_feedback_injection_correction_by_hand(sipm_a, board_ntc):
    # Supply formula (compensator.physics.supply): Vout = Vfb (1 + R1/R2 + R1/R3) - Vdac R1/R3, so one DAC code is
    # -(2.5 V / 2^16) (1 MOhm / 250 kOhm) = -152.587890625 uV. One current code is 3.3 V / 2^12 / 20 kOhm
    # = 40.283203125 nA, i.e. 10 kOhm x 40.283203125 nA = 402.83203125 uV of drop: -2.64 DAC codes exactly.
    _, table = measured_table(sipm_a, board_ntc, 3.0)
    cur = table.current
    assert cur.dac_codes_per_current_code == pytest.approx(-2.64, rel=1e-12)
    assert (cur.shift, cur.factor) == (17, -346030)  # 2^17 >= 32 x 4095; round(-2.64 x 131072) = round(-346030.08)
    # floor((K c + 2^16) / 2^17): c = 1 -> floor(-2.14) = -3; 100 -> -264; 1000 -> -2640; 4095 -> round(-10810.8).
    assert cur.delta([0, 1, 100, 1000, 4095]).tolist() == [0, -3, -264, -2640, -10811]
    assert cur.current_code_max == 4095 and cur.limit_reason == "current ADC full scale"
    assert cur.delta(65535) == cur.delta(4095)  # codes beyond the ADC are limited
    # More current -> lower DAC code -> higher output on this topology: the drop is added, not subtracted.
    s = board_ntc.supply
    n = np.full(3, (table.code_lo + table.code_hi) // 2)
    dac, status = table.lookup_with_current(n, [0, 100, 1000])
    assert np.all(status == STATUS_OK)
    assert np.diff(dac).tolist() == [-264, -2376]
    assert s.output_v(dac[1]) - s.output_v(dac[0]) == pytest.approx(100 * 10e3 * 3.3 / 4096 / 20e3, abs=0.5 * s.lsb_v)


def test_direct_correction_by_hand(sipm_b, board_direct):
    # Vout = offset + 14 Vdac: one DAC code is 14 x 2.5 V / 2^16 = 534.0576171875 uV; one current code is
    # 2.5 V / 2^14 / 10 kOhm = 15.2587890625 nA, 4.7 kOhm x that = 71.71630859375 uV: 4700 x 4 / 140000 codes.
    _, table = measured_table(sipm_b, board_direct, 4.0)
    cur = table.current
    assert cur.dac_codes_per_current_code == pytest.approx(4700 * 4 / 140000, rel=1e-12)
    # max_current_a 100 uA is code round(100e-6 / 15.2587890625e-9) = round(6553.6) = 6554.
    assert cur.current_code_max == 6554 and cur.limit_reason == "sipm max_current_a"
    assert cur.shift == 18  # 2^18 >= 32 x 6554
    assert cur.factor == round(4700 * 4 / 140000 * 2**18) == 35202
    # Positive factor: floor(0.13428571 c + 1/2): c = 3 -> 0; 4 -> 1; 1000 -> 134; 6554 -> round(880.11) = 880.
    assert cur.delta([0, 3, 4, 1000, 6554, 6555, 16383]).tolist() == [0, 0, 1, 134, 880, 880, 880]
    n = (table.code_lo + table.code_hi) // 2
    dac, _ = table.lookup_with_current([n, n], [0, 1000])
    assert dac[1] - dac[0] == 134


@pytest.mark.parametrize("case", ["ntc", "direct"])
def test_correction_rounds_to_nearest_over_every_current_code(case, request, sipm_a, sipm_b):
    board = request.getfixturevalue("board_ntc" if case == "ntc" else "board_direct")
    _, table = measured_table(sipm_a if case == "ntc" else sipm_b, board, 3.0 if case == "ntc" else 4.0)
    cur = table.current
    c = np.arange(cur.current_code_max + 1)
    exact = cur.dac_codes_per_current_code * c
    # Rounding half up plus at most 1/64 LSB from the rounded factor (CURRENT_FACTOR_SLACK_BITS).
    assert np.max(np.abs(cur.delta(c) - exact)) <= 0.5 + 1 / 64


def test_fault_gives_the_safe_code_never_a_corrected_one(sipm_a, board_ntc):
    _, table = measured_table(sipm_a, board_ntc, 3.0)
    n = np.array([0, 1, table.fault_lo - 1, table.fault_hi + 1, 4095])
    for current in (0, 1, 2000, 4095, 65535):
        dac, status = table.lookup_with_current(n, current)
        assert np.all(status == STATUS_SENSOR_FAULT)
        assert np.all(dac == table.safe_dac_code)


def test_without_current_the_plain_path_is_unchanged(sipm_a, board_ntc):
    _, table = measured_table(sipm_a, board_ntc, 3.0)
    plain = build_table(build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="none"), board_ntc,
                        0.05, "optimised")
    codes = np.arange(4096)
    assert np.array_equal(table.lookup(codes)[0], plain.lookup(codes)[0])
    assert np.array_equal(table.lookup_with_current(codes, 0)[0], plain.lookup(codes)[0])
    assert plain.current is None
    with pytest.raises(ModelError, match="no measured drop correction"):
        plain.lookup_with_current(codes, 0)
    with pytest.raises(ModelError, match="current_code"):
        table.lookup_with_current([2000], [65536])
    assert "_with_current" not in render_table_c(plain, [])["bias_dac_from_adc.c"]


def test_headroom_limits_the_current_code(sipm_a, board_ntc):
    # At 6 V overvoltage (max 7 V) a false full-scale reading must not push the SiPM past 7 V.
    _, table = measured_table(sipm_a, board_ntc, 6.0, bound=0.1)
    cur = table.current
    assert cur.limit_reason == "sipm max_overvoltage_v headroom" and 0 < cur.current_code_max < 4095
    codes = np.arange(table.code_lo, table.code_hi + 1)
    dac, _ = table.lookup_with_current(codes, 4095)
    temps = board_ntc.temperature.temp_at(codes + 0.5)
    ov = board_ntc.supply.output_v(dac) - breakdown_v(sipm_a.device, temps)  # no current flowing: no drop
    assert ov.max() <= sipm_a.device.max_overvoltage_v + board_ntc.supply.lsb_v


def test_no_headroom_is_an_error(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 7.0, kind="constant_gain", drop_correction="measured")
    with pytest.raises(ModelError, match="no headroom"):
        build_current_correction(law)


def harness(name, table, temp_codes, current_codes):
    """A C program that prints the corrected DAC code (uint32) for every pair of the two code lists."""
    cur = table.current
    tt, it = f"uint{table.code_type_bits}_t", f"uint{cur.current_type_bits}_t"
    temps = ", ".join(str(int(v)) for v in temp_codes)
    currents = ", ".join(str(int(v)) for v in current_codes)
    return f"""
#include <stdio.h>
#include "{name}.h"
static const {tt} temps[] = {{{temps}}};
static const {it} currents[] = {{{currents}}};
int main(void)
{{
    unsigned long i, j;
    for (i = 0; i < sizeof temps / sizeof temps[0]; i++) {{
        for (j = 0; j < sizeof currents / sizeof currents[0]; j++) {{
            uint32_t v = (uint32_t){name}_with_current(temps[i], currents[j]);
            fwrite(&v, sizeof v, 1, stdout);
        }}
    }}
    return 0;
}}
"""


def run_c(tmp_path, table, files, temp_codes, current_codes, name="bias_dac_from_adc"):
    exe = build(tmp_path, {**files, "harness.c": harness(name, table, temp_codes, current_codes)}, [*PEDANTIC, "-O2"])
    out = subprocess.run([str(exe)], capture_output=True, check=True).stdout
    return np.frombuffer(out, dtype="<u4").astype(np.int64).reshape(len(temp_codes), len(current_codes))


def code_sets(table, temp_points=600):
    """A dense set of temperature codes (faults, the bands just outside, ends) and every current code and beyond."""
    full = (1 << table.adc_bits) - 1
    special = [0, 1, table.fault_lo - 1, table.fault_lo, table.code_lo - 1, table.code_lo, table.code_lo + 1,
               table.code_hi - 1, table.code_hi, table.code_hi + 1, table.fault_hi, table.fault_hi + 1, full]
    dense = np.linspace(0, full, temp_points).round().astype(np.int64)
    temps = np.unique(np.clip(np.concatenate([special, dense]), 0, full))
    cur_full = (1 << table.current.current_bits) - 1
    currents = np.concatenate([np.arange(cur_full + 1), [cur_full + 1, (1 << table.current.current_type_bits) - 1]])
    return temps, currents


def check_bit_exact(tmp_path, table, profiles, temp_points=600):
    files = render_table_c(table, profiles, settings={"drop_correction": "measured"})
    assert files == render_table_c(table, profiles, settings={"drop_correction": "measured"})  # deterministic
    assert c_current_function_signature(table, "bias_dac_from_adc") + ";" in files["bias_dac_from_adc.h"]
    temps, currents = code_sets(table, temp_points)
    got = run_c(tmp_path, table, files, temps, currents)
    ref, status = table.lookup_with_current(temps[:, None], currents[None, :])
    assert np.array_equal(got, ref)
    return temps, currents, ref, status


@needs_cc
@pytest.mark.parametrize("layout", ["uniform", "optimised"])
def test_c_is_bit_exact_feedback_injection(layout, sipm_a, board_ntc, tmp_path):
    _, table = measured_table(sipm_a, board_ntc, 3.0, layout)
    _, _, ref, status = check_bit_exact(tmp_path, table, [sipm_a, board_ntc])
    fault = status[:, 0] == STATUS_SENSOR_FAULT
    assert fault.sum() >= 5 and np.all(ref[fault] == table.safe_dac_code)
    assert np.all(np.diff(ref[~fault], axis=1) <= 0)  # negative volts per code: more current, lower code


@needs_cc
@pytest.mark.parametrize("layout", ["uniform", "optimised"])
def test_c_is_bit_exact_direct(layout, sipm_b, board_direct, tmp_path):
    _, table = measured_table(sipm_b, board_direct, 4.0, layout)
    assert table.current.current_bits == 14
    _, _, ref, status = check_bit_exact(tmp_path, table, [sipm_b, board_direct], temp_points=200)
    inside = status[:, 0] != STATUS_SENSOR_FAULT
    assert np.all(np.diff(ref[inside], axis=1) >= 0)


@needs_cc
def test_c_clamps_and_wide_accumulator(sipm_a, board_ntc, tmp_path):
    # A synthetic correction so large that it hits both DAC limits, with products that need 64 bits.
    _, table = measured_table(sipm_a, board_ntc, 3.0)
    cur = table.current
    big = replace(cur, factor=-40 * (1 << 27), shift=27, acc_type_bits=64)
    table = replace(table, current=big)
    files = render_table_c(table, [sipm_a, board_ntc])
    assert "typedef int64_t bias_dac_from_adc_corr_t" in files["bias_dac_from_adc.c"]
    _, _, ref, status = check_bit_exact(tmp_path, table, [sipm_a, board_ntc], temp_points=150)
    ok = status[:, 0] != STATUS_SENSOR_FAULT
    assert np.any(ref[ok] == table.dac_min) and np.all(ref[ok] >= table.dac_min)
    # And the other way (positive factor): the upper clamp.
    table = replace(table, current=replace(big, factor=40 * (1 << 27)))
    _, _, ref, status = check_bit_exact(tmp_path / ".." / tmp_path.name, table, [sipm_a, board_ntc], temp_points=150)
    ok = status[:, 0] != STATUS_SENSOR_FAULT
    assert np.any(ref[ok] == table.dac_max) and np.all(ref[ok] <= table.dac_max)


@pytest.mark.parametrize("case", ["ntc", "direct"])
def test_firmware_correction_holds_the_sipm_bias_under_light(case, request, sipm_a, sipm_b):
    """Through the integer path: at 1e8 photons/s the corrected output puts the target bias back on the SiPM."""
    board = request.getfixturevalue("board_ntc" if case == "ntc" else "board_direct")
    sipm = sipm_a if case == "ntc" else sipm_b
    law, table = measured_table(sipm, board, 3.0 if case == "ntc" else 4.0)
    codes = np.linspace(table.code_lo, table.code_hi, 9).round().astype(np.int64)
    temps = board.temperature.temp_at(codes + 0.5)
    rate = 1e8
    plain_dac, _ = table.lookup(codes)
    v_plain = sipm_bias_v(board.supply, sipm.device, board.supply.output_v(plain_dac), temps, rate)
    # The firmware reads the current at the operating point it finds (a few control cycles: fixed point).
    dac = plain_dac
    for _ in range(5):
        v = sipm_bias_v(board.supply, sipm.device, board.supply.output_v(dac), temps, rate)
        current_code = board.current_sense.adc_code(steady_current_a(sipm.device, v, temps, rate))
        dac, _ = table.lookup_with_current(codes, current_code)
    target = law.target_bias_v(temps)
    uncorrected_pct = 100 * np.abs(v_plain - target).max() / law.overvoltage_v
    corrected_pct = 100 * np.abs(v - target).max() / law.overvoltage_v
    assert uncorrected_pct > 1.0  # 20-30 uA through several kOhm
    assert corrected_pct < 0.1


def test_current_codes_of_any_integer_type(sipm_a, board_ntc):
    # Current codes read from a 16-bit ADC buffer (uint16) give the corrections worked out by hand in
    # test_feedback_injection_correction_by_hand: floor((-346030 c + 2^16) / 2^17) with c held at 4095.
    _, table = measured_table(sipm_a, board_ntc, 3.0)
    raw = np.array([0, 1, 100, 1000, 4095, 65535], dtype=np.uint16)
    assert table.current.delta(raw).tolist() == [(-346030 * min(c, 4095) + 2 ** 16) // 2 ** 17 for c in raw.tolist()]
    assert table.current.delta(raw).tolist() == [0, -3, -264, -2640, -10811, -10811]


def test_no_correction_says_how_to_get_one(sipm_a, board_ntc):
    plain = build_table(build_law(sipm_a, board_ntc, 3.0, kind="constant_gain"), board_ntc, 0.05, "optimised")
    with pytest.raises(ModelError) as exc:
        plain.lookup_with_current([2000], [0])
    assert exc.value.reason == ("this table has no measured drop correction (build it from a law with "
                                "drop_correction='measured')")


def test_headroom_by_hand_with_and_without_the_fault_margin(sipm_a, board_ntc):
    # current_code_max = floor((Vov_max - max(highest overvoltage over the range, overvoltage held at the coldest
    # reading while the die is the margin colder)) / (R x one current code)), one current code being 3.3 V / 2^12
    # / 20 kohm (test_feedback_injection_correction_by_hand). A capacitance tempco of -800 ppm/K makes the
    # constant-gain law's overvoltage highest at the warm end (6 / (1 - 0.016) V at 45 C), so the range's
    # maximum and the cold-end margin each decide once. The margin defaults to 0 K.
    from compensator.physics.sipm import breakdown_v as vbd

    device = replace(sipm_a.device, capacitance_tempco_ppm_per_k=-800.0)
    law = build_law(replace(sipm_a, device=device), board_ntc, 6.0, kind="constant_gain", drop_correction="measured")
    temps = np.linspace(law.min_temp_c, law.max_temp_c, 2801)
    ov_range = float(np.max(law.output_v(temps) - vbd(device, temps)))
    assert ov_range == pytest.approx(6.0 / (1 - 800e-6 * 20.0), abs=1e-6)
    per_code_v = 1e4 * 3.3 / 4096 / 20e3

    def by_hand(margin_k):
        t_lo = law.min_temp_c
        held = float(law.output_v(t_lo) - vbd(device, t_lo - margin_k))
        return int(np.floor((device.max_overvoltage_v - max(ov_range, held)) / per_code_v))

    assert by_hand(0.0) != by_hand(30.0)
    for kw, margin in (({}, 0.0), ({"fault_margin_k": 30.0}, 30.0)):
        cur = build_current_correction(law, **kw)
        assert cur.current_code_max == by_hand(margin) and cur.limit_reason == "sipm max_overvoltage_v headroom"


def test_without_a_series_resistor_there_is_nothing_to_correct(sipm_a, board_ntc):
    # R = 0: no drop, a zero factor, and no headroom limit: the smaller of the ADC's full scale (4095) and the code
    # of max_current_a, floor(I / (3.3 V / 2^12 / 20 kohm) + 1/2).
    board = replace(board_ntc, supply=replace(board_ntc.supply, series_resistor_ohm=0.0))
    law = build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="measured")
    cur = build_current_correction(law)
    i_code = int(np.floor(sipm_a.device.max_current_a / (3.3 / 4096 / 20e3) + 0.5))
    assert (cur.factor, cur.dac_codes_per_current_code) == (0, 0.0)
    assert cur.current_code_max == min(4095, i_code) and cur.delta([0, 4095]).tolist() == [0, 0]


def test_a_board_without_a_current_channel_is_refused(sipm_b, board_pt1000):
    with pytest.raises(ModelError) as exc:
        build_current_correction(build_law(sipm_b, board_pt1000, 4.0))
    assert exc.value.reason == "the measured drop correction needs the board's current_sense channel"


def test_accumulator_width_by_hand(sipm_a, board_ntc):
    # K c + 2^(Q-1) is formed in the accumulator; its width must hold |K| c_max + 2^Q. With the bundled 10 kohm:
    # 346030 x 4095 + 2^17 = 1 417 123 922 < 2^31: 32 bits. With 20 kohm one current code is -5.28 DAC codes,
    # K = round(-5.28 x 2^17) = -692060 and 692060 x 4095 + 2^17 = 2 834 116 772 > 2^31: 64 bits (the headroom,
    # 4 V / (20 kohm x 40.283203125 nA) = 4964 codes, does not limit the 4095 of the ADC).
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="measured")
    assert build_current_correction(law).acc_type_bits == 32
    board = replace(board_ntc, supply=replace(board_ntc.supply, series_resistor_ohm=2e4))
    cur = build_current_correction(build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="measured"))
    assert cur.dac_codes_per_current_code == pytest.approx(-5.28, rel=1e-12)
    assert (cur.current_code_max, cur.shift, cur.factor, cur.acc_type_bits) == (4095, 17, -692060, 64)


def test_less_headroom_than_one_current_code(sipm_a, board_ntc):
    # 6.9999 V of the 7 V maximum leaves 0.1 mV, less than one current code's drop (402.8 uV): no code may be
    # corrected (current_code_max 0), and the shift is the one of a single code, 2^5 >= 32 x 1.
    law = build_law(sipm_a, board_ntc, 6.9999, kind="constant_gain", drop_correction="measured")
    cur = build_current_correction(law)
    assert (cur.current_code_max, cur.shift, cur.factor) == (0, 5, round(-2.64 * 32))
    assert cur.delta([0, 1, 4095]).tolist() == [0, 0, 0]

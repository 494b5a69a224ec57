"""The measured series-resistor drop correction: profile, law, budget, and the gain it holds at any light level."""

import numpy as np
import pytest

from compensator.errors import ModelError, ProfileError
from compensator.law import build_law, gain_error_budget
from compensator.law.budget import gain_error_at_light_pct
from compensator.physics.current_sense import CurrentSense
from compensator.physics.sipm import steady_current_a
from compensator.profiles import load_board

TEMPS_C = np.array([-25.0, -10.0, 5.0, 25.0, 45.0])
LIGHT_HZ = (0.0, 1e6, 1e7, 3e7, 1e8)


def test_profile_builds_the_current_channel(board_ntc, board_pt1000):
    sense = board_ntc.current_sense
    assert isinstance(sense, CurrentSense) and board_pt1000.current_sense is None
    assert sense.lsb_a == 3.3 / 4096 / 20e3
    assert sense.full_scale_a == pytest.approx(4095 * 3.3 / 4096 / 20e3)
    # Ideal ADC transfer, transitions at half codes (common practice): 1 uA -> 24.8 codes -> 25.
    assert sense.adc_code([0.0, 1e-6, 1.0]).tolist() == [0, 25, 4095]
    assert sense.adc_code(1e-6, gain_error=0.01, reference_error=0.0, offset_a=-0.2e-6).tolist() == 20


@pytest.mark.parametrize("text, key", [
    ("  sense_gain_v_per_a: 0.0\n", "current_sense.sense_gain_v_per_a"),
    ("  adc_bits: 40\n", "current_sense.adc_bits"),
    ("  offset_a: -1.0e-9\n", "current_sense.offset_a"),
])
def test_bad_current_sense_names_file_and_key(tmp_path, profiles_dir, text, key):
    base = (profiles_dir / "hut-board-ntc.yaml").read_text()
    name = key.split(".")[1]
    lines = [line for line in base.splitlines(keepends=True) if not line.startswith(f"  {name}:")]
    path = tmp_path / "bad.yaml"
    path.write_text("".join(lines) + text)
    with pytest.raises(ProfileError) as info:
        load_board(path)
    assert str(path) in str(info.value) and key in str(info.value)


def test_missing_required_current_sense_key(tmp_path, profiles_dir):
    path = tmp_path / "bad.yaml"
    path.write_text((profiles_dir / "hut-board-pt1000.yaml").read_text() + "current_sense:\n  adc_bits: 12\n")
    with pytest.raises(ProfileError, match="current_sense.reference_v: missing required key"):
        load_board(path)


def test_modes_and_one_option_per_choice(sipm_a, board_ntc, board_pt1000, sipm_b):
    assert build_law(sipm_a, board_ntc, 3.0).drop_correction == "modelled"
    with pytest.raises(TypeError):  # one option per choice: the old boolean is gone
        build_law(sipm_a, board_ntc, 3.0, correct_drop=False)
    with pytest.raises(TypeError):  # options are keyword-only
        build_law(sipm_a, board_ntc, 3.0, "constant_gain")
    assert build_law(sipm_a, board_ntc, 3.0, drop_correction="none").drop_correction == "none"
    assert build_law(sipm_a, board_ntc, 3.0, drop_correction="modelled").correct_drop
    measured = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured")
    assert measured.correct_drop and measured.current_sense is board_ntc.current_sense
    with pytest.raises(ModelError, match="drop_correction"):
        build_law(sipm_a, board_ntc, 3.0, drop_correction="guessed")
    with pytest.raises(ProfileError) as info:
        build_law(sipm_b, board_pt1000, 4.0, drop_correction="measured")
    message = str(info.value)
    assert "hut-board-pt1000.yaml" in message and "current_sense" in message and "\n" not in message


def test_measured_law_holds_the_zero_current_output(sipm_a, board_ntc):
    none = build_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    measured = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured", photon_rate_hz=1e7)
    assert np.array_equal(measured.output_v(TEMPS_C), none.output_v(TEMPS_C))
    assert np.all(measured.drop_v(TEMPS_C) == 0)
    # At run time the firmware adds R I: 10 kOhm x 5 uA = 50 mV.
    assert measured.measured_output_v(TEMPS_C, 5e-6) - none.output_v(TEMPS_C) == pytest.approx(0.05, abs=1e-12)


def drop_term(law, board):
    return gain_error_budget(law, board, samples=0).term("series_resistor_drop")


def test_budget_drop_term_by_hand(sipm_a, board_ntc):
    # First order (common practice): dG/G = dV / Vov with dV = R dI. The channel's limits add:
    # R I (gain 0.5 % + reference 0.5 %) + R offset + R lsb_I / 2 + half a DAC LSB.
    rate = 3e7
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_overvoltage", photon_rate_hz=rate, drop_correction="measured")
    term = drop_term(law, board_ntc)
    assert term.kind == "random" and "measured" in term.note
    # hut-board-ntc's channel: 20 nA offset; 3.3 V / 4096 codes / 20000 V/A = 40.28 nA per code (hand calculation).
    assert term.note.endswith("offset +-20 nA, 40.28 nA/code")
    sense, supply = board_ntc.current_sense, board_ntc.supply
    r = supply.series_resistor_ohm
    temps = _grid(law)
    assert np.array_equal(temps, gain_error_budget(law, board_ntc, samples=0).temp_c)
    current = steady_current_a(sipm_a.device, law.target_bias_v(temps), temps, rate)
    hand_v = (r * current * 1e-2 * (sense.gain_tolerance_pct + sense.reference_tolerance_pct) + r * sense.offset_a
              + 0.5 * r * sense.lsb_a + 0.5 * supply.lsb_v)
    # The chain keeps the fraction R dI/dV the resistor returns (a little smaller) and reads the reference error
    # as a division (1 / (1 - 0.005) is 25 ppm more than 1.005).
    ratio = term.limit_pct_by_temp / (100 * hand_v / 3.0)
    assert np.all((ratio > 0.97) & (ratio < 1.0 + 1e-4))


def _grid(law):
    return np.linspace(law.min_temp_c, law.max_temp_c, round(law.max_temp_c - law.min_temp_c) + 1)


def test_budget_measured_beats_modelled_and_monte_carlo_agrees(sipm_a, board_ntc):
    modelled = build_law(sipm_a, board_ntc, 3.0, photon_rate_hz=1e7, drop_correction="modelled")
    measured = build_law(sipm_a, board_ntc, 3.0, photon_rate_hz=1e7, drop_correction="measured")
    t_mod, t_meas = drop_term(modelled, board_ntc), drop_term(measured, board_ntc)
    assert t_meas.limit_pct < t_mod.limit_pct / 10
    budget = gain_error_budget(measured, board_ntc, samples=1500, seed=3)
    assert 0.9 < budget.monte_carlo.std_pct / budget.rss_pct < 1.1
    assert budget.systematic_pct < 1e-6  # nothing left uncorrected at the assumed light level
    with pytest.raises(ModelError, match="photon_rate_hz"):
        gain_error_at_light_pct(measured, board_ntc, -1.0, TEMPS_C)


def test_measured_current_holds_gain_at_every_light_level(sipm_a, board_ntc, capsys):
    """The modelled correction assumes dark operation; the real light level varies. Worst-case channel errors."""
    modelled = build_law(sipm_a, board_ntc, 3.0, photon_rate_hz=0.0, drop_correction="modelled")
    measured = build_law(sipm_a, board_ntc, 3.0, photon_rate_hz=0.0, drop_correction="measured")
    sense = board_ntc.current_sense
    worst = {"isense_gain": 1e-2 * sense.gain_tolerance_pct, "isense_reference": -1e-2 * sense.reference_tolerance_pct,
             "isense_offset_a": sense.offset_a}
    rows = []
    for rate in LIGHT_HZ:
        mod = np.abs(gain_error_at_light_pct(modelled, board_ntc, rate, TEMPS_C)).max()
        meas = np.abs(gain_error_at_light_pct(measured, board_ntc, rate, TEMPS_C)).max()
        meas_worst = np.abs(gain_error_at_light_pct(measured, board_ntc, rate, TEMPS_C, deviations=worst)).max()
        rows.append((rate, mod, meas, meas_worst))
    with capsys.disabled():
        print("\nhut-sipm-a on hut-board-ntc, 3 V, largest |gain error| over -25..45 C, percent")
        print("photon_rate_hz  modelled(dark)  measured  measured(worst channel)")
        for rate, mod, meas, meas_worst in rows:
            print(f"{rate:14.0e}  {mod:14.4f}  {meas:8.4f}  {meas_worst:8.4f}")
    for rate, mod, meas, meas_worst in rows:
        # Quantisation of temperature, DAC and current alone: about 0.02 %, at any light level; the channel's
        # worst-case errors add 1 % of the drop plus 20 nA x 10 kOhm (0.07 % at 20 uA).
        assert meas < 0.03 and meas_worst < 0.1
        if rate >= 1e6:  # the light level differs from the model's
            assert meas_worst < mod
        if rate >= 1e7:
            assert meas_worst < mod / 10
    assert rows[-1][1] > 5.0  # 20 uA through 10 kOhm uncorrected: 0.2 V of 3 V


def test_gain_error_at_light_defaults_and_refusals(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    # By default the firmware's integer path is included: the same as quantise=True, not the continuous chain.
    default = gain_error_at_light_pct(law, board_ntc, 0.0, TEMPS_C)
    assert np.array_equal(default, gain_error_at_light_pct(law, board_ntc, 0.0, TEMPS_C, quantise=True))
    assert not np.array_equal(default, gain_error_at_light_pct(law, board_ntc, 0.0, TEMPS_C, quantise=False))
    for bad in (-1.0, float("nan")):
        with pytest.raises(ModelError) as info:
            gain_error_at_light_pct(law, board_ntc, bad, TEMPS_C)
        assert info.value.key == "photon_rate_hz" and info.value.reason == f"must be a non-negative number, got {bad!r}"

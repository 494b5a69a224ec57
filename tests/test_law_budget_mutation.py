"""Gain-error budget: what each term says about itself, the default calibration point, the options' refusals.

Pinned where mutation testing (tools/mutation.md) found these facts unchecked. The budgets here are
first-order only, on a 5 K grid, so that they build in a fraction of a second.
"""

from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.law import build_law, gain_error_budget
from compensator.law.budget import _check_options
from compensator.physics.supply import sipm_bias_v

CODE_TO_CODE = "changes from code to code: not removed by calibration"


def _notes(budget):
    return {t.key: (t.kind, t.note) for t in budget.terms}


def test_notes_on_the_ntc_board_without_drop_correction(sipm_a, board_ntc):
    # hut-board-ntc: NTC with R25 and Beta both +-1 %, ratiometric ADC; sensor lag 0.5 K/min x (5 s + 20 s)
    # / 60 = 0.208 K (hand); no drop correction, so the whole drop is a systematic term.
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="none")
    budget = gain_error_budget(law, board_ntc, samples=0, step_k=5.0)
    assert np.array_equal(budget.temp_c, np.arange(-25.0, 46.0, 5.0))  # the grid: 15 points 5 K apart
    notes = _notes(budget)
    assert notes["sensor_tolerance"] == ("random", "R25 +-1 %, Beta +-1 %")
    assert notes["sensor_to_die"] == ("random", "constant temperature offset: mostly removed by calibration")
    assert notes["sensor_lag"] == ("random", "+-0.208 K at 0.5 K/min; not removed by calibration")
    assert notes["adc_reference"] == ("random", "cancels: the ADC is ratiometric")
    for key in ("adc_quantisation", "adc_inl", "dac_quantisation", "dac_inl"):
        assert notes[key] == ("random", CODE_TO_CODE), key
    assert notes["supply_network_drift"] == ("random", "drift from the calibration temperature is left")
    assert notes["breakdown_calibration"] == ("random", "constant voltage offset: removed by calibration")
    assert notes["series_resistor_drop"] == ("systematic", "not corrected: the whole drop")
    assert notes["law_residual"] == ("systematic", "what the ideal law leaves")
    for key in ("self_heating", "divider_resistor", "dac_reference", "tempco_calibration", "regulator_reference"):
        assert notes[key] == ("random", ""), key


def test_notes_on_the_rtd_board_with_the_modelled_drop(sipm_b, board_pt1000):
    # hut-board-pt1000: IEC 60751 class A, absolute ADC reference (no note); lag 0.5 x (3 + 15) / 60 = 0.15 K.
    # The constant-overvoltage law leaves hut-sipm-b's 150 ppm/K capacitance coefficient.
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_overvoltage")
    notes = _notes(gain_error_budget(law, board_pt1000, samples=0, step_k=5.0, current_uncertainty_pct=25.0))
    assert notes["sensor_tolerance"] == ("random", "IEC 60751 class A")
    assert notes["sensor_lag"] == ("random", "+-0.15 K at 0.5 K/min; not removed by calibration")
    assert notes["adc_reference"] == ("random", "")
    assert notes["series_resistor_drop"] == ("random", "corrected; modelled current good to +-25 %")
    assert notes["law_residual"] == ("systematic", "uncompensated cell-capacitance coefficient")


def test_note_of_a_breakdown_moved_between_definitions(sipm_a, board_ntc):
    bd = replace(sipm_a.device.breakdown, definition="iv_second_derivative", definition_offset_v=-0.12,
                 definition_offset_err_v=0.02)
    law = build_law(replace(sipm_a, device=replace(sipm_a.device, breakdown=bd)), board_ntc, 3.0,
                    drop_correction="none")
    notes = _notes(gain_error_budget(law, board_ntc, samples=0, step_k=5.0, ramp_k_per_min=0.0))
    assert notes["breakdown_definition"] == ("random", "-120.0 mV added to reach the gain-intercept breakdown")
    assert "sensor_lag" not in notes  # no ramp, no lag term


def test_default_calibration_point_is_the_reference_within_the_range(sipm_a, board_ntc):
    # The breakdown reference is 25 C; a range that ends below it calibrates at its top, one that starts above it
    # at its bottom.
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    assert _check_options(law, None, 0, 30.0, 0.5, 1.0) == 25.0
    assert _check_options(replace(law, max_temp_c=20.0), None, 0, 30.0, 0.5, 1.0) == 20.0
    assert _check_options(replace(law, min_temp_c=30.0), None, 0, 30.0, 0.5, 1.0) == 30.0
    budget = gain_error_budget(law, board_ntc, samples=0, step_k=5.0, calibration_temp_c=-25)
    assert budget.calibration_temp_c == -25.0 and isinstance(budget.calibration_temp_c, float)
    # After a calibration at -25 C the breakdown-calibration error is gone there.
    assert budget.term("breakdown_calibration").calibrated_std_pct_by_temp[0] < 1e-9


def test_options_at_their_limits_are_accepted(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    assert _check_options(law, 45.0, 1_000_000, 100.0, 60.0, 70.0 / 10_000) == 45.0
    assert _check_options(law, -25.0, np.int64(0), 0.0, 0.0, 70.0) == -25.0
    # Half a step more than 10000 over the 70 K range is refused.
    with pytest.raises(ModelError) as info:
        _check_options(law, 25.0, 0, 30.0, 0.5, 70.0 / 10_000.5)
    assert info.value.key == "step_k"


@pytest.mark.parametrize("option, value, reason", [
    ("calibration_temp_c", 45.5, "45.5 C is outside the operating range -25 to 45 C"),
    ("calibration_temp_c", -25.5, "-25.5 C is outside the operating range -25 to 45 C"),
    ("samples", 1_000_001, "must be a whole number from 0 to 1000000, got 1000001"),
    ("samples", -1, "must be a whole number from 0 to 1000000, got -1"),
    ("samples", 10.0, "must be a whole number from 0 to 1000000, got 10.0"),
    ("current_uncertainty_pct", 100.5, "must be within 0 to 100, got 100.5"),
    ("current_uncertainty_pct", -0.5, "must be within 0 to 100, got -0.5"),
    ("current_uncertainty_pct", float("inf"), "must be within 0 to 100, got inf"),
    ("ramp_k_per_min", 60.5, "must be within 0 to 60, got 60.5"),
    ("ramp_k_per_min", -0.5, "must be within 0 to 60, got -0.5"),
    ("ramp_k_per_min", float("nan"), "must be within 0 to 60, got nan"),
    ("step_k", 0.0, "must be positive and leave at most 10000 steps over the range, got 0.0"),
    ("step_k", -1.0, "must be positive and leave at most 10000 steps over the range, got -1.0"),
    ("step_k", float("nan"), "must be positive and leave at most 10000 steps over the range, got nan"),
    ("step_k", 0.00699, "must be positive and leave at most 10000 steps over the range, got 0.00699"),
])
def test_options_out_of_range_are_refused_in_full(sipm_a, board_ntc, option, value, reason):
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    with pytest.raises(ModelError) as info:
        gain_error_budget(law, board_ntc, **{"samples": 0, option: value})
    assert info.value.key == option
    assert info.value.reason == reason


def test_modelled_drop_term_is_the_current_uncertainty_times_the_drop(sipm_a, board_ntc):
    # With the modelled correction what is left is the current model's error, rectangular within +-30 %: the
    # limit is 0.3 times the whole drop of the uncorrected law (-100 R I / Vov, checked by hand in test_law_budget),
    # to within the drop's own feedback through R dI/dV (2e-4 of it at 45 C); u = limit / sqrt(3).
    none = gain_error_budget(build_law(sipm_a, board_ntc, 3.0, drop_correction="none"), board_ntc, samples=0,
                             step_k=5.0).term("series_resistor_drop")
    modelled = gain_error_budget(build_law(sipm_a, board_ntc, 3.0), board_ntc, samples=0, step_k=5.0,
                                 current_uncertainty_pct=30.0).term("series_resistor_drop")
    assert none.signed_pct_by_temp[-1] < -1.0  # over 1 % of gain at 45 C
    assert modelled.limit_pct_by_temp == pytest.approx(0.3 * np.abs(none.signed_pct_by_temp), rel=1e-3)
    assert modelled.std_pct == pytest.approx(modelled.limit_pct / np.sqrt(3), rel=1e-12)


@pytest.mark.parametrize("drop_correction", ["modelled", "measured"])
def test_drop_terms_follow_the_series_resistor(sipm_a, board_ntc, drop_correction):
    # No series resistor, no drop and no drop term; a 1 ohm resistor has one (however small), and the measured
    # correction adds the current channel's drift; every other source stays.
    terms = {}
    for r_ohm in (0.0, 1.0):
        board = replace(board_ntc, supply=replace(board_ntc.supply, series_resistor_ohm=r_ohm))
        budget = gain_error_budget(build_law(sipm_a, board, 3.0, drop_correction=drop_correction), board,
                                   samples=0, step_k=5.0)
        terms[r_ohm] = [t.key for t in budget.terms]
    drop_keys = ["series_resistor_drop"] + (["current_sense_drift"] if drop_correction == "measured" else [])
    assert [k for k in terms[1.0] if k not in drop_keys] == terms[0.0]
    assert set(terms[1.0]) - set(terms[0.0]) == set(drop_keys)
    assert terms[0.0][:3] == ["sensor_tolerance", "self_heating", "sensor_to_die"] and len(terms[0.0]) == 24


def test_current_sense_drift_by_hand(sipm_a, board_ntc):
    # hut-board-ntc's current channel: sense gain 25 ppm/K, input offset 0.2 nA/K; at 45 C the electronics are
    # 30 K from their reference. The gain drift moves the correction by 7.5e-4 of the drop (R I = 1.136 % of the
    # 3 V at 45 C, test_law_chain_mutation), the offset drift by 10 kohm x 6 nA = 60 uV, 0.002 %; both
    # rectangular, the limits add, the one-sigma values in quadrature (hand calculation; within the drop's own
    # feedback, 3e-4 of it).
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured")
    budget = gain_error_budget(law, board_ntc, samples=0, step_k=5.0)
    term = budget.term("current_sense_drift")
    gain_part, offset_part = 7.5e-4 * 1.1361, 100.0 * 1e4 * 6e-9 / 3.0
    assert term.limit_pct_by_temp[-1] == pytest.approx(gain_part + offset_part, rel=1e-3)
    assert term.std_pct_by_temp[-1] == pytest.approx(np.hypot(gain_part, offset_part) / np.sqrt(3), rel=1e-3)


def test_no_light_yield_term_without_its_uncertainty(sipm_a, board_ntc):
    crystal = replace(sipm_a.scintillator, light_yield_tempco_err_pct_per_k=0.0)
    law = build_law(replace(sipm_a, scintillator=crystal), board_ntc, 3.0, kind="constant_response",
                    drop_correction="none")
    keys = [t.key for t in gain_error_budget(law, board_ntc, samples=0, step_k=5.0).terms]
    assert "light_yield_tempco" not in keys and "tempco_calibration" in keys
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_response", drop_correction="none")
    term = gain_error_budget(law, board_ntc, samples=0, step_k=5.0).term("light_yield_tempco")
    assert term.limit_pct == pytest.approx(3.0 * term.std_pct, rel=1e-12)  # normal, limit 3 sigma


def test_light_yield_term_by_hand(sipm_a, board_ntc):
    # hut-sipm-a's crystal: light yield 1 - 0.25 %/K dT - 0.002 %/K^2 dT^2 from 25 C, its coefficient known to
    # 0.03 %/K (1 sigma). At -25 C that is 0.03 x 50 = 1.5 % of the 25 C yield on a yield of 1.075 of it:
    # 1.3953 % of the response (hand calculation).
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_response", drop_correction="none")
    budget = gain_error_budget(law, board_ntc, samples=0, step_k=5.0)
    assert budget.quantity == "response"  # the figures are of gain x PDE x crosstalk x light yield
    assert budget.term("light_yield_tempco").std_pct_by_temp[0] == pytest.approx(1.5 / 1.075, rel=1e-3)


def test_no_current_sense_drift_term_without_drifts(sipm_a, board_ntc):
    sense = replace(board_ntc.current_sense, gain_tempco_ppm_per_k=0.0, offset_drift_a_per_k=0.0)
    board = replace(board_ntc, current_sense=sense)
    law = build_law(sipm_a, board, 3.0, drop_correction="measured")
    keys = [t.key for t in gain_error_budget(law, board, samples=0, step_k=5.0).terms]
    assert "current_sense_drift" not in keys and "series_resistor_drop" in keys


def test_every_term_by_temperature_and_the_quantisation_after_calibration(sipm_a, board_ntc):
    # Every per-temperature array of every term is on the budget's grid. Quantisation is not removed by a
    # calibration: the calibration sees its own, so after it the bound is the bound at T plus the bound at the
    # calibration point (25 C), times C(T)/C(25 C) = 1 for hut-sipm-a (no capacitance coefficient).
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="none")
    budget = gain_error_budget(law, board_ntc, samples=0, step_k=5.0)
    assert budget.monte_carlo is None  # no samples, no Monte Carlo
    for term in budget.terms:
        for name in ("limit_pct_by_temp", "std_pct_by_temp", "signed_pct_by_temp", "calibrated_limit_pct_by_temp",
                     "calibrated_std_pct_by_temp", "calibrated_signed_pct_by_temp"):
            assert np.shape(getattr(term, name)) == budget.temp_c.shape, (term.key, name)
    i25 = int(np.flatnonzero(budget.temp_c == 25.0)[0])
    for key in ("adc_quantisation", "dac_quantisation", "adc_inl", "dac_inl"):
        term = budget.term(key)
        assert term.calibrated_limit_pct_by_temp == pytest.approx(
            term.limit_pct_by_temp + term.limit_pct_by_temp[i25], rel=1e-12), key
        # Both rectangular and independent: the one-sigma values add in quadrature.
        assert term.calibrated_std_pct_by_temp == pytest.approx(
            np.hypot(term.std_pct_by_temp, term.std_pct_by_temp[i25]), rel=1e-12), key


def test_measured_correction_rounding_alone_by_hand(sipm_a, board_ntc):
    # An ideal current channel (no gain, reference or offset error): what is left of the measured correction is
    # its rounding, half a code of the current ADC through R and half a DAC LSB, each rectangular and not removed
    # by a calibration (which sees its own rounding). hut-sipm-a given a cell capacitance rising 150 ppm/K (as
    # hut-sipm-b's): the constant-gain law holds Vov(T) = 3 V / f(T), f(T) = 1 + 150e-6 (T - 25 C), and a bias
    # error dV moves the gain by 100 dV f(T) / 3 V percent; the calibration at 0 C acts through C(T)/C(0 C) = f(T) / f(0 C), so the
    # calibration's own rounding counts f(T) / f(0 C) x f(0 C) = f(T) as much as at T (hand calculation).
    sense = replace(board_ntc.current_sense, gain_tolerance_pct=0.0, reference_tolerance_pct=0.0, offset_a=0.0)
    board = replace(board_ntc, current_sense=sense)
    sipm = replace(sipm_a, device=replace(sipm_a.device, capacitance_tempco_ppm_per_k=150.0))
    law = build_law(sipm, board, 3.0, kind="constant_gain", drop_correction="measured")
    budget = gain_error_budget(law, board, samples=0, step_k=5.0, calibration_temp_c=0.0)
    term = budget.term("series_resistor_drop")
    f = 1.0 + 150e-6 * (budget.temp_c - 25.0)
    half_r_v = 0.5 * board.supply.series_resistor_ohm * 3.3 / 4096 / 20e3  # 3.3 V / 4096 codes / 20 kV/A
    half_dac_v = 0.5 * board.supply.lsb_v
    per_v = 100.0 * f / 3.0
    assert term.limit_pct_by_temp == pytest.approx((half_r_v + half_dac_v) * per_v, rel=1e-9)
    assert term.std_pct_by_temp == pytest.approx(np.hypot(half_r_v, half_dac_v) / np.sqrt(3) * per_v, rel=1e-9)
    assert term.calibrated_limit_pct_by_temp == pytest.approx(2.0 * (half_r_v + half_dac_v) * per_v, rel=1e-9)
    assert term.calibrated_std_pct_by_temp == pytest.approx(
        np.sqrt(2.0) * np.hypot(half_r_v, half_dac_v) / np.sqrt(3) * per_v, rel=1e-9)
    for name in ("signed_pct_by_temp", "calibrated_signed_pct_by_temp"):  # the ideal channel's errors: none
        assert np.array_equal(getattr(term, name), np.zeros(budget.temp_c.size)), name


def test_systematic_terms_and_their_calibration_by_hand(sipm_b, board_pt1000):
    # hut-sipm-b under the constant-overvoltage law, no drop correction. G = C(T) (V - Vbd) / q (common practice)
    # with C(T) = C(25 C) f(T), f(T) = 1 + 150e-6 (T - 25 C): the law leaves 100 (f(T) - 1) % and the drop d(T)
    # through the series resistor takes off 100 f(T) d(T) / 4 V more. A one-point calibration at 0 C trims the
    # bias so the gain is right there: the law's residual becomes 100 (f(T) / f(0 C) - 1) %, the drop's
    # -100 f(T) (d(T) - d(0 C)) / 4 V (hand algebra).
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_overvoltage", drop_correction="none")
    budget = gain_error_budget(law, board_pt1000, samples=0, step_k=5.0, calibration_temp_c=0.0)
    t = budget.temp_c
    f = 1.0 + 150e-6 * (t - 25.0)
    f0 = 1.0 + 150e-6 * (0.0 - 25.0)
    grid = np.append(t, 0.0)
    v_out = law.output_v(grid)
    d = v_out - sipm_bias_v(board_pt1000.supply, sipm_b.device, v_out, grid)
    residual, drop = budget.term("law_residual"), budget.term("series_resistor_drop")
    assert residual.note == "uncompensated cell-capacitance coefficient"
    assert residual.signed_pct_by_temp == pytest.approx(100.0 * (f - 1.0), rel=1e-6, abs=1e-9)
    assert residual.calibrated_signed_pct_by_temp == pytest.approx(100.0 * (f / f0 - 1.0), rel=1e-6, abs=1e-9)
    assert drop.signed_pct_by_temp == pytest.approx(-100.0 * f * d[:-1] / 4.0, rel=1e-6)
    assert drop.calibrated_signed_pct_by_temp == pytest.approx(-100.0 * f * (d[:-1] - d[-1]) / 4.0, rel=1e-6)
    for term in (residual, drop):
        assert term.kind == "systematic" and term.std_pct == term.calibrated_std_pct == 0.0
        assert np.array_equal(term.limit_pct_by_temp, np.abs(term.signed_pct_by_temp))
        assert np.array_equal(term.calibrated_limit_pct_by_temp, np.abs(term.calibrated_signed_pct_by_temp))
    # The systematic terms add with their signs; the worst case adds every random limit to their magnitude.
    random_terms = [term for term in budget.terms if term.kind == "random"]
    hand_sys = 100.0 * (f - 1.0) - 100.0 * f * d[:-1] / 4.0
    hand_sys_cal = 100.0 * (f / f0 - 1.0) - 100.0 * f * (d[:-1] - d[-1]) / 4.0
    assert budget.systematic_pct == pytest.approx(np.abs(hand_sys).max(), rel=1e-6)
    assert budget.worst_case_pct == pytest.approx(
        (np.abs(hand_sys) + sum(term.limit_pct_by_temp for term in random_terms)).max(), rel=1e-6)
    assert budget.calibrated_worst_case_pct == pytest.approx(
        (np.abs(hand_sys_cal) + sum(term.calibrated_limit_pct_by_temp for term in random_terms)).max(), rel=1e-6)


def test_the_constant_gain_law_names_its_residual_as_the_ideal_law(sipm_b, board_pt1000):
    # The capacitance coefficient is compensated by the constant-gain law: only the constant-overvoltage law
    # leaves it.
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_gain", drop_correction="none")
    term = gain_error_budget(law, board_pt1000, samples=0, step_k=5.0).term("law_residual")
    assert term.note == "what the ideal law leaves"
    assert np.abs(term.signed_pct_by_temp).max() < 1e-9


def test_the_budget_records_its_law_and_options(sipm_a, board_ntc):
    # The record says what it is the budget of: the law's kind, the quantity held, its overvoltage, and the
    # options as given, as floats (the response law's quantity: test_light_yield_term_by_hand).
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_overvoltage", drop_correction="none")
    budget = gain_error_budget(law, board_ntc, samples=0, step_k=5.0, current_uncertainty_pct=25,
                               ramp_k_per_min=1)
    assert (budget.law_kind, budget.quantity, budget.overvoltage_v) == ("constant_overvoltage", "gain", 3.0)
    assert (budget.current_uncertainty_pct, budget.ramp_k_per_min) == (25.0, 1.0)
    assert isinstance(budget.current_uncertainty_pct, float) and isinstance(budget.ramp_k_per_min, float)


def test_monte_carlo_dithers_over_exactly_one_code(sipm_a, board_ntc):
    # Only the temperature ADC's quantisation left (the DAC at 24 bits: its half LSB is 1e-5 % of gain). A true
    # temperature drawn uniformly over exactly one ADC code makes the reading error uniform within +-half a code:
    # zero mean and u = a / sqrt(3), whatever the temperature (common practice). So at every temperature of the
    # grid the Monte Carlo's mean is within 4 of its standard errors (std / sqrt(2000)) of zero and its spread
    # within 5 % of the first-order term (the sampling error of a uniform's standard deviation over 2000 samples
    # is sqrt(0.8) / 2 / sqrt(2000) = 1.0 %). A window of 1.5 codes would bias the mean by up to a twelfth of a
    # code (13 standard errors) and move the spread by up to 14 %.
    from test_law_electronics import _converters_only

    board = _converters_only(board_ntc, adc_inl_lsb=0.0, dac_inl_lsb=0.0)
    board = replace(board, supply=replace(board.supply, dac=replace(board.supply.dac, bits=24)))
    bd = replace(sipm_a.device.breakdown, breakdown_err_v=0.0, tempco_err_mv_per_k=0.0)
    law = build_law(replace(sipm_a, device=replace(sipm_a.device, breakdown=bd)), board, 3.0, kind="constant_gain",
                    drop_correction="none")
    budget = gain_error_budget(law, board, samples=2000, seed=1, ramp_k_per_min=0.0, step_k=5.0)
    mc = budget.monte_carlo
    assert budget.term("dac_quantisation").limit_pct < 1e-4
    assert np.all(np.abs(mc.mean_pct_by_temp) < 4.0 * mc.std_pct_by_temp / np.sqrt(2000))
    ratio = mc.std_pct_by_temp / budget.term("adc_quantisation").std_pct_by_temp
    assert np.all(np.abs(ratio - 1.0) < 0.05), ratio

"""Electronics drift, static converter errors and the sensor lag in the gain-error budget, against hand calculations."""

from dataclasses import replace

import numpy as np
import pytest

from compensator.law import build_law, electronics_terms, gain_error_budget


def _at(budget, temp_c):
    return int(np.flatnonzero(np.isclose(budget.temp_c, temp_c))[0])


def _bare(board, **supply):
    """The board with no series resistor (no current feedback through R) and only the given supply errors."""
    s = replace(board.supply, series_resistor_ohm=0.0, **supply)
    return replace(board, supply=s)


def test_resistor_drift_by_hand(sipm_a, board_ntc):
    # Feedback injection, Vout = Vfb (1 + R1/R2 + R1/R3) - Vdac R1/R3. With independent resistors each within
    # +-25 ppm/K the bounds add: |dV/dlnR1| + |dV/dlnR2| + |dV/dlnR3| = (Vout - Vfb) + Vfb R1/R2 + (Vdac - Vfb) R1/R3
    # = 2 Vfb R1/R2 (hand calculation; Vdac > Vfb here). The electronics run from -20 C (SiPM at -25 C) to 55 C
    # (SiPM at 45 C) around 25 C: at the cold end they are 45 K from 25 C. dG/G = dV / Vov.
    board = _bare(board_ntc, resistor_tempco_ppm_per_k=25.0)
    law = build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="none")
    budget = gain_error_budget(law, board, samples=0)
    term = budget.term("supply_network_drift")
    v_out = float(law.output_v(-25.0))
    assert v_out == pytest.approx(24.5 - 0.0215 * 50 + 3.0, abs=1e-9)
    by_hand = 2.0 * 1.25 * 1e6 / 43.2e3 * 25e-6 * 45.0 / 3.0 * 100.0
    assert by_hand == pytest.approx(2.1701, abs=1e-4)
    assert term.limit_pct_by_temp[_at(budget, -25.0)] == pytest.approx(by_hand, rel=1e-4)
    v_dac = (1.25 * (1 + 1e6 / 43.2e3 + 4.0) - v_out) / 4.0
    parts = np.array([v_out - 1.25, 1.25 * 1e6 / 43.2e3, (v_dac - 1.25) * 4.0])
    assert term.std_pct_by_temp[_at(budget, -25.0)] == pytest.approx(  # each rectangular, added in quadrature
        np.sqrt(np.sum(parts ** 2)) * 25e-6 * 45.0 / 3.0 * 100.0 / np.sqrt(3), rel=1e-4)
    # After a one-point calibration at 25 C (electronics at 25 + 75 * 50 / 70 - 20 = 33.57 C) the drift from
    # there is left: 53.57 K at the cold end.
    dt_cal = -20.0 - (-20.0 + 75.0 * 50.0 / 70.0)
    assert term.calibrated_limit_pct_by_temp[_at(budget, -25.0)] == pytest.approx(
        2.0 * 1.25 * 1e6 / 43.2e3 * 25e-6 * abs(dt_cal) / 3.0 * 100.0, rel=2e-3)


def test_tracking_network_drifts_less(sipm_a, board_ntc):
    independent = _bare(board_ntc, resistor_tempco_ppm_per_k=25.0)
    matched = _bare(board_ntc, resistor_tempco_ppm_per_k=25.0, resistor_tracking_ppm_per_k=2.0)
    terms = []
    for board in (independent, matched):
        law = build_law(sipm_a, board, 3.0, drop_correction="none")
        terms.append(gain_error_budget(law, board, samples=0).term("supply_network_drift").limit_pct)
    # Each resistor departs from the others by at most half the tracking: 1 ppm/K instead of 25 ppm/K.
    assert terms[1] == pytest.approx(terms[0] / 25.0, rel=1e-6)


def test_sensor_lag_by_hand(sipm_a, board_ntc):
    # Two first-order lags in series under a steady ramp: the reading trails by r (tau1 + tau2) (common practice).
    # hut-board-ntc: 5 s + 20 s; at 0.5 K/min the lag is 0.5/60 * 25 = 0.2083 K; dG/G = (dVbd/dT) lag / Vov
    # = 0.0215 * 0.2083 / 3 = 0.149 %, times C-independent here, and the calibration does not see it.
    board = _bare(board_ntc)
    law = build_law(sipm_a, board, 3.0, drop_correction="none")
    budget = gain_error_budget(law, board, samples=0, ramp_k_per_min=0.5)
    term = budget.term("sensor_lag")
    lag_k = 0.5 / 60.0 * 25.0
    assert term.limit_pct == pytest.approx(0.0215 * lag_k / 3.0 * 100.0, rel=2e-3)
    assert np.allclose(term.calibrated_limit_pct_by_temp, term.limit_pct_by_temp)
    assert "0.208 K" in term.note
    with pytest.raises(KeyError):
        gain_error_budget(law, board, samples=0, ramp_k_per_min=0.0).term("sensor_lag")


def test_dac_reference_drift_by_hand(sipm_b, board_pt1000):
    # Direct supply Vout = 30 V + 14 Vdac: a reference drift of 5 ppm/K moves the output by (Vout - 30 V) 5e-6 dT;
    # the electronics follow the SiPM (no electronics section): dT = 50 K at -25 C. hut-sipm-b's cell capacitance
    # has 150 ppm/K, and the gain is referred to 25 C: a voltage error weighs C(-25 C)/C(25 C) = 0.9925 there.
    board = replace(board_pt1000, supply=replace(board_pt1000.supply, series_resistor_ohm=0.0))
    law = build_law(sipm_b, board, 4.0, kind="constant_overvoltage", drop_correction="none")
    budget = gain_error_budget(law, board, samples=0)
    v_out = float(law.output_v(-25.0))
    assert budget.term("dac_reference_drift").limit_pct_by_temp[_at(budget, -25.0)] == pytest.approx(
        (v_out - 30.0) * 5e-6 * 50.0 / 4.0 * 100.0 * (1 - 150e-6 * 50.0), rel=1e-4)


def test_direct_supply_gain_drift_by_hand(sipm_b, board_pt1000):
    # Direct supply Vout = 30 V + 14 Vdac, its gain a ratio of two resistors, here tracking to 4 ppm/K: each departs
    # from the other by up to half of that, so the ratio by up to 2 x 2 ppm/K and the output by
    # (Vout - 30 V) 4e-6 dT; dT = 50 K at -25 C, and C(-25 C)/C(25 C) = 0.9925 as above (hand calculation).
    board = replace(board_pt1000, supply=replace(board_pt1000.supply, series_resistor_ohm=0.0,
                                                 resistor_tracking_ppm_per_k=4.0))
    law = build_law(sipm_b, board, 4.0, kind="constant_overvoltage", drop_correction="none")
    budget = gain_error_budget(law, board, samples=0, step_k=5.0)
    v_out = float(law.output_v(-25.0))
    assert budget.term("supply_network_drift").limit_pct_by_temp[_at(budget, -25.0)] == pytest.approx(
        (v_out - 30.0) * 4e-6 * 50.0 / 4.0 * 100.0 * (1 - 150e-6 * 50.0), rel=1e-4)


def test_static_converter_errors_by_hand(sipm_b, board_pt1000):
    board = replace(board_pt1000, supply=replace(board_pt1000.supply, series_resistor_ohm=0.0))
    law = build_law(sipm_b, board, 4.0, kind="constant_overvoltage", drop_correction="none")
    budget = gain_error_budget(law, board, samples=0)
    i = _at(budget, 25.0)
    # DAC offset 1 LSB = 14 * 2.5 V / 65536 at the output; gain error 0.02 % of (Vout - 30 V).
    assert budget.term("dac_offset").limit_pct_by_temp[i] == pytest.approx(14 * 2.5 / 65536 / 4.0 * 100.0, rel=1e-4)
    assert budget.term("dac_offset").calibrated_limit_pct < 1e-3 * budget.term("dac_offset").limit_pct  # constant
    v_out = float(law.output_v(25.0))
    assert budget.term("dac_gain_error").limit_pct_by_temp[i] == pytest.approx((v_out - 30.0) * 2e-4 / 4.0 * 100,
                                                                               rel=1e-4)
    # INL of 1 LSB: charged like quantisation, twice half an LSB.
    assert budget.term("dac_inl").limit_pct_by_temp[i] == pytest.approx(
        2.0 * budget.term("dac_quantisation").limit_pct_by_temp[i], rel=1e-12)


def test_electronics_terms_for_the_demo(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain")
    budget = gain_error_budget(law, board_ntc, samples=0)
    keys = [t.key for t in electronics_terms(budget)]
    assert {"sensor_lag", "supply_network_drift", "regulator_reference_drift", "dac_reference_drift",
            "divider_resistor_drift", "adc_inl", "dac_inl"} <= set(keys)
    assert "breakdown_calibration" not in keys
    # After calibration the electronics' drift is what is left on this board (25 ppm/K resistors).
    assert budget.calibrated_dominant == "supply_network_drift"


def test_monte_carlo_agrees_with_first_order_on_the_drifting_board(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain")
    budget = gain_error_budget(law, board_ntc, samples=1500, seed=2)
    rss = np.sqrt(sum(t.std_pct_by_temp ** 2 for t in budget.terms if t.kind == "random"))
    ratio = budget.monte_carlo.std_pct_by_temp / rss
    assert np.all((ratio > 0.92) & (ratio < 1.08)), ratio


def test_monte_carlo_calibration_keeps_the_lag(sipm_b, board_pt1000):
    # A one-point calibration is made at steady state: it removes constant offsets but not the sensor's lag under
    # a ramp. At 6 K/min the lag is a large part of what is left, and the Monte Carlo's spread after calibration
    # must still match the first-order figure (it would fall well short if the calibration saw the lag).
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_gain")
    budget = gain_error_budget(law, board_pt1000, samples=1500, seed=5, ramp_k_per_min=6.0)
    assert budget.term("sensor_lag").calibrated_std_pct > 0.5 * budget.calibrated_rss_pct
    assert budget.monte_carlo.calibrated_std_pct / budget.calibrated_rss_pct == pytest.approx(1.0, abs=0.08)


def _converters_only(board, *, adc_inl_lsb, dac_inl_lsb):
    """The board with every tolerance, drift, lag and the series resistor taken out: converters only."""
    ch = board.temperature
    sensor = replace(ch.sensor, r25_tolerance_pct=0.0, beta_tolerance_pct=0.0, self_heating_k=0.0, sensor_to_die_k=0.0,
                     time_constant_s=0.0, die_to_sensor_time_constant_s=0.0)
    fe = replace(ch.front_end, reference_resistor_tolerance_pct=0.0, adc_reference_tolerance_pct=0.0,
                 excitation_tolerance_pct=0.0, reference_resistor_tempco_ppm_per_k=0.0,
                 adc_reference_tempco_ppm_per_k=0.0, excitation_tempco_ppm_per_k=0.0, adc_offset_lsb=0.0,
                 adc_gain_error_pct=0.0, adc_inl_lsb=adc_inl_lsb)
    dac = replace(board.supply.dac, reference_tolerance_pct=0.0, reference_tempco_ppm_per_k=0.0, offset_lsb=0.0,
                  gain_error_pct=0.0, inl_lsb=dac_inl_lsb)
    supply = replace(board.supply, dac=dac, resistor_tolerance_pct=0.0, resistor_tempco_ppm_per_k=0.0,
                     feedback_tolerance_pct=0.0, feedback_tempco_ppm_per_k=0.0, series_resistor_ohm=0.0)
    return replace(board, temperature=replace(ch, sensor=sensor, front_end=fe), supply=supply)


def _converters_budget(sipm_a, board_ntc, *, adc_inl_lsb, dac_inl_lsb, tempco_err=False):
    """The converters-only board, hut-sipm-a without breakdown (and tempco) error: its 2000-sample budget."""
    board = _converters_only(board_ntc, adc_inl_lsb=adc_inl_lsb, dac_inl_lsb=dac_inl_lsb)
    bd = sipm_a.device.breakdown
    bd = replace(bd, breakdown_err_v=0.0, tempco_err_mv_per_k=bd.tempco_err_mv_per_k if tempco_err else 0.0)
    law = build_law(replace(sipm_a, device=replace(sipm_a.device, breakdown=bd)), board, 3.0, kind="constant_gain",
                    drop_correction="none")
    return gain_error_budget(law, board, samples=2000, seed=1, ramp_k_per_min=0.0)


def test_monte_carlo_of_converter_non_linearity(sipm_a, board_ntc):
    # Only the converters' INL (2 LSB ADC, 8 LSB DAC, drawn anew at every code) and quantisation are left: the
    # Monte Carlo's spread must match the analytic first-order terms (rectangular, u = a / sqrt(3)) at every
    # temperature, before and after calibration, and its mean stay near zero (the draws are centred).
    budget = _converters_budget(sipm_a, board_ntc, adc_inl_lsb=2.0, dac_inl_lsb=8.0)
    assert {t.key for t in budget.terms if t.limit_pct > 0} == {"adc_quantisation", "adc_inl", "dac_quantisation",
                                                                 "dac_inl"}
    # The INL bounds against half an LSB of quantisation: 2 / 0.5 for the ADC, 8 / 0.5 for the DAC (hand).
    assert budget.term("adc_inl").limit_pct == pytest.approx(4.0 * budget.term("adc_quantisation").limit_pct, rel=1e-9)
    assert budget.term("dac_inl").limit_pct == pytest.approx(16.0 * budget.term("dac_quantisation").limit_pct, rel=1e-9)
    rss = np.sqrt(sum(t.std_pct_by_temp ** 2 for t in budget.terms if t.kind == "random"))
    mc = budget.monte_carlo
    ratio = mc.std_pct_by_temp / rss
    assert np.all((ratio > 0.92) & (ratio < 1.08)), ratio
    assert np.all(np.abs(mc.mean_pct_by_temp) < 0.15 * rss)
    assert mc.calibrated_std_pct / budget.calibrated_rss_pct == pytest.approx(1.0, abs=0.08)


def test_monte_carlo_of_quantisation_alone(sipm_a, board_ntc):
    # No INL either: only the two quantisations are left, each rectangular within half an LSB (u = a / sqrt(3)).
    # The Monte Carlo dithers the true temperature across exactly one ADC code, so the ADC's error is drawn
    # uniformly; the DAC code follows the code the ADC reads, so within one ADC code it hardly changes and the
    # spread is the ADC's: over the range (RMS over the temperatures) within 5 % of the ADC term, the 2000
    # samples' sampling error being 1.6 % at one sigma; at any one temperature the fixed DAC rounding moves it
    # by up to about a third.
    budget = _converters_budget(sipm_a, board_ntc, adc_inl_lsb=0.0, dac_inl_lsb=0.0)
    assert {t.key for t in budget.terms if t.limit_pct > 0} == {"adc_quantisation", "dac_quantisation"}
    # No drift coefficient, offset, gain error, lag or regulator reference: no such term (the tolerances set to
    # zero above still have theirs, at zero).
    assert [t.key for t in budget.terms] == [
        "sensor_tolerance", "self_heating", "sensor_to_die", "adc_quantisation", "adc_reference", "divider_resistor",
        "dac_quantisation", "dac_reference", "supply_network", "breakdown_calibration", "tempco_calibration",
        "law_residual"]
    adc = budget.term("adc_quantisation").std_pct_by_temp
    mc = budget.monte_carlo.std_pct_by_temp
    assert np.sqrt(np.mean(mc ** 2) / np.mean(adc ** 2)) == pytest.approx(1.0, abs=0.05)
    assert np.all((mc / adc > 0.6) & (mc / adc < 1.4)), mc / adc


def test_monte_carlo_draws_an_inl_of_exactly_one_lsb(sipm_a, board_ntc):
    # An ADC INL bound of 1 LSB is drawn like any other (rectangular, u = 1 / sqrt(3) LSB against the
    # quantisation's 0.29 LSB): without it the spread would be 0.44 of the first-order figure. Over the range
    # (RMS over the temperatures) within 5 %, the sampling error of 2000 samples being 1.6 % at one sigma.
    budget = _converters_budget(sipm_a, board_ntc, adc_inl_lsb=1.0, dac_inl_lsb=0.0)
    assert budget.term("adc_inl").limit_pct == pytest.approx(2.0 * budget.term("adc_quantisation").limit_pct, rel=1e-9)
    rss = np.sqrt(sum(t.std_pct_by_temp ** 2 for t in budget.terms if t.kind == "random"))
    mc = budget.monte_carlo.std_pct_by_temp
    assert np.sqrt(np.mean(mc ** 2) / np.mean(rss ** 2)) == pytest.approx(1.0, abs=0.05)


def test_monte_carlo_percentiles_of_a_normal_source(sipm_a, board_ntc):
    # Only the tempco calibration error (normal, 0.3 mV/K one sigma) is left beside the small quantisation: at
    # every temperature the error is normal, so the 99th percentile of |x| is 2.576 sigma
    # (scipy.stats.norm.ppf(0.995)) at the temperature of the largest spread, before and after calibration. The
    # sampling error of that percentile at 2000 samples is about 0.08 sigma: allowed 0.25 (three of them). Pooling
    # all temperatures into one percentile would give about 1.75 sigma.
    budget = _converters_budget(sipm_a, board_ntc, adc_inl_lsb=0.0, dac_inl_lsb=0.0, tempco_err=True)
    mc = budget.monte_carlo
    assert mc.p99_abs_pct / mc.std_pct == pytest.approx(2.576, abs=0.25)
    assert mc.calibrated_p99_abs_pct / mc.calibrated_std_pct == pytest.approx(2.576, abs=0.25)
    # The spread itself against first order: 0.3 mV/K x 50 K / 3 V = 0.5 % at -25 C (hand), sampling error 1.6 %.
    assert budget.rss_pct == pytest.approx(0.5, rel=0.01)
    assert mc.std_pct / budget.rss_pct == pytest.approx(1.0, abs=0.05)

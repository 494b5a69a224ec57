"""Gain-error budget: hand-worked terms, calibration residuals and the Monte Carlo against first order.

The propagation formula is dG/G = (dV - (dVbd/dT) dT) / Vov (common practice).
"""

import os
from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.law import build_law
from compensator.law.budget import gain_error_budget
from compensator.physics.sipm import cell_capacitance_f
from compensator.physics.supply import sipm_bias_v


# Budgets are built once per module so that the suite stays fast; while mutmut collects its statistics
# (MUTANT_UNDER_TEST is "stats") every test builds its own, or mutmut would map the chain only to the first test
# that happened to build them. A mutant's own run shares them again: every test it runs sees the same mutant.
_SCOPE = "function" if os.environ.get("MUTANT_UNDER_TEST") == "stats" else "module"


@pytest.fixture(scope=_SCOPE)
def budget_b_flat(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_overvoltage", drop_correction="none")
    return law, gain_error_budget(law, board_pt1000, samples=0)


@pytest.fixture(scope=_SCOPE)
def budget_b_mc(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_gain")
    return law, gain_error_budget(law, board_pt1000, samples=2000, seed=7)


@pytest.fixture(scope=_SCOPE)
def budget_a_mc(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="none")
    return law, gain_error_budget(law, board_ntc, samples=2000, seed=11)


# The same two laws without the Monte Carlo, for the tests of the first-order terms alone (they are quick to build).
@pytest.fixture(scope=_SCOPE)
def budget_b_first(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_gain")
    return law, gain_error_budget(law, board_pt1000, samples=0)


@pytest.fixture(scope=_SCOPE)
def budget_a_first(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="none")
    return law, gain_error_budget(law, board_ntc, samples=0)


def _at(budget, temp_c):
    return int(np.flatnonzero(np.isclose(budget.temp_c, temp_c))[0])


def _capacitance_ratio_45_to_25(sipm):
    """C(45 C) / C(25 C): the gain is referred to its value at 25 C."""
    return float(cell_capacitance_f(sipm.device, 45.0) / cell_capacitance_f(sipm.device, 25.0))


def test_sensor_to_die_offset_by_hand(budget_b_flat, sipm_b):
    # Hand-worked (common practice formula): 0.2 K offset, dVbd/dT = 34 mV/K + 2 * 0.02 mV/K^2 (T - 25 C),
    # Vov = 4 V: dG/G = 0.034 * 0.2 / 4 = 0.17 % at 25 C and 0.0348 * 0.2 / 4 = 0.174 % at 45 C, there
    # times C(45 C)/C(25 C) = 1.003 because the gain is referred to its value at 25 C. The current's
    # feedback through the 4.7 kohm resistor (R dI/dV) takes off about 0.1 %.
    law, budget = budget_b_flat
    term = budget.term("sensor_to_die")
    scale = _capacitance_ratio_45_to_25(sipm_b)
    assert term.limit_pct_by_temp[_at(budget, 25.0)] == pytest.approx(0.17, rel=2e-3)
    assert term.limit_pct_by_temp[_at(budget, 45.0)] == pytest.approx(0.174 * scale, rel=2e-3)
    assert term.std_pct_by_temp[_at(budget, 25.0)] == pytest.approx(0.17 / np.sqrt(3), rel=1e-3)  # rectangular
    assert term.worst_temp_c == 45.0  # dVbd/dT and C(T) both rise with temperature: the hottest end


def test_rtd_class_tolerance_by_hand(budget_b_flat, sipm_b):
    # IEC 60751 class A: +-(0.15 K + 0.002 |t|), an offset and a slope, each rectangular. At 25 C that is
    # 0.2 K, 0.034 * 0.2 / 4 = 0.17 %; at 45 C 0.24 K, 0.0348 * 0.24 / 4 = 0.2088 % times C(45 C)/C(25 C)
    # (hand calculation, as for the sensor-to-die offset); one sigma at 25 C: hypot(0.15, 0.05) / sqrt(3) K.
    law, budget = budget_b_flat
    term = budget.term("sensor_tolerance")
    scale = _capacitance_ratio_45_to_25(sipm_b)
    assert term.limit_pct_by_temp[_at(budget, 25.0)] == pytest.approx(0.17, rel=2e-3)
    assert term.limit_pct_by_temp[_at(budget, 45.0)] == pytest.approx(0.2088 * scale, rel=2e-3)
    assert term.std_pct_by_temp[_at(budget, 25.0)] == pytest.approx(
        100 * 0.034 * np.hypot(0.15, 0.05) / np.sqrt(3) / 4.0, rel=2e-3)


def test_ntc_tolerances_by_hand(sipm_a, board_ntc):
    # Beta model (common practice): ln R = ln R25 + B (1/T - 1/T25), B = 3435 K. An R25 error of 1 % reads
    # dT = 0.01 / (B / T^2); a B error of 1 % changes ln R by 0.01 B (1/T - 1/T25), zero at 25 C, so reads
    # dT = 0.01 T (1 - T / T25). Both rectangular. At 25 C: 0.01 x 298.15^2 / 3435 = 0.25879 K alone; at 45 C
    # 0.29468 K and 0.21340 K (hand calculation); x 21.5 mV/K / 3 V, and C(45 C)/C(25 C) at 45 C. No series
    # resistor, so that no current feeds back.
    board = replace(board_ntc, supply=replace(board_ntc.supply, series_resistor_ohm=0.0))
    law = build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="none")
    budget = gain_error_budget(law, board, samples=0)
    term = budget.term("sensor_tolerance")
    k = 100 * 0.0215 / 3.0
    scale = float(cell_capacitance_f(sipm_a.device, 45.0) / cell_capacitance_f(sipm_a.device, 25.0))
    i25, i45 = _at(budget, 25.0), _at(budget, 45.0)
    assert term.limit_pct_by_temp[i25] == pytest.approx(0.25879 * k, rel=1e-4)
    assert term.std_pct_by_temp[i25] == pytest.approx(0.25879 * k / np.sqrt(3), rel=1e-4)
    assert term.limit_pct_by_temp[i45] == pytest.approx((0.29468 + 0.21340) * k * scale, rel=1e-4)
    assert term.std_pct_by_temp[i45] == pytest.approx(np.hypot(0.29468, 0.21340) * k * scale / np.sqrt(3), rel=1e-4)


def test_feedback_injection_network_by_hand(sipm_a, board_ntc):
    # Vout = Vfb (1 + R1/R2 + R1/R3) - Vdac R1/R3 (hut-board-ntc: 1.25 V, 1 Mohm, 43.2 kohm, 250 kohm, each
    # resistor 0.1 %, the regulator reference 0.5 %). Relative errors e1, e2, e3 move it by dV/de1 = Vout - Vfb,
    # dV/de2 = -Vfb R1/R2, dV/de3 = (Vdac - Vfb) R1/R3, and the reference by Vfb (1 + R1/R2 + R1/R3) de (hand
    # algebra); dG/G = dV / 3 V at 25 C. No series resistor, so that no current feeds back.
    board = replace(board_ntc, supply=replace(board_ntc.supply, series_resistor_ohm=0.0))
    law = build_law(sipm_a, board, 3.0, kind="constant_gain", drop_correction="none")
    budget = gain_error_budget(law, board, samples=0)
    i = _at(budget, 25.0)
    v_out = float(law.output_v(25.0))
    v_dac = (1.25 * (1 + 1e6 / 43.2e3 + 4.0) - v_out) / 4.0
    slopes = np.array([v_out - 1.25, -1.25 * 1e6 / 43.2e3, (v_dac - 1.25) * 4.0])
    network = budget.term("supply_network")
    assert network.limit_pct_by_temp[i] == pytest.approx(100 * 1e-3 * np.abs(slopes).sum() / 3.0, rel=1e-4)
    assert network.std_pct_by_temp[i] == pytest.approx(100 * 1e-3 * np.sqrt((slopes ** 2).sum() / 3) / 3.0, rel=1e-4)
    reference = budget.term("regulator_reference")
    assert reference.limit_pct_by_temp[i] == pytest.approx(100 * 5e-3 * 1.25 * (1 + 1e6 / 43.2e3 + 4.0) / 3.0,
                                                           rel=1e-4)


@pytest.mark.parametrize("which", ["budget_a_first", "budget_b_first"])
def test_every_source_has_its_term_and_distribution(which, request):
    # The bundled boards' sources, listed by hand from their profiles: hut-board-ntc is ratiometric (no
    # excitation, its ADC reference error cancels), feedback injection with a regulator reference; hut-board-pt1000
    # has an absolute ADC reference and excitation, a direct supply. Each rectangular source of limit a has
    # u = a / sqrt(3); the breakdown and tempco calibrations are normal, limit 3 sigma.
    law, budget = request.getfixturevalue(which)
    common = ["sensor_tolerance", "self_heating", "sensor_to_die", "sensor_lag", "adc_quantisation", "adc_reference"]
    if which == "budget_a_first":
        keys = common + ["adc_offset", "adc_gain_error", "adc_inl", "divider_resistor", "divider_resistor_drift",
                         "dac_quantisation", "dac_reference", "dac_reference_drift", "dac_offset", "dac_gain_error",
                         "dac_inl", "supply_network", "supply_network_drift", "regulator_reference",
                         "regulator_reference_drift", "breakdown_calibration", "tempco_calibration",
                         "series_resistor_drop", "law_residual"]
        single = ["regulator_reference", "regulator_reference_drift"]
    else:
        keys = common + ["adc_reference_drift", "adc_offset", "adc_gain_error", "adc_inl", "excitation",
                         "excitation_drift", "divider_resistor", "divider_resistor_drift", "dac_quantisation",
                         "dac_reference", "dac_reference_drift", "dac_offset", "dac_gain_error", "dac_inl",
                         "supply_network", "supply_network_drift", "breakdown_calibration", "tempco_calibration",
                         "series_resistor_drop", "law_residual"]
        single = ["adc_reference", "adc_reference_drift", "excitation", "excitation_drift", "supply_network",
                  "supply_network_drift"]
    assert [t.key for t in budget.terms] == keys
    assert budget.term("sensor_to_die").name == "sensor-to-die offset"
    single += ["self_heating", "sensor_to_die", "sensor_lag", "adc_offset", "adc_gain_error", "divider_resistor",
               "divider_resistor_drift", "dac_reference", "dac_reference_drift", "dac_offset", "dac_gain_error"]
    for key in single:
        term = budget.term(key)
        assert term.limit_pct > 0 and term.std_pct == pytest.approx(term.limit_pct / np.sqrt(3), rel=1e-9), key
    for key in ("breakdown_calibration", "tempco_calibration"):
        term = budget.term(key)
        assert term.limit_pct > 0 and term.std_pct == pytest.approx(term.limit_pct / 3, rel=1e-9), key


def test_dac_reference_by_hand(budget_b_flat):
    # Direct supply: Vout = 30 V + 14 Vdac. A 0.05 % DAC reference error moves the output by
    # (Vout - 30 V) * 0.0005; at 25 C Vout = 38.2 + 4 V, so dV = 6.10 mV and dG/G = dV / 4 V = 0.1525 %.
    law, budget = budget_b_flat
    v_out = float(law.output_v(25.0))
    expected = (v_out - 30.0) * 5e-4 / 4.0 * 100.0
    assert expected == pytest.approx(0.1525, abs=2e-4)
    assert budget.term("dac_reference").limit_pct_by_temp[_at(budget, 25.0)] == pytest.approx(expected, rel=1e-3)


def test_breakdown_and_tempco_calibration(budget_b_first, sipm_b):
    law, budget = budget_b_first
    bd = budget.term("breakdown_calibration")
    # A breakdown offset of 0.05 V (1 sigma) is 0.05 / 4 = 1.25 % of gain; the limit is 3 sigma.
    assert bd.std_pct_by_temp[_at(budget, 25.0)] == pytest.approx(1.25, rel=1e-3)
    assert bd.limit_pct == pytest.approx(3 * bd.std_pct, rel=1e-12)
    # A constant voltage offset: a one-point calibration removes it.
    assert bd.calibrated_std_pct < 1e-2 * bd.std_pct
    # Tempco error 0.5 mV/K (1 sigma): after calibration at 25 C, 0.5 mV/K * 50 K / 4 V = 0.625 % at -25 C,
    # scaled by C(T)/C(T0) because a voltage error acts through the cell capacitance (constant-gain law).
    tc = budget.term("tempco_calibration")
    dev = sipm_b.device
    scale = float(cell_capacitance_f(dev, -25.0) / cell_capacitance_f(dev, 25.0))
    assert tc.calibrated_std_pct_by_temp[_at(budget, -25.0)] == pytest.approx(0.625 * scale, rel=1e-3)
    assert tc.calibrated_std_pct_by_temp[_at(budget, 25.0)] < 1e-9
    assert budget.dominant == "breakdown_calibration"
    assert budget.calibrated_dominant == "tempco_calibration"


def test_ratiometric_reference_cancels(budget_a_first, budget_b_first):
    assert budget_a_first[1].term("adc_reference").limit_pct < 1e-9
    assert budget_b_first[1].term("adc_reference").limit_pct > 0.1


def test_excitation_counts_only_without_a_ratiometric_adc(budget_a_first, budget_b_first, board_pt1000):
    # The absolute-reference ADC reads V_exc * fraction / V_ref: to first order a relative excitation error
    # weighs exactly like a relative reference error (same tolerance here, 0.1 %), with the opposite sign.
    fe = board_pt1000.temperature.front_end
    assert not fe.ratiometric and fe.excitation_tolerance_pct == fe.adc_reference_tolerance_pct
    budget_b, budget_a = budget_b_first[1], budget_a_first[1]
    assert budget_b.term("excitation").limit_pct == pytest.approx(budget_b.term("adc_reference").limit_pct, rel=0.02)
    with pytest.raises(KeyError, match="excitation"):
        budget_a.term("excitation")  # ratiometric: the excitation cancels


def test_uncorrected_drop_is_systematic(budget_a_first, sipm_a, board_ntc):
    law, budget = budget_a_first
    term = budget.term("series_resistor_drop")
    assert term.kind == "systematic"
    i = _at(budget, 45.0)
    v_out = law.output_v(45.0)
    drop_v = v_out - sipm_bias_v(board_ntc.supply, sipm_a.device, v_out, 45.0)
    assert float(drop_v) > 0.03  # 10 kohm at a few microampere
    # dG/G = -R I / Vov with I at the operating point the drop itself lowers.
    assert term.signed_pct_by_temp[i] == pytest.approx(-100 * float(drop_v) / 3.0, rel=1e-6)
    assert budget.systematic_pct == pytest.approx(abs(term.signed_pct_by_temp).max(), rel=1e-6)


def test_aggregates(budget_b_first):
    _, budget = budget_b_first
    random_terms = [t for t in budget.terms if t.kind == "random"]
    rss = np.sqrt(sum(t.std_pct_by_temp ** 2 for t in random_terms))
    assert budget.rss_pct == pytest.approx(rss.max(), rel=1e-12)
    worst = sum(t.limit_pct_by_temp for t in random_terms)
    assert budget.worst_case_pct >= worst.max() - 1e-12
    assert budget.worst_case_pct > budget.rss_pct
    assert budget.calibrated_rss_pct < budget.rss_pct


@pytest.mark.parametrize("which", ["budget_a_mc", "budget_b_mc"])
def test_monte_carlo_agrees_with_first_order(which, request):
    # The Monte Carlo runs the full non-linear chain with quantisation; its spread must match the
    # first-order root-sum-square at every temperature, and its mean the systematic terms.
    _, budget = request.getfixturevalue(which)
    mc = budget.monte_carlo
    rss = np.sqrt(sum(t.std_pct_by_temp ** 2 for t in budget.terms if t.kind == "random"))
    ratio = mc.std_pct_by_temp / rss
    assert np.all((ratio > 0.93) & (ratio < 1.07)), ratio
    systematic = sum((t.signed_pct_by_temp for t in budget.terms if t.kind == "systematic"), np.zeros(rss.size))
    assert np.all(np.abs(mc.mean_pct_by_temp - systematic) < 0.1 * rss)
    assert mc.p99_abs_pct <= budget.worst_case_pct


def test_monte_carlo_is_seeded(sipm_c, board_pt1000):
    law = build_law(sipm_c, board_pt1000, 5.0)
    a = gain_error_budget(law, board_pt1000, samples=300, seed=3).monte_carlo
    b = gain_error_budget(law, board_pt1000, samples=300, seed=3).monte_carlo
    c = gain_error_budget(law, board_pt1000, samples=300, seed=4).monte_carlo
    assert a.seed == 3 and a.samples == 300
    assert np.array_equal(a.std_pct_by_temp, b.std_pct_by_temp)
    assert not np.array_equal(a.std_pct_by_temp, c.std_pct_by_temp)


def test_constant_overvoltage_law_residual(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_overvoltage")
    budget = gain_error_budget(law, board_pt1000, samples=0)
    term = budget.term("law_residual")
    # G = C(T) Vov / q: 150 ppm/K * (-50 K) = -0.75 % at -25 C (common practice).
    assert term.signed_pct_by_temp[_at(budget, -25.0)] == pytest.approx(-0.75, abs=2e-3)


def test_bad_arguments(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    with pytest.raises(ModelError, match="calibration_temp_c"):
        gain_error_budget(law, board_ntc, calibration_temp_c=80.0, samples=0)
    with pytest.raises(ModelError, match="samples"):
        gain_error_budget(law, board_ntc, samples=-1)
    with pytest.raises(ModelError, match="current_uncertainty_pct"):
        gain_error_budget(law, board_ntc, samples=0, current_uncertainty_pct=float("nan"))


def test_monte_carlo_summary_statistics(budget_b_mc):
    # Each headline is the largest over the range of its per-temperature statistic, and the spread is a sum
    # of rectangular and normal sources: the 99th percentile of |x| lies between the rectangular 0.99 x sqrt(3)
    # = 1.71 sigma and the normal 2.576 sigma (scipy.stats.norm.ppf(0.995)), here within the Monte Carlo's
    # sampling error of the percentile (2000 samples: about 0.08 sigma at one sigma).
    law, budget = budget_b_mc
    mc = budget.monte_carlo
    assert mc.std_pct_by_temp.shape == mc.mean_pct_by_temp.shape == budget.temp_c.shape
    assert mc.std_pct == np.max(mc.std_pct_by_temp)
    assert mc.mean_abs_pct == np.max(np.abs(mc.mean_pct_by_temp))
    assert 1.71 < mc.p99_abs_pct / mc.std_pct < 2.576 + 0.25
    assert 1.71 < mc.calibrated_p99_abs_pct / mc.calibrated_std_pct < 2.576 + 0.25
    assert mc.p99_abs_pct < mc.max_abs_pct < 5.0 * mc.std_pct
    assert 0.0 < mc.calibrated_std_pct < mc.std_pct


def test_two_sample_monte_carlo_by_hand(sipm_b, board_pt1000):
    # Two samples x1, x2 at each temperature: mean m = (x1 + x2) / 2, sample standard deviation (n - 1)
    # s = |x1 - x2| / sqrt(2), so max |x| = |m| + s / sqrt(2) and min |x| = ||m| - s / sqrt(2)|, and the 99th
    # percentile of |x| (numpy's linear interpolation) is min + 0.99 (max - min) (hand algebra).
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_gain")
    mc = gain_error_budget(law, board_pt1000, samples=2, seed=7).monte_carlo
    m, s = np.abs(mc.mean_pct_by_temp), mc.std_pct_by_temp
    hi, lo = m + s / np.sqrt(2), np.abs(m - s / np.sqrt(2))
    assert mc.samples == 2 and np.all(np.isfinite(s)) and np.all(s > 0)
    assert mc.max_abs_pct == pytest.approx(hi.max(), rel=1e-9)
    assert mc.p99_abs_pct == pytest.approx(np.max(lo + 0.99 * (hi - lo)), rel=1e-9)

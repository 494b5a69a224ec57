"""The instrument model behind the demo: headline figures over every ADC code, whatever rows are printed."""

from __future__ import annotations

import numpy as np
import pytest

from compensator.firmware.tables import build_table
from compensator.instrument import gain_drift
from compensator.law import build_law


@pytest.fixture(scope="module")
def chain(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain")
    return law, build_table(law, board_ntc, 0.05, layout="optimised")


def test_headline_figures_do_not_depend_on_the_rows(chain, sipm_a, board_ntc):
    law, table = chain
    coarse = gain_drift(law, sipm_a, board_ntc, table, temps_c=[25.0])
    fine = gain_drift(law, sipm_a, board_ntc, table, temps_c=np.arange(-25.0, 45.01, 0.25))
    for name in ("fixed_gain_error_ptp_pct", "fixed_gain_error_max_abs_pct", "law_gain_error_ptp_pct",
                 "firmware_gain_error_ptp_pct", "firmware_gain_error_max_abs_pct", "codes_evaluated"):
        assert getattr(coarse, name) == getattr(fine, name), name
    # Over every code and the edges of each code's interval, the figures bound every temperature of the range.
    assert fine.firmware_gain_error_max_abs_pct >= np.max(np.abs(fine.firmware_gain_error_pct))
    assert fine.firmware_gain_error_ptp_pct >= np.ptp(fine.firmware_gain_error_pct)
    assert fine.firmware_gain_error_max_abs_pct >= fine.firmware_gain_error_ptp_pct / 2


def test_fixed_bias_swing_matches_first_order_physics(chain, sipm_a, board_ntc):
    # G = C (V - Vbd(T)) / q with a linear Vbd and constant C: at fixed bias the relative gain change from 25 C is
    # -tempco (T - 25) / Vov exactly (common practice), so the swing over the codes' temperature span is
    # tempco * span / Vov and the largest absolute error sits at the end farthest from 25 C.
    law, table = chain
    drift = gain_drift(law, sipm_a, board_ntc, table, temps_c=[25.0])
    lo, hi = board_ntc.temperature.code_range(-25.0, 45.0)
    ends_c = board_ntc.temperature.temp_at(np.array([lo, hi + 1.0]))
    tempco_v_per_k, overvoltage_v = 21.5e-3, 3.0  # hut-sipm-a.yaml
    assert drift.fixed_gain_error_ptp_pct == pytest.approx(100 * tempco_v_per_k * np.ptp(ends_c) / overvoltage_v,
                                                           rel=1e-9)
    assert drift.fixed_gain_error_max_abs_pct == pytest.approx(
        100 * tempco_v_per_k * np.max(np.abs(ends_c - 25.0)) / overvoltage_v, rel=1e-9)
    assert drift.codes_evaluated == hi - lo + 1


def test_firmware_figure_includes_the_adc_quantisation(chain, sipm_a, board_ntc):
    # The table meets 0.05 % at the centre of every code against the law; within a code the temperature moves by
    # up to one code's width while the DAC code stays, which adds up to tempco * (K per code) / Vov.
    law, table = chain
    drift = gain_drift(law, sipm_a, board_ntc, table, temps_c=[25.0])
    k_per_code = float(np.max(board_ntc.temperature.temp_per_code_k(np.array([-25.0, 45.0]))))
    assert 0.05 < drift.firmware_gain_error_max_abs_pct <= 0.05 + 100 * 21.5e-3 * k_per_code / 3.0 + 1e-6


def test_the_firmware_figure_is_the_integer_path_at_the_edges_of_every_code(chain, sipm_a, board_ntc):
    # One implementation of the figure: the demo's is the firmware module's, taken at both edges of every code.
    from compensator.firmware.integer_path import integer_path_gain_error

    law, table = chain
    drift = gain_drift(law, sipm_a, board_ntc, table, temps_c=[-25.0, 25.0])
    path = integer_path_gain_error(table, law, board_ntc, within_code="edges")
    assert drift.firmware_gain_error_max_abs_pct == path.max_abs_gain_error_pct
    assert drift.firmware_gain_error_ptp_pct == path.peak_to_peak_gain_error_pct
    assert drift.codes_evaluated == path.codes_evaluated == 2393


def test_characterisation_states_both_parts_of_its_error(sipm_a):
    # Independent: the same seeded curves, each curve's breakdown found, then a straight line through them weighted
    # by the statistical errors with scipy's curve_fit (absolute sigma, the covariance scaled by chi2/ndf when the
    # scatter exceeds the errors, common practice); the method's systematic error is common to the curves, so it
    # adds to the breakdown at 25 C in quadrature and leaves the slope alone.
    from scipy.optimize import curve_fit

    from compensator.calibration.iv import find_breakdown
    from compensator.calibration.synthetic import simulate_iv
    from compensator.cli.demo import characterisation_line
    from compensator.instrument import characterise_breakdown

    char = characterise_breakdown(sipm_a, seed=2026)
    temps = np.array([-20.0, -10.0, 0.0, 10.0, 20.0, 30.0, 40.0])
    true_v = 24.5 + 21.5e-3 * (temps - 25.0)  # hut-sipm-a.yaml
    bias_v = np.arange(true_v.min() - 1.5, true_v.max() + 3.0, 0.01)
    found = find_breakdown(bias_v, simulate_iv(np.random.default_rng(2026), bias_v, true_v, geiger_scale_v=0.8,
                                               relative_noise=0.01))
    coef, cov = curve_fit(lambda t, a, b: a + b * (t - 25.0), temps, found.breakdown_v,
                          sigma=found.breakdown_stat_err_v, absolute_sigma=True)
    chi2 = float(np.sum(((found.breakdown_v - coef[0] - coef[1] * (temps - 25.0)) / found.breakdown_stat_err_v) ** 2))
    cov = cov * max(1.0, chi2 / (temps.size - 2))
    stat_v, sys_v = float(np.sqrt(cov[0, 0])), float(np.mean(found.breakdown_sys_err_v))
    assert char.breakdown_v_at_ref == pytest.approx(coef[0], abs=1e-9)
    assert char.breakdown_stat_err_v_at_ref == pytest.approx(stat_v, rel=1e-6)
    assert char.breakdown_sys_err_v_at_ref == pytest.approx(sys_v, rel=1e-6)
    assert char.breakdown_err_v_at_ref == pytest.approx(np.hypot(stat_v, sys_v), rel=1e-6)
    assert char.tempco_err_mv_per_k == pytest.approx(1e3 * np.sqrt(cov[1, 1]), rel=1e-6)
    # honest: the truth lies within three of the stated sigmas
    assert abs(char.breakdown_v_at_ref - 24.5) < 3 * char.breakdown_err_v_at_ref
    assert abs(char.tempco_mv_per_k - 21.5) < 3 * char.tempco_err_mv_per_k
    line = characterisation_line(char)
    assert line.startswith(f"breakdown at 25 C: {coef[0]:.4f} +- {np.hypot(stat_v, sys_v):.4f} V (truth 24.5; "
                           f"{stat_v:.4f} V statistical and {sys_v:.4f} V the method's systematic part")
    assert f"tempco {1e3 * coef[1]:.2f} +- {1e3 * np.sqrt(cov[1, 1]):.2f} mV/K (truth 21.5;" in line
    assert line.endswith("one sigma")


def test_table_keeps_the_smallest_layout_and_copes_without_a_uniform_one(sipm_a, board_ntc, monkeypatch):
    # The demo's table is the smallest layout that meets the bound; when no uniform table meets it, the baseline
    # reads 0 (and says so) instead of failing.
    from dataclasses import replace

    import compensator.firmware.tables as tables
    from compensator.instrument import evaluate_instrument

    report = evaluate_instrument(sipm_a, board_ntc, overvoltage_v=3.0, temps_c=[25.0], budget_samples=200,
                                 photon_rates_hz=())
    smallest = min(build_table(report.compensation_law, board_ntc, 0.05, layout=name).table_bytes
                   for name in ("uniform", "segmented", "optimised", "polynomial"))
    assert report.table.table_bytes == smallest == 14 and report.table.uniform_table_bytes == 78

    real = tables.compare_layouts

    def without_uniform(*args, **kwargs):
        out = real(*args, **kwargs)
        return replace(out, tables={k: v for k, v in out.tables.items() if k != "uniform"}, uniform_bytes=0)

    monkeypatch.setattr(tables, "compare_layouts", without_uniform)
    report = evaluate_instrument(sipm_a, board_ntc, overvoltage_v=3.0, temps_c=[25.0], budget_samples=200,
                                 photon_rates_hz=())
    assert (report.table.table_bytes, report.table.uniform_table_bytes, report.table.uniform_entries) == (14, 0, 0)

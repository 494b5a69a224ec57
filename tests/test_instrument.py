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

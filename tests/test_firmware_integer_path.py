"""The integer-path gain error over every ADC code: independent of any print step, statistics named."""

import numpy as np
import pytest

from compensator.firmware.integer_path import integer_path_gain_error
from compensator.firmware.tables import build_table
from compensator.law import build_law


@pytest.fixture
def path(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain")
    return law, TABLES.setdefault("a", build_table(law, board_ntc, 0.05, "optimised")), None


TABLES = {}


@pytest.fixture
def result_of(path, board_ntc):
    law, table, _ = path
    return integer_path_gain_error(table, law, board_ntc)


def test_every_code_of_the_range(path, result_of):
    law, table, _ = path
    result = result_of
    assert result.adc_code.size == table.code_hi - table.code_lo + 1 == 2393
    assert result.max_abs_gain_error_pct == pytest.approx(np.abs(result.gain_error_pct).max())
    assert result.peak_to_peak_gain_error_pct == pytest.approx(np.ptp(result.gain_error_pct))
    assert result.max_abs_gain_error_pct <= result.peak_to_peak_gain_error_pct + abs(result.gain_error_pct).min()


def test_a_code_by_hand(path, result_of, sipm_a, board_ntc):
    # One code through the chain with scalar steps: temperature at the code centre, the table's DAC code, the
    # supply formula, the drop of the dark current across 10 kohm solved by fixed point, and G = C (V - Vbd) / q
    # against the gain at 3 V over the breakdown at 25 C (so the ratio is the overvoltage ratio, C constant).
    from compensator.physics.sipm import breakdown_v, steady_current_a

    law, table, _ = path
    result = result_of
    k = 1234
    code = int(result.adc_code[k])
    t = float(board_ntc.temperature.temp_at(code + 0.5))
    dac = int(table.lookup([code])[0][0])
    out_v = board_ntc.supply.intercept_v + board_ntc.supply.volts_per_code * dac
    v = out_v
    for _ in range(50):
        v = out_v - 1e4 * float(steady_current_a(sipm_a.device, v, t))
    expected = 100 * ((v - float(breakdown_v(sipm_a.device, t))) / 3.0 - 1)
    assert result.temp_c[k] == pytest.approx(t) and result.dac_code[k] == dac
    assert result.gain_error_pct[k] == pytest.approx(expected, abs=1e-6)


def test_the_figure_does_not_depend_on_a_print_step(result_of, board_ntc):
    # Sampling the same path at printed temperatures can only see less of it than every code does.
    result = result_of
    for step_c in (5.0, 2.5, 0.7):
        temps = np.arange(-25.0, 45.0 + 1e-9, step_c)
        codes = board_ntc.temperature.adc_code(temps)
        inside = np.isin(result.adc_code, codes)
        assert np.abs(result.gain_error_pct[inside]).max() <= result.max_abs_gain_error_pct
    assert result.max_abs_gain_error_pct < 0.1
    assert result.worst_adc_code == int(result.adc_code[np.argmax(np.abs(result.gain_error_pct))])
    assert result.reference_temp_c == 25.0 and result.adc_code.dtype == np.int64
    assert np.all(np.isfinite(result.temp_c)) and np.all(result.sipm_bias_v > 25.0)


def test_a_code_by_hand_under_light(path, sipm_a, board_ntc):
    # As test_a_code_by_hand, with 1e8 photons/s on the SiPM: its current (tens of microamperes through the
    # 10 kohm resistor) drops the bias by tens of millivolts, which this table (no drop correction) leaves.
    from compensator.physics.sipm import breakdown_v, steady_current_a

    law, table, _ = path
    result = integer_path_gain_error(table, law, board_ntc, photon_rate_hz=1e8)
    k = 1234
    code = int(result.adc_code[k])
    t = float(board_ntc.temperature.temp_at(code + 0.5))
    out_v = board_ntc.supply.intercept_v + board_ntc.supply.volts_per_code * int(table.lookup([code])[0][0])
    v = out_v
    for _ in range(50):
        v = out_v - 1e4 * float(steady_current_a(sipm_a.device, v, t, 1e8))
    assert out_v - v > 0.01  # the light matters
    assert result.gain_error_pct[k] == pytest.approx(100 * ((v - float(breakdown_v(sipm_a.device, t))) / 3.0 - 1),
                                                     abs=1e-6)


def test_the_default_is_a_dark_sipm(path, result_of, board_ntc):
    # photon_rate_hz defaults to 0 Hz: the same figures as an explicit 0, not those of any light at all.
    law, table, _ = path
    dark = integer_path_gain_error(table, law, board_ntc, photon_rate_hz=0.0)
    assert np.array_equal(result_of.sipm_bias_v, dark.sipm_bias_v)
    assert not np.array_equal(result_of.sipm_bias_v,
                              integer_path_gain_error(table, law, board_ntc, photon_rate_hz=1.0).sipm_bias_v)


def _by_hand_pct(sipm_a, board_ntc, table, temps_c, codes):
    """The path with plain steps: table DAC code, supply line, dark-current drop across 10 kohm solved by fixed
    point, and G = C (V - Vbd) / q with C constant (hut-sipm-a.yaml), against 3 V over breakdown at 25 C."""
    from compensator.physics.sipm import breakdown_v, steady_current_a

    dac = table.lookup(np.asarray(codes, dtype=np.int64))[0]
    out_v = board_ntc.supply.intercept_v + board_ntc.supply.volts_per_code * dac
    v = out_v
    for _ in range(50):
        v = out_v - 1e4 * steady_current_a(sipm_a.device, v, temps_c)
    return 100 * ((v - breakdown_v(sipm_a.device, temps_c)) / 3.0 - 1)


def test_edges_are_the_extremes_over_every_temperature_of_the_range(path, sipm_a, board_ntc):
    # Independent check: sample the whole range every 0.5 mK, read each temperature as the board's ADC does and
    # push it through the path by hand; the edge figure bounds all of it and is reached to within one sample's
    # worth of gain change (tempco / Vov = 0.72 %/K, so 0.5 mK moves the gain by 4e-4 %).
    law, table, _ = path
    edges = integer_path_gain_error(table, law, board_ntc, within_code="edges")
    centre = integer_path_gain_error(table, law, board_ntc, within_code="centre")
    channel = board_ntc.temperature
    ends_c = channel.temp_at(np.array([table.code_lo, table.code_hi + 1.0]))
    temps = np.arange(ends_c.min() + 1e-7, ends_c.max() - 1e-7, 5e-4)
    codes = channel.adc_code(temps)
    keep = (codes >= table.code_lo) & (codes <= table.code_hi)
    dense = _by_hand_pct(sipm_a, board_ntc, table, temps[keep], codes[keep])
    assert edges.codes_evaluated == centre.codes_evaluated == 2393 and edges.adc_code.size == 2 * 2393
    assert np.abs(dense).max() <= edges.max_abs_gain_error_pct + 1e-9
    assert np.abs(dense).max() >= edges.max_abs_gain_error_pct - 4e-4
    assert np.ptp(dense) <= edges.peak_to_peak_gain_error_pct + 1e-9
    assert np.ptp(dense) >= edges.peak_to_peak_gain_error_pct - 8e-4
    # the centre sees less: the table meets its 0.05 % bound there, the edges add up to half a code's worth
    assert centre.max_abs_gain_error_pct < edges.max_abs_gain_error_pct
    assert edges.within_code == "edges" and centre.within_code == "centre"


def test_an_edge_by_hand(path, sipm_a, board_ntc):
    law, table, _ = path
    edges = integer_path_gain_error(table, law, board_ntc, within_code="edges")
    n, k = edges.codes_evaluated, 777
    code = table.code_lo + k
    lo_c, hi_c = board_ntc.temperature.temp_at(np.array([code, code + 1.0]))
    assert edges.adc_code[k] == edges.adc_code[n + k] == code
    assert edges.temp_c[k] == pytest.approx(lo_c) and edges.temp_c[n + k] == pytest.approx(hi_c)
    expected = _by_hand_pct(sipm_a, board_ntc, table, np.array([lo_c, hi_c]), [code, code])
    assert edges.gain_error_pct[[k, n + k]] == pytest.approx(expected, abs=1e-6)


def test_within_code_must_be_known(path, board_ntc):
    from compensator.errors import ModelError

    law, table, _ = path
    with pytest.raises(ModelError) as caught:
        integer_path_gain_error(table, law, board_ntc, within_code="middle")
    assert caught.value.key == "within_code"


def test_within_code_refusal_names_the_choices(path, board_ntc):
    from compensator.errors import ModelError

    law, table, _ = path
    with pytest.raises(ModelError) as caught:
        integer_path_gain_error(table, law, board_ntc, within_code="middle")
    assert caught.value.reason == "must be one of centre, edges, not 'middle'"


def test_the_reference_temperature_sets_the_reference_gain(path, sipm_a, board_ntc):
    # With a capacitance tempco alpha the cell capacitance is C25 (1 + alpha (T - 25)) (hut-sipm-a.yaml's
    # reference temperature is 25 C), so against the gain at 3 V over breakdown at T_ref the ratio is
    # (1 + alpha (T - 25)) (V - Vbd(T)) / ((1 + alpha (T_ref - 25)) 3 V); by hand at three codes, for T_ref = 25 C
    # (the default) and 0 C, with the drop of the dark current solved by fixed point as above.
    from dataclasses import replace

    from compensator.firmware.integer_path import integer_path_points
    from compensator.physics.sipm import breakdown_v, steady_current_a

    _, table, _ = path
    alpha = 800e-6
    device = replace(sipm_a.device, capacitance_tempco_ppm_per_k=800.0)
    law = replace(path[0], sipm=device)
    k = np.array([0, 1234, 2392])
    codes = table.code_lo + k
    temps = board_ntc.temperature.temp_at(codes + 0.5)
    out_v = board_ntc.supply.intercept_v + board_ntc.supply.volts_per_code * table.lookup(codes)[0]
    v = out_v
    for _ in range(50):
        v = out_v - 1e4 * steady_current_a(device, v, temps)
    cap = 1 + alpha * (temps - 25.0)
    for ref_c in (25.0, 0.0):
        expected = 100 * (cap * (v - breakdown_v(device, temps)) / ((1 + alpha * (ref_c - 25.0)) * 3.0) - 1)
        kw = {} if ref_c == 25.0 else {"reference_temp_c": ref_c}
        points = integer_path_points(table, law, board_ntc, temps, codes, **kw)
        assert points.gain_error_pct == pytest.approx(expected, abs=1e-6)
        whole = integer_path_gain_error(table, law, board_ntc, **kw)
        assert whole.gain_error_pct[k] == pytest.approx(expected, abs=1e-6) and whole.reference_temp_c == ref_c
    # The points are dark by default, as the whole-range figure is.
    dark = integer_path_points(table, law, board_ntc, temps, codes)
    assert np.array_equal(dark.sipm_bias_v, integer_path_points(table, law, board_ntc, temps, codes,
                                                                photon_rate_hz=0.0).sipm_bias_v)
    assert not np.array_equal(dark.sipm_bias_v, integer_path_points(table, law, board_ntc, temps, codes,
                                                                    photon_rate_hz=1.0).sipm_bias_v)

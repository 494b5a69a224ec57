"""The firmware in the loop: vectorised references bit for bit with the scalar ones, and the compiled C with both."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from cbuild import needs_cc

from compensator.firmware.pid import FixedPid, PidSettings, quantise_pid
from compensator.firmware.tables import STATUS_SENSOR_FAULT, build_table
from compensator.law import build_law
from compensator.sim import PythonFirmware, VectorPid, nominal_units, setup_from_profiles, simulate_units
from compensator.sim.environment import ThermalPath, Weather

PID_CASES = [
    # (settings, input per count, output per count)
    (PidSettings(-0.07, -0.0016, 0.0, 1.0, -2.0, 2.6), -0.03, 0.001),
    (PidSettings(2.0, 0.5, 0.3, 0.1, 0.0, 4095.0, rate_limit_per_s=2000.0), 1.0, 1.0),
    (PidSettings(0.8, 0.2, 0.0, 0.01, -100.0, 100.0, anti_windup="clamping"), 0.5, 0.1),
    (PidSettings(0.5, 1.5, 0.05, 0.05, -10.0, 10.0, anti_windup="none", setpoint_weight=0.5), 0.01, 0.01),
]


@pytest.mark.parametrize("case", range(len(PID_CASES)))
def test_vector_pid_is_bit_exact_with_the_scalar_reference(case):
    settings, ipc, opc = PID_CASES[case]
    coeffs = quantise_pid(settings, input_per_count=ipc, output_per_count=opc)
    rng = np.random.default_rng(case)
    count, steps = 6, 400
    setpoint = rng.integers(-3000, 3000, size=count)
    walk = np.cumsum(rng.integers(-40, 41, size=(steps, count)), axis=0) + rng.integers(-2000, 2000, size=count)
    walk[steps // 2] += 20000  # a large disturbance: saturation and anti-windup
    bank = VectorPid(coeffs, count)
    refs = [FixedPid(coeffs) for _ in range(count)]
    if case % 2:
        bank.reset(np.arange(count) * 7)
        for i, r in enumerate(refs):
            r.reset(i * 7)
    for k in range(steps):
        out = bank.step(setpoint, walk[k])
        expect = [r.step(int(setpoint[i]), int(walk[k, i])) for i, r in enumerate(refs)]
        assert out.tolist() == expect, f"step {k}"
    assert bank.output_count.tolist() == [r.output_count for r in refs]


@pytest.fixture(scope="module")
def table_measured(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured")
    return build_table(law, board_ntc, 0.05)


def test_python_firmware_equals_the_table_reference_with_correction_and_trim(table_measured):
    t = table_measured
    fw = PythonFirmware(t)
    rng = np.random.default_rng(4)
    codes = rng.integers(0, 1 << t.adc_bits, size=5000)
    codes[:4] = [0, (1 << t.adc_bits) - 1, t.code_lo - 1, t.code_hi + 1]
    current = rng.integers(0, 4096, size=codes.size)
    dac, status = fw.lookup(codes)
    ref_dac, ref_status = t.lookup(codes)
    assert np.array_equal(dac, ref_dac) and np.array_equal(status, ref_status)
    dac, _ = fw.lookup(codes, current)
    assert np.array_equal(dac, t.lookup_with_current(codes, current)[0])
    trimmed, _ = fw.lookup(codes, current, np.full(codes.size, -25))
    expect = np.where(ref_status == STATUS_SENSOR_FAULT, t.safe_dac_code,
                      np.clip(t.lookup_with_current(codes, current)[0] - 25, t.dac_min, t.dac_max))
    assert np.array_equal(trimmed, expect)


@pytest.fixture(scope="module")
def cooled_setup(sipm_a, board_ntc, cooler):
    weather = Weather(mean_temp_c=12.0, diurnal_amplitude_k=9.0, weather_sigma_k=2.0, seed=4)
    path = ThermalPath(enclosure_time_constant_s=1200.0, die_time_constant_s=300.0, sensor_lag_s=10.0,
                       internal_heat_k=3.0)
    return setup_from_profiles(sipm_a, board_ntc, thermal_profile=cooler, overvoltage_v=3.0,
                               drop_correction="measured", weather=weather, path=path, tick_s=1.0, duration_s=1500.0,
                               strategies=("compensated", "compensated_cooled", "gain_trimmed"), sensor_noise_k=0.05,
                               trace_points=10 ** 6, cooler_setpoint_temp_c=18.0, trim=replace(
                                   setup_from_profiles.__kwdefaults__["trim"], window_s=300.0))


@needs_cc
def test_compiled_firmware_runs_the_loop_bit_for_bit_like_the_references(cooled_setup, tmp_path):
    from compensator.sim.firmware import CompiledFirmware, compile_firmware

    fw_c = compile_firmware(cooled_setup, tmp_path / "fw")
    assert isinstance(fw_c, CompiledFirmware)
    assert sorted(p.name for p in (tmp_path / "fw").glob("*.c")) == ["bias_dac_from_adc.c", "cooler_pid.c",
                                                                     "sim_harness.c"]
    py = PythonFirmware(cooled_setup.table, cooled_setup.pid)
    codes = np.arange(1 << cooled_setup.table.adc_bits)
    assert np.array_equal(fw_c.lookup(codes)[0], py.lookup(codes)[0])
    assert np.array_equal(fw_c.lookup(codes)[1], py.lookup(codes)[1])
    cur = (codes * 7) % 4096
    assert np.array_equal(fw_c.lookup(codes, cur)[0], py.lookup(codes, cur)[0])
    # The closed loop, one unit and three units, through C and through Python: identical trajectories.
    for units in (nominal_units(1), nominal_units(3)):
        a = simulate_units(cooled_setup, units, seed=9, traces=True, firmware=fw_c)
        b = simulate_units(cooled_setup, units, seed=9, traces=True)
        assert a.firmware == "compiled C" and b.firmware == "python"
        for name in cooled_setup.strategies:
            for key in ("gain_dev_pct", "bias_v", "die_temp_c"):
                assert np.array_equal(a.traces.strategies[name][key], b.traces.strategies[name][key]), (name, key)
            assert np.array_equal(a.metrics[name].cooler_energy_j, b.metrics[name].cooler_energy_j)
    # A second compile into the same folder reuses the identical files; a changed file is refused.
    compile_firmware(cooled_setup, tmp_path / "fw")
    (tmp_path / "fw" / "cooler_pid.c").write_text("/* edited */\n")
    from compensator.errors import InputError

    with pytest.raises(InputError, match="other content"):
        compile_firmware(cooled_setup, tmp_path / "fw")


def test_one_unit_fast_path_equals_the_vector_path(cooled_setup):
    from compensator.sim import SimOptions

    # The noise streams differ in shape, so compare noiseless runs: same physics, plain floats against arrays.
    quiet = SimOptions(noise=False)
    one = simulate_units(cooled_setup, nominal_units(1), seed=2, strategies=("compensated_cooled",), options=quiet)
    two = simulate_units(cooled_setup, nominal_units(2), seed=2, strategies=("compensated_cooled",), options=quiet)
    m1, m2 = one.metrics["compensated_cooled"], two.metrics["compensated_cooled"]
    assert m1.gain_dev_max_abs_pct[0] == pytest.approx(m2.gain_dev_max_abs_pct[0], abs=1e-9)
    assert m1.cooler_energy_j[0] == pytest.approx(m2.cooler_energy_j[1], rel=1e-9)
    assert m1.hot_side_max_temp_c[0] == pytest.approx(m2.hot_side_max_temp_c[0], abs=1e-9)

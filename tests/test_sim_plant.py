"""The one-unit, one-tick plant a simulated board drives (compensator.sim.plant.FieldPlant)."""

from __future__ import annotations

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware.tables import STATUS_SENSOR_FAULT
from compensator.loops.plants import cooler_steady_state
from compensator.physics.sipm import gain
from compensator.physics.supply import sipm_bias_v
from compensator.sim import FieldPlant


@pytest.fixture(scope="module")
def plant_a(sipm_a, board_ntc):
    return FieldPlant.from_profiles(sipm_a, board_ntc, ambient_temp_c=20.0, overvoltage_v=3.0)


def test_table_driven_plant_holds_the_gain_the_physics_package_computes(plant_a, sipm_a, board_ntc):
    plant = plant_a
    reading = plant.reading
    for _ in range(30):
        dac, status = plant.table.lookup(reading.sensor_adc_code)
        assert int(status) == 0
        reading = plant.step(int(dac))
    # Independent: the physics package's own supply and operating-point solver at the same code and temperature.
    supply_v = float(board_ntc.supply.output_v(reading.dac_code))
    bias_v = float(sipm_bias_v(board_ntc.supply, sipm_a.device, supply_v, reading.die_temp_c))
    assert reading.supply_v == pytest.approx(supply_v, abs=1e-12)
    # Two fixed-point steps leave about (R dI/dV)^2 R I = (4e-3)^2 x 5 mV, under 1e-7 V.
    assert reading.bias_v == pytest.approx(bias_v, abs=2e-7)
    g = float(gain(sipm_a.device, bias_v, reading.die_temp_c))
    assert reading.gain == pytest.approx(g, rel=1e-7)
    g0 = sipm_a.device.cell_capacitance_f * 3.0 / 1.602176634e-19
    assert reading.gain_deviation_pct == pytest.approx(100 * (g / g0 - 1), abs=1e-5)
    # The table's 0.05 % bound plus half a DAC and ADC step leave well under 0.2 %.
    assert abs(reading.gain_deviation_pct) < 0.2
    assert reading.time_s == pytest.approx(30 * plant.tick_s)


def test_dac_code_outside_the_dac_is_refused(plant_a):
    with pytest.raises(ModelError, match="dac_code"):
        plant_a.step(1 << 16)


def test_sensor_faults_read_at_the_rails_and_the_table_goes_safe(sipm_a, board_ntc):
    plant = FieldPlant.from_profiles(sipm_a, board_ntc, ambient_temp_c=20.0, overvoltage_v=3.0)
    full = board_ntc.temperature.front_end.full_scale_code
    plant.inject_sensor_fault("open")  # NTC on the low side: open -> the divider sits at the excitation
    r = plant.step(30000)
    assert r.sensor_adc_code == full
    dac, status = plant.table.lookup(r.sensor_adc_code)
    assert int(status) == STATUS_SENSOR_FAULT and int(dac) == board_ntc.safe_dac_code
    plant.inject_sensor_fault("short")
    assert plant.step(30000).sensor_adc_code == 0
    plant.inject_sensor_fault(None)
    assert 0 < plant.step(30000).sensor_adc_code < full
    with pytest.raises(ModelError):
        plant.inject_sensor_fault("melted")


def test_cooled_plant_settles_on_the_heat_balance_steady_state(sipm_a, board_ntc, cooler):
    plant = FieldPlant.from_profiles(sipm_a, board_ntc, cooler, overvoltage_v=3.0, ambient_temp_c=25.0, tick_s=1.0)
    for _ in range(3000):
        r = plant.step(40000, cooler_current_a=1.2)
    # Independent: the exact steady state of the linear heat balance at a fixed current (loops.plants).
    tc, th = cooler_steady_state(cooler.cooler, 1.2, 25.0)
    assert r.die_temp_c == pytest.approx(float(tc), abs=2e-3)
    assert r.hot_side_temp_c == pytest.approx(float(th), abs=2e-3)
    # Electrical power at the steady state: I (S (Th - Tc) + I R).
    p = cooler.cooler
    assert r.cooler_power_w == pytest.approx(1.2 * (p.seebeck_v_per_k * (th - tc) + 1.2 * p.resistance_ohm), rel=1e-4)
    assert r.cooler_current_a == 1.2


def test_dark_peak_measurement_counts_the_captured_pulses(sipm_a, board_ntc):
    plant = FieldPlant.from_profiles(sipm_a, board_ntc, ambient_temp_c=20.0, overvoltage_v=3.0, tick_s=1.0)
    r = plant.reading
    for _ in range(60):  # one 60 s window at the default capture limit of 1 kHz
        dac, _ = plant.table.lookup(r.sensor_adc_code)
        r = plant.step(int(dac))
    assert r.dark_peak_gain is not None
    # The device's dark rate (about 1 MHz) is far above the capture limit: about 1000 pulses per second.
    assert abs(r.dark_peak_pulses - 60000) < 5 * np.sqrt(60000)
    assert r.dark_peak_gain_err == pytest.approx(0.10 * r.gain / np.sqrt(r.dark_peak_pulses), rel=2e-3)
    assert abs(r.dark_peak_gain / r.gain - 1) < 5 * 0.10 / np.sqrt(r.dark_peak_pulses)

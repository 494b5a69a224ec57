"""The simulation engine: strategies, metrics, the measured drop correction, the gain trim, the Monte Carlo."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import compensator.sim.engine as engine
from compensator.profiles import load_scenario
from compensator.sim import (
    SimOptions,
    ThermalPath,
    TrimSettings,
    Weather,
    draw_units,
    nominal_units,
    prepare,
    setup_from_profiles,
    simulate_units,
)
from compensator.sim.chain import (
    bias_at_sipm_v,
    current_adc_code,
    device_factors,
    network_output_v,
    sensor_adc_code,
    supply_units,
    unit_breakdown_v,
)
from compensator.sim.montecarlo import monte_carlo

WEATHER = Weather(mean_temp_c=8.0, diurnal_amplitude_k=10.0, weather_sigma_k=3.0, sun_peak_k=6.0,
                  day_photon_rate_hz=5e5, night_photon_rate_hz=1e5, seed=3)
PATH = ThermalPath(enclosure_time_constant_s=1800.0, internal_heat_k=3.0, die_time_constant_s=400.0,
                   sensor_lag_s=15.0)


@pytest.fixture(scope="module")
def setup_a(sipm_a, board_ntc):
    return setup_from_profiles(sipm_a, board_ntc, overvoltage_v=3.0, weather=WEATHER, path=PATH, tick_s=30.0,
                               duration_s=2 * 86400.0, strategies=("uncompensated", "compensated", "gain_trimmed"),
                               sensor_noise_k=0.02, trim=TrimSettings(window_s=1800.0))


def test_results_do_not_depend_on_the_block_length(setup_a, monkeypatch):
    units = draw_units(setup_a.board, setup_a.sipm, np.arange(3), seed=1)
    a = simulate_units(setup_a, units, seed=4, strategies=("uncompensated", "compensated"))
    monkeypatch.setattr(engine, "BLOCK_ELEMENTS", 3 * 37)
    b = simulate_units(setup_a, units, seed=4, strategies=("uncompensated", "compensated"))
    for name in a.metrics:
        assert np.array_equal(a.metrics[name].gain_dev_max_abs_pct, b.metrics[name].gain_dev_max_abs_pct)
        assert np.allclose(a.metrics[name].gain_dev_rms_pct, b.metrics[name].gain_dev_rms_pct, rtol=1e-12)


def test_uncompensated_drift_follows_the_breakdown_tempco(setup_a, sipm_a):
    """At fixed bias dG/G = -(dVbd/dT)/Vov per kelvin (common practice): 21.5 mV/K over 3 V = 0.717 %/K."""
    res = simulate_units(setup_a, nominal_units(1), seed=1, traces=True, options=SimOptions(noise=False, drop=False),
                         strategies=("uncompensated",))
    tr = res.traces
    dev = tr.strategies["uncompensated"]["gain_dev_pct"]
    slope = np.polyfit(tr.die_temp_c, dev, 1)[0]
    assert slope == pytest.approx(-100 * 0.0215 / 3.0, rel=0.01)


def test_measured_drop_correction_equals_a_tick_by_tick_loop(sipm_a, board_ntc):
    setup = setup_from_profiles(sipm_a, board_ntc, overvoltage_v=3.0, drop_correction="measured", weather=WEATHER,
                                path=PATH, tick_s=60.0, duration_s=600 * 60.0, strategies=("compensated",),
                                trace_points=10 ** 6)
    units = draw_units(setup.board, setup.sipm, np.arange(2), seed=3)
    res = simulate_units(setup, units, seed=0, traces=True, options=SimOptions(noise=False))
    # Reference: the firmware reads the current of the previous tick, one tick after the other.
    from compensator.sim.environment import AmbientStream

    amb = AmbientStream(setup.weather, setup.path, setup.tick_s).next_block(setup.ticks)
    sup = supply_units(setup.law.supply, units)
    sense = board_ntc.current_sense
    read = np.zeros(2, dtype=np.int64)
    gains = []
    for k in range(setup.ticks):
        code = sensor_adc_code(board_ntc.temperature, np.array([[amb.sensor_temp_c[k]]]), units)
        dac, _ = setup.table.lookup_with_current(code[:, 0], read)
        f = device_factors(setup.sipm, np.array([[amb.die_temp_c[k]]]))
        vbd = unit_breakdown_v(f, units)
        bias, current = bias_at_sipm_v(setup.sipm, f, vbd, network_output_v(sup, dac[:, None]),
                                       sup.series_resistor_ohm, amb.photon_rate_hz[k])
        read = current_adc_code(sense, current, units)[:, 0]
        gains.append(100 * (f.gain_per_v[0, 0] * (bias - vbd)[:, 0] / setup.nominal_gain - 1))
    ref = np.array(gains)
    # The same codes tick by tick; the gain deviation only differs in the order of its last float operations.
    np.testing.assert_allclose(res.traces.strategies["compensated"]["gain_dev_pct"], ref[:, 0], rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.metrics["compensated"].gain_dev_max_abs_pct, np.max(np.abs(ref), axis=0),
                               rtol=0, atol=1e-12)


def test_gain_trim_removes_a_calibration_error_and_ageing(sipm_a, board_ntc):
    setup = setup_from_profiles(sipm_a, board_ntc, overvoltage_v=3.0, weather=WEATHER, path=PATH, tick_s=10.0,
                                duration_s=4 * 86400.0, strategies=("compensated", "gain_trimmed"),
                                sensor_noise_k=0.02, breakdown_error_v=0.06, ageing_mv_per_day=5.0,
                                trim=TrimSettings(window_s=600.0), settle_s=6 * 3600.0)
    res = simulate_units(setup, nominal_units(1), seed=2)
    comp, trim = res.metrics["compensated"], res.metrics["gain_trimmed"]
    # A breakdown 60 mV too low in the table, then 5 mV/day more: -2 % growing to about -2.5 % of gain at 3 V.
    assert comp.gain_dev_mean_pct[0] == pytest.approx(-100 * (0.06 + 0.005 * 2.1) / 3.0, abs=0.12)
    assert abs(trim.gain_dev_mean_pct[0]) < 0.05
    assert trim.gain_dev_max_abs_pct[0] < 0.25
    assert trim.trim_v[0] == pytest.approx(0.06 + 0.005 * 4, abs=0.01)  # the trim follows the breakdown
    assert 0 < trim.trim_converged_s[0] < 6 * 3600.0
    assert trim.trim_residual_rms_pct[0] < 0.1


def test_monte_carlo_does_not_depend_on_chunks_or_processes(setup_a):
    short = replace(setup_a, ticks=400)
    a = monte_carlo(short, units=6, seed=5, chunk_units=3, workers=1)
    b = monte_carlo(short, units=6, seed=5, chunk_units=3, workers=2)
    assert a.executor == "inline" and b.executor == "processes (2)"
    for ya, yb in zip(a.strategies, b.strategies):
        assert np.array_equal(ya.gain_dev_max_abs_pct, yb.gain_dev_max_abs_pct)
    assert [w.unit for w in a.worst] == [w.unit for w in b.worst]
    # A unit's draws depend only on the seed and its index.
    c = monte_carlo(short, units=6, seed=5, chunk_units=4, workers=1)
    assert [w.draws for w in sorted(c.worst, key=lambda w: w.unit)] == \
        [w.draws for w in sorted(a.worst, key=lambda w: w.unit)]
    assert a.fraction_within == float(np.mean(a.strategies[1].gain_dev_max_abs_pct <= short.band_pct))


def test_monte_carlo_on_a_dask_local_cluster_equals_local_processes(setup_a):
    distributed = pytest.importorskip("dask.distributed", reason="dask.distributed (the cluster extra) is missing")
    short = replace(setup_a, ticks=300)
    local = monte_carlo(short, units=4, seed=8, chunk_units=2, workers=1)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as lc, \
            distributed.Client(lc) as client:
        remote = monte_carlo(short, units=4, seed=8, chunk_units=2, client=client)
    assert remote.executor.startswith("dask ")
    for ya, yb in zip(local.strategies, remote.strategies):
        assert np.array_equal(ya.gain_dev_max_abs_pct, yb.gain_dev_max_abs_pct)


def test_monte_carlo_with_an_unreachable_scheduler_is_a_clean_error(setup_a, monkeypatch):
    pytest.importorskip("dask.distributed", reason="dask.distributed (the cluster extra) is missing")
    import compensator.sim.montecarlo as mc
    from compensator.sim.montecarlo import ClusterError

    monkeypatch.setattr(mc, "CONNECT_TIMEOUT_S", 1.0)
    with pytest.raises(ClusterError, match="cannot reach"):
        monte_carlo(replace(setup_a, ticks=10), units=2, seed=1, scheduler="tcp://127.0.0.1:9")


def test_bundled_week_meets_the_stated_figures(profiles_dir):
    """The demo scenario, calibrated unit, with quantisation and noise: compensated within +-0.25 % over the week,
    uncompensated at least 20 times further out (largest absolute deviation and peak-to-peak)."""
    setup = prepare(load_scenario(profiles_dir / "hut-week-scenario.yaml"),
                    strategies=("uncompensated", "compensated"))
    assert setup.ticks == 7 * 86400 // 2  # one tick every 2 s
    res = simulate_units(setup, nominal_units(1), seed=setup.seed)
    comp, unc = res.metrics["compensated"], res.metrics["uncompensated"]
    assert comp.gain_dev_max_abs_pct[0] <= 0.25
    assert unc.gain_dev_max_abs_pct[0] >= 20 * comp.gain_dev_max_abs_pct[0]
    assert unc.gain_dev_pk_pk_pct[0] >= 20 * comp.gain_dev_pk_pk_pct[0]
    assert comp.sensor_fault_ticks[0] == 0

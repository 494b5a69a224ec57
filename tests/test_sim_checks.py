"""The field simulation against outside references: python-control, the heat balance, statistics, a recording."""

from __future__ import annotations

from dataclasses import replace

import control
import numpy as np
import pytest

from compensator.physics.thermal import cooler_steady_state
from compensator.sim import SimOptions, ThermalPath, Weather, nominal_units, setup_from_profiles, simulate_units
from compensator.sim.cooler import cooler_tick
from compensator.sim.engine import measure_dark_peak
from compensator.sim.environment import AmbientStream, sun_load_k


def lags_system(path: ThermalPath, outputs):
    """The thermal path built here from its time constants alone (three first-order lags in series), as states
    (enclosure, die, sensor) with the given output matrix: independent of the module's own matrices."""
    te, td, ts = path.enclosure_time_constant_s, path.die_time_constant_s, path.sensor_lag_s
    a = np.array([[-1 / te, 0.0, 0.0], [1 / td, -1 / td, 0.0], [0.0, 1 / ts, -1 / ts]])
    b = np.array([[1 / te], [0.0], [0.0]])
    c = np.atleast_2d(outputs)
    return control.ss(a, b, c, np.zeros((c.shape[0], 1)))


def test_linear_loop_equals_python_control_forced_response(sipm_a, board_ntc):
    """Quantisation, noise, limits and the drop off: the loop is linear and python-control is the reference.

    Outdoor air -> enclosure -> die -> sensor (three first-order lags) -> continuous ADC position -> the
    constant-overvoltage law -> supply -> bias; the overvoltage is then Vov + a (T_sensor - T_die), a linear
    output of the thermal states, which python-control's forced_response computes on the continuous system
    (input linear between samples, as the simulation assumes).
    """
    weather = Weather(mean_temp_c=5.0, diurnal_amplitude_k=12.0, sun_peak_k=6.0, step_k=-8.0, step_at_s=90000.0)
    path = ThermalPath(enclosure_time_constant_s=3000.0, internal_heat_k=2.0, die_time_constant_s=900.0,
                       sensor_lag_s=240.0)
    setup = setup_from_profiles(sipm_a, board_ntc, overvoltage_v=3.0, law_kind="constant_overvoltage",
                                drop_correction="none", weather=weather, path=path, tick_s=60.0,
                                duration_s=3 * 86400.0, strategies=("compensated",), trace_points=10 ** 6)
    run = simulate_units(setup, nominal_units(1), seed=1, traces=True,
                         options=SimOptions(quantise=False, noise=False, limits=False, drop=False))
    tr = run.traces
    assert tr.stride == 1 and tr.time_s.size == setup.ticks
    comp = tr.strategies["compensated"]
    ov = comp["bias_v"] - sipm_a.device.breakdown.breakdown_v(comp["die_temp_c"])
    a_v_per_k = 1e-3 * sipm_a.device.breakdown.tempco_mv_per_k
    drive = tr.outdoor_temp_c + path.internal_heat_k + sun_load_k(weather, tr.time_s)
    sys = lags_system(path, [[0.0, -a_v_per_k, a_v_per_k]])
    ref = control.forced_response(sys, tr.time_s, drive, X0=np.full(3, drive[0])).outputs
    # The law and the supply are evaluated in floating point around 27 V: agreement to about 1e-12 V.
    np.testing.assert_allclose(ov - 3.0, ref, rtol=0, atol=1e-9)
    assert np.ptp(ref) > 0.01  # the check has something to compare: over ten millivolts of sensor lag


def test_thermal_path_states_equal_forced_response_and_do_not_depend_on_blocks():
    weather = Weather(mean_temp_c=0.0, diurnal_amplitude_k=10.0, weather_sigma_k=3.0, weather_time_constant_s=7200.0,
                      seed=5)
    path = ThermalPath(enclosure_time_constant_s=1800.0, internal_heat_k=1.0, die_time_constant_s=300.0,
                       sensor_lag_s=30.0)
    whole = AmbientStream(weather, path, 10.0).next_block(8000)
    parts = AmbientStream(weather, path, 10.0)
    pieces = [parts.next_block(n) for n in (1, 999, 4000, 3000)]
    for name in ("outdoor_temp_c", "enclosure_temp_c", "die_temp_c", "sensor_temp_c"):
        assert np.array_equal(np.concatenate([getattr(p, name) for p in pieces]), getattr(whole, name))
    drive = whole.outdoor_temp_c + path.internal_heat_k
    ref = control.forced_response(lags_system(path, np.eye(3)), whole.time_s, drive, X0=np.full(3, drive[0])).outputs
    for i, name in enumerate(("enclosure_temp_c", "die_temp_c", "sensor_temp_c")):
        np.testing.assert_allclose(getattr(whole, name), ref[i], rtol=0, atol=1e-9)


def test_a_sensor_without_lag_reads_the_die_and_bad_paths_are_refused():
    from compensator.errors import ModelError
    from compensator.sim.environment import discretise_thermal_path

    weather = Weather(mean_temp_c=0.0, diurnal_amplitude_k=10.0)
    fast = ThermalPath(enclosure_time_constant_s=900.0, die_time_constant_s=100.0, sensor_lag_s=0.5)
    none = replace(fast, sensor_lag_s=0.0)
    lagged = AmbientStream(weather, fast, 60.0).next_block(500)
    direct = AmbientStream(weather, none, 60.0).next_block(500)
    assert np.array_equal(direct.sensor_temp_c, direct.die_temp_c)
    # Without the sensor state the path is two lags: python-control on the two lags built here.
    te, td = none.enclosure_time_constant_s, none.die_time_constant_s
    two = control.ss([[-1 / te, 0.0], [1 / td, -1 / td]], [[1 / te], [0.0]], np.eye(2), np.zeros((2, 1)))
    ref = control.forced_response(two, direct.time_s, direct.outdoor_temp_c,
                                  X0=np.full(2, direct.outdoor_temp_c[0])).outputs
    np.testing.assert_allclose(direct.enclosure_temp_c, ref[0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(direct.die_temp_c, ref[1], rtol=0, atol=1e-9)
    # A 0.5 s lag at a 60 s tick: the sensor trails the die by about 0.5 s times its slope (under 1 mK here).
    assert 0 < np.max(np.abs(lagged.sensor_temp_c - lagged.die_temp_c)) < 1e-3
    for bad in (dict(enclosure_time_constant_s=0.0), dict(die_time_constant_s=-1.0), dict(sensor_lag_s=-0.1)):
        with pytest.raises(ModelError) as err:
            replace(fast, **bad)
        assert err.value.key == next(iter(bad)) and err.value.reason
    for tick in (0.0, -1.0):
        with pytest.raises(ModelError, match="tick_s must be positive"):
            discretise_thermal_path(fast, tick)


@pytest.mark.parametrize("current_a, tick_s", [(-0.8, 1.0), (0.0, 1.0), (1.1, 20.0), (2.9, 7.0)])
def test_cooler_conserves_energy_at_every_tick(cooler, current_a, tick_s):
    p = cooler.cooler
    rng = np.random.default_rng(3)
    tc, th = rng.uniform(-10, 30, 50), rng.uniform(10, 50, 50)
    ta = rng.uniform(-20, 40, 50)
    for _ in range(20):
        step = cooler_tick(p, tc, th, current_a, ta, tick_s)
        # Heat rejected on the hot side = heat pumped off the cold plate + electrical power (I times the
        # terminal voltage S (Th - Tc) + I R, computed separately in the step).
        np.testing.assert_allclose(step.heat_rejected_w, step.heat_pumped_w + step.electrical_power_w,
                                   rtol=0, atol=1e-11)
        stored_j = (p.cold_heat_capacity_j_per_k * (step.cold_temp_c - tc)
                    + p.hot_heat_capacity_j_per_k * (step.hot_temp_c - th))
        inflow_j = tick_s * (step.load_w + step.leak_in_w - step.sink_out_w + step.electrical_power_w)
        np.testing.assert_allclose(stored_j, inflow_j, rtol=0, atol=1e-9)
        tc, th = step.cold_temp_c, step.hot_temp_c


def test_cooler_substeps_are_short_against_the_fastest_time_constant(cooler):
    from compensator.sim.cooler import cooler_substeps

    p = cooler.cooler
    # Demo cooler: cold plate 20 J/K over (0.05 + 0.5 + 0.05 x 3 A) W/K = 28.6 s; hot side 200 J/K over
    # (0.5 + 1/0.8) W/K = 114 s; sub-steps at most 5 % of 28.6 s = 1.43 s.
    assert [cooler_substeps(p, t) for t in (1.0, 1.43, 10.0, 100.0)] == [1, 2, 7, 70]


@pytest.mark.parametrize("tick_s", [1.0, 10.0])
def test_cooler_transient_matches_an_independent_ode_solution(cooler, tick_s):
    """scipy's solve_ivp (RK45, tight tolerances) on the heat balance of physics.thermal is the reference."""
    from scipy.integrate import solve_ivp

    from compensator.physics.thermal import cooler_derivatives

    p = replace(cooler.cooler, sensor_time_constant_s=0.0)
    ambient_c, current_a = 30.0, 1.8
    tc0, th0 = (float(v) for v in cooler_steady_state(p, 0.0, ambient_c))
    times = np.arange(0.0, 600.0 + tick_s / 2, tick_s)

    def rhs(_, y):
        dtc, dth, _ = cooler_derivatives(p, y[0], y[1], y[0], current_a, ambient_c)
        return [float(dtc), float(dth)]

    ref = solve_ivp(rhs, (0.0, times[-1]), [tc0, th0], t_eval=times, rtol=1e-10, atol=1e-10).y
    tc, th, got = tc0, th0, [(tc0, th0)]
    for _ in times[1:]:
        step = cooler_tick(p, tc, th, current_a, ambient_c, tick_s)
        tc, th = step.cold_temp_c, step.hot_temp_c
        got.append((tc, th))
    got = np.array(got).T
    assert np.ptp(ref[0]) > 10  # a real transient: the plate cools by more than 10 K
    # Heun is second order: with sub-steps of at most 5 % of the fastest time constant the error over this
    # 32 K swing stays under 1e-2 K (measured 5.5 mK at the 10 s tick, 2.7 mK at 1 s).
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-2)


def test_cooler_steady_state_matches_the_heat_balance_solution(cooler):
    p = cooler.cooler
    tc, th = 25.0, 25.0
    for _ in range(6000):
        step = cooler_tick(p, tc, th, 1.5, 30.0, 1.0)
        tc, th = step.cold_temp_c, step.hot_temp_c
    ref_tc, ref_th = cooler_steady_state(p, 1.5, 30.0)  # exact solution of the linear balance at fixed current
    assert tc == pytest.approx(float(ref_tc), abs=1e-6)
    assert th == pytest.approx(float(ref_th), abs=1e-6)


def test_dark_peak_scatter_is_the_standard_error_of_the_mean():
    """Statistics (no outside source needed): the mean of N amplitudes of width s scatters by s / sqrt(N)."""
    rng = np.random.default_rng(11)
    gain, spread, pulses, windows = 2.0e6, 0.12, 400, 600
    explicit, err = measure_dark_peak(rng, np.full(windows, gain), np.full(windows, pulses), spread, explicit=True)
    sem = spread * gain / np.sqrt(pulses)
    assert np.allclose(err, sem)
    # The sample standard deviation of 600 windows is itself uncertain by 1/sqrt(2 x 599) = 2.9 %: allow 4 sigma.
    assert np.std(explicit, ddof=1) == pytest.approx(sem, rel=4 * 0.029)
    assert abs(np.mean(explicit) - gain) < 4 * sem / np.sqrt(windows)
    direct, _ = measure_dark_peak(rng, np.full(windows, gain), np.full(windows, pulses), spread)
    assert np.std(direct, ddof=1) == pytest.approx(sem, rel=4 * 0.029)
    none, none_err = measure_dark_peak(rng, gain, 0, spread)
    assert np.isnan(none) and np.isnan(none_err)


def test_recorded_ambient_is_replayed_exactly(tmp_path):
    from compensator.profiles.scenario import read_ambient_csv

    rng = np.random.default_rng(2)
    t = np.arange(0.0, 2 * 86400.0 + 1, 300.0)
    temp = np.round(10 + 8 * np.sin(t / 13000.0) + rng.normal(0, 0.5, t.size), 3)
    csv = tmp_path / "hut.csv"
    csv.write_text("# a recorded week\ntime_s,temp_c\n" + "".join(f"{a:g},{b:.3f}\n" for a, b in zip(t + 5000, temp)))
    rec = read_ambient_csv(csv)
    weather = Weather(recording_time_s=rec.time_s, recording_temp_c=rec.temp_c)
    path = ThermalPath(enclosure_time_constant_s=1000.0, die_time_constant_s=100.0)
    on_record = AmbientStream(weather, path, 300.0).next_block(t.size)
    assert np.array_equal(on_record.outdoor_temp_c, temp)  # every recorded value, bit for bit
    finer = AmbientStream(weather, path, 60.0).next_block(5 * (t.size - 1) + 1)
    assert np.array_equal(finer.outdoor_temp_c[::5], temp)
    # between records: on the straight line (the midpoint of two records at a third of the way is exact enough)
    k = 7
    assert finer.outdoor_temp_c[5 * k + 2] == pytest.approx(temp[k] + 0.4 * (temp[k + 1] - temp[k]), abs=1e-12)


def test_setup_copy_with_other_run_length_keeps_the_tables(sipm_a, board_ntc):
    setup = setup_from_profiles(sipm_a, board_ntc, overvoltage_v=3.0, tick_s=10.0, duration_s=3600.0)
    short = replace(setup, ticks=10)
    result = simulate_units(short, nominal_units(1), seed=1)
    assert set(result.metrics) == {"uncompensated", "compensated"}
    assert result.ticks == 10


def test_random_weather_has_the_stated_spread_and_correlation():
    """Statistics of the Ornstein-Uhlenbeck process (no outside source needed): stationary standard deviation
    sigma and one-step correlation exp(-h / tau)."""
    weather = Weather(mean_temp_c=3.0, weather_sigma_k=4.0, weather_time_constant_s=43200.0, seed=9)
    path = ThermalPath(enclosure_time_constant_s=1000.0, die_time_constant_s=100.0)
    x = AmbientStream(weather, path, 600.0).next_block(200_000).outdoor_temp_c - 3.0
    # About 200000 x 600 s / (2 x 43200 s) = 1400 independent stretches: the spread is known to about 2 %.
    assert np.std(x) == pytest.approx(4.0, rel=0.08)
    assert np.corrcoef(x[:-1], x[1:])[0, 1] == pytest.approx(np.exp(-600.0 / 43200.0), abs=0.003)
    assert abs(np.mean(x)) < 4 * 4.0 / np.sqrt(1400)


def test_sun_daylight_diurnal_and_steps_by_the_clock():
    from compensator.sim.environment import is_day, outdoor_temp_c

    w = Weather(mean_temp_c=10.0, seasonal_offset_k=-2.0, ramp_k_per_day=1.5, diurnal_amplitude_k=6.0,
                diurnal_peak_hour=14.0, sun_peak_k=8.0, sunrise_hour=6.0, sunset_hour=20.0, step_k=-5.0,
                step_at_s=86400.0, step_period_s=7200.0)
    hour = 3600.0
    assert sun_load_k(w, 13 * hour) == pytest.approx(8.0)                      # noon of the 6..20 h day
    assert sun_load_k(w, 9.5 * hour) == pytest.approx(8.0 * np.sin(np.pi / 4))  # a quarter of the way
    assert sun_load_k(w, [2 * hour, 21 * hour, 86400 + 5 * hour]).tolist() == [0.0, 0.0, 0.0]
    assert is_day(w, [5.99 * hour, 6 * hour, 19.99 * hour, 20 * hour]).tolist() == [False, True, True, False]
    # before the step: mean + offset + ramp + diurnal; the peak at 14 h
    t = 14 * hour
    assert outdoor_temp_c(w, t) == pytest.approx(10.0 - 2.0 + 1.5 * t / 86400 + 6.0)
    t = 2 * hour
    assert outdoor_temp_c(w, t) == pytest.approx(8.0 + 1.5 * t / 86400 + 6.0 * np.cos(2 * np.pi * (2 - 14) / 24))
    # the step: on for the first hour of every two hours from day two
    base = lambda t: 8.0 + 1.5 * t / 86400 + 6.0 * np.cos(2 * np.pi * (t / 86400 - 14 / 24))  # noqa: E731
    for t, on in ((86400 - 1, False), (86400 + 10, True), (86400 + 3700, False), (86400 + 7300, True)):
        assert outdoor_temp_c(w, t) == pytest.approx(base(t) - 5.0 * on)

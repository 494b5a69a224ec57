"""From a scenario to everything a simulation needs: law, table, cooler controller, weather, thermal path.

:func:`prepare` does the work a builder would do before the field: build the
compensation law from the profiles, size the lookup table exactly as
``compensator table`` does, and, for the cooled strategy, tune the cooler's PI
controller (robust, Ms <= 1.4, as ``compensator tune --method robust``) at the
simulation's tick and quantise it exactly as ``tune --emit-c`` does. The
result, :class:`SimSetup`, is a frozen record that can be sent to other
processes or to a Dask cluster.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import ModelError
from compensator.sim.environment import SECONDS_PER_DAY, ThermalPath, Weather

__all__ = ["TrimSettings", "SimSetup", "prepare", "setup_from_profiles", "COOLER_OUTPUT_PER_COUNT_A"]

#: Cooler controller output count, ampere (1 mA, as ``tune --emit-c``).
COOLER_OUTPUT_PER_COUNT_A = 0.001


@dataclass(frozen=True, kw_only=True)
class TrimSettings:
    """The gain trim's outer loop (see :mod:`compensator.sim.engine`).

    Attributes
    ----------
    window_s : float
        One dark-peak measurement, second.
    loop_gain : float
        Fraction of the measured error corrected per window.
    single_pe_spread_pct : float
        Width (1 sigma) of the single-photon peak relative to the gain, percent.
    captured_pulse_rate_hz : float
        Most dark pulses per second the board captures, hertz.
    max_trim_v : float
        Largest trim either way, volt.
    """

    window_s: float = 600.0
    loop_gain: float = 0.5
    single_pe_spread_pct: float = 10.0
    captured_pulse_rate_hz: float = 1000.0
    max_trim_v: float = 0.5


@dataclass(frozen=True, kw_only=True)
class SimSetup:
    """Everything one simulation needs (pure data).

    Attributes
    ----------
    name : str
        Scenario name.
    sipm : Sipm
    board : BoardProfile
    cooler : CoolerParams or None
        With the sensor lag of the scenario and the tick as control rate.
    law : CompensationLaw
    table : LookupTable
    pid : FixedPidCoefficients or None
        The cooler controller (input: raw temperature ADC codes; output: mA).
    pid_gains : PidGains or None
    cooler_setpoint_temp_c : float or None
    cooler_setpoint_code : int
        The setpoint as a raw ADC code of the nominal channel.
    weather : Weather
    path : ThermalPath
    tick_s : float
    ticks : int
    strategies : tuple of str
    band_pct : float
    trace_points : int
    seed : int
        Seed of the nominal run's noise.
    sensor_offset_k, sensor_noise_k : float
        Kelvin.
    breakdown_error_v : float
        The nominal unit's calibration error, volt.
    ageing_v_per_s : float
        Breakdown drift, volt per second.
    trim : TrimSettings
    fixed_dac_code : int
        DAC code of the ``uncompensated`` strategy.
    nominal_gain : float
        Gain the law aims for (at the breakdown reference temperature).
    """

    name: str
    sipm: object
    board: object
    cooler: object
    law: object
    table: object = field(repr=False)
    pid: object = None
    pid_gains: object = None
    cooler_setpoint_temp_c: float | None = None
    cooler_setpoint_code: int = 0
    weather: Weather
    path: ThermalPath
    tick_s: float
    ticks: int
    strategies: tuple
    band_pct: float = 0.25
    trace_points: int = 2000
    seed: int = 1
    sensor_offset_k: float = 0.0
    sensor_noise_k: float = 0.0
    breakdown_error_v: float = 0.0
    ageing_v_per_s: float = 0.0
    trim: TrimSettings = TrimSettings()
    fixed_dac_code: int = 0
    nominal_gain: float = 0.0

    @property
    def duration_s(self) -> float:
        """Simulated time, second."""
        return self.ticks * self.tick_s


def _cooler_controller(cooler, board, tick_s, setpoint_temp_c):
    """Tune (robust PI, Ms <= 1.4) and quantise the cooler controller for raw ADC codes in, mA out."""
    from compensator.firmware.pid import PidSettings, quantise_pid
    from compensator.loops import plants, tuning

    point = plants.cooler_operating_point(cooler, setpoint_temp_c)
    plant = plants.linearise_cooler(cooler, point)
    result = tuning.tune(plant, "robust", tick_s)
    out_min, out_max = plants.cooler_current_limits_a(cooler)
    g = result.gains
    settings = PidSettings(g.kp, g.ki_per_s, g.kd_s, tick_s, out_min, out_max,
                           derivative_filter_n=g.derivative_filter_n, setpoint_weight=g.setpoint_weight)
    channel = board.temperature
    k_per_code = float(channel.temp_per_code_k(setpoint_temp_c))
    rising = channel.adc_code(setpoint_temp_c + 1.0) > channel.adc_code(setpoint_temp_c - 1.0)
    input_per_count = k_per_code if rising else -k_per_code
    coeffs = quantise_pid(settings, input_per_count=input_per_count, output_per_count=COOLER_OUTPUT_PER_COUNT_A)
    return coeffs, g, int(channel.adc_code(setpoint_temp_c))


def setup_from_profiles(sipm_profile, board_profile, *, thermal_profile=None, overvoltage_v: float,
                        law_kind: str = "constant_gain", drop_correction: str = "modelled",
                        table_bound_pct: float = 0.05, table_layout: str = "optimised", weather: Weather | None = None,
                        path: ThermalPath | None = None, tick_s: float | None = None, duration_s: float = 86400.0,
                        strategies=("uncompensated", "compensated"), band_pct: float = 0.25,
                        trace_points: int = 2000, seed: int = 1, sensor_offset_k: float = 0.0,
                        sensor_noise_k: float = 0.0, breakdown_error_v: float = 0.0, ageing_mv_per_day: float = 0.0,
                        trim: TrimSettings = TrimSettings(), cooler_setpoint_temp_c: float | None = None,
                        name: str = "") -> SimSetup:
    """Build a :class:`SimSetup` from profiles (what :func:`prepare` does for a scenario).

    Parameters
    ----------
    sipm_profile, board_profile : SipmProfile, BoardProfile
    thermal_profile : ThermalProfile, optional
        Needed for the cooled strategy (and by a plant with a cooler).
    overvoltage_v : float
        Law target, volt.
    law_kind : {"constant_gain", "constant_overvoltage"}
    drop_correction : {"none", "modelled", "measured"}
    table_bound_pct : float
        Table sizing bound, percent.
    table_layout : {"optimised", "uniform"}
    weather : Weather, optional
        Default: constant 20 C (or the thermal profile's ambient), dark.
    path : ThermalPath, optional
        Default: 1 h enclosure, 5 min die, no sensor lag.
    tick_s : float, optional
        Default: the board's control period.
    duration_s : float
        Second.
    strategies : sequence of str
    band_pct : float
        Percent.
    trace_points : int
    seed : int
    sensor_offset_k, sensor_noise_k : float
        Kelvin.
    breakdown_error_v : float
        Volt.
    ageing_mv_per_day : float
        Millivolt per day.
    trim : TrimSettings
    cooler_setpoint_temp_c : float, optional
        Default: the thermal profile's setpoint.
    name : str

    Returns
    -------
    SimSetup

    Raises
    ------
    ModelError
        The law, the table or the cooler controller cannot be built.
    """
    from compensator.firmware.tables import build_table
    from compensator.law import build_law

    tick_s = float(tick_s or 1.0 / board_profile.control_rate_hz)
    if weather is None:
        ambient = thermal_profile.cooler.ambient_temp_c if thermal_profile is not None else 20.0
        weather = Weather(mean_temp_c=ambient)
    path = path or ThermalPath(enclosure_time_constant_s=3600.0, die_time_constant_s=300.0)
    law = build_law(sipm_profile, board_profile, overvoltage_v, kind=law_kind, drop_correction=drop_correction)
    table = build_table(law, board_profile, table_bound_pct, layout=table_layout)
    sipm = sipm_profile.device
    ref_c = sipm.breakdown.ref_temp_c
    fixed = int(np.asarray(law.supply.dac_code(law.output_v(ref_c))).ravel()[0])
    nominal_gain = float(sipm.cell_capacitance_f * law.overvoltage_v / ELEMENTARY_CHARGE_C)
    cooler = pid = gains = None
    setpoint_code = 0
    setpoint = None
    if thermal_profile is not None:
        cooler = replace(thermal_profile.cooler, sensor_time_constant_s=path.sensor_lag_s, sensor_dead_time_s=0.0,
                         control_rate_hz=1.0 / tick_s)
        if "compensated_cooled" in strategies:
            setpoint = cooler.setpoint_temp_c if cooler_setpoint_temp_c is None else float(cooler_setpoint_temp_c)
            cooler = replace(cooler, setpoint_temp_c=setpoint)
            pid, gains, setpoint_code = _cooler_controller(cooler, board_profile, tick_s, setpoint)
    elif "compensated_cooled" in strategies:
        raise ModelError("the compensated_cooled strategy needs a thermal profile", key="hardware.thermal")
    ticks = int(round(duration_s / tick_s))
    return SimSetup(
        name=name or f"{sipm_profile.name} on {board_profile.name}", sipm=sipm, board=board_profile, cooler=cooler,
        law=law, table=table, pid=pid, pid_gains=gains, cooler_setpoint_temp_c=setpoint,
        cooler_setpoint_code=setpoint_code, weather=weather, path=path, tick_s=tick_s, ticks=ticks,
        strategies=tuple(strategies), band_pct=float(band_pct), trace_points=int(trace_points), seed=int(seed),
        sensor_offset_k=float(sensor_offset_k), sensor_noise_k=float(sensor_noise_k),
        breakdown_error_v=float(breakdown_error_v), ageing_v_per_s=1e-3 * ageing_mv_per_day / SECONDS_PER_DAY,
        trim=trim, fixed_dac_code=fixed, nominal_gain=nominal_gain)


def prepare(scenario, *, days: float | None = None, strategies=None) -> SimSetup:
    """Build the :class:`SimSetup` of a loaded scenario.

    Parameters
    ----------
    scenario : ScenarioProfile
    days : float, optional
        Overrides ``run.duration_days``.
    strategies : sequence of str, optional
        Overrides the scenario's strategies.

    Returns
    -------
    SimSetup

    Raises
    ------
    InputError
        Located at the scenario key whose value cannot be simulated.
    """
    hw, run, amb = scenario.section("hardware"), scenario.section("run"), scenario.section("ambient")
    tp, light, trim, unit = (scenario.section(s) for s in ("thermal_path", "light", "gain_trim", "unit"))
    rec = scenario.recording
    weather = Weather(
        mean_temp_c=amb["mean_temp_c"], seasonal_offset_k=amb["seasonal_offset_k"],
        ramp_k_per_day=amb["ramp_k_per_day"], diurnal_amplitude_k=amb["diurnal_amplitude_k"],
        diurnal_peak_hour=amb["diurnal_peak_hour"], weather_sigma_k=amb["weather_sigma_k"],
        weather_time_constant_s=amb["weather_time_constant_s"], step_k=amb["step_k"], step_at_s=amb["step_at_s"],
        step_period_s=amb["step_period_s"], sun_peak_k=amb["sun_peak_k"], sunrise_hour=amb["sunrise_hour"],
        sunset_hour=amb["sunset_hour"], day_photon_rate_hz=light["day_photon_rate_hz"],
        night_photon_rate_hz=light["night_photon_rate_hz"], seed=amb["seed"],
        recording_time_s=None if rec is None else rec.time_s, recording_temp_c=None if rec is None else rec.temp_c)
    path = ThermalPath(enclosure_time_constant_s=tp["enclosure_time_constant_s"],
                       internal_heat_k=tp["internal_heat_k"], die_time_constant_s=tp["die_time_constant_s"],
                       sensor_lag_s=tp["sensor_lag_s"])
    rate = run["control_rate_hz"] or scenario.board.control_rate_hz
    duration_days = run["duration_days"] if days is None else float(days)
    if rec is not None and duration_days * SECONDS_PER_DAY > rec.time_s[-1] - rec.time_s[0] + 1e-6:
        raise ModelError(f"{duration_days:g} days is longer than the recording {rec.source}",
                         key="run.duration_days").at(scenario.source, scenario.lines.get("run.duration_days", 0))
    chosen = tuple(strategies) if strategies else scenario.strategies
    try:
        return setup_from_profiles(
            scenario.sipm, scenario.board, thermal_profile=scenario.thermal, overvoltage_v=hw["overvoltage_v"],
            law_kind=hw["law"], drop_correction=hw["drop_correction"], table_bound_pct=hw["table_bound_pct"],
            table_layout=hw["table_layout"], weather=weather, path=path, tick_s=1.0 / rate,
            duration_s=duration_days * SECONDS_PER_DAY, strategies=chosen, band_pct=run["band_pct"],
            trace_points=run["trace_points"], seed=run["seed"], sensor_offset_k=tp["sensor_offset_k"],
            sensor_noise_k=tp["sensor_noise_k"], breakdown_error_v=unit["breakdown_error_v"],
            ageing_mv_per_day=unit["ageing_mv_per_day"],
            trim=TrimSettings(window_s=trim["window_s"], loop_gain=trim["loop_gain"],
                              single_pe_spread_pct=trim["single_pe_spread_pct"],
                              captured_pulse_rate_hz=trim["captured_pulse_rate_hz"], max_trim_v=trim["max_trim_v"]),
            cooler_setpoint_temp_c=hw["cooler_setpoint_temp_c"], name=scenario.name)
    except ModelError as exc:
        key = exc.key if exc.key.startswith(("hardware.", "run.", "ambient.")) else "hardware"
        raise ModelError(exc.reason, key=key).at(scenario.source, scenario.lines.get(key, 0)) from None

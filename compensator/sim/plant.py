"""One instrument in its weather, one control tick at a time: the plant a simulated board drives.

:class:`FieldPlant` holds the physical world of one unit (weather, enclosure,
die or cooled plate, temperature sensor, supply network, series resistor,
SiPM, current channel, dark pulses). The firmware around it (the table, the
cooler controller, interlocks) belongs to whoever drives it: each call of
:meth:`FieldPlant.step` holds a DAC code and a cooler current over one tick
and returns the :class:`PlantReading` at the end of it, including the raw
ADC codes the firmware reads next. It uses the same physics functions as the
batch simulation (:mod:`compensator.sim.chain`, :mod:`compensator.sim.cooler`,
:mod:`compensator.sim.environment`), so a board driven by it behaves as the
``compensated`` or ``compensated_cooled`` strategy of ``compensator simulate``.

Example
-------
>>> from compensator.profiles import load_board, load_sipm
>>> plant = FieldPlant.from_profiles(load_sipm("hardware_profiles/hut-sipm-a.yaml"),
...                                  load_board("hardware_profiles/hut-board-ntc.yaml"),
...                                  ambient_temp_c=20.0, overvoltage_v=3.0)  # doctest: +SKIP
>>> reading = plant.reading  # doctest: +SKIP
>>> for _ in range(10):  # doctest: +SKIP
...     dac_code, _ = plant.table.lookup(reading.sensor_adc_code)
...     reading = plant.step(int(dac_code))
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.sim.blocks import measure_dark_peak, supply_lags
from compensator.sim.chain import (
    UnitDraws,
    bias_at_sipm_v,
    current_adc_code,
    device_factors,
    network_output_v,
    nominal_units,
    sensor_adc_code,
    supply_units,
    unit_breakdown_v,
)
from compensator.sim.cooler import cooler_substeps, cooler_tick
from compensator.sim.environment import AmbientStream, ThermalPath, Weather
from compensator.sim.setup import SimSetup, TrimSettings, prepare, setup_from_profiles

__all__ = ["PlantReading", "FieldPlant", "SENSOR_FAULTS"]

#: Sensor faults a plant can be told to show: an open or a shorted sensor element.
SENSOR_FAULTS = ("open", "short")

#: Ticks of weather computed ahead at a time.
_PREFETCH = 4096


@dataclass(frozen=True, kw_only=True)
class PlantReading:
    """The state of the plant at the end of a tick.

    Attributes
    ----------
    time_s : float
        Simulated time since the start, second.
    outdoor_temp_c, enclosure_temp_c, die_temp_c : float
        Degree Celsius.
    sensor_temp_c : float
        True temperature at the sensor element (lag and offsets, no noise), degree Celsius.
    sensor_adc_code : int
        Raw temperature ADC code the firmware reads now (with noise; a rail code under a sensor fault).
    current_adc_code : int or None
        Raw code of the SiPM current channel (``None`` when the board has none).
    dac_code : int
        The DAC code held over the last tick.
    supply_v : float
        Supply output, volt.
    bias_v : float
        Bias at the SiPM after the series resistor, volt.
    overvoltage_v : float
        Volt.
    sipm_current_a : float
        Ampere.
    gain : float
        Electrons per avalanche.
    gain_deviation_pct : float
        ``100 (G / G0 - 1)`` against the law's target gain, percent.
    dark_rate_hz, photon_rate_hz : float
        Hertz.
    cooler_current_a : float
        Drive current held over the last tick, ampere (0 without a cooler).
    hot_side_temp_c : float or None
        Cooler hot side, degree Celsius (``None`` without a cooler).
    cooler_power_w : float
        Mean electrical power into the cooler over the last tick, watt.
    dark_peak_gain : float or None
        Gain measured from the dark-count single-photon peak in the last
        complete window (``None`` before the first).
    dark_peak_gain_err : float or None
        Its standard error.
    dark_peak_pulses : int
        Pulses in that window.
    """

    time_s: float
    outdoor_temp_c: float
    enclosure_temp_c: float
    die_temp_c: float
    sensor_temp_c: float
    sensor_adc_code: int
    current_adc_code: int | None
    dac_code: int
    supply_v: float
    bias_v: float
    overvoltage_v: float
    sipm_current_a: float
    gain: float
    gain_deviation_pct: float
    dark_rate_hz: float
    photon_rate_hz: float
    cooler_current_a: float = 0.0
    hot_side_temp_c: float | None = None
    cooler_power_w: float = 0.0
    dark_peak_gain: float | None = None
    dark_peak_gain_err: float | None = None
    dark_peak_pulses: int = 0


class FieldPlant:
    """The physical world of one unit, advanced one control tick per :meth:`step`.

    Parameters
    ----------
    setup : SimSetup
        From :func:`~compensator.sim.setup.prepare` (a scenario) or
        :meth:`from_profiles`; gives the weather, thermal path, tick, law and table.
    cooled : bool, optional
        Die on the cooler's cold plate (default: when the setup has a cooler).
    unit : UnitDraws, optional
        This unit's deviations from its profiles (default: none).
    seed : int
        Seed of the sensor noise and the dark-pulse statistics.

    Attributes
    ----------
    table : LookupTable
        The table the setup built (convenient for a driver that has no firmware of its own).
    tick_s : float
        Second.
    reading : PlantReading
        The present state.
    """

    def __init__(self, setup: SimSetup, *, cooled: bool | None = None, unit: UnitDraws | None = None,
                 seed: int = 1):
        self.setup = setup
        self.table = setup.table
        self.tick_s = setup.tick_s
        self.cooled = (setup.cooler is not None) if cooled is None else bool(cooled)
        if self.cooled and setup.cooler is None:
            raise ModelError("a cooled plant needs a thermal profile", key="thermal")
        self.unit = unit or nominal_units(1)
        if self.unit.count != 1:
            raise ModelError("a FieldPlant is one unit: give UnitDraws of one unit", key="unit")
        self._rng = np.random.default_rng([int(seed), 0x9A17])
        self._stream = AmbientStream(setup.weather, setup.path, setup.tick_s)
        self._supply = supply_units(setup.law.supply, self.unit)
        self._lags = supply_lags(setup)
        self._lag_state = [None] * len(self._lags)
        self._block = None
        self._pos = 0
        self._k = 0
        self._fault = None
        self._window_ticks = max(1, int(round(setup.trim.window_s / setup.tick_s)))
        self._win = [0.0, 0.0, 0]
        self._peak = (None, None, 0)
        self._substeps = cooler_substeps(setup.cooler, setup.tick_s) if self.cooled else 0
        amb = self._ambient()
        self._tc = self._th = None
        if self.cooled:
            from compensator.physics.thermal import cooler_steady_state

            tc, th = cooler_steady_state(setup.cooler, 0.0, amb[1])
            self._tc, self._th = float(tc), float(th)
            self._sensor = self._tc
        else:
            self._sensor = float(self._block.sensor_temp_c[0])
        self.reading = self._read(setup.fixed_dac_code, 0.0, 0.0)

    # -- construction helpers ------------------------------------------------
    @classmethod
    def from_profiles(cls, sipm_profile, board_profile, thermal_profile=None, *, overvoltage_v: float | None = None,
                      ambient_temp_c: float | None = None, tick_s: float | None = None,
                      path: ThermalPath | None = None, seed: int = 1, cooled: bool | None = None) -> "FieldPlant":
        """A plant in a constant ambient, from profiles alone.

        Parameters
        ----------
        sipm_profile, board_profile : SipmProfile, BoardProfile
        thermal_profile : ThermalProfile, optional
            With it the die sits on the cooler's cold plate (unless ``cooled`` is False).
        overvoltage_v : float, optional
            Law target, volt (default: midway between the sipm's limits).
        ambient_temp_c : float, optional
            Constant outdoor temperature (default: the thermal profile's ambient, or 20 C).
        tick_s : float, optional
            Default: the board's control period.
        path : ThermalPath, optional
            Default: 1 h enclosure, 5 min die, no sensor lag, no internal heat.
        seed : int
        cooled : bool, optional

        Returns
        -------
        FieldPlant
        """
        dev = sipm_profile.device
        ov = overvoltage_v if overvoltage_v is not None else 0.5 * (dev.min_overvoltage_v + dev.max_overvoltage_v)
        if ambient_temp_c is None:
            ambient_temp_c = thermal_profile.cooler.ambient_temp_c if thermal_profile is not None else 20.0
        setup = setup_from_profiles(sipm_profile, board_profile, thermal_profile=thermal_profile, overvoltage_v=ov,
                                    weather=Weather(mean_temp_c=float(ambient_temp_c)), path=path, tick_s=tick_s,
                                    duration_s=0.0, trim=TrimSettings(window_s=60.0))
        return cls(setup, seed=seed, cooled=cooled)

    @classmethod
    def from_scenario(cls, scenario, *, seed: int | None = None, cooled: bool | None = None) -> "FieldPlant":
        """A plant in a scenario's weather (its thermal path, light and unit offsets).

        Parameters
        ----------
        scenario : ScenarioProfile
        seed : int, optional
            Default: the scenario's ``run.seed``.
        cooled : bool, optional
            Default: when the scenario has a thermal profile.

        Returns
        -------
        FieldPlant
        """
        setup = prepare(scenario, strategies=("uncompensated", "compensated"))
        return cls(setup, seed=scenario.section("run")["seed"] if seed is None else seed, cooled=cooled)

    # -- the world -----------------------------------------------------------
    def _ambient(self):
        """(outdoor, enclosure, die, sensor, photon rate) at the present tick."""
        if self._block is None or self._pos >= self._block.time_s.size:
            self._block = self._stream.next_block(_PREFETCH)
            self._pos = 0
        b, i = self._block, self._pos
        return (float(b.outdoor_temp_c[i]), float(b.enclosure_temp_c[i]), float(b.die_temp_c[i]),
                float(b.sensor_temp_c[i]), float(b.photon_rate_hz[i]))

    def inject_sensor_fault(self, kind: str | None) -> None:
        """Make the temperature sensor read open or shorted (``None`` heals it).

        Parameters
        ----------
        kind : {"open", "short"} or None
        """
        if kind is not None and kind not in SENSOR_FAULTS:
            raise ModelError(f"sensor fault must be one of {', '.join(SENSOR_FAULTS)} or None, got {kind!r}",
                             key="kind")
        self._fault = kind

    def _sensor_code(self, temp_c: float) -> int:
        fe = self.setup.board.temperature.front_end
        if self._fault is not None:
            # open: infinite resistance; short: zero; where that lands depends on the sensor's place in the divider
            high = (self._fault == "open") == (fe.sensor_position == "low")
            return fe.full_scale_code if high else 0
        noise = self.setup.sensor_noise_k * float(self._rng.standard_normal()) if self.setup.sensor_noise_k else 0.0
        t = np.array([[temp_c + self.setup.sensor_offset_k + noise]])
        return int(sensor_adc_code(self.setup.board.temperature, t, self.unit)[0, 0])

    def _read(self, dac_code: int, cooler_current_a: float, cooler_power_w: float) -> PlantReading:
        s = self.setup
        outdoor, enclosure, die, sensor_uncooled, rate = self._ambient()
        if self.cooled:
            die = self._tc
        sensor = self._sensor if self.cooled else sensor_uncooled
        time_s = self._k * s.tick_s
        factors = device_factors(s.sipm, np.array([[die]]))
        vbd = unit_breakdown_v(factors, self.unit, s.breakdown_error_v + s.ageing_v_per_s * time_s)
        v_out = network_output_v(self._supply, np.array([[dac_code]]))
        if self._lags:
            from compensator.sim.blocks import apply_lags

            v_out = apply_lags(v_out, self._lags, self._lag_state)
        bias, current = bias_at_sipm_v(s.sipm, factors, vbd, v_out, self._supply.series_resistor_ohm, rate)
        ov = float((bias - vbd)[0, 0])
        gain = float(factors.gain_per_v[0, 0]) * max(ov, 0.0)
        rel = max(ov, 0.0) / s.sipm.dark_ref_overvoltage_v
        dcr = float(factors.dark_rate_hz_at_ref_ov[0, 0]) * rel ** s.sipm.dark_overvoltage_exponent
        sense = s.board.current_sense
        cur_code = None if sense is None else int(current_adc_code(sense, current, self.unit)[0, 0])
        self._win[0] += dcr
        self._win[1] += dcr * gain
        self._win[2] += 1
        if self._win[2] >= self._window_ticks:
            pulses = int(self._rng.poisson(min(self._win[0] / self._win[2], s.trim.captured_pulse_rate_hz)
                                           * self._win[2] * s.tick_s))
            mean_gain = self._win[1] / self._win[0] if self._win[0] > 0 else math.nan
            value, err = measure_dark_peak(self._rng, mean_gain, pulses, 1e-2 * s.trim.single_pe_spread_pct)
            self._peak = (None if not np.isfinite(value) else float(value),
                          None if not np.isfinite(err) else float(err), pulses)
            self._win = [0.0, 0.0, 0]
        return PlantReading(
            time_s=time_s, outdoor_temp_c=outdoor, enclosure_temp_c=enclosure, die_temp_c=float(die),
            sensor_temp_c=float(sensor), sensor_adc_code=self._sensor_code(float(sensor)), current_adc_code=cur_code,
            dac_code=int(dac_code), supply_v=float(v_out[0, 0]), bias_v=float(bias[0, 0]), overvoltage_v=ov,
            sipm_current_a=float(current[0, 0]), gain=gain, gain_deviation_pct=100.0 * (gain / s.nominal_gain - 1.0),
            dark_rate_hz=dcr, photon_rate_hz=rate, cooler_current_a=float(cooler_current_a),
            hot_side_temp_c=self._th, cooler_power_w=float(cooler_power_w), dark_peak_gain=self._peak[0],
            dark_peak_gain_err=self._peak[1], dark_peak_pulses=self._peak[2])

    def step(self, dac_code: int, *, cooler_current_a: float = 0.0) -> PlantReading:
        """Hold a DAC code and a cooler current over one tick; return the state at its end.

        Parameters
        ----------
        dac_code : int
            Bias DAC code, within the DAC's range.
        cooler_current_a : float
            Cooler drive, ampere (positive cools), clipped to the module's
            ``max_current_a``; ignored by an uncooled plant.

        Returns
        -------
        PlantReading
        """
        full = self.setup.law.supply.dac.full_scale_code
        code = int(dac_code)
        if not 0 <= code <= full:
            raise ModelError(f"dac_code {code} is outside 0..{full}", key="dac_code")
        power = 0.0
        current = 0.0
        if self.cooled:
            limit = self.setup.cooler.max_current_a
            current = min(max(float(cooler_current_a), -limit), limit)
            enclosure = self._ambient()[1]
            step = cooler_tick(self.setup.cooler, self._tc, self._th, current, enclosure, self.tick_s,
                               self._substeps)
            old = self._tc
            self._tc, self._th = float(step.cold_temp_c), float(step.hot_temp_c)
            power = float(step.electrical_power_w)
            tau = self.setup.path.sensor_lag_s
            if tau > 0:
                a = math.exp(-self.tick_s / tau)
                b0 = (tau / self.tick_s) * (1 - a) - a
                self._sensor = a * self._sensor + b0 * old + (1 - a - b0) * self._tc
            else:
                self._sensor = self._tc
        self._pos += 1
        self._k += 1
        self.reading = self._read(code, current, power)
        return self.reading

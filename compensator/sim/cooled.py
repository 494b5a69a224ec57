"""The compensated_cooled strategy: the die on the cold plate, stepped tick by tick under the fixed-point PI.

The cold plate follows the cooler's nonlinear heat balance
(:mod:`compensator.sim.cooler`) driven by the controller on the raw sensor
codes, with its current limits; a sensor fault or a hot side above the
profile's limit switches the cooler off. One unit runs in plain floats; many
units run vectorised over units. The bias does not act back on the cooler, so
the rest of the chain then runs on the whole block at once.
"""

from __future__ import annotations

import math

import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError
from compensator.firmware.tables import STATUS_SENSOR_FAULT
from compensator.physics.sensors import T25_K, RtdSensor
from compensator.sim.blocks import apply_lags, measured_drop_block, supply_lags
from compensator.sim.chain import (
    UnitDraws,
    bias_at_sipm_v,
    device_factors,
    network_output_v,
    sensor_adc_code,
    supply_units,
    unit_breakdown_v,
)
from compensator.sim.cooler import cooler_substeps, cooler_tick
from compensator.sim.setup import COOLER_OUTPUT_PER_COUNT_A, SimSetup

__all__ = ["CooledState"]


class _ScalarPid:
    """One :class:`~compensator.firmware.pid.FixedPid` (the reference itself) behind the bank interface."""

    def __init__(self, coeffs):
        from compensator.firmware.pid import FixedPid

        self.pid = FixedPid(coeffs)

    def reset(self, output_count=None):
        self.pid.reset(None if output_count is None else int(np.asarray(output_count).ravel()[0]))

    def step(self, setpoint_count, measurement_count):
        return self.pid.step(int(setpoint_count), int(measurement_count))


class _OneOfBank:
    """A bank of one controller (the compiled C) with plain integers in and out."""

    def __init__(self, bank):
        self.bank = bank

    def reset(self, output_count=None):
        self.bank.reset(None if output_count is None else np.atleast_1d(output_count))

    def step(self, setpoint_count, measurement_count):
        return int(self.bank.step(np.array([setpoint_count]), np.array([measurement_count]))[0])


def _scalar_code_function(channel, units: UnitDraws):
    """The ADC code of one unit's sensor as a function of a float temperature (same arithmetic as the vector one)."""
    sensor, fe = channel.sensor, channel.front_end
    u = {k: float(np.asarray(v).ravel()[0]) for k, v in vars(units).items()}
    shift = u["sensor_to_die_k"] + u["self_heating_k"]
    r_ref = fe.reference_resistor_ohm * (1.0 + u["reference_resistor"])
    span = 1.0 if fe.ratiometric else fe.span_fraction * ((1.0 + u["adc_reference"]) / (1.0 + u["excitation"]))
    scale = (1 << fe.adc_bits) / span
    low = fe.sensor_position == "low"
    full = fe.full_scale_code
    rtd = isinstance(sensor, RtdSensor)
    ntc_dev = not rtd and (u["ntc_r25"] or u["ntc_beta"])
    beta = None if rtd else (sensor.beta_k if sensor.beta_k is not None else float(sensor.effective_beta_k(25.0)))
    plain_beta = not rtd and sensor.beta_k is not None

    def code(temp_c: float) -> int:
        t = temp_c + shift
        if rtd:
            t = t + u["rtd_offset_k"] + u["rtd_slope"] * abs(t)
        if plain_beta:  # the Beta model in plain floats: one unit, tick by tick
            r = sensor.r25_ohm * math.exp(sensor.beta_k * (1.0 / (t + ZERO_C_IN_K) - 1.0 / T25_K))
        else:
            r = float(sensor.resistance_ohm(t))
        if ntc_dev:
            r = r * (1.0 + u["ntc_r25"]) * float(np.exp(u["ntc_beta"] * beta * (1.0 / (t + ZERO_C_IN_K) - 1.0 / T25_K)))
        frac = r / (r + r_ref) if low else r_ref / (r + r_ref)
        x = math.floor(frac * scale)
        return 0 if x < 0 else full if x > full else int(x)

    return code


class CooledState:
    """The cooled strategy's per-unit state, stepped tick by tick (plain floats for one unit)."""

    def __init__(self, setup: SimSetup, units: UnitDraws, fw, rng):
        from compensator.sim.firmware import PythonFirmware

        self.setup = setup
        self.units = units
        self.fw = fw
        self.rng = rng
        self.n = units.count
        self.scalar = self.n == 1
        if self.scalar:
            self.pid = _ScalarPid(setup.pid) if isinstance(fw, PythonFirmware) else _OneOfBank(fw.pid(1))
        else:
            self.pid = fw.pid(self.n)
        self.sup = supply_units(setup.law.supply, units)
        self.params = setup.cooler
        self.substeps = cooler_substeps(self.params, setup.tick_s)
        self.code_of = _scalar_code_function(setup.board.temperature, units) if self.scalar else None
        self.tc = None  # cold plate = die, degree Celsius
        tau = setup.path.sensor_lag_s
        h = setup.tick_s
        if tau > 0:
            a = float(np.exp(-h / tau))
            self.lag = (a, (tau / h) * (1 - a) - a, 1 - (tau / h) * (1 - a))  # first-order hold
        else:
            self.lag = None
        self.carried_current = np.zeros(self.n, dtype=np.int64)
        self.lag_state = [None] * len(supply_lags(setup))

    def _start(self, enclosure_c):
        """Settled at the setpoint (controller at the steady current) if the cooler can hold it, else at rest."""
        from compensator.physics.thermal import cooler_operating_point, cooler_steady_state

        p = self.params
        try:
            point = cooler_operating_point(p, self.setup.cooler_setpoint_temp_c, None, enclosure_c)
            tc, th, current = point.cold_temp_c, point.hot_temp_c, point.current_a
        except ModelError:
            tc, th = (float(v) for v in cooler_steady_state(p, 0.0, enclosure_c))
            current = 0.0
        counts = int(round(current / COOLER_OUTPUT_PER_COUNT_A))
        self.pid.reset(counts if self.scalar else np.full(self.n, counts))
        if self.scalar:
            self.tc, self.th = float(tc), float(th)
        else:
            self.tc, self.th = np.full(self.n, float(tc)), np.full(self.n, float(th))
        self.sensor = self.tc

    def run_block(self, amb, acc, first_tick, options):
        """Step one block of ticks; return the gain deviation (percent), the bias (volt) and the die temperature.

        Parameters
        ----------
        amb : compensator.sim.environment.AmbientBlock
            The weather and thermal path over the block.
        acc : RunningMetrics
            Where the block's metrics go.
        first_tick : int
            Index of the block's first tick in the run.
        options : SimOptions
        """
        s = self.setup
        n, length = self.n, amb.time_s.size
        if self.tc is None:
            self._start(float(amb.enclosure_temp_c[0]))
        noise = (self.rng.standard_normal((length, n)).T * s.sensor_noise_k if options.noise
                 else np.zeros((n, length)))
        offset = s.sensor_offset_k
        die = np.empty((n, length))
        codes = np.empty((n, length), dtype=np.int64)
        setpoint = s.cooler_setpoint_code
        hot_limit = self.params.max_hot_temp_c
        per_count = COOLER_OUTPUT_PER_COUNT_A
        fw, pid, params, tick, sub = self.fw, self.pid, self.params, s.tick_s, self.substeps
        enclosure = amb.enclosure_temp_c.tolist()
        energy = hot_max = 0.0
        off_ticks = 0
        if self.scalar:
            status_of = _status_function(fw)
            noise_row = noise[0].tolist()
            tc, th, sensor = self.tc, self.th, self.sensor
            hot_max = -math.inf
            for j in range(length):
                code = self.code_of(sensor + offset + noise_row[j])
                die[0, j] = tc
                codes[0, j] = code
                counts = pid.step(setpoint, code)
                off = status_of(code) == STATUS_SENSOR_FAULT or th > hot_limit
                step = cooler_tick(params, tc, th, 0.0 if off else counts * per_count, enclosure[j], tick, sub)
                energy += step.electrical_power_w * tick
                off_ticks += off
                old, tc, th = tc, step.cold_temp_c, step.hot_temp_c
                hot_max = max(hot_max, th)
                sensor = tc if self.lag is None else self.lag[0] * sensor + self.lag[1] * old + self.lag[2] * tc
            self.tc, self.th, self.sensor = tc, th, sensor
        else:
            hot_max = np.full(n, -np.inf)
            channel = s.board.temperature
            for j in range(length):
                code = sensor_adc_code(channel, (self.sensor + offset + noise[:, j])[:, None], self.units)[:, 0]
                die[:, j] = self.tc
                codes[:, j] = code
                _, status = fw.lookup(code)
                counts = pid.step(setpoint, code)
                off = (status == STATUS_SENSOR_FAULT) | (self.th > hot_limit)
                step = cooler_tick(params, self.tc, self.th, np.where(off, 0.0, counts * per_count), enclosure[j],
                                   tick, sub)
                energy = energy + step.electrical_power_w * tick
                off_ticks = off_ticks + off
                old, self.tc, self.th = self.tc, step.cold_temp_c, step.hot_temp_c
                hot_max = np.maximum(hot_max, self.th)
                self.sensor = self.tc if self.lag is None else (self.lag[0] * self.sensor + self.lag[1] * old
                                                                + self.lag[2] * self.tc)
        acc.energy += energy
        acc.off += off_ticks
        acc.hot_max = np.maximum(acc.hot_max, hot_max)
        from compensator.physics.thermal import dew_point_c

        p = self.params
        if p.ambient_relative_humidity_pct > 0:
            wet = die < dew_point_c(amb.enclosure_temp_c, p.ambient_relative_humidity_pct)[None, :] + p.dew_margin_k
            skip = max(0, acc.settle - first_tick)
            acc.dew += wet[:, skip:].sum(axis=1)
        # The bias does not act back on the cooler: the rest of the chain runs on the whole block at once.
        factors = device_factors(s.sipm, die)
        vbd = unit_breakdown_v(factors, self.units, s.breakdown_error_v + s.ageing_v_per_s * amb.time_s[None, :])
        rate = amb.photon_rate_hz[None, :]
        dac, status = fw.lookup(codes)
        v_out = network_output_v(self.sup, dac, limits=options.limits)
        lags = supply_lags(s)
        if lags:
            v_out = apply_lags(v_out, lags, self.lag_state)
        r_series = self.sup.series_resistor_ohm if options.drop else 0.0
        measured = s.law.drop_correction == "measured"
        bias, current = bias_at_sipm_v(s.sipm, factors, vbd, v_out, r_series, rate, with_current=measured)
        if measured:
            bias, current, self.carried_current = measured_drop_block(
                s, fw, self.sup, factors, vbd, rate, codes, current, self.carried_current, None, self.units,
                s.board.current_sense, lags, self.lag_state, options, r_series)
        ov = bias - vbd
        dev = 100.0 * (factors.gain_per_v * np.maximum(ov, 0.0) / s.nominal_gain - 1.0)
        acc.add(dev, ov - s.law.target_overvoltage_v(die), status, first_tick)
        return dev, bias, die


def _status_function(fw):
    """Status of one ADC code by the firmware back end."""
    dense = getattr(fw, "_status", None)
    if dense is not None:
        table = dense.tolist()
        return table.__getitem__
    return lambda code: int(fw.lookup(np.array([code]))[1][0])

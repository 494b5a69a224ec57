"""The closed-loop field simulation of many units over weeks, strategy by strategy, on the same weather.

Per control tick ``k`` and unit::

    die temperature T[k] -> sensor (lag, offsets, tolerances, noise) -> ADC code
    -> firmware (table with its faults and clamps; drop correction from the
       current read at tick k - 1; gain trim) -> DAC code -> supply output
       (network tolerances, regulator limits, regulator and filter lags)
    -> bias at the SiPM after the series resistor (dark plus light current)
    -> overvoltage -> gain deviation 100 (G / G0 - 1), G0 the law's target gain

Strategies (side by side, same weather, same sensor noise):

* ``uncompensated``: a fixed DAC code, the law's at the breakdown reference
  temperature (set once on the bench);
* ``compensated``: the lookup table;
* ``gain_trimmed``: the table plus an integer trim of the DAC code, updated
  once per window from the mean amplitude of the dark pulses captured in
  it (the single-photon peak): the window holds ``N ~ Poisson(min(DCR,
  capture rate) x window)`` pulses whose amplitudes scatter by the peak's
  width, so the measured gain carries a standard error of ``width /
  sqrt(N)`` (the mean of N independent Gaussian amplitudes; statistics);
  the trim corrects a fraction ``loop_gain`` of the measured error, which
  removes calibration errors and ageing;
* ``compensated_cooled``: the table plus the cooler: the die sits on the
  cold plate, whose temperature follows the nonlinear heat balance
  (:mod:`compensator.sim.cooler`) driven by the fixed-point PI controller
  on the raw sensor codes, with its current limits; a sensor fault or a hot
  side above the profile's limit switches the cooler off.

Runs without a cooler need no step-by-step loop: the weather and thermal path
do not depend on the control, so each block of ticks is computed at once for
every unit (numpy over units x ticks); the drop correction from the measured
current, which reads the previous tick, is solved per block by iterating the
block until the current codes repeat (then it is exactly the tick-by-tick
result). The cooled strategy steps tick by tick, vectorised over units.

Metrics are accumulated as the run goes (largest, smallest, sum, sum of
squares, ticks outside the band); only decimated traces are kept.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError
from compensator.firmware.tables import STATUS_ABOVE_RANGE, STATUS_BELOW_RANGE, STATUS_SENSOR_FAULT
from compensator.physics.sensors import T25_K, RtdSensor
from compensator.sim.chain import (
    UnitDraws,
    bias_at_sipm_v,
    current_adc_code,
    device_factors,
    network_output_v,
    sensor_adc_code,
    supply_units,
    unit_breakdown_v,
)
from compensator.sim.cooler import cooler_substeps, cooler_tick
from compensator.sim.environment import AmbientStream
from compensator.sim.setup import COOLER_OUTPUT_PER_COUNT_A, SimSetup

__all__ = ["SimOptions", "StrategyMetrics", "Traces", "UnitsResult", "simulate_units", "measure_dark_peak",
           "STRATEGY_ORDER"]

STRATEGY_ORDER = ("uncompensated", "compensated", "compensated_cooled", "gain_trimmed")

#: Largest number of unit-ticks held in one block array (about 8 MB per float64 array).
BLOCK_ELEMENTS = 1 << 20


@dataclass(frozen=True, kw_only=True)
class SimOptions:
    """Switches for checks against linear references (all on for a real run).

    Attributes
    ----------
    quantise : bool
        ADC and DAC quantisation and the integer table; off: the law is
        applied to the continuous sensor reading and the DAC is continuous.
    noise : bool
        Sensor noise and dark-peak statistics.
    limits : bool
        Regulator output limits.
    drop : bool
        The series-resistor drop (off: the bias at the SiPM is the supply output).
    """

    quantise: bool = True
    noise: bool = True
    limits: bool = True
    drop: bool = True


@dataclass(frozen=True, kw_only=True)
class StrategyMetrics:
    """What one strategy did over the run, per unit (arrays of shape ``(units,)``).

    Attributes
    ----------
    name : str
    gain_dev_max_abs_pct, gain_dev_min_pct, gain_dev_max_pct, gain_dev_pk_pk_pct : ndarray
        Largest absolute, smallest, largest and peak-to-peak gain deviation
        over every tick of the run, percent.
    gain_dev_rms_pct, gain_dev_mean_pct : ndarray
        RMS and mean over every tick, percent.
    time_outside_band_pct : ndarray
        Share of the ticks with ``|gain deviation| > band``, percent.
    overvoltage_dev_max_abs_v : ndarray
        Largest absolute difference between the overvoltage and the law's
        target at the die temperature, volt.
    sensor_fault_ticks, out_of_range_ticks : ndarray of int
        Ticks with a sensor fault, ticks with a reading outside the operating range.
    cooler_energy_j : ndarray
        Electrical energy into the cooler, joule (0 without one).
    hot_side_max_temp_c : ndarray
        Highest hot-side temperature (NaN without a cooler), degree Celsius.
    cooler_off_ticks : ndarray of int
        Ticks the cooler was forced off (sensor fault or hot side over its limit).
    trim_v : ndarray
        Final trim of the bias, volt (0 unless gain_trimmed).
    trim_converged_s : ndarray
        End of the first window after which the gain never left the band
        (NaN if it did to the end), second.
    trim_residual_rms_pct : ndarray
        RMS gain deviation after convergence, percent (NaN if never converged).
    """

    name: str
    gain_dev_max_abs_pct: np.ndarray
    gain_dev_min_pct: np.ndarray
    gain_dev_max_pct: np.ndarray
    gain_dev_pk_pk_pct: np.ndarray
    gain_dev_rms_pct: np.ndarray
    gain_dev_mean_pct: np.ndarray
    time_outside_band_pct: np.ndarray
    overvoltage_dev_max_abs_v: np.ndarray
    sensor_fault_ticks: np.ndarray
    out_of_range_ticks: np.ndarray
    cooler_energy_j: np.ndarray
    hot_side_max_temp_c: np.ndarray
    cooler_off_ticks: np.ndarray
    trim_v: np.ndarray
    trim_converged_s: np.ndarray
    trim_residual_rms_pct: np.ndarray


@dataclass(frozen=True)
class Traces:
    """Decimated traces of the first unit (every ``stride``-th tick).

    Attributes
    ----------
    time_s, outdoor_temp_c, enclosure_temp_c, die_temp_c, sensor_temp_c : ndarray
        Shared by the uncooled strategies.
    strategies : dict
        Strategy name -> dict of arrays ``gain_dev_pct``, ``bias_v``, ``die_temp_c``.
    stride : int
    """

    time_s: np.ndarray
    outdoor_temp_c: np.ndarray
    enclosure_temp_c: np.ndarray
    die_temp_c: np.ndarray
    sensor_temp_c: np.ndarray
    strategies: dict = field(default_factory=dict)
    stride: int = 1


@dataclass(frozen=True)
class UnitsResult:
    """The result of :func:`simulate_units`.

    Attributes
    ----------
    metrics : dict
        Strategy name -> :class:`StrategyMetrics`.
    traces : Traces or None
    ticks : int
    tick_s : float
    firmware : str
        Which back end ran the firmware ("python" or "compiled C").
    """

    metrics: dict
    traces: Traces | None
    ticks: int
    tick_s: float
    firmware: str = "python"


class _Acc:
    """Running per-unit statistics of one strategy."""

    def __init__(self, n, band, cooled=False):
        self.n = n
        self.band = band
        self.max = np.full(n, -np.inf)
        self.min = np.full(n, np.inf)
        self.sum = np.zeros(n)
        self.sumsq = np.zeros(n)
        self.outside = np.zeros(n, dtype=np.int64)
        self.ov_max = np.zeros(n)
        self.fault = np.zeros(n, dtype=np.int64)
        self.out_of_range = np.zeros(n, dtype=np.int64)
        self.last_outside = np.full(n, -1, dtype=np.int64)
        self.energy = np.zeros(n)
        self.hot_max = np.full(n, np.nan if not cooled else -np.inf)
        self.off = np.zeros(n, dtype=np.int64)
        self.windows = []  # (end tick, sum, sumsq, count) per trim window
        self.trim_v = np.zeros(n)

    def add(self, dev, ov_dev, status, first_tick):
        self.max = np.maximum(self.max, dev.max(axis=1))
        self.min = np.minimum(self.min, dev.min(axis=1))
        self.sum += dev.sum(axis=1)
        self.sumsq += np.einsum("ij,ij->i", dev, dev)
        out = np.abs(dev) > self.band
        self.outside += out.sum(axis=1)
        any_out = out.any(axis=1)
        if np.any(any_out):
            last = out.shape[1] - 1 - np.argmax(out[:, ::-1], axis=1)
            self.last_outside = np.where(any_out, first_tick + last, self.last_outside)
        self.ov_max = np.maximum(self.ov_max, np.abs(ov_dev).max(axis=1))
        if status is not None:
            self.fault += (status == STATUS_SENSOR_FAULT).sum(axis=1)
            self.out_of_range += ((status == STATUS_BELOW_RANGE) | (status == STATUS_ABOVE_RANGE)).sum(axis=1)

    def metrics(self, name, ticks, tick_s):
        mean = self.sum / ticks
        rms = np.sqrt(self.sumsq / ticks)
        converged = np.full(self.n, np.nan)
        residual = np.full(self.n, np.nan)
        if self.windows:
            ends = np.array([w[0] for w in self.windows])
            sums = np.array([w[1] for w in self.windows])
            sqs = np.array([w[2] for w in self.windows])
            counts = np.array([w[3] for w in self.windows])
            starts = np.concatenate([[0], ends[:-1]])
            for u in range(self.n):
                clean = np.flatnonzero(starts > self.last_outside[u])  # windows wholly after the last excursion
                if clean.size == 0:
                    continue
                first = int(clean[0])
                converged[u] = starts[first] * tick_s
                cnt = counts[first:].sum()
                if cnt:
                    residual[u] = np.sqrt(sqs[first:, u].sum() / cnt)
        return StrategyMetrics(
            name=name, gain_dev_max_abs_pct=np.maximum(np.abs(self.max), np.abs(self.min)),
            gain_dev_min_pct=self.min, gain_dev_max_pct=self.max, gain_dev_pk_pk_pct=self.max - self.min,
            gain_dev_rms_pct=rms, gain_dev_mean_pct=mean, time_outside_band_pct=100.0 * self.outside / ticks,
            overvoltage_dev_max_abs_v=self.ov_max, sensor_fault_ticks=self.fault,
            out_of_range_ticks=self.out_of_range, cooler_energy_j=self.energy,
            hot_side_max_temp_c=self.hot_max, cooler_off_ticks=self.off, trim_v=self.trim_v,
            trim_converged_s=converged, trim_residual_rms_pct=residual)


def measure_dark_peak(rng, mean_gain, pulses, spread_fraction, *, explicit: bool = False):
    """The gain measured from the mean amplitude of ``pulses`` dark pulses.

    Each amplitude is Gaussian around the gain with a relative width
    ``spread_fraction``; the mean of ``N`` of them is Gaussian with the
    standard error ``spread G / sqrt(N)`` (statistics), which is drawn
    directly unless ``explicit``.

    Parameters
    ----------
    rng : numpy.random.Generator
    mean_gain : array_like
        True mean gain over the window.
    pulses : array_like of int
        Pulses captured.
    spread_fraction : float
        Width of the single-photon peak relative to the gain (1 sigma).
    explicit : bool
        Draw every pulse amplitude and average them (slow; for checks).

    Returns
    -------
    gain, standard_error : ndarray
        NaN where no pulse was captured.
    """
    g = np.asarray(mean_gain, dtype=float)
    n = np.asarray(pulses, dtype=np.int64)
    g, n = np.broadcast_arrays(g, n)
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.where(n > 0, spread_fraction * g / np.sqrt(np.maximum(n, 1)), np.nan)
    if explicit:
        out = np.array([float(np.mean(rng.normal(gi, spread_fraction * gi, size=int(ni)))) if ni > 0 else np.nan
                        for gi, ni in zip(g.ravel(), n.ravel())]).reshape(g.shape)
    else:
        out = np.where(n > 0, g + err * rng.standard_normal(g.shape), np.nan)
    return out, err


def _lags(setup: SimSetup):
    """Discrete first-order factors of the regulator and the filter (0 when they settle within a tick)."""
    s = setup.law.supply
    out = []
    for tau in (s.regulator_time_constant_s, s.series_resistor_ohm * s.filter_capacitance_f):
        a = float(np.exp(-setup.tick_s / tau)) if tau > 0 else 0.0
        if a > 1e-12:
            out.append(a)
    return out


def _apply_lags(v, lags, state):
    """Exact zero-order-hold first-order lags along the tick axis; ``state`` holds each lag's last output."""
    from scipy.signal import lfilter

    for j, a in enumerate(lags):
        if state[j] is None:
            state[j] = v[:, 0].copy()  # start settled
        v, _ = lfilter([1.0 - a], [1.0, -a], v, axis=1, zi=(a * state[j])[:, None])
        state[j] = v[:, -1].copy()
    return v


def _block_length(setup: SimSetup, units: int) -> int:
    return int(max(1, min(setup.ticks, BLOCK_ELEMENTS // max(units, 1), 1 << 16)))


def simulate_units(setup: SimSetup, units: UnitDraws, *, seed: int, strategies=None, firmware=None,
                   traces: bool = False, options: SimOptions = SimOptions(), progress=None) -> UnitsResult:
    """Run every strategy for a set of units over the whole scenario.

    Parameters
    ----------
    setup : SimSetup
    units : UnitDraws
        The units (:func:`~compensator.sim.chain.nominal_units` for the calibrated one).
    seed : int
        Seed of the sensor noise and the dark-peak statistics.
    strategies : sequence of str, optional
        Default: the setup's.
    firmware : PythonFirmware or CompiledFirmware, optional
        Default: the Python references.
    traces : bool
        Keep decimated traces of the first unit.
    options : SimOptions
    progress : callable, optional
        Called with the number of ticks done after each block.

    Returns
    -------
    UnitsResult
    """
    from compensator.sim.firmware import PythonFirmware

    strategies = tuple(s for s in STRATEGY_ORDER if s in (strategies or setup.strategies))
    if not strategies:
        raise ModelError("no strategy to simulate", key="strategies")
    if "compensated_cooled" in strategies and setup.pid is None:
        raise ModelError("the compensated_cooled strategy needs the cooler controller (a thermal profile)",
                         key="strategies")
    fw = firmware or PythonFirmware(setup.table, setup.pid)
    n = units.count
    rng = np.random.default_rng([int(seed), 0x5EED])
    stream = AmbientStream(setup.weather, setup.path, setup.tick_s)
    sipm, law, board = setup.sipm, setup.law, setup.board
    channel = board.temperature
    sup = supply_units(law.supply, units)
    r_series = sup.series_resistor_ohm if options.drop else 0.0
    measured = law.drop_correction == "measured" and options.quantise
    sense = board.current_sense
    target_ov = law.target_overvoltage_v
    g0 = setup.nominal_gain
    band = setup.band_pct
    acc = {s: _Acc(n, band, cooled=(s == "compensated_cooled")) for s in strategies}
    lags = _lags(setup)
    lag_state = {s: [None] * len(lags) for s in strategies}
    carried_current = {s: np.zeros(n, dtype=np.int64) for s in strategies}
    block = _block_length(setup, n)
    trim = setup.trim
    window_ticks = max(1, int(round(trim.window_s / setup.tick_s)))
    trim_codes = np.zeros(n, dtype=np.int64)
    vpc = law.supply.volts_per_code
    trim_limit = int(np.floor(trim.max_trim_v / abs(vpc)))
    win_weight = np.zeros(n)
    win_gain = np.zeros(n)
    win_stats = [np.zeros(n), np.zeros(n), 0]
    stride = max(1, int(np.ceil(setup.ticks / max(setup.trace_points, 1)))) if traces else 0
    trace_rows = {"time_s": [], "outdoor_temp_c": [], "enclosure_temp_c": [], "die_temp_c": [], "sensor_temp_c": []}
    trace_strat = {s: {"gain_dev_pct": [], "bias_v": [], "die_temp_c": []} for s in strategies}
    cooled = _CooledState(setup, units, fw, rng) if "compensated_cooled" in strategies else None
    done = 0
    while done < setup.ticks:
        length = min(block, setup.ticks - done)
        if "gain_trimmed" in strategies:
            length = min(length, window_ticks - done % window_ticks)
        amb = stream.next_block(length)
        factors = device_factors(sipm, amb.die_temp_c[None, :])
        drift_v = setup.breakdown_error_v + setup.ageing_v_per_s * amb.time_s[None, :]
        vbd = unit_breakdown_v(factors, units, drift_v)
        ov_target = target_ov(amb.die_temp_c)[None, :]
        rate = amb.photon_rate_hz[None, :]
        code = None
        if {"compensated", "gain_trimmed"} & set(strategies):
            noise = rng.standard_normal((n, length)) * setup.sensor_noise_k if options.noise else 0.0
            t_read = amb.sensor_temp_c[None, :] + setup.sensor_offset_k + noise
            code = sensor_adc_code(channel, t_read, units, quantise=options.quantise)
        picks = np.arange(-done % stride, length, stride) if stride else None
        for name in strategies:
            if name == "compensated_cooled":
                continue
            status = None
            if name == "uncompensated":
                dac = np.full((1, length), setup.fixed_dac_code)
            elif not options.quantise:
                dac = _continuous_dac(setup, channel, code)
            else:
                offset = trim_codes[:, None] if name == "gain_trimmed" else None
                dac, status = fw.lookup(code, None, offset)
            v_out = network_output_v(sup, dac, limits=options.limits)
            v_out = np.broadcast_to(v_out, (n, length))
            if lags:
                v_out = _apply_lags(v_out, lags, lag_state[name])
            bias, current = bias_at_sipm_v(sipm, factors, vbd, v_out, r_series, rate)
            if measured and name != "uncompensated":
                offset = trim_codes[:, None] if name == "gain_trimmed" else None
                bias, current, carried_current[name] = _measured_block(
                    setup, fw, sup, factors, vbd, rate, code, current, carried_current[name], offset, units, sense,
                    lags, lag_state[name], options, r_series)
            ov = bias - vbd
            gain = factors.gain_per_v * np.maximum(ov, 0.0)
            dev = 100.0 * (gain / g0 - 1.0)
            acc[name].add(dev, ov - ov_target, status, done)
            if name == "gain_trimmed":
                dcr = _dark_rate(sipm, factors, ov)
                win_weight += dcr.sum(axis=1)
                win_gain += (dcr * gain).sum(axis=1)
                win_stats[0] += dev.sum(axis=1)
                win_stats[1] += np.einsum("ij,ij->i", dev, dev)
                win_stats[2] += length
            if stride:
                trace_strat[name]["gain_dev_pct"].append(dev[0, picks])
                trace_strat[name]["bias_v"].append(bias[0, picks])
                trace_strat[name]["die_temp_c"].append(amb.die_temp_c[picks])
        if cooled is not None:
            dev, bias, die = cooled.run_block(amb, acc["compensated_cooled"], done, options)
            if stride:
                trace_strat["compensated_cooled"]["gain_dev_pct"].append(dev[0, picks])
                trace_strat["compensated_cooled"]["bias_v"].append(bias[0, picks])
                trace_strat["compensated_cooled"]["die_temp_c"].append(die[0, picks])
        if stride:
            trace_rows["time_s"].append(amb.time_s[picks])
            trace_rows["outdoor_temp_c"].append(amb.outdoor_temp_c[picks])
            trace_rows["enclosure_temp_c"].append(amb.enclosure_temp_c[picks])
            trace_rows["die_temp_c"].append(amb.die_temp_c[picks])
            trace_rows["sensor_temp_c"].append(amb.sensor_temp_c[picks])
        done += length
        if "gain_trimmed" in strategies and done % window_ticks == 0:
            a = acc["gain_trimmed"]
            a.windows.append((done, win_stats[0].copy(), win_stats[1].copy(), win_stats[2]))
            window_s = win_stats[2] * setup.tick_s
            mean_dcr = win_weight / win_stats[2]
            expected = np.minimum(mean_dcr, trim.captured_pulse_rate_hz) * window_s
            pulses = rng.poisson(expected) if options.noise else np.rint(expected).astype(np.int64)
            with np.errstate(invalid="ignore", divide="ignore"):
                mean_gain = np.where(win_weight > 0, win_gain / win_weight, np.nan)
            spread = 1e-2 * trim.single_pe_spread_pct if options.noise else 0.0
            measured_gain, _ = measure_dark_peak(rng, mean_gain, pulses, spread)
            ok = np.isfinite(measured_gain)
            rel = np.where(ok, measured_gain / g0 - 1.0, 0.0)
            step = np.rint(-trim.loop_gain * rel * law.overvoltage_v / vpc).astype(np.int64)
            trim_codes = np.clip(trim_codes + step, -trim_limit, trim_limit)
            a.trim_v = trim_codes * vpc
            win_weight[:] = 0.0
            win_gain[:] = 0.0
            win_stats = [np.zeros(n), np.zeros(n), 0]
        if progress is not None:
            progress(length)
    metrics = {s: acc[s].metrics(s, setup.ticks, setup.tick_s) for s in strategies}
    tr = None
    if stride:
        cat = lambda xs: np.concatenate(xs) if xs else np.zeros(0)  # noqa: E731
        tr = Traces(**{k: cat(v) for k, v in trace_rows.items()},
                    strategies={s: {k: cat(v) for k, v in d.items()} for s, d in trace_strat.items()}, stride=stride)
    return UnitsResult(metrics, tr, setup.ticks, setup.tick_s, getattr(fw, "name", "python"))


def _dark_rate(sipm, factors, ov):
    rel = np.maximum(ov, 0.0) * (1.0 / sipm.dark_ref_overvoltage_v)
    n = sipm.dark_overvoltage_exponent
    return factors.dark_rate_hz_at_ref_ov * (rel if n == 1.0 else rel ** n)


def _continuous_dac(setup, channel, position):
    """The law applied to the continuous reading, as a continuous DAC code (no quantisation)."""
    temp = channel.temp_at(position)
    s = setup.law.supply
    return (setup.law.unclamped_output_v(temp) - s.intercept_v) / s.volts_per_code


def _measured_block(setup, fw, sup, factors, vbd, rate, code, current, carried, offset, units, sense, lags,
                    lag_state, options, r_series, max_iterations=60):
    """Bias and current with the drop correction from the current read one tick earlier (exact per block)."""
    n, length = code.shape
    start_state = [None if s is None else s.copy() for s in lag_state]
    read = np.empty_like(code)
    read[:, 0] = carried
    read[:, 1:] = current_adc_code(sense, current, units)[:, :-1]
    for _ in range(max_iterations):
        dac, _ = fw.lookup(code, read, offset)
        v_out = np.broadcast_to(network_output_v(sup, dac, limits=options.limits), (n, length))
        state = [None if s is None else s.copy() for s in start_state]
        if lags:
            v_out = _apply_lags(v_out, lags, state)
        bias, current = bias_at_sipm_v(setup.sipm, factors, vbd, v_out, r_series, rate)
        codes = current_adc_code(sense, current, units)
        new = np.empty_like(read)
        new[:, 0] = carried
        new[:, 1:] = codes[:, :-1]
        if np.array_equal(new, read):
            lag_state[:] = state
            return bias, current, codes[:, -1].copy()
        read = new
    raise ModelError("the measured drop correction did not settle within a block (R dI/dV too large?)",
                     key="drop_correction")


class _ScalarPid:
    """One :class:`~compensator.firmware.pid.FixedPid` (the reference itself) behind the bank interface."""

    def __init__(self, coeffs):
        from compensator.firmware.pid import FixedPid

        self.pid = FixedPid(coeffs)

    def reset(self, output_count=None):
        self.pid.reset(None if output_count is None else int(np.asarray(output_count).ravel()[0]))

    def step(self, setpoint_count, measurement_count):
        return self.pid.step(int(setpoint_count), int(measurement_count))


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

    def code(temp_c: float) -> int:
        t = temp_c + shift
        if rtd:
            t = t + u["rtd_offset_k"] + u["rtd_slope"] * abs(t)
        r = float(sensor.resistance_ohm(t))
        if ntc_dev:
            r = r * (1.0 + u["ntc_r25"]) * float(np.exp(u["ntc_beta"] * beta * (1.0 / (t + ZERO_C_IN_K) - 1.0 / T25_K)))
        frac = r / (r + r_ref) if low else r_ref / (r + r_ref)
        x = math.floor(frac * scale)
        return 0 if x < 0 else full if x > full else int(x)

    return code


class _CooledState:
    """The cooled strategy's per-unit state, stepped tick by tick (plain floats for one unit)."""

    def __init__(self, setup: SimSetup, units: UnitDraws, fw, rng):
        from compensator.sim.firmware import PythonFirmware

        self.setup = setup
        self.units = units
        self.fw = fw
        self.rng = rng
        self.n = units.count
        self.scalar = self.n == 1
        self.pid = _ScalarPid(setup.pid) if self.scalar and isinstance(fw, PythonFirmware) else fw.pid(self.n)
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
        self.lag_state = [None] * len(_lags(setup))

    def _start(self, enclosure_c):
        """Settled at the setpoint (controller at the steady current) if the cooler can hold it, else at rest."""
        from compensator.loops.plants import cooler_operating_point, cooler_steady_state

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
        s = self.setup
        n, length = self.n, amb.time_s.size
        if self.tc is None:
            self._start(float(amb.enclosure_temp_c[0]))
        noise = self.rng.standard_normal((n, length)) * s.sensor_noise_k if options.noise else np.zeros((n, length))
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
        # The bias does not act back on the cooler: the rest of the chain runs on the whole block at once.
        factors = device_factors(s.sipm, die)
        vbd = unit_breakdown_v(factors, self.units, s.breakdown_error_v + s.ageing_v_per_s * amb.time_s[None, :])
        rate = amb.photon_rate_hz[None, :]
        dac, status = fw.lookup(codes)
        v_out = network_output_v(self.sup, dac, limits=options.limits)
        lags = _lags(s)
        if lags:
            v_out = _apply_lags(v_out, lags, self.lag_state)
        r_series = self.sup.series_resistor_ohm if options.drop else 0.0
        bias, current = bias_at_sipm_v(s.sipm, factors, vbd, v_out, r_series, rate)
        if s.law.drop_correction == "measured":
            bias, current, self.carried_current = _measured_block(
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

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
squares, ticks outside the band), from ``settle_s`` on (the time the gain
trim needs to converge from a unit's first error); only decimated traces
are kept.
"""

from __future__ import annotations

import numpy as np

from compensator.errors import ModelError
from compensator.sim.blocks import (
    apply_lags,
    continuous_dac,
    dark_rate_hz,
    measure_dark_peak,
    measured_drop_block,
    supply_lags,
)
from compensator.sim.chain import (
    UnitDraws,
    bias_at_sipm_v,
    device_factors,
    network_output_v,
    sensor_adc_code,
    supply_units,
    unit_breakdown_v,
)
from compensator.sim.cooled import CooledState
from compensator.sim.environment import AmbientStream
from compensator.sim.metrics import RunningMetrics, SimOptions, StrategyMetrics, Traces, UnitsResult
from compensator.sim.setup import SimSetup

__all__ = ["SimOptions", "StrategyMetrics", "Traces", "UnitsResult", "simulate_units", "measure_dark_peak",
           "STRATEGY_ORDER"]

STRATEGY_ORDER = ("uncompensated", "compensated", "compensated_cooled", "gain_trimmed")

#: Largest number of unit-ticks in one block: its arrays (256 kB each) stay in the cache (measured: larger blocks run slower).
BLOCK_ELEMENTS = 1 << 15


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
    # One generator per purpose: a strategy's noise does not depend on which other strategies run.
    rng = np.random.default_rng([int(seed), 0x5EED])
    trim_rng = np.random.default_rng([int(seed), 0x7819])
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
    settle = min(int(round(setup.settle_s / setup.tick_s)), setup.ticks - 1)
    acc = {s: RunningMetrics(n, band, cooled=(s == "compensated_cooled"), settle=settle) for s in strategies}
    lags = supply_lags(setup)
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
    cooled = (CooledState(setup, units, fw, np.random.default_rng([int(seed), 0xC001]))
              if "compensated_cooled" in strategies else None)
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
            # tick-major draws: the same numbers reach the same ticks however the run is cut into blocks
            noise = rng.standard_normal((length, n)).T * setup.sensor_noise_k if options.noise else 0.0
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
                dac = continuous_dac(setup, channel, code)
            else:
                offset = trim_codes[:, None] if name == "gain_trimmed" else None
                dac, status = fw.lookup(code, None, offset)
            v_out = network_output_v(sup, dac, limits=options.limits)
            v_out = np.broadcast_to(v_out, (n, length))
            if lags:
                v_out = apply_lags(v_out, lags, lag_state[name])
            bias, current = bias_at_sipm_v(sipm, factors, vbd, v_out, r_series, rate, with_current=measured)
            if measured and name != "uncompensated":
                offset = trim_codes[:, None] if name == "gain_trimmed" else None
                bias, current, carried_current[name] = measured_drop_block(
                    setup, fw, sup, factors, vbd, rate, code, current, carried_current[name], offset, units, sense,
                    lags, lag_state[name], options, r_series)
            ov = bias - vbd
            gain = np.maximum(ov, 0.0)
            gain *= factors.gain_per_v
            dev = gain * (100.0 / g0)
            dev -= 100.0
            if name == "gain_trimmed":
                dcr = dark_rate_hz(sipm, factors, ov)
            ov -= ov_target  # from here on, the overvoltage's deviation from the law's target
            acc[name].add(dev, ov, status, done)
            if name == "gain_trimmed":
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
            pulses = trim_rng.poisson(expected) if options.noise else np.rint(expected).astype(np.int64)
            with np.errstate(invalid="ignore", divide="ignore"):
                mean_gain = np.where(win_weight > 0, win_gain / win_weight, np.nan)
            spread = 1e-2 * trim.single_pe_spread_pct if options.noise else 0.0
            measured_gain, _ = measure_dark_peak(trim_rng, mean_gain, pulses, spread)
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

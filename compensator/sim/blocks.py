"""Pieces of the signal chain over a block of ticks: supply lags, the measured drop correction, the dark peak.

Shared by the whole-run engine (:mod:`compensator.sim.engine`), the cooled
strategy (:mod:`compensator.sim.cooled`) and the one-unit plant
(:mod:`compensator.sim.plant`).
"""

from __future__ import annotations

import numpy as np

from compensator.errors import ModelError
from compensator.sim.chain import bias_at_sipm_v, current_adc_code, network_output_v

__all__ = ["measure_dark_peak", "supply_lags", "apply_lags", "dark_rate_hz", "continuous_dac",
           "measured_drop_block"]


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


def supply_lags(setup) -> list[float]:
    """Discrete first-order factors of the regulator and the filter (left out when they settle within a tick).

    Parameters
    ----------
    setup : SimSetup
        Gives the supply's time constants and the tick.
    """
    s = setup.law.supply
    out = []
    for tau in (s.regulator_time_constant_s, s.series_resistor_ohm * s.filter_capacitance_f):
        a = float(np.exp(-setup.tick_s / tau)) if tau > 0 else 0.0
        if a > 1e-12:
            out.append(a)
    return out


def apply_lags(v, lags, state):
    """Exact zero-order-hold first-order lags along the tick axis.

    Parameters
    ----------
    v : ndarray, shape (units, ticks)
        Input, e.g. the supply's set output, volt.
    lags : sequence of float
        Discrete factors from :func:`supply_lags`.
    state : list
        Each lag's last output (``None``: start settled at the first input); updated in place.

    Returns
    -------
    ndarray
        The lagged output, same shape.
    """
    from scipy.signal import lfilter

    for j, a in enumerate(lags):
        if state[j] is None:
            state[j] = v[:, 0].copy()  # start settled
        v, _ = lfilter([1.0 - a], [1.0, -a], v, axis=1, zi=(a * state[j])[:, None])
        state[j] = v[:, -1].copy()
    return v


def dark_rate_hz(sipm, factors, ov):
    """Dark count rate at an overvoltage (the profile's power law in it), hertz.

    Parameters
    ----------
    sipm : Sipm
        The sensor model (reference overvoltage and exponent).
    factors : DeviceFactors
        Temperature factors of the units (dark rate at the reference overvoltage).
    ov : ndarray
        Overvoltage, volt (none below breakdown).
    """
    rel = np.maximum(ov, 0.0) * (1.0 / sipm.dark_ref_overvoltage_v)
    n = sipm.dark_overvoltage_exponent
    return factors.dark_rate_hz_at_ref_ov * (rel if n == 1.0 else rel ** n)


def continuous_dac(setup, channel, position):
    """The law applied to the continuous reading, as a continuous DAC code (no quantisation).

    Parameters
    ----------
    setup : SimSetup
        Gives the law and its supply.
    channel : TemperatureChannel
        Maps the reading to a temperature.
    position : ndarray
        Continuous ADC position read.
    """
    temp = channel.temp_at(position)
    s = setup.law.supply
    return (setup.law.unclamped_output_v(temp) - s.intercept_v) / s.volts_per_code


def measured_drop_block(setup, fw, sup, factors, vbd, rate, code, current, carried, offset, units, sense, lags,
                        lag_state, options, r_series, max_iterations=60):
    """Bias and current with the drop correction from the current read one tick earlier (exact per block).

    The block is iterated until the current codes read repeat; then it is
    exactly the tick-by-tick result.

    Parameters
    ----------
    setup : SimSetup
    fw : PythonFirmware or CompiledFirmware
        The firmware's lookup.
    sup : SupplyUnits
        The units' supply networks.
    factors : DeviceFactors
        Temperature factors of the units over the block.
    vbd : ndarray
        Breakdown voltage, volt.
    rate : ndarray
        Photon rate, hertz.
    code : ndarray of int
        Temperature ADC codes, shape (units, ticks).
    current : ndarray
        SiPM current without the correction (the first guess), ampere.
    carried : ndarray of int
        Current code read at the last tick of the previous block.
    offset : ndarray of int or None
        DAC code trim.
    units : UnitDraws
    sense : CurrentSense
        The board's current-sense channel.
    lags : sequence of float
        From :func:`supply_lags`.
    lag_state : list
        The lags' state at the block's start; updated in place when the block settles.
    options : SimOptions
    r_series : float or ndarray
        Series resistor, ohm.
    max_iterations : int
        Iterations before giving up.

    Returns
    -------
    bias_v, current_a, last_code : ndarray
        Bias at the SiPM, its current and the current code of the block's last tick.
    """
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
            v_out = apply_lags(v_out, lags, state)
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

"""The board's whole chain with its error sources: die temperature to the gain the SiPM holds.

One model of the chain, evaluated on arrays (Monte Carlo samples x
temperatures)::

    die temperature -> sensor temperature (tolerance, self-heating, sensor-to-die, lag)
    -> sensor resistance -> divider (reference resistor) -> ADC (reference unless
    ratiometric, quantisation) -> temperature the firmware reads -> law -> DAC code
    (quantisation) -> supply output (DAC reference, network resistors) -> bias at
    the SiPM (series-resistor drop from the real current) -> gain of the real
    device (breakdown and tempco calibration errors)

Each error source of a board is an :class:`ErrorSource` (a parameter, its
budget term, its distribution and scale); :func:`chain_gain_error_pct` takes
deviations of those parameters and returns the gain (or response) error.
The budget (:mod:`compensator.law.budget`) perturbs the sources one at a time
and draws them all at once (Monte Carlo); :func:`gain_error_at_light_pct`
asks the chain about a light level other than the law's.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError
from compensator.law.laws import CompensationLaw
from compensator.physics.sensors import RTD_TOLERANCE_CLASSES, T25_K, RtdSensor
from compensator.physics.sipm import steady_current_a
from compensator.physics.supply import network_output_v, solve_operating_point_v

__all__ = ["ErrorSource", "chain_gain_error_pct", "error_sources", "gain_error_at_light_pct", "sensor_lag_k"]


@dataclass(frozen=True)
class ErrorSource:
    """One error source of the chain.

    Attributes
    ----------
    key : str
        Parameter perturbed in the chain (a key of :func:`chain_gain_error_pct`'s deviations).
    term : str
        Budget term it belongs to (a key of :data:`compensator.law.budget.TERM_NAMES`).
    dist : {"uniform", "normal"}
        Rectangular within +-``scale``, or Gaussian with one sigma ``scale``.
    scale : float
        The limit or the one sigma, in the parameter's unit.
    calibrates : bool
        False when a one-point calibration (made at steady state) does not see it.
    """

    key: str
    term: str
    dist: str
    scale: float
    calibrates: bool = True


def _ppm_sources(pairs):
    """Sources of drift coefficients given as ``(key, term, ppm_per_k)``, those that are not zero."""
    return [ErrorSource(key, term, "uniform", ppm) for key, term, ppm in pairs if ppm > 0]


def sensor_lag_k(sensor, ramp_k_per_min: float) -> float:
    """Lag of the reading behind the die at a steady ramp: ``r (tau_sensor + tau_path)``, kelvin.

    Parameters
    ----------
    sensor : RtdSensor or NtcSensor
        The temperature sensor, with its time constants.
    ramp_k_per_min : float
        Enclosure ramp, kelvin per minute.
    """
    return ramp_k_per_min / 60.0 * (sensor.time_constant_s + sensor.die_to_sensor_time_constant_s)


def error_sources(law: CompensationLaw, board, current_uncertainty_pct: float, ramp_k_per_min: float
                  ) -> list[ErrorSource]:
    """Every error source of the board's chain whose size is not zero.

    Parameters
    ----------
    law : CompensationLaw
        The law (its supply, SiPM calibration, drop correction and current channel).
    board : BoardProfile
        The board (temperature channel).
    current_uncertainty_pct : float
        Accuracy of the modelled SiPM current for the modelled drop correction, percent.
    ramp_k_per_min : float
        Enclosure ramp of the sensor-lag term, kelvin per minute.

    Returns
    -------
    list of ErrorSource
    """
    sensor = board.temperature.sensor
    fe = board.temperature.front_end
    supply = law.supply
    dac = supply.dac
    bd = law.sipm.breakdown
    out = []
    if isinstance(sensor, RtdSensor):
        offset_k, slope = RTD_TOLERANCE_CLASSES[sensor.tolerance_class]
        out += [ErrorSource("rtd_offset_k", "sensor_tolerance", "uniform", offset_k),
                ErrorSource("rtd_slope", "sensor_tolerance", "uniform", slope)]
    else:
        out += [ErrorSource("ntc_r25", "sensor_tolerance", "uniform", 1e-2 * sensor.r25_tolerance_pct),
                ErrorSource("ntc_beta", "sensor_tolerance", "uniform", 1e-2 * sensor.beta_tolerance_pct)]
    out += [ErrorSource("self_heating_k", "self_heating", "uniform", sensor.self_heating_k),
            ErrorSource("sensor_to_die_k", "sensor_to_die", "uniform", sensor.sensor_to_die_k)]
    lag_k = sensor_lag_k(sensor, ramp_k_per_min)
    if lag_k > 0:
        out.append(ErrorSource("sensor_lag_k", "sensor_lag", "uniform", lag_k, calibrates=False))
    out += [ErrorSource("adc_reference", "adc_reference", "uniform", 1e-2 * fe.adc_reference_tolerance_pct),
            *([] if fe.ratiometric else
              [ErrorSource("excitation", "excitation", "uniform", 1e-2 * fe.excitation_tolerance_pct)]),
            ErrorSource("reference_resistor", "divider_resistor", "uniform", 1e-2 * fe.reference_resistor_tolerance_pct),
            ErrorSource("dac_reference", "dac_reference", "uniform", 1e-2 * dac.reference_tolerance_pct)]
    if not fe.ratiometric:
        out += _ppm_sources([("adc_reference_drift", "adc_reference_drift", fe.adc_reference_tempco_ppm_per_k),
                             ("excitation_drift", "excitation_drift", fe.excitation_tempco_ppm_per_k)])
    out += _ppm_sources([("reference_resistor_drift", "divider_resistor_drift", fe.reference_resistor_tempco_ppm_per_k),
                         ("dac_reference_drift", "dac_reference_drift", dac.reference_tempco_ppm_per_k)])
    for key, term, scale in (("adc_offset", "adc_offset", fe.adc_offset_lsb),
                             ("adc_gain", "adc_gain_error", 1e-2 * fe.adc_gain_error_pct),
                             ("dac_offset", "dac_offset", dac.offset_lsb),
                             ("dac_gain", "dac_gain_error", 1e-2 * dac.gain_error_pct)):
        if scale > 0:
            out.append(ErrorSource(key, term, "uniform", scale))
    tol = 1e-2 * supply.resistor_tolerance_pct
    drift = supply.resistor_drift_ppm_per_k
    if supply.topology == "feedback_injection":
        out += [ErrorSource(k, "supply_network", "uniform", tol) for k in ("r1", "r2", "r3")]
        out += _ppm_sources([(f"{k}_drift", "supply_network_drift", drift) for k in ("r1", "r2", "r3")])
        if supply.feedback_tolerance_pct > 0:
            out.append(ErrorSource("feedback", "regulator_reference", "uniform", 1e-2 * supply.feedback_tolerance_pct))
        out += _ppm_sources([("feedback_drift", "regulator_reference_drift", supply.feedback_tempco_ppm_per_k)])
    else:
        out += [ErrorSource("amp_gain", "supply_network", "uniform", tol)]
        # The amplifier's gain is a ratio of two resistors: each departs by up to the drift bound.
        out += _ppm_sources([("amp_gain_drift", "supply_network_drift", 2.0 * drift)])
    out += [ErrorSource("breakdown_v", "breakdown_calibration", "normal", bd.breakdown_err_v),
            ErrorSource("tempco_mv_per_k", "tempco_calibration", "normal", bd.tempco_err_mv_per_k)]
    if law.breakdown_offset_err_v > 0:
        out.append(ErrorSource("breakdown_definition_v", "breakdown_definition", "normal", law.breakdown_offset_err_v))
    if law.kind == "constant_response" and law.scintillator.light_yield_tempco_err_pct_per_k > 0:
        out.append(ErrorSource("light_yield_tempco", "light_yield_tempco", "normal",
                           law.scintillator.light_yield_tempco_err_pct_per_k))
    if law.drop_correction == "modelled" and supply.series_resistor_ohm > 0:
        out.append(ErrorSource("current", "series_resistor_drop", "uniform", 1e-2 * current_uncertainty_pct))
    elif law.drop_correction == "measured" and supply.series_resistor_ohm > 0:
        sense = law.current_sense
        out += [ErrorSource("isense_gain", "series_resistor_drop", "uniform", 1e-2 * sense.gain_tolerance_pct),
                ErrorSource("isense_reference", "series_resistor_drop", "uniform", 1e-2 * sense.reference_tolerance_pct),
                ErrorSource("isense_offset_a", "series_resistor_drop", "uniform", sense.offset_a)]
        out += _ppm_sources([("isense_gain_drift", "current_sense_drift", sense.gain_tempco_ppm_per_k)])
        if sense.offset_drift_a_per_k > 0:
            out.append(ErrorSource("isense_offset_drift", "current_sense_drift", "uniform", sense.offset_drift_a_per_k))
    return out


def _operating_point_v(v_out_of, v_start, r_series, real, t_die, photon_rate_hz, scale=1.0):
    """The bias at the SiPM: ``v = v_out_of(I) - R I`` with ``I = scale * I_model(v)`` (tolerance 1e-10 V)."""
    return solve_operating_point_v(v_out_of, v_start, r_series, real, t_die, photon_rate_hz, current_scale=scale,
                                   tol_v=1e-10, max_iter=60)


def _electronics_dt_k(board, t_die):
    """Distance of the electronics from the temperature of their tolerances, kelvin."""
    return board.electronics_temp_c(t_die) - board.electronics_ref_temp_c


def chain_gain_error_pct(law: CompensationLaw, board, dev: dict, temp_c, quantise: bool, series_ohm=None,
                         photon_rate_hz=None):
    """Gain (or response) error, percent, of the real device through the whole chain.

    Parameters
    ----------
    law : CompensationLaw
        The law the firmware runs.
    board : BoardProfile
        The board (temperature channel, electronics temperature).
    dev : dict
        Source keys (:attr:`ErrorSource.key`) -> deviations in the parameter's
        own unit (arrays broadcasting against ``temp_c``); missing keys are 0.
    temp_c : array_like
        True die temperatures, degree Celsius.
    quantise : bool
        Include ADC and DAC quantisation (the firmware's integer path).
    series_ohm : float, optional
        Series resistance to use instead of the supply's, ohm (0: no drop).
    photon_rate_hz : float, optional
        The real light level, hertz (default: the one the law assumes).

    Returns
    -------
    ndarray
        ``100 (G / G0 - 1)``, shaped like ``temp_c`` broadcast against the deviations.
    """
    g = lambda k: dev.get(k, 0.0)  # noqa: E731
    channel = board.temperature
    sensor, fe = channel.sensor, channel.front_end
    t_die = np.asarray(temp_c, dtype=float)
    dtb = _electronics_dt_k(board, t_die)
    drift = lambda k: 1e-6 * g(k) * dtb  # noqa: E731  (ppm per kelvin times the electronics' distance)
    # Temperature at the sensor.
    t_s = t_die + g("sensor_to_die_k") + g("self_heating_k") - g("sensor_lag_k")
    if isinstance(sensor, RtdSensor):
        t_s = t_s + g("rtd_offset_k") + g("rtd_slope") * np.abs(t_s)
        r = sensor.resistance_ohm(t_s)
    else:
        r = sensor.resistance_ohm(t_s)
        beta = sensor.beta_k if sensor.beta_k is not None else float(sensor.effective_beta_k(25.0))
        r = r * (1.0 + g("ntc_r25")) * np.exp(g("ntc_beta") * beta * (1.0 / (t_s + ZERO_C_IN_K) - 1.0 / T25_K))
    r_ref = fe.reference_resistor_ohm * (1.0 + g("reference_resistor") + drift("reference_resistor_drift"))
    frac = r / (r + r_ref) if fe.sensor_position == "low" else r_ref / (r + r_ref)
    # The ADC reads (excitation x divider fraction) against its reference: both errors count unless ratiometric.
    span = 1.0 if fe.ratiometric else fe.span_fraction * (
        (1.0 + g("adc_reference") + drift("adc_reference_drift")) / (1.0 + g("excitation") + drift("excitation_drift")))
    x = frac / span * (1 << fe.adc_bits) * (1.0 + g("adc_gain")) + g("adc_offset") + g("adc_inl")
    if quantise:
        code = np.clip(np.floor(x), 0, fe.full_scale_code)
        t_read = channel.temp_at(code + 0.5)
    else:
        t_read = channel.temp_at(x)
    supply = law.supply
    v_law = law.output_v(t_read)
    dac = (v_law - supply.intercept_v) / supply.volts_per_code
    if quantise:
        dac = np.clip(np.rint(dac), 0, supply.dac.full_scale_code)
    dac_error = (1.0 + g("dac_reference") + drift("dac_reference_drift")) * (1.0 + g("dac_gain")) - 1.0
    if supply.topology == "feedback_injection":
        resistor_errors = tuple(g(k) + drift(f"{k}_drift") for k in ("r1", "r2", "r3"))
    else:
        resistor_errors = (g("amp_gain") + drift("amp_gain_drift"), 0.0, 0.0)
    feedback_error = g("feedback") + drift("feedback_drift")
    dac_offset = g("dac_offset") + g("dac_inl")

    def network_v(code):
        return network_output_v(supply, code, dac_error=dac_error, dac_offset_lsb=dac_offset,
                                resistor_errors=resistor_errors, feedback_error=feedback_error)

    # The real device.
    sipm = law.sipm
    bd = sipm.breakdown
    real = replace(sipm, breakdown=replace(
        bd, breakdown_v_at_ref=bd.breakdown_v_at_ref + g("breakdown_v") + g("breakdown_definition_v"),
        tempco_mv_per_k=bd.tempco_mv_per_k + g("tempco_mv_per_k")))
    r_series = supply.series_resistor_ohm if series_ohm is None else series_ohm
    rate = law.photon_rate_hz if photon_rate_hz is None else photon_rate_hz
    v_out = network_v(dac)
    v = v_out
    if r_series > 0 and law.drop_correction == "measured":
        sense = law.current_sense
        per_code = supply.series_resistor_ohm * sense.lsb_a / supply.volts_per_code  # DAC codes per current code
        errs = (g("isense_gain") + drift("isense_gain_drift"), g("isense_reference"),
                g("isense_offset_a") + g("isense_offset_drift") * dtb)

        def corrected_v(current):
            code = np.clip(sense.continuous_code(current, *errs), 0, sense.full_scale_code)
            return network_v(dac + per_code * code)

        # The firmware reads the current at the operating point; first without quantisation ...
        v = _operating_point_v(corrected_v, v_out, r_series, real, t_die, rate)
        if quantise:
            # ... then one reading there, quantised, and one integer correction (rounded half up).
            code = sense.adc_code(steady_current_a(real, v, t_die, rate), *errs)
            fixed = network_v(np.clip(dac + np.floor(per_code * code + 0.5), 0, supply.dac.full_scale_code))
            v = _operating_point_v(lambda i: fixed, v, r_series, real, t_die, rate)
    elif r_series > 0:
        v = _operating_point_v(lambda i: v_out, v_out, r_series, real, t_die, rate, 1.0 + g("current"))
    held = law.response(real, v, t_die, g("light_yield_tempco"))
    return 100.0 * (held / law.reference_response() - 1.0)


def gain_error_at_light_pct(law: CompensationLaw, board, photon_rate_hz, temp_c, *, deviations=None,
                            quantise=True):
    """Gain error of the board's whole chain when the real light level differs from the law's.

    With ``drop_correction="modelled"`` the output carries the drop of the
    current modelled at the law's ``photon_rate_hz``; with ``"measured"`` the
    firmware corrects the drop of the current it reads at the real light level.

    Parameters
    ----------
    law : CompensationLaw
    board : BoardProfile
    photon_rate_hz : float
        Real photon rate on the SiPM, hertz.
    temp_c : array_like
        Die temperatures, degree Celsius.
    deviations : dict, optional
        Component errors by source key (e.g. ``{"isense_gain": 0.005}``),
        each in its parameter's unit; default none.
    quantise : bool
        Include ADC and DAC quantisation (the firmware's integer path).

    Returns
    -------
    ndarray
        Gain error, percent.

    Raises
    ------
    ModelError
        A negative or non-finite photon rate.
    """
    if not np.isfinite(photon_rate_hz) or photon_rate_hz < 0:
        raise ModelError(f"must be a non-negative number, got {photon_rate_hz!r}", key="photon_rate_hz")
    return chain_gain_error_pct(law, board, dict(deviations or {}), np.asarray(temp_c, dtype=float),
                                 bool(quantise), photon_rate_hz=float(photon_rate_hz))

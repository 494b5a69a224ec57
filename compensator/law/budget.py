"""Gain-error budget of a compensation law on a board.

One model of the whole chain, evaluated on arrays (Monte Carlo samples x
temperatures)::

    die temperature -> sensor temperature (tolerance, self-heating, sensor-to-die)
    -> sensor resistance -> divider (reference resistor) -> ADC (reference unless
    ratiometric, quantisation) -> temperature the firmware reads -> law -> DAC code
    (quantisation) -> supply output (DAC reference, network resistors) -> bias at
    the SiPM (series-resistor drop from the real current) -> gain of the real
    device (breakdown and tempco calibration errors)

The gain error is ``100 (G / G0 - 1)`` percent, ``G0`` the gain at the target
overvoltage at the breakdown reference temperature. For one small error,
``dG/G = (dV - (dVbd/dT) dT) / Vov`` (common practice).

**First-order propagation.** Each error source is set to its limit, ``+a``
and ``-a``, with everything else nominal and no quantisation; half the
difference is its signed contribution at each temperature of the operating
range. Quantisation is analytic: half an ADC code of temperature times the
law's slope, and half a DAC LSB. Each term is reported over the range (its
largest value) both as a *limit* and as a standard uncertainty (GUM
conventions): a tolerance ``+-a`` is rectangular, ``u = a / sqrt(3)``; a
calibration uncertainty is Gaussian with the profile's one-sigma value, its
limit taken as three sigma. The root-sum-square is the combined standard
uncertainty; the worst case adds every limit (and the systematic terms) at
each temperature.

Self-heating (always warming, by an amount that depends on excitation and
air flow) and the sensor-to-die offset (either sign, set by the mounting)
are both taken as unknown constant temperature offsets within +- the profile
value (rectangular): their typical part is what a one-point calibration
removes.

**Systematic terms** are not random: the law's own residual (the
constant-overvoltage law leaves the cell-capacitance coefficient
uncompensated) and the series-resistor drop when it is not corrected.

**Fixed offsets and one-point calibration.** A one-point gain calibration at
``calibration_temp_c`` trims the bias by a constant so the gain is right
there. It removes any error that is a constant *voltage* (a breakdown
offset, most of a reference or resistor error, a constant temperature offset
times a constant tempco) and leaves the part that changes with temperature
(tempco error, the Beta tolerance of an NTC, the slope part of an RTD class,
drift of the drop with dark rate). Quantisation is not removed: the
calibration itself sees one quantisation error, which adds to the one at
every other temperature. Both "as built" and "after calibration" figures are
reported.

**Series-resistor drop.** With the modelled correction, what is left is the
error of the modelled current; the model is assumed good to
``+-current_uncertainty_pct`` (rectangular; an assumption: dark rates of one
device type commonly spread by tens of percent, common practice). With the
measured correction (``drop_correction="measured"``) the firmware adds
``R I_measured`` at run time; what is left is the error of the current
channel at the law's ``photon_rate_hz``: its sense-gain and ADC-reference
tolerances (relative, rectangular), its input offset (rectangular, either
sign), half a code of the current ADC and half a DAC LSB for rounding the
correction (analytic, like the other quantisation terms). Without correction
the whole drop is a systematic term.

**Electronics drift.** The board's electronics sit at a temperature of
their own (the profile's ``electronics`` section: linear in the SiPM
temperature between the ends of the range, by default the same). Each
temperature coefficient (ppm per kelvin: DAC and ADC references, the
excitation, the divider's reference resistor, the network resistors as far
as they do not track, the regulator's feedback reference, the current-sense
gain; and the current-sense offset drift) is a bound, rectangular, acting in
proportion to the electronics' distance from ``electronics.ref_temp_c``;
what is left after a one-point calibration is the drift from the calibration
temperature. Static converter errors (ADC and DAC offset and gain error)
are rectangular bounds like the tolerances; integral non-linearity changes
from code to code, so it is charged like quantisation (analytic, not removed
by calibration).

**Sensor lag.** Under an enclosure ramp of ``ramp_k_per_min`` the sensor
reads the die late by ``r (tau_sensor + tau_die_to_sensor)`` (two first-order
lags in series, steady ramp); the ramp can go either way, so the lag is a
rectangular temperature offset within +- that bound. A calibration is made
at steady state and does not see it.

**Other laws.** For the ``constant_response`` law the figure is the error of
the response (gain x PDE x crosstalk x light yield) rather than of the gain,
with the light-yield coefficient's uncertainty as a term of its own; a
breakdown shifted between definitions adds the offset's uncertainty.

**Monte Carlo** (seeded, vectorised over samples): every source drawn from
its distribution at once, through the full non-linear chain *with*
quantisation, the true temperature dithered within an ADC code. Its standard
deviation at each temperature should agree with the first-order RSS, and its
mean with the systematic terms.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError
from compensator.law.laws import CompensationLaw, check_law_in_range
from compensator.physics.sensors import RTD_TOLERANCE_CLASSES, T25_K, RtdSensor
from compensator.physics.sipm import Sipm, cell_capacitance_f, steady_current_a
from compensator.physics.supply import network_output_v, solve_operating_point_v

__all__ = [
    "DEFAULT_CURRENT_UNCERTAINTY_PCT", "DEFAULT_RAMP_K_PER_MIN", "DEFAULT_SAMPLES", "DEFAULT_SEED", "TERM_NAMES",
    "ELECTRONICS_TERMS", "BudgetTerm", "GainBudget", "MonteCarloSummary", "electronics_terms",
    "gain_error_at_light_pct", "gain_error_budget",
]

DEFAULT_SEED = 20260401
DEFAULT_SAMPLES = 4000
DEFAULT_CURRENT_UNCERTAINTY_PCT = 30.0
#: Enclosure ramp assumed for the sensor-lag term, kelvin per minute (an assumption: an outdoor enclosure in
#: changing sun and wind; give the instrument's own figure).
DEFAULT_RAMP_K_PER_MIN = 0.5

_SQRT3 = np.sqrt(3.0)
_NORMAL_LIMIT_SIGMAS = 3.0


@dataclass(frozen=True)
class _Source:
    key: str          # parameter perturbed in the chain
    term: str         # budget term it belongs to
    dist: str         # "uniform" (limit a) or "normal" (one sigma)
    scale: float      # a or sigma, in the parameter's unit
    calibrates: bool = True  # False: a one-point calibration (at steady state) does not see it


#: Budget terms in report order: key -> human name.
TERM_NAMES = {
    "sensor_tolerance": "temperature sensor tolerance",
    "self_heating": "sensor self-heating",
    "sensor_to_die": "sensor-to-die offset",
    "sensor_lag": "sensor lag at the enclosure ramp",
    "adc_quantisation": "ADC quantisation",
    "adc_reference": "ADC reference",
    "adc_reference_drift": "ADC reference drift",
    "adc_offset": "ADC offset",
    "adc_gain_error": "ADC gain error",
    "adc_inl": "ADC non-linearity",
    "excitation": "divider excitation",
    "excitation_drift": "divider excitation drift",
    "divider_resistor": "divider reference resistor",
    "divider_resistor_drift": "divider reference resistor drift",
    "dac_quantisation": "DAC quantisation",
    "dac_reference": "DAC reference",
    "dac_reference_drift": "DAC reference drift",
    "dac_offset": "DAC offset",
    "dac_gain_error": "DAC gain error",
    "dac_inl": "DAC non-linearity",
    "supply_network": "supply network resistors",
    "supply_network_drift": "supply network resistor drift",
    "regulator_reference": "regulator feedback reference",
    "regulator_reference_drift": "regulator feedback reference drift",
    "breakdown_calibration": "breakdown calibration",
    "breakdown_definition": "breakdown definition offset",
    "tempco_calibration": "tempco calibration",
    "light_yield_tempco": "light-yield coefficient",
    "series_resistor_drop": "series-resistor drop",
    "current_sense_drift": "current-sense drift",
    "law_residual": "law residual",
}

#: Terms that come from the electronics' temperature coefficients, static converter errors and the sensor's lag.
ELECTRONICS_TERMS = (
    "sensor_lag", "adc_reference_drift", "adc_offset", "adc_gain_error", "adc_inl", "excitation_drift",
    "divider_resistor_drift", "dac_reference_drift", "dac_offset", "dac_gain_error", "dac_inl",
    "supply_network_drift", "regulator_reference", "regulator_reference_drift", "current_sense_drift",
)

#: Terms charged analytically (code-to-code errors): key -> source of the size in LSB.
_ANALYTIC = ("adc_quantisation", "adc_inl", "dac_quantisation", "dac_inl")


@dataclass(frozen=True, kw_only=True)
class BudgetTerm:
    """One term of the budget, over the operating range.

    Attributes
    ----------
    key, name : str
        Machine key and human name.
    kind : {"random", "systematic"}
    limit_pct : float
        Largest bound of the gain error over the range, percent.
    std_pct : float
        Largest one-sigma gain error over the range, percent (0 for systematic terms).
    calibrated_limit_pct, calibrated_std_pct : float
        The same after a one-point calibration.
    worst_temp_c : float
        Temperature of the largest limit, degree Celsius.
    note : str
    limit_pct_by_temp, std_pct_by_temp, signed_pct_by_temp : ndarray
        Per temperature of the budget's grid (signed: the contribution at the
        limit with its sign, for systematic terms the value itself).
    calibrated_limit_pct_by_temp, calibrated_std_pct_by_temp, calibrated_signed_pct_by_temp : ndarray
        The same after a one-point calibration.
    """

    key: str
    name: str
    kind: str
    limit_pct: float
    std_pct: float
    calibrated_limit_pct: float
    calibrated_std_pct: float
    worst_temp_c: float
    note: str = ""
    limit_pct_by_temp: np.ndarray = field(default=None, repr=False)
    std_pct_by_temp: np.ndarray = field(default=None, repr=False)
    signed_pct_by_temp: np.ndarray = field(default=None, repr=False)
    calibrated_limit_pct_by_temp: np.ndarray = field(default=None, repr=False)
    calibrated_std_pct_by_temp: np.ndarray = field(default=None, repr=False)
    calibrated_signed_pct_by_temp: np.ndarray = field(default=None, repr=False)


@dataclass(frozen=True, kw_only=True)
class MonteCarloSummary:
    """Monte Carlo of the full chain.

    Attributes
    ----------
    seed, samples : int
    std_pct : float
        Largest standard deviation of the gain error over the range, percent.
    mean_abs_pct : float
        Largest absolute mean, percent.
    p99_abs_pct : float
        Largest 99th percentile of the absolute error, percent.
    max_abs_pct : float
        Largest absolute error of any sample, percent.
    calibrated_std_pct, calibrated_p99_abs_pct : float
        The same after a one-point calibration of each sample.
    std_pct_by_temp, mean_pct_by_temp : ndarray
    """

    seed: int
    samples: int
    std_pct: float
    mean_abs_pct: float
    p99_abs_pct: float
    max_abs_pct: float
    calibrated_std_pct: float
    calibrated_p99_abs_pct: float
    std_pct_by_temp: np.ndarray = field(default=None, repr=False)
    mean_pct_by_temp: np.ndarray = field(default=None, repr=False)


@dataclass(frozen=True, kw_only=True)
class GainBudget:
    """Result of :func:`gain_error_budget`.

    Attributes
    ----------
    law_kind : str
    quantity : {"gain", "response"}
        What the figures are the error of (the response law holds gain x PDE x crosstalk x light yield).
    overvoltage_v : float
    temp_c : ndarray
        Temperature grid of the operating range, degree Celsius.
    calibration_temp_c : float
    terms : tuple of BudgetTerm
    rss_pct, worst_case_pct, systematic_pct : float
        Largest over the range: combined one-sigma, sum of limits plus
        systematic, and systematic alone, percent.
    calibrated_rss_pct, calibrated_worst_case_pct : float
        After a one-point calibration.
    dominant, calibrated_dominant : str
        Key of the term with the largest limit, before and after calibration.
    monte_carlo : MonteCarloSummary or None
    current_uncertainty_pct : float
    ramp_k_per_min : float
        Enclosure ramp of the sensor-lag term, kelvin per minute.
    findings : tuple of Finding
        What the user should know (the law's own findings included).
    """

    law_kind: str
    quantity: str = "gain"
    overvoltage_v: float
    temp_c: np.ndarray
    calibration_temp_c: float
    terms: tuple
    rss_pct: float
    worst_case_pct: float
    systematic_pct: float
    calibrated_rss_pct: float
    calibrated_worst_case_pct: float
    dominant: str
    calibrated_dominant: str
    monte_carlo: MonteCarloSummary | None
    current_uncertainty_pct: float
    ramp_k_per_min: float = 0.0
    findings: tuple = ()

    def term(self, key: str) -> BudgetTerm:
        """The term with machine key ``key``."""
        for t in self.terms:
            if t.key == key:
                return t
        raise KeyError(key)


def electronics_terms(budget: GainBudget) -> tuple:
    """The budget's terms that come from the electronics' drifts, static converter errors and the sensor lag.

    What a one-point calibration leaves on a real board is often dominated
    by these; the demo states them for each of its boards.

    Parameters
    ----------
    budget : GainBudget

    Returns
    -------
    tuple of BudgetTerm
        In report order, largest contributions included whatever their size.
    """
    return tuple(t for t in budget.terms if t.key in ELECTRONICS_TERMS)


def _ppm_sources(pairs):
    """Sources of drift coefficients given as ``(key, term, ppm_per_k)``, those that are not zero."""
    return [_Source(key, term, "uniform", ppm) for key, term, ppm in pairs if ppm > 0]


def _sensor_lag_k(sensor, ramp_k_per_min: float) -> float:
    """Lag of the reading behind the die at a steady ramp: ``r (tau_sensor + tau_path)``, kelvin."""
    return ramp_k_per_min / 60.0 * (sensor.time_constant_s + sensor.die_to_sensor_time_constant_s)


def _sources(law: CompensationLaw, board, current_uncertainty_pct: float, ramp_k_per_min: float) -> list[_Source]:
    sensor = board.temperature.sensor
    fe = board.temperature.front_end
    supply = law.supply
    dac = supply.dac
    bd = law.sipm.breakdown
    out = []
    if isinstance(sensor, RtdSensor):
        offset_k, slope = RTD_TOLERANCE_CLASSES[sensor.tolerance_class]
        out += [_Source("rtd_offset_k", "sensor_tolerance", "uniform", offset_k),
                _Source("rtd_slope", "sensor_tolerance", "uniform", slope)]
    else:
        out += [_Source("ntc_r25", "sensor_tolerance", "uniform", 1e-2 * sensor.r25_tolerance_pct),
                _Source("ntc_beta", "sensor_tolerance", "uniform", 1e-2 * sensor.beta_tolerance_pct)]
    out += [_Source("self_heating_k", "self_heating", "uniform", sensor.self_heating_k),
            _Source("sensor_to_die_k", "sensor_to_die", "uniform", sensor.sensor_to_die_k)]
    lag_k = _sensor_lag_k(sensor, ramp_k_per_min)
    if lag_k > 0:
        out.append(_Source("sensor_lag_k", "sensor_lag", "uniform", lag_k, calibrates=False))
    out += [_Source("adc_reference", "adc_reference", "uniform", 1e-2 * fe.adc_reference_tolerance_pct),
            *([] if fe.ratiometric else
              [_Source("excitation", "excitation", "uniform", 1e-2 * fe.excitation_tolerance_pct)]),
            _Source("reference_resistor", "divider_resistor", "uniform", 1e-2 * fe.reference_resistor_tolerance_pct),
            _Source("dac_reference", "dac_reference", "uniform", 1e-2 * dac.reference_tolerance_pct)]
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
            out.append(_Source(key, term, "uniform", scale))
    tol = 1e-2 * supply.resistor_tolerance_pct
    drift = supply.resistor_drift_ppm_per_k
    if supply.topology == "feedback_injection":
        out += [_Source(k, "supply_network", "uniform", tol) for k in ("r1", "r2", "r3")]
        out += _ppm_sources([(f"{k}_drift", "supply_network_drift", drift) for k in ("r1", "r2", "r3")])
        if supply.feedback_tolerance_pct > 0:
            out.append(_Source("feedback", "regulator_reference", "uniform", 1e-2 * supply.feedback_tolerance_pct))
        out += _ppm_sources([("feedback_drift", "regulator_reference_drift", supply.feedback_tempco_ppm_per_k)])
    else:
        out += [_Source("amp_gain", "supply_network", "uniform", tol)]
        # The amplifier's gain is a ratio of two resistors: each departs by up to the drift bound.
        out += _ppm_sources([("amp_gain_drift", "supply_network_drift", 2.0 * drift)])
    out += [_Source("breakdown_v", "breakdown_calibration", "normal", bd.breakdown_err_v),
            _Source("tempco_mv_per_k", "tempco_calibration", "normal", bd.tempco_err_mv_per_k)]
    if law.breakdown_offset_err_v > 0:
        out.append(_Source("breakdown_definition_v", "breakdown_definition", "normal", law.breakdown_offset_err_v))
    if law.kind == "constant_response" and law.scintillator.light_yield_tempco_err_pct_per_k > 0:
        out.append(_Source("light_yield_tempco", "light_yield_tempco", "normal",
                           law.scintillator.light_yield_tempco_err_pct_per_k))
    if law.drop_correction == "modelled" and supply.series_resistor_ohm > 0:
        out.append(_Source("current", "series_resistor_drop", "uniform", 1e-2 * current_uncertainty_pct))
    elif law.drop_correction == "measured" and supply.series_resistor_ohm > 0:
        sense = law.current_sense
        out += [_Source("isense_gain", "series_resistor_drop", "uniform", 1e-2 * sense.gain_tolerance_pct),
                _Source("isense_reference", "series_resistor_drop", "uniform", 1e-2 * sense.reference_tolerance_pct),
                _Source("isense_offset_a", "series_resistor_drop", "uniform", sense.offset_a)]
        out += _ppm_sources([("isense_gain_drift", "current_sense_drift", sense.gain_tempco_ppm_per_k)])
        if sense.offset_drift_a_per_k > 0:
            out.append(_Source("isense_offset_drift", "current_sense_drift", "uniform", sense.offset_drift_a_per_k))
    return out


def _operating_point_v(v_out_of, v_start, r_series, real, t_die, photon_rate_hz, scale=1.0):
    """The bias at the SiPM: ``v = v_out_of(I) - R I`` with ``I = scale * I_model(v)`` (tolerance 1e-10 V)."""
    return solve_operating_point_v(v_out_of, v_start, r_series, real, t_die, photon_rate_hz, current_scale=scale,
                                   tol_v=1e-10, max_iter=60)


def _electronics_dt_k(board, t_die):
    """Distance of the electronics from the temperature of their tolerances, kelvin."""
    return board.electronics_temp_c(t_die) - board.electronics_ref_temp_c


def _chain_gain_error_pct(law: CompensationLaw, board, dev: dict, temp_c, quantise: bool, series_ohm=None,
                          photon_rate_hz=None):
    """Gain (or response) error, percent, of the real device through the whole chain.

    ``dev`` maps source keys to deviations in the parameter's own unit
    (arrays broadcasting against ``temp_c``); ``photon_rate_hz`` is the real
    light level (default: the one the law assumes).
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
    return _chain_gain_error_pct(law, board, dict(deviations or {}), np.asarray(temp_c, dtype=float),
                                 bool(quantise), photon_rate_hz=float(photon_rate_hz))


def _drop_note(law: CompensationLaw, current_uncertainty_pct: float) -> str:
    if law.drop_correction != "measured":
        return f"corrected; modelled current good to +-{current_uncertainty_pct:g} %"
    sense = law.current_sense
    return (f"measured at {law.photon_rate_hz:g} Hz: gain +-{sense.gain_tolerance_pct:g} %, ref "
            f"+-{sense.reference_tolerance_pct:g} %, offset +-{1e9 * sense.offset_a:g} nA, "
            f"{1e9 * sense.lsb_a:.4g} nA/code")


def _cap_ratio(sipm: Sipm, temp_c, calibration_temp_c):
    """Gain sensitivity at T relative to the calibration temperature (a voltage trim acts through C(T))."""
    return cell_capacitance_f(sipm, temp_c) / cell_capacitance_f(sipm, calibration_temp_c)


def _term(key, kind, limit, std, cal_limit, cal_std, temps, signed, cal_signed, note="") -> BudgetTerm:
    i = int(np.argmax(limit))
    return BudgetTerm(key=key, name=TERM_NAMES[key], kind=kind, limit_pct=float(limit.max()),
                      std_pct=float(std.max()), calibrated_limit_pct=float(cal_limit.max()),
                      calibrated_std_pct=float(cal_std.max()), worst_temp_c=float(temps[i]), note=note,
                      limit_pct_by_temp=limit, std_pct_by_temp=std, signed_pct_by_temp=signed,
                      calibrated_limit_pct_by_temp=cal_limit, calibrated_std_pct_by_temp=cal_std,
                      calibrated_signed_pct_by_temp=cal_signed)


def _analytic_half_pct(key: str, law: CompensationLaw, board, grid):
    """Bound (percent) of a code-to-code error at each grid temperature: half an LSB, or the INL bound."""
    per_v = law.error_pct_per_v(grid)
    fe = board.temperature.front_end
    if key.startswith("adc"):
        lsb = 0.5 if key == "adc_quantisation" else fe.adc_inl_lsb
        return lsb * np.abs(law.slope_v_per_k(grid)) * board.temperature.temp_per_code_k(grid) * per_v
    lsb = 0.5 if key == "dac_quantisation" else law.supply.dac.inl_lsb
    return lsb * law.supply.lsb_v * per_v


def _check_options(law, calibration_temp_c, samples, current_uncertainty_pct, ramp_k_per_min, step_k) -> float:
    lo, hi = law.min_temp_c, law.max_temp_c
    if calibration_temp_c is None:
        calibration_temp_c = min(max(law.sipm.breakdown.ref_temp_c, lo), hi)
    calibration_temp_c = float(calibration_temp_c)
    if not lo <= calibration_temp_c <= hi:
        raise ModelError(f"{calibration_temp_c:g} C is outside the operating range "
                         f"{lo:g} to {hi:g} C", key="calibration_temp_c")
    if not (isinstance(samples, (int, np.integer)) and 0 <= samples <= 1_000_000):
        raise ModelError(f"must be a whole number from 0 to 1000000, got {samples!r}", key="samples")
    if not np.isfinite(current_uncertainty_pct) or not 0 <= current_uncertainty_pct <= 100:
        raise ModelError(f"must be within 0 to 100, got {current_uncertainty_pct!r}", key="current_uncertainty_pct")
    if not np.isfinite(ramp_k_per_min) or not 0 <= ramp_k_per_min <= 60:
        raise ModelError(f"must be within 0 to 60, got {ramp_k_per_min!r}", key="ramp_k_per_min")
    if not np.isfinite(step_k) or step_k <= 0 or (hi - lo) / step_k > 10_000:
        raise ModelError(f"must be positive and leave at most 10000 steps over the range, got {step_k!r}",
                         key="step_k")
    return calibration_temp_c


def gain_error_budget(law: CompensationLaw, board, *, calibration_temp_c=None, samples=DEFAULT_SAMPLES,
                      seed=DEFAULT_SEED, current_uncertainty_pct=DEFAULT_CURRENT_UNCERTAINTY_PCT,
                      ramp_k_per_min=DEFAULT_RAMP_K_PER_MIN, step_k=1.0) -> GainBudget:
    """First-order gain-error budget over the operating range, plus a seeded Monte Carlo.

    Parameters
    ----------
    law : CompensationLaw
    board : BoardProfile
        The board the law runs on (temperature channel, supply, electronics temperature).
    calibration_temp_c : float, optional
        Temperature of a one-point gain calibration, degree Celsius; default
        the breakdown reference temperature, limited to the operating range.
    samples : int
        Monte Carlo samples (0 to skip the Monte Carlo).
    seed : int
        Seed of ``numpy.random.default_rng``.
    current_uncertainty_pct : float
        Accuracy of the modelled SiPM current used for the drop correction, percent.
    ramp_k_per_min : float
        Enclosure temperature ramp for the sensor-lag term, kelvin per minute.
    step_k : float
        Temperature step of the grid, kelvin.

    Returns
    -------
    GainBudget

    Raises
    ------
    ModelError
        Arguments outside their domain, or a law the supply cannot follow
        over the whole range (key ``overvoltage_v``): a budget of a clamped
        law would show a figure that cannot be true.
    """
    calibration_temp_c = _check_options(law, calibration_temp_c, samples, current_uncertainty_pct, ramp_k_per_min,
                                        step_k)
    check_law_in_range(law)
    lo, hi = law.min_temp_c, law.max_temp_c
    temps = np.linspace(lo, hi, int(round((hi - lo) / step_k)) + 1)
    grid = np.append(temps, calibration_temp_c)  # the last column is the calibration point
    k_cal = _cap_ratio(law.sipm, temps, calibration_temp_c)
    sources = _sources(law, board, current_uncertainty_pct, ramp_k_per_min)

    # Random terms, first order.
    per_term: dict[str, list] = {}
    for src in sources:
        plus = _chain_gain_error_pct(law, board, {src.key: src.scale}, grid, False)
        minus = _chain_gain_error_pct(law, board, {src.key: -src.scale}, grid, False)
        signed = 0.5 * (plus - minus)
        cal = signed[:-1] - k_cal * signed[-1] if src.calibrates else signed[:-1]
        sigma = 1.0 / _SQRT3 if src.dist == "uniform" else 1.0
        lim = 1.0 if src.dist == "uniform" else _NORMAL_LIMIT_SIGMAS
        per_term.setdefault(src.term, []).append((signed[:-1], sigma, lim, cal))
    terms = []
    sensor = board.temperature.sensor
    notes = {
        "sensor_tolerance": (f"IEC 60751 class {sensor.tolerance_class}" if isinstance(sensor, RtdSensor) else
                             f"R25 +-{sensor.r25_tolerance_pct:g} %, Beta +-{sensor.beta_tolerance_pct:g} %"),
        "adc_reference": "cancels: the ADC is ratiometric" if board.temperature.front_end.ratiometric else "",
        "series_resistor_drop": _drop_note(law, current_uncertainty_pct),
        "sensor_to_die": "constant temperature offset: mostly removed by calibration",
        "sensor_lag": (f"+-{_sensor_lag_k(sensor, ramp_k_per_min):.3g} K at {ramp_k_per_min:g} K/min; "
                       "not removed by calibration"),
        "breakdown_calibration": "constant voltage offset: removed by calibration",
        "breakdown_definition": f"{1e3 * law.breakdown_offset_v:+.1f} mV added to reach the gain-intercept breakdown",
        "supply_network_drift": "drift from the calibration temperature is left",
    }
    for key in TERM_NAMES:
        if key in _ANALYTIC:
            half = _analytic_half_pct(key, law, board, grid)
            if not np.any(half > 0):
                continue
            limit, std = half[:-1], half[:-1] / _SQRT3
            cal_limit = limit + k_cal * half[-1]
            cal_std = np.hypot(std, k_cal * half[-1] / _SQRT3)
            terms.append(_term(key, "random", limit, std, cal_limit, cal_std, temps, limit, cal_limit,
                               "changes from code to code: not removed by calibration"))
            continue
        if key not in per_term:
            continue
        parts = per_term[key]
        limit = sum(np.abs(s) * lim for s, _, lim, _ in parts)
        std = np.sqrt(sum((s * sig) ** 2 for s, sig, _, _ in parts))
        cal_limit = sum(np.abs(c) * lim for _, _, lim, c in parts)
        cal_std = np.sqrt(sum((c * sig) ** 2 for _, sig, _, c in parts))
        if key == "series_resistor_drop" and law.drop_correction == "measured":
            # Half a code of the current ADC and half a DAC LSB for rounding the correction: rectangular,
            # not removed by calibration (the calibration sees its own rounding), like the other quantisation.
            per_v = law.error_pct_per_v(grid)
            for half_v in (0.5 * law.supply.series_resistor_ohm * law.current_sense.lsb_a, 0.5 * law.supply.lsb_v):
                half = half_v * per_v
                limit = limit + half[:-1]
                std = np.hypot(std, half[:-1] / _SQRT3)
                cal_limit = cal_limit + half[:-1] + k_cal * half[-1]
                cal_std = np.sqrt(cal_std ** 2 + (half[:-1] / _SQRT3) ** 2 + (k_cal * half[-1] / _SQRT3) ** 2)
        signed = sum(s for s, _, _, _ in parts)
        cal_signed = sum(c for _, _, _, c in parts)
        terms.append(_term(key, "random", limit, std, cal_limit, cal_std, temps, signed, cal_signed,
                           notes.get(key, "")))

    # Systematic terms.
    nominal = _chain_gain_error_pct(law, board, {}, grid, False)
    if law.correct_drop or law.supply.series_resistor_ohm == 0:
        law_part, drop_part = nominal, None
    else:
        law_part = _chain_gain_error_pct(law, board, {}, grid, False, series_ohm=0.0)
        drop_part = nominal - law_part
    zeros = np.zeros(temps.size)
    for key, part, note in (
        ("series_resistor_drop", drop_part, "not corrected: the whole drop"),
        ("law_residual", law_part, "uncompensated cell-capacitance coefficient" if law.kind == "constant_overvoltage"
         and law.sipm.capacitance_tempco_ppm_per_k else "what the ideal law leaves"),
    ):
        if part is None:
            continue
        cal = part[:-1] - k_cal * part[-1]
        terms.append(_term(key, "systematic", np.abs(part[:-1]), zeros, np.abs(cal), zeros, temps, part[:-1], cal,
                           note))

    random_terms = [t for t in terms if t.kind == "random"]
    systematic = sum((t.signed_pct_by_temp for t in terms if t.kind == "systematic"), zeros)
    systematic_cal = sum((t.calibrated_signed_pct_by_temp for t in terms if t.kind == "systematic"), zeros)
    rss = np.sqrt(sum(t.std_pct_by_temp ** 2 for t in random_terms))
    worst = np.abs(systematic) + sum(t.limit_pct_by_temp for t in random_terms)
    cal_rss = np.sqrt(sum(t.calibrated_std_pct_by_temp ** 2 for t in random_terms))
    cal_worst = np.abs(systematic_cal) + sum(t.calibrated_limit_pct_by_temp for t in random_terms)
    dominant = max(terms, key=lambda t: t.limit_pct).key
    cal_dominant = max(terms, key=lambda t: t.calibrated_limit_pct).key

    mc = None
    if samples:
        mc = _monte_carlo(law, board, sources, temps, calibration_temp_c, k_cal, samples, seed)
    return GainBudget(law_kind=law.kind, quantity=law.quantity, overvoltage_v=law.overvoltage_v, temp_c=temps,
                      calibration_temp_c=calibration_temp_c, terms=tuple(terms), rss_pct=float(rss.max()),
                      worst_case_pct=float(worst.max()), systematic_pct=float(np.abs(systematic).max()),
                      calibrated_rss_pct=float(cal_rss.max()), calibrated_worst_case_pct=float(cal_worst.max()),
                      dominant=dominant, calibrated_dominant=cal_dominant, monte_carlo=mc,
                      current_uncertainty_pct=float(current_uncertainty_pct), ramp_k_per_min=float(ramp_k_per_min),
                      findings=tuple(law.findings))


def _monte_carlo(law, board, sources, temps, calibration_temp_c, k_cal, samples, seed) -> MonteCarloSummary:
    rng = np.random.default_rng(seed)
    n = int(samples)
    grid = np.append(temps, calibration_temp_c)
    at_steady_state = np.append(np.ones(temps.size), 0.0)  # the calibration is made without a ramp
    dev = {}
    for src in sources:
        if src.dist == "uniform":
            draw = rng.uniform(-1.0, 1.0, size=(n, 1))
        else:
            draw = rng.standard_normal(size=(n, 1))
        if not src.calibrates:
            draw = draw * at_steady_state
        dev[src.key] = dev.get(src.key, 0.0) + src.scale * draw
    # Code-to-code errors: an independent draw at every temperature.
    fe, dac = board.temperature.front_end, law.supply.dac
    for key, bound in (("adc_inl", fe.adc_inl_lsb), ("dac_inl", dac.inl_lsb)):
        if bound > 0:
            dev[key] = bound * rng.uniform(-1.0, 1.0, size=(n, grid.size))
    # Dither the true temperature within one ADC code so quantisation errors are drawn, not fixed.
    per_code = board.temperature.temp_per_code_k(grid)
    t_true = grid + rng.uniform(-0.5, 0.5, size=(n, grid.size)) * per_code
    err = _chain_gain_error_pct(law, board, dev, t_true, True)
    body, at_cal = err[:, :-1], err[:, -1:]
    cal = body - k_cal * at_cal
    std = body.std(axis=0, ddof=1)
    mean = body.mean(axis=0)
    return MonteCarloSummary(
        seed=int(seed), samples=n, std_pct=float(std.max()), mean_abs_pct=float(np.abs(mean).max()),
        p99_abs_pct=float(np.percentile(np.abs(body), 99, axis=0).max()), max_abs_pct=float(np.abs(body).max()),
        calibrated_std_pct=float(cal.std(axis=0, ddof=1).max()),
        calibrated_p99_abs_pct=float(np.percentile(np.abs(cal), 99, axis=0).max()),
        std_pct_by_temp=std, mean_pct_by_temp=mean)

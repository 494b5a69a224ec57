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
from compensator.law.laws import CompensationLaw
from compensator.physics.sensors import RTD_TOLERANCE_CLASSES, T25_K, RtdSensor
from compensator.physics.sipm import Sipm, cell_capacitance_f, gain, steady_current_a
from compensator.physics.supply import solve_operating_point_v

DEFAULT_SEED = 20260401
DEFAULT_SAMPLES = 4000
DEFAULT_CURRENT_UNCERTAINTY_PCT = 30.0

_SQRT3 = np.sqrt(3.0)
_NORMAL_LIMIT_SIGMAS = 3.0


@dataclass(frozen=True)
class _Source:
    key: str          # parameter perturbed in the chain
    term: str         # budget term it belongs to
    dist: str         # "uniform" (limit a) or "normal" (one sigma)
    scale: float      # a or sigma, in the parameter's unit


#: Budget terms in report order: key -> human name.
TERM_NAMES = {
    "sensor_tolerance": "temperature sensor tolerance",
    "self_heating": "sensor self-heating",
    "sensor_to_die": "sensor-to-die offset",
    "adc_quantisation": "ADC quantisation",
    "adc_reference": "ADC reference",
    "excitation": "divider excitation",
    "divider_resistor": "divider reference resistor",
    "dac_quantisation": "DAC quantisation",
    "dac_reference": "DAC reference",
    "supply_network": "supply network resistors",
    "breakdown_calibration": "breakdown calibration",
    "tempco_calibration": "tempco calibration",
    "series_resistor_drop": "series-resistor drop",
    "law_residual": "law residual",
}


@dataclass(frozen=True)
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


@dataclass(frozen=True)
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


@dataclass(frozen=True)
class GainBudget:
    """Result of :func:`gain_error_budget`.

    Attributes
    ----------
    law_kind : str
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
    """

    law_kind: str
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

    def term(self, key: str) -> BudgetTerm:
        """The term with machine key ``key``."""
        for t in self.terms:
            if t.key == key:
                return t
        raise KeyError(key)


def _sources(law: CompensationLaw, board, current_uncertainty_pct: float) -> list[_Source]:
    sensor = board.temperature.sensor
    fe = board.temperature.front_end
    supply = law.supply
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
            _Source("sensor_to_die_k", "sensor_to_die", "uniform", sensor.sensor_to_die_k),
            _Source("adc_reference", "adc_reference", "uniform", 1e-2 * fe.adc_reference_tolerance_pct),
            *([] if fe.ratiometric else
              [_Source("excitation", "excitation", "uniform", 1e-2 * fe.excitation_tolerance_pct)]),
            _Source("reference_resistor", "divider_resistor", "uniform", 1e-2 * fe.reference_resistor_tolerance_pct),
            _Source("dac_reference", "dac_reference", "uniform", 1e-2 * supply.dac.reference_tolerance_pct)]
    tol = 1e-2 * supply.resistor_tolerance_pct
    if supply.topology == "feedback_injection":
        out += [_Source(k, "supply_network", "uniform", tol) for k in ("r1", "r2", "r3")]
    else:
        out += [_Source("amp_gain", "supply_network", "uniform", tol)]
    out += [_Source("breakdown_v", "breakdown_calibration", "normal", bd.breakdown_err_v),
            _Source("tempco_mv_per_k", "tempco_calibration", "normal", bd.tempco_err_mv_per_k)]
    if law.drop_correction == "modelled" and supply.series_resistor_ohm > 0:
        out.append(_Source("current", "series_resistor_drop", "uniform", 1e-2 * current_uncertainty_pct))
    elif law.drop_correction == "measured" and supply.series_resistor_ohm > 0:
        sense = law.current_sense
        out += [_Source("isense_gain", "series_resistor_drop", "uniform", 1e-2 * sense.gain_tolerance_pct),
                _Source("isense_reference", "series_resistor_drop", "uniform", 1e-2 * sense.reference_tolerance_pct),
                _Source("isense_offset_a", "series_resistor_drop", "uniform", sense.offset_a)]
    return out


def _operating_point_v(v_out_of, v_start, r_series, real, t_die, photon_rate_hz, scale=1.0):
    """The bias at the SiPM: ``v = v_out_of(I) - R I`` with ``I = scale * I_model(v)`` (tolerance 1e-10 V)."""
    return solve_operating_point_v(v_out_of, v_start, r_series, real, t_die, photon_rate_hz, current_scale=scale,
                                   tol_v=1e-10, max_iter=60)


def _chain_gain_error_pct(law: CompensationLaw, board, dev: dict, temp_c, quantise: bool, series_ohm=None,
                          photon_rate_hz=None):
    """Gain error (percent) of the real device through the whole chain.

    ``dev`` maps source keys to deviations in the parameter's own unit
    (arrays broadcasting against ``temp_c``); ``photon_rate_hz`` is the real
    light level (default: the one the law assumes).
    """
    g = lambda k: dev.get(k, 0.0)  # noqa: E731
    channel = board.temperature
    sensor, fe = channel.sensor, channel.front_end
    t_die = np.asarray(temp_c, dtype=float)
    # Temperature at the sensor.
    t_s = t_die + g("sensor_to_die_k") + g("self_heating_k")
    if isinstance(sensor, RtdSensor):
        t_s = t_s + g("rtd_offset_k") + g("rtd_slope") * np.abs(t_s)
        r = sensor.resistance_ohm(t_s)
    else:
        r = sensor.resistance_ohm(t_s)
        beta = sensor.beta_k if sensor.beta_k is not None else float(sensor.effective_beta_k(25.0))
        r = r * (1.0 + g("ntc_r25")) * np.exp(g("ntc_beta") * beta * (1.0 / (t_s + ZERO_C_IN_K) - 1.0 / T25_K))
    r_ref = fe.reference_resistor_ohm * (1.0 + g("reference_resistor"))
    frac = r / (r + r_ref) if fe.sensor_position == "low" else r_ref / (r + r_ref)
    # The ADC reads (excitation x divider fraction) against its reference: both errors count unless ratiometric.
    span = 1.0 if fe.ratiometric else fe.span_fraction * (1.0 + g("adc_reference")) / (1.0 + g("excitation"))
    x = frac / span * (1 << fe.adc_bits)
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

    def network_v(code):
        v_dac = code * supply.dac.lsb_v * (1.0 + g("dac_reference"))
        if supply.topology == "feedback_injection":
            r1 = supply.r1_ohm * (1.0 + g("r1"))
            r2 = supply.r2_ohm * (1.0 + g("r2"))
            r3 = supply.r3_ohm * (1.0 + g("r3"))
            out = supply.feedback_v * (1.0 + r1 / r2 + r1 / r3) - v_dac * r1 / r3
        else:
            out = supply.offset_v + supply.gain_v_per_v * (1.0 + g("amp_gain")) * v_dac
        return np.clip(out, supply.min_output_v, supply.max_output_v)

    # The real device.
    sipm = law.sipm
    bd = sipm.breakdown
    real = replace(sipm, breakdown=replace(bd, breakdown_v_at_ref=bd.breakdown_v_at_ref + g("breakdown_v"),
                                           tempco_mv_per_k=bd.tempco_mv_per_k + g("tempco_mv_per_k")))
    r_series = supply.series_resistor_ohm if series_ohm is None else series_ohm
    rate = law.photon_rate_hz if photon_rate_hz is None else photon_rate_hz
    v_out = network_v(dac)
    v = v_out
    if r_series > 0 and law.drop_correction == "measured":
        sense = law.current_sense
        per_code = supply.series_resistor_ohm * sense.lsb_a / supply.volts_per_code  # DAC codes per current code
        errs = (g("isense_gain"), g("isense_reference"), g("isense_offset_a"))

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
    g0 = gain(sipm, bd.breakdown_v(bd.ref_temp_c) + law.overvoltage_v, bd.ref_temp_c)
    return 100.0 * (gain(real, v, t_die) / g0 - 1.0)


def gain_error_at_light_pct(law: CompensationLaw, board, photon_rate_hz, temp_c, deviations=None,
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
    return BudgetTerm(key, TERM_NAMES[key], kind, float(limit.max()), float(std.max()), float(cal_limit.max()),
                      float(cal_std.max()), float(temps[i]), note, limit, std, signed, cal_limit, cal_std,
                      cal_signed)


def gain_error_budget(law: CompensationLaw, board, calibration_temp_c=None, samples=DEFAULT_SAMPLES,
                      seed=DEFAULT_SEED, current_uncertainty_pct=DEFAULT_CURRENT_UNCERTAINTY_PCT,
                      step_k=1.0) -> GainBudget:
    """First-order gain-error budget over the operating range, plus a seeded Monte Carlo.

    Parameters
    ----------
    law : CompensationLaw
    board : BoardProfile
        The board the law runs on (temperature channel and supply).
    calibration_temp_c : float, optional
        Temperature of a one-point gain calibration, degree Celsius; default
        the breakdown reference temperature, limited to the operating range.
    samples : int
        Monte Carlo samples (0 to skip the Monte Carlo).
    seed : int
        Seed of ``numpy.random.default_rng``.
    current_uncertainty_pct : float
        Accuracy of the modelled SiPM current used for the drop correction, percent.
    step_k : float
        Temperature step of the grid, kelvin.

    Returns
    -------
    GainBudget

    Raises
    ------
    ModelError
        Arguments outside their domain.
    """
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
    if not np.isfinite(step_k) or step_k <= 0:
        raise ModelError(f"must be positive, got {step_k!r}", key="step_k")
    temps = np.linspace(lo, hi, int(round((hi - lo) / step_k)) + 1)
    grid = np.append(temps, calibration_temp_c)  # the last column is the calibration point
    k_cal = _cap_ratio(law.sipm, temps, calibration_temp_c)
    sources = _sources(law, board, current_uncertainty_pct)

    # Random terms, first order.
    per_term: dict[str, list] = {}
    for src in sources:
        plus = _chain_gain_error_pct(law, board, {src.key: src.scale}, grid, False)
        minus = _chain_gain_error_pct(law, board, {src.key: -src.scale}, grid, False)
        signed = 0.5 * (plus - minus)
        cal = signed[:-1] - k_cal * signed[-1]
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
        "breakdown_calibration": "constant voltage offset: removed by calibration",
    }
    for key in TERM_NAMES:
        if key in ("adc_quantisation", "dac_quantisation"):
            per_lsb = 100.0 / law.target_overvoltage_v(grid)
            if key == "adc_quantisation":
                half = 0.5 * np.abs(law.slope_v_per_k(grid)) * board.temperature.temp_per_code_k(grid) * per_lsb
            else:
                half = 0.5 * law.supply.lsb_v * per_lsb
            limit, std = half[:-1], half[:-1] / _SQRT3
            cal_limit = limit + k_cal * half[-1]
            cal_std = np.hypot(std, k_cal * half[-1] / _SQRT3)
            terms.append(_term(key, "random", limit, std, cal_limit, cal_std, temps, limit, cal_limit,
                               "not removed by calibration"))
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
            per_lsb = 100.0 / law.target_overvoltage_v(grid)
            for half_v in (0.5 * law.supply.series_resistor_ohm * law.current_sense.lsb_a, 0.5 * law.supply.lsb_v):
                half = half_v * per_lsb
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
    return GainBudget(law.kind, law.overvoltage_v, temps, calibration_temp_c, tuple(terms), float(rss.max()),
                      float(worst.max()), float(np.abs(systematic).max()), float(cal_rss.max()),
                      float(cal_worst.max()), dominant, cal_dominant, mc, float(current_uncertainty_pct))


def _monte_carlo(law, board, sources, temps, calibration_temp_c, k_cal, samples, seed) -> MonteCarloSummary:
    rng = np.random.default_rng(seed)
    n = int(samples)
    dev = {}
    for src in sources:
        if src.dist == "uniform":
            draw = rng.uniform(-1.0, 1.0, size=(n, 1))
        else:
            draw = rng.standard_normal(size=(n, 1))
        dev[src.key] = dev.get(src.key, 0.0) + src.scale * draw
    grid = np.append(temps, calibration_temp_c)
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

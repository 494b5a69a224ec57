"""Gain-error budget of a compensation law on a board.

One model of the whole chain (:mod:`compensator.law.error_chain`, which
also holds the table of error sources), evaluated on arrays (Monte Carlo
samples x temperatures)::

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

from dataclasses import dataclass, field

import numpy as np

from compensator.errors import ModelError
from compensator.law.error_chain import (
    chain_gain_error_pct,
    error_sources,
    gain_error_at_light_pct,
    sensor_lag_k,
)
from compensator.law.laws import CompensationLaw, check_law_in_range
from compensator.physics.sensors import RtdSensor
from compensator.physics.sipm import Sipm, cell_capacitance_f

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
    sources = error_sources(law, board, current_uncertainty_pct, ramp_k_per_min)

    # Random terms, first order.
    per_term: dict[str, list] = {}
    for src in sources:
        plus = chain_gain_error_pct(law, board, {src.key: src.scale}, grid, False)
        minus = chain_gain_error_pct(law, board, {src.key: -src.scale}, grid, False)
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
        "sensor_lag": (f"+-{sensor_lag_k(sensor, ramp_k_per_min):.3g} K at {ramp_k_per_min:g} K/min; "
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
    nominal = chain_gain_error_pct(law, board, {}, grid, False)
    if law.correct_drop or law.supply.series_resistor_ohm == 0:
        law_part, drop_part = nominal, None
    else:
        law_part = chain_gain_error_pct(law, board, {}, grid, False, series_ohm=0.0)
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
    err = chain_gain_error_pct(law, board, dev, t_true, True)
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

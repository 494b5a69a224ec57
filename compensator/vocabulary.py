"""The one vocabulary of output field names, and the one JSON serialiser.

Every name a command prints in its ``--json`` document is registered here
with its unit and a one-line description: the same quantity has the same
name and unit everywhere, and a name never means two things. The registry is
grouped in sections by topic; a package that adds output adds its names to
its section (``tests/test_vocabulary_commands.py`` runs every command with
``--json`` and fails on any name not registered here, and
``tools/update_json_docs.py`` renders ``docs/json-fields.md`` from it).

Serialisation happens in one place, :func:`to_json_value`: frozen records
(dataclasses), NamedTuples, enums, :class:`~compensator.findings.Finding`
records and numpy values all become plain JSON; floats are rounded to
:data:`SIGNIFICANT_DIGITS` significant digits, negative zero becomes zero
and non-finite floats become ``null``. :func:`json_document` heads every
document with ``schema_version`` and ``compensator_version``.

Conventions of the names: the unit is the last part of the name (``_v``,
``_mv_per_k``, ``_hz``, ``_s``, ``_c``, ``_pct`` ...); a plain fraction
(0 to 1) ends in ``_fraction``; percent appears only where the name ends in
``_pct``; an uncertainty puts ``_err`` before the unit (``breakdown_err_v``,
one standard deviation); counts, codes and text carry no unit suffix.
Records of several items are lists of records, never objects keyed by data.
"""

from __future__ import annotations

import dataclasses
import enum
import json
import math
from collections.abc import Mapping
from pathlib import PurePath

import numpy as np

__all__ = [
    "SCHEMA_VERSION",
    "SIGNIFICANT_DIGITS",
    "Field",
    "SECTIONS",
    "FIELDS",
    "UNIT_SUFFIXES",
    "round_significant",
    "to_json_value",
    "json_document",
    "dumps_json",
    "field_names",
    "unregistered_names",
    "suffix_unit",
    "fields_markdown",
]

#: Version of the JSON documents' layout: raised when a field is renamed,
#: removed or changes its unit or meaning (adding a field keeps it).
SCHEMA_VERSION = 1

#: Floats in JSON documents are rounded to this many significant digits:
#: far below any measurement's resolution, yet free of binary noise such as
#: ``-1.1400000000000001``.
SIGNIFICANT_DIGITS = 12


@dataclasses.dataclass(frozen=True, kw_only=True)
class Field:
    """One registered output field.

    Attributes
    ----------
    name : str
        The JSON key, snake_case, unit last.
    unit : str
        The unit (``"V"``, ``"mV/K"``, ``"%"``, ``"1"`` for a pure number);
        for non-numeric fields ``"text"``, ``"true/false"``, ``"record"``,
        ``"list"`` or ``"path"``; ``"count"`` and ``"code"`` for integers.
    description : str
        One line: what the value is, and the statistic where it is one.
    """

    name: str
    unit: str
    description: str


def _fields(*rows: tuple[str, str, str]) -> tuple[Field, ...]:
    return tuple(Field(name=n, unit=u, description=d) for n, u, d in rows)


#: The registry, by section: ``(title, fields)``. Keep each section sorted by name.
SECTIONS: tuple[tuple[str, tuple[Field, ...]], ...] = (
    ("Document", _fields(
        ("compensator_version", "text", "version of compensator that wrote the document"),
        ("schema_version", "count", "version of the layout of the JSON documents (raised when a name changes)"),
    )),
    ("General", _fields(
        ("board", "text", "name of the board profile"),
        ("checked", "count", "number of profile files checked"),
        ("code", "text", "stable machine-readable identifier of a finding (snake_case)"),
        ("file", "path", "input file, as given on the command line"),
        ("files", "list", "files written by the command, in order"),
        ("findings", "list", "what a check found: one record each, with code, severity and message"),
        ("invalid", "count", "number of profile files with problems"),
        ("key", "text", "identifier of a budget term, or the key path or column at fault"),
        ("kind", "text", "what sort of thing the record describes (profile kind, budget term kind, plant kind)"),
        ("line", "count", "1-based line number in the file (0 when unknown)"),
        ("message", "text", "one line for people, with the numbers that matter"),
        ("method", "text", "method used (breakdown method, amplitude model, tuning rule)"),
        ("mode", "text", "what is held fixed: 'bias' or 'overvoltage'"),
        ("model", "text", "which model was fitted or chosen (e.g. linear, quadratic, fopdt, sopdt, relay)"),
        ("name", "text", "name of the profile, term, plant, scenario or strategy"),
        ("note", "text", "remark on the record"),
        ("ok", "true/false", "true when the record was analysed without error"),
        ("points", "list", "one record per point evaluated"),
        ("problems", "list", "one record per problem found: line, key, reason"),
        ("profile", "text", "name of the profile the record comes from"),
        ("profiles", "list", "one record per profile file given"),
        ("reason", "text", "why the record failed, or what is wrong (null when nothing is)"),
        ("severity", "text", "how much a finding matters: info, warning or danger"),
        ("sha256", "text", "SHA-256 of the file's bytes, hex"),
        ("sipm", "text", "name of the sipm profile"),
        ("status", "text", "state of the record (e.g. ok, invalid, skipped, outside operating range)"),
        ("warnings", "list", "warnings for people, one line each"),
        ("written_profile", "record", "the calibrated profile written: file and name (null when none)"),
    )),
    ("SiPM model", _fields(
        ("bias_v", "V", "bias across the SiPM"),
        ("breakdown_v", "V", "breakdown voltage"),
        ("crosstalk_fraction", "1", "probability that an avalanche triggers prompt crosstalk (0 to 1)"),
        ("current_a", "A", "current (SiPM steady current, or cooler current at an operating point)"),
        ("dark_rate_hz", "Hz", "dark count rate"),
        ("fixed_bias_gain_change_pct_per_k", "%/K",
         "relative gain change per kelvin if the bias stayed fixed at that point: -(dVbd/dT)/Vov + alpha_C"),
        ("gain", "1", "SiPM gain: charge of one avalanche over the elementary charge"),
        ("overvoltage_v", "V", "overvoltage: bias minus breakdown voltage"),
        ("pde_fraction", "1", "photon detection efficiency (0 to 1)"),
        ("photon_rate_hz", "Hz", "steady photon rate on the sensor"),
        ("temp_c", "degree C", "temperature"),
    )),
    ("Temperature channel", _fields(
        ("adc_code", "code", "raw temperature ADC code"),
        ("k_per_code", "K", "temperature step of one ADC code at that temperature (kelvin per code)"),
        ("read_temp_c", "degree C", "temperature the firmware reads back from the ADC code"),
        ("resistance_ohm", "ohm", "resistance of the temperature sensor at that ADC code"),
        ("sensor_tolerance_k", "K", "tolerance of the temperature sensor at that temperature (its class limit)"),
    )),
    ("Calibration", _fields(
        ("alpha", "1", "significance level for keeping the quadratic term"),
        ("bias_slope_err_mv_per_k", "mV/K", "standard error of bias_slope_mv_per_k (1 sigma)"),
        ("bias_slope_mv_per_k", "mV/K", "bias slope that holds the gain constant"),
        ("breakdown_err_v", "V",
         "standard error of the breakdown voltage (1 sigma): the statistical and the method's systematic part added in quadrature"),
        ("breakdown_err_v_at_ref", "V",
         "standard error of breakdown_v_at_ref (1 sigma), with the breakdown method's systematic part common to all points"),
        ("breakdown_stat_err_v", "V", "statistical part of breakdown_err_v (1 sigma, from the fit's residuals)"),
        ("breakdown_stat_err_v_at_ref", "V", "statistical part of breakdown_err_v_at_ref (1 sigma)"),
        ("breakdown_sys_err_v", "V",
         "method's systematic part of breakdown_err_v (1 sigma: spread over fit windows and the leakage uncertainty)"),
        ("breakdown_sys_err_v_at_ref", "V",
         "method's systematic part of breakdown_err_v_at_ref (1 sigma, common to all points: it does not average down)"),
        ("breakdown_v_at_ref", "V", "breakdown voltage at the reference temperature"),
        ("capacitance_err_f", "F", "standard error of the cell capacitance (1 sigma)"),
        ("capacitance_f", "F", "cell capacitance"),
        ("capacitance_f_at_ref", "F", "cell capacitance at the reference temperature"),
        ("capacitance_tempco_err_ppm_per_k", "ppm/K", "standard error of capacitance_tempco_ppm_per_k (1 sigma)"),
        ("capacitance_tempco_ppm_per_k", "ppm/K", "temperature coefficient of the cell capacitance"),
        ("channel", "text", "device (channel) the record belongs to (null when the data name none)"),
        ("channels", "list", "one record per channel (device) fitted separately; empty when pooled or for one device"),
        ("charge_unit", "text", "charge unit of the spectrum file (the unit of every *_in_charge_unit field)"),
        ("chi2", "1", "chi-square of the fit"),
        ("chi2_p_value", "1",
         "probability of a chi-square at least this large for the fit's degrees of freedom (scipy.stats.chi2.sf)"),
        ("constant_gain", "record", "the bias slope that holds the gain constant (null without capacitance data)"),
        ("crosstalk_branching_ratio", "1",
         "mean number of prompt crosstalk avalanches one avalanche triggers (generalised Poisson lambda)"),
        ("crosstalk_branching_ratio_err", "1", "standard error of crosstalk_branching_ratio (1 sigma)"),
        ("crosstalk_fraction_err", "1", "standard error of crosstalk_fraction (1 sigma)"),
        ("crosstalk_overvoltage_exponent", "1",
         "exponent n of the crosstalk branching ratio against overvoltage, lambda ~ Vov^n"),
        ("crosstalk_overvoltage_exponent_err", "1",
         "standard error of crosstalk_overvoltage_exponent (1 sigma; null when it was not fitted)"),
        ("curvature_err_mv_per_k2", "mV/K^2", "standard error of curvature_mv_per_k2 (1 sigma)"),
        ("curvature_mv_per_k2", "mV/K^2", "quadratic coefficient of breakdown against temperature"),
        ("curves", "list", "one record per I-V curve"),
        ("decimation", "count",
         "number of raw points averaged into each analysed point (1: the curve was analysed as measured)"),
        ("definition", "text",
         "which breakdown voltage the value is: gain_intercept, iv_inverse_log_derivative, iv_log_derivative_peak or iv_second_derivative"),
        ("definition_offset", "record",
         "offset of --offset-from's breakdowns from the file's at matched temperatures (null when not asked)"),
        ("definition_offset_err_v", "V", "standard error of definition_offset_v (1 sigma)"),
        ("definition_offset_v", "V", "breakdown of the target definition minus that of the file's definition"),
        ("exponent", "1", "exponent k of the current above breakdown, I ~ (V - Vbd)^k"),
        ("fit_hi_v", "V", "upper end of the bias window fitted"),
        ("fit_lo_v", "V", "lower end of the bias window fitted"),
        ("from_definition", "text", "breakdown definition the offset is measured from (the file's)"),
        ("gain_err_in_charge_unit", "charge unit", "standard error of gain_in_charge_unit (1 sigma)"),
        ("gain_in_charge_unit", "charge unit", "charge of one photoelectron peak step, in the file's charge unit"),
        ("gain_unit", "text", "unit of the gains in a gain scan (e.g. electrons, or a charge unit)"),
        ("joint_fit", "true/false",
         "whether the breakdown comes from the joint fit of leakage and avalanche current (else the derivative alone)"),
        ("leakage_current_a", "A", "pre-breakdown (leakage) current removed, at the breakdown voltage"),
        ("leakage_fraction", "1", "leakage current over the total current at the start of the fit window (0 to 1)"),
        ("leakage_limited", "true/false", "whether the leakage current limited the fit window"),
        ("leakage_slope_per_v", "1/V", "logarithmic slope d ln I / dV of the fitted leakage current"),
        ("matched_points", "count", "temperatures measured with both breakdown definitions"),
        ("mean_pe", "1", "mean number of primary photoelectrons per event"),
        ("mean_pe_err", "1", "standard error of mean_pe (1 sigma)"),
        ("n_peaks", "count", "number of photoelectron peaks in the fit"),
        ("n_points", "count", "number of data points used"),
        ("ndf", "count", "degrees of freedom of the fit"),
        ("notes", "list", "unit conversions and assumptions made when reading the file, one line each"),
        ("p_value", "1", "probability of the test statistic under the simpler model"),
        ("pedestal_err_in_charge_unit", "charge unit", "standard error of pedestal_in_charge_unit (1 sigma)"),
        ("pedestal_in_charge_unit", "charge unit", "position of the zero-photoelectron peak"),
        ("profile_crosstalk", "record",
         "the crosstalk written to the profile, at its reference overvoltage (overvoltage_v): crosstalk_fraction = "
         "1 - exp(-crosstalk_branching_ratio) (null when no profile was written)"),
        ("quadratic", "record", "the quadratic fit and the test whether its term is kept"),
        ("ref_temp_c", "degree C", "reference temperature of the fit"),
        ("residual_mv", "mV", "data minus fit"),
        ("scans", "list", "one record per gain scan"),
        ("sigma0_err_in_charge_unit", "charge unit", "standard error of sigma0_in_charge_unit (1 sigma)"),
        ("sigma0_in_charge_unit", "charge unit", "width (1 sigma) of the zero-photoelectron peak"),
        ("sigma1_err_in_charge_unit", "charge unit", "standard error of sigma1_in_charge_unit (1 sigma)"),
        ("sigma1_in_charge_unit", "charge unit", "width added per photoelectron: sigma_n^2 = sigma0^2 + n sigma1^2"),
        ("significant", "true/false", "whether the quadratic term is kept at the significance level alpha"),
        ("slope_err_per_v", "1/V", "standard error of slope_per_v (1 sigma), in gain_unit per volt"),
        ("slope_per_v", "1/V", "slope of gain against bias, in gain_unit per volt"),
        ("spectra", "list", "one record per charge spectrum"),
        ("target_gain", "1", "gain the constant-gain law holds, in the scans' gain_unit"),
        ("tempco_err_mv_per_k", "mV/K", "standard error of tempco_mv_per_k (1 sigma, statistical)"),
        ("tempco_mv_per_k", "mV/K", "temperature coefficient of the breakdown voltage"),
        ("tempco_relative_per_k", "1/K", "tempco_mv_per_k over the breakdown voltage at the reference temperature"),
        ("tempco_spread_mv_per_k", "mV/K", "standard deviation (ddof=1) of tempco_mv_per_k across channels"),
        ("test", "text", "statistical test used"),
        ("weighted", "true/false", "whether the fit used the given uncertainties as weights"),
        ("window_points", "count", "number of points in the fit window"),
        ("written_profiles", "list", "the calibrated profiles written: one record (file, name) per profile"),
    )),
    ("Compensation law and budget", _fields(
        ("breakdown_offset_v", "V", "volts the law added to the profile's breakdown to reach the gain-intercept definition"),
        ("calibrated_dominant", "text", "key of the largest term after the one-point calibration"),
        ("calibrated_limit_pct", "%", "the term's limit after the one-point calibration, gain error"),
        ("calibrated_p99_abs_pct", "%", "99th percentile of the absolute gain error after calibration (Monte Carlo)"),
        ("calibrated_rss_pct", "%", "root-sum-square of the terms after calibration (1 sigma), gain error"),
        ("calibrated_std_pct", "%", "standard deviation after calibration (1 sigma), gain error"),
        ("calibrated_worst_case_pct", "%", "worst case after calibration (limits plus systematic), gain error"),
        ("calibration_temp_c", "degree C", "temperature of the one-point gain calibration"),
        ("current_uncertainty_pct", "%", "accuracy assumed for the modelled current"),
        ("dominant", "text", "key of the largest term"),
        ("drop_correction", "text", "how the series-resistor drop is corrected: none, modelled or measured"),
        ("electronics_terms", "records", "budget terms of the electronics' drifts, static converter errors and sensor lag"),
        ("law", "text", "compensation law: constant_gain or constant_overvoltage"),
        ("limit_pct", "%", "the term's limit (tolerance bound, half an LSB or 3 sigma), gain error"),
        ("max_abs_pct", "%", "largest absolute gain error over the Monte Carlo samples"),
        ("mean_abs_pct", "%", "mean absolute gain error over the Monte Carlo samples"),
        ("monte_carlo", "record", "seeded Monte Carlo of the whole chain (null when skipped)"),
        ("p99_abs_pct", "%", "99th percentile of the absolute gain error over the Monte Carlo samples"),
        ("quantity", "text", "what the record's figures are of: for a budget gain or response (gain x PDE x "
                             "crosstalk x light yield); for an Allan deviation or a fleet spread the logged "
                             "quantity or figure, its unit in its name (gain_pct, bias_v, drift_pct_per_day)"),
        ("ramp_k_per_min", "K/min", "enclosure temperature ramp of the sensor-lag term"),
        ("rss_pct", "%", "root-sum-square of the terms (1 sigma), gain error over the operating range"),
        ("samples", "count", "number of samples: Monte Carlo draws, or telemetry rows of a logbook"),
        ("seed", "count", "seed of the random generator"),
        ("std_pct", "%", "standard deviation (1 sigma), gain error"),
        ("std_vs_rss", "1", "Monte Carlo standard deviation over the first-order root-sum-square"),
        ("systematic_pct", "%", "largest absolute systematic gain error over the operating range"),
        ("temp_range_c", "degree C", "operating range: lowest and highest temperature"),
        ("terms", "list", "one record per error source"),
        ("worst_case_pct", "%", "worst case (limits plus systematic), gain error over the operating range"),
        ("worst_temp_c", "degree C", "temperature where the term is largest"),
    )),
    ("Lookup table", _fields(
        ("adc_code_range", "code", "first and last ADC code of the operating range"),
        ("adc_fault_band", "code", "ADC codes outside this pair are sensor faults"),
        ("adc_quantisation_gain_error_pct", "%", "largest gain error half an ADC code adds over the range"),
        ("below_breakdown", "true/false", "whether the sensor-fault state holds the SiPM below breakdown"),
        ("bound_pct", "%", "bound on the table's gain error at every ADC code of the range"),
        ("c_function", "text", "C prototype of the generated function"),
        ("current_code_max", "code", "current ADC codes above this are limited"),
        ("current_correction", "record", "run-time correction from the measured current (null when not used)"),
        ("current_lsb_a", "A", "current of one current ADC code"),
        ("dac_clamp", "code", "lowest and highest DAC code the table gives"),
        ("dac_codes_per_current_code", "1", "DAC codes added per current ADC code"),
        ("entries", "count", "number of table entries"),
        ("factor", "count", "integer multiplier of the correction (applied before the shift)"),
        ("layout", "text", "table layout (uniform, segmented, optimised or polynomial)"),
        ("layouts", "list", "one record per table layout tried, each checked at every ADC code of the range"),
        ("limited_by", "text", "what limits the current correction"),
        ("margin_v", "V", "lowest breakdown minus highest safe-state output (negative: not safe)"),
        ("max_correction_v", "V", "largest bias the current correction can add"),
        ("max_error_dac_lsb", "LSB", "largest absolute bias error over every ADC code of the range, in DAC codes"),
        ("max_gain_error_pct", "%", "largest absolute gain error over every ADC code of the range"),
        ("max_output_v", "V", "highest supply output at the safe DAC code, every tolerance against it"),
        ("min_breakdown_v", "V", "lowest breakdown voltage at the coldest temperature, every tolerance against it"),
        ("min_temp_c", "degree C", "lowest temperature of the operating range"),
        ("needs_shutdown_line", "true/false", "no DAC code holds the SiPM below breakdown: hardware enable needed"),
        ("profile_dac_code", "code", "the board profile's safe_dac_code"),
        ("safe_dac_code", "code", "DAC code given for a faulty sensor reading"),
        ("safe_state", "record", "what the sensor-fault DAC code does to the SiPM at the coldest temperature"),
        ("shift", "count", "right shift of the correction, bits"),
        ("sweep", "text", "what sweep.csv holds: none, summary or full (every code is checked either way)"),
        ("table_bytes", "B", "size of the table in bytes"),
        ("uniform_entries", "count", "entries of the smallest uniform table meeting the bound"),
        ("uniform_table_bytes", "B", "bytes of the smallest uniform table meeting the bound"),
        ("within_bound", "true/false", "whether the layout meets the bound at every ADC code of the range"),
        ("worst_adc_code", "code", "ADC code of the largest gain error"),
    )),
    ("Loops", _fields(
        ("ambient_check", "list", "one record per ambient temperature the gains are re-verified at"),
        ("ambient_temp_c", "degree C", "ambient temperature"),
        ("amplitude_std", "output unit", "standard deviation of the oscillation amplitude (1 sigma)"),
        ("analysis_period_s", "s", "period the closed-loop poles and step were computed at (longer than the firmware period for a long dead time)"),
        ("baseline", "output unit", "output before the step"),
        ("cold_temp_c", "degree C", "cold-plate temperature"),
        ("coldest_temp_c", "degree C", "coldest cold-plate temperature reachable at that ambient"),
        ("condensation", "true/false", "whether the cold plate sits below the dew point plus the margin"),
        ("conditions", "record", "the cooler at its nominal ambient: humidity, dew point, hot side, current limits"),
        ("controller", "text", "PI or PID"),
        ("crossover_rad_s", "rad/s", "gain crossover frequency"),
        ("cycles", "count", "number of oscillation cycles analysed"),
        ("dc_gain", "output unit/input unit", "steady-state gain of the plant"),
        ("dead_time_s", "s", "dead time"),
        ("delay_margin_s", "s", "extra loop delay that makes the loop unstable"),
        ("derivative_filter_n", "1", "derivative filter: the derivative is filtered at N / (kd / kp)"),
        ("describing_function_error_pct", "%", "how far the output's harmonics move the relay's Ku from the estimate by its fundamental"),
        ("dew_point_c", "degree C", "dew point of the ambient air (Magnus formula)"),
        ("electrical_power_w", "W", "electrical power into the cooler"),
        ("filter_time_constant_s", "s", "time constant of the bias filter"),
        ("fundamental_ultimate_gain", "actuator unit per measured unit", "Ku from the amplitude of the output's fundamental"),
        ("gain_k_per_a", "K/A", "cooler plant gain: cold-plate temperature per ampere"),
        ("gain_margin", "1", "gain margin, as a ratio (not dB)"),
        ("heat_pumped_w", "W", "heat pumped from the cold side"),
        ("hot_temp_c", "degree C", "hot-side temperature"),
        ("hysteresis", "output unit", "relay hysteresis"),
        ("input", "text", "plant input, with its unit"),
        ("input_step", "input unit", "size of the input step"),
        ("kd_s", "s (actuator unit per measured unit)", "derivative gain, parallel form"),
        ("kd_unit", "text", "unit of kd_s"),
        ("ki_per_s", "1/s (actuator unit per measured unit)", "integral gain, parallel form"),
        ("ki_unit", "text", "unit of ki_per_s"),
        ("kp", "actuator unit per measured unit", "proportional gain, parallel form"),
        ("kp_unit", "text", "unit of kp"),
        ("load_iae", "measured unit s", "integral of the absolute error after a unit load step"),
        ("load_resistance_ohm", "ohm", "load resistance seen by the bias supply"),
        ("margins", "record", "stability margins of the sampled loop"),
        ("ms", "1", "maximum sensitivity Ms = 1 / min |1 + L|"),
        ("ms_target", "1", "Ms bound the tuning aimed at (null when none)"),
        ("open_loop", "true/false", "the bias is set open-loop (no read-back channel): no loop tuned"),
        ("operating_point", "record", "operating point the plant is linearised at"),
        ("optimum_current_a", "A", "cooler current of maximum cooling"),
        ("oscillation_amplitude", "output unit", "amplitude of the relay oscillation"),
        ("out_max_a", "A", "highest safe cooler current (the current of maximum cooling)"),
        ("out_min_a", "A", "lowest safe cooler current (strongest stable heating)"),
        ("output", "text", "plant output, with its unit"),
        ("overshoot_pct", "%", "overshoot of the closed-loop setpoint step"),
        ("peak_actuator_per_setpoint_unit", "actuator unit per measured unit", "largest actuator value per unit setpoint step"),
        ("peak_time_s", "s", "time of the step response's peak"),
        ("period_std_s", "s", "standard deviation of the oscillation period (1 sigma)"),
        ("phase_crossover_rad_s", "rad/s", "phase crossover frequency"),
        ("phase_margin_deg", "degree", "phase margin"),
        ("plant", "record", "the plant tuned"),
        ("process_gain", "output unit/input unit", "steady-state gain of the process model"),
        ("process_model", "record", "process model the rule was applied to (null when none)"),
        ("process_sign", "1", "+1 when more input raises the output, -1 when it lowers it"),
        ("r_squared", "1", "coefficient of determination of the fit"),
        ("rate_hz", "Hz", "firmware loop rate"),
        ("reachable", "true/false", "whether the setpoint can be reached at that ambient"),
        ("regulator_time_constant_s", "s", "time constant of the bias regulator"),
        ("relative_humidity_pct", "%", "relative humidity of the ambient air"),
        ("relay_amplitude", "input unit", "relay output amplitude d"),
        ("residual_rms", "output unit", "root-mean-square of data minus fit"),
        ("rise_time_s", "s", "rise time of the closed-loop setpoint step"),
        ("rule_dead_time_s", "s", "dead time the tuning rule saw (with the sampling allowance)"),
        ("sample_time_s", "s", "firmware sample period"),
        ("setpoint_weight", "1", "setpoint weight of the proportional term"),
        ("settling_time_s", "s", "settling time of the closed-loop setpoint step"),
        ("signed_ultimate_gain", "actuator unit per measured unit", "ultimate gain Ku with the process's sign"),
        ("smith_start", "record", "start values from the two-point method of Smith (1972)"),
        ("source", "path", "profile file the plant comes from (null for a given model)"),
        ("stable", "true/false", "whether the sampled closed loop is stable"),
        ("standard_error_scale", "1", "factor the standard errors were scaled by for correlated residuals (lack of fit)"),
        ("standard_errors", "record", "standard error (1 sigma) of each fitted parameter, by its name"),
        ("step", "record", "closed-loop setpoint step response"),
        ("step_time_s", "s", "time of the input step"),
        ("tau_c_s", "s", "closed-loop time constant asked of the rule (null when none)"),
        ("time_constant2_s", "s", "second time constant"),
        ("time_constant_s", "s", "time constant"),
        ("tune_args", "list", "arguments for 'compensator tune' with the fitted model"),
        ("ultimate_gain", "actuator unit per measured unit", "ultimate gain Ku"),
        ("ultimate_period_s", "s", "ultimate period Pu"),
        ("verified", "true/false", "whether the gains were verified on a model"),
        ("volts_per_code", "V", "bias change of one DAC code (volt per code)"),
        ("worst_ms", "1", "largest Ms over the ambient range"),
    )),
    ("Field simulation", _fields(
        ("band_pct", "%", "gain band of the field simulation, plus or minus"),
        ("chunks", "count", "Monte Carlo chunks (tasks) the units were simulated in"),
        ("comparison", "record",
         "the strategies compared: ratios of their largest gain deviations"),
        ("cooler_controller", "record",
         "the cooler's PI gains in the simulation: kp, ki_per_s (null without a cooler)"),
        ("cooler_energy_j", "J",
         "electrical energy into the cooler over the run (after the settling time)"),
        ("cooler_mean_power_w", "W", "mean electrical power into the cooler over the run"),
        ("cooler_off_ticks", "count",
         "ticks the cooler was forced off (sensor fault or hot side over its limit)"),
        ("deviation", "unit of the parameter (its name's suffix; relative deviations are fractions)", "how far a unit's parameter was drawn from its profile"),
        ("dew_risk_ticks", "count", "ticks with the cold plate below the dew point plus margin (condensation)"),
        ("draws", "list",
         "the deviations drawn for a unit: parameter and deviation, only those not zero"),
        ("duration_days", "d", "simulated time"),
        ("executor", "text",
         "where the Monte Carlo chunks ran: inline, local processes or a Dask scheduler"),
        ("firmware", "text",
         "what ran the firmware's integer path: the Python references or the compiled C"),
        ("fraction_within", "1",
         "share of the units whose largest absolute gain deviation over the run stays within the band (0 to 1)"),
        ("gain_dev_max_abs_median_pct", "%",
         "median over the units of each unit's largest absolute gain deviation"),
        ("gain_dev_max_abs_p95_pct", "%",
         "95th percentile over the units of each unit's largest absolute gain deviation"),
        ("gain_dev_max_abs_pct", "%",
         "largest absolute gain deviation from the target gain over every tick of the run"),
        ("gain_dev_mean_pct", "%",
         "mean gain deviation from the target gain over every tick of the run"),
        ("gain_dev_pk_pk_pct", "%", "peak-to-peak gain deviation over every tick of the run"),
        ("gain_dev_rms_pct", "%",
         "RMS gain deviation from the target gain over every tick of the run"),
        ("groups", "list", "tolerance groups the Monte Carlo drew"),
        ("hot_side_max_temp_c", "degree C",
         "highest cooler hot-side temperature over the run (null without a cooler)"),
        ("out_of_range_ticks", "count",
         "ticks with a temperature reading just outside the operating range"),
        ("overvoltage_dev_max_abs_v", "V",
         "largest absolute difference between the overvoltage and the law's target"),
        ("parameter", "text",
         "name of a drawn parameter deviation (its unit is its suffix; no suffix: relative)"),
        ("published_dark_pulse_feedback_pct", "%",
         "gain variation published for analog dark-pulse feedback over 20-30 C (Licciulli et al. 2013)"),
        ("runs", "list", "one record per strategy run on the calibrated unit"),
        ("sensor_fault_ticks", "count",
         "ticks whose temperature reading the firmware took for a sensor fault"),
        ("settle_s", "s", "time at the start of the run left out of the metrics"),
        ("simulation", "record",
         "the demo's simulated week (the document of compensator simulate)"),
        ("strategies", "list", "one record per strategy of the Monte Carlo"),
        ("strategy", "text", "strategy the headline yield and the worst units are for"),
        ("table_bound_pct", "%", "gain-error bound the lookup table was sized for"),
        ("tick_s", "s", "control tick of the simulation"),
        ("ticks", "count", "control ticks simulated per unit"),
        ("time_outside_band_pct", "%", "share of the ticks with the gain outside the band"),
        ("trim_converged_s", "s",
         "start of the first trim window after the gain last left the band (null if it never settled)"),
        ("trim_residual_rms_pct", "%", "RMS gain deviation after the trim converged"),
        ("trim_v", "V", "final trim of the bias by the dark-peak gain loop"),
        ("trim_vs_published_factor", "1",
         "published analog dark-pulse feedback (2 %) over the trimmed largest absolute gain deviation"),
        ("uncompensated_over_compensated", "1",
         "ratio of the largest absolute gain deviations, uncompensated over compensated"),
        ("unit_index", "count", "index of a Monte Carlo unit"),
        ("units", "count", "number of units simulated in the Monte Carlo"),
        ("worst", "list", "the units furthest from the target gain, with their draws"),
        ("yield", "record",
         "Monte Carlo yield: units, band, share within, worst units (null without a Monte Carlo)"),
    )),
    ("Link and board", _fields(
        ("bias_dac_code", "code", "DAC code the board applies to the bias supply now"),
        ("bias_measured_v", "V", "bias read back by the board (null without a read-back channel)"),
        ("bias_set_v", "V", "bias the board commands (supply output at its DAC code)"),
        ("board_mode", "text", "how the board sets the bias: off, law, fixed, safe or ramp_down"),
        ("board_name", "text", "name the board reports (its board profile's name)"),
        ("coefficients_sha256", "text", "SHA-256 of the loop coefficients image the board holds (empty when none)"),
        ("cooler_current_a", "A", "cooler drive current (null without a cooler)"),
        ("dark_peak_gain", "1", "gain from the dark-count single-photon peak, electrons (null when not measured)"),
        ("dark_peak_gain_err", "1", "standard error (1 sigma) of dark_peak_gain, electrons"),
        ("fault", "text", "name of a fault flag"),
        ("faults", "list", "names of the latched fault flags"),
        ("faults_latched", "list", "names of the fault flags latched since the last clear"),
        ("faults_live", "list", "names of the fault flags that hold now"),
        ("firmware_version", "text", "firmware version the board reports"),
        ("heartbeat_timeout_ms", "ms", "host silence after which the board goes to its safe state (0: none)"),
        ("hot_side_temp_c", "degree C", "cooler hot-side temperature (null without a cooler)"),
        ("image_bytes", "B", "bytes of the uploaded image the board applied"),
        ("image_sha256", "text", "SHA-256 of the image the board now holds"),
        ("interlocks", "record", "the interlock limits written as C (null without profiles)"),
        ("max_frame_bytes", "B", "largest frame on the wire, delimiter included"),
        ("outputs_enabled", "true/false", "whether the board's bias and cooler outputs are enabled"),
        ("overvoltage_target_v", "V", "the law's overvoltage target the board holds"),
        ("port", "path", "serial port, pseudo-terminal path or pyserial URL"),
        ("protocol_version", "count", "link protocol version"),
        ("safe_margin_v", "V", "how far the safe code's bias lies below breakdown at the coldest plausible "
                               "temperature (negative: the safe state leaves the SiPM biased)"),
        ("sensor_adc_code", "code", "raw temperature ADC code the board read"),
        ("sensor_temp_c", "degree C", "temperature the board derives from its sensor"),
        ("serial_number", "text", "serial number the board reports"),
        ("sipm_current_a", "A", "SiPM current the board measures (null without a current channel)"),
        ("slew_levels_per_tick", "code", "largest bias change per control tick, DAC codes"),
        ("table_sha256", "text", "SHA-256 of the lookup-table image the board holds (empty when none)"),
        ("telemetry", "record", "one telemetry sample of the board"),
        ("telemetry_period_s", "s", "period of the board's telemetry stream (0: off)"),
        ("trip_value", "flag-specific", "value that tripped a fault (ADC code, milli-kelvin, nanoampere or "
                                        "millisecond; see docs/protocol.md)"),
        ("trips", "list", "one record per latched fault: when it tripped and the value that tripped it"),
        ("uptime_s", "s", "board time since reset"),
    )),
    ("Logbook and drift", _fields(
        ("allan", "list", "overlapping Allan deviation (IEEE Std 1139) of gain, bias and temperature, one record each"),
        ("bin_s", "s", "width of the time bins the drift fit averages over"),
        ("bins", "count", "time bins in the drift fit"),
        ("cause", "text", "why telemetry is missing: link_lost, logger_stopped or samples_missed"),
        ("collinear", "true/false", "time and temperature collinear (variance inflation 5 or more, common practice)"),
        ("confidence_fraction", "1", "two-sided level of every interval of the record (e.g. 0.95)"),
        ("deviation_in_quantity_unit", "quantity unit", "Allan deviation at each tau_s, in the unit of quantity"),
        ("disconnects", "count", "times the link to the board was lost"),
        ("drift_ci_pct_per_day", "%/day", "confidence interval (low, high) of drift_pct_per_day"),
        ("drift_err_pct_per_day", "%/day", "standard error of drift_pct_per_day (1 sigma, Newey-West)"),
        ("drift_pct_per_day", "%/day",
         "gain drift from the joint fit gain ~ a + b T + c t, percent of the run's median gain per day"),
        ("drift_time_only_ci_pct_per_day", "%/day", "confidence interval (low, high) of drift_time_only_pct_per_day"),
        ("drift_time_only_pct_per_day", "%/day", "gain drift from a fit on time alone (for comparison)"),
        ("duration_s", "s", "length of the run, of the stretch, or of the logger's run"),
        ("end_unix_s", "s", "end time, seconds since 1970-01-01 UTC"),
        ("fault_changes", "count", "fault raised or cleared events the logger recorded"),
        ("fault_intervals", "list", "one record per stretch of samples with a live fault flag set"),
        ("fault_summary", "list", "one record per fault flag seen: intervals and total time"),
        ("gain_peak_to_peak_pct", "%", "peak-to-peak of the binned gain over the run, percent of the median"),
        ("gain_reference", "1", "median dark-peak gain the percentages are relative to, electrons "
                                "(null when the overvoltage stands in)"),
        ("gain_source", "text", "quantity the gain figures come from: dark_peak_gain or an overvoltage proxy"),
        ("gap_total_s", "s", "time without telemetry between the first and last sample"),
        ("gaps", "list", "one record per stretch without telemetry"),
        ("hac_lag_bins", "count", "Newey-West truncation lag of the drift fit, bins"),
        ("interrupted", "true/false", "the logger was stopped by the user (Ctrl-C or SIGTERM)"),
        ("intervals", "count", "times the fault flag went up"),
        ("largest_abs_unit", "text", "unit with the largest absolute value of the quantity"),
        ("logbook", "path", "logbook file (SQLite)"),
        ("logbooks", "count", "logbook files read"),
        ("maximum_in_quantity_unit", "quantity unit", "largest value over the units, in the unit of quantity"),
        ("mean_in_quantity_unit", "quantity unit", "mean over the units, in the unit of quantity"),
        ("minimum_deviation_in_quantity_unit", "quantity unit",
         "smallest Allan deviation over the averaging times, in the unit of quantity"),
        ("minimum_in_quantity_unit", "quantity unit", "smallest value over the units, in the unit of quantity"),
        ("minimum_tau_s", "s", "averaging time of the smallest Allan deviation"),
        ("missed_gaps", "count", "gaps in the board's clock longer than three telemetry periods"),
        ("output_path", "path", "file or folder the command wrote"),
        ("overvoltage_reference_v", "V",
         "median overvoltage the gain percentages are relative to when it stands in for the gain (else null)"),
        ("parquet_files", "count", "Parquet files written (0 for CSV)"),
        ("partitions", "count", "(unit, day) partitions of a Parquet dataset (0 for CSV)"),
        ("residual_rms_pct", "%", "RMS of the drift fit's residuals (bin means), percent of the median gain"),
        ("residual_tempco_ci_pct_per_k", "%/K", "confidence interval (low, high) of residual_tempco_pct_per_k"),
        ("residual_tempco_err_pct_per_k", "%/K", "standard error of residual_tempco_pct_per_k (1 sigma, Newey-West)"),
        ("residual_tempco_pct_per_k", "%/K",
         "temperature coefficient of the gain left after compensation, from the joint fit"),
        ("rows", "count", "telemetry rows written or read"),
        ("rows_total", "count", "telemetry rows in the logbook afterwards"),
        ("sample_interval_s", "s", "median interval between telemetry rows"),
        ("samples_used", "count", "telemetry rows in the fits (with a gain value and no fault)"),
        ("session_ids", "list", "logbook sessions the logger opened"),
        ("sessions", "count", "logger sessions in the logbook"),
        ("spread", "list", "one record per figure: its spread over the fleet's units"),
        ("start_unix_s", "s", "start time, seconds since 1970-01-01 UTC"),
        ("std_in_quantity_unit", "quantity unit", "standard deviation over the units (1 sigma), unit of quantity"),
        ("still_active", "true/false", "the fault flag was still set in the last sample"),
        ("tau_s", "s", "averaging times of the Allan deviation"),
        ("temp_max_c", "degree C", "highest temperature of the samples used"),
        ("temp_min_c", "degree C", "lowest temperature of the samples used"),
        ("time_temp_correlation", "1", "correlation coefficient of the binned temperature with time"),
        ("total_s", "s", "total time with the fault flag set"),
        ("unit_count", "count", "units with a value"),
        ("unit_id", "text", "name of the instrument (the board's serial number unless given)"),
        ("unit_reports", "list", "one record per logbook: the drift analysis of each unit"),
        ("variance_inflation", "1", "1 / (1 - r^2) of time and temperature: how collinearity widens the intervals"),
    )),
    ("Demo", _fields(
        ("budget", "record", "gain-error budget of the instrument's hardware"),
        ("calibrated_dominant_name", "text", "the largest term after calibration, in words"),
        ("characterisation", "record", "breakdown and tempco recovered from synthetic bench I-V curves"),
        ("codes_evaluated", "count", "number of ADC codes of the operating range the headline figures cover"),
        ("codes_verified", "count", "number of ADC codes the table was verified at"),
        ("curve_count", "count", "number of I-V curves"),
        ("dominant_name", "text", "the largest term, in words"),
        ("drift", "record", "gain error at fixed bias, with the law and through the firmware, against 25 C"),
        ("firmware_dac_code", "code", "DAC code the firmware's lookup table gives"),
        ("firmware_gain_error_max_abs_pct", "%",
         "largest absolute gain error through the integer path over every ADC code of the range"),
        ("firmware_gain_error_pct", "%", "gain error through the firmware's integer path, against 25 C"),
        ("firmware_gain_error_ptp_pct", "%",
         "peak-to-peak gain error through the integer path over every ADC code of the range"),
        ("fixed_bias_v", "V", "fixed bias that gives the law's overvoltage at 25 C"),
        ("fixed_gain_error_max_abs_pct", "%",
         "largest absolute gain error at the fixed bias over every ADC code of the range"),
        ("fixed_gain_error_pct", "%", "gain error at the fixed bias, against 25 C"),
        ("fixed_gain_error_ptp_pct", "%", "peak-to-peak gain error at the fixed bias over every ADC code of the range"),
        ("instruments", "list", "one record per demo instrument"),
        ("law_gain_error_max_abs_pct", "%",
         "largest absolute gain error the law leaves over every ADC code of the range"),
        ("law_gain_error_pct", "%", "gain error the law leaves at the sensor, against 25 C"),
        ("law_gain_error_ptp_pct", "%", "peak-to-peak gain error the law leaves over every ADC code of the range"),
        ("law_supply_v", "V", "supply output the law asks for"),
        ("light", "list", "largest gain error at each light level (null without a current-sense channel)"),
        ("loop", "text", "which loop: cooler or bias supply"),
        ("loops", "list", "one record per loop tuned"),
        ("measured_max_gain_error_pct", "%",
         "largest absolute gain error over the range, drop corrected from the measured current"),
        ("modelled_max_gain_error_pct", "%",
         "largest absolute gain error over the range, drop corrected from the modelled dark current"),
        ("monte_carlo_std_pct", "%", "Monte Carlo standard deviation of the gain error (1 sigma)"),
        ("scenario", "text", "the demo's scenario"),
        ("series_drop_mv", "mV", "drop across the series filter resistor"),
        ("table", "record", "the instrument's lookup table and its verification"),
        ("true_breakdown_v", "V", "breakdown voltage of the synthetic truth"),
        ("true_breakdown_v_at_ref", "V", "breakdown voltage of the truth at the reference temperature"),
        ("true_tempco_mv_per_k", "mV/K", "temperature coefficient of the truth"),
    )),
)

#: Every registered field by name.
FIELDS: dict[str, Field] = {}
for _title, _section in SECTIONS:
    for _field in _section:
        if _field.name in FIELDS:
            raise RuntimeError(f"field {_field.name!r} registered twice")
        FIELDS[_field.name] = _field

#: Unit a name's suffix promises: the registered unit must start with it
#: (longest suffix wins; ``None``: no promise). Checked by the tests.
UNIT_SUFFIXES: dict[str, str | None] = {
    "_v": "V", "_mv": "mV", "_mv_per_k": "mV/K", "_mv_per_k2": "mV/K^2", "_ppm_per_k": "ppm/K",
    "_pct_per_k": "%/K", "_pct_per_day": "%/day", "_per_k": "1/K", "_per_v": "1/V", "_per_s": "1/s", "_a": "A", "_ohm": "ohm", "_f": "F",
    "_w": "W", "_k": "K", "_k_per_a": "K/A", "_c": "degree C", "_s": "s", "_hz": "Hz", "_rad_s": "rad/s",
    "_deg": "degree", "_pct": "%", "_fraction": "1", "_bytes": "B", "_code": "code", "_lsb": "LSB",
    "_per_code": None, "_per_current_code": None, "_per_unit": None, "_in_charge_unit": "charge unit",
}


def suffix_unit(name: str) -> str | None:
    """The unit a field name's suffix promises (``None`` when it promises none).

    Parameters
    ----------
    name : str
        A field name.
    """
    best = ""
    for suffix in UNIT_SUFFIXES:
        if name.endswith(suffix) and len(suffix) > len(best):
            best = suffix
    return UNIT_SUFFIXES[best] if best else None


def round_significant(value: float, digits: int = SIGNIFICANT_DIGITS) -> float | None:
    """Round a float to ``digits`` significant digits for printing.

    Parameters
    ----------
    value : float
        Any float.
    digits : int, optional
        Significant digits kept (default :data:`SIGNIFICANT_DIGITS`).

    Returns
    -------
    float or None
        The rounded value; ``0.0`` for either zero (no negative zero);
        ``None`` for nan and infinities.

    Examples
    --------
    >>> round_significant(-1.1400000000000001)
    -1.14
    >>> round_significant(-0.0)
    0.0
    """
    value = float(value)
    if not math.isfinite(value):
        return None
    if value == 0.0:
        return 0.0
    return float(f"{value:.{digits}g}")


def to_json_value(value):
    """Convert a result into plain JSON values: the one serialiser of every command.

    Parameters
    ----------
    value : object
        Records (dataclasses), NamedTuples, enums, findings, mappings with
        string keys, sequences, sets, paths, numpy scalars and arrays, and
        plain JSON values, nested in any way.

    Returns
    -------
    object
        Dicts, lists, strings, ints, bools, ``None`` and floats rounded by
        :func:`round_significant`. An enum becomes its value when that is a
        string and its lower-case name otherwise (a flag: the list of its
        members' names). A dataclass field with ``metadata={"json": False}``
        (an internal object kept for the edge) is left out.

    Raises
    ------
    TypeError
        A value of a type JSON cannot hold, or a mapping key that is not a
        string (keys are names, not data).
    """
    if value is None or isinstance(value, (bool, np.bool_)):
        return None if value is None else bool(value)
    if isinstance(value, enum.Enum):
        if isinstance(value.value, str):
            return value.value
        if isinstance(value, enum.Flag):
            return [m.name.lower() for m in type(value) if m.value and (value & m) == m]
        return value.name.lower()
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return round_significant(value)
    if isinstance(value, str):
        return value
    if isinstance(value, PurePath):
        return str(value)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_json_value(getattr(value, f.name)) for f in dataclasses.fields(value)
                if f.metadata.get("json", True)}
    if isinstance(value, tuple) and hasattr(value, "_fields"):  # NamedTuple
        return {name: to_json_value(getattr(value, name)) for name in value._fields}
    if isinstance(value, Mapping):
        out = {}
        for key, item in value.items():
            if not isinstance(key, str):
                raise TypeError(f"JSON keys are names, got {key!r}: use a list of records")
            out[key] = to_json_value(item)
        return out
    if isinstance(value, np.ndarray):
        return [to_json_value(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [to_json_value(v) for v in value]
    if isinstance(value, (set, frozenset)):
        return [to_json_value(v) for v in sorted(value)]
    if isinstance(value, complex):
        raise TypeError(f"complex value {value!r} has no JSON form: print its magnitude and phase")
    raise TypeError(f"cannot put a {type(value).__name__} into JSON")


def json_document(value) -> dict:
    """The JSON document of a command: ``schema_version``, ``compensator_version``, then ``value``'s fields.

    Parameters
    ----------
    value : record or mapping
        The command's result (a frozen record or a dict of named fields).

    Returns
    -------
    dict
        Plain JSON values, see :func:`to_json_value`.
    """
    from compensator import __version__

    body = to_json_value(value)
    if not isinstance(body, dict):
        raise TypeError("a JSON document is a record of named fields")
    return {"schema_version": SCHEMA_VERSION, "compensator_version": __version__, **body}


def dumps_json(value) -> str:
    """The document of ``value`` as indented strict JSON text, with a final newline.

    Parameters
    ----------
    value : record or mapping
        The command's result.
    """
    return json.dumps(json_document(value), indent=2, allow_nan=False) + "\n"


def field_names(document, path: str = "") -> list[tuple[str, str]]:
    """Every key of a JSON document with where it sits, depth first.

    Parameters
    ----------
    document : object
        A parsed JSON document.
    path : str, optional
        Prefix of the locations returned.

    Returns
    -------
    list of (str, str)
        ``(name, location)`` pairs, e.g. ``("gain", ".points[].gain")``.
    """
    found = []
    if isinstance(document, dict):
        for key, item in document.items():
            where = f"{path}.{key}"
            found.append((key, where))
            found.extend(field_names(item, where))
    elif isinstance(document, list):
        for item in document:
            found.extend(field_names(item, f"{path}[]"))
    return found


def unregistered_names(document) -> list[str]:
    """Locations of the keys of ``document`` that are not registered fields.

    Parameters
    ----------
    document : object
        A parsed JSON document.
    """
    return sorted({where for name, where in field_names(document) if name not in FIELDS})


def fields_markdown(names_by_command: Mapping[str, set] | None = None) -> str:
    """The reference of JSON fields as Markdown, optionally with the fields each command prints.

    Parameters
    ----------
    names_by_command : mapping of str to set of str, optional
        For each command (e.g. ``"calibrate iv"``), the names its JSON
        carries; listed before the registry when given.

    Returns
    -------
    str
        Markdown text ending in a newline.
    """
    lines = [
        "# JSON output fields",
        "",
        "Generated from `compensator/vocabulary.py` by `python tools/update_json_docs.py`; do not edit by hand.",
        "",
        f"Every command's `--json` document is one JSON object. It starts with `schema_version` (now "
        f"{SCHEMA_VERSION}; raised when a field is renamed, removed or changes its unit or meaning) and "
        f"`compensator_version`. Floats carry at most {SIGNIFICANT_DIGITS} significant digits; a value that is "
        "not a finite number is `null`; there is no negative zero. The unit is the last part of a name "
        "(`_v`, `_mv_per_k`, `_hz`, `_s`, `_c` for degree Celsius, `_pct` for percent); a plain fraction "
        "ends in `_fraction`; an uncertainty is one standard deviation and puts `_err` before the unit. "
        "Several items are always a list of records.",
        "",
    ]
    if names_by_command:
        lines += ["## Fields by command", ""]
        for command in sorted(names_by_command):
            names = sorted(names_by_command[command] - {"schema_version", "compensator_version"})
            lines.append(f"- `compensator {command} --json`: " + ", ".join(f"`{n}`" for n in names))
        lines.append("")
    for title, section in SECTIONS:
        lines += [f"## {title}", "", "| field | unit | meaning |", "|---|---|---|"]
        lines += [f"| `{f.name}` | {f.unit} | {f.description} |" for f in section]
        lines.append("")
    return "\n".join(lines)

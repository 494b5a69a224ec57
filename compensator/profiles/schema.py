"""The keys every profile kind accepts, with units, bounds and documentation.

This table is the single source of truth: the loader validates against it and
``hardware_profiles/README.md`` is generated from it (a test keeps the two in
step). Every key carries its unit in its name.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from compensator.physics.sipm import CROSSTALK_MODELS

__all__ = [
    "BOARD", "BOOL", "BREAKDOWN_DEFINITIONS", "CHOICE", "FLOAT", "INT", "KINDS", "SIPM", "STR", "THERMAL", "TOP_KEYS",
    "Key", "KindSchema", "Section",
]

FLOAT, INT, BOOL, STR, CHOICE = "float", "int", "bool", "str", "choice"

#: The definitions a breakdown voltage can carry, from bench to firmware.
BREAKDOWN_DEFINITIONS = (
    "gain_intercept",
    "iv_inverse_log_derivative",
    "iv_second_derivative",
    "iv_log_derivative_peak",
)


@dataclass(frozen=True)
class Key:
    """One key of a profile section.

    Attributes
    ----------
    name : str
        Key as written in YAML (unit in the name).
    kind : str
        One of ``"float"``, ``"int"``, ``"bool"``, ``"str"``, ``"choice"``.
    doc : str
        One-line description, with the unit spelled out.
    required : bool
        Whether the key must be present (for the variants it applies to).
    default : Any
        Value used when an optional key is absent.
    gt, ge, le, lt : float or None
        Bounds: greater than, greater or equal, less or equal, less than.
    choices : tuple of str
        Allowed values for ``"choice"`` keys.
    only_for : tuple of str
        Variants of the section (its switch key) this key belongs to; empty
        means all variants.
    """

    name: str
    kind: str
    doc: str
    required: bool = True
    default: Any = None
    gt: float | None = None
    ge: float | None = None
    le: float | None = None
    lt: float | None = None
    choices: tuple[str, ...] = ()
    only_for: tuple[str, ...] = ()


@dataclass(frozen=True)
class Section:
    """A mapping of keys inside a profile.

    ``switch`` names a choice key whose value selects which ``only_for`` keys
    apply.
    """

    name: str
    doc: str
    keys: tuple[Key, ...]
    required: bool = True
    switch: str | None = None


@dataclass(frozen=True)
class KindSchema:
    """The whole schema of one profile kind."""

    kind: str
    doc: str
    sections: tuple[Section, ...] = field(default_factory=tuple)


def _f(name, doc, **kw):
    return Key(name, FLOAT, doc, **kw)


def _opt(name, doc, default, **kw):
    return Key(name, FLOAT, doc, required=False, default=default, **kw)


def _converter_keys(what):
    """The static and drift errors shared by the ADC and the DAC sections."""
    return (
        _opt("reference_tempco_ppm_per_k", f"temperature coefficient bound of the {what} reference, ppm per kelvin "
             "of board temperature", 0.0, ge=0, le=1000),
        _opt("offset_lsb", f"offset bound of the {what} (either sign), LSB", 0.0, ge=0, le=1e4),
        _opt("gain_error_pct", f"gain error bound of the {what} (either sign), percent", 0.0, ge=0, le=50),
        _opt("inl_lsb", f"integral non-linearity bound of the {what} (either sign), LSB", 0.0, ge=0, le=1e4),
    )


SIPM = KindSchema(
    "sipm",
    "A silicon photomultiplier type: breakdown model, microcells, PDE, noise and limits.",
    (
        Section("breakdown", "Breakdown voltage against temperature: Vbd(T) = Vbd(Tref) + a (T - Tref) + b (T - Tref)^2.", (
            _f("breakdown_v_at_ref", "breakdown voltage at the reference temperature, volt", gt=0, le=200),
            _f("ref_temp_c", "reference temperature, degree Celsius", ge=-200, le=200),
            _f("tempco_mv_per_k", "linear temperature coefficient a, millivolt per kelvin", ge=0, le=500),
            _opt("curvature_mv_per_k2", "quadratic term b, millivolt per kelvin squared", 0.0, ge=-10, le=10),
            _opt("breakdown_err_v", "calibration uncertainty (1 sigma) of the breakdown voltage, volt", 0.0, ge=0, le=10),
            _opt("tempco_err_mv_per_k", "calibration uncertainty (1 sigma) of the tempco, millivolt per kelvin", 0.0, ge=0, le=100),
            Key("definition", CHOICE, "which breakdown voltage these values are: the intercept of gain against bias "
                "(gain_intercept, what a gain law needs) or an I-V turn-on method (iv_inverse_log_derivative, "
                "iv_second_derivative, iv_log_derivative_peak); they differ by tens to hundreds of millivolts",
                required=False, default="gain_intercept", choices=BREAKDOWN_DEFINITIONS),
            Key("definition_offset_v", FLOAT, "the gain-intercept breakdown minus this profile's breakdown, volt, "
                "when known (from I-V curves and gain scans at the same temperature); lets a gain law use an I-V "
                "breakdown, with a warning naming the offset", required=False, default=None, ge=-5, le=5),
            _opt("definition_offset_err_v", "uncertainty (1 sigma) of definition_offset_v, volt", 0.0, ge=0, le=5),
        )),
        Section("cell", "Microcells.", (
            _f("capacitance_f", "effective microcell capacitance (gain = C (V - Vbd) / q), farad", gt=0, le=1e-9),
            _opt("capacitance_tempco_ppm_per_k", "temperature coefficient of the cell capacitance, ppm per kelvin", 0.0, ge=-5000, le=5000),
            Key("count", INT, "number of microcells", gt=0, le=100_000_000),
            _opt("recovery_time_s", "microcell recovery time constant, second", 50e-9, gt=0, le=1e-3),
        )),
        Section("pde", "Photon detection efficiency PDE(Vov) = max (1 - exp(-Vov / Vsat)).", (
            _f("max_fraction", "asymptotic PDE at the design wavelength, fraction 0..1", gt=0, le=1),
            _f("saturation_overvoltage_v", "overvoltage scale Vsat of the PDE rise, volt", gt=0, le=100),
        )),
        Section("dark", "Dark count rate DCR(T, Vov) = rate (Vov / Vref)^n 2^((T - Tref) / Td).", (
            _f("rate_hz", "dark count rate of the whole device at the reference point, hertz", ge=0, le=1e12),
            _f("ref_temp_c", "reference temperature of the dark rate, degree Celsius", ge=-200, le=200),
            _f("ref_overvoltage_v", "reference overvoltage of the dark rate, volt", gt=0, le=50),
            _f("doubling_temp_k", "temperature rise that doubles the dark rate, kelvin", ge=0.1, le=100),
            _opt("overvoltage_exponent", "exponent n of the overvoltage dependence", 1.0, ge=0, le=5),
        )),
        Section("crosstalk", "Prompt optical crosstalk p(Vov) = 1 - exp(-k Vov^n), k set by the reference point; "
                "each primary brings 1/(1 - p) avalanches (geometric chain) or 1/(1 - lambda), lambda = -ln(1 - p) "
                "(branching Poisson; Vinogradov, NIM A 695, 247, 2012).", (
            _f("probability", "crosstalk probability at the reference overvoltage, fraction 0..1", ge=0, lt=1),
            _f("ref_overvoltage_v", "reference overvoltage of the crosstalk, volt", gt=0, le=50),
            _opt("overvoltage_exponent", "exponent n of the overvoltage dependence", 2.0, ge=0, le=5),
            Key("model", CHOICE, "how a primary avalanche multiplies: geometric (chain, mean 1/(1 - p)) or "
                "branching_poisson (Borel, mean 1/(1 - lambda), needs p below 1 - 1/e)", required=False,
                default="geometric", choices=CROSSTALK_MODELS),
        )),
        Section("limits", "Absolute limits of the sensor.", (
            _f("max_overvoltage_v", "highest overvoltage allowed, volt", gt=0, le=50),
            _opt("min_overvoltage_v", "lowest useful overvoltage, volt", 0.5, ge=0, le=50),
            _f("max_current_a", "highest steady current allowed, ampere", gt=0, le=1),
        )),
        Section("scintillator", "Optional: the crystal read by the SiPM, for the constant_response law (light yield "
                "Y(T) = 1 + a (T - Tref) + b (T - Tref)^2).", (
            _opt("ref_temp_c", "temperature where the relative light yield is 1, degree Celsius", 25.0, ge=-200, le=200),
            _f("light_yield_tempco_pct_per_k", "linear light-yield coefficient a, percent per kelvin", ge=-5, le=5),
            _opt("light_yield_curvature_pct_per_k2", "quadratic light-yield coefficient b, percent per kelvin squared",
                 0.0, ge=-0.1, le=0.1),
            _opt("light_yield_tempco_err_pct_per_k", "uncertainty (1 sigma) of a, percent per kelvin", 0.0, ge=0, le=5),
        ), required=False),
    ),
)

BOARD = KindSchema(
    "board",
    "A controller board: temperature sensor and its front end, ADC, DAC, bias supply network, control rate and limits.",
    (
        Section("temperature_sensor", "The sensor that reads the SiPM temperature.", (
            Key("type", CHOICE, "sensor model", choices=("ntc_beta", "ntc_steinhart_hart", "rtd")),
            _f("r25_ohm", "NTC resistance at 25 degree Celsius, ohm", gt=0, le=1e8, only_for=("ntc_beta", "ntc_steinhart_hart")),
            _f("beta_k", "NTC Beta constant, kelvin", ge=100, le=20000, only_for=("ntc_beta",)),
            _f("sh_a_per_k", "Steinhart-Hart coefficient a, 1/kelvin", ge=-1, le=1, only_for=("ntc_steinhart_hart",)),
            _f("sh_b_per_k", "Steinhart-Hart coefficient b, 1/kelvin per ln(ohm)", ge=-1, le=1, only_for=("ntc_steinhart_hart",)),
            _f("sh_c_per_k", "Steinhart-Hart coefficient c, 1/kelvin per ln(ohm)^3", ge=-1, le=1, only_for=("ntc_steinhart_hart",)),
            Key("r25_tolerance_pct", FLOAT, "tolerance of the NTC resistance at 25 degree Celsius, percent",
                required=False, default=1.0, ge=0, le=50, only_for=("ntc_beta", "ntc_steinhart_hart")),
            Key("beta_tolerance_pct", FLOAT, "tolerance of the NTC Beta constant, percent",
                required=False, default=1.0, ge=0, le=50, only_for=("ntc_beta", "ntc_steinhart_hart")),
            _f("r0_ohm", "RTD resistance at 0 degree Celsius, ohm (100 or 1000 for Pt100, Pt1000)", gt=0, le=1e5, only_for=("rtd",)),
            Key("tolerance_class", CHOICE, "IEC 60751 tolerance class of the RTD", choices=("AA", "A", "B", "C"),
                only_for=("rtd",)),
            _opt("self_heating_k", "temperature error from self-heating at the excitation used, kelvin", 0.0, ge=0, le=50),
            _opt("sensor_to_die_k", "uncertainty of the offset between sensor and SiPM die, kelvin", 0.0, ge=0, le=50),
            _opt("time_constant_s", "first-order lag of the sensor itself, second", 0.0, ge=0, le=3600),
            _opt("die_to_sensor_time_constant_s", "first-order lag of the thermal path from the SiPM die to the sensor, "
                 "second (the reading lags the die by the ramp rate times the sum of both lags)", 0.0, ge=0, le=3600),
        ), switch="type"),
        Section("front_end", "Resistive divider from the excitation to ground, read by the ADC.", (
            Key("sensor_position", CHOICE, "where the sensor sits in the divider: low (to ground) or high (to excitation)",
                choices=("low", "high")),
            _f("reference_resistor_ohm", "fixed divider resistor, ohm", gt=0, le=1e9),
            _opt("reference_resistor_tolerance_pct", "tolerance of the fixed resistor, percent", 0.1, ge=0, le=50),
            _opt("reference_resistor_tempco_ppm_per_k", "temperature coefficient bound of the fixed resistor (relative to "
                 "the sensor's own), ppm per kelvin of board temperature", 0.0, ge=0, le=1000),
            _f("excitation_v", "divider excitation voltage, volt", gt=0, le=50),
            _opt("excitation_tolerance_pct", "tolerance of the excitation voltage, percent (matters only when the "
                 "ADC is not ratiometric)", 0.1, ge=0, le=50),
            _opt("excitation_tempco_ppm_per_k", "temperature coefficient bound of the excitation, ppm per kelvin "
                 "(matters only when the ADC is not ratiometric)", 0.0, ge=0, le=1000),
            Key("ratiometric", BOOL, "true when the ADC reference is the excitation itself (reference errors cancel)"),
        )),
        Section("adc", "The ADC that reads the temperature divider.", (
            Key("bits", INT, "resolution, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.1, ge=0, le=50),
            *_converter_keys("ADC"),
        )),
        Section("dac", "The DAC that sets the bias.", (
            Key("bits", INT, "resolution, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.05, ge=0, le=50),
            *_converter_keys("DAC"),
        )),
        Section("supply", "Bias supply: DAC into a regulator's feedback node (feedback_injection) or into an amplifier (direct).", (
            Key("topology", CHOICE, "network topology", choices=("feedback_injection", "direct")),
            _f("feedback_v", "regulator feedback reference voltage, volt", gt=0, le=50, only_for=("feedback_injection",)),
            Key("feedback_tolerance_pct", FLOAT, "tolerance of the regulator's feedback reference, percent",
                required=False, default=0.0, ge=0, le=50, only_for=("feedback_injection",)),
            Key("feedback_tempco_ppm_per_k", FLOAT, "temperature coefficient bound of the regulator's feedback "
                "reference, ppm per kelvin of board temperature", required=False, default=0.0, ge=0, le=1000,
                only_for=("feedback_injection",)),
            _f("r1_ohm", "resistor from output to feedback node, ohm", gt=0, le=1e9, only_for=("feedback_injection",)),
            _f("r2_ohm", "resistor from feedback node to ground, ohm", gt=0, le=1e9, only_for=("feedback_injection",)),
            _f("r3_ohm", "resistor from DAC output to feedback node, ohm", gt=0, le=1e9, only_for=("feedback_injection",)),
            _f("gain_v_per_v", "amplifier gain from DAC volts to output volts", ge=-1e4, le=1e4, only_for=("direct",)),
            _f("offset_v", "output voltage at DAC code 0, volt", ge=-200, le=200, only_for=("direct",)),
            _opt("resistor_tolerance_pct", "tolerance of the network resistors (or of the amplifier gain), percent", 0.1,
                 ge=0, le=50),
            _opt("resistor_tempco_ppm_per_k", "temperature coefficient bound of each network resistor (of the "
                 "amplifier's gain-setting resistors), ppm per kelvin of board temperature", 0.0, ge=0, le=1000),
            Key("resistor_tracking_ppm_per_k", FLOAT, "bound of the difference between two network resistors' "
                "coefficients, ppm per kelvin (a matched network tracks to a few; default: independent parts)",
                required=False, default=None, ge=0, le=2000),
            _f("min_output_v", "lowest output the regulator can deliver, volt", ge=0, le=200),
            _f("max_output_v", "highest output the regulator can deliver, volt", gt=0, le=200),
            _f("series_resistor_ohm", "series filter resistor between supply and SiPM, ohm", ge=0, le=1e8),
            _opt("filter_capacitance_f", "filter capacitor at the SiPM side of the series resistor, farad", 100e-9, ge=0, le=1),
            _opt("regulator_time_constant_s", "closed-loop time constant of the regulator's output, second", 1e-4,
                 ge=0, le=10),
        ), switch="topology"),
        Section("control", "Firmware timing.", (
            _f("rate_hz", "bias update (control loop) rate, hertz", gt=0, le=1e6),
        )),
        Section("limits", "Operating range and safety limits of the board.", (
            _f("min_temp_c", "lowest operating temperature of the SiPM, degree Celsius", ge=-200, le=200),
            _f("max_temp_c", "highest operating temperature of the SiPM, degree Celsius", ge=-200, le=200),
            _f("max_bias_v", "highest bias the board may ever apply, volt", gt=0, le=200),
            Key("safe_dac_code", INT, "DAC code applied when the temperature reading is invalid "
                "(default: the code giving the lowest output)", required=False, default=None, ge=0, le=(1 << 24) - 1),
        )),
        Section("electronics", "Optional: the temperature the board's electronics sit at, which may differ from the "
                "SiPM's (the electronics follow the SiPM linearly between the two ends of its range).", (
            _opt("ref_temp_c", "temperature at which the tolerances hold (drifts count from here), degree Celsius",
                 25.0, ge=-200, le=200),
            Key("min_temp_c", FLOAT, "temperature of the electronics while the SiPM is at limits.min_temp_c, degree "
                "Celsius (default: the same)", required=False, default=None, ge=-200, le=200),
            Key("max_temp_c", FLOAT, "temperature of the electronics while the SiPM is at limits.max_temp_c, degree "
                "Celsius (default: the same)", required=False, default=None, ge=-200, le=200),
        ), required=False),
        Section("current_sense", "Optional: the SiPM current read by an ADC through a transimpedance or shunt stage "
                "(needed for the measured series-resistor drop correction).", (
            Key("adc_bits", INT, "resolution of the current ADC, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage of the current ADC, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.1, ge=0, le=50),
            _f("sense_gain_v_per_a", "volts at the ADC input per ampere of SiPM current, volt per ampere", gt=0, le=1e12),
            _opt("gain_tolerance_pct", "tolerance of the sense gain (resistor and amplifier), percent", 0.5, ge=0, le=50),
            _opt("gain_tempco_ppm_per_k", "temperature coefficient bound of the sense gain, ppm per kelvin of board "
                 "temperature", 0.0, ge=0, le=1000),
            _opt("offset_a", "largest input offset referred to the SiPM current (either sign), ampere", 0.0, ge=0, le=1),
            _opt("offset_drift_a_per_k", "drift bound of the input offset, ampere per kelvin of board temperature",
                 0.0, ge=0, le=1e-3),
        ), required=False),
        Section("bias_readback", "Optional: the supply output measured back through a divider by an ADC (needed to "
                "close a bias loop; without it the bias is set open-loop and no bias loop is tuned).", (
            Key("adc_bits", INT, "resolution of the read-back ADC, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage of the read-back ADC, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.1, ge=0, le=10),
            _f("divider_ratio_v_per_v", "volts at the ADC input per volt of supply output (divider ratio, "
               "0 to 1), volt per volt", gt=0, le=1),
            _opt("divider_tolerance_pct", "tolerance of the divider ratio, percent", 0.1, ge=0, le=10),
            _opt("offset_v", "largest offset referred to the supply output (either sign), volt", 0.0, ge=0, le=10),
            _opt("filter_time_constant_s", "first-order lag of the read-back filter, second", 0.0, ge=0, le=10),
        ), required=False),
    ),
)

THERMAL = KindSchema(
    "thermal",
    "A thermoelectric cooler on a cold plate that carries the SiPM, with hot-side heat sink and ambient.",
    (
        Section("peltier", "The thermoelectric module (lumped module parameters).", (
            _f("seebeck_v_per_k", "module Seebeck coefficient S, volt per kelvin", gt=0, le=1),
            _f("resistance_ohm", "module electrical resistance R, ohm", gt=0, le=1e3),
            _f("conductance_w_per_k", "module thermal conductance K, watt per kelvin", gt=0, le=1e3),
            _f("max_current_a", "highest drive current, ampere", gt=0, le=100),
        )),
        Section("cold_plate", "The cold plate that carries the sensor.", (
            _f("heat_capacity_j_per_k", "heat capacity, joule per kelvin", gt=0, le=1e6),
            _opt("heat_load_w", "heat dissipated on the plate by the electronics, watt", 0.0, ge=0, le=1e3),
            _f("leak_conductance_w_per_k", "thermal conductance from plate to ambient, watt per kelvin", ge=0, le=1e3),
        )),
        Section("hot_side", "Hot side and heat sink.", (
            _f("heat_capacity_j_per_k", "heat capacity of the hot side and sink, joule per kelvin", gt=0, le=1e7),
            _f("sink_resistance_k_per_w", "heat-sink thermal resistance to ambient, kelvin per watt", gt=0, le=1e3),
        )),
        Section("sensor", "The cold-plate temperature measurement.", (
            _f("time_constant_s", "first-order lag of the sensor, second", ge=0, le=3600),
            _opt("dead_time_s", "transport and conversion delay, second", 0.0, ge=0, le=600),
        )),
        Section("ambient", "Nominal surroundings.", (
            _f("temp_c", "ambient temperature, degree Celsius", ge=-100, le=100),
            _opt("relative_humidity_pct", "relative humidity, percent", 50.0, ge=0, le=100),
        )),
        Section("control", "Cooler loop timing and setpoint.", (
            _f("rate_hz", "cooler control rate, hertz", gt=0, le=1e4),
            _f("setpoint_temp_c", "cold-plate setpoint, degree Celsius", ge=-100, le=100),
        )),
        Section("limits", "Safety limits.", (
            _f("max_hot_temp_c", "hot-side temperature that forces the cooler off, degree Celsius", ge=-100, le=200),
            _opt("dew_margin_k", "margin kept between the cold plate and the dew point, kelvin", 3.0, ge=0, le=50),
        )),
    ),
)

KINDS: dict[str, KindSchema] = {s.kind: s for s in (SIPM, BOARD, THERMAL)}

#: Keys allowed at the top of every profile besides the sections.
TOP_KEYS = (
    Key("kind", CHOICE, "profile kind", choices=tuple(KINDS)),
    Key("name", STR, "short identifier used in generated files and reports"),
    Key("description", STR, "free text", required=False, default=""),
)

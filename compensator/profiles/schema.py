"""The keys every profile kind accepts, with units, bounds and documentation.

This table is the single source of truth: the loader validates against it and
``hardware_profiles/README.md`` is generated from it (a test keeps the two in
step). Every key carries its unit in its name.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

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


SIPM = KindSchema(
    "sipm",
    "A silicon photomultiplier type: breakdown model, microcells, PDE, noise and limits.",
    (
        Section("breakdown", "Breakdown voltage against temperature: Vbd(T) = Vbd(Tref) + a (T - Tref) + b (T - Tref)^2.", (
            _f("breakdown_v_at_ref", "breakdown voltage at the reference temperature, volt", gt=0, le=200),
            _f("ref_temp_c", "reference temperature, degree Celsius", ge=-273.15, le=200),
            _f("tempco_mv_per_k", "linear temperature coefficient a, millivolt per kelvin", ge=0, le=500),
            _opt("curvature_mv_per_k2", "quadratic term b, millivolt per kelvin squared", 0.0, ge=-10, le=10),
            _opt("breakdown_err_v", "calibration uncertainty (1 sigma) of the breakdown voltage, volt", 0.0, ge=0),
            _opt("tempco_err_mv_per_k", "calibration uncertainty (1 sigma) of the tempco, millivolt per kelvin", 0.0, ge=0),
            Key("definition", CHOICE, "which breakdown voltage these values are: the intercept of gain against bias "
                "(gain_intercept, what a gain law needs) or an I-V turn-on method (iv_inverse_log_derivative, "
                "iv_second_derivative, iv_log_derivative_peak); they differ by tens to hundreds of millivolts",
                required=False, default="gain_intercept", choices=BREAKDOWN_DEFINITIONS),
        )),
        Section("cell", "Microcells.", (
            _f("capacitance_f", "effective microcell capacitance (gain = C (V - Vbd) / q), farad", gt=0, le=1e-9),
            _opt("capacitance_tempco_ppm_per_k", "temperature coefficient of the cell capacitance, ppm per kelvin", 0.0, ge=-5000, le=5000),
            Key("count", INT, "number of microcells", gt=0),
            _opt("recovery_time_s", "microcell recovery time constant, second", 50e-9, gt=0),
        )),
        Section("pde", "Photon detection efficiency PDE(Vov) = max (1 - exp(-Vov / Vsat)).", (
            _f("max_fraction", "asymptotic PDE at the design wavelength, fraction 0..1", gt=0, le=1),
            _f("saturation_overvoltage_v", "overvoltage scale Vsat of the PDE rise, volt", gt=0),
        )),
        Section("dark", "Dark count rate DCR(T, Vov) = rate (Vov / Vref)^n 2^((T - Tref) / Td).", (
            _f("rate_hz", "dark count rate of the whole device at the reference point, hertz", ge=0),
            _f("ref_temp_c", "reference temperature of the dark rate, degree Celsius", ge=-273.15, le=200),
            _f("ref_overvoltage_v", "reference overvoltage of the dark rate, volt", gt=0),
            _f("doubling_temp_k", "temperature rise that doubles the dark rate, kelvin", gt=0),
            _opt("overvoltage_exponent", "exponent n of the overvoltage dependence", 1.0, ge=0, le=5),
        )),
        Section("crosstalk", "Prompt optical crosstalk p(Vov) = 1 - exp(-k Vov^n), k set by the reference point.", (
            _f("probability", "crosstalk probability at the reference overvoltage, fraction 0..1", ge=0, lt=1),
            _f("ref_overvoltage_v", "reference overvoltage of the crosstalk, volt", gt=0),
            _opt("overvoltage_exponent", "exponent n of the overvoltage dependence", 2.0, ge=0, le=5),
        )),
        Section("limits", "Absolute limits of the sensor.", (
            _f("max_overvoltage_v", "highest overvoltage allowed, volt", gt=0, le=50),
            _opt("min_overvoltage_v", "lowest useful overvoltage, volt", 0.5, ge=0),
            _f("max_current_a", "highest steady current allowed, ampere", gt=0, le=1),
        )),
    ),
)

BOARD = KindSchema(
    "board",
    "A controller board: temperature sensor and its front end, ADC, DAC, bias supply network, control rate and limits.",
    (
        Section("temperature_sensor", "The sensor that reads the SiPM temperature.", (
            Key("type", CHOICE, "sensor model", choices=("ntc_beta", "ntc_steinhart_hart", "rtd")),
            _f("r25_ohm", "NTC resistance at 25 degree Celsius, ohm", gt=0, only_for=("ntc_beta", "ntc_steinhart_hart")),
            _f("beta_k", "NTC Beta constant, kelvin", gt=0, only_for=("ntc_beta",)),
            _f("sh_a_per_k", "Steinhart-Hart coefficient a, 1/kelvin", only_for=("ntc_steinhart_hart",)),
            _f("sh_b_per_k", "Steinhart-Hart coefficient b, 1/kelvin per ln(ohm)", only_for=("ntc_steinhart_hart",)),
            _f("sh_c_per_k", "Steinhart-Hart coefficient c, 1/kelvin per ln(ohm)^3", only_for=("ntc_steinhart_hart",)),
            Key("r25_tolerance_pct", FLOAT, "tolerance of the NTC resistance at 25 degree Celsius, percent",
                required=False, default=1.0, ge=0, only_for=("ntc_beta", "ntc_steinhart_hart")),
            Key("beta_tolerance_pct", FLOAT, "tolerance of the NTC Beta constant, percent",
                required=False, default=1.0, ge=0, only_for=("ntc_beta", "ntc_steinhart_hart")),
            _f("r0_ohm", "RTD resistance at 0 degree Celsius, ohm (100 or 1000 for Pt100, Pt1000)", gt=0, only_for=("rtd",)),
            Key("tolerance_class", CHOICE, "IEC 60751 tolerance class of the RTD", choices=("AA", "A", "B", "C"),
                only_for=("rtd",)),
            _opt("self_heating_k", "temperature error from self-heating at the excitation used, kelvin", 0.0, ge=0),
            _opt("sensor_to_die_k", "uncertainty of the offset between sensor and SiPM die, kelvin", 0.0, ge=0),
        ), switch="type"),
        Section("front_end", "Resistive divider from the excitation to ground, read by the ADC.", (
            Key("sensor_position", CHOICE, "where the sensor sits in the divider: low (to ground) or high (to excitation)",
                choices=("low", "high")),
            _f("reference_resistor_ohm", "fixed divider resistor, ohm", gt=0),
            _opt("reference_resistor_tolerance_pct", "tolerance of the fixed resistor, percent", 0.1, ge=0),
            _f("excitation_v", "divider excitation voltage, volt", gt=0, le=50),
            _opt("excitation_tolerance_pct", "tolerance of the excitation voltage, percent (matters only when the "
                 "ADC is not ratiometric)", 0.1, ge=0),
            Key("ratiometric", BOOL, "true when the ADC reference is the excitation itself (reference errors cancel)"),
        )),
        Section("adc", "The ADC that reads the temperature divider.", (
            Key("bits", INT, "resolution, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.1, ge=0),
        )),
        Section("dac", "The DAC that sets the bias.", (
            Key("bits", INT, "resolution, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.05, ge=0),
        )),
        Section("supply", "Bias supply: DAC into a regulator's feedback node (feedback_injection) or into an amplifier (direct).", (
            Key("topology", CHOICE, "network topology", choices=("feedback_injection", "direct")),
            _f("feedback_v", "regulator feedback reference voltage, volt", gt=0, only_for=("feedback_injection",)),
            _f("r1_ohm", "resistor from output to feedback node, ohm", gt=0, only_for=("feedback_injection",)),
            _f("r2_ohm", "resistor from feedback node to ground, ohm", gt=0, only_for=("feedback_injection",)),
            _f("r3_ohm", "resistor from DAC output to feedback node, ohm", gt=0, only_for=("feedback_injection",)),
            _f("gain_v_per_v", "amplifier gain from DAC volts to output volts", only_for=("direct",)),
            _f("offset_v", "output voltage at DAC code 0, volt", only_for=("direct",)),
            _opt("resistor_tolerance_pct", "tolerance of the network resistors (or of the amplifier gain), percent", 0.1, ge=0),
            _f("min_output_v", "lowest output the regulator can deliver, volt", ge=0),
            _f("max_output_v", "highest output the regulator can deliver, volt", gt=0, le=200),
            _f("series_resistor_ohm", "series filter resistor between supply and SiPM, ohm", ge=0),
            _opt("filter_capacitance_f", "filter capacitor at the SiPM side of the series resistor, farad", 100e-9, ge=0),
            _opt("regulator_time_constant_s", "closed-loop time constant of the regulator's output, second", 1e-4,
                 ge=0, le=10),
        ), switch="topology"),
        Section("control", "Firmware timing.", (
            _f("rate_hz", "bias update (control loop) rate, hertz", gt=0, le=1e6),
        )),
        Section("limits", "Operating range and safety limits of the board.", (
            _f("min_temp_c", "lowest operating temperature, degree Celsius", ge=-273.15),
            _f("max_temp_c", "highest operating temperature, degree Celsius", le=500),
            _f("max_bias_v", "highest bias the board may ever apply, volt", gt=0, le=200),
            Key("safe_dac_code", INT, "DAC code applied when the temperature reading is invalid "
                "(default: the code giving the lowest output)", required=False, default=None, ge=0),
        )),
        Section("current_sense", "Optional: the SiPM current read by an ADC through a transimpedance or shunt stage "
                "(needed for the measured series-resistor drop correction).", (
            Key("adc_bits", INT, "resolution of the current ADC, bits", ge=6, le=24),
            _f("reference_v", "full-scale reference voltage of the current ADC, volt", gt=0, le=50),
            _opt("reference_tolerance_pct", "reference voltage tolerance, percent", 0.1, ge=0),
            _f("sense_gain_v_per_a", "volts at the ADC input per ampere of SiPM current, volt per ampere", gt=0),
            _opt("gain_tolerance_pct", "tolerance of the sense gain (resistor and amplifier), percent", 0.5, ge=0),
            _opt("offset_a", "largest input offset referred to the SiPM current (either sign), ampere", 0.0, ge=0),
        ), required=False),
    ),
)

THERMAL = KindSchema(
    "thermal",
    "A thermoelectric cooler on a cold plate that carries the SiPM, with hot-side heat sink and ambient.",
    (
        Section("peltier", "The thermoelectric module (lumped module parameters).", (
            _f("seebeck_v_per_k", "module Seebeck coefficient S, volt per kelvin", gt=0),
            _f("resistance_ohm", "module electrical resistance R, ohm", gt=0),
            _f("conductance_w_per_k", "module thermal conductance K, watt per kelvin", gt=0),
            _f("max_current_a", "highest drive current, ampere", gt=0),
        )),
        Section("cold_plate", "The cold plate that carries the sensor.", (
            _f("heat_capacity_j_per_k", "heat capacity, joule per kelvin", gt=0),
            _opt("heat_load_w", "heat dissipated on the plate by the electronics, watt", 0.0, ge=0),
            _f("leak_conductance_w_per_k", "thermal conductance from plate to ambient, watt per kelvin", ge=0),
        )),
        Section("hot_side", "Hot side and heat sink.", (
            _f("heat_capacity_j_per_k", "heat capacity of the hot side and sink, joule per kelvin", gt=0),
            _f("sink_resistance_k_per_w", "heat-sink thermal resistance to ambient, kelvin per watt", gt=0),
        )),
        Section("sensor", "The cold-plate temperature measurement.", (
            _f("time_constant_s", "first-order lag of the sensor, second", ge=0),
            _opt("dead_time_s", "transport and conversion delay, second", 0.0, ge=0),
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
            _f("max_hot_temp_c", "hot-side temperature that forces the cooler off, degree Celsius", le=200),
            _opt("dew_margin_k", "margin kept between the cold plate and the dew point, kelvin", 3.0, ge=0),
        )),
    ),
)

# The field-scenario kind lives in a module of its own (it imports the classes above).
from compensator.profiles.scenario import SCENARIO  # noqa: E402

KINDS: dict[str, KindSchema] = {s.kind: s for s in (SIPM, BOARD, THERMAL, SCENARIO)}

#: Keys allowed at the top of every profile besides the sections.
TOP_KEYS = (
    Key("kind", CHOICE, "profile kind", choices=tuple(KINDS)),
    Key("name", STR, "short identifier used in generated files and reports"),
    Key("description", STR, "free text", required=False, default=""),
)

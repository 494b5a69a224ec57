"""The instrument's signal chain for many units at once: sensor -> ADC code, DAC code -> bias at the SiPM -> gain.

Every function broadcasts over arrays: units along the first axis, ticks
along the last. A unit differs from its profiles by the deviations in
:class:`UnitDraws` (all zero for the nominal, calibrated unit); they are drawn
as the gain-error budget draws them (:mod:`compensator.law.budget`): a
tolerance ``+-a`` uniformly within its limits, a calibration uncertainty
from a Gaussian with the profile's one sigma, self-heating and the
sensor-to-die offset uniformly within +- the board's value (common practice,
GUM conventions).

The chain of one tick::

    sensor temperature (die, lag, offsets, self-heating, noise) -> sensor
    resistance (tolerances) -> divider (reference resistor) -> ADC code
    (reference and excitation unless ratiometric; floor, clip)
    ... firmware ...
    DAC code -> network output (DAC reference, resistors; the regulator's limits)
    -> bias at the SiPM after the series resistor, V = Vout - R I(V, T)
    -> overvoltage -> gain, PDE, dark rate

The operating point ``V = Vout - R I(V)`` is found by two fixed-point steps
from ``Vout``; the iteration contracts by ``R dI/dV`` (about 1e-3 for the
demo boards), so the second step leaves an error near ``(R dI/dV)^2 R I``,
far below a microvolt.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np

from compensator.constants import ELEMENTARY_CHARGE_C, ZERO_C_IN_K
from compensator.errors import ModelError
from compensator.physics.sensors import RTD_TOLERANCE_CLASSES, T25_K, RtdSensor

__all__ = [
    "UnitDraws", "nominal_units", "draw_units", "DeviceFactors", "device_factors", "SupplyUnits", "supply_units",
    "sensor_adc_code", "network_output_v", "sipm_current_a", "bias_at_sipm_v", "current_adc_code",
]


@dataclass(frozen=True, kw_only=True)
class UnitDraws:
    """How each of ``n`` units differs from its profiles (arrays of shape ``(n,)``).

    Relative deviations are fractions (0.001 = 0.1 %).

    Attributes
    ----------
    ntc_r25, ntc_beta : ndarray
        NTC resistance at 25 C and Beta, relative.
    rtd_offset_k, rtd_slope : ndarray
        RTD class error ``offset + slope |t|``: kelvin, kelvin per kelvin.
    self_heating_k, sensor_to_die_k : ndarray
        Temperature offsets of the sensor, kelvin.
    reference_resistor, adc_reference, excitation : ndarray
        Divider resistor, ADC reference and excitation, relative.
    dac_reference : ndarray
        Relative.
    r1, r2, r3, amp_gain : ndarray
        Supply network resistors (feedback injection) or amplifier gain (direct), relative.
    breakdown_v : ndarray
        Breakdown voltage at the reference temperature, volt.
    tempco_mv_per_k : ndarray
        Temperature coefficient, millivolt per kelvin.
    isense_gain, isense_reference : ndarray
        Current-sense gain and ADC reference, relative.
    isense_offset_a : ndarray
        Current-sense offset, ampere.
    """

    ntc_r25: np.ndarray
    ntc_beta: np.ndarray
    rtd_offset_k: np.ndarray
    rtd_slope: np.ndarray
    self_heating_k: np.ndarray
    sensor_to_die_k: np.ndarray
    reference_resistor: np.ndarray
    adc_reference: np.ndarray
    excitation: np.ndarray
    dac_reference: np.ndarray
    r1: np.ndarray
    r2: np.ndarray
    r3: np.ndarray
    amp_gain: np.ndarray
    breakdown_v: np.ndarray
    tempco_mv_per_k: np.ndarray
    isense_gain: np.ndarray
    isense_reference: np.ndarray
    isense_offset_a: np.ndarray

    @property
    def count(self) -> int:
        """Number of units."""
        return int(self.breakdown_v.size)

    def take(self, index) -> "UnitDraws":
        """The units at ``index`` (an integer array or slice)."""
        return UnitDraws(**{f.name: np.asarray(getattr(self, f.name))[index] for f in fields(self)})

    def as_records(self) -> list[dict]:
        """One ``{name: value}`` per unit, only the deviations that are not zero."""
        names = [f.name for f in fields(self)]
        cols = [np.asarray(getattr(self, n), dtype=float) for n in names]
        return [{n: float(c[i]) for n, c in zip(names, cols) if c[i] != 0.0} for i in range(self.count)]


def nominal_units(count: int = 1) -> UnitDraws:
    """``count`` units exactly as their profiles say (every deviation zero).

    Parameters
    ----------
    count : int
    """
    return UnitDraws(**{f.name: np.zeros(count) for f in fields(UnitDraws)})


#: Which deviations each Monte Carlo tolerance group draws.
GROUPS = {
    "sensor": ("ntc_r25", "ntc_beta", "rtd_offset_k", "rtd_slope"),
    "front_end": ("reference_resistor", "adc_reference", "excitation"),
    "dac": ("dac_reference",),
    "supply": ("r1", "r2", "r3", "amp_gain"),
    "breakdown": ("breakdown_v", "tempco_mv_per_k"),
    "sensor_to_die": ("sensor_to_die_k",),
    "self_heating": ("self_heating_k",),
    "current_sense": ("isense_gain", "isense_reference", "isense_offset_a"),
}


def _limits(board, sipm) -> dict:
    """Per deviation: ("uniform", limit) or ("normal", sigma), from the profiles."""
    sensor = board.temperature.sensor
    fe = board.temperature.front_end
    supply = board.supply
    bd = sipm.breakdown
    out = {}
    if isinstance(sensor, RtdSensor):
        offset_k, slope = RTD_TOLERANCE_CLASSES[sensor.tolerance_class]
        out.update(rtd_offset_k=("uniform", offset_k), rtd_slope=("uniform", slope))
    else:
        out.update(ntc_r25=("uniform", 1e-2 * sensor.r25_tolerance_pct),
                   ntc_beta=("uniform", 1e-2 * sensor.beta_tolerance_pct))
    out.update(self_heating_k=("uniform", sensor.self_heating_k), sensor_to_die_k=("uniform", sensor.sensor_to_die_k),
               reference_resistor=("uniform", 1e-2 * fe.reference_resistor_tolerance_pct),
               dac_reference=("uniform", 1e-2 * supply.dac.reference_tolerance_pct),
               breakdown_v=("normal", bd.breakdown_err_v), tempco_mv_per_k=("normal", bd.tempco_err_mv_per_k))
    if not fe.ratiometric:
        out.update(adc_reference=("uniform", 1e-2 * fe.adc_reference_tolerance_pct),
                   excitation=("uniform", 1e-2 * fe.excitation_tolerance_pct))
    tol = 1e-2 * supply.resistor_tolerance_pct
    if supply.topology == "feedback_injection":
        out.update(r1=("uniform", tol), r2=("uniform", tol), r3=("uniform", tol))
    else:
        out.update(amp_gain=("uniform", tol))
    sense = board.current_sense
    if sense is not None:
        out.update(isense_gain=("uniform", 1e-2 * sense.gain_tolerance_pct),
                   isense_reference=("uniform", 1e-2 * sense.reference_tolerance_pct),
                   isense_offset_a=("uniform", sense.offset_a))
    return out


def draw_units(board, sipm, unit_index, *, seed: int, groups=tuple(GROUPS)) -> UnitDraws:
    """Draw the deviations of units from the tolerances in their profiles.

    Each unit has its own random stream, seeded by ``(seed, unit index)``, so
    a unit's draws do not depend on how the units are split into chunks.

    Parameters
    ----------
    board : BoardProfile
    sipm : Sipm
        The device model (its breakdown uncertainties).
    unit_index : array_like of int
        Indices of the units to draw.
    seed : int
    groups : sequence of str
        Tolerance groups to draw (keys of :data:`GROUPS`); the others stay zero.

    Returns
    -------
    UnitDraws
    """
    unknown = [g for g in groups if g not in GROUPS]
    if unknown:
        raise ModelError(f"unknown tolerance group {unknown[0]!r} (known: {', '.join(GROUPS)})", key="groups")
    index = np.atleast_1d(np.asarray(unit_index, dtype=np.int64))
    limits = _limits(board, sipm)
    names = [f.name for f in fields(UnitDraws)]
    wanted = {n for g in groups for n in GROUPS[g]}
    values = {n: np.zeros(index.size) for n in names}
    for row, unit in enumerate(index):
        rng = np.random.default_rng([int(seed), int(unit)])
        # a fixed number of draws per unit, in a fixed order, whatever is wanted
        uniform = rng.uniform(-1.0, 1.0, size=len(names))
        normal = rng.standard_normal(size=len(names))
        for j, n in enumerate(names):
            if n not in wanted or n not in limits:
                continue
            dist, scale = limits[n]
            values[n][row] = scale * (uniform[j] if dist == "uniform" else normal[j])
    return UnitDraws(**values)


@dataclass(frozen=True)
class DeviceFactors:
    """Temperature-dependent factors of the SiPM model at the die temperatures of a block (shared by units).

    Attributes
    ----------
    temp_c : ndarray
        Die temperature, degree Celsius.
    breakdown_v : ndarray
        Breakdown voltage of the profile, volt.
    dt_k : ndarray
        Die temperature minus the breakdown reference temperature, kelvin.
    gain_per_v : ndarray
        Gain per volt of overvoltage (cell capacitance / q).
    dark_rate_hz_at_ref_ov : ndarray
        Dark rate at the dark reference overvoltage, hertz.
    """

    temp_c: np.ndarray = field(repr=False)
    breakdown_v: np.ndarray = field(repr=False)
    dt_k: np.ndarray = field(repr=False)
    gain_per_v: np.ndarray = field(repr=False)
    dark_rate_hz_at_ref_ov: np.ndarray = field(repr=False)


def device_factors(sipm, temp_c) -> DeviceFactors:
    """The SiPM's temperature factors (see :class:`DeviceFactors`).

    Parameters
    ----------
    sipm : Sipm
    temp_c : array_like
        Die temperature, degree Celsius.
    """
    t = np.asarray(temp_c, dtype=float)
    bd = sipm.breakdown
    dt = t - bd.ref_temp_c
    vbd = bd.breakdown_v_at_ref + 1e-3 * dt * (bd.tempco_mv_per_k + bd.curvature_mv_per_k2 * dt)
    per_v = sipm.cell_capacitance_f * (1.0 + 1e-6 * sipm.capacitance_tempco_ppm_per_k * dt) / ELEMENTARY_CHARGE_C
    dark = sipm.dark_rate_hz * np.exp2((t - sipm.dark_ref_temp_c) / sipm.dark_doubling_temp_k)
    return DeviceFactors(t, vbd, dt, per_v, dark)


def unit_breakdown_v(factors: DeviceFactors, units: UnitDraws, extra_v=0.0):
    """Breakdown voltage of each unit, volt: the profile's plus its calibration errors (and ``extra_v``).

    Parameters
    ----------
    factors : DeviceFactors
    units : UnitDraws
    extra_v : array_like
        A further shift (calibration error of the nominal unit, ageing), volt.
    """
    b = units.breakdown_v[:, None]
    tc = units.tempco_mv_per_k[:, None]
    return factors.breakdown_v + b + 1e-3 * tc * factors.dt_k + extra_v


def sensor_adc_code(channel, temp_c, units: UnitDraws, *, quantise: bool = True):
    """Raw ADC code of the temperature channel of each unit.

    Parameters
    ----------
    channel : TemperatureChannel
    temp_c : array_like
        Temperature at the sensor before the unit's own offsets (die, lag,
        scenario offset and noise applied), degree Celsius; broadcast
        against ``(units, 1)``.
    units : UnitDraws
    quantise : bool
        False returns the continuous ADC position (no floor and no clip).

    Returns
    -------
    ndarray
        int64 codes (or float positions).
    """
    sensor, fe = channel.sensor, channel.front_end
    col = lambda a: np.asarray(a)[:, None]  # noqa: E731
    t_s = np.asarray(temp_c, dtype=float) + col(units.sensor_to_die_k + units.self_heating_k)
    if isinstance(sensor, RtdSensor):
        t_s = t_s + col(units.rtd_offset_k) + col(units.rtd_slope) * np.abs(t_s)
        r = sensor.resistance_ohm(t_s)
    else:
        r = sensor.resistance_ohm(t_s)
        if np.any(units.ntc_r25) or np.any(units.ntc_beta):
            beta = sensor.beta_k if sensor.beta_k is not None else float(sensor.effective_beta_k(25.0))
            r = r * col(1.0 + units.ntc_r25) * np.exp(col(units.ntc_beta) * beta * (1.0 / (t_s + ZERO_C_IN_K)
                                                                                 - 1.0 / T25_K))
    r_ref = fe.reference_resistor_ohm * col(1.0 + units.reference_resistor)
    frac = r / (r + r_ref) if fe.sensor_position == "low" else r_ref / (r + r_ref)
    span = 1.0 if fe.ratiometric else fe.span_fraction * col((1.0 + units.adc_reference) / (1.0 + units.excitation))
    x = frac * ((1 << fe.adc_bits) / span)
    if not quantise:
        return x
    return np.clip(np.floor(x), 0, fe.full_scale_code).astype(np.int64)


@dataclass(frozen=True)
class SupplyUnits:
    """The affine supply network of each unit: ``Vout = intercept_v + volts_per_code * code``, clipped.

    Attributes
    ----------
    intercept_v, volts_per_code : ndarray
        Shape ``(units, 1)``.
    min_output_v, max_output_v : float
    series_resistor_ohm : float
    """

    intercept_v: np.ndarray
    volts_per_code: np.ndarray
    min_output_v: float
    max_output_v: float
    series_resistor_ohm: float


def supply_units(supply, units: UnitDraws) -> SupplyUnits:
    """Each unit's supply network from the nominal one and its deviations.

    Parameters
    ----------
    supply : BiasSupply
    units : UnitDraws
    """
    lsb = supply.dac.lsb_v * (1.0 + units.dac_reference)
    if supply.topology == "feedback_injection":
        r1 = supply.r1_ohm * (1.0 + units.r1)
        r2 = supply.r2_ohm * (1.0 + units.r2)
        r3 = supply.r3_ohm * (1.0 + units.r3)
        intercept = supply.feedback_v * (1.0 + r1 / r2 + r1 / r3)
        per_code = -lsb * r1 / r3
    else:
        intercept = supply.offset_v + 0.0 * lsb
        per_code = supply.gain_v_per_v * (1.0 + units.amp_gain) * lsb
    return SupplyUnits(intercept[:, None], per_code[:, None], float(supply.min_output_v),
                       float(supply.max_output_v), float(supply.series_resistor_ohm))


def network_output_v(supply: SupplyUnits, dac_code, *, limits: bool = True):
    """Supply output at ``dac_code`` for each unit, volt (clipped to the regulator's range).

    Parameters
    ----------
    supply : SupplyUnits
    dac_code : array_like
        Broadcast against ``(units, 1)``.
    limits : bool
        False skips the regulator's limits.
    """
    out = supply.intercept_v + supply.volts_per_code * np.asarray(dac_code, dtype=float)
    return np.clip(out, supply.min_output_v, supply.max_output_v) if limits else out


def sipm_current_a(sipm, factors: DeviceFactors, overvoltage_v, photon_rate_hz=0.0):
    """Steady SiPM current, ampere: ``q G (DCR + R_ph PDE) / (1 - p_xt)``.

    Same model as :func:`compensator.physics.sipm.steady_current_a`, with the
    temperature factors computed once per tick.

    Parameters
    ----------
    sipm : Sipm
    factors : DeviceFactors
    overvoltage_v : array_like
        Volt.
    photon_rate_hz : array_like
        Hertz.
    """
    ov = np.maximum(overvoltage_v, 0.0)
    n = sipm.dark_overvoltage_exponent
    rel = ov * (1.0 / sipm.dark_ref_overvoltage_v)
    shape = rel if n == 1.0 else rel * np.sqrt(rel) if n == 1.5 else rel * rel if n == 2.0 else rel ** n
    primaries = factors.dark_rate_hz_at_ref_ov * shape
    if np.any(photon_rate_hz):
        primaries = primaries + photon_rate_hz * (-sipm.pde_max_fraction) * np.expm1(
            ov * (-1.0 / sipm.pde_saturation_overvoltage_v))
    current = (ELEMENTARY_CHARGE_C * factors.gain_per_v) * ov * primaries
    if sipm.crosstalk_probability:
        k = -np.log1p(-sipm.crosstalk_probability) / sipm.crosstalk_ref_overvoltage_v ** sipm.crosstalk_overvoltage_exponent
        e = sipm.crosstalk_overvoltage_exponent
        ove = ov * ov if e == 2.0 else ov ** e
        current = current / np.exp(-k * ove)  # 1 - p = exp(-k Vov^n)
    return current


def bias_at_sipm_v(sipm, factors: DeviceFactors, breakdown_v, supply_v, series_resistor_ohm: float,
                   photon_rate_hz=0.0):
    """Bias at the SiPM after the series resistor, volt, and the current there, ampere.

    Two fixed-point steps of ``V = Vout - R I(V)`` from ``Vout`` (see the module docstring).

    Parameters
    ----------
    sipm : Sipm
    factors : DeviceFactors
    breakdown_v : array_like
        The unit's breakdown voltage, volt.
    supply_v : array_like
        Supply output, volt.
    series_resistor_ohm : float
    photon_rate_hz : array_like
        Hertz.

    Returns
    -------
    bias_v, current_a : ndarray
    """
    if not series_resistor_ohm:
        bias = np.asarray(supply_v, dtype=float) + 0.0 * breakdown_v
        return bias, sipm_current_a(sipm, factors, bias - breakdown_v, photon_rate_hz)
    v = supply_v
    for _ in range(2):
        current = sipm_current_a(sipm, factors, v - breakdown_v, photon_rate_hz)
        v = supply_v - series_resistor_ohm * current
    return v, sipm_current_a(sipm, factors, v - breakdown_v, photon_rate_hz)


def current_adc_code(sense, current_a, units: UnitDraws):
    """Raw code of the board's SiPM current channel for each unit.

    Parameters
    ----------
    sense : CurrentSense
    current_a : array_like
        Broadcast against ``(units, 1)``, ampere.
    units : UnitDraws
    """
    col = lambda a: np.asarray(a)[:, None]  # noqa: E731
    return sense.adc_code(current_a, col(units.isense_gain), col(units.isense_reference),
                          col(units.isense_offset_a))

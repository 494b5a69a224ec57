"""Temperature sensors and the divider + ADC front end that reads them.

* Platinum RTD: Callendar-Van Dusen equation with the IEC 60751 (ITS-90)
  coefficients, forward and inverse, valid -200 to 850 C; tolerance classes
  AA, A, B, C (A and B as in IEC 60751; AA and C quoted from memory).
* NTC thermistor: Beta model and Steinhart-Hart equation (Steinhart and Hart,
  Deep-Sea Research 15, 497, 1968), with a least-squares fit of a, b, c from
  three or more points (exact for three).
* Front end: the sensor in a resistive divider from an excitation voltage,
  read by an ADC that is either ratiometric (its reference is the excitation)
  or absolute. The ADC code is ``floor(V / LSB)`` clipped to the code range;
  the inverse maps a code to the centre of its voltage interval.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError

__all__ = [
    "CVD_A", "CVD_B", "CVD_C", "RTD_MAX_TEMP_C", "RTD_MIN_TEMP_C", "RTD_TOLERANCE_CLASSES", "T25_K", "FrontEnd",
    "NtcSensor", "RtdSensor", "SteinhartHart", "TemperatureChannel", "fit_steinhart_hart", "ntc_beta_resistance_ohm",
    "ntc_beta_temp_c", "rtd_resistance_ohm", "rtd_temp_c", "rtd_tolerance_k", "steinhart_hart_resistance_ohm",
    "steinhart_hart_temp_c",
]

# IEC 60751 Callendar-Van Dusen coefficients (ITS-90).
CVD_A = 3.9083e-3
CVD_B = -5.775e-7
CVD_C = -4.183e-12
RTD_MIN_TEMP_C = -200.0
RTD_MAX_TEMP_C = 850.0

#: Tolerance classes (offset K, slope K/K): |dt| <= offset + slope |t|.
#: A and B per IEC 60751; AA and C from memory of IEC 60751:2008.
RTD_TOLERANCE_CLASSES = {"AA": (0.10, 0.0017), "A": (0.15, 0.002), "B": (0.30, 0.005), "C": (0.60, 0.010)}

T25_K = 25.0 + ZERO_C_IN_K


def rtd_resistance_ohm(temp_c, r0_ohm=100.0):
    """Platinum RTD resistance by the Callendar-Van Dusen equation (IEC 60751).

    Parameters
    ----------
    temp_c : array_like
        Temperature, degree Celsius, within -200 to 850.
    r0_ohm : float
        Resistance at 0 degree Celsius, ohm (100 for Pt100, 1000 for Pt1000).

    Returns
    -------
    ndarray
        Resistance, ohm.
    """
    t = np.asarray(temp_c, dtype=float)
    if np.any((t < RTD_MIN_TEMP_C - 1e-9) | (t > RTD_MAX_TEMP_C + 1e-9)):
        raise ModelError(f"outside the IEC 60751 range {RTD_MIN_TEMP_C:g} to {RTD_MAX_TEMP_C:g} C", key="temp_c")
    c = np.where(t < 0.0, CVD_C, 0.0)
    return r0_ohm * (1.0 + CVD_A * t + CVD_B * t * t + c * (t - 100.0) * t ** 3)


def rtd_temp_c(resistance_ohm, r0_ohm=100.0):
    """Inverse Callendar-Van Dusen: temperature of a platinum RTD.

    Closed form at and above 0 C; below 0 C Newton iterations from the
    quadratic solution (converged to better than 1e-9 K).

    Parameters
    ----------
    resistance_ohm : array_like
        Resistance, ohm.
    r0_ohm : float
        Resistance at 0 degree Celsius, ohm.

    Returns
    -------
    ndarray
        Temperature, degree Celsius.
    """
    ratio = np.asarray(resistance_ohm, dtype=float) / r0_ohm
    lo, hi = rtd_resistance_ohm([RTD_MIN_TEMP_C, RTD_MAX_TEMP_C], 1.0)
    if np.any((ratio < lo * (1 - 1e-12)) | (ratio > hi * (1 + 1e-12))):
        raise ModelError("outside the IEC 60751 range (-200 to 850 C)", key="resistance_ohm")
    t = (-CVD_A + np.sqrt(CVD_A ** 2 - 4.0 * CVD_B * (1.0 - ratio))) / (2.0 * CVD_B)
    neg = t < 0.0
    if np.any(neg):
        tn = t[neg] if t.ndim else t
        rn = ratio[neg] if t.ndim else ratio
        for _ in range(30):
            f = 1.0 + CVD_A * tn + CVD_B * tn ** 2 + CVD_C * (tn - 100.0) * tn ** 3 - rn
            df = CVD_A + 2.0 * CVD_B * tn + CVD_C * (4.0 * tn ** 3 - 300.0 * tn ** 2)
            step = f / df
            tn = tn - step
            if np.all(np.abs(step) < 1e-12):
                break
        if t.ndim:
            t = t.copy()
            t[neg] = tn
        else:
            t = tn
    return t


def rtd_tolerance_k(temp_c, tolerance_class="A"):
    """Tolerance of an RTD class at ``temp_c``: offset + slope |t|, kelvin."""
    try:
        offset, slope = RTD_TOLERANCE_CLASSES[tolerance_class]
    except KeyError:
        raise ModelError(f"must be one of {', '.join(RTD_TOLERANCE_CLASSES)}", key="tolerance_class") from None
    return offset + slope * np.abs(np.asarray(temp_c, dtype=float))


def _kelvin(temp_c):
    """Absolute temperature of ``temp_c``; an error at or below absolute zero."""
    t_k = np.asarray(temp_c, dtype=float) + ZERO_C_IN_K
    if np.any(t_k <= 0):
        raise ModelError("must be above absolute zero (-273.15 C)", key="temp_c")
    return t_k


def ntc_beta_resistance_ohm(temp_c, r25_ohm, beta_k):
    """NTC resistance by the Beta model ``R = R25 exp(B (1/T - 1/298.15 K))``.

    Parameters
    ----------
    temp_c : array_like
        Temperature, degree Celsius.
    r25_ohm : float
        Resistance at 25 degree Celsius, ohm.
    beta_k : float
        Beta constant, kelvin.

    Returns
    -------
    ndarray
        Resistance, ohm.
    """
    t_k = _kelvin(temp_c)
    return r25_ohm * np.exp(beta_k * (1.0 / t_k - 1.0 / T25_K))


def ntc_beta_temp_c(resistance_ohm, r25_ohm, beta_k):
    """Inverse Beta model: ``1/T = 1/298.15 K + ln(R/R25)/B``.

    Parameters
    ----------
    resistance_ohm : array_like
        Resistance, ohm.
    r25_ohm : float
        Resistance at 25 degree Celsius, ohm.
    beta_k : float
        Beta constant, kelvin.

    Returns
    -------
    ndarray
        Temperature, degree Celsius.
    """
    r = np.asarray(resistance_ohm, dtype=float)
    return 1.0 / (1.0 / T25_K + np.log(r / r25_ohm) / beta_k) - ZERO_C_IN_K


@dataclass(frozen=True)
class SteinhartHart:
    """Steinhart-Hart coefficients: ``1/T = a + b ln R + c (ln R)^3`` (T in kelvin, R in ohm).

    The result unpacks as ``a, b, c``.
    """

    a_per_k: float
    b_per_k: float
    c_per_k: float

    def __iter__(self):
        return iter((self.a_per_k, self.b_per_k, self.c_per_k))


def steinhart_hart_temp_c(resistance_ohm, coeffs: SteinhartHart):
    """Temperature in degree Celsius from resistance by the Steinhart-Hart equation."""
    x = np.log(np.asarray(resistance_ohm, dtype=float))
    a, b, c = coeffs
    return 1.0 / (a + b * x + c * x ** 3) - ZERO_C_IN_K


def steinhart_hart_resistance_ohm(temp_c, coeffs: SteinhartHart):
    """Resistance in ohm at ``temp_c``: closed-form root of the depressed cubic in ln R."""
    a, b, c = coeffs
    y = a - 1.0 / _kelvin(temp_c)
    if c == 0.0:
        return np.exp(-y / b)
    # c x^3 + b x + y = 0  ->  x^3 + p x + q = 0 (Cardano; one real root for p > 0)
    p, q = b / c, y / c
    root = np.sqrt((q / 2.0) ** 2 + (p / 3.0) ** 3)
    return np.exp(np.cbrt(-q / 2.0 + root) + np.cbrt(-q / 2.0 - root))


def fit_steinhart_hart(temp_c, resistance_ohm) -> SteinhartHart:
    """Least-squares Steinhart-Hart coefficients from three or more points.

    Solves ``[1, ln R, (ln R)^3] [a, b, c]^T = 1/T`` in the least-squares sense;
    with exactly three points the solution reproduces them exactly.

    Parameters
    ----------
    temp_c : array_like
        Temperatures, degree Celsius.
    resistance_ohm : array_like
        Resistances at those temperatures, ohm.

    Returns
    -------
    SteinhartHart
    """
    t_k = np.asarray(temp_c, dtype=float).ravel() + ZERO_C_IN_K
    r = np.asarray(resistance_ohm, dtype=float).ravel()
    if t_k.size != r.size or t_k.size < 3:
        raise ModelError("needs at least three (temp_c, resistance_ohm) pairs of equal length", key="temp_c")
    if np.any(r <= 0) or np.any(t_k <= 0):
        raise ModelError("resistances and absolute temperatures must be positive", key="resistance_ohm")
    x = np.log(r)
    design = np.column_stack([np.ones_like(x), x, x ** 3])
    coeffs, *_ = np.linalg.lstsq(design, 1.0 / t_k, rcond=None)
    return SteinhartHart(*map(float, coeffs))


@dataclass(frozen=True)
class RtdSensor:
    """Platinum RTD (IEC 60751).

    Attributes
    ----------
    r0_ohm : float
        Resistance at 0 degree Celsius, ohm.
    tolerance_class : {"AA", "A", "B", "C"}
    self_heating_k, sensor_to_die_k : float
        Bounds of the self-heating and of the sensor-to-die offset, kelvin.
    time_constant_s, die_to_sensor_time_constant_s : float
        The sensor's own first-order lag and that of the thermal path from
        the SiPM die to it, second; under a ramp of r kelvin per second the
        reading lags the die by ``r (sum of both)`` (two first-order lags in
        series, steady ramp).
    """

    r0_ohm: float = 100.0
    tolerance_class: str = "A"
    self_heating_k: float = 0.0
    sensor_to_die_k: float = 0.0
    time_constant_s: float = 0.0
    die_to_sensor_time_constant_s: float = 0.0

    def resistance_ohm(self, temp_c):
        """Resistance in ohm at ``temp_c``."""
        return rtd_resistance_ohm(temp_c, self.r0_ohm)

    def temp_c(self, resistance_ohm):
        """Temperature in degree Celsius at ``resistance_ohm``."""
        return rtd_temp_c(resistance_ohm, self.r0_ohm)

    def tolerance_k(self, temp_c):
        """Interchangeability tolerance of the class, kelvin."""
        return rtd_tolerance_k(temp_c, self.tolerance_class)


@dataclass(frozen=True)
class NtcSensor:
    """NTC thermistor, Beta model or Steinhart-Hart (when ``steinhart_hart`` is set).

    Attributes
    ----------
    r25_ohm : float
        Resistance at 25 degree Celsius, ohm.
    beta_k : float or None
        Beta constant, kelvin.
    steinhart_hart : SteinhartHart or None
    r25_tolerance_pct, beta_tolerance_pct : float
        Tolerances, percent.
    self_heating_k, sensor_to_die_k : float
        Bounds of the self-heating and of the sensor-to-die offset, kelvin.
    time_constant_s, die_to_sensor_time_constant_s : float
        Lags of the sensor and of the die-to-sensor path, second (see :class:`RtdSensor`).
    """

    r25_ohm: float
    beta_k: float | None = None
    steinhart_hart: SteinhartHart | None = None
    r25_tolerance_pct: float = 1.0
    beta_tolerance_pct: float = 1.0
    self_heating_k: float = 0.0
    sensor_to_die_k: float = 0.0
    time_constant_s: float = 0.0
    die_to_sensor_time_constant_s: float = 0.0

    def __post_init__(self):
        if (self.beta_k is None) == (self.steinhart_hart is None):
            raise ModelError("an NTC needs exactly one of beta_k and steinhart_hart", key="beta_k")

    def resistance_ohm(self, temp_c):
        """Resistance in ohm at ``temp_c``."""
        if self.steinhart_hart is not None:
            return steinhart_hart_resistance_ohm(temp_c, self.steinhart_hart)
        return ntc_beta_resistance_ohm(temp_c, self.r25_ohm, self.beta_k)

    def temp_c(self, resistance_ohm):
        """Temperature in degree Celsius at ``resistance_ohm``."""
        if self.steinhart_hart is not None:
            return steinhart_hart_temp_c(resistance_ohm, self.steinhart_hart)
        return ntc_beta_temp_c(resistance_ohm, self.r25_ohm, self.beta_k)

    def effective_beta_k(self, temp_c):
        """Local Beta ``-T^2 dlnR/dT`` in kelvin (equals beta_k for the Beta model)."""
        t = np.asarray(temp_c, dtype=float)
        h = 0.01
        dlnr = np.log(self.resistance_ohm(t + h) / self.resistance_ohm(t - h)) / (2 * h)
        return -((t + ZERO_C_IN_K) ** 2) * dlnr

    def tolerance_k(self, temp_c):
        """Worst-case temperature error from the R25 and Beta tolerances, kelvin.

        A relative resistance error ``e`` reads as ``e T^2 / B``; a Beta error
        ``dB/B`` grows with the distance from 25 C as ``T^2 |1/T - 1/T25| dB/B``.
        """
        t_k = np.asarray(temp_c, dtype=float) + ZERO_C_IN_K
        beta = self.effective_beta_k(temp_c)
        from_r25 = 1e-2 * self.r25_tolerance_pct * t_k ** 2 / beta
        from_beta = 1e-2 * self.beta_tolerance_pct * t_k ** 2 * np.abs(1.0 / t_k - 1.0 / T25_K)
        return from_r25 + from_beta


@dataclass(frozen=True)
class FrontEnd:
    """Divider and ADC that read the temperature sensor.

    Attributes
    ----------
    sensor_position : {"low", "high"}
        ``"low"``: sensor from the ADC node to ground, fixed resistor to the
        excitation. ``"high"``: the other way round.
    reference_resistor_ohm : float
    excitation_v : float
    ratiometric : bool
        True when the ADC reference is the excitation (reference errors cancel).
    adc_bits : int
    adc_reference_v : float
        Used only when not ratiometric.
    reference_resistor_tolerance_pct, adc_reference_tolerance_pct, excitation_tolerance_pct : float
        Tolerances, percent (the last two cancel in a ratiometric front end).
    reference_resistor_tempco_ppm_per_k, adc_reference_tempco_ppm_per_k, excitation_tempco_ppm_per_k : float
        Drift bounds, ppm per kelvin of board temperature (the last two cancel
        in a ratiometric front end).
    adc_offset_lsb, adc_gain_error_pct, adc_inl_lsb : float
        ADC offset (LSB), gain error (percent) and integral non-linearity
        (LSB) bounds, either sign; they do not cancel in a ratiometric front end.
    """

    sensor_position: str
    reference_resistor_ohm: float
    excitation_v: float
    ratiometric: bool
    adc_bits: int
    adc_reference_v: float
    reference_resistor_tolerance_pct: float = 0.1
    adc_reference_tolerance_pct: float = 0.1
    excitation_tolerance_pct: float = 0.1
    reference_resistor_tempco_ppm_per_k: float = 0.0
    adc_reference_tempco_ppm_per_k: float = 0.0
    excitation_tempco_ppm_per_k: float = 0.0
    adc_offset_lsb: float = 0.0
    adc_gain_error_pct: float = 0.0
    adc_inl_lsb: float = 0.0

    @property
    def full_scale_code(self) -> int:
        """Largest ADC code."""
        return (1 << self.adc_bits) - 1

    @property
    def span_fraction(self) -> float:
        """Divider output, as a fraction of the excitation, that equals ADC full scale.

        1 for a ratiometric ADC, ``adc_reference_v / excitation_v`` otherwise.
        """
        return 1.0 if self.ratiometric else self.adc_reference_v / self.excitation_v

    def fraction(self, resistance_ohm):
        """Divider output as a fraction of the excitation."""
        r = np.asarray(resistance_ohm, dtype=float)
        if self.sensor_position == "low":
            return r / (r + self.reference_resistor_ohm)
        return self.reference_resistor_ohm / (r + self.reference_resistor_ohm)

    def continuous_code(self, resistance_ohm):
        """ADC position before the floor and the clipping: ``fraction / span * 2^bits``."""
        return self.fraction(resistance_ohm) / self.span_fraction * (1 << self.adc_bits)

    def adc_code(self, resistance_ohm):
        """Ideal ADC code ``floor(fraction / span * 2^bits)``, clipped to the code range."""
        return np.clip(np.floor(self.continuous_code(resistance_ohm)), 0, self.full_scale_code).astype(np.int64)

    def resistance_at(self, position):
        """Sensor resistance at a continuous ADC position, ohm (NaN where the divider has no positive solution).

        Parameters
        ----------
        position : array_like
            Continuous ADC position; the integer code ``n`` covers ``[n, n + 1)``.
        """
        x = np.asarray(position, dtype=float) / (1 << self.adc_bits) * self.span_fraction
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.sensor_position == "low":
                r = self.reference_resistor_ohm * x / (1.0 - x)
            else:
                r = self.reference_resistor_ohm * (1.0 - x) / x
        return np.where((x > 0) & (x < 1), r, np.nan)

    def resistance_ohm(self, adc_code):
        """Sensor resistance at the centre of ``adc_code``'s interval, ohm (NaN when it would not be positive)."""
        return self.resistance_at(np.asarray(adc_code, dtype=float) + 0.5)


@dataclass(frozen=True)
class TemperatureChannel:
    """A sensor read through a front end: ADC code <-> resistance <-> temperature."""

    sensor: RtdSensor | NtcSensor
    front_end: FrontEnd

    def adc_code(self, temp_c):
        """ADC code that reads ``temp_c`` (degree Celsius), int64 array."""
        return self.front_end.adc_code(self.sensor.resistance_ohm(temp_c))

    def continuous_code(self, temp_c):
        """ADC position of ``temp_c`` before the floor and the clipping (its floor is :meth:`adc_code`)."""
        return self.front_end.continuous_code(self.sensor.resistance_ohm(temp_c))

    def temp_at(self, position):
        """Temperature in degree Celsius at a continuous ADC position.

        The integer code ``n`` reads as ``temp_at(n + 0.5)``, the centre of its
        interval. NaN where the divider or the sensor model has no solution.

        Parameters
        ----------
        position : array_like
            Continuous ADC position.
        """
        r = self.front_end.resistance_at(position)
        if isinstance(self.sensor, RtdSensor):
            lo, hi = rtd_resistance_ohm([RTD_MIN_TEMP_C, RTD_MAX_TEMP_C], self.sensor.r0_ohm)
            with np.errstate(invalid="ignore"):
                ok = (r >= lo) & (r <= hi)
            out = np.full(np.shape(r), np.nan)
            if np.any(ok):
                out[ok] = self.sensor.temp_c(np.asarray(r)[ok])
            return out if np.ndim(r) else out[()]
        ok = np.isfinite(r) & (r > 0)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(ok, self.sensor.temp_c(np.where(ok, r, 1.0)), np.nan)

    def temp_c(self, adc_code):
        """Temperature in degree Celsius read from ``adc_code`` (NaN for rail or out-of-model codes)."""
        code = np.asarray(adc_code)
        rail = (code <= 0) | (code >= self.front_end.full_scale_code)
        return np.where(rail, np.nan, self.temp_at(code + 0.5))

    def code_range(self, min_temp_c, max_temp_c):
        """Lowest and highest ADC codes met over a temperature range (either direction of slope)."""
        codes = self.adc_code([min_temp_c, max_temp_c])
        return int(codes.min()), int(codes.max())

    def temp_per_code_k(self, temp_c):
        """Temperature step of one ADC code at ``temp_c`` (kelvin per LSB, positive)."""
        t = np.asarray(temp_c, dtype=float)
        h = 0.05
        fe = self.front_end
        dfrac = (fe.fraction(self.sensor.resistance_ohm(t + h)) - fe.fraction(self.sensor.resistance_ohm(t - h))) / (2 * h)
        lsb_fraction = fe.span_fraction / (1 << fe.adc_bits)
        return lsb_fraction / np.abs(dfrac)

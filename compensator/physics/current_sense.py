"""The SiPM current channel: a transimpedance (or shunt) stage read by an ADC.

The stage turns the SiPM current into ``V = sense_gain_v_per_a I`` at the
ADC input; the ADC maps it to a code. The ideal transfer function used here
puts the code transitions half an LSB either side of each code's centre
(common practice for an ideal ADC), so code ``c`` stands for the current
``c * lsb_a`` and a zero current reads code 0:

``code = clip(floor(I sense_gain / (Vref / 2^bits) + 1/2), 0, 2^bits - 1)``.

The firmware never knows the stage's tolerances; they, the input offset and
the quantisation are what the gain-error budget charges to the measured-drop
correction.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError

__all__ = ["CurrentSense", "centred_adc_code"]


def centred_adc_code(position, full_scale_code: int):
    """Ideal ADC with code centres on whole positions: ``clip(floor(x + 1/2), 0, full_scale)`` as int64.

    Parameters
    ----------
    position : array_like
        Unquantised reading in codes.
    full_scale_code : int
        Largest code.

    Returns
    -------
    ndarray of int64
    """
    return np.clip(np.floor(np.asarray(position, dtype=float) + 0.5), 0, full_scale_code).astype(np.int64)


@dataclass(frozen=True)
class CurrentSense:
    """A current-measurement channel (amplifier plus ADC).

    Attributes
    ----------
    adc_bits : int
        ADC resolution, bits.
    reference_v : float
        ADC full-scale reference, volt.
    sense_gain_v_per_a : float
        Volts at the ADC input per ampere of SiPM current (transimpedance or
        shunt times amplifier gain), volt per ampere.
    reference_tolerance_pct : float
        ADC reference tolerance, percent.
    gain_tolerance_pct : float
        Tolerance of the sense gain (shunt or feedback resistor, amplifier), percent.
    offset_a : float
        Largest input offset, referred to the SiPM current, either sign, ampere.
    gain_tempco_ppm_per_k : float
        Drift bound of the sense gain, ppm per kelvin of board temperature.
    offset_drift_a_per_k : float
        Drift bound of the input offset, ampere per kelvin.
    """

    adc_bits: int
    reference_v: float
    sense_gain_v_per_a: float
    reference_tolerance_pct: float = 0.1
    gain_tolerance_pct: float = 0.5
    offset_a: float = 0.0
    gain_tempco_ppm_per_k: float = 0.0
    offset_drift_a_per_k: float = 0.0

    def __post_init__(self):
        if not (isinstance(self.adc_bits, (int, np.integer)) and 1 <= self.adc_bits <= 24):
            raise ModelError(f"must be a whole number from 1 to 24, got {self.adc_bits!r}", key="adc_bits")
        for name in ("reference_v", "sense_gain_v_per_a"):
            value = getattr(self, name)
            if not np.isfinite(value) or value <= 0:
                raise ModelError(f"must be a positive number, got {value!r}", key=name)
        for name in ("reference_tolerance_pct", "gain_tolerance_pct", "offset_a", "gain_tempco_ppm_per_k",
                     "offset_drift_a_per_k"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0:
                raise ModelError(f"must be a non-negative number, got {value!r}", key=name)

    @property
    def full_scale_code(self) -> int:
        """Largest ADC code."""
        return (1 << self.adc_bits) - 1

    @property
    def lsb_a(self) -> float:
        """SiPM current per ADC code, ampere."""
        return self.reference_v / (1 << self.adc_bits) / self.sense_gain_v_per_a

    @property
    def full_scale_a(self) -> float:
        """Current at the largest code, ampere (higher currents saturate the channel)."""
        return self.full_scale_code * self.lsb_a

    def continuous_code(self, current_a, gain_error=0.0, reference_error=0.0, offset_a=0.0):
        """Unquantised, unclipped ADC reading of a current.

        Parameters
        ----------
        current_a : array_like
            True SiPM current, ampere.
        gain_error, reference_error : array_like
            Relative errors of the sense gain and of the ADC reference (fractions).
        offset_a : array_like
            Input offset, ampere.

        Returns
        -------
        ndarray
            Fractional ADC code.
        """
        i = np.asarray(current_a, dtype=float) + offset_a
        return i * (1.0 + np.asarray(gain_error)) / (1.0 + np.asarray(reference_error)) / self.lsb_a

    def adc_code(self, current_a, gain_error=0.0, reference_error=0.0, offset_a=0.0):
        """ADC code read for a current (rounded to nearest, clipped to the ADC's range).

        Parameters
        ----------
        current_a : array_like
            True SiPM current, ampere.
        gain_error, reference_error, offset_a : array_like
            As in :meth:`continuous_code`.

        Returns
        -------
        ndarray of int64
        """
        return centred_adc_code(self.continuous_code(current_a, gain_error, reference_error, offset_a),
                                self.full_scale_code)

    def current_a(self, adc_code):
        """Current the firmware infers from an ADC code, ampere.

        Parameters
        ----------
        adc_code : array_like
            ADC code(s).

        Returns
        -------
        ndarray
            ``adc_code * lsb_a``, ampere.
        """
        return np.asarray(adc_code, dtype=float) * self.lsb_a

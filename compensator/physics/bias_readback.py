"""The bias read-back channel: the supply output measured through a divider by an ADC.

A closed bias loop needs a measured output. The read-back divides the supply
output by ``divider_ratio_v_per_v`` (a fraction below one) and an ADC reads it
against its reference. The ideal transfer function (common practice for an
ideal ADC) centres each code on ``code * lsb``:

``code = clip(floor(V_out ratio / (Vref / 2^bits) + 1/2), 0, 2^bits - 1)``,

so one code stands for ``lsb_v = Vref / (2^bits ratio)`` volt of output.
The firmware never knows the divider's and the reference's tolerances and
drifts; they, the offset and the quantisation are what a closed bias loop
cannot correct.

Without this channel the bias is set open-loop: the DAC code is the only
handle, and there is no bias loop to tune.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.physics.current_sense import centred_adc_code

__all__ = ["BiasReadback"]


@dataclass(frozen=True, kw_only=True)
class BiasReadback:
    """A measurement of the bias supply's output (divider plus ADC).

    Attributes
    ----------
    adc_bits : int
        ADC resolution, bits.
    reference_v : float
        ADC full-scale reference, volt.
    divider_ratio_v_per_v : float
        ADC input volts per volt of supply output (between 0 and 1).
    reference_tolerance_pct : float
        ADC reference tolerance, percent.
    divider_tolerance_pct : float
        Tolerance of the divider ratio, percent.
    offset_v : float
        Largest offset referred to the supply output, either sign, volt.
    filter_time_constant_s : float
        First-order lag of the read-back's filter, second (0: none).
    """

    adc_bits: int
    reference_v: float
    divider_ratio_v_per_v: float
    reference_tolerance_pct: float = 0.1
    divider_tolerance_pct: float = 0.1
    offset_v: float = 0.0
    filter_time_constant_s: float = 0.0

    def __post_init__(self):
        if not (isinstance(self.adc_bits, (int, np.integer)) and 1 <= self.adc_bits <= 24):
            raise ModelError(f"must be a whole number from 1 to 24, got {self.adc_bits!r}", key="adc_bits")
        if not np.isfinite(self.reference_v) or self.reference_v <= 0:
            raise ModelError(f"must be a positive number, got {self.reference_v!r}", key="reference_v")
        if not np.isfinite(self.divider_ratio_v_per_v) or not 0 < self.divider_ratio_v_per_v <= 1:
            raise ModelError(f"must be above 0 and at most 1, got {self.divider_ratio_v_per_v!r}",
                             key="divider_ratio_v_per_v")
        for name in ("reference_tolerance_pct", "divider_tolerance_pct", "offset_v", "filter_time_constant_s"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0:
                raise ModelError(f"must be a non-negative number, got {value!r}", key=name)

    @property
    def full_scale_code(self) -> int:
        """Largest ADC code."""
        return (1 << self.adc_bits) - 1

    @property
    def lsb_v(self) -> float:
        """Supply output per ADC code, volt."""
        return self.reference_v / (1 << self.adc_bits) / self.divider_ratio_v_per_v

    @property
    def full_scale_v(self) -> float:
        """Supply output at the largest code, volt (higher outputs saturate the channel)."""
        return self.full_scale_code * self.lsb_v

    def continuous_code(self, output_v, divider_error=0.0, reference_error=0.0, offset_v=0.0):
        """Unquantised, unclipped ADC reading of a supply output.

        Parameters
        ----------
        output_v : array_like
            True supply output, volt.
        divider_error, reference_error : array_like
            Relative errors of the divider ratio and of the ADC reference (fractions).
        offset_v : array_like
            Offset referred to the output, volt.

        Returns
        -------
        ndarray
            Fractional ADC code.
        """
        v = np.asarray(output_v, dtype=float) + offset_v
        return v * (1.0 + np.asarray(divider_error)) / (1.0 + np.asarray(reference_error)) / self.lsb_v

    def adc_code(self, output_v, divider_error=0.0, reference_error=0.0, offset_v=0.0):
        """ADC code read for a supply output (rounded to nearest, clipped to the ADC's range).

        Parameters
        ----------
        output_v : array_like
            True supply output, volt.
        divider_error, reference_error, offset_v : array_like
            As in :meth:`continuous_code`.

        Returns
        -------
        ndarray of int64
        """
        return centred_adc_code(self.continuous_code(output_v, divider_error, reference_error, offset_v),
                                self.full_scale_code)

    def output_v(self, adc_code):
        """Supply output the firmware infers from an ADC code, volt.

        Parameters
        ----------
        adc_code : array_like
            ADC code(s).

        Returns
        -------
        ndarray
            ``adc_code * lsb_v``, volt.
        """
        return np.asarray(adc_code, dtype=float) * self.lsb_v

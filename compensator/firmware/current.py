"""The run-time series-resistor drop correction from the measured SiPM current.

With the *measured* drop correction the table holds the law for zero current
and a second entry point also takes the raw code ``c`` of the SiPM current ADC
(:meth:`compensator.firmware.tables.LookupTable.lookup_with_current`):

1. A sensor fault returns ``safe_dac_code``, uncorrected.
2. ``c`` is limited to ``current_code_max`` (the smallest of the ADC's full
   scale, the code of the SiPM's ``max_current_a`` and the code whose drop
   would take the SiPM past ``max_overvoltage_v`` if the current were not
   really flowing), then
   ``delta = floor((K c + 2^(Q-1)) / 2^Q)``: ``K`` is the exact
   correction ``R (Vref_I / 2^bits_I) / sense_gain / (volts per DAC code)``
   in DAC codes per current code, scaled by ``2^Q`` and rounded, signed (it is
   negative for the feedback-injection supply, whose output falls as the code
   rises). ``Q`` is chosen so the rounding of ``K`` moves ``delta`` by at most
   1/64 LSB over the whole current range; no division at run time.
3. The table's value plus ``delta``, clamped again to ``[dac_min, dac_max]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.fixed_point import acc_bits, floor_shift, half, uint_bits
from compensator.law.laws import CompensationLaw
from compensator.physics.sipm import breakdown_v

__all__ = ["CURRENT_FACTOR_SLACK_BITS", "CurrentCorrection", "build_current_correction"]

#: The rounding of the correction factor may move the correction by at most 1/2^CURRENT_FACTOR_SLACK_BITS DAC LSB.
CURRENT_FACTOR_SLACK_BITS = 6


@dataclass(frozen=True, kw_only=True)
class CurrentCorrection:
    """The run-time series-resistor drop correction from the measured SiPM current.

    Attributes
    ----------
    current_bits : int
        Resolution of the current ADC, bits.
    current_type_bits : int
        Width of the unsigned C argument that carries the current code.
    current_code_max : int
        Larger current codes are limited to this.
    factor : int
        ``K``: DAC codes per current code, times ``2^shift`` (signed).
    shift : int
        ``Q``, bits.
    acc_type_bits : int
        Width of the signed accumulator of ``K c``.
    dac_codes_per_current_code : float
        The exact (unrounded) factor, DAC codes per current code.
    lsb_a : float
        SiPM current per current code, ampere.
    series_resistor_ohm : float
        The filter resistor whose drop is corrected, ohm.
    limit_reason : str
        What sets ``current_code_max``.
    """

    current_bits: int
    current_type_bits: int
    current_code_max: int
    factor: int
    shift: int
    acc_type_bits: int
    dac_codes_per_current_code: float
    lsb_a: float
    series_resistor_ohm: float
    limit_reason: str = ""

    @property
    def max_correction_v(self) -> float:
        """Largest drop the correction adds, volt."""
        return self.series_resistor_ohm * self.current_code_max * self.lsb_a

    def delta(self, current_code):
        """Correction in DAC codes for raw current codes (the integer path, bit-exact reference).

        Parameters
        ----------
        current_code : array_like of int
            Raw current ADC codes, ``0 .. 2^current_type_bits - 1``.

        Returns
        -------
        ndarray of int64
            Signed DAC codes to add to the table's value.
        """
        c = np.minimum(np.asarray(current_code, dtype=np.int64), self.current_code_max)
        return floor_shift(self.factor * c + half(self.shift), self.shift)


def build_current_correction(law: CompensationLaw, fault_margin_k: float = 0.0) -> CurrentCorrection:
    """The integer drop correction of a law with ``drop_correction="measured"``.

    Parameters
    ----------
    law : CompensationLaw
        Must carry a ``current_sense`` channel.
    fault_margin_k : float
        The table's fault margin, kelvin: readings just below the range keep
        the end value while the die may be this much colder, which uses up
        overvoltage headroom.

    Returns
    -------
    CurrentCorrection

    Raises
    ------
    ModelError
        The law has no current channel, or no headroom is left for any correction.
    """
    sense = law.current_sense
    if sense is None:
        raise ModelError("the measured drop correction needs the board's current_sense channel")
    supply = law.supply
    r_ohm = float(supply.series_resistor_ohm)
    exact = r_ohm * sense.lsb_a / supply.volts_per_code
    limits = [(sense.full_scale_code, "current ADC full scale"),
              (int(sense.adc_code(law.sipm.max_current_a)), "sipm max_current_a")]
    if r_ohm > 0:
        temps = np.linspace(law.min_temp_c, law.max_temp_c, 141)
        ov0 = float(np.max(law.output_v(temps) - breakdown_v(law.sipm, temps)))
        t_lo = law.min_temp_c
        ov_margin = float(law.output_v(t_lo) - breakdown_v(law.sipm, t_lo - fault_margin_k))
        headroom_v = law.sipm.max_overvoltage_v - max(ov0, ov_margin)
        if headroom_v <= 0:
            raise ModelError(f"the law already reaches max_overvoltage_v {law.sipm.max_overvoltage_v:g} V: no "
                             "headroom is left for the measured drop correction; lower the overvoltage")
        limits.append((int(np.floor(headroom_v / (r_ohm * sense.lsb_a))), "sipm max_overvoltage_v headroom"))
    code_max, reason = min(limits, key=lambda p: p[0])
    code_max = max(int(code_max), 0)
    shift = max(0, int(np.ceil(np.log2(max(code_max, 1) * (1 << (CURRENT_FACTOR_SLACK_BITS - 1))))))
    factor = int(np.rint(exact * (1 << shift)))
    acc_max = abs(factor) * code_max + (1 << shift)
    return CurrentCorrection(
        current_bits=sense.adc_bits, current_type_bits=max(16, uint_bits(sense.full_scale_code)),
        current_code_max=code_max, factor=factor, shift=shift, acc_type_bits=acc_bits(acc_max),
        dac_codes_per_current_code=float(exact), lsb_a=float(sense.lsb_a), series_resistor_ohm=r_ohm,
        limit_reason=reason)

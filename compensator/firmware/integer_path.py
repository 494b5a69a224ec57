"""The gain error the firmware's whole integer path leaves, over every ADC code of the operating range.

The path: die temperature -> temperature ADC code -> lookup table -> bias DAC
code -> supply output -> bias at the SiPM after the series filter resistor
(its drop from the SiPM's modelled current) -> gain. The figure is taken at
the centre of every ADC code of the range, so it does not depend on any
choice of printed temperatures; both statistics are given by name.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.physics.sipm import breakdown_v, gain
from compensator.physics.supply import sipm_bias_v

__all__ = ["IntegerPathGainError", "integer_path_gain_error"]


@dataclass(frozen=True, eq=False, kw_only=True)
class IntegerPathGainError:
    """Gain error through the integer path at every ADC code of the range.

    Attributes
    ----------
    adc_code : ndarray of int64
        Every ADC code of the operating range.
    temp_c : ndarray
        Temperature at the centre of each code, degree Celsius.
    dac_code : ndarray of int64
        What the table gives there.
    sipm_bias_v : ndarray
        Bias across the SiPM, volt.
    gain_error_pct : ndarray
        ``100 (G / G_ref - 1)`` with ``G_ref`` the gain at the law's
        overvoltage at ``reference_temp_c``, percent.
    max_abs_gain_error_pct : float
        Largest absolute gain error over every ADC code of the range, percent.
    peak_to_peak_gain_error_pct : float
        Largest minus smallest gain error over every ADC code of the range, percent.
    worst_adc_code : int
        Where the largest absolute error sits.
    reference_temp_c : float
        Temperature of the reference gain, degree Celsius.
    """

    adc_code: np.ndarray
    temp_c: np.ndarray
    dac_code: np.ndarray
    sipm_bias_v: np.ndarray
    gain_error_pct: np.ndarray
    max_abs_gain_error_pct: float
    peak_to_peak_gain_error_pct: float
    worst_adc_code: int
    reference_temp_c: float


def integer_path_gain_error(table, law, board, *, reference_temp_c: float = 25.0,
                            photon_rate_hz: float = 0.0) -> IntegerPathGainError:
    """Gain error of the whole integer path at the centre of every ADC code of the range.

    Parameters
    ----------
    table : LookupTable
        The firmware's table.
    law : CompensationLaw
        The law the table holds (gives the SiPM, the supply and the overvoltage).
    board : BoardProfile
        The board (its temperature channel maps codes to temperatures).
    reference_temp_c : float
        The gain at the law's overvoltage at this temperature is the reference, degree Celsius.
    photon_rate_hz : float
        Light on the SiPM (its current drops bias across the series resistor), hertz.

    Returns
    -------
    IntegerPathGainError
    """
    device, supply = law.sipm, law.supply
    codes = np.arange(table.code_lo, table.code_hi + 1, dtype=np.int64)
    temps = board.temperature.temp_at(codes + 0.5)
    dac, _ = table.lookup(codes)
    bias = sipm_bias_v(supply, device, supply.output_v(dac), temps, photon_rate_hz)
    ref_bias = float(breakdown_v(device, reference_temp_c)) + law.overvoltage_v
    ref_gain = float(gain(device, ref_bias, reference_temp_c))
    err = 100.0 * (gain(device, bias, temps) / ref_gain - 1.0)
    worst = int(np.argmax(np.abs(err)))
    return IntegerPathGainError(adc_code=codes, temp_c=temps, dac_code=dac, sipm_bias_v=bias, gain_error_pct=err,
                                max_abs_gain_error_pct=float(np.abs(err).max()),
                                peak_to_peak_gain_error_pct=float(err.max() - err.min()),
                                worst_adc_code=int(codes[worst]), reference_temp_c=float(reference_temp_c))

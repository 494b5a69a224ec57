"""The gain error the firmware's whole integer path leaves, over every ADC code of the operating range.

The path: die temperature -> temperature ADC code -> lookup table -> bias DAC
code -> supply output -> bias at the SiPM after the series filter resistor
(its drop from the SiPM's modelled current) -> gain. The figure is taken at
every ADC code of the range, so it does not depend on any choice of printed
temperatures; both statistics are given by name.

Where in each code's temperature interval the error is taken is a choice:

- ``"centre"``: the temperature the code reads as (what the table is sized
  and verified at);
- ``"edges"``: both ends of the interval. Within one code the DAC code stays
  put while the temperature moves, so the gain error is monotonic there and
  its extremes over every temperature of the range are at the edges: the
  figure then includes the ADC's quantisation.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator.physics.sipm import breakdown_v, gain
from compensator.physics.supply import sipm_bias_v

__all__ = ["WITHIN_CODE", "IntegerPathGainError", "PathPoints", "integer_path_gain_error", "integer_path_points"]

#: Where in each code's temperature interval the error can be taken.
WITHIN_CODE = ("centre", "edges")


class PathPoints(NamedTuple):
    """The integer path at given temperatures and ADC codes."""

    dac_code: np.ndarray
    sipm_bias_v: np.ndarray
    gain_error_pct: np.ndarray


@dataclass(frozen=True, eq=False, kw_only=True)
class IntegerPathGainError:
    """Gain error through the integer path at every ADC code of the range.

    Attributes
    ----------
    within_code : str
        ``"centre"`` (one point per code, at its centre) or ``"edges"``
        (two points per code, at both ends of its interval: every code's
        points are ``adc_code[:n]`` at one end and ``adc_code[n:]`` at the other).
    codes_evaluated : int
        Number of ADC codes of the operating range covered.
    adc_code : ndarray of int64
        The ADC code of each point.
    temp_c : ndarray
        Temperature of each point, degree Celsius.
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

    within_code: str
    codes_evaluated: int
    adc_code: np.ndarray
    temp_c: np.ndarray
    dac_code: np.ndarray
    sipm_bias_v: np.ndarray
    gain_error_pct: np.ndarray
    max_abs_gain_error_pct: float
    peak_to_peak_gain_error_pct: float
    worst_adc_code: int
    reference_temp_c: float


def integer_path_points(table, law, board, temp_c, adc_code, *, reference_temp_c: float = 25.0,
                        photon_rate_hz: float = 0.0) -> PathPoints:
    """The integer path at given temperatures, each read as the given ADC code.

    The code is passed rather than recomputed from the temperature so that a
    point at the edge of a code's interval belongs to that code.

    Parameters
    ----------
    table : LookupTable
        The firmware's table.
    law : CompensationLaw
        The law the table holds (gives the SiPM, the supply and the overvoltage).
    board : BoardProfile
        The board (unused by the path itself; kept for one signature with
        :func:`integer_path_gain_error`).
    temp_c : array_like
        Die temperature of each point, degree Celsius.
    adc_code : array_like of int
        The code the firmware reads at each point.
    reference_temp_c : float
        The gain at the law's overvoltage at this temperature is the reference, degree Celsius.
    photon_rate_hz : float
        Light on the SiPM (its current drops bias across the series resistor), hertz.

    Returns
    -------
    PathPoints
    """
    device, supply = law.sipm, law.supply
    temps = np.asarray(temp_c, dtype=float)
    dac, _ = table.lookup(np.asarray(adc_code, dtype=np.int64))
    bias = sipm_bias_v(supply, device, supply.output_v(dac), temps, photon_rate_hz)
    ref_bias = float(breakdown_v(device, reference_temp_c)) + law.overvoltage_v
    ref_gain = float(gain(device, ref_bias, reference_temp_c))
    err = 100.0 * (gain(device, bias, temps) / ref_gain - 1.0)
    return PathPoints(dac_code=dac, sipm_bias_v=bias, gain_error_pct=err)


def integer_path_gain_error(table, law, board, *, within_code: str = "centre", reference_temp_c: float = 25.0,
                            photon_rate_hz: float = 0.0) -> IntegerPathGainError:
    """Gain error of the whole integer path at every ADC code of the range.

    Parameters
    ----------
    table : LookupTable
        The firmware's table.
    law : CompensationLaw
        The law the table holds (gives the SiPM, the supply and the overvoltage).
    board : BoardProfile
        The board (its temperature channel maps codes to temperatures).
    within_code : {"centre", "edges"}
        Where in each code's temperature interval the error is taken: at
        its centre, or at both ends (the extremes over every temperature
        of the range, ADC quantisation included).
    reference_temp_c : float
        The gain at the law's overvoltage at this temperature is the reference, degree Celsius.
    photon_rate_hz : float
        Light on the SiPM (its current drops bias across the series resistor), hertz.

    Returns
    -------
    IntegerPathGainError
    """
    from compensator.errors import ModelError

    if within_code not in WITHIN_CODE:
        raise ModelError(f"must be one of {', '.join(WITHIN_CODE)}, not {within_code!r}", key="within_code")
    codes = np.arange(table.code_lo, table.code_hi + 1, dtype=np.int64)
    channel = board.temperature
    if within_code == "centre":
        points, temps = codes, channel.temp_at(codes + 0.5)
    else:
        points = np.concatenate([codes, codes])
        temps = np.concatenate([channel.temp_at(codes.astype(float)), channel.temp_at(codes + 1.0)])
    path = integer_path_points(table, law, board, temps, points, reference_temp_c=reference_temp_c,
                               photon_rate_hz=photon_rate_hz)
    err = path.gain_error_pct
    worst = int(np.argmax(np.abs(err)))
    return IntegerPathGainError(within_code=within_code, codes_evaluated=int(codes.size), adc_code=points,
                                temp_c=temps, dac_code=path.dac_code, sipm_bias_v=path.sipm_bias_v,
                                gain_error_pct=err, max_abs_gain_error_pct=float(np.abs(err).max()),
                                peak_to_peak_gain_error_pct=float(err.max() - err.min()),
                                worst_adc_code=int(points[worst]), reference_temp_c=float(reference_temp_c))

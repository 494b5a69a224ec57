"""Calibration from bench measurements: breakdown from I-V curves, gain from charge
spectra, gain scans and temperature coefficients, with uncertainties.

The numerical core (:mod:`.iv`, :mod:`.spectrum`, :mod:`.gainscan`,
:mod:`.tempco`) takes and returns arrays and frozen dataclasses; reading files
(:mod:`.measurements`), batches (:mod:`.batch`) and plots (:mod:`.plots`) sit
at the edge.
"""

from compensator.calibration.definitions import DefinitionOffset, definition_offset
from compensator.calibration.gainscan import (
    GainScanFit,
    PolyFit,
    SpectraScan,
    fit_gain_scan,
    fit_polynomial,
    gain_scan_from_fits,
    gain_scan_from_spectra,
)
from compensator.calibration.iv import DEFAULT_METHOD, DEFINITIONS, METHODS, IvBreakdown, find_breakdown
from compensator.calibration.spectrum import SpectrumFit, fit_spectrum, simulate_spectrum
from compensator.calibration.tempco import (
    ChannelTempco,
    ConstantGainSlope,
    TempcoCalibration,
    calibrate_tempco,
    chi2_p_value,
    TempcoFit,
    calibrated_values,
    constant_gain_slope,
    fit_tempco,
    write_calibrated_profile,
)

__all__ = [
    "DEFINITIONS", "DefinitionOffset", "definition_offset", "ChannelTempco", "TempcoCalibration", "calibrate_tempco", "chi2_p_value",
    "DEFAULT_METHOD", "METHODS", "ConstantGainSlope", "GainScanFit", "IvBreakdown", "PolyFit", "SpectraScan",
    "SpectrumFit", "TempcoFit", "calibrated_values", "constant_gain_slope", "find_breakdown", "fit_gain_scan",
    "fit_polynomial", "fit_spectrum", "fit_tempco", "gain_scan_from_fits", "gain_scan_from_spectra", "simulate_spectrum",
    "write_calibrated_profile",
]

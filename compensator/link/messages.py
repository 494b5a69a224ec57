"""Records exchanged with the controller board, independent of their encoding on the wire.

:class:`Telemetry` is what the board streams and what the logbook stores (one
database column per field, same names); :class:`Identity` is what the board
says about itself and what the logbook stores per session.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Telemetry", "Identity"]


@dataclass(frozen=True, kw_only=True)
class Telemetry:
    """One telemetry sample from the board.

    Attributes
    ----------
    uptime_s : float
        Board time since reset, seconds.
    sensor_adc_code : int
        Raw temperature ADC code.
    sensor_temp_c : float
        Temperature the board derives from the code, degree C.
    bias_set_v : float
        Bias the board is commanding (supply output), volt.
    bias_measured_v : float or None
        Bias read back, volt (``None`` when the board has no read-back channel).
    sipm_current_a : float or None
        SiPM current, ampere (``None`` without a current-sense channel).
    cooler_current_a : float or None
        Cooler drive current, ampere (``None`` without a cooler).
    hot_side_temp_c : float or None
        Cooler hot-side temperature, degree C (``None`` without a cooler).
    overvoltage_target_v : float
        The law's overvoltage target the board is holding, volt.
    faults_live : int
        :class:`~compensator.firmware.faults.FaultFlag` bits that hold now.
    faults_latched : int
        Bits that held since the last clear.
    dark_peak_gain : float or None
        Gain from the dark-count single-photon peak in the last window
        (electrons per photoelectron), ``None`` when the board has none.
    dark_peak_gain_err : float or None
        Its standard error (same unit).
    """

    uptime_s: float
    sensor_adc_code: int
    sensor_temp_c: float
    bias_set_v: float
    bias_measured_v: float | None = None
    sipm_current_a: float | None = None
    cooler_current_a: float | None = None
    hot_side_temp_c: float | None = None
    overvoltage_target_v: float
    faults_live: int = 0
    faults_latched: int = 0
    dark_peak_gain: float | None = None
    dark_peak_gain_err: float | None = None


@dataclass(frozen=True, kw_only=True)
class Identity:
    """What the board says about itself.

    Attributes
    ----------
    firmware_version : str
        Version of the board firmware.
    board_name : str
        The board profile's name.
    protocol_version : int
        Link protocol version the board speaks.
    table_sha256 : str
        Hex digest of the loaded lookup table ("" when none is loaded).
    coefficients_sha256 : str
        Hex digest of the loaded loop coefficients ("" when none).
    serial_number : str
        The unit's serial number ("" when unknown).
    """

    firmware_version: str
    board_name: str
    protocol_version: int
    table_sha256: str = ""
    coefficients_sha256: str = ""
    serial_number: str = ""

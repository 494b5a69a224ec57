"""Fault flags shared by the firmware interlocks, the link protocol, the simulated board and the logbook.

One bit per cause. The board keeps two words: the *live* flags (the condition
holds now) and the *latched* flags (it held at some time since the last
clear). Any latched flag except ``REQUEST_REFUSED`` holds the outputs in the
safe state until it is cleared and its cause is gone.
"""

from __future__ import annotations

from enum import IntFlag

import numpy as np

__all__ = ["FaultFlag", "TRIP_FLAGS", "fault_names", "open_sensor_code", "sensor_fault_band"]


class FaultFlag(IntFlag):
    """Fault causes, one bit each (values are part of the wire protocol: never renumber)."""

    NONE = 0
    SENSOR_OPEN = 1 << 0
    SENSOR_SHORT = 1 << 1
    SENSOR_RATE = 1 << 2          # implausible rate of change of the temperature reading
    OVER_CURRENT = 1 << 3         # SiPM current above the trip level
    BIAS_LIMIT = 1 << 4           # bias or overvoltage would exceed a limit; clamped
    HOT_SIDE_OVER_TEMP = 1 << 5   # cooler hot side above its maximum
    DEW_POINT = 1 << 6            # cold side would go below dew point plus margin
    HEARTBEAT_LOST = 1 << 7       # host silent longer than the heartbeat timeout
    REQUEST_REFUSED = 1 << 8      # a host request was refused (informational)
    SUPPLY_FAULT = 1 << 9         # bias read-back disagrees with the set value


#: Flags that put the outputs in the safe state while latched.
TRIP_FLAGS = (FaultFlag.SENSOR_OPEN | FaultFlag.SENSOR_SHORT | FaultFlag.SENSOR_RATE | FaultFlag.OVER_CURRENT
              | FaultFlag.HOT_SIDE_OVER_TEMP | FaultFlag.HEARTBEAT_LOST | FaultFlag.SUPPLY_FAULT)


def fault_names(flags: int) -> list[str]:
    """Names of the bits set in ``flags``, lowest bit first, lower case.

    Parameters
    ----------
    flags : int
        A fault word; bits without a name are reported as ``bit_N``.
    """
    names = []
    for bit in range(32):
        if flags >> bit & 1:
            known = FaultFlag._value2member_map_.get(1 << bit)
            names.append(known.name.lower() if known is not None else f"bit_{bit}")
    return names


#: A resistance standing for an open (disconnected) temperature sensor, ohm.
OPEN_SENSOR_OHM = 1e12


def open_sensor_code(channel) -> float:
    """The continuous ADC position an open temperature sensor reads on ``channel``.

    Parameters
    ----------
    channel : TemperatureChannel

    Returns
    -------
    float
    """
    return float(channel.front_end.continuous_code(OPEN_SENSOR_OHM))


def sensor_fault_band(channel, temps_c) -> tuple[int, int]:
    """The ADC codes ``(lo, hi)`` of the plausible readings over ``temps_c``; codes outside are sensor faults.

    An end where the sensor model's reading is not finite (its resistance overflowed, e.g. an NTC near
    absolute zero) reads as an open sensor would; the rails 0 and full scale are always faults.

    Parameters
    ----------
    channel : TemperatureChannel
    temps_c : array_like
        The temperatures that must read as plausible, degree Celsius.

    Returns
    -------
    tuple of int
    """
    with np.errstate(all="ignore"):
        x = channel.continuous_code(temps_c)
    x = np.where(np.isfinite(x), x, open_sensor_code(channel))
    full = channel.front_end.full_scale_code
    return max(1, int(np.floor(x.min()))), min(full - 1, int(np.floor(x.max())))

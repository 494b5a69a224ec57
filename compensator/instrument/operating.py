"""SiPM operating points and the board's temperature channel, told to people."""

from __future__ import annotations

import numpy as np

from compensator.findings import Finding

__all__ = [
    "sipm_operating_findings",
    "describe_temperature_channel",
]


def sipm_operating_findings(device, state) -> tuple[Finding, ...]:
    """What a user should know about SiPM operating points: limits passed, gain lost below breakdown.

    Parameters
    ----------
    device : Sipm
        The sensor model (its limits).
    state : SipmState
        The operating points (from :func:`compensator.physics.sipm.evaluate`).

    Returns
    -------
    tuple of Finding
    """
    from compensator.findings import Severity

    found = []
    if np.any(state.overvoltage_v > device.max_overvoltage_v):
        found.append(Finding(code="overvoltage_above_limit", severity=Severity.DANGER,
                             message=f"overvoltage above the profile's max_overvoltage_v {device.max_overvoltage_v:g} V "
                                     f"(largest {float(np.max(state.overvoltage_v)):.3f} V)"))
    if np.any(state.current_a > device.max_current_a):
        found.append(Finding(code="current_above_limit", severity=Severity.DANGER,
                             message=f"current above the profile's max_current_a {device.max_current_a:g} A "
                                     f"(largest {float(np.max(state.current_a)):.3g} A)"))
    if np.any(state.overvoltage_v <= 0):
        found.append(Finding(code="below_breakdown", severity=Severity.WARNING,
                             message="bias at or below breakdown at some temperatures: gain is zero there"))
    return tuple(found)


def describe_temperature_channel(channel) -> str:
    """The board's temperature channel in words (sensor, standard or model, ADC), for people.

    Parameters
    ----------
    channel : TemperatureChannel
        The board's channel.
    """
    from compensator.physics.sensors import RtdSensor

    sensor, fe = channel.sensor, channel.front_end
    if isinstance(sensor, RtdSensor):
        what = (f"platinum RTD, R0 {sensor.r0_ohm:g} ohm, Callendar-Van Dusen (IEC 60751), "
                f"class {sensor.tolerance_class}")
    else:
        model = "Steinhart-Hart" if sensor.steinhart_hart is not None else f"Beta {sensor.beta_k:g} K"
        what = f"NTC thermistor, {sensor.r25_ohm:g} ohm at 25 C, {model}"
    reference = "ratiometric" if fe.ratiometric else "absolute reference"
    return f"{what}; {fe.adc_bits}-bit ADC ({reference})"

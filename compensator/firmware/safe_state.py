"""The sensor-fault state of a table: a DAC code that leaves the SiPM below breakdown, or a named need.

When the temperature reading is invalid (open or shorted sensor, a rail
code), the firmware applies ``safe_dac_code``. That state is safe only if the
supply output there lies below the SiPM's breakdown voltage wherever in the
operating range the die really is, with every tolerance against it: the
numbers come from :func:`compensator.law.safety.safe_bias` (lowest breakdown
with the calibration uncertainties at three standard uncertainties, supply
output at the worst corner of every tolerance and drift).

This module makes the table's decision: the board's ``safe_dac_code`` is kept
when it is safe; otherwise the code of lowest output is used, with a warning
when that one is safe. If no code is safe, the supply cannot switch the SiPM
off by itself: a *danger* finding names the hardware enable (shutdown) line
the board needs, and the generated C header says the same.
"""

from __future__ import annotations

from dataclasses import dataclass

from compensator.findings import Finding, Severity
from compensator.law.safety import highest_output_v, safe_bias

__all__ = ["SHUTDOWN_LINE_TEXT", "SafeState", "safe_state"]

#: What a board needs when its supply cannot go below breakdown (used in findings and in the C header).
SHUTDOWN_LINE_TEXT = ("a hardware enable (shutdown) input on the bias regulator, or a load switch in the bias "
                      "line, that the firmware drives off whenever the table reports a sensor fault and that "
                      "defaults to off at power-up and reset")


@dataclass(frozen=True, kw_only=True)
class SafeState:
    """What the sensor-fault DAC code does to the SiPM.

    Attributes
    ----------
    dac_code : int
        The DAC code the table applies on a sensor fault.
    profile_dac_code : int
        The board profile's ``safe_dac_code``.
    lowest_output_dac_code : int
        The code whose worst-case output is lowest.
    max_output_v : float
        Highest supply output at ``dac_code`` with every tolerance, volt.
    coldest_temp_c : float
        The coldest temperature of the operating range, degree Celsius.
    min_breakdown_v : float
        Lowest breakdown voltage there with every tolerance, volt.
    margin_v : float
        ``min_breakdown_v - max_output_v``: positive when the SiPM is below breakdown, volt.
    below_breakdown : bool
        Whether the fault state holds the SiPM below breakdown.
    needs_shutdown_line : bool
        True when no DAC code can: the board needs a hardware enable/shutdown line.
    findings : tuple of Finding
        A warning when the profile's code was replaced, a danger when no code is safe.
    """

    dac_code: int
    profile_dac_code: int
    lowest_output_dac_code: int
    max_output_v: float
    coldest_temp_c: float
    min_breakdown_v: float
    margin_v: float
    below_breakdown: bool
    needs_shutdown_line: bool
    findings: tuple = ()


def safe_state(law, board) -> SafeState:
    """Check the board's sensor-fault DAC code against the SiPM's breakdown at the coldest temperature.

    Parameters
    ----------
    law : CompensationLaw
        Gives the SiPM, the supply and the operating range.
    board : BoardProfile
        Gives ``safe_dac_code``.

    Returns
    -------
    SafeState
    """
    bias = safe_bias(law, board)
    t_cold, bd_min = bias.coldest_temp_c, bias.lowest_breakdown_v
    profile_code = int(board.safe_dac_code)
    lowest = bias.dac_code
    profile_v = highest_output_v(law, board, profile_code)
    findings = []
    if profile_v < bd_min:
        code, out_v = profile_code, profile_v
    else:
        code, out_v = lowest, bias.highest_output_v
        if out_v < bd_min:
            findings.append(Finding(
                code="safe_dac_code_replaced", severity=Severity.WARNING,
                message=(f"the board's safe_dac_code {profile_code} gives up to {profile_v:.3f} V, not below the "
                         f"SiPM breakdown of {bd_min:.3f} V at {t_cold:g} C (with tolerances); the table uses "
                         f"code {code} instead ({out_v:.3f} V at most)")))
    safe = out_v < bd_min
    if not safe:
        findings.append(Finding(
            code="safe_state_needs_shutdown_line", severity=Severity.DANGER,
            message=(f"NO SAFE DAC CODE: the supply's lowest output is up to {out_v:.3f} V (code {code}), "
                     f"{out_v - bd_min:.3f} V above the SiPM breakdown of {bd_min:.3f} V at {t_cold:g} C (with "
                     f"tolerances), so a sensor fault leaves the SiPM biased above breakdown; the board needs "
                     f"{SHUTDOWN_LINE_TEXT}")))
    return SafeState(dac_code=int(code), profile_dac_code=profile_code, lowest_output_dac_code=int(lowest),
                     max_output_v=out_v, coldest_temp_c=t_cold, min_breakdown_v=bd_min, margin_v=bd_min - out_v,
                     below_breakdown=safe, needs_shutdown_line=not safe, findings=tuple(findings))

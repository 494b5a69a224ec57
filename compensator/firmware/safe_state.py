"""The sensor-fault state: a DAC code that leaves the SiPM below breakdown, or a named hardware need.

When the temperature reading is invalid (open or shorted sensor, a rail
code), the firmware applies ``safe_dac_code``. That state is safe only if the
supply output there lies below the SiPM's breakdown voltage at the coldest
temperature of the operating range (breakdown falls with temperature), with
every tolerance against it:

* the supply output at the code is taken at its highest over every corner of
  the network's resistor tolerance and the DAC reference tolerance (the
  regulator never goes below its ``min_output_v``; the feedback reference and
  the direct-drive offset have no tolerance in the profiles and are taken as
  exact); no drop across the series resistor is counted (below breakdown
  almost no current flows);
* the breakdown voltage is taken at its lowest: the nominal breakdown at
  ``min_temp_c`` less ``SIGMA_COVERAGE`` standard uncertainties of the
  breakdown calibration and of the temperature coefficient times the distance
  from the reference temperature, added linearly (a worst case; three
  standard uncertainties is common practice for a limit).

If the board's ``safe_dac_code`` is not safe but the code of lowest output is,
that code is used instead and a warning says so. If no code is safe, the
supply cannot switch the SiPM off by itself: a *danger* finding names the
hardware enable (shutdown) line the board needs, and the generated C header
says the same.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np

from compensator.findings import Finding, Severity
from compensator.physics.sipm import breakdown_v

__all__ = ["SIGMA_COVERAGE", "SafeState", "worst_case_output_v", "lowest_breakdown_v", "safe_state"]

#: Standard uncertainties of the breakdown calibration counted against the safe state.
SIGMA_COVERAGE = 3.0

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


def worst_case_output_v(supply, dac_code) -> float:
    """Highest regulator output at ``dac_code`` over every corner of the network and DAC reference tolerances.

    Parameters
    ----------
    supply : BiasSupply
    dac_code : int

    Returns
    -------
    float
        Volt, never below the regulator's ``min_output_v``.
    """
    tol = 1e-2 * supply.resistor_tolerance_pct
    ref_tol = 1e-2 * supply.dac.reference_tolerance_pct
    best = -np.inf
    if supply.topology == "feedback_injection":
        keys = ("r1_ohm", "r2_ohm", "r3_ohm")
    else:
        keys = ("gain_v_per_v",)
    for signs in itertools.product((-1.0, 1.0), repeat=len(keys) + 1):
        dac = replace(supply.dac, reference_v=supply.dac.reference_v * (1 + signs[0] * ref_tol))
        changes = {k: getattr(supply, k) * (1 + s * tol) for k, s in zip(keys, signs[1:])}
        corner = replace(supply, dac=dac, **changes)
        best = max(best, float(corner.network_output_v(dac_code)))
    return float(np.clip(best, supply.min_output_v, supply.max_output_v))


def lowest_breakdown_v(sipm, temp_c: float, sigma: float = SIGMA_COVERAGE) -> float:
    """Breakdown voltage at ``temp_c`` less ``sigma`` standard uncertainties of its calibration, volt.

    Parameters
    ----------
    sipm : Sipm
        The device model (``breakdown.breakdown_err_v``, ``breakdown.tempco_err_mv_per_k``).
    temp_c : float
        Degree Celsius.
    sigma : float
        Coverage factor.
    """
    bd = sipm.breakdown
    spread_v = bd.breakdown_err_v + 1e-3 * bd.tempco_err_mv_per_k * abs(temp_c - bd.ref_temp_c)
    return float(breakdown_v(sipm, temp_c)) - sigma * spread_v


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
    supply = law.supply
    t_cold = float(law.min_temp_c)
    bd_min = lowest_breakdown_v(law.sipm, t_cold)
    profile_code = int(board.safe_dac_code)
    ends = (0, supply.dac.full_scale_code)
    lowest = min(ends, key=lambda c: (worst_case_output_v(supply, c), c))
    profile_v = worst_case_output_v(supply, profile_code)
    findings = []
    if profile_v < bd_min:
        code, out_v = profile_code, profile_v
    else:
        code, out_v = lowest, worst_case_output_v(supply, lowest)
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

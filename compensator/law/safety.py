"""The safe bias: the lowest output the supply can set, against the coldest breakdown.

When the temperature reading is invalid the firmware must leave the SiPM
below breakdown, wherever in the operating range it really is: below the
lowest breakdown of the range with every calibration tolerance against it,
and with every tolerance and drift of the supply pushing the output up. If
even the supply's lowest output cannot get there, only a hardware enable or
shutdown line can make the sensor safe.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.law.laws import CompensationLaw
from compensator.physics.sipm import breakdown_v
from compensator.physics.supply import network_output_v

__all__ = ["SafeBias", "lowest_breakdown_v", "safe_bias", "highest_output_v"]

#: Calibration uncertainties are taken at this many sigmas against the safe state.
DEFAULT_SAFE_SIGMAS = 3.0


@dataclass(frozen=True, kw_only=True)
class SafeBias:
    """The safest DAC code and whether it puts the SiPM below breakdown.

    Attributes
    ----------
    coldest_temp_c : float
        Temperature of the lowest breakdown in the range, degree Celsius.
    lowest_breakdown_v : float
        The breakdown there, every calibration uncertainty (at ``sigmas``)
        and both breakdown definitions against it, volt.
    dac_code : int
        The DAC code whose highest possible output is lowest.
    nominal_output_v : float
        Output at that code with nominal parts, volt.
    highest_output_v : float
        Output at that code with every tolerance and drift of the supply
        pushing it up (worst corner), volt.
    margin_v : float
        ``lowest_breakdown_v - highest_output_v``: positive when the code is safe, volt.
    below_breakdown : bool
        Whether the code keeps the SiPM below breakdown everywhere in the range.
    findings : tuple of Finding
        A danger finding when the supply cannot reach below breakdown.
    """

    coldest_temp_c: float
    lowest_breakdown_v: float
    dac_code: int
    nominal_output_v: float
    highest_output_v: float
    margin_v: float
    below_breakdown: bool
    findings: tuple = ()


def lowest_breakdown_v(law: CompensationLaw, *, sigmas: float = DEFAULT_SAFE_SIGMAS, step_k: float = 0.1):
    """Lowest breakdown over the law's operating range, every calibration uncertainty against it.

    ``min over T of Vbd(T) - sigmas (u_Vbd + u_offset + u_tempco |T - T0|)``,
    and no higher than the breakdown of the profile's own definition when the
    law shifted it to the gain-intercept one.

    Parameters
    ----------
    law : CompensationLaw
    sigmas : float
        How many standard uncertainties count against the safe state.
    step_k : float
        Temperature step of the search, kelvin.

    Returns
    -------
    (float, float)
        The breakdown (volt) and its temperature (degree Celsius).
    """
    if not np.isfinite(sigmas) or sigmas < 0:
        raise ModelError(f"must be a non-negative number, got {sigmas!r}", key="sigmas")
    bd = law.sipm.breakdown
    temps = np.linspace(law.min_temp_c, law.max_temp_c,
                        int(round((law.max_temp_c - law.min_temp_c) / step_k)) + 1)
    vbd = breakdown_v(law.sipm, temps) - max(0.0, law.breakdown_offset_v)
    spread = bd.breakdown_err_v + law.breakdown_offset_err_v + 1e-3 * bd.tempco_err_mv_per_k * np.abs(
        temps - bd.ref_temp_c)
    low = vbd - sigmas * spread
    i = int(np.argmin(low))
    return float(low[i]), float(temps[i])


def _highest_output_v(law: CompensationLaw, board, dac_code: int) -> float:
    """Output at ``dac_code`` at the worst corner of every supply tolerance and drift, volt."""
    supply = law.supply
    dac = supply.dac
    t_board = board.electronics_temp_c(np.array([law.min_temp_c, law.max_temp_c]))
    dt_k = float(np.max(np.abs(t_board - board.electronics_ref_temp_c)))
    dac_rel = 1e-2 * (dac.reference_tolerance_pct + dac.gain_error_pct) + 1e-6 * dac.reference_tempco_ppm_per_k * dt_k
    r_rel = 1e-2 * supply.resistor_tolerance_pct + 1e-6 * supply.resistor_drift_ppm_per_k * dt_k
    fb_rel = 1e-2 * supply.feedback_tolerance_pct + 1e-6 * supply.feedback_tempco_ppm_per_k * dt_k
    bounds = [dac_rel, dac.offset_lsb + dac.inl_lsb, r_rel, r_rel, r_rel, fb_rel]
    if supply.topology == "direct":
        bounds[2] = 1e-2 * supply.resistor_tolerance_pct + 2e-6 * supply.resistor_drift_ppm_per_k * dt_k
        bounds[3] = bounds[4] = bounds[5] = 0.0
    corners = np.array(list(itertools.product((-1.0, 1.0), repeat=len(bounds)))) * np.array(bounds)
    out = network_output_v(supply, dac_code, dac_error=corners[:, 0], dac_offset_lsb=corners[:, 1],
                           resistor_errors=(corners[:, 2], corners[:, 3], corners[:, 4]),
                           feedback_error=corners[:, 5])
    return float(out.max())


def safe_bias(law: CompensationLaw, board, *, sigmas: float = DEFAULT_SAFE_SIGMAS) -> SafeBias:
    """The DAC code that leaves the SiPM furthest below breakdown, and whether it is below.

    Parameters
    ----------
    law : CompensationLaw
        Gives the device (gain-intercept breakdown and its uncertainties),
        the supply and the operating range.
    board : BoardProfile
        Gives the electronics' temperature range for the drifts.
    sigmas : float
        How many standard uncertainties of the calibration count against the safe state.

    Returns
    -------
    SafeBias
    """
    floor_v, cold_c = lowest_breakdown_v(law, sigmas=sigmas)
    full = law.supply.dac.full_scale_code
    candidates = [(_highest_output_v(law, board, code), code) for code in (0, full)]
    highest, code = min(candidates)
    nominal = float(law.supply.output_v(code))
    margin = floor_v - highest
    findings = ()
    if margin <= 0:
        findings = (Finding(
            code="safe_state_above_breakdown", severity=Severity.DANGER,
            message=f"the lowest output {law.board_name} can set (DAC code {code}: {nominal:.3f} V, up to "
                    f"{highest:.3f} V with every tolerance) is not below {law.sipm_name}'s coldest breakdown "
                    f"{floor_v:.3f} V at {cold_c:g} C: a sensor fault leaves the SiPM biased; a hardware enable "
                    "or shutdown line that removes the bias is needed"),)
    return SafeBias(coldest_temp_c=cold_c, lowest_breakdown_v=floor_v, dac_code=int(code), nominal_output_v=nominal,
                    highest_output_v=highest, margin_v=float(margin), below_breakdown=bool(margin > 0),
                    findings=findings)


def highest_output_v(law: CompensationLaw, board, dac_code: int) -> float:
    """Output at ``dac_code`` with every tolerance and drift of the supply pushing it up (worst corner), volt.

    Parameters
    ----------
    law : CompensationLaw
        Gives the supply and the operating range.
    board : BoardProfile
        Gives the electronics' temperature range for the drifts.
    dac_code : int
        The DAC code.
    """
    return _highest_output_v(law, board, int(dac_code))

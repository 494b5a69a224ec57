"""The instrument's loops: the cooler tuned over the field's ambient range, the bias supply tuned or set open-loop."""

from __future__ import annotations

from compensator.findings import Finding
from compensator.instrument.records import LOOP_MS, LoopSummary

__all__ = [
    "tune_loops",
]


def tune_loops(cooler_profile, board_profile, *, ms_max: float = LOOP_MS,
               ambient_range_c: tuple[float, float] = (-25.0, 45.0)) -> tuple[LoopSummary, ...]:
    """Tune (robust PI, Ms bound) and verify the cooler loop over the field's ambient range, and the bias loop.

    The cooler's gains must hold the Ms bound at every ambient of the range,
    each checked with its dew point and hot side. The bias loop is tuned only
    when the board reads its bias back; otherwise its bias is set open-loop
    and the summary says so.

    Parameters
    ----------
    cooler_profile : ThermalProfile
        The cooler.
    board_profile : BoardProfile
        The board whose bias supply, filter and read-back form the second loop.
    ms_max : float, optional
        Bound on the maximum sensitivity.
    ambient_range_c : tuple of float, optional
        Lowest and highest ambient of the field, degree Celsius.

    Returns
    -------
    tuple of LoopSummary
    """
    from compensator.loops import design

    designs = [("cooler", cooler_profile.name,
                design.design_cooler_loop(cooler_profile.cooler, method="robust", ms_max=ms_max,
                                          ambient_range_c=ambient_range_c))]
    if board_profile.bias_readback is not None:
        designs.append(("bias supply", board_profile.name,
                        design.design_bias_loop(board_profile, method="robust", ms_max=ms_max)))
    out = []
    for loop, source, res in designs:
        report = res.report
        out.append(LoopSummary(
            loop=loop, profile=source, rate_hz=1.0 / res.sample_time_s, kp=res.gains.kp, ki_per_s=res.gains.ki_per_s,
            kp_unit=res.units.kp_unit, ki_unit=res.units.ki_unit, stable=bool(res.ok),
            gain_margin=report.margins.gain_margin, phase_margin_deg=report.margins.phase_margin_deg,
            ms=report.margins.ms if res.ambient is None else res.ambient.worst_ms,
            settling_time_s=report.step.settling_time_s, overshoot_pct=report.step.overshoot_pct,
            ambient_check=() if res.ambient is None else tuple(res.ambient.checks), findings=tuple(res.findings)))
    if board_profile.bias_readback is None:
        out.append(LoopSummary(loop="bias supply", profile=board_profile.name, open_loop=True,
                               findings=(Finding(code="bias_open_loop", severity="info", message=design.NO_READBACK),)))
    return tuple(out)

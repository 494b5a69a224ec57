"""PID settings in physical units and their discretisation (the per-sample coefficients of the algorithm).

The algorithm, its choices (derivative filter, tracking time, manual mode) and the fixed-point formats are
described in :mod:`compensator.firmware.pid`, which runs it (:class:`~compensator.firmware.pid.FloatPid`) and
re-exports these names.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError

__all__ = ["ANTI_WINDUP_MODES", "PidSettings", "DiscretePid", "discretise_pid"]

ANTI_WINDUP_MODES = ("back_calculation", "clamping", "none")
"""Anti-windup choices: back-calculation (tracking), clamping (conditional integration), none."""


@dataclass(frozen=True)
class PidSettings:
    """A PID controller in physical units, parallel form.

    ``u = kp e + ki integral(e) dt + kd de/dt``, with the proportional term on
    ``b r - y`` and the derivative on the measurement only.

    Parameters
    ----------
    kp : float
        Proportional gain (output unit per input unit).
    ki_per_s : float
        Integral gain (output unit per input unit per second).
    kd_s : float
        Derivative gain (output unit per input unit times seconds).
    sample_time_s : float
        Controller sample period ``h`` in seconds.
    out_min, out_max : float
        Output limits (output unit).
    derivative_filter_n : float
        ``N`` of the derivative filter ``Tf = kd / (kp N)``; ``Tf = h`` when
        ``kp == 0``. ``inf`` means no filter (pure backward difference).
    setpoint_weight : float
        ``b``: the proportional term acts on ``b r - y``.
    rate_limit_per_s : float or None
        Largest output change per second (output unit per second); ``None``
        for no rate limit.
    anti_windup : {"back_calculation", "clamping", "none"}
        Back-calculation (tracking with time constant ``Tt``), clamping
        (conditional integration: the integrator stops when the output is
        limited and the error would drive it further) or none (for
        comparison only; not recommended).
    tracking_time_s : float or None
        Back-calculation time constant ``Tt`` in seconds; default
        ``sqrt(Ti Td)`` (PID), ``Ti`` (PI), ``h`` (no proportional term),
        never shorter than ``h``.

    Raises
    ------
    ModelError
        A field is not finite, out of range, or the gains disagree in sign.
    """

    kp: float
    ki_per_s: float
    kd_s: float
    sample_time_s: float
    out_min: float
    out_max: float
    derivative_filter_n: float = 10.0
    setpoint_weight: float = 1.0
    rate_limit_per_s: float | None = None
    anti_windup: str = "back_calculation"
    tracking_time_s: float | None = None

    def __post_init__(self):
        for key in ("kp", "ki_per_s", "kd_s", "sample_time_s", "out_min", "out_max", "setpoint_weight",
                    "derivative_filter_n", "rate_limit_per_s", "tracking_time_s"):
            value = getattr(self, key)
            if value is None and key in ("rate_limit_per_s", "tracking_time_s"):
                continue
            if not isinstance(value, (int, float, np.integer, np.floating)) or isinstance(value, bool):
                raise ModelError(f"PID setting {key}: must be a number, got {value!r}")
            if not math.isfinite(value) and key != "derivative_filter_n":
                raise ModelError(f"PID setting {key}: must be a finite number, got {value!r}")
        if self.sample_time_s <= 0:
            raise ModelError(f"PID setting sample_time_s: must be positive, got {self.sample_time_s!r}")
        if not self.out_min < self.out_max:
            raise ModelError(
                f"PID setting out_min/out_max: out_min ({self.out_min!r}) must be below out_max ({self.out_max!r})")
        n = self.derivative_filter_n
        if math.isnan(n) or n <= 0:
            raise ModelError(f"PID setting derivative_filter_n: must be positive (inf for no filter), got {n!r}")
        if self.rate_limit_per_s is not None and self.rate_limit_per_s <= 0:
            raise ModelError(
                f"PID setting rate_limit_per_s: must be positive and finite or None, got {self.rate_limit_per_s!r}")
        if self.anti_windup not in ANTI_WINDUP_MODES:
            raise ModelError(
                f"PID setting anti_windup: must be one of {', '.join(ANTI_WINDUP_MODES)}, got {self.anti_windup!r}")
        if self.tracking_time_s is not None and self.tracking_time_s <= 0:
            raise ModelError(
                f"PID setting tracking_time_s: must be positive and finite or None, got {self.tracking_time_s!r}")
        signs = {math.copysign(1.0, g) for g in (self.kp, self.ki_per_s, self.kd_s) if g != 0}
        if len(signs) > 1:
            raise ModelError("PID settings kp, ki_per_s, kd_s: non-zero gains must share one sign "
                             "(negative gains make a reverse-acting controller)")
        if self.kp == 0 and self.ki_per_s == 0 and self.kd_s == 0:
            raise ModelError("PID settings kp, ki_per_s, kd_s: at least one gain must be non-zero")

    @classmethod
    def from_gains(cls, gains, *, sample_time_s: float, out_min: float, out_max: float,
                   rate_limit_per_s: float | None = None, anti_windup: str = "back_calculation",
                   tracking_time_s: float | None = None) -> "PidSettings":
        """The settings of a tuned controller (:class:`compensator.loops.verify.PidGains`) run by the firmware.

        The gains (``kp``, ``ki_per_s``, ``kd_s``, ``derivative_filter_n``,
        ``setpoint_weight``) are the tuning; everything else says how the
        firmware runs it.

        Parameters
        ----------
        gains : PidGains
            Any object with the five gain fields.
        sample_time_s : float
            Controller sample period, second.
        out_min, out_max : float
            Output limits (output unit).
        rate_limit_per_s : float or None
            Largest output change per second.
        anti_windup : {"back_calculation", "clamping", "none"}
            Anti-windup mode.
        tracking_time_s : float or None
            Back-calculation time constant, second.

        Returns
        -------
        PidSettings
        """
        return cls(kp=gains.kp, ki_per_s=gains.ki_per_s, kd_s=gains.kd_s, sample_time_s=sample_time_s,
                   out_min=out_min, out_max=out_max, derivative_filter_n=gains.derivative_filter_n,
                   setpoint_weight=gains.setpoint_weight, rate_limit_per_s=rate_limit_per_s,
                   anti_windup=anti_windup, tracking_time_s=tracking_time_s)


@dataclass(frozen=True, kw_only=True)
class DiscretePid:
    """The per-sample coefficients of :class:`PidSettings` (physical units).

    Attributes
    ----------
    kp, kpb : float
        Proportional gain on the measurement and on the setpoint (``kp b``).
    bi : float
        Integrator increment per unit error per sample, ``ki h``.
    ad : float
        Derivative filter pole, ``Tf / (Tf + h)`` (dimensionless, in [0, 1)).
    bd : float
        Derivative gain per unit measurement step, ``kd / (Tf + h)``.
    track : float
        Tracking (back-calculation) gain per sample, ``h / Tt`` (0 without
        back-calculation); the same name as the fixed-point ``track_mant``.
    derivative_filter_s, tracking_time_s : float
        ``Tf`` and ``Tt`` in seconds (``Tt`` is ``inf`` when not tracking);
        ``derivative_filter_s`` is the name the loop tools use for ``Tf`` too.
    rate_step : float or None
        Largest output change per sample (output unit), ``rate_limit_per_s h``.
    """

    kp: float
    kpb: float
    bi: float
    ad: float
    bd: float
    track: float
    derivative_filter_s: float
    tracking_time_s: float
    rate_step: float | None

    @property
    def ao(self) -> float:
        """Old name of :attr:`track`."""
        return self.track

    @property
    def filter_time_s(self) -> float:
        """Old name of :attr:`derivative_filter_s`."""
        return self.derivative_filter_s


def discretise_pid(settings: PidSettings) -> DiscretePid:
    """Turn continuous PID settings into per-sample coefficients.

    Parameters
    ----------
    settings : PidSettings

    Returns
    -------
    DiscretePid
        Backward-difference derivative filter, forward-Euler integrator and
        tracking gain, as documented in this module.
    """
    s = settings
    h = float(s.sample_time_s)
    kp, ki, kd = float(s.kp), float(s.ki_per_s), float(s.kd_s)
    if kd == 0:
        tf = 0.0
    elif kp == 0:
        tf = h
    else:
        tf = kd / (kp * s.derivative_filter_n)  # same signs, so positive (0 when N is inf)
    if ki == 0 or s.anti_windup != "back_calculation":
        tt = math.inf
    else:
        if s.tracking_time_s is not None:
            tt = float(s.tracking_time_s)
        elif kp == 0:
            tt = h
        elif kd == 0:
            tt = kp / ki
        else:
            tt = math.sqrt((kp / ki) * (kd / kp))
        tt = max(tt, h)
    return DiscretePid(
        kp=kp,
        kpb=kp * float(s.setpoint_weight),
        bi=ki * h,
        ad=tf / (tf + h),
        bd=kd / (tf + h),
        track=0.0 if math.isinf(tt) else h / tt,
        derivative_filter_s=tf,
        tracking_time_s=tt,
        rate_step=None if s.rate_limit_per_s is None else float(s.rate_limit_per_s) * h,
    )

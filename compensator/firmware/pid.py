"""Discrete PID controllers: a floating-point reference and a bit-exact fixed-point reference.

Both controllers run the same algorithm, once per sample period ``h``:

.. code-block:: text

    P = kp (b r - y)                              proportional on weighted setpoint
    D = ad D - bd (y - y_prev)                    derivative on measurement, first-order filter
    v = P + I + D                                 unlimited output
    u = clip(v, out_min, out_max)                 (manual mode: u = manual target)
    u = clip(u, u_prev - du, u_prev + du)         rate limit, du = rate_limit_per_s h
    I = I + bi (r - y) + track (u - v)            back-calculation anti-windup
      | I + bi (r - y) unless it drives further into the limit   (clamping)
      | I + bi (r - y)                                            (none)
      | u - P - D                                                 (manual: tracking)

with ``ad = Tf / (Tf + h)``, ``bd = kd / (Tf + h)`` (backward difference, stable for
every ``Tf >= 0``), ``bi = ki h`` (forward Euler) and ``track = h / Tt``. This is the
textbook discretisation of the two-degree-of-freedom PID with derivative filter
and tracking anti-windup (Astrom and Hagglund, "PID Controllers: Theory, Design,
and Tuning", ISA 1995, section 3.7; from memory).

Choices stated once
-------------------
* Derivative filter time constant ``Tf = kd / (kp N)`` with ``N =
  derivative_filter_n``; when ``kp == 0`` there is no natural time scale and
  ``Tf = h`` (one sample period) is used.
* Tracking time (back-calculation) default: ``Tt = sqrt(Ti Td)`` for a PID and
  ``Tt = Ti`` for a PI, where ``Ti = kp / ki`` and ``Td = kd / kp`` (a rule of
  thumb from the same book, from memory); ``Tt = h`` when ``kp == 0``. ``Tt``
  is never shorter than ``h`` so that ``track <= 1`` and tracking cannot overshoot.
  Without integral action (``ki == 0``) there is no tracking (``track = 0``): the
  integrator then holds the manual reset value set by bumpless transfer.
* Manual mode: the output goes to the operator's target, clipped to the output
  limits and approached at the rate limit (the rate limit protects hardware in
  every mode). The integrator tracks ``u - P - D`` so that the return to
  automatic is bumpless.
* ``reset(output)`` makes the first step output exactly ``output`` (bumpless
  start); ``reset()`` starts from a zero integrator and does not rate-limit
  the first step. The first step after a reset never kicks the derivative.

Fixed-point formats (:class:`FixedPid`, and the C code rendered from it)
------------------------------------------------------------------------
* Inputs ``setpoint_count`` and ``measurement_count`` are int32 counts,
  saturated to ``+-INPUT_LIMIT_COUNT`` (2^24), so that every difference fits
  in 26 bits.
* Output, integrator ``I``, filtered derivative ``D`` and the last output are
  held as int32 in Q(31-F).F *output counts*: ``F = state_frac_bits`` is chosen
  from the output limits, ``F = min(24, 27 - bit_length(max|limit|))``, which
  leaves at least a factor of sixteen of head room above the largest limit
  (for a 12-bit DAC F = 15, for a 16-bit DAC F = 11).
* Each coefficient is a pre-multiplied integer mantissa ``|m| <= 2^30`` with a
  right shift ``s`` (0..62): a product ``m x`` is formed in 64 bits and shifted
  by ``s`` with rounding into Q.F. For count coefficients (kp, kp b, ki h,
  kd/(Tf+h)) ``m 2^-s`` approximates ``c 2^F``; for the state coefficients
  (``ad``, ``track``) it approximates ``c``. All products stay below 2^63 by the
  bounds above, so no 64-bit overflow can happen.
* Rounding is defined once: ``rshift_round(x, s) = floor((x + 2^(s-1)) / 2^s)``,
  i.e. round half up (ties toward +infinity). Python's ``>>`` is a floor
  division; the C code uses an explicit helper that never right-shifts a
  negative number.
* Saturation: ``v``, ``I`` and ``D`` saturate to the int32 range; the output
  is ``rshift_round(u, F)``, which lies inside the integer output limits.

The 32-bit-only variant (``quantise_pid(..., word_bits=32)``)
-------------------------------------------------------------
The same algorithm with no 64-bit operation: mantissas of at most 15 bits and
shifts of at most 46; inputs saturated to ``+-input_limit_count`` (default
2^16); ``F`` lowered where a gain or the range of P, D or the integrator
increment needs it, so that each stays within ``+-2^28`` and the integrator
saturates at ``+-2^28``; then every sum of them fits 32 bits. The C code forms
each product ``m x`` from 16-bit halves of ``x`` and floors the low part into
the high part, which equals ``rshift_round(m x, s)`` exactly, so the Python
reference is :class:`FixedPid` with those limits.

Agreement between the two
-------------------------
:func:`agreement_bound_count` derives a worst-case bound on
``|fixed output - float output / output_per_count|`` after ``n`` steps from
the coefficient quantisation and one half LSB per rounding; see its docstring
for the assumptions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator._lazy import lazy_exports
from compensator.errors import ModelError
from compensator.firmware.fixed_point import INT32_MAX, INT32_MIN, rshift_round  # noqa: F401 (old import path)

__all__ = [
    "ANTI_WINDUP_MODES", "INPUT_LIMIT_COUNT", "PidSettings", "DiscretePid", "discretise_pid", "PidRun",
    "FloatPid", "FixedPidCoefficients", "quantise_pid", "rshift_round", "FixedPidState", "FixedPid",
    "agreement_bound_count",
]

ANTI_WINDUP_MODES = ("back_calculation", "clamping", "none")
"""Anti-windup choices: back-calculation (tracking), clamping (conditional integration), none."""

INPUT_LIMIT_COUNT = 1 << 24
"""Inputs are saturated to +-2^24 counts before use."""

MANTISSA_LIMIT = 1 << 30
"""Largest magnitude of a pre-multiplied coefficient mantissa."""

MAX_SHIFT = 62
"""Largest product right shift."""

MAX_STATE_FRAC_BITS = 24
"""Upper cap on the number of fraction bits of the state format."""


# ---------------------------------------------------------------------------
# Settings and their discretisation
# ---------------------------------------------------------------------------


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


# ---------------------------------------------------------------------------
# Shared helpers for the step-by-step runners
# ---------------------------------------------------------------------------


def _schedule(setpoint, measurement, manual, manual_output, dtype):
    r = np.asarray(setpoint)
    y = np.asarray(measurement)
    if r.ndim == 0:
        r = np.broadcast_to(r, y.shape)
    if r.shape != y.shape or y.ndim != 1:
        raise ModelError(f"setpoint and measurement: need one-dimensional sequences of equal length, "
                         f"got shapes {np.shape(setpoint)} and {np.shape(measurement)}")
    if dtype is not float:
        for name, arr in (("setpoint", r), ("measurement", y)):
            if arr.dtype.kind not in "iu":
                raise ModelError(f"{name}_count: need integer counts, got dtype {arr.dtype}")
    if manual is None:
        return r.astype(dtype).tolist(), y.astype(dtype).tolist(), None, None
    m = np.broadcast_to(np.asarray(manual, dtype=bool), y.shape)
    if manual_output is None:
        raise ModelError("manual_output: required when a manual schedule is given")
    mo = np.broadcast_to(np.asarray(manual_output), y.shape)
    if dtype is not float and mo.dtype.kind not in "iu":
        raise ModelError(f"manual_output_count: need integer counts, got dtype {mo.dtype}")
    return r.astype(dtype).tolist(), y.astype(dtype).tolist(), m.tolist(), mo.astype(dtype).tolist()


@dataclass(frozen=True, kw_only=True)
class PidRun:
    """The record of a run over a sequence.

    Attributes
    ----------
    output : ndarray
        Output at each step (physical unit for :class:`FloatPid`, counts as
        int64 for :class:`FixedPid`).
    integrator, derivative : ndarray
        Integrator ``I`` and filtered derivative ``D`` after each step
        (physical unit, or raw Q.F int32 values as int64 for :class:`FixedPid`).
    """

    output: np.ndarray
    integrator: np.ndarray
    derivative: np.ndarray

    def __iter__(self):
        return iter((self.output, self.integrator, self.derivative))


def _run_steps(pid, r, y, m, mo, dtype) -> PidRun:
    """The run loop shared by both controllers: switch modes as scheduled, step, record the state."""
    out, integ, deriv = [], [], []
    step = pid._step
    for k in range(len(y)):
        if m is not None:
            if m[k]:
                pid.set_manual(mo[k])  # idempotent for an unchanged target
            elif pid._manual:
                pid.set_auto()
        out.append(step(r[k], y[k]))
        integ.append(pid._i)
        deriv.append(pid._d)
    return PidRun(output=np.array(out, dtype=dtype), integrator=np.array(integ, dtype=dtype),
                  derivative=np.array(deriv, dtype=dtype))


# ---------------------------------------------------------------------------
# Floating-point reference
# ---------------------------------------------------------------------------


class _FloatConstants(NamedTuple):
    """The per-step constants of :class:`FloatPid`, in the order its step unpacks them."""

    kpb: float
    kp: float
    ad: float
    bd: float
    bi: float
    track: float
    rate_step: float | None
    anti_windup_code: int
    out_min: float
    out_max: float


class FloatPid:
    """Floating-point PID reference in physical units.

    Parameters
    ----------
    settings : PidSettings

    Examples
    --------
    >>> pid = FloatPid(PidSettings(kp=2.0, ki_per_s=1.0, kd_s=0.0, sample_time_s=0.1,
    ...                            out_min=-10.0, out_max=10.0))
    >>> pid.step(1.0, 0.0)
    2.0
    """

    def __init__(self, settings: PidSettings):
        if not isinstance(settings, PidSettings):
            raise ModelError(f"settings: need a PidSettings, got {type(settings).__name__}")
        self.settings = settings
        self.discrete = c = discretise_pid(settings)
        self._mode = ANTI_WINDUP_MODES.index(settings.anti_windup)
        self._constants = _FloatConstants(c.kpb, c.kp, c.ad, c.bd, c.bi, c.track, c.rate_step, self._mode,
                                          float(settings.out_min), float(settings.out_max))
        self.reset()

    def reset(self, output: float | None = None) -> None:
        """Clear the state and return to automatic mode.

        Parameters
        ----------
        output : float, optional
            When given (output unit, clipped to the limits), the first step
            outputs exactly this value (bumpless start) and the rate limit
            applies from it; otherwise the integrator starts at zero and the
            first step is not rate-limited.
        """
        self._i = 0.0
        self._d = 0.0
        self._y_prev = 0.0
        self._manual = False
        self._target = 0.0
        self._primed = False
        if output is None:
            self._u = 0.0
            self._have_output = False
        else:
            output = float(output)
            if not math.isfinite(output):
                raise ModelError(f"reset output: must be finite, got {output!r}")
            self._u = self._clip(output)
            self._have_output = True

    def _clip(self, value: float) -> float:
        return min(max(value, self.settings.out_min), self.settings.out_max)

    def set_manual(self, output: float) -> None:
        """Switch to manual mode with an output target (output unit).

        The target is clipped to the output limits and approached at the rate
        limit; pass :attr:`output` for a bumpless switch from automatic.
        """
        output = float(output)
        if not math.isfinite(output):
            raise ModelError(f"manual output: must be finite, got {output!r}")
        self._manual = True
        self._target = self._clip(output)

    def set_auto(self) -> None:
        """Return to automatic mode (bumpless: the integrator tracked the manual output)."""
        self._manual = False

    @property
    def manual(self) -> bool:
        """True in manual mode."""
        return self._manual

    @property
    def output(self) -> float:
        """The last output (output unit); 0.0 before the first step unless reset to a value."""
        return self._u

    @property
    def integrator(self) -> float:
        """The integrator state ``I`` (output unit)."""
        return self._i

    @property
    def derivative(self) -> float:
        """The filtered derivative term ``D`` (output unit)."""
        return self._d

    def step(self, setpoint: float, measurement: float) -> float:
        """Advance one sample period.

        Parameters
        ----------
        setpoint, measurement : float
            Reference ``r`` and measured value ``y`` (input unit).

        Returns
        -------
        float
            The output ``u`` (output unit), within the limits.
        """
        r, y = float(setpoint), float(measurement)
        if not (math.isfinite(r) and math.isfinite(y)):
            raise ModelError(f"setpoint/measurement: must be finite, got {setpoint!r}, {measurement!r}")
        return self._step(r, y)

    def _step(self, r: float, y: float) -> float:
        # the same algorithm as FixedPid._step, in floating point
        kpb, kp, ad, bd, bi, track, rate, mode, lo, hi = self._constants
        primed, manual, have_output = self._primed, self._manual, self._have_output
        y_prev = self._y_prev if primed else y
        p = kpb * r - kp * y
        d = ad * self._d - bd * (y - y_prev)
        u_prev = self._u
        i = self._i
        if not primed and have_output and not manual:
            i = u_prev - p - d  # bumpless start from reset(output)
        v = p + i + d
        if manual:
            u = self._target
        else:
            u = lo if v < lo else hi if v > hi else v
        if rate is not None and have_output:
            lo_r, hi_r = u_prev - rate, u_prev + rate
            u = lo_r if u < lo_r else hi_r if u > hi_r else u
        if manual:
            i = u - p - d  # tracking for a bumpless return to automatic
        else:
            inc = bi * (r - y)
            if mode == 0:  # back-calculation
                i += inc + track * (u - v)
            elif mode == 1:  # clamping: hold while limited and the error drives further
                if not ((v > u and inc > 0) or (v < u and inc < 0)):
                    i += inc
            else:
                i += inc
        self._i = i
        self._d = d
        self._u = u
        self._y_prev = y
        self._primed = True
        self._have_output = True
        return u

    def run(self, setpoint, measurement, *, manual=None, manual_output=None) -> PidRun:
        """Run over whole sequences, continuing from the present state.

        Parameters
        ----------
        setpoint : array_like or float
            Reference at each step (input unit); a scalar is held.
        measurement : array_like
            Measured value at each step (input unit), shape ``(n,)``.
        manual : array_like of bool, optional
            Manual mode at each step: before a manual step the controller
            is put in manual mode with that step's target
            (:meth:`set_manual`), before an automatic step back in
            automatic mode (:meth:`set_auto`).
        manual_output : array_like, optional
            Manual output target at each step (output unit).

        Returns
        -------
        PidRun
            Output, integrator and derivative after each step.
        """
        r, y, m, mo = _schedule(setpoint, measurement, manual, manual_output, float)
        if not (np.all(np.isfinite(r)) and np.all(np.isfinite(y))):
            raise ModelError("setpoint/measurement: must be finite")
        return _run_steps(self, r, y, m, mo, float)


# The fixed-point half lives in its own modules (which import this one); its names stay importable from here,
# loaded on first use so that any of the three modules can be imported first.
__getattr__ = lazy_exports(globals(), {
    "FixedPidCoefficients": "compensator.firmware.pid_coefficients",
    "quantise_pid": "compensator.firmware.pid_coefficients",
    "FixedPidState": "compensator.firmware.pid_fixed",
    "FixedPid": "compensator.firmware.pid_fixed",
    "agreement_bound_count": "compensator.firmware.pid_fixed",
})

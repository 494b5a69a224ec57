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

Agreement between the two
-------------------------
:func:`agreement_bound_count` derives a worst-case bound on
``|fixed output - float output / output_per_count|`` after ``n`` steps from
the coefficient quantisation and one half LSB per rounding; see its docstring
for the assumptions.
"""

from __future__ import annotations

import math
import operator
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.fixed_point import INT32_MAX, INT32_MIN, half, rshift_round, saturate

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


# ---------------------------------------------------------------------------
# Fixed-point coefficients
# ---------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class FixedPidCoefficients:
    """Pre-multiplied integer coefficients and limits of the fixed-point PID.

    State values (integrator, derivative, output) are int32 in Q(31-F).F
    output counts with ``F = state_frac_bits``. A product of a mantissa ``m``
    with a value ``x`` is formed in 64 bits and shifted right with rounding
    (round half up) by the matching shift.

    Attributes
    ----------
    state_frac_bits : int
        ``F``.
    kp_mant, kpb_mant, p_shift : int
        ``P = rshift_round(kpb_mant r - kp_mant y, p_shift)`` with ``r``, ``y``
        in input counts.
    ki_mant, ki_shift : int
        Integrator increment ``rshift_round(ki_mant (r - y), ki_shift)``.
    ad_mant, ad_shift : int
        Derivative pole: ``rshift_round(ad_mant D, ad_shift)``.
    bd_mant, bd_shift : int
        Derivative gain: ``rshift_round(bd_mant (y - y_prev), bd_shift)``.
    track_mant, track_shift : int
        Back-calculation: ``rshift_round(track_mant (u - v), track_shift)``.
    out_min_count, out_max_count : int
        Output limits in counts (inside the physical limits).
    rate_step_q : int
        Largest output change per step in Q.F; 0 for no rate limit.
    anti_windup : str
        One of :data:`ANTI_WINDUP_MODES`.
    input_per_count, output_per_count, sample_time_s : float
        The scaling these coefficients were made for.
    kp_count, kpb_count, ki_count, bd_count : float
        The exact count-domain coefficients (output counts per input count).
    ad, track : float
        The exact dimensionless coefficients.
    rate_step_count : float
        The exact rate step in output counts (0 for none).
    out_min_exact_count, out_max_exact_count : float
        The exact physical limits divided by ``output_per_count``.
    """

    state_frac_bits: int
    kp_mant: int
    kpb_mant: int
    p_shift: int
    ki_mant: int
    ki_shift: int
    ad_mant: int
    ad_shift: int
    bd_mant: int
    bd_shift: int
    track_mant: int
    track_shift: int
    out_min_count: int
    out_max_count: int
    rate_step_q: int
    anti_windup: str
    input_per_count: float
    output_per_count: float
    sample_time_s: float
    kp_count: float
    kpb_count: float
    ki_count: float
    bd_count: float
    ad: float
    track: float
    rate_step_count: float
    out_min_exact_count: float
    out_max_exact_count: float

    def __post_init__(self):
        # the invariants the overflow-free arithmetic relies on (the C code asserts them too)
        f = self.state_frac_bits
        if not 0 <= f <= MAX_STATE_FRAC_BITS:
            raise ModelError(f"state_frac_bits: {f} is outside 0..{MAX_STATE_FRAC_BITS}")
        for key in ("kp", "kpb", "ki", "ad", "bd", "track"):
            mant = getattr(self, f"{key}_mant")
            if abs(mant) > MANTISSA_LIMIT:
                raise ModelError(f"{key}_mant: {mant} exceeds 2^30 in magnitude")
        for key in ("p", "ki", "ad", "bd", "track"):
            shift = getattr(self, f"{key}_shift")
            if not 0 <= shift <= MAX_SHIFT:
                raise ModelError(f"{key}_shift: {shift} is outside 0..{MAX_SHIFT}")
        if not self.out_min_count <= self.out_max_count:
            raise ModelError(f"out_min_count/out_max_count: {self.out_min_count} is above {self.out_max_count}")
        if max(abs(self.out_min_count), abs(self.out_max_count)) > INT32_MAX >> f:
            raise ModelError(f"out_min_count/out_max_count: the limits do not fit Q{31 - f}.{f}")
        if not 0 <= self.rate_step_q <= INT32_MAX:
            raise ModelError(f"rate_step_q: {self.rate_step_q} is outside 0..2^31-1")
        if self.anti_windup not in ANTI_WINDUP_MODES:
            raise ModelError(f"anti_windup: must be one of {', '.join(ANTI_WINDUP_MODES)}, got {self.anti_windup!r}")

    @property
    def anti_windup_code(self) -> int:
        """0 back-calculation, 1 clamping, 2 none (the value used in C)."""
        return ANTI_WINDUP_MODES.index(self.anti_windup)

    def represented(self) -> dict[str, float]:
        """The real value each quantised coefficient stands for (counts domain)."""
        f = self.state_frac_bits
        return {
            "kp_count": self.kp_mant * 2.0 ** -(self.p_shift + f),
            "kpb_count": self.kpb_mant * 2.0 ** -(self.p_shift + f),
            "ki_count": self.ki_mant * 2.0 ** -(self.ki_shift + f),
            "bd_count": self.bd_mant * 2.0 ** -(self.bd_shift + f),
            "ad": self.ad_mant * 2.0 ** -self.ad_shift,
            "track": self.track_mant * 2.0 ** -self.track_shift,
            "rate_step_count": self.rate_step_q * 2.0 ** -f,
        }

    @property
    def integrator_deadband_count(self) -> float:
        """Smallest error (input counts) whose integrator increment rounds to a non-zero value.

        ``inf`` without integral action.
        """
        if self.ki_mant == 0:
            return math.inf
        return 0.5 * 2.0 ** self.ki_shift / abs(self.ki_mant)


def _quantise(value: float, name: str) -> tuple[int, int]:
    """Mantissa and right shift with ``mantissa 2^-shift ~= value`` and ``|mantissa| <= 2^30``."""
    if value == 0:
        return 0, 0
    if abs(value) > MANTISSA_LIMIT:
        raise ModelError(f"{name}: {value:.6g} is too large for the fixed-point format "
                         f"(more than 2^30 state units); scale the inputs or outputs differently")
    shift = max(0, min(MAX_SHIFT, 29 - math.frexp(abs(value))[1] + 1))
    while shift < MAX_SHIFT and abs(math.floor(abs(value) * 2.0 ** (shift + 1) + 0.5)) <= MANTISSA_LIMIT:
        shift += 1
    while shift > 0 and math.floor(abs(value) * 2.0 ** shift + 0.5) > MANTISSA_LIMIT:
        shift -= 1
    mant = int(math.copysign(math.floor(abs(value) * 2.0 ** shift + 0.5), value))
    if abs(mant) < (1 << 10):
        raise ModelError(f"{name}: {value:.6g} is too small for the fixed-point format "
                         f"(would keep fewer than 10 significant bits)")
    return mant, shift


def _limit_counts(lo: float, hi: float) -> tuple[int, int]:
    def near_int(x):
        return abs(x - round(x)) <= 1e-9 * max(1.0, abs(x))
    lo_c = round(lo) if near_int(lo) else math.ceil(lo)
    hi_c = round(hi) if near_int(hi) else math.floor(hi)
    return int(lo_c), int(hi_c)


def quantise_pid(settings: PidSettings, *, input_per_count: float, output_per_count: float) -> FixedPidCoefficients:
    """Convert PID settings into fixed-point coefficients.

    Parameters
    ----------
    settings : PidSettings
        Gains and limits in physical units.
    input_per_count : float
        Physical input unit per input count (e.g. kelvin per ADC code or per
        temperature count); may be negative for a reversing front end.
    output_per_count : float
        Physical output unit per output count (e.g. volt per DAC code); may be
        negative for a reversing actuator (the limits are then swapped).

    Returns
    -------
    FixedPidCoefficients

    Raises
    ------
    ModelError
        A scale is zero or not finite, the integer limits are empty or too
        large, a coefficient does not fit the format, or the rate limit is
        below one state LSB per step.
    """
    if not isinstance(settings, PidSettings):
        raise ModelError(f"settings: need a PidSettings, got {type(settings).__name__}")
    for key, value in (("input_per_count", input_per_count), ("output_per_count", output_per_count)):
        if not isinstance(value, (int, float, np.integer, np.floating)) or not math.isfinite(value) or value == 0:
            raise ModelError(f"{key}: must be a finite non-zero number, got {value!r}")
    ipc, opc = float(input_per_count), float(output_per_count)
    disc = discretise_pid(settings)
    lo_exact, hi_exact = sorted((settings.out_min / opc, settings.out_max / opc))
    lo_c, hi_c = _limit_counts(lo_exact, hi_exact)
    if lo_c > hi_c:
        raise ModelError(f"out_min/out_max: the limits {settings.out_min!r}..{settings.out_max!r} contain no "
                         f"whole output count at output_per_count {opc!r}")
    largest = max(abs(lo_c), abs(hi_c), 1)
    frac = min(MAX_STATE_FRAC_BITS, 27 - largest.bit_length())
    if frac < 0:
        raise ModelError(f"out_min/out_max: limits of {largest} counts exceed the fixed-point range (2^27 counts)")
    scale = ipc / opc
    kp_c, kpb_c, ki_c, bd_c = disc.kp * scale, disc.kpb * scale, disc.bi * scale, disc.bd * scale
    two_f = 2.0 ** frac
    # kp and kp b share one shift so that P = kp (b r - y) is formed with one rounding
    big = max(abs(kp_c), abs(kpb_c))
    if big == 0:
        kp_m = kpb_m = p_s = 0
    else:
        _, p_s = _quantise(big * two_f, "kp")
        kp_m = int(math.copysign(math.floor(abs(kp_c) * two_f * 2.0 ** p_s + 0.5), kp_c))
        kpb_m = int(math.copysign(math.floor(abs(kpb_c) * two_f * 2.0 ** p_s + 0.5), kpb_c))
    ki_m, ki_s = _quantise(ki_c * two_f, "ki_per_s")
    bd_m, bd_s = _quantise(bd_c * two_f, "kd_s")
    ad_m, ad_s = _quantise(disc.ad, "derivative filter") if disc.ad else (0, 0)
    tr_m, tr_s = _quantise(disc.track, "tracking_time_s") if disc.track else (0, 0)
    if disc.rate_step is None:
        rate_q, rate_c = 0, 0.0
    else:
        rate_c = disc.rate_step / abs(opc)
        rate_q = min(INT32_MAX, math.floor(rate_c * two_f + 0.5))
        if rate_q < 1:
            raise ModelError(f"rate_limit_per_s: {settings.rate_limit_per_s!r} per second is below the "
                             f"fixed-point resolution (2^-{frac} count per step)")
    return FixedPidCoefficients(
        state_frac_bits=frac,
        kp_mant=kp_m, kpb_mant=kpb_m, p_shift=p_s,
        ki_mant=ki_m, ki_shift=ki_s,
        ad_mant=ad_m, ad_shift=ad_s,
        bd_mant=bd_m, bd_shift=bd_s,
        track_mant=tr_m, track_shift=tr_s,
        out_min_count=lo_c, out_max_count=hi_c,
        rate_step_q=rate_q,
        anti_windup=settings.anti_windup,
        input_per_count=ipc, output_per_count=opc, sample_time_s=float(settings.sample_time_s),
        kp_count=kp_c, kpb_count=kpb_c, ki_count=ki_c, bd_count=bd_c,
        ad=disc.ad, track=disc.track, rate_step_count=rate_c,
        out_min_exact_count=lo_exact, out_max_exact_count=hi_exact,
    )


# ---------------------------------------------------------------------------
# Fixed-point reference
# ---------------------------------------------------------------------------


def _sat32(x: int) -> int:
    return saturate(x, 32)


def _as_int32(value, name: str) -> int:
    try:
        v = operator.index(value)
    except TypeError:
        raise ModelError(f"{name}: need an integer count, got {value!r}") from None
    if not INT32_MIN <= v <= INT32_MAX:
        raise ModelError(f"{name}: {v} is outside the int32 range")
    return v


@dataclass(frozen=True, kw_only=True)
class FixedPidState:
    """A snapshot of the fixed-point controller state (the fields of the C state struct).

    Attributes
    ----------
    integrator_q, derivative_q, output_q, manual_target_q : int
        Q.F output counts (int32).
    last_measurement_count : int
        Previous measurement (input counts).
    manual, primed, have_output : bool
        Mode and start-up flags.
    """

    integrator_q: int
    derivative_q: int
    output_q: int
    manual_target_q: int
    last_measurement_count: int
    manual: bool
    primed: bool
    have_output: bool


class _FixedConstants(NamedTuple):
    """The per-step constants of :class:`FixedPid`, in the order its step unpacks them.

    Each product ``m x`` rounded by ``rshift_round(m x, s)`` is written in the
    step as ``(m x + half) >> s`` with ``half = 2^(s-1)`` (0 for ``s == 0``).
    """

    kpb_mant: int
    kp_mant: int
    p_shift: int
    p_half: int
    ad_mant: int
    ad_shift: int
    ad_half: int
    bd_mant: int
    bd_shift: int
    bd_half: int
    ki_mant: int
    ki_shift: int
    ki_half: int
    track_mant: int
    track_shift: int
    track_half: int
    rate_step_q: int
    anti_windup_code: int
    state_frac_bits: int
    state_half: int
    out_min_q: int
    out_max_q: int


def _fixed_constants(c: "FixedPidCoefficients") -> _FixedConstants:
    f = c.state_frac_bits
    return _FixedConstants(
        c.kpb_mant, c.kp_mant, c.p_shift, half(c.p_shift),
        c.ad_mant, c.ad_shift, half(c.ad_shift),
        c.bd_mant, c.bd_shift, half(c.bd_shift),
        c.ki_mant, c.ki_shift, half(c.ki_shift),
        c.track_mant, c.track_shift, half(c.track_shift),
        c.rate_step_q, c.anti_windup_code, f, half(f),
        c.out_min_count << f, c.out_max_count << f)


class FixedPid:
    """Bit-exact fixed-point PID reference (the generated C does exactly this).

    Parameters
    ----------
    coeffs : FixedPidCoefficients
        From :func:`quantise_pid`.

    Notes
    -----
    Inputs are int32 counts, saturated to ``+-2^24``; arithmetic is done on
    Python integers with explicit saturation to int32 where the C code
    saturates, so the two agree bit for bit.
    """

    def __init__(self, coeffs: FixedPidCoefficients):
        if not isinstance(coeffs, FixedPidCoefficients):
            raise ModelError(f"coeffs: need FixedPidCoefficients, got {type(coeffs).__name__}")
        self.coeffs = coeffs
        self._constants = _fixed_constants(coeffs)
        self.reset()

    def reset(self, output_count: int | None = None) -> None:
        """Clear the state and return to automatic mode.

        Parameters
        ----------
        output_count : int, optional
            When given (clipped to the limits), the first step outputs exactly
            this count (bumpless start) and the rate limit applies from it.
        """
        self._i = 0
        self._d = 0
        self._y_prev = 0
        self._manual = False
        self._target = 0
        self._primed = False
        if output_count is None:
            self._u = 0
            self._have_output = False
        else:
            self._u = self._clip_count(_as_int32(output_count, "output_count"))
            self._have_output = True

    def _clip_count(self, count: int) -> int:
        c = self.coeffs
        return min(max(count, c.out_min_count), c.out_max_count) << c.state_frac_bits

    def set_manual(self, output_count: int) -> None:
        """Switch to manual mode with an output target in counts (clipped to the limits)."""
        self._target = self._clip_count(_as_int32(output_count, "output_count"))
        self._manual = True

    def set_auto(self) -> None:
        """Return to automatic mode (bumpless)."""
        self._manual = False

    @property
    def manual(self) -> bool:
        """True in manual mode."""
        return self._manual

    @property
    def output_count(self) -> int:
        """The last output in counts."""
        return rshift_round(self._u, self.coeffs.state_frac_bits)

    @property
    def state(self) -> FixedPidState:
        """A snapshot of the state."""
        return FixedPidState(integrator_q=self._i, derivative_q=self._d, output_q=self._u,
                             manual_target_q=self._target, last_measurement_count=self._y_prev, manual=self._manual,
                             primed=self._primed, have_output=self._have_output)

    def step(self, setpoint_count: int, measurement_count: int) -> int:
        """Advance one sample period.

        Parameters
        ----------
        setpoint_count, measurement_count : int
            Reference and measurement in input counts (int32; saturated to
            +-2^24).

        Returns
        -------
        int
            The output in counts, within ``[out_min_count, out_max_count]``.
        """
        r = _as_int32(setpoint_count, "setpoint_count")
        y = _as_int32(measurement_count, "measurement_count")
        return self._step(r, y)

    def _step(self, r: int, y: int) -> int:
        # One implementation for step() and run(); the shifts are written out as
        # (x + half) >> s, which is rshift_round(x, s) (Python's >> floors).
        (kpb, kp, ps, ph, ad, ads, adh, bd, bds, bdh, ki, kis, kih, tr, trs, trh,
         rate, mode, f, fh, lo_q, hi_q) = self._constants
        lim = INPUT_LIMIT_COUNT
        r = -lim if r < -lim else lim if r > lim else r
        y = -lim if y < -lim else lim if y > lim else y
        primed, manual, have_output = self._primed, self._manual, self._have_output
        y_prev = self._y_prev if primed else y
        p = (kpb * r - kp * y + ph) >> ps
        d = ((ad * self._d + adh) >> ads) - ((bd * (y - y_prev) + bdh) >> bds)
        d = INT32_MIN if d < INT32_MIN else INT32_MAX if d > INT32_MAX else d
        u_prev = self._u
        i = self._i
        if not primed and have_output and not manual:
            i = _sat32(u_prev - p - d)  # bumpless start from reset(output_count)
        v = p + i + d
        v = INT32_MIN if v < INT32_MIN else INT32_MAX if v > INT32_MAX else v
        if manual:
            u = self._target
        else:
            u = lo_q if v < lo_q else hi_q if v > hi_q else v
        if rate and have_output:
            lo, hi = u_prev - rate, u_prev + rate
            u = lo if u < lo else hi if u > hi else u
        if manual:
            i = _sat32(u - p - d)  # tracking for a bumpless return to automatic
        else:
            inc = (ki * (r - y) + kih) >> kis
            if mode == 0:  # back-calculation
                i = _sat32(i + inc + ((tr * (u - v) + trh) >> trs))
            elif mode == 1:  # clamping: hold while limited and the error drives further
                if not ((v > u and inc > 0) or (v < u and inc < 0)):
                    i = _sat32(i + inc)
            else:
                i = _sat32(i + inc)
        self._i = i
        self._d = d
        self._u = u
        self._y_prev = y
        self._primed = True
        self._have_output = True
        return (u + fh) >> f

    def run(self, setpoint_count, measurement_count, *, manual=None, manual_output_count=None) -> PidRun:
        """Run over whole sequences of counts, continuing from the present state.

        Parameters
        ----------
        setpoint_count : array_like of int or int
            Reference at each step (input counts); a scalar is held.
        measurement_count : array_like of int
            Measurement at each step (input counts), shape ``(n,)``.
        manual : array_like of bool, optional
            Manual mode at each step (switches as in :meth:`FloatPid.run`).
        manual_output_count : array_like of int, optional
            Manual output target at each step (counts).

        Returns
        -------
        PidRun
            Output counts and raw Q.F integrator and derivative after each step (int64).
        """
        r, y, m, mo = _schedule(setpoint_count, measurement_count, manual, manual_output_count, np.int64)
        for name, seq in (("setpoint_count", r), ("measurement_count", y), ("manual_output_count", mo)):
            if seq and (min(seq) < INT32_MIN or max(seq) > INT32_MAX):
                raise ModelError(f"{name}: values outside the int32 range")
        return _run_steps(self, r, y, m, mo, np.int64)


# ---------------------------------------------------------------------------
# Agreement bound
# ---------------------------------------------------------------------------


def agreement_bound_count(coeffs: FixedPidCoefficients, n_steps: int, *, max_input_count: float,
                          manual=None, max_output_count: float | None = None) -> float:
    """Worst-case difference between the fixed-point and the float output after ``n_steps``.

    The bound is on ``|FixedPid output - FloatPid output / output_per_count|``
    (output counts) when both see the same inputs (``count * input_per_count``
    for the float controller) and the same mode switches.

    Derivation. Let ``eta = 2^-F`` (one state LSB in counts); each rounding
    right shift errs by at most ``eta/2``; a quantised coefficient ``c`` errs
    by ``dc`` (known exactly from its mantissa). With ``|r|, |y| <= X``
    (``X = max_input_count``), ``|y - y_prev| <= 2X``, ``|r - y| <= 2X`` and
    ``|D| <= Dmax = |bd| 2X / (1 - ad)``, per step:

    * ``eP <= (|dkpb| + |dkp|) X + eta/2`` (one rounding);
    * ``eD' <= ad eD + |dad| Dmax + |dbd| 2X + eta`` (two roundings); from
      ``eD = 0`` it never exceeds its fixed point ``eD* = (...) / (1 - ad)``;
    * ``ev <= eP + eI + eD*``. Clipping to the limits is 1-Lipschitz; the rate
      limit, a clip to ``u_prev +- du``, adds ``eu_prev + |ddu|``; the
      integer limits differ from the exact ones by at most ``L =
      max(|out_min_count - out_min_exact|, |out_max_count - out_max_exact|)``
      (they lie inside them), and a clip is 1-Lipschitz in the value and its
      bounds together: so ``eu <= max(ev, L, eu_prev + |ddu|)`` in automatic
      mode and ``eu <= max(L, eu_prev + |ddu|)`` in manual mode (the target
      is the same number for both; without a rate limit drop the
      ``eu_prev`` terms);
    * back-calculation: ``I' = (1 - t) I + t (u - P - D) + bi e`` with the
      tracking gain ``0 <= t <= 1``, so ``eI' <= (1 - t) eI + t (eu + eP + eD*) + |dt|
      |u - v| + |dbi| 2X + eta`` with ``|u - v| <= 2^(32-F)`` counts (int32
      state); clamping and none: ``eI' <= eI + |dbi| 2X + eta/2``; manual
      tracking ``I = u - P - D``: ``eI' <= eu + eP + eD* + eta``. The first
      step after ``reset(output)`` sets ``I`` the same way, so the recurrence
      starts from ``eI = eP + eD* + eta``.

    The output error is ``eu + 1/2`` (the fixed output is rounded to a whole
    count). The integrator does not forget, so in automatic mode the bound grows about
    linearly with the number of steps; it is therefore stated for a run
    length.

    Assumptions: ``P``, ``I``, ``D`` and ``P + I + D`` stay inside the int32
    state range (``+-2^(31-F)`` counts, at least sixteen times the largest
    limit), so no int32 saturation happens; the inputs stay within
    ``X <= 2^24`` counts; in clamping mode the integrate/hold decisions of
    both controllers coincide (the decision is discontinuous: right at a limit
    the two may differ by one whole increment, which then persists in open
    loop and is corrected in closed loop).

    Parameters
    ----------
    coeffs : FixedPidCoefficients
    n_steps : int
        Number of steps since the last reset.
    max_input_count : float
        Largest magnitude of setpoint and measurement (input counts).
    manual : array_like of bool, optional
        Manual mode at each step (length ``n_steps``); default automatic
        throughout.
    max_output_count : float, optional
        Largest magnitude of ``u`` and ``v`` (counts) for the tracking-gain
        error; default the whole int32 state range.

    Returns
    -------
    float
        The bound in output counts.
    """
    if n_steps < 0:
        raise ModelError(f"n_steps: must be non-negative, got {n_steps!r}")
    n_steps = int(n_steps)
    if manual is None:
        modes = [False] * n_steps
    else:
        modes = np.broadcast_to(np.asarray(manual, dtype=bool), (n_steps,)).tolist()
    c = coeffs
    eta = 2.0 ** -c.state_frac_bits
    q = c.represented()
    x = float(min(max_input_count, INPUT_LIMIT_COUNT))
    d_kp = abs(q["kp_count"] - c.kp_count)
    d_kpb = abs(q["kpb_count"] - c.kpb_count)
    d_ki = abs(q["ki_count"] - c.ki_count)
    d_bd = abs(q["bd_count"] - c.bd_count)
    d_ad = abs(q["ad"] - c.ad)
    d_tr = abs(q["track"] - c.track)
    d_rate = abs(q["rate_step_count"] - c.rate_step_count)
    uv_max = 2.0 ** (32 - c.state_frac_bits) if max_output_count is None else 2.0 * max_output_count
    e_p = (d_kpb + d_kp) * x + (eta / 2 if c.p_shift else 0.0)
    if c.bd_mant:
        d_max = abs(c.bd_count) * 2 * x / (1 - c.ad)
        e_d = (d_ad * d_max + d_bd * 2 * x + eta) / (1 - c.ad)
    else:
        e_d = 0.0
    tracking = c.anti_windup == "back_calculation" and c.track_mant != 0
    t_gain = c.track
    lim = max(abs(c.out_min_count - c.out_min_exact_count), abs(c.out_max_count - c.out_max_exact_count))
    e_i = e_p + e_d + eta
    e_u = 0.0
    for is_manual in modes:
        if is_manual:
            # the target is the same number for both, clipped to limits that differ by up to lim
            e_u = max(lim, e_u + d_rate) if c.rate_step_q else lim
            e_i = e_u + e_p + e_d + eta
            continue
        e_v = e_p + e_i + e_d
        e_clip = max(e_v, lim)  # clip(v, lo, hi) is 1-Lipschitz in v, lo and hi together
        e_u = max(e_clip, e_u + d_rate) if c.rate_step_q else e_clip
        if tracking:
            e_i = (1 - t_gain) * e_i + t_gain * (e_u + e_p + e_d) + d_tr * uv_max + d_ki * 2 * x + eta
        else:
            e_i = e_i + d_ki * 2 * x + eta / 2
    return e_u + 0.5

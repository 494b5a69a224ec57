"""The fixed-point PID: the bit-exact reference and its agreement bound.

The formats, the rounding and the saturation are described in
:mod:`compensator.firmware.pid`; the coefficients and their quantisation are
in :mod:`compensator.firmware.pid_coefficients` (re-exported here under their
old import paths); the generated C (:mod:`compensator.firmware.pid_c`) does
exactly what :class:`FixedPid` does.
"""

from __future__ import annotations

import operator
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.fixed_point import INT32_MAX, INT32_MIN, half, rshift_round
from compensator.firmware.pid import PidRun, _run_steps, _schedule
from compensator.firmware.pid_coefficients import (
    DEFAULT_INPUT_LIMIT_32,
    MANTISSA_LIMIT_32,
    MAX_SHIFT_32,
    STATE_LIMIT_32,
    WORD_BITS,
    FixedPidCoefficients,
    quantise_pid,
)

__all__ = ["WORD_BITS", "MANTISSA_LIMIT_32", "MAX_SHIFT_32", "STATE_LIMIT_32", "DEFAULT_INPUT_LIMIT_32",
           "FixedPidCoefficients", "quantise_pid", "FixedPidState", "FixedPid", "agreement_bound_count"]


# ---------------------------------------------------------------------------
# Fixed-point reference
# ---------------------------------------------------------------------------



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
    input_limit: int
    integrator_min_q: int
    integrator_max_q: int


def _fixed_constants(c: "FixedPidCoefficients") -> _FixedConstants:
    f = c.state_frac_bits
    i_min = INT32_MIN if c.word_bits == 64 else -c.integrator_limit_q
    return _FixedConstants(
        c.kpb_mant, c.kp_mant, c.p_shift, half(c.p_shift),
        c.ad_mant, c.ad_shift, half(c.ad_shift),
        c.bd_mant, c.bd_shift, half(c.bd_shift),
        c.ki_mant, c.ki_shift, half(c.ki_shift),
        c.track_mant, c.track_shift, half(c.track_shift),
        c.rate_step_q, c.anti_windup_code, f, half(f),
        c.out_min_count << f, c.out_max_count << f,
        c.input_limit_count, i_min, c.integrator_limit_q)


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

    Examples
    --------
    A PI with kp = 0.5 and ki = 0.05 /s at 10 Hz, held 100 counts below its
    setpoint: P is 0.5 x 100 = 50 counts; the integrator adds
    0.05 x 0.1 x 100 = 0.5 count per step from the second step on (its sum
    holds the errors up to the previous step), and the output is rounded half
    up to whole counts.

    >>> from compensator.firmware.pid import PidSettings
    >>> s = PidSettings(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0)
    >>> pid = FixedPid(quantise_pid(s, input_per_count=1.0, output_per_count=1.0))
    >>> [pid.step(1000, 900) for _ in range(5)]
    [50, 51, 51, 52, 52]
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
         rate, mode, f, fh, lo_q, hi_q, lim, i_lo, i_hi) = self._constants
        # The integrator saturates at [i_lo, i_hi]: the int32 range, or +-2^28 in the 32-bit variant.

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
            x = u_prev - p - d  # bumpless start from reset(output_count)
            i = i_lo if x < i_lo else i_hi if x > i_hi else x
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
            x = u - p - d  # tracking for a bumpless return to automatic
            i = i_lo if x < i_lo else i_hi if x > i_hi else x
        else:
            inc = (ki * (r - y) + kih) >> kis
            if mode == 0:  # back-calculation
                x = i + inc + ((tr * (u - v) + trh) >> trs)
                i = i_lo if x < i_lo else i_hi if x > i_hi else x
            elif mode == 1:  # clamping: hold while limited and the error drives further
                if not ((v > u and inc > 0) or (v < u and inc < 0)):
                    x = i + inc
                    i = i_lo if x < i_lo else i_hi if x > i_hi else x
            else:
                x = i + inc
                i = i_lo if x < i_lo else i_hi if x > i_hi else x
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
    x = float(min(max_input_count, c.input_limit_count))
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

"""The fixed-point PID: coefficients, quantisation, the bit-exact reference and its agreement bound.

The formats, the rounding and the saturation are described in
:mod:`compensator.firmware.pid`; the generated C
(:mod:`compensator.firmware.pid_c`) does exactly what :class:`FixedPid` does.
"""

from __future__ import annotations

import math
import operator
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.fixed_point import INT32_MAX, INT32_MIN, half, rshift_round
from compensator.firmware.pid import (
    ANTI_WINDUP_MODES,
    INPUT_LIMIT_COUNT,
    MANTISSA_LIMIT,
    MAX_SHIFT,
    MAX_STATE_FRAC_BITS,
    PidRun,
    PidSettings,
    _run_steps,
    _schedule,
    discretise_pid,
)

__all__ = ["WORD_BITS", "MANTISSA_LIMIT_32", "MAX_SHIFT_32", "STATE_LIMIT_32", "DEFAULT_INPUT_LIMIT_32",
           "FixedPidCoefficients", "quantise_pid", "FixedPidState", "FixedPid", "agreement_bound_count"]

#: Word widths of the generated arithmetic: 64-bit intermediates, or 32-bit operations only.
WORD_BITS = (64, 32)

#: 32-bit variant: largest mantissa magnitude (15 bits, so a mantissa times a 16-bit part fits 32 bits).
MANTISSA_LIMIT_32 = (1 << 15) - 1

#: 32-bit variant: largest product shift (the rounding term 2^(s-17) of the split product fits 32 bits).
MAX_SHIFT_32 = 46

#: 32-bit variant: P, D, the integrator increment and the integrator stay within +-2^28 (Q.F), so that
#: every sum of them fits 32 bits.
STATE_LIMIT_32 = 1 << 28

#: 32-bit variant: inputs are saturated to +-2^16 counts unless told otherwise (a 16-bit ADC).
DEFAULT_INPUT_LIMIT_32 = 1 << 16


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
    word_bits : {64, 32}
        64: products formed in 64 bits; 32: the 32-bit-only variant (15-bit
        mantissas, products split into 16-bit halves, no 64-bit operation).
    input_limit_count : int
        Inputs are saturated to ``+-input_limit_count`` counts.
    integrator_limit_q : int
        The integrator saturates at ``+-integrator_limit_q`` (Q.F): the int32
        range for 64 bits, :data:`STATE_LIMIT_32` for 32.
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
    word_bits: int = 64
    input_limit_count: int = INPUT_LIMIT_COUNT
    integrator_limit_q: int = INT32_MAX

    def __post_init__(self):
        # the invariants the overflow-free arithmetic relies on (the C code asserts them too)
        f = self.state_frac_bits
        if not 0 <= f <= MAX_STATE_FRAC_BITS:
            raise ModelError(f"state_frac_bits: {f} is outside 0..{MAX_STATE_FRAC_BITS}")
        if self.word_bits not in WORD_BITS:
            raise ModelError(f"word_bits: must be 64 or 32, got {self.word_bits!r}")
        mant_limit, shift_limit = (MANTISSA_LIMIT, MAX_SHIFT) if self.word_bits == 64 else (MANTISSA_LIMIT_32,
                                                                                              MAX_SHIFT_32)
        for key in ("kp", "kpb", "ki", "ad", "bd", "track"):
            mant = getattr(self, f"{key}_mant")
            if abs(mant) > mant_limit:
                raise ModelError(f"{key}_mant: {mant} exceeds {mant_limit} in magnitude")
        for key in ("p", "ki", "ad", "bd", "track"):
            shift = getattr(self, f"{key}_shift")
            if not 0 <= shift <= shift_limit:
                raise ModelError(f"{key}_shift: {shift} is outside 0..{shift_limit}")
        if not 1 <= self.input_limit_count <= INPUT_LIMIT_COUNT:
            raise ModelError(f"input_limit_count: {self.input_limit_count} is outside 1..2^24")
        if not 0 < self.integrator_limit_q <= INT32_MAX:
            raise ModelError(f"integrator_limit_q: {self.integrator_limit_q} is outside 1..2^31-1")
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


def _quantise(value: float, name: str, mant_limit: int = MANTISSA_LIMIT, max_shift: int = MAX_SHIFT
              ) -> tuple[int, int]:
    """Mantissa and right shift with ``mantissa 2^-shift ~= value`` and ``|mantissa| <= mant_limit``."""
    if value == 0:
        return 0, 0
    if abs(value) > mant_limit:
        raise ModelError(f"{name}: {value:.6g} is too large for the fixed-point format "
                         f"(more than {mant_limit} state units); scale the inputs or outputs differently")
    shift = max(0, min(max_shift, mant_limit.bit_length() - math.frexp(abs(value))[1]))
    while shift < max_shift and abs(math.floor(abs(value) * 2.0 ** (shift + 1) + 0.5)) <= mant_limit:
        shift += 1
    while shift > 0 and math.floor(abs(value) * 2.0 ** shift + 0.5) > mant_limit:
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


def quantise_pid(settings: PidSettings, *, input_per_count: float, output_per_count: float, word_bits: int = 64,
                 input_limit_count: int | None = None) -> FixedPidCoefficients:
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
    word_bits : {64, 32}
        64 (default): products formed in 64 bits (library calls on cores
        without a 64-bit multiply). 32: the variant with 32-bit operations only
        (15-bit mantissas, products split into 16-bit halves), offered when the
        Q formats allow it: P, D and the integrator increment must stay within
        +-2^28 for every input within ``input_limit_count``.
    input_limit_count : int, optional
        Inputs are saturated to this many counts; default 2^24 (64 bits) or
        2^16 (32 bits).

    Returns
    -------
    FixedPidCoefficients

    Raises
    ------
    ModelError
        A scale is zero or not finite, the integer limits are empty or too
        large, a coefficient does not fit the format, the rate limit is
        below one state LSB per step, or (32 bits) the Q formats do not allow
        the 32-bit variant (the message gives the figure that does not fit).

    Examples
    --------
    >>> s = PidSettings(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0)
    >>> c = quantise_pid(s, input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=4096)
    >>> c.word_bits, c.state_frac_bits, c.kp_mant, c.p_shift
    (32, 15, 16384, 0)
    """
    if word_bits not in WORD_BITS:
        raise ModelError(f"word_bits: must be 64 or 32, got {word_bits!r}", key="word_bits")
    narrow = word_bits == 32
    limit_in = (DEFAULT_INPUT_LIMIT_32 if narrow else INPUT_LIMIT_COUNT) if input_limit_count is None \
        else int(input_limit_count)
    if not 1 <= limit_in <= INPUT_LIMIT_COUNT:
        raise ModelError(f"input_limit_count: must be within 1..2^24, got {input_limit_count!r}",
                         key="input_limit_count")
    mant_limit, max_shift = (MANTISSA_LIMIT_32, MAX_SHIFT_32) if narrow else (MANTISSA_LIMIT, MAX_SHIFT)

    def quant(value, name):
        return _quantise(value, name, mant_limit, max_shift)

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
    if narrow:  # 15-bit mantissas: fewer state fraction bits where a count gain would not fit otherwise
        biggest = max(abs(kp_c), abs(kpb_c), abs(ki_c), abs(bd_c))
        while frac > 0 and biggest * 2.0 ** frac > mant_limit:
            frac -= 1
        if biggest * 2.0 ** frac > mant_limit:
            raise ModelError(f"the 32-bit variant: a gain of {biggest:.6g} output counts per input count does not "
                             f"fit a 15-bit mantissa even without state fraction bits; use the 64-bit code",
                             key="word_bits")
    def build(frac: int) -> FixedPidCoefficients:
        two_f = 2.0 ** frac
        # kp and kp b share one shift so that P = kp (b r - y) is formed with one rounding
        big = max(abs(kp_c), abs(kpb_c))
        if big == 0:
            kp_m = kpb_m = p_s = 0
        else:
            _, p_s = quant(big * two_f, "kp")
            kp_m = int(math.copysign(math.floor(abs(kp_c) * two_f * 2.0 ** p_s + 0.5), kp_c))
            kpb_m = int(math.copysign(math.floor(abs(kpb_c) * two_f * 2.0 ** p_s + 0.5), kpb_c))
        ki_m, ki_s = quant(ki_c * two_f, "ki_per_s")
        bd_m, bd_s = quant(bd_c * two_f, "kd_s")
        ad_m, ad_s = quant(disc.ad, "derivative filter") if disc.ad else (0, 0)
        tr_m, tr_s = quant(disc.track, "tracking_time_s") if disc.track else (0, 0)
        if disc.rate_step is None:
            rate_q, rate_c = 0, 0.0
        else:
            rate_c = disc.rate_step / abs(opc)
            rate_q = min(STATE_LIMIT_32 if narrow else INT32_MAX, math.floor(rate_c * two_f + 0.5))
            if rate_q < 1:
                raise ModelError(f"rate_limit_per_s: {settings.rate_limit_per_s!r} per second is below the "
                                 f"fixed-point resolution (2^-{frac} count per step)")
        coeffs = FixedPidCoefficients(
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
            word_bits=word_bits, input_limit_count=limit_in,
            integrator_limit_q=STATE_LIMIT_32 if narrow else INT32_MAX,
        )
        return coeffs

    if not narrow:
        return build(frac)
    # 32 bits: P, D and the integrator increment must stay within 2^28 (Q.F); give up state fraction bits
    # (resolution) for range where needed, and say what does not fit when even F = 0 is not enough.
    first_error = None
    for f in range(frac, -1, -1):
        coeffs = build(f)
        try:
            _check_32_bit_ranges(coeffs)
            return coeffs
        except ModelError as exc:
            first_error = first_error or exc
    raise first_error


def _check_32_bit_ranges(c: FixedPidCoefficients) -> None:
    """Refuse the 32-bit variant when P, D or the integrator increment could leave +-2^28 (Q.F)."""
    if c.kp_mant * c.kpb_mant < 0:
        raise ModelError("the 32-bit variant: the setpoint weight must not be negative (kp and kp b of one sign)",
                         key="word_bits")
    x = c.input_limit_count
    p_max = ((abs(c.kp_mant) + abs(c.kpb_mant)) * x >> c.p_shift) + 1
    inc_max = (abs(c.ki_mant) * 2 * x >> c.ki_shift) + 1
    ad = c.ad_mant * 2.0 ** -c.ad_shift
    d_max = (((abs(c.bd_mant) * 2 * x) >> c.bd_shift) + 2) / (1.0 - ad) if c.bd_mant else 0.0
    for what, value in (("P (kp times the input range)", p_max), ("the integrator increment", inc_max),
                        ("D (the derivative term)", d_max)):
        if value >= STATE_LIMIT_32:
            raise ModelError(
                f"the 32-bit variant: {what} can reach {value:.4g} state units (Q{31 - c.state_frac_bits}."
                f"{c.state_frac_bits}) for inputs within +-{x} counts, beyond 2^28; the 32-bit variant needs "
                f"a smaller input range (input_limit_count) or gain, otherwise use the 64-bit code",
                key="word_bits")


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

"""The fixed-point PID's coefficients: Q formats, word widths and the quantisation of a discretised PID.

The formats, the rounding and the saturation are described in
:mod:`compensator.firmware.pid`; the bit-exact reference that runs these
coefficients is :class:`compensator.firmware.pid_fixed.FixedPid`, and the
generated C (:mod:`compensator.firmware.pid_c`) does exactly what it does.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.fixed_point import INT32_MAX, rshift_round
from compensator.firmware.pid import (
    ANTI_WINDUP_MODES,
    INPUT_LIMIT_COUNT,
    MANTISSA_LIMIT,
    MAX_SHIFT,
    MAX_STATE_FRAC_BITS,
    PidSettings,
    discretise_pid,
)

__all__ = ["WORD_BITS", "MANTISSA_LIMIT_32", "MAX_SHIFT_32", "STATE_LIMIT_32", "DEFAULT_INPUT_LIMIT_32",
           "FixedPidCoefficients", "quantise_pid"]

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
    kp = 0.5 output count per input count is 0.5 x 2^15 = 16384 in the Q.15
    state, with no shift; ki T = 0.05 /s x 0.1 s = 0.005 per step is
    0.005 x 2^(7 + 15) = 20971.52, rounded to the mantissa 20972 with a shift
    of 7 (0.0023 % high).

    >>> s = PidSettings(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0)
    >>> c = quantise_pid(s, input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=4096)
    >>> c.word_bits, c.state_frac_bits, c.kp_mant, c.p_shift
    (32, 15, 16384, 0)
    >>> c.ki_mant, c.ki_shift
    (20972, 7)
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

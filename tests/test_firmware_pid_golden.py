"""The generated PID C for fixed inputs, compared with reviewed golden files (a regression net for the emitter's text).

The behavioural check of the emitter is the compiled C compared bit for bit with the Python reference
(``tests/test_firmware_pid_c.py``, ``tests/test_firmware_pid_c32.py``); these files only pin the text, in
milliseconds. They are never rewritten by a test: after an intended change regenerate them with
``python tests/golden/update.py`` and review the diff.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from compensator.firmware.pid import PidSettings, quantise_pid
from compensator.firmware.pid_c import render_pid_c
from golden_check import assert_golden

GOLDEN = Path(__file__).parent / "golden" / "pid"

# Each case reaches other branches of the emitter: both word widths, the three anti-windup modes, with and without
# a rate limit, with and without integral action, a sample period that is and one that is not a whole number of
# microseconds, a reversing DAC (negative volt per code).
GOLDEN_PID = {
    # a bipolar cooler current loop: PID, setpoint weight, rate limit, back-calculation (64 bits)
    "cooler_pid": (dict(kp=0.8, ki_per_s=0.05, kd_s=2.0, sample_time_s=0.1, out_min=-2.0, out_max=2.0,
                        setpoint_weight=0.6, rate_limit_per_s=5.0), 0.001, 0.001, 64, None),
    # a bias trim loop through a reversing DAC network: PI with clamping, no rate limit (64 bits)
    "bias_pi": (dict(kp=0.02, ki_per_s=5.0, kd_s=0.0, sample_time_s=0.001, out_min=25.0, out_max=35.0,
                     anti_windup="clamping"), 1e-3, -2.5e-4, 64, None),
    # reverse-acting PD with a small integral, unfiltered derivative, no anti-windup, rate limit, a period of 1/30 s
    "reverse_pd": (dict(kp=-0.15, ki_per_s=-0.002, kd_s=-0.02, sample_time_s=1.0 / 30.0, out_min=-1.5, out_max=1.5,
                        derivative_filter_n=math.inf, anti_windup="none", rate_limit_per_s=2.0), 0.01, 3.0 / 4095,
                   64, None),
    # proportional only (no integral action)
    "tiny_p": (dict(kp=1e-6, ki_per_s=0.0, kd_s=0.0, sample_time_s=1.0, out_min=-1.0, out_max=1.0), 1.0, 1e-3,
               64, None),
    # a slow PI whose integral gain per step prints with an exponent (5e-05) in the header's comments
    "slow_pi": (dict(kp=0.02, ki_per_s=1e-4, kd_s=0.0, sample_time_s=0.5, out_min=0.0, out_max=4095.0), 1.0, 1.0,
                64, None),
    # the 32-bit variant: a bias loop into a 12-bit DAC, back-calculation and rate limit
    "bias_pid32": (dict(kp=0.8, ki_per_s=4.0, kd_s=0.002, sample_time_s=0.01, out_min=0.0, out_max=4095.0,
                        setpoint_weight=0.7, rate_limit_per_s=2e4), 1.0, 1.0, 32, 4096),
    # the 32-bit variant with clamping, no rate limit, a period of 1/3 s
    "clamp_pi32": (dict(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=1.0 / 3.0, out_min=0.0, out_max=4095.0,
                        anti_windup="clamping"), 1.0, 1.0, 32, 4096),
    # the 32-bit variant, integral only without anti-windup
    "plain_i32": (dict(kp=0.0, ki_per_s=3.0, kd_s=0.0, sample_time_s=0.01, out_min=0.0, out_max=4095.0,
                       anti_windup="none"), 1.0, 1.0, 32, 4096),
}


def golden_pid_files(case: str) -> dict:
    """The files the golden test compares (also what ``tests/golden/update.py`` writes)."""
    settings, ipc, opc, word_bits, input_limit = GOLDEN_PID[case]
    coeffs = quantise_pid(PidSettings(**settings), input_per_count=ipc, output_per_count=opc, word_bits=word_bits,
                          input_limit_count=input_limit)
    return render_pid_c(coeffs, name=case, settings={"case": case, "word_bits": str(word_bits)})


@pytest.mark.parametrize("case", list(GOLDEN_PID))
def test_pid_golden_files(case):
    files = golden_pid_files(case)
    assert sorted(files) == [f"{case}.c", f"{case}.h"]
    assert_golden(files, GOLDEN / case)

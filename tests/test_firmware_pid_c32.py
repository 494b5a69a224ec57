"""The 32-bit-only fixed-point PID: quantised within its Q formats, bit-exact C with no 64-bit operation."""

import re
from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware.fixed_point import INT32_MAX
from compensator.firmware.pid import FixedPid, PidSettings, quantise_pid
from compensator.firmware.pid_c import render_pid_c

from cbuild import needs_cc
from test_firmware_pid_c import check_multi_bit_exact, random_settings


def bias_loop(**kw):
    base = dict(kp=0.8, ki_per_s=4.0, kd_s=0.002, sample_time_s=0.01, out_min=0.0, out_max=4095.0,
                setpoint_weight=0.7, rate_limit_per_s=2e4)
    base.update(kw)
    return PidSettings(**base)


def test_quantised_for_32_bits():
    c = quantise_pid(bias_loop(), input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=4096)
    assert c.word_bits == 32 and c.input_limit_count == 4096 and c.integrator_limit_q == 1 << 28
    mants = [c.kp_mant, c.kpb_mant, c.ki_mant, c.ad_mant, c.bd_mant, c.track_mant]
    assert max(abs(m) for m in mants) <= 32767 and max(c.p_shift, c.ki_shift, c.ad_shift, c.bd_shift) <= 46
    # 4095 counts need 12 bits: F = 27 - 12 = 15; kp = 0.8 output count per input count: 0.8 2^15 = 26214.4
    assert c.state_frac_bits == 15
    assert c.kp_mant * 2.0 ** -(c.p_shift + 15) == pytest.approx(0.8, rel=2 ** -14)
    rep = c.represented()
    assert rep["kpb_count"] == pytest.approx(0.56, rel=2 ** -13)


def test_fewer_fraction_bits_for_range_then_refused():
    # kp = 0.8 and kp b = 0.56 over +-2^16 input counts: P reaches 1.36 2^16 2^F state units, within 2^28 only
    # for F <= 11 (1.36 2^27 = 1.8e8); the limits alone would allow F = 15.
    c = quantise_pid(bias_loop(), input_per_count=1.0, output_per_count=1.0, word_bits=32)
    assert c.state_frac_bits == 11 and c.input_limit_count == 1 << 16
    # kp = 5000 counts per count: (5000 + 3500) 2^16 = 5.6e8 > 2^28 even at F = 0: refused, naming P
    with pytest.raises(ModelError, match=r"32-bit variant: P .* beyond 2\^28"):
        quantise_pid(bias_loop(kp=5000.0, ki_per_s=0.0, kd_s=0.0), input_per_count=1.0, output_per_count=1.0,
                     word_bits=32)
    with pytest.raises(ModelError, match="setpoint weight"):
        quantise_pid(bias_loop(setpoint_weight=-0.5), input_per_count=1.0, output_per_count=1.0, word_bits=32,
                     input_limit_count=4096)
    with pytest.raises(ModelError, match="word_bits"):
        quantise_pid(bias_loop(), input_per_count=1.0, output_per_count=1.0, word_bits=16)


def test_same_algorithm_as_the_64_bit_reference_inside_the_ranges():
    # With the same (15-bit) coefficients and inputs within the limit, no saturation happens, and the 32-bit
    # reference gives what the 64-bit one gives step for step.
    c32 = quantise_pid(bias_loop(), input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=4096)
    c64 = replace(c32, word_bits=64, integrator_limit_q=INT32_MAX)
    rng = np.random.default_rng(3)
    setpoint = np.repeat(rng.integers(500, 3500, 20), 100)
    measurement = np.clip(np.cumsum(rng.integers(-30, 31, 2000)) + 2000, 0, 4095)
    a, b = FixedPid(c32).run(setpoint, measurement), FixedPid(c64).run(setpoint, measurement)
    assert np.array_equal(a.output, b.output) and np.array_equal(a.integrator, b.integrator)
    assert len(set(a.output.tolist())) > 100


def test_integrator_saturates_at_2_to_28():
    c = quantise_pid(bias_loop(kp=0.0, kd_s=0.0, anti_windup="none", rate_limit_per_s=None), input_per_count=1.0,
                     output_per_count=1.0, word_bits=32, input_limit_count=4096)
    run = FixedPid(c).run(np.full(5000, 4096), np.zeros(5000, dtype=np.int64))
    assert run.integrator.max() == 1 << 28
    assert run.output[-1] == 4095


@needs_cc
def test_random_configurations_are_bit_exact_with_32_bit_operations_only(tmp_path):
    rng = np.random.default_rng(3232)
    configs, refused = {}, 0
    # tiny count-domain gains: every product shift above 16 (the second branch of the split product)
    configs["p32_tiny"] = quantise_pid(
        PidSettings(kp=2e-4, ki_per_s=1e-3, kd_s=1e-4, sample_time_s=0.1, out_min=-1.0, out_max=1.0),
        input_per_count=1e-6, output_per_count=1 / 32767, word_bits=32, input_limit_count=65536)
    configs["p32_bias"] = quantise_pid(bias_loop(), input_per_count=1.0, output_per_count=1.0, word_bits=32,
                                       input_limit_count=4096)
    while len(configs) < 18:
        s, ipc, opc = random_settings(rng)
        limit = int(rng.choice([256, 4096, 65536]))
        try:
            configs[f"p32_{len(configs):02d}"] = quantise_pid(s, input_per_count=ipc, output_per_count=opc,
                                                               word_bits=32, input_limit_count=limit)
        except ModelError as exc:
            assert "32-bit variant" in str(exc) or "fixed-point" in str(exc) or "rate_limit" in str(exc) \
                or "out_min" in str(exc), str(exc)
            refused += 1
    assert refused < 200
    files = {}
    for name, coeffs in configs.items():
        files.update(render_pid_c(coeffs, name=name))
    for name in configs:
        source = files[f"{name}.c"]
        assert "int64" not in source and "long" not in re.sub(r"/\*.*?\*/", "", source, flags=re.S)
        assert f"{name.upper()}_WORD_BITS 32u" in files[f"{name}.h"]
    shifts = check_multi_bit_exact(tmp_path, configs, files, seed=100)
    assert any(s > 16 for s in shifts) and any(0 < s <= 16 for s in shifts), sorted(shifts)  # both branches


def test_tune_emits_the_32_bit_variant_or_says_why_not(cli, tmp_path):
    base = ("tune", "--fopdt", "2", "30", "5", "--method", "simc", "--rate-hz", "10", "--input-per-count", "0.01",
            "--output-per-count", "0.001", "--out-min", "0", "--out-max", "4.095", "--c-word-bits", "32")
    ok = cli(*base, "--emit-c", tmp_path / "a", "--c-input-limit-count", "4096")
    assert ok.status == 0, ok.stderr
    header, source = (tmp_path / "a" / "loop_pid.h").read_text(), (tmp_path / "a" / "loop_pid.c").read_text()
    assert "LOOP_PID_WORD_BITS 32u" in header and "LOOP_PID_INPUT_LIMIT_COUNT INT32_C(4096)" in header
    assert "int64" not in source
    assert "LOOP_PID_STATE_FRAC_BITS 11u" in header
    # over the default +-2^16 input counts kp = 14.56 needs 4 fewer fraction bits for P to stay within 2^28
    wide = cli(*base, "--emit-c", tmp_path / "b")
    assert wide.status == 0, wide.stderr
    assert "LOOP_PID_STATE_FRAC_BITS 7u" in (tmp_path / "b" / "loop_pid.h").read_text()

"""Generated C99 PID: compiles warning-free and matches the Python fixed-point reference bit for bit."""

from __future__ import annotations

import math
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from compensator.errors import InputError, ModelError
from compensator.firmware.pid import (
    INPUT_LIMIT_COUNT,
    INT32_MAX,
    INT32_MIN,
    FixedPid,
    PidSettings,
    quantise_pid,
)
from compensator.fileio import write_files_atomic
from compensator.firmware.pid_c import render_pid_c
from cbuild import CC, build, needs_cc

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion", "-Wsign-conversion",
          "-Wshadow", "-Wstrict-prototypes", "-Wmissing-prototypes"]

CONFIGS = {
    # a bipolar cooler current loop: PID, setpoint weight, rate limit, back-calculation
    "cooler_pid": (dict(kp=0.8, ki_per_s=0.05, kd_s=2.0, sample_time_s=0.1, out_min=-2.0, out_max=2.0,
                        setpoint_weight=0.6, rate_limit_per_s=5.0), 0.001, 0.001),
    # a bias trim loop through a reversing DAC network: PI with clamping, negative volt per code
    "bias_pi": (dict(kp=0.02, ki_per_s=5.0, kd_s=0.0, sample_time_s=0.001, out_min=25.0, out_max=35.0,
                     anti_windup="clamping"), 1e-3, -2.5e-4),
    # reverse-acting, unfiltered derivative, no anti-windup, slow rate limit
    "reverse_pd": (dict(kp=-0.15, ki_per_s=-0.002, kd_s=-0.02, sample_time_s=0.05, out_min=-1.5, out_max=1.5,
                        derivative_filter_n=math.inf, anti_windup="none", rate_limit_per_s=2.0), 0.01, 3.0 / 4095),
    # integral-only with a derivative (Tf = h, Tt = h) into a 16-bit unipolar DAC
    "integral_only": (dict(kp=0.0, ki_per_s=3.0, kd_s=0.01, sample_time_s=0.01, out_min=0.0, out_max=5.0),
                      0.0005, 5.0 / 65535),
    # proportional-only with a tiny gain: shifts near the top of the range
    "tiny_p": (dict(kp=1e-6, ki_per_s=0.0, kd_s=0.0, sample_time_s=1.0, out_min=-1.0, out_max=1.0), 1.0, 1e-3),
}


def coefficients(name):
    settings, ipc, opc = CONFIGS[name]
    return quantise_pid(PidSettings(**settings), input_per_count=ipc, output_per_count=opc)


def compile_c(tmp_path: Path, files: dict, extra_sources: dict, flags, output="harness") -> Path:
    return build(tmp_path, {**files, **extra_sources}, flags, output)


def harness_source(name: str) -> str:
    """Commands on stdin, one per line: s R Y (step), m OUT (manual), a (auto), i (init), j OUT (init at)."""
    return f"""#include <stdio.h>
#include <stdint.h>
#include "{name}.h"

int main(void)
{{
    {name}_state_t state;
    char line[128];
    long long a = 0;
    long long b = 0;
    {name}_init(&state);
    while (fgets(line, (int)sizeof line, stdin) != NULL) {{
        switch (line[0]) {{
        case 's':
            if (sscanf(line + 1, "%lld %lld", &a, &b) != 2) {{ return 3; }}
            a = (long long){name}_step(&state, (int32_t)a, (int32_t)b);
            printf("%lld %ld %ld %ld\\n", a, (long)state.integrator_q, (long)state.derivative_q,
                   (long){name}_output_count(&state));
            break;
        case 'm':
            if (sscanf(line + 1, "%lld", &a) != 1) {{ return 3; }}
            {name}_set_manual(&state, (int32_t)a);
            break;
        case 'a':
            {name}_set_auto(&state);
            break;
        case 'i':
            {name}_init(&state);
            break;
        case 'j':
            if (sscanf(line + 1, "%lld", &a) != 1) {{ return 3; }}
            {name}_init_at(&state, (int32_t)a);
            break;
        default:
            return 4;
        }}
    }}
    return 0;
}}
"""


@dataclass
class Schedule:
    """Seeded inputs per step, manual spells and resets (reset[k]: None, or "i", or an output count)."""

    setpoint: np.ndarray
    measurement: np.ndarray
    manual: np.ndarray
    target: np.ndarray
    reset: list


def random_schedule(rng: np.random.Generator, n_steps: int, coeffs) -> Schedule:
    """Random walks with jumps, int32 extremes, far-off values, manual spells, resets."""
    span = 3000
    lo, hi = coeffs.out_min_count, coeffs.out_max_count
    width = hi - lo
    setpoint = np.repeat(rng.integers(-span, span + 1, n_steps // 300 + 1), 300)[:n_steps]
    setpoint = np.where(rng.random(n_steps) < 0.001, rng.choice([INT32_MIN, INT32_MAX], n_steps), setpoint)
    measurement = np.clip(np.cumsum(rng.integers(-25, 26, n_steps)), -span, span)
    pick = rng.random(n_steps)
    extremes = rng.choice([INT32_MIN, INT32_MAX, -INPUT_LIMIT_COUNT - 1, INPUT_LIMIT_COUNT + 7], n_steps)
    far = rng.integers(-40 * span, 40 * span, n_steps)  # far outside: saturates P, D and the state
    measurement = np.where(pick < 0.002, extremes, np.where(pick < 0.01, far, measurement))
    event = rng.random(n_steps)
    targets = rng.integers(lo - width // 2, hi + width // 2 + 1, n_steps)  # beyond the limits too
    starts = rng.integers(lo - width // 4, hi + width // 4 + 1, n_steps)
    manual = np.zeros(n_steps, dtype=bool)
    target = np.zeros(n_steps, dtype=np.int64)
    reset = [None] * n_steps
    is_manual, held = False, 0
    for k in range(n_steps):
        e = event[k]
        if e < 0.004:
            is_manual, held = True, int(targets[k])
        elif e < 0.007:
            is_manual = False
        elif e < 0.0075:
            reset[k], is_manual = "i", False
        elif e < 0.008:
            reset[k], is_manual = int(starts[k]), False
        manual[k], target[k] = is_manual, held
    return Schedule(setpoint.astype(np.int64), measurement.astype(np.int64), manual, target, reset)


def run_python(coeffs, sched: Schedule) -> list:
    """The Python reference over the schedule, segment by segment between resets, through FixedPid.run."""
    pid = FixedPid(coeffs)
    cuts = [k for k, r in enumerate(sched.reset) if r is not None] + [len(sched.reset)]
    rows = []
    begin = 0
    for end in cuts:
        if begin < end:
            run = pid.run(sched.setpoint[begin:end], sched.measurement[begin:end],
                          manual=sched.manual[begin:end], manual_output_count=sched.target[begin:end])
            rows += list(zip(run.output.tolist(), run.integrator.tolist(), run.derivative.tolist(),
                             run.output.tolist()))
        if end < len(sched.reset):
            mark = sched.reset[end]
            pid.reset() if mark == "i" else pid.reset(output_count=mark)
        begin = end
    return rows


def c_commands(sched: Schedule) -> str:
    """The same schedule as harness commands (mode switches exactly where FixedPid.run makes them)."""
    lines = []
    in_manual, held = False, None
    for k in range(len(sched.reset)):
        mark = sched.reset[k]
        if mark is not None:
            lines.append("i" if mark == "i" else f"j {mark}")
            in_manual = False
        if sched.manual[k]:
            if not in_manual or held != int(sched.target[k]):
                lines.append(f"m {int(sched.target[k])}")
                in_manual, held = True, int(sched.target[k])
        elif in_manual:
            lines.append("a")
            in_manual = False
        lines.append(f"s {int(sched.setpoint[k])} {int(sched.measurement[k])}")
    return "\n".join(lines) + "\n"


def run_c(exe: Path, commands: str) -> list:
    result = subprocess.run([str(exe)], input=commands, capture_output=True, text=True, check=False)
    assert result.returncode == 0, result.stderr
    assert result.stderr == "", result.stderr  # e.g. an undefined-behaviour sanitizer report
    return [tuple(int(v) for v in line.split()) for line in result.stdout.splitlines()]


def sanitizer_flags(tmp_path: Path) -> list:
    """Undefined-behaviour sanitizer flags when this compiler can link them, else []."""
    probe = tmp_path / "probe.c"
    probe.write_text("int main(void) { return 0; }\n")
    flags = ["-fsanitize=undefined", "-fno-sanitize-recover=all"]
    result = subprocess.run([CC, *flags, "-o", str(tmp_path / "probe"), str(probe)], capture_output=True)
    return flags if result.returncode == 0 else []


@needs_cc
@pytest.mark.parametrize("name, n_steps", [
    ("cooler_pid", 100_000),
    ("bias_pi", 20_000),
    ("reverse_pd", 20_000),
    ("integral_only", 20_000),
    ("tiny_p", 5_000),
])
def test_generated_c_is_bit_exact_with_the_python_reference(tmp_path, name, n_steps):
    coeffs = coefficients(name)
    files = render_pid_c(coeffs, name=name)
    flags = STRICT + ["-O2"] + sanitizer_flags(tmp_path)
    exe = compile_c(tmp_path, files, {"harness.c": harness_source(name)}, flags)
    sched = random_schedule(np.random.default_rng(2026), n_steps, coeffs)
    expected = run_python(coeffs, sched)
    got = run_c(exe, c_commands(sched))
    assert len(got) == len(expected) == n_steps
    first_bad = next((k for k, (a, b) in enumerate(zip(got, expected)) if a != b), None)
    assert first_bad is None, f"step {first_bad}: C {got[first_bad]} != Python {expected[first_bad]}"
    outputs = np.array([row[0] for row in expected])
    integrators = np.array([row[1] for row in expected])
    # the sequence exercised both output limits and the integrator's int32 saturation or tracking
    assert np.any(outputs == coeffs.out_min_count) and np.any(outputs == coeffs.out_max_count)
    assert np.all((outputs >= coeffs.out_min_count) & (outputs <= coeffs.out_max_count))
    assert len(np.unique(integrators)) > 100


@needs_cc
@pytest.mark.parametrize("std", ["c99", "c11"])
def test_generated_c_compiles_warning_free(tmp_path, std):
    for name in CONFIGS:
        files = render_pid_c(coefficients(name), name=name)
        for file_name, text in files.items():
            (tmp_path / file_name).write_text(text)
        flags = [f if f != "-std=c99" else f"-std={std}" for f in STRICT]
        result = subprocess.run([CC, *flags, "-c", "-o", str(tmp_path / f"{name}.o"), str(tmp_path / f"{name}.c")],
                                capture_output=True, text=True)
        assert result.returncode == 0 and result.stderr == "", (name, result.stderr)


@needs_cc
@pytest.mark.parametrize("std", ["c99", "c11"])
def test_static_asserts_reject_inconsistent_constants(tmp_path, std):
    coeffs = coefficients("cooler_pid")
    files = render_pid_c(coeffs, name="cooler_pid")
    header = files["cooler_pid.h"]
    broken = header.replace("#define COOLER_PID_OUT_MIN_COUNT INT32_C(-2000)",
                            "#define COOLER_PID_OUT_MIN_COUNT INT32_C(3000)")
    assert broken != header
    (tmp_path / "cooler_pid.h").write_text(broken)
    (tmp_path / "cooler_pid.c").write_text(files["cooler_pid.c"])
    result = subprocess.run([CC, f"-std={std}", "-c", "-o", str(tmp_path / "x.o"), str(tmp_path / "cooler_pid.c")],
                            capture_output=True, text=True)
    assert result.returncode != 0


def test_rendering_is_deterministic_and_carries_the_banner(sipm_a, board_ntc):
    coeffs = coefficients("cooler_pid")
    settings = {"method": "simc", "rate_hz": 10}
    one = render_pid_c(coeffs, name="cooler_pid", profiles=(sipm_a, board_ntc), settings=settings)
    two = render_pid_c(coeffs, name="cooler_pid", profiles=(sipm_a, board_ntc), settings=settings)
    assert one == two
    assert set(one) == {"cooler_pid.h", "cooler_pid.c"}
    for text in one.values():
        assert f"sha256 {sipm_a.sha256[:16]}" in text and "method = simc" in text
        assert "generated by compensator" in text
    header = one["cooler_pid.h"]
    assert f"#define COOLER_PID_KP_MANT INT32_C({coeffs.kp_mant})" in header
    assert f"#define COOLER_PID_STATE_FRAC_BITS {coeffs.state_frac_bits}u" in header
    assert "Caution" in header
    # only the selected anti-windup branch is emitted
    assert "TRACK_MANT * (u - v)" in one["cooler_pid.c"]
    assert "conditional integration" not in one["cooler_pid.c"]
    clamped = render_pid_c(coefficients("bias_pi"), name="bias_pi")["bias_pi.c"]
    assert "conditional integration" in clamped and "TRACK_MANT * (u - v)" not in clamped


@pytest.mark.parametrize("name", ["", "1pid", "Cooler", "cooler-pid", "a" * 32, "x y", "abs", "exit", "int"])
def test_bad_names_are_refused(name):
    with pytest.raises(ModelError, match="name"):
        render_pid_c(coefficients("cooler_pid"), name=name)


def write_pid_c(coeffs, directory, *, name, overwrite=False):
    """The PID renderer's text through the one file-set writer (the command line's edge does this)."""
    return write_files_atomic(directory, render_pid_c(coeffs, name=name), overwrite=overwrite, what="C output")


def test_written_pid_c_refuses_to_overwrite_and_writes_nothing(tmp_path):
    coeffs = coefficients("cooler_pid")
    (tmp_path / "cooler_pid.c").write_text("keep me")
    with pytest.raises(InputError, match="cooler_pid.c: already exists"):
        write_pid_c(coeffs, tmp_path, name="cooler_pid")
    assert not (tmp_path / "cooler_pid.h").exists()
    assert (tmp_path / "cooler_pid.c").read_text() == "keep me"
    written = write_pid_c(coeffs, tmp_path, name="cooler_pid", overwrite=True)
    assert [p.name for p in written] == ["cooler_pid.h", "cooler_pid.c"]
    assert (tmp_path / "cooler_pid.c").read_text() == render_pid_c(coeffs, name="cooler_pid")["cooler_pid.c"]
    # A missing folder is made; a file in its place is refused with nothing written.
    assert [p.name for p in write_pid_c(coeffs, tmp_path / "new" / "fw", name="cooler_pid")] == \
        ["cooler_pid.h", "cooler_pid.c"]
    (tmp_path / "taken").write_text("")
    with pytest.raises(InputError, match="not a directory"):
        write_pid_c(coeffs, tmp_path / "taken", name="cooler_pid")


def random_settings(rng: np.random.Generator):
    """Seeded PID settings and scales spread over many decades, signs and options."""
    sign = -1.0 if rng.random() < 0.3 else 1.0
    kind = rng.choice(["p", "pi", "pid", "i", "id", "pd"])
    h = float(10 ** rng.uniform(-4, 0))
    kp = 0.0 if "p" not in kind else float(10 ** rng.uniform(-3, 1))
    ki = 0.0 if "i" not in kind else float(10 ** rng.uniform(-3, 1)) / max(h, 1e-2) * 0.01
    kd = 0.0 if "d" not in kind else float(10 ** rng.uniform(-3, 0))
    out_max = float(10 ** rng.uniform(-1, 1.5))
    out_min = -out_max if rng.random() < 0.5 else float(rng.uniform(0, 0.5)) * out_max
    settings = PidSettings(
        kp=sign * kp, ki_per_s=sign * ki, kd_s=sign * kd, sample_time_s=h, out_min=out_min, out_max=out_max,
        derivative_filter_n=float(rng.choice([3.0, 10.0, 20.0, math.inf])),
        setpoint_weight=float(rng.choice([0.0, 0.5, 1.0, 1.2])),
        rate_limit_per_s=None if rng.random() < 0.4 else out_max / h / float(10 ** rng.uniform(0.5, 2.5)),
        anti_windup=str(rng.choice(["back_calculation", "clamping", "none"])),
        tracking_time_s=None if rng.random() < 0.7 else float(10 ** rng.uniform(-3, 1)),
    )
    input_per_count = float(10 ** rng.uniform(-4, -1)) * (-1.0 if rng.random() < 0.15 else 1.0)
    output_per_count = out_max / float(rng.choice([2047, 4095, 32767, 65535])) * (-1 if rng.random() < 0.2 else 1)
    return settings, input_per_count, output_per_count


def multi_harness(names) -> str:
    """One program holding several controllers; argv[1] picks one; commands as in harness_source."""
    parts = ["#include <stdio.h>", "#include <stdint.h>", "#include <stdlib.h>"]
    parts += [f'#include "{n}.h"' for n in names]
    parts.append("typedef struct { int32_t (*step)(int32_t, int32_t, int32_t *, int32_t *); "
                 "void (*manual)(int32_t); void (*automatic)(void); void (*init)(void); "
                 "void (*init_at)(int32_t); } ops_t;")
    for n in names:
        parts.append(f"""static {n}_state_t st_{n};
static int32_t step_{n}(int32_t r, int32_t y, int32_t *i, int32_t *d)
{{ int32_t o = {n}_step(&st_{n}, r, y); *i = st_{n}.integrator_q; *d = st_{n}.derivative_q; return o; }}
static void manual_{n}(int32_t o) {{ {n}_set_manual(&st_{n}, o); }}
static void automatic_{n}(void) {{ {n}_set_auto(&st_{n}); }}
static void init_{n}(void) {{ {n}_init(&st_{n}); }}
static void init_at_{n}(int32_t o) {{ {n}_init_at(&st_{n}, o); }}""")
    table = ", ".join(f"{{step_{n}, manual_{n}, automatic_{n}, init_{n}, init_at_{n}}}" for n in names)
    parts.append(f"static const ops_t table[] = {{{table}}};")
    parts.append("""int main(int argc, char **argv)
{
    char line[128];
    long long a = 0, b = 0;
    int32_t i = 0, d = 0, o = 0;
    const ops_t *ops;
    if (argc < 2) { return 2; }
    ops = &table[atoi(argv[1])];
    ops->init();
    while (fgets(line, (int)sizeof line, stdin) != NULL) {
        switch (line[0]) {
        case 's':
            if (sscanf(line + 1, "%lld %lld", &a, &b) != 2) { return 3; }
            o = ops->step((int32_t)a, (int32_t)b, &i, &d);
            printf("%ld %ld %ld %ld\\n", (long)o, (long)i, (long)d, (long)o);
            break;
        case 'm': if (sscanf(line + 1, "%lld", &a) != 1) { return 3; } ops->manual((int32_t)a); break;
        case 'a': ops->automatic(); break;
        case 'i': ops->init(); break;
        case 'j': if (sscanf(line + 1, "%lld", &a) != 1) { return 3; } ops->init_at((int32_t)a); break;
        default: return 4;
        }
    }
    return 0;
}
""")
    return "\n".join(parts)


def check_multi_bit_exact(tmp_path, configs: dict, files: dict, seed: int) -> set:
    """Compile every controller into one program, run each over a seeded schedule, compare bit for bit with
    its Python reference; return the product shifts the configurations used."""
    exe = compile_c(tmp_path, files, {"multi.c": multi_harness(list(configs))},
                    STRICT + ["-O1"] + sanitizer_flags(tmp_path))
    shifts = set()
    for index, (name, coeffs) in enumerate(configs.items()):
        sched = random_schedule(np.random.default_rng(seed + index), 3000, coeffs)
        result = subprocess.run([str(exe), str(index)], input=c_commands(sched), capture_output=True, text=True)
        assert result.returncode == 0 and result.stderr == "", (name, result.stderr)
        got = [tuple(int(v) for v in line.split()) for line in result.stdout.splitlines()]
        expected = run_python(coeffs, sched)
        first_bad = next((k for k, (a, b) in enumerate(zip(got, expected)) if a != b), None)
        assert len(got) == len(expected) and first_bad is None, (name, coeffs, first_bad)
        shifts |= {coeffs.p_shift, coeffs.ki_shift, coeffs.bd_shift, coeffs.track_shift, coeffs.ad_shift}
    return shifts


@needs_cc
def test_random_configurations_are_bit_exact(tmp_path):
    rng = np.random.default_rng(515)
    configs = {}
    refused = 0
    while len(configs) < 24:
        s, ipc, opc = random_settings(rng)
        try:
            configs[f"pid{len(configs):02d}"] = quantise_pid(s, input_per_count=ipc, output_per_count=opc)
        except ModelError:
            refused += 1  # e.g. a coefficient beyond the format: refused with a clear error, not emitted
    assert refused < 24
    files = {}
    for name, coeffs in configs.items():
        files.update(render_pid_c(coeffs, name=name))
    shifts = check_multi_bit_exact(tmp_path, configs, files, seed=0)
    assert len(shifts) > 15  # the coefficients cover a wide range of formats


@needs_cc
@pytest.mark.skipif(shutil.which("c++") is None, reason="no C++ compiler (c++) on PATH")
def test_header_links_from_cpp(tmp_path):
    files = render_pid_c(coefficients("cooler_pid"), name="cooler_pid")
    for file_name, text in files.items():
        (tmp_path / file_name).write_text(text)
    (tmp_path / "main.cpp").write_text(
        '#include "cooler_pid.h"\n'
        "int main() { cooler_pid_state_t s; cooler_pid_init(&s); return cooler_pid_step(&s, 100, 0) > 0 ? 0 : 1; }\n")
    obj = tmp_path / "cooler_pid.o"
    subprocess.run([CC, *STRICT, "-c", "-o", str(obj), str(tmp_path / "cooler_pid.c")], check=True)
    result = subprocess.run(["c++", "-Wall", "-Wextra", "-Werror", "-o", str(tmp_path / "app"),
                             str(tmp_path / "main.cpp"), str(obj)], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    assert subprocess.run([str(tmp_path / "app")]).returncode == 0

"""Generated C: compiled with the real compiler, run over every input, bit-exact with the Python reference.

The golden files are never rewritten by a test; after an intended change regenerate them with
``python tests/golden/update.py`` and review the diff.
"""

import shutil
import subprocess
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware.table_c import check_function_name, check_prefix, render_sweep_csv, render_table_c
from compensator.firmware.tables import build_table, sweep_table
from compensator.law import build_law
from compensator.profiles import load_board, load_sipm

from cbuild import CC, PEDANTIC, STRICT, build, needs_cc  # noqa: E402
from golden_check import assert_golden  # noqa: E402

GOLDEN = Path(__file__).parent / "golden" / "tables"

HARNESS = r"""
#include <stdio.h>
#include "{name}.h"
int main(void)
{{
    unsigned long n;
    for (n = 0; n < {count}ul; n++) {{
        uint32_t v = (uint32_t){name}(({code_t})n);
        uint8_t s = {name}_status(({code_t})n);
        fwrite(&v, sizeof v, 1, stdout);
        fwrite(&s, 1, 1, stdout);
    }}
    return 0;
}}
"""


def run_c(tmp_path, table, files, name="bias_dac_from_adc", flags=STRICT):
    """Compile the generated files with a harness; return (dac, status) for every code of the argument type."""
    count = 1 << table.code_type_bits
    harness = HARNESS.format(name=name, count=count, code_t=f"uint{table.code_type_bits}_t")
    exe = build(tmp_path, {**files, "harness.c": harness}, [*flags, "-O2"])
    out = subprocess.run([str(exe)], capture_output=True, check=True).stdout
    rec = np.frombuffer(out, dtype=np.dtype([("v", "<u4"), ("s", "u1")]))
    assert rec.size == count
    return rec["v"].astype(np.int64), rec["s"].astype(np.int64)


def reversed_board(board):
    """The same board with the sensor on the high side: codes run the other way, slopes turn negative."""
    channel = board.temperature
    return replace(board, temperature=replace(channel, front_end=replace(channel.front_end, sensor_position="high")))


CASES = [
    ("sipm_a", "board_ntc", 3.0, "uniform", 0.05, False),
    ("sipm_a", "board_ntc", 3.0, "optimised", 0.02, False),
    ("sipm_b", "board_pt1000", 4.0, "uniform", 0.02, False),
    ("sipm_b", "board_pt1000", 4.0, "uniform", 0.01, False),  # 32-bit nodes with fractional bits
    ("sipm_c", "board_pt1000", 5.0, "optimised", 0.05, False),
    ("sipm_a", "board_ntc", 3.0, "uniform", 0.05, True),
    ("sipm_b", "board_pt1000", 4.0, "optimised", 0.05, True),
    ("sipm_a", "board_ntc", 3.0, "segmented", 0.05, False),
    ("sipm_b", "board_pt1000", 4.0, "segmented", 0.01, True),  # 32-bit nodes, codes reversed
    ("sipm_a", "board_ntc", 3.0, "polynomial", 0.05, False),
    ("sipm_b", "board_pt1000", 4.0, "polynomial", 0.05, True),
    ("sipm_c", "board_pt1000", 5.0, "polynomial", 0.02, False),
]


@needs_cc
@pytest.mark.parametrize("case", CASES, ids=lambda c: f"{c[0]}-{c[3]}-{c[4]}{'-reversed' if c[5] else ''}")
def test_c_is_bit_exact_with_the_reference(case, request, tmp_path):
    sipm_name, board_name, ov, layout, bound, flip = case
    sipm, board = request.getfixturevalue(sipm_name), request.getfixturevalue(board_name)
    if flip:
        board = reversed_board(board)
    law = build_law(sipm, board, ov)
    table = build_table(law, board, bound, layout)
    if flip and layout == "optimised":
        assert np.all(table.slope < 0)  # the negative branch of the floor shift is exercised
    files = render_table_c(table, [sipm, board], settings={"case": case})
    dac, status = run_c(tmp_path, table, files, flags=PEDANTIC if layout in ("optimised", "polynomial") else STRICT)
    ref_dac, ref_status = table.lookup(np.arange(1 << table.code_type_bits))
    assert np.array_equal(dac, ref_dac)
    assert np.array_equal(status, ref_status)
    # And the C output meets the bound at every code of the range.
    sweep = sweep_table(table, law, board)
    assert np.array_equal(dac[table.code_lo:table.code_hi + 1], sweep.table_dac_code)
    assert sweep.within_bound


@needs_cc
def test_wide_accumulator_path(sipm_b, board_pt1000, tmp_path):
    # A uniform table whose products need 64 bits: nodes far apart with big steps (synthetic values).
    law = build_law(sipm_b, board_pt1000, 4.0)
    table = build_table(law, board_pt1000, 0.05, "uniform")
    y = np.linspace(0, 65535, table.entries).round().astype(np.int64)[::-1].copy()
    wide = replace(table, shift=12, y=np.resize(y, ((table.code_hi - table.code_lo) >> 12) + 2), acc_type_bits=64,
                   below_dac_code=0, above_dac_code=0)
    wide = replace(wide, below_dac_code=int(wide.interpolate([wide.code_lo])[0]),
                   above_dac_code=int(wide.interpolate([wide.code_hi])[0]))
    files = render_table_c(wide, [sipm_b, board_pt1000])
    assert "typedef int64_t" in files["bias_dac_from_adc.c"]
    dac, status = run_c(tmp_path, wide, files)
    ref_dac, ref_status = wide.lookup(np.arange(1 << 16))
    assert np.array_equal(dac, ref_dac) and np.array_equal(status, ref_status)


@needs_cc
def test_static_asserts_catch_a_tampered_table(sipm_a, board_ntc, tmp_path):
    law = build_law(sipm_a, board_ntc, 3.0)
    table = build_table(law, board_ntc, 0.05, "optimised")
    files = render_table_c(table, [sipm_a, board_ntc])
    header = files["bias_dac_from_adc.h"]
    import re

    files["bias_dac_from_adc.h"] = re.sub(r"(BIAS_DAC_FROM_ADC_ENTRIES +)(\d+)u",
                                          lambda m: f"{m.group(1)}{table.entries + 1}u", header)
    assert files["bias_dac_from_adc.h"] != header
    (tmp_path / "bias_dac_from_adc.h").write_text(files["bias_dac_from_adc.h"])
    (tmp_path / "bias_dac_from_adc.c").write_text(files["bias_dac_from_adc.c"])
    proc = subprocess.run([CC, *STRICT, "-c", "-o", str(tmp_path / "t.o"), str(tmp_path / "bias_dac_from_adc.c")],
                          capture_output=True, text=True)
    assert proc.returncode != 0 and "count" in proc.stderr


def golden_inputs(sipm="hut-sipm-a", board="hut-board-ntc"):
    inputs = GOLDEN / "inputs"
    return load_sipm(inputs / f"{sipm}.yaml"), load_board(inputs / f"{board}.yaml")


#: Golden cases: directory -> (sipm, board, overvoltage V, law options, layout, bound %, sensor on the high side,
#: function name, prefix). The first four are the layouts on the NTC board; the last two reach the branches those
#: do not: 32-bit nodes with fractional bits, a falling code (statuses swapped), a safe DAC code that holds the SiPM
#: below breakdown, and the measured drop correction with its entry point under a prefix.
GOLDEN_CASES = {
    "uniform": ("hut-sipm-a", "hut-board-ntc", 3.0, {}, "uniform", 0.05, False, "bias_dac_from_adc", ""),
    "optimised": ("hut-sipm-a", "hut-board-ntc", 3.0, {}, "optimised", 0.05, False, "bias_dac_from_adc", ""),
    "segmented": ("hut-sipm-a", "hut-board-ntc", 3.0, {}, "segmented", 0.05, False, "bias_dac_from_adc", ""),
    "polynomial": ("hut-sipm-a", "hut-board-ntc", 3.0, {}, "polynomial", 0.05, False, "bias_dac_from_adc", ""),
    "uniform-fine-high-side": ("hut-sipm-b", "hut-board-pt1000", 4.0, {}, "uniform", 0.01, True,
                               "bias_dac_from_adc", ""),
    "optimised-measured-drop": ("hut-sipm-a", "hut-board-ntc-isense", 3.0,
                                {"kind": "constant_gain", "drop_correction": "measured"}, "optimised", 0.05, False,
                                "bias", "hut_"),
}
GOLDEN_LAYOUTS = list(GOLDEN_CASES)  # the old name, used by tests/golden/update.py


def golden_table(case):
    """The table of a golden case, its profiles and the banner's settings."""
    sipm_name, board_name, ov, options, layout, bound, high_side, _, _ = GOLDEN_CASES[case]
    sipm, board = golden_inputs(sipm_name, board_name)
    if high_side:
        board = reversed_board(board)
    table = build_table(build_law(sipm, board, ov, **options), board, bound, layout)
    settings = {"layout": layout, "max_gain_error_pct": f"{bound:g}", "overvoltage_v": f"{ov:g}"}
    return table, [sipm, board], settings


def golden_files(case, built=None):
    """The files the golden test compares (also what ``tests/golden/update.py`` writes)."""
    table, profiles, settings = built or golden_table(case)
    name, prefix = GOLDEN_CASES[case][7:]
    return render_table_c(table, profiles, name, settings, prefix=prefix)


@pytest.mark.parametrize("case", GOLDEN_LAYOUTS)
def test_golden_files(case):
    built = golden_table(case)
    files = golden_files(case, built)
    assert files == golden_files(case, built)  # deterministic
    assert_golden(files, GOLDEN / case)


def test_banner_and_contents(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    table = build_table(law, board_ntc, 0.05, "optimised")
    files = render_table_c(table, [sipm_a, board_ntc], name="hut_bias", settings={"layout": "optimised"})
    assert set(files) == {"hut_bias.h", "hut_bias.c"}
    for text in files.values():
        assert "generated by compensator" in text
        assert f"sha256 {sipm_a.sha256[:16]}" in text and f"sha256 {board_ntc.sha256[:16]}" in text
        assert "hut-sipm-a" in text and "hut-board-ntc" in text
        assert "_Static_assert" in files["hut_bias.c"]
    assert "uint16_t hut_bias(uint16_t adc_code);" in files["hut_bias.h"]
    assert "IEC 61010-1" in files["hut_bias.h"]
    assert "/" not in files["hut_bias.c"].split("floor_shift")[-1].replace("/*", "").replace("*/", "")  # no division


@pytest.mark.parametrize("bad", ["", "1abc", "int", "a-b", "x" * 41, "__reserved", "_Reserved", "abs", "malloc",
                                 "exit", "uint16_t", "main", "static"])
def test_function_name_must_be_a_c_identifier(bad):
    with pytest.raises(ModelError, match="C identifier"):
        check_function_name(bad)


@pytest.mark.parametrize("good", ["bias", "hut_bias_v2", "Abs", "x" * 40])
def test_function_names_that_are_fine(good):
    assert check_function_name(good) == good


@pytest.mark.parametrize("bad", ["1x", "a-b", "__x", "_X", "a b"])
def test_prefix_must_start_an_identifier(bad):
    with pytest.raises(ModelError, match="prefix"):
        check_prefix(bad)


def test_prefix_and_name_too_long(sipm_b, board_pt1000):
    table = build_table(build_law(sipm_b, board_pt1000, 4.0), board_pt1000, 0.05, "uniform")
    with pytest.raises(ModelError, match="exceed 40"):
        render_table_c(table, [], "x" * 30, prefix="y" * 11)


@needs_cc
def test_prefix_namespaces_every_symbol_and_rom_hook_reads_every_table(sipm_a, board_ntc, tmp_path):
    import re

    law = build_law(sipm_a, board_ntc, 3.0)
    for layout in ("uniform", "segmented", "optimised", "polynomial"):
        table = build_table(law, board_ntc, 0.05, layout)
        files = render_table_c(table, [sipm_a, board_ntc], "bias", prefix="hut_")
        assert set(files) == {"hut_bias.h", "hut_bias.c"}
        code = "".join(files.values())
        stripped = re.sub(r"/\*.*?\*/", "", code, flags=re.S)
        defined = set(re.findall(r"#define\s+(\w+)", stripped))
        defined |= set(re.findall(r"^(?:static )?\w+ (\w+)\(", stripped, flags=re.M))  # functions
        defined |= set(re.findall(r"static const \w+ (\w+)", stripped))
        defined |= set(re.findall(r"typedef \w+ (\w+);", stripped))
        assert defined and all(s.startswith(("hut_bias", "HUT_BIAS")) for s in defined), sorted(defined)
        # The placement hook: route every const read through a counting routine (a stand-in for a
        # program-memory read) and check the values and that the data really goes through it.
        kinds = sorted(set(re.findall(r"HUT_BIAS_ROM_READ_(\w+)\(", files["hut_bias.c"])))
        assert kinds
        cfg = ["#include <stdint.h>", "extern unsigned long rom_reads;"]
        for kind in kinds:
            ctype = kind.replace("U", "uint").replace("I", "int") + "_t"
            cfg.append(f"#define HUT_BIAS_ROM_READ_{kind}(a) (rom_reads++, *(const volatile {ctype} *)(a))")
        cfg.append("#define HUT_BIAS_ROM __attribute__((section(\".rodata.hut_rom\")))")
        harness = ('#include <stdio.h>\n#include "hut_bias.h"\nunsigned long rom_reads = 0;\n'
                   "int main(void)\n{\n"
                   f"    unsigned v = (unsigned)hut_bias({table.code_lo + 7}u);\n"
                   '    printf("%u %lu\\n", v, rom_reads);\n    return 0;\n}\n')
        (tmp_path / "rom.h").write_text("\n".join(cfg) + "\n")
        exe = build(tmp_path, {**files, "main.c": harness}, [*STRICT, "-include", str(tmp_path / "rom.h")],
                    output=f"rom-{layout}")
        value, reads = map(int, subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout.split())
        assert value == int(table.lookup([table.code_lo + 7])[0][0])
        assert reads >= 2


def test_sweep_csv_columns(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    table = build_table(law, board_pt1000, 0.05, "optimised")
    text = render_sweep_csv(sweep_table(table, law, board_pt1000))
    lines = text.splitlines()
    assert lines[0] == "adc_code,temp_c,ideal_bias_v,table_dac_code,table_bias_v,gain_error_pct"
    assert len(lines) == table.code_hi - table.code_lo + 2
    first = lines[1].split(",")
    assert int(first[0]) == table.code_lo and len(first) == 6


@needs_cc
@pytest.mark.skipif(shutil.which("c++") is None, reason="no C++ compiler (c++) on PATH")
def test_header_links_from_cpp(sipm_a, board_ntc, tmp_path):
    law = build_law(sipm_a, board_ntc, 3.0)
    table = build_table(law, board_ntc, 0.05, "optimised")
    for fname, text in render_table_c(table, [sipm_a, board_ntc]).items():
        (tmp_path / fname).write_text(text)
    (tmp_path / "main.cpp").write_text(
        '#include "bias_dac_from_adc.h"\n#include <cstdio>\n'
        f'int main() {{ std::printf("%u", (unsigned)bias_dac_from_adc({table.code_lo})); return 0; }}\n')
    obj = tmp_path / "table.o"
    subprocess.run([CC, *STRICT, "-c", "-o", str(obj), str(tmp_path / "bias_dac_from_adc.c")], check=True)
    exe = tmp_path / "cpp"
    proc = subprocess.run([shutil.which("c++"), "-Wall", "-Wextra", "-Werror", "-o", str(exe), str(tmp_path / "main.cpp"),
                           str(obj)], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    out = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout
    assert int(out) == int(table.lookup([table.code_lo])[0][0])

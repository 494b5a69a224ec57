"""C99 rendering of a :class:`~compensator.firmware.tables.LookupTable`, and its ``sweep.csv``.

The generated source implements exactly the integer path documented in
:mod:`compensator.firmware.tables` (the Python reference is
:meth:`LookupTable.lookup`): same constants, same operations, same rounding.
Output is deterministic: the same table, profiles and settings give
byte-identical text (no timestamps; the banner names the generator version,
the profiles and their SHA-256).
"""

from __future__ import annotations

import re

import numpy as np

from compensator.errors import ModelError
from compensator.provenance import c_banner
from compensator.firmware.tables import (
    STATUS_ABOVE_RANGE,
    STATUS_BELOW_RANGE,
    STATUS_OK,
    STATUS_SENSOR_FAULT,
    LookupTable,
    TableSweep,
)

DEFAULT_FUNCTION_NAME = "bias_dac_from_adc"

#: Suffix of the entry point that also takes the measured SiPM current.
CURRENT_FUNCTION_SUFFIX = "_with_current"

SWEEP_COLUMNS = ("adc_code", "temp_c", "ideal_bias_v", "table_dac_code", "table_bias_v", "gain_error_pct")

_C_KEYWORDS = frozenset("""auto break case char const continue default do double else enum extern float for goto
if inline int long register restrict return short signed sizeof static struct switch typedef union unsigned void
volatile while _Bool _Complex _Imaginary main""".split())
_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]{0,39}\Z")

_SAFETY = (
    "Safety: this code sets a bias of tens of volts. Outputs above 60 V dc are",
    "hazardous live (IEC 61010-1). Verify the output limits on the bench before",
    "connecting a sensor, and follow local codes and licensed practice.",
)


def check_function_name(name: str) -> str:
    """Return ``name`` if it is a usable C identifier, else raise ``ModelError``.

    Parameters
    ----------
    name : str
        Lookup function name: letters, digits and underscores, at most 40
        characters, not starting with a digit, not a C keyword.
    """
    if not isinstance(name, str) or not _IDENT.match(name) or name in _C_KEYWORDS or name.startswith("__"):
        raise ModelError(f"function name {name!r} is not a usable C identifier "
                         "(letters, digits, underscores; at most 40 characters; not a keyword)")
    return name


def c_function_signature(table: LookupTable, name: str) -> str:
    """The lookup function's C prototype (without the semicolon).

    Parameters
    ----------
    table : LookupTable
    name : str
        Function name.
    """
    return f"uint{table.value_type_bits}_t {name}(uint{table.code_type_bits}_t adc_code)"


def c_current_function_signature(table: LookupTable, name: str) -> str:
    """The prototype of the entry point with the measured drop correction (without the semicolon).

    Parameters
    ----------
    table : LookupTable
        A table with a :class:`~compensator.firmware.tables.CurrentCorrection`.
    name : str
        Function name of the plain lookup; the suffix ``_with_current`` is added.
    """
    if table.current is None:
        raise ModelError("the table has no measured drop correction")
    return (f"uint{table.value_type_bits}_t {name}{CURRENT_FUNCTION_SUFFIX}(uint{table.code_type_bits}_t adc_code, "
            f"uint{table.current.current_type_bits}_t current_code)")


def _array(ctype: str, name: str, values, per_line: int = 8) -> str:
    vals = [str(int(v)) for v in np.asarray(values).ravel()]
    lines = []
    for k in range(0, len(vals), per_line):
        lines.append("    " + ", ".join(vals[k:k + per_line]) + ("," if k + per_line < len(vals) else ""))
    return f"static const {ctype} {name}[{len(vals)}] = {{\n" + "\n".join(lines) + "\n};\n"


def render_table_c(table: LookupTable, profiles, name: str = DEFAULT_FUNCTION_NAME,
                   settings: dict | None = None) -> dict:
    """Render the C99 header and source of a lookup table.

    Parameters
    ----------
    table : LookupTable
    profiles : sequence of profile objects
        The sipm and board profiles the table came from (for the banner).
    name : str
        Lookup function name; also the file stem and the prefix of every symbol.
    settings : dict, optional
        Options that shaped the table, written into the banner.

    Returns
    -------
    dict
        ``{"NAME.h": text, "NAME.c": text}``.
    """
    check_function_name(name)
    up = name.upper()
    ct, vt = f"uint{table.code_type_bits}_t", f"uint{table.value_type_bits}_t"
    acc = f"int{table.acc_type_bits}_t"
    banner = c_banner(f"SiPM bias lookup table ({table.layout} layout): temperature ADC code -> bias DAC code",
                      profiles, settings)
    guard = f"{up}_H"
    sig = c_function_signature(table, name)
    h = [banner, f"#ifndef {guard}\n#define {guard}\n\n#include <stdint.h>\n\n/*\n"]
    h += [f" * {line}\n" for line in _SAFETY]
    h.append(
        " *\n"
        f" * {name}(adc_code) returns the DAC code for a raw temperature ADC code:\n"
        f" *   codes {table.code_lo}..{table.code_hi} (the operating range) are interpolated;\n"
        f" *   codes {table.fault_lo}..{table.code_lo - 1} and {table.code_hi + 1}..{table.fault_hi} (just outside it) are\n"
        " *   clamped to the value at the nearer end of the range;\n"
        f" *   any other code (open or shorted sensor, rail) gives {up}_SAFE_DAC_CODE.\n"
        f" * {name}_status(adc_code) tells which case applies.\n")
    cur = table.current
    if cur is not None:
        h.append(
            " *\n"
            f" * {name}{CURRENT_FUNCTION_SUFFIX}(adc_code, current_code) also corrects the drop across the\n"
            f" *   {cur.series_resistor_ohm:g} ohm series resistor from the raw code of the SiPM current ADC: the\n"
            f" *   table holds the bias for zero current; the function adds {up}_CURRENT_FACTOR * current_code\n"
            f" *   / 2^{up}_CURRENT_SHIFT DAC codes (rounded half up; about {cur.dac_codes_per_current_code:.6g} per\n"
            f" *   current code), with current_code limited to {up}_CURRENT_CODE_MAX ({cur.limit_reason}),\n"
            f" *   then clamps to {up}_DAC_MIN..{up}_DAC_MAX. A sensor fault still gives\n"
            f" *   {up}_SAFE_DAC_CODE, never a corrected code. A wrong current reading (open or\n"
            f" *   saturated sense stage) raises the output by at most {cur.max_correction_v:.3f} V, which keeps\n"
            " *   the SiPM within its max_overvoltage_v at the temperature read, even with no current flowing.\n")
    h.append(" */\n\n")
    defines = [
        ("STATUS_OK", STATUS_OK, "reading inside the operating range"),
        ("STATUS_BELOW_RANGE", STATUS_BELOW_RANGE, "code below the range: output clamped"),
        ("STATUS_ABOVE_RANGE", STATUS_ABOVE_RANGE, "code above the range: output clamped"),
        ("STATUS_SENSOR_FAULT", STATUS_SENSOR_FAULT, "open/short sensor: safe DAC code"),
        ("ADC_BITS", table.adc_bits, "temperature ADC resolution"),
        ("DAC_BITS", table.dac_bits, "bias DAC resolution"),
        ("ADC_CODE_LO", table.code_lo, "first ADC code of the operating range"),
        ("ADC_CODE_HI", table.code_hi, "last ADC code of the operating range"),
        ("ADC_FAULT_LO", table.fault_lo, "codes below this are sensor faults"),
        ("ADC_FAULT_HI", table.fault_hi, "codes above this are sensor faults"),
        ("SAFE_DAC_CODE", table.safe_dac_code, "DAC code for a sensor fault"),
        ("DAC_MIN", table.dac_min, "lowest DAC code the function returns in range"),
        ("DAC_MAX", table.dac_max, "highest DAC code the function returns in range"),
        ("ENTRIES", table.entries, "table rows"),
        ("TABLE_BYTES", table.table_bytes, "bytes of const table data"),
    ]
    if cur is not None:
        defines += [
            ("CURRENT_BITS", cur.current_bits, "SiPM current ADC resolution"),
            ("CURRENT_CODE_MAX", cur.current_code_max, "larger current codes are limited to this"),
            ("CURRENT_SHIFT", cur.shift, "fractional bits of the correction factor"),
        ]
    width = max(len(f"{up}_{k}") for k, _, _ in defines)
    if cur is not None:
        width = max(width, len(f"{up}_CURRENT_FACTOR"))
    for key, value, comment in defines:
        h.append(f"#define {f'{up}_{key}':<{width}} {int(value)}u /* {comment} */\n")
    if cur is not None:
        lit = f"INT{cur.acc_type_bits}_C({abs(cur.factor)})"
        h.append(f"#define {f'{up}_CURRENT_FACTOR':<{width}} ({'-' if cur.factor < 0 else ''}{lit}) "
                 f"/* DAC codes per current code, times 2^{up}_CURRENT_SHIFT */\n")
    h.append("\n#ifdef __cplusplus\nextern \"C\" {\n#endif\n")
    h.append(f"\n/* Bias DAC code for a raw temperature ADC code (integer only, no division). */\n{sig};\n\n")
    h.append(f"/* {up}_STATUS_* for a raw temperature ADC code. */\nuint8_t {name}_status({ct} adc_code);\n\n")
    if cur is not None:
        h.append(f"/* Bias DAC code with the series-resistor drop of the measured SiPM current added. */\n"
                 f"{c_current_function_signature(table, name)};\n\n")
    h.append("#ifdef __cplusplus\n}\n#endif\n\n")
    h.append(f"#endif /* {guard} */\n")

    c = [banner, f'#include "{name}.h"\n\n']
    c.append(
        "#if (defined(__STDC_VERSION__) && __STDC_VERSION__ >= 201112L) || defined(__GNUC__)\n"
        f"#define {up}_STATIC_ASSERT(cond, msg) _Static_assert(cond, msg)\n"
        "#else\n"
        f"#define {up}_STATIC_ASSERT(cond, msg) extern char {name}_static_assert[(cond) ? 1 : -1]\n"
        "#endif\n\n")
    c.append(f"typedef {acc} {name}_acc_t;\n\n")
    if table.layout == "uniform":
        unit = "DAC codes" if not table.node_frac_bits else f"DAC codes times 2^{table.node_frac_bits}"
        c.append(f"/* Nodes every 2^{table.shift} ADC codes from {up}_ADC_CODE_LO, {unit}. */\n")
        c.append(_array(f"uint{table.node_type_bits}_t", f"{name}_y", table.y))
        asserts = [
            (f"sizeof({name}_y) / sizeof({name}_y[0]) == {up}_ENTRIES", "node count"),
            (f"sizeof({name}_y) == {up}_TABLE_BYTES", "table size"),
            (f"(({name}_acc_t){up}_ENTRIES - 1) << {table.shift} > ({name}_acc_t)({up}_ADC_CODE_HI - {up}_ADC_CODE_LO)",
             "nodes cover the operating range"),
        ]
    else:
        c.append(f"/* Breakpoints (ADC codes), values at them (DAC codes) and slopes (DAC codes per ADC code,"
                 f" times 2^{table.slope_frac_bits}). */\n")
        c.append(_array(ct, f"{name}_x", table.x))
        c.append(_array(vt, f"{name}_y", table.y))
        c.append(_array(f"int{table.slope_type_bits}_t", f"{name}_slope", table.slope))
        asserts = [
            (f"sizeof({name}_x) / sizeof({name}_x[0]) == {up}_ENTRIES", "breakpoint count"),
            (f"sizeof({name}_y) / sizeof({name}_y[0]) == {up}_ENTRIES", "value count"),
            (f"sizeof({name}_slope) / sizeof({name}_slope[0]) == {up}_ENTRIES", "slope count"),
            (f"sizeof({name}_x) + sizeof({name}_y) + sizeof({name}_slope) == {up}_TABLE_BYTES", "table size"),
        ]
    if cur is not None:
        c.insert(c.index(f"typedef {acc} {name}_acc_t;\n\n") + 1, f"typedef int{cur.acc_type_bits}_t {name}_corr_t;\n\n")
        asserts += [
            (f"{up}_CURRENT_CODE_MAX < (1ul << {up}_CURRENT_BITS)", "current code limit"),
            (f"{up}_CURRENT_SHIFT < {cur.acc_type_bits - 1}u", "correction shift"),
        ]
    asserts += [
        (f"sizeof({name}_acc_t) * 8 == {table.acc_type_bits}", "accumulator width"),
        (f"{up}_ADC_FAULT_LO <= {up}_ADC_CODE_LO && {up}_ADC_CODE_HI <= {up}_ADC_FAULT_HI", "fault band"),
        (f"{up}_DAC_MIN <= {up}_DAC_MAX && {up}_DAC_MAX < (1ul << {up}_DAC_BITS)", "output clamp"),
        (f"{up}_SAFE_DAC_CODE < (1ul << {up}_DAC_BITS)", "safe code"),
    ]
    c.append("\n")
    for cond, msg in asserts:
        c.append(f'{up}_STATIC_ASSERT({cond}, "{msg}");\n')
    c.append(
        f"\n/* floor(p / 2^k), without relying on how >> treats negative values. */\n"
        f"static {name}_acc_t {name}_floor_shift({name}_acc_t p, unsigned k)\n"
        "{\n"
        "    if (p >= 0) {\n"
        "        return p >> k;\n"
        "    }\n"
        f"    return -((-p + ((({name}_acc_t)1 << k) - 1)) >> k);\n"
        "}\n\n")
    c.append(
        f"uint8_t {name}_status({ct} adc_code)\n"
        "{\n"
        f"    if (adc_code < {up}_ADC_FAULT_LO || adc_code > {up}_ADC_FAULT_HI) {{\n"
        f"        return (uint8_t){up}_STATUS_SENSOR_FAULT;\n"
        "    }\n"
        f"    if (adc_code < {up}_ADC_CODE_LO) {{\n"
        f"        return (uint8_t){up}_STATUS_BELOW_RANGE;\n"
        "    }\n"
        f"    if (adc_code > {up}_ADC_CODE_HI) {{\n"
        f"        return (uint8_t){up}_STATUS_ABOVE_RANGE;\n"
        "    }\n"
        f"    return (uint8_t){up}_STATUS_OK;\n"
        "}\n\n")
    c.append(
        f"{sig}\n"
        "{\n"
        f"    {name}_acc_t y;\n"
        f"    if (adc_code < {up}_ADC_FAULT_LO || adc_code > {up}_ADC_FAULT_HI) {{\n"
        f"        return ({vt}){up}_SAFE_DAC_CODE;\n"
        "    }\n"
        f"    if (adc_code < {up}_ADC_CODE_LO) {{\n"
        f"        return ({vt}){table.below_dac_code}u; /* value at the low end of the range */\n"
        "    }\n"
        f"    if (adc_code > {up}_ADC_CODE_HI) {{\n"
        f"        return ({vt}){table.above_dac_code}u; /* value at the high end of the range */\n"
        "    }\n")
    if table.layout == "uniform":
        half = (1 << table.shift) >> 1
        c.append(
            "    {\n"
            f"        const uint32_t d = (uint32_t)adc_code - {up}_ADC_CODE_LO;\n"
            f"        const uint32_t i = d >> {table.shift};\n"
            f"        const {name}_acc_t r = ({name}_acc_t)(d & {(1 << table.shift) - 1}u);\n"
            f"        const {name}_acc_t delta = ({name}_acc_t){name}_y[i + 1u] - ({name}_acc_t){name}_y[i];\n"
            f"        y = ({name}_acc_t){name}_y[i] + {name}_floor_shift(delta * r + {half}, {table.shift}u);\n")
        if table.node_frac_bits:
            c.append(f"        y = {name}_floor_shift(y + {1 << (table.node_frac_bits - 1)}, {table.node_frac_bits}u);"
                     " /* to whole DAC codes */\n")
        c.append("    }\n")
    else:
        half = (1 << table.slope_frac_bits) >> 1
        c.append(
            "    {\n"
            "        /* Largest i with x[i] <= adc_code (x[0] is the first code of the range). */\n"
            f"        uint32_t lo = 0u, hi = {up}_ENTRIES - 1u;\n"
            "        while (lo < hi) {\n"
            "            const uint32_t mid = (lo + hi + 1u) >> 1;\n"
            f"            if ({name}_x[mid] <= adc_code) {{\n"
            "                lo = mid;\n"
            "            } else {\n"
            "                hi = mid - 1u;\n"
            "            }\n"
            "        }\n"
            f"        y = ({name}_acc_t){name}_y[lo] + {name}_floor_shift(\n"
            f"            ({name}_acc_t){name}_slope[lo] * ({name}_acc_t)(adc_code - {name}_x[lo]) + {half}, "
            f"{table.slope_frac_bits}u);\n"
            "    }\n")
    c.append(
        f"    if (y < ({name}_acc_t){up}_DAC_MIN) {{\n"
        f"        y = ({name}_acc_t){up}_DAC_MIN;\n"
        "    }\n"
        f"    if (y > ({name}_acc_t){up}_DAC_MAX) {{\n"
        f"        y = ({name}_acc_t){up}_DAC_MAX;\n"
        "    }\n"
        f"    return ({vt})y;\n"
        "}\n")
    if cur is not None:
        c.append(_render_current_c(table, name, up, vt))
    return {f"{name}.h": "".join(h), f"{name}.c": "".join(c)}


def _render_current_c(table: LookupTable, name: str, up: str, vt: str) -> str:
    """The correction and the entry point with the measured current (step 5-7 of the integer path)."""
    cur = table.current
    it = f"uint{cur.current_type_bits}_t"
    corr = f"{name}_corr_t"
    half = (1 << cur.shift) >> 1
    return (
        f"\n/* Drop correction in DAC codes: floor((K c + 2^(Q-1)) / 2^Q), c limited to {up}_CURRENT_CODE_MAX. */\n"
        f"static {corr} {name}_current_delta({it} current_code)\n"
        "{\n"
        f"    const {corr} c = (current_code > {up}_CURRENT_CODE_MAX)\n"
        f"        ? ({corr}){up}_CURRENT_CODE_MAX : ({corr})current_code;\n"
        f"    const {corr} p = ({corr}){up}_CURRENT_FACTOR * c + ({corr}){half};\n"
        "    if (p >= 0) {\n"
        f"        return p >> {up}_CURRENT_SHIFT;\n"
        "    }\n"
        f"    return -((-p + ((({corr})1 << {up}_CURRENT_SHIFT) - 1)) >> {up}_CURRENT_SHIFT);\n"
        "}\n\n"
        f"{c_current_function_signature(table, name)}\n"
        "{\n"
        f"    {corr} y;\n"
        f"    if (adc_code < {up}_ADC_FAULT_LO || adc_code > {up}_ADC_FAULT_HI) {{\n"
        f"        return ({vt}){up}_SAFE_DAC_CODE; /* never corrected */\n"
        "    }\n"
        f"    y = ({corr}){name}(adc_code) + {name}_current_delta(current_code);\n"
        f"    if (y < ({corr}){up}_DAC_MIN) {{\n"
        f"        y = ({corr}){up}_DAC_MIN;\n"
        "    }\n"
        f"    if (y > ({corr}){up}_DAC_MAX) {{\n"
        f"        y = ({corr}){up}_DAC_MAX;\n"
        "    }\n"
        f"    return ({vt})y;\n"
        "}\n")


def render_sweep_csv(sweep: TableSweep) -> str:
    """``sweep.csv``: one row per ADC code of the operating range.

    Parameters
    ----------
    sweep : TableSweep

    Returns
    -------
    str
        Columns ``adc_code,temp_c,ideal_bias_v,table_dac_code,table_bias_v,gain_error_pct``.
    """
    rows = [",".join(SWEEP_COLUMNS)]
    for code, t, ideal, dac, out, err in zip(sweep.adc_code.tolist(), sweep.temp_c.tolist(),
                                             sweep.ideal_bias_v.tolist(), sweep.table_dac_code.tolist(),
                                             sweep.table_bias_v.tolist(), sweep.gain_error_pct.tolist()):
        rows.append(f"{code},{t:.4f},{ideal:.6f},{dac},{out:.6f},{err:.6f}")
    return "\n".join(rows) + "\n"

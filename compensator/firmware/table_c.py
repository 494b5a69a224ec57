"""C99 rendering of a :class:`~compensator.firmware.tables.LookupTable`, and its ``sweep.csv``.

The generated source implements exactly the integer path documented in
:mod:`compensator.firmware.tables` and :mod:`compensator.firmware.layouts`
(the Python reference is :meth:`LookupTable.lookup`): same constants, same
operations, same rounding. Output is deterministic: the same table, profiles
and settings give byte-identical text (no timestamps; the banner names the
generator version, the profiles and their SHA-256).

Every symbol starts with ``prefix + name`` (functions and data in that case,
macros in upper case), so a ``prefix`` puts the whole file set under one
namespace. Const data goes through a placement hook, ``<SYM>_ROM``, and is
read through ``<SYM>_ROM_READ_<TYPE>(address)``; both default to plain C, and
on a Harvard-architecture microcontroller the user defines them (before the
header is included, or on the compiler's command line) as the attribute that
puts data in program memory and the routines that read it.
"""

from __future__ import annotations

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.c_names import MAX_SYMBOL_LENGTH, check_function_name, check_prefix
from compensator.firmware.fixed_point import c_floor_shift_function, c_int_literal, half
from compensator.firmware.safe_state import SHUTDOWN_LINE_TEXT
from compensator.firmware.tables import LookupTable, TableStatus, TableSweep
from compensator.provenance import c_banner

__all__ = [
    "DEFAULT_FUNCTION_NAME", "CURRENT_FUNCTION_SUFFIX", "SWEEP_COLUMNS", "SUMMARY_COLUMNS", "SWEEP_MODES",
    "FULL_SWEEP_MAX_ADC_BITS", "check_function_name", "check_prefix", "c_function_signature",
    "c_current_function_signature", "render_table_c", "default_sweep_mode", "render_sweep_csv",
]

DEFAULT_FUNCTION_NAME = "bias_dac_from_adc"

#: Suffix of the entry point that also takes the measured SiPM current.
CURRENT_FUNCTION_SUFFIX = "_with_current"

SWEEP_COLUMNS = ("adc_code", "temp_c", "ideal_bias_v", "table_dac_code", "table_bias_v", "gain_error_pct")
SUMMARY_COLUMNS = ("adc_code_first", "adc_code_last", "temp_c_first", "temp_c_last", "table_dac_code_first",
                   "table_dac_code_last", "max_abs_gain_error_pct", "worst_adc_code")

#: ``sweep.csv`` contents: none, one row per block of codes, or one row per code.
SWEEP_MODES = ("none", "summary", "full")

#: ADCs up to this resolution get a full sweep by default; finer ones a summary.
FULL_SWEEP_MAX_ADC_BITS = 16

#: A summary has at most this many rows.
SUMMARY_MAX_ROWS = 1024

_SAFETY = (
    "Safety: this code sets a bias of tens of volts. Outputs above 60 V dc are",
    "hazardous live (IEC 61010-1). Verify the output limits on the bench before",
    "connecting a sensor, and follow local codes and licensed practice.",
)


def _symbol(name: str, prefix: str) -> str:
    check_function_name(name)
    check_prefix(prefix)
    sym = prefix + name
    if len(sym) > MAX_SYMBOL_LENGTH:
        raise ModelError(f"prefix and name {sym!r} together exceed {MAX_SYMBOL_LENGTH} characters", key="prefix")
    return sym


def c_function_signature(table: LookupTable, name: str, *, prefix: str = "") -> str:
    """The lookup function's C prototype (without the semicolon).

    Parameters
    ----------
    table : LookupTable
        The table (for the C types).
    name : str
        Function name.
    prefix : str
        Namespace prefix of every symbol.
    """
    return f"uint{table.value_type_bits}_t {prefix}{name}(uint{table.code_type_bits}_t adc_code)"


def c_current_function_signature(table: LookupTable, name: str, *, prefix: str = "") -> str:
    """The prototype of the entry point with the measured drop correction (without the semicolon).

    Parameters
    ----------
    table : LookupTable
        A table with a :class:`~compensator.firmware.tables.CurrentCorrection`.
    name : str
        Function name of the plain lookup; the suffix ``_with_current`` is added.
    prefix : str
        Namespace prefix of every symbol.
    """
    if table.current is None:
        raise ModelError("the table has no measured drop correction")
    return (f"uint{table.value_type_bits}_t {prefix}{name}{CURRENT_FUNCTION_SUFFIX}(uint{table.code_type_bits}_t "
            f"adc_code, uint{table.current.current_type_bits}_t current_code)")


class _Data:
    """Const data declarations and their reads through the placement hook."""

    def __init__(self, sym: str, up: str):
        self.sym, self.up = sym, up
        self.decls, self.kinds = [], set()

    @staticmethod
    def _kind(ctype: str) -> str:
        return ctype.replace("uint", "U").replace("int", "I").replace("_t", "")

    def array(self, ctype: str, field: str, values, per_line: int = 8) -> str:
        """Declare ``sym_field[]``; return its name."""
        vals = [str(int(v)) for v in np.asarray(values).ravel()]
        lines = ["    " + ", ".join(vals[k:k + per_line]) + ("," if k + per_line < len(vals) else "")
                 for k in range(0, len(vals), per_line)]
        name = f"{self.sym}_{field}"
        self.decls.append(f"static const {ctype} {name}[{len(vals)}] {self.up}_ROM = {{\n" + "\n".join(lines)
                          + "\n};\n")
        self.kinds.add(self._kind(ctype))
        return name

    def scalar(self, ctype: str, field: str, value: int) -> str:
        """Declare ``sym_field``; return its name."""
        name = f"{self.sym}_{field}"
        self.decls.append(f"static const {ctype} {name} {self.up}_ROM = {int(value)};\n")
        self.kinds.add(self._kind(ctype))
        return name

    def read(self, ctype: str, address: str) -> str:
        """A read of the const at ``address`` through the hook."""
        return f"{self.up}_ROM_READ_{self._kind(ctype)}({address})"


def _defines(table: LookupTable, up: str) -> list:
    cur = table.current
    defines = [(f"STATUS_{s.name}", int(s), d) for s, d in (
        (TableStatus.OK, "reading inside the operating range"),
        (TableStatus.COLDER_THAN_RANGE, "reading colder than the range: output held at its cold end"),
        (TableStatus.HOTTER_THAN_RANGE, "reading hotter than the range: output held at its hot end"),
        (TableStatus.SENSOR_FAULT, "open/short sensor: safe DAC code"))]
    defines += [
        ("ADC_BITS", table.adc_bits, "temperature ADC resolution"),
        ("DAC_BITS", table.dac_bits, "bias DAC resolution"),
        ("ADC_CODE_LO", table.code_lo, "first ADC code of the operating range"),
        ("ADC_CODE_HI", table.code_hi, "last ADC code of the operating range"),
        ("ADC_FAULT_LO", table.fault_lo, "codes below this are sensor faults"),
        ("ADC_FAULT_HI", table.fault_hi, "codes above this are sensor faults"),
        ("SAFE_DAC_CODE", table.safe_dac_code, "DAC code for a sensor fault"),
        ("SAFE_STATE_NEEDS_SHUTDOWN_LINE", int(bool(table.safe_state and table.safe_state.needs_shutdown_line)),
         "1: no DAC code holds the SiPM below breakdown"),
        ("DAC_MIN", table.dac_min, "lowest DAC code the function returns in range"),
        ("DAC_MAX", table.dac_max, "highest DAC code the function returns in range"),
        ("ENTRIES", table.entries, f"table rows ({'coefficients' if table.layout == 'polynomial' else 'nodes'})"),
        ("TABLE_BYTES", table.table_bytes, "bytes of const table data"),
    ]
    if table.layout == "segmented":
        span = int(np.sum(np.left_shift(1, table.segment_shift)))
        defines.append(("SEGMENTS_SPAN", span, "ADC codes covered by the segments"))
    if cur is not None:
        defines += [
            ("CURRENT_BITS", cur.current_bits, "SiPM current ADC resolution"),
            ("CURRENT_CODE_MAX", cur.current_code_max, "larger current codes are limited to this"),
            ("CURRENT_SHIFT", cur.shift, "fractional bits of the correction factor"),
        ]
    return defines


def _header_notes(table: LookupTable, sym: str, up: str) -> list:
    below = "colder" if table.below_status == TableStatus.COLDER_THAN_RANGE else "hotter"
    above = "hotter" if below == "colder" else "colder"
    notes = [
        " *\n",
        f" * {sym}(adc_code) returns the DAC code for a raw temperature ADC code:\n",
        f" *   codes {table.code_lo}..{table.code_hi} (the operating range) are interpolated"
        f" ({table.layout} layout);\n",
        f" *   codes {table.fault_lo}..{table.code_lo - 1} ({below} than the range) and {table.code_hi + 1}.."
        f"{table.fault_hi} ({above}) are\n",
        " *   held at the value of the nearer end of the range;\n",
        f" *   any other code (open or shorted sensor, rail) gives {up}_SAFE_DAC_CODE.\n",
        f" * {sym}_status(adc_code) tells which case applies ({up}_STATUS_*).\n",
    ]
    safe = table.safe_state
    if safe is not None and safe.below_breakdown:
        notes.append(
            " *\n"
            f" * Sensor fault: {up}_SAFE_DAC_CODE gives at most {safe.max_output_v:.3f} V (every supply tolerance\n"
            f" *   against it), below the SiPM breakdown of {safe.min_breakdown_v:.3f} V at {safe.coldest_temp_c:g} C"
            f" (calibration\n *   uncertainty against it): {safe.margin_v:.3f} V of margin.\n")
    elif safe is not None:
        words = SHUTDOWN_LINE_TEXT.split()
        lines, line = [], ""
        for word in words:
            if len(line) + len(word) > 66:
                lines.append(line)
                line = ""
            line = f"{line} {word}".strip()
        lines.append(line)
        notes.append(
            " *\n"
            " * WARNING: NO SAFE DAC CODE. The supply's lowest output is up to\n"
            f" *   {safe.max_output_v:.3f} V, {-safe.margin_v:.3f} V above the SiPM breakdown of "
            f"{safe.min_breakdown_v:.3f} V at {safe.coldest_temp_c:g} C,\n"
            f" *   so {up}_SAFE_DAC_CODE does NOT switch the SiPM off. The board needs\n"
            + "".join(f" *   {ln}\n" for ln in lines)
            + f" *   ({up}_STATUS_SENSOR_FAULT from {sym}_status()).\n")
    if table.layout == "polynomial":
        notes.append(" *\n * The polynomial is evaluated with int64_t products: on a core without a 64-bit\n"
                     " *   multiply that is a library call (a few hundred cycles).\n")
    notes.append(
        " *\n"
        f" * Const data is declared with {up}_ROM after the declarator and read with\n"
        f" *   {up}_ROM_READ_<type>(address); both default to plain C. On a Harvard-architecture\n"
        " *   microcontroller define them, before this header is included, as the attribute that\n"
        " *   places data in program memory and the routines that read it from there.\n")
    return notes


def render_table_c(table: LookupTable, profiles, name: str = DEFAULT_FUNCTION_NAME, settings: dict | None = None,
                   *, prefix: str = "") -> dict:
    """Render the C99 header and source of a lookup table.

    Parameters
    ----------
    table : LookupTable
        The table to render.
    profiles : sequence of profile objects
        The sipm and board profiles the table came from (for the banner).
    name : str
        Lookup function name; with ``prefix``, the file stem and the start of every symbol.
    settings : dict, optional
        Options that shaped the table, written into the banner.
    prefix : str
        Namespace prefix of every generated symbol (``""`` for none).

    Returns
    -------
    dict
        ``{"SYM.h": text, "SYM.c": text}`` with ``SYM = prefix + name``.
    """
    sym = _symbol(name, prefix)
    up = sym.upper()
    ct, vt = f"uint{table.code_type_bits}_t", f"uint{table.value_type_bits}_t"
    acc = f"{sym}_acc_t"
    banner = c_banner(f"SiPM bias lookup table ({table.layout} layout): temperature ADC code -> bias DAC code",
                      profiles, settings)
    data = _Data(sym, up)
    body, asserts = _layout_body(table, sym, up, data)
    cur = table.current

    h = [banner, f"#ifndef {up}_H\n#define {up}_H\n\n#include <stdint.h>\n\n/*\n"]
    h += [f" * {line}\n" for line in _SAFETY]
    h += _header_notes(table, sym, up)
    if cur is not None:
        h.append(
            " *\n"
            f" * {sym}{CURRENT_FUNCTION_SUFFIX}(adc_code, current_code) also corrects the drop across the\n"
            f" *   {cur.series_resistor_ohm:g} ohm series resistor from the raw code of the SiPM current ADC: the\n"
            f" *   table holds the bias for zero current; the function adds {up}_CURRENT_FACTOR * current_code\n"
            f" *   / 2^{up}_CURRENT_SHIFT DAC codes (rounded half up; about {cur.dac_codes_per_current_code:.6g} per\n"
            f" *   current code), with current_code limited to {up}_CURRENT_CODE_MAX ({cur.limit_reason}),\n"
            f" *   then clamps to {up}_DAC_MIN..{up}_DAC_MAX. A sensor fault still gives\n"
            f" *   {up}_SAFE_DAC_CODE, never a corrected code. A wrong current reading (open or\n"
            f" *   saturated sense stage) raises the output by at most {cur.max_correction_v:.3f} V, which keeps\n"
            " *   the SiPM within its max_overvoltage_v at the temperature read, even with no current flowing.\n")
    h.append(" */\n\n")
    defines = _defines(table, up)
    width = max(len(f"{up}_{k}") for k, _, _ in defines)
    if cur is not None:
        width = max(width, len(f"{up}_CURRENT_FACTOR"))
    for key, value, comment in defines:
        h.append(f"#define {f'{up}_{key}':<{width}} {int(value)}u /* {comment} */\n")
    if cur is not None:
        lit = f"INT{cur.acc_type_bits}_C({abs(cur.factor)})"
        h.append(f"#define {f'{up}_CURRENT_FACTOR':<{width}} ({'-' if cur.factor < 0 else ''}{lit}) "
                 f"/* DAC codes per current code, times 2^{up}_CURRENT_SHIFT */\n")
    h.append(f"\n/* Placement hook for the const tables (see above). */\n#ifndef {up}_ROM\n#define {up}_ROM\n#endif\n")
    for kind in sorted(data.kinds):
        h.append(f"#ifndef {up}_ROM_READ_{kind}\n#define {up}_ROM_READ_{kind}(address) (*(address))\n#endif\n")
    h.append("\n#ifdef __cplusplus\nextern \"C\" {\n#endif\n")
    h.append(f"\n/* Bias DAC code for a raw temperature ADC code (integer only, no division). */\n"
             f"{c_function_signature(table, name, prefix=prefix)};\n\n")
    h.append(f"/* {up}_STATUS_* for a raw temperature ADC code. */\nuint8_t {sym}_status({ct} adc_code);\n\n")
    if cur is not None:
        h.append(f"/* Bias DAC code with the series-resistor drop of the measured SiPM current added. */\n"
                 f"{c_current_function_signature(table, name, prefix=prefix)};\n\n")
    h.append("#ifdef __cplusplus\n}\n#endif\n\n")
    h.append(f"#endif /* {up}_H */\n")

    c = [banner, f'#include "{sym}.h"\n\n']
    c.append(
        "#if (defined(__STDC_VERSION__) && __STDC_VERSION__ >= 201112L) || defined(__GNUC__)\n"
        f"#define {up}_STATIC_ASSERT(cond, msg) _Static_assert(cond, msg)\n"
        "#else\n"
        f"#define {up}_STATIC_ASSERT(cond, msg) extern char {sym}_static_assert[(cond) ? 1 : -1]\n"
        "#endif\n\n")
    c.append(f"typedef int{table.acc_type_bits}_t {acc};\n\n")
    if cur is not None:
        c.append(f"typedef int{cur.acc_type_bits}_t {sym}_corr_t;\n\n")
    c += data.decls
    if cur is not None:
        asserts += [
            (f"{up}_CURRENT_CODE_MAX < (1ul << {up}_CURRENT_BITS)", "current code limit"),
            (f"{up}_CURRENT_SHIFT < {cur.acc_type_bits - 1}u", "correction shift"),
        ]
    asserts += [
        (f"sizeof({acc}) * 8 == {table.acc_type_bits}", "accumulator width"),
        (f"{up}_ADC_FAULT_LO <= {up}_ADC_CODE_LO && {up}_ADC_CODE_HI <= {up}_ADC_FAULT_HI", "fault band"),
        (f"{up}_DAC_MIN <= {up}_DAC_MAX && {up}_DAC_MAX < (1ul << {up}_DAC_BITS)", "output clamp"),
        (f"{up}_SAFE_DAC_CODE < (1ul << {up}_DAC_BITS)", "safe code"),
    ]
    c.append("\n")
    for cond, msg in asserts:
        c.append(f'{up}_STATIC_ASSERT({cond}, "{msg}");\n')
    c.append("\n" + c_floor_shift_function(f"{sym}_floor_shift", acc) + "\n")
    below_s, above_s = table.below_status.name, table.above_status.name
    c.append(
        f"uint8_t {sym}_status({ct} adc_code)\n"
        "{\n"
        f"    if (adc_code < {up}_ADC_FAULT_LO || adc_code > {up}_ADC_FAULT_HI) {{\n"
        f"        return (uint8_t){up}_STATUS_SENSOR_FAULT;\n"
        "    }\n"
        f"    if (adc_code < {up}_ADC_CODE_LO) {{\n"
        f"        return (uint8_t){up}_STATUS_{below_s};\n"
        "    }\n"
        f"    if (adc_code > {up}_ADC_CODE_HI) {{\n"
        f"        return (uint8_t){up}_STATUS_{above_s};\n"
        "    }\n"
        f"    return (uint8_t){up}_STATUS_OK;\n"
        "}\n\n")
    c.append(
        f"{c_function_signature(table, name, prefix=prefix)}\n"
        "{\n"
        f"    {acc} y;\n"
        f"    if (adc_code < {up}_ADC_FAULT_LO || adc_code > {up}_ADC_FAULT_HI) {{\n"
        f"        return ({vt}){up}_SAFE_DAC_CODE;\n"
        "    }\n"
        f"    if (adc_code < {up}_ADC_CODE_LO) {{\n"
        f"        return ({vt}){table.below_dac_code}u; /* value at the low-code end of the range */\n"
        "    }\n"
        f"    if (adc_code > {up}_ADC_CODE_HI) {{\n"
        f"        return ({vt}){table.above_dac_code}u; /* value at the high-code end of the range */\n"
        "    }\n")
    c.append(body)
    c.append(
        f"    if (y < ({acc}){up}_DAC_MIN) {{\n"
        f"        y = ({acc}){up}_DAC_MIN;\n"
        "    }\n"
        f"    if (y > ({acc}){up}_DAC_MAX) {{\n"
        f"        y = ({acc}){up}_DAC_MAX;\n"
        "    }\n"
        f"    return ({vt})y;\n"
        "}\n")
    if cur is not None:
        c.append(_render_current_c(table, name, prefix, sym, up, vt))
    return {f"{sym}.h": "".join(h), f"{sym}.c": "".join(c)}


def _lit(value: int, bits: int) -> str:
    return str(int(value)) if abs(int(value)) < (1 << 31) or bits < 64 else c_int_literal(value, 64)


def _layout_body(table: LookupTable, sym: str, up: str, data: _Data) -> tuple[str, list]:
    """The in-range evaluation of the table's layout, and the static checks of its data."""
    acc = f"{sym}_acc_t"
    fs = f"{sym}_floor_shift"
    bits = table.acc_type_bits
    if table.layout in ("uniform", "segmented"):
        nt = f"uint{table.node_type_bits}_t"
        unit = "DAC codes" if not table.node_frac_bits else f"DAC codes times 2^{table.node_frac_bits}"
        round_g = (f"        y = {fs}(y + {_lit(half(table.node_frac_bits), bits)}, {table.node_frac_bits}u);"
                   " /* to whole DAC codes */\n" if table.node_frac_bits else "")
    if table.layout == "uniform":
        data.decls.append(f"/* Nodes every 2^{table.shift} ADC codes from {up}_ADC_CODE_LO, {unit}. */\n")
        y = data.array(nt, "y", table.y)
        body = (
            "    {\n"
            f"        const uint32_t d = (uint32_t)adc_code - {up}_ADC_CODE_LO;\n"
            f"        const uint32_t i = d >> {table.shift};\n"
            f"        const {acc} r = ({acc})(d & {(1 << table.shift) - 1}u);\n"
            f"        const {acc} y0 = ({acc}){data.read(nt, f'&{y}[i]')};\n"
            f"        const {acc} delta = ({acc}){data.read(nt, f'&{y}[i + 1u]')} - y0;\n"
            f"        y = y0 + {fs}(delta * r + {_lit(half(table.shift), bits)}, {table.shift}u);\n"
            + round_g + "    }\n")
        asserts = [
            (f"sizeof({y}) / sizeof({y}[0]) == {up}_ENTRIES", "node count"),
            (f"sizeof({y}) == {up}_TABLE_BYTES", "table size"),
            (f"(({acc}){up}_ENTRIES - 1) << {table.shift} > ({acc})({up}_ADC_CODE_HI - {up}_ADC_CODE_LO)",
             "nodes cover the operating range"),
        ]
    elif table.layout == "segmented":
        data.decls.append(f"/* Nodes ({unit}) at the ends of segments 2^k ADC codes wide, from "
                          f"{up}_ADC_CODE_LO; k per segment. */\n")
        y = data.array(nt, "y", table.y)
        k = data.array("uint8_t", "segment_shift", table.segment_shift, per_line=16)
        body = (
            "    {\n"
            f"        uint32_t d = (uint32_t)adc_code - {up}_ADC_CODE_LO;\n"
            "        uint32_t i = 0u;\n"
            f"        unsigned k = (unsigned){data.read('uint8_t', f'&{k}[0]')};\n"
            f"        {acc} y0;\n"
            "        while (d >= ((uint32_t)1 << k)) { /* the segments cover the range: this ends */\n"
            "            d -= (uint32_t)1 << k;\n"
            "            i++;\n"
            f"            k = (unsigned){data.read('uint8_t', f'&{k}[i]')};\n"
            "        }\n"
            f"        y0 = ({acc}){data.read(nt, f'&{y}[i]')};\n"
            f"        y = y0 + {fs}((({acc}){data.read(nt, f'&{y}[i + 1u]')} - y0) * ({acc})d\n"
            f"                      + ((({acc})1 << k) >> 1), k);\n"
            + round_g + "    }\n")
        asserts = [
            (f"sizeof({y}) / sizeof({y}[0]) == {up}_ENTRIES", "node count"),
            (f"sizeof({k}) / sizeof({k}[0]) == {up}_ENTRIES - 1u", "segment count"),
            (f"sizeof({y}) + sizeof({k}) == {up}_TABLE_BYTES", "table size"),
            (f"{up}_SEGMENTS_SPAN > {up}_ADC_CODE_HI - {up}_ADC_CODE_LO", "segments cover the operating range"),
        ]
    elif table.layout == "optimised":
        ct, vt, st = (f"uint{table.code_type_bits}_t", f"uint{table.value_type_bits}_t",
                      f"int{table.slope_type_bits}_t")
        data.decls.append(f"/* Breakpoints (ADC codes), values at them (DAC codes) and slopes (DAC codes per ADC code,"
                          f" times 2^{table.slope_frac_bits}). */\n")
        x = data.array(ct, "x", table.x)
        y = data.array(vt, "y", table.y)
        s = data.array(st, "slope", table.slope)
        body = (
            "    {\n"
            "        /* Largest i with x[i] <= adc_code (x[0] is the first code of the range). */\n"
            f"        uint32_t lo = 0u, hi = {up}_ENTRIES - 1u;\n"
            "        while (lo < hi) {\n"
            "            const uint32_t mid = (lo + hi + 1u) >> 1;\n"
            f"            if ({data.read(ct, f'&{x}[mid]')} <= adc_code) {{\n"
            "                lo = mid;\n"
            "            } else {\n"
            "                hi = mid - 1u;\n"
            "            }\n"
            "        }\n"
            f"        y = ({acc}){data.read(vt, f'&{y}[lo]')} + {fs}(\n"
            f"            ({acc}){data.read(st, f'&{s}[lo]')} * ({acc})(adc_code - {data.read(ct, f'&{x}[lo]')}) "
            f"+ {_lit(half(table.slope_frac_bits), bits)}, {table.slope_frac_bits}u);\n"
            "    }\n")
        asserts = [
            (f"sizeof({x}) / sizeof({x}[0]) == {up}_ENTRIES", "breakpoint count"),
            (f"sizeof({y}) / sizeof({y}[0]) == {up}_ENTRIES", "value count"),
            (f"sizeof({s}) / sizeof({s}[0]) == {up}_ENTRIES", "slope count"),
            (f"sizeof({x}) + sizeof({y}) + sizeof({s}) == {up}_TABLE_BYTES", "table size"),
        ]
    else:
        m = table.y.size - 1
        data.decls.append(f"/* Polynomial in x = adc_code - {table.center_code}: coefficient j in DAC codes per "
                          f"code^j, scaled by 2^Q_j (Q_0 = {table.node_frac_bits}). */\n")
        names = [data.scalar(f"int{w}_t", f"c{j}", v) for j, (w, v) in enumerate(zip(table.coeff_type_bits, table.y))]
        types = [f"int{w}_t" for w in table.coeff_type_bits]
        lines = [
            "    {\n",
            f"        const {acc} x = ({acc})adc_code - ({acc}){table.center_code};\n",
            f"        {acc} a = ({acc}){data.read(types[m], '&' + names[m])};\n",
        ]
        for j in range(m - 1, -1, -1):
            lines.append(f"        a = ({acc}){data.read(types[j], '&' + names[j])} + {fs}(a * x, "
                         f"{int(table.coeff_shift[j])}u);\n")
        lines.append(f"        y = {fs}(a + {_lit(half(table.node_frac_bits), 64)}, {table.node_frac_bits}u);\n")
        lines.append("    }\n")
        body = "".join(lines)
        asserts = [(" + ".join(f"sizeof({n})" for n in names) + f" == {up}_TABLE_BYTES", "table size")]
    return body, asserts


def _render_current_c(table: LookupTable, name: str, prefix: str, sym: str, up: str, vt: str) -> str:
    """The correction and the entry point with the measured current."""
    cur = table.current
    it = f"uint{cur.current_type_bits}_t"
    corr = f"{sym}_corr_t"
    return (
        f"\n/* Drop correction in DAC codes: floor((K c + 2^(Q-1)) / 2^Q), c limited to {up}_CURRENT_CODE_MAX. */\n"
        f"static {corr} {sym}_current_delta({it} current_code)\n"
        "{\n"
        f"    const {corr} c = (current_code > {up}_CURRENT_CODE_MAX)\n"
        f"        ? ({corr}){up}_CURRENT_CODE_MAX : ({corr})current_code;\n"
        f"    const {corr} p = ({corr}){up}_CURRENT_FACTOR * c + ({corr}){half(cur.shift)};\n"
        "    if (p >= 0) {\n"
        f"        return p >> {up}_CURRENT_SHIFT;\n"
        "    }\n"
        f"    return -((-p + ((({corr})1 << {up}_CURRENT_SHIFT) - 1)) >> {up}_CURRENT_SHIFT);\n"
        "}\n\n"
        f"{c_current_function_signature(table, name, prefix=prefix)}\n"
        "{\n"
        f"    {corr} y;\n"
        f"    if (adc_code < {up}_ADC_FAULT_LO || adc_code > {up}_ADC_FAULT_HI) {{\n"
        f"        return ({vt}){up}_SAFE_DAC_CODE; /* never corrected */\n"
        "    }\n"
        f"    y = ({corr}){sym}(adc_code) + {sym}_current_delta(current_code);\n"
        f"    if (y < ({corr}){up}_DAC_MIN) {{\n"
        f"        y = ({corr}){up}_DAC_MIN;\n"
        "    }\n"
        f"    if (y > ({corr}){up}_DAC_MAX) {{\n"
        f"        y = ({corr}){up}_DAC_MAX;\n"
        "    }\n"
        f"    return ({vt})y;\n"
        "}\n")


def default_sweep_mode(adc_bits: int) -> str:
    """``"full"`` up to :data:`FULL_SWEEP_MAX_ADC_BITS` ADC bits, ``"summary"`` above.

    Parameters
    ----------
    adc_bits : int
        Resolution of the temperature ADC.
    """
    return "full" if adc_bits <= FULL_SWEEP_MAX_ADC_BITS else "summary"


def render_sweep_csv(sweep: TableSweep, *, mode: str = "full") -> str:
    """``sweep.csv``: one row per ADC code of the operating range, or a summary by blocks of codes.

    Parameters
    ----------
    sweep : TableSweep
        The table checked at every code (the check covers every code whatever the mode).
    mode : {"full", "summary"}
        ``full``: columns ``adc_code,temp_c,ideal_bias_v,table_dac_code,table_bias_v,gain_error_pct``,
        one row per code. ``summary``: consecutive blocks of ``2^k`` codes (the
        smallest ``k`` giving at most 1024 rows), each with its first and last
        code, temperature and DAC code, its largest absolute gain error and
        where that sits.

    Returns
    -------
    str
    """
    if mode == "summary":
        return _render_summary(sweep)
    if mode != "full":
        raise ModelError(f"sweep mode must be 'full' or 'summary' to render, got {mode!r}", key="sweep")
    rows = [",".join(SWEEP_COLUMNS)]
    for code, t, ideal, dac, out, err in zip(sweep.adc_code.tolist(), sweep.temp_c.tolist(),
                                             sweep.ideal_bias_v.tolist(), sweep.table_dac_code.tolist(),
                                             sweep.table_bias_v.tolist(), sweep.gain_error_pct.tolist()):
        rows.append(f"{code},{t:.4f},{ideal:.6f},{dac},{out:.6f},{err:.6f}")
    return "\n".join(rows) + "\n"


def _render_summary(sweep: TableSweep) -> str:
    n = sweep.adc_code.size
    k = 0
    while (n + (1 << k) - 1) >> k > SUMMARY_MAX_ROWS:
        k += 1
    size = 1 << k
    starts = np.arange(0, n, size)
    ends = np.minimum(starts + size, n) - 1
    err = np.abs(sweep.gain_error_pct)
    worst = np.maximum.reduceat(err, starts)
    where = [int(s + np.argmax(err[s:e + 1])) for s, e in zip(starts, ends)]
    rows = [",".join(SUMMARY_COLUMNS)]
    for s, e, w, i in zip(starts.tolist(), ends.tolist(), worst.tolist(), where):
        rows.append(f"{int(sweep.adc_code[s])},{int(sweep.adc_code[e])},{sweep.temp_c[s]:.4f},{sweep.temp_c[e]:.4f},"
                    f"{int(sweep.table_dac_code[s])},{int(sweep.table_dac_code[e])},{w:.6f},{int(sweep.adc_code[i])}")
    return "\n".join(rows) + "\n"

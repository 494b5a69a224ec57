"""Numeric CSV tables at the edge: bench exports as they come, one located problem per bad file.

What is accepted (common practice of meters and source-measure units):

* separators ``,``, ``;`` or tab, found from the header line; with ``;`` or tab
  a decimal comma (``24,50``) is read as a decimal point;
* lines starting with ``#`` are comments, blank lines are skipped, quoted
  cells may span lines (line numbers stay those of the file);
* UTF-8 (with or without a byte-order mark); a file that is not UTF-8 is read
  as latin-1 and a note says so;
* column names are matched case-insensitively and extra columns are ignored;
  the physical quantities bias, current and temperature are recognised under
  the usual names with their unit in the name (``bias_v``, ``current_ua``,
  ``I (A)``, ``Voltage [V]``, ``Temperature / K``) or in a units row under
  the header, and are converted to volt, ampere and degree Celsius; every
  conversion is stated in :attr:`Table.notes`;
* ``columns`` maps a canonical name to a column of the file (with an optional
  unit), for headers no rule recognises.

Anything ambiguous (two columns for one quantity, a column without a unit,
duplicate column names, an unknown unit) is refused with the file, the line
and a suggestion. A file that cannot be used raises
:class:`~compensator.errors.InputError` with a single
:class:`~compensator.errors.Problem`, so a batch can report it and go on.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import NamedTuple

import numpy as np

from compensator.errors import InputError, Problem

__all__ = ["QUANTITIES", "Table", "csv_rows", "fail", "parse_columns_option", "read_table", "read_text"]


@dataclass(frozen=True)
class _Quantity:
    """A physical quantity a column may carry: its names and units (factor, offset) to the canonical unit."""

    canonical: str
    names: tuple
    units: dict
    unit_words: dict = field(default_factory=dict)


#: Quantities recognised under several names and units (canonical name -> quantity).
QUANTITIES = {
    "bias_v": _Quantity("bias_v", ("bias", "voltage", "v", "u", "vbias", "bias voltage", "reverse bias", "vr",
                                   "v_bias", "bias_voltage"),
                        {"v": (1.0, 0.0), "mv": (1e-3, 0.0), "kv": (1e3, 0.0)},
                        {"v": "volt", "mv": "millivolt", "kv": "kilovolt"}),
    "current_a": _Quantity("current_a", ("current", "i", "ir", "reverse current", "i_reverse", "current_reverse"),
                           {"a": (1.0, 0.0), "ma": (1e-3, 0.0), "ua": (1e-6, 0.0), "na": (1e-9, 0.0),
                            "pa": (1e-12, 0.0), "fa": (1e-15, 0.0)},
                           {"a": "ampere", "ma": "milliampere", "ua": "microampere", "na": "nanoampere",
                            "pa": "picoampere", "fa": "femtoampere"}),
    "temp_c": _Quantity("temp_c", ("temp", "temperature", "t"),
                        {"c": (1.0, 0.0), "degc": (1.0, 0.0), "k": (1.0, -273.15)},
                        {"c": "degree Celsius", "degc": "degree Celsius", "k": "kelvin"}),
}
_UNIT_SPELLINGS = {"µa": "ua", "μa": "ua", "°c": "c", "deg c": "c", "celsius": "c", "kelvin": "k", "volt": "v",
                   "volts": "v", "amp": "a", "amps": "a", "ampere": "a"}


@dataclass(frozen=True)
class Table:
    """Numeric (and requested text) columns of one CSV file.

    Attributes
    ----------
    file : str
        Path as given.
    columns : dict of str -> ndarray
        Requested numeric columns that are present, by their canonical name, in canonical units.
    names : dict of str -> str
        Canonical name -> column name as written in the file.
    lines : ndarray of int
        1-based line number of each data row.
    header_line : int
        1-based line number of the header row.
    text : dict of str -> tuple of str
        Requested text columns that are present.
    notes : tuple of str
        What was assumed or converted (separator, decimal comma, units, encoding).
    """

    file: str
    columns: dict
    names: dict
    lines: np.ndarray
    header_line: int = 1
    text: dict = field(default_factory=dict)
    notes: tuple = ()


def fail(file, line, key, reason):
    """Raise an :class:`InputError` holding one :class:`Problem`.

    Parameters
    ----------
    file : str or path-like
        The file as the user gave it.
    line : int
        1-based line (0 when the whole file is at fault).
    key : str
        The column at fault ("" for none).
    reason : str
        What is wrong.
    """
    raise InputError(Problem(str(file), line, key, reason))


def _decode(path, data: bytes):
    """Text of the file and a note when it was not UTF-8."""
    if b"\x00" in data:
        line = data[:data.index(b"\x00")].count(b"\n") + 1
        fail(path, line, "", "not a text file (a NUL byte); export the data as CSV text")
    try:
        return data.decode("utf-8-sig"), ""
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        return data.decode("latin-1"), f"line {line} is not UTF-8; the file was read as latin-1"


def read_text(path) -> str:
    """The file's text (UTF-8, an optional byte-order mark dropped, latin-1 otherwise); one-line errors.

    Parameters
    ----------
    path : str or path-like
        The file.

    Returns
    -------
    str
    """
    return _read_text_noted(path)[0]


def _read_text_noted(path):
    try:
        data = Path(path).read_bytes()
    except IsADirectoryError:
        fail(path, 0, "", "is a directory, not a file")
    except FileNotFoundError:
        fail(path, 0, "", "no such file")
    except OSError as exc:
        fail(path, 0, "", f"cannot read: {exc.strerror or exc}")
    return _decode(path, data)


def _strip_comments(text):
    """The text with comment lines blanked (line numbers kept)."""
    return "\n".join("" if ln.lstrip().startswith("#") else ln for ln in text.split("\n"))


def _delimiter(path, text):
    """The separator of the header line: the most frequent of ``,``, ``;`` and tab."""
    header = next((ln for ln in text.split("\n") if ln.strip()), "")
    counts = {d: header.count(d) for d in (",", ";", "\t")}
    best = max(counts.values())
    if best == 0:
        return ","
    winners = [d for d, c in counts.items() if c == best]
    if len(winners) > 1:
        line = text.split("\n").index(header) + 1
        names = " and ".join(repr(w) for w in winners)
        fail(path, line, "", f"the header holds {names} equally often; use one separator (comma, semicolon or tab)")
    return winners[0]


def csv_rows(path, expected):
    """Records of a CSV file without comments and blank lines: ``[(line number, cells)]`` and notes.

    Parameters
    ----------
    path : str or path-like
        The file.
    expected : str
        What the file should hold (for the message of an empty file).

    Returns
    -------
    rows : list of (int, list of str)
        1-based line of the start of each record, and its cells.
    notes : list of str
        Separator and encoding notes.
    delimiter : str
    """
    text, note = _read_text_noted(path)
    return _rows_of_text(path, text, note, expected)


def _rows_of_text(path, text, note, expected):
    notes = [note] if note else []
    text = _strip_comments(text.replace("\r\n", "\n").replace("\r", "\n"))
    delimiter = _delimiter(path, text)
    if delimiter != ",":
        notes.append(f"separator {'tab' if delimiter == chr(9) else repr(delimiter)}")
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    rows = []
    last = 0
    try:
        for cells in reader:
            start, last = last + 1, reader.line_num
            if cells and any(c.strip() for c in cells):
                rows.append((start, cells))
    except csv.Error as exc:
        fail(path, reader.line_num, "", f"not readable as CSV: {exc}")
    if not rows:
        fail(path, 0, "", f"empty file (expected {expected})")
    return rows, notes, delimiter


_BRACKET = re.compile(r"^(.*?)\s*[\(\[]\s*([^\)\]]*)\s*[\)\]]\s*$")
_SLASH = re.compile(r"^(.*?)\s*/\s*(\S+)\s*$")


def _unit_word(text):
    u = text.strip().lower()
    u = _UNIT_SPELLINGS.get(u, u)
    return u.replace("µ", "u").replace("μ", "u").replace("°", "")


def _split_header(cell):
    """(name, unit or None) of a header cell: ``name (unit)``, ``name [unit]``, ``name / unit`` or plain."""
    h = cell.strip().lower()
    for pattern in (_BRACKET, _SLASH):
        m = pattern.match(h)
        if m and m.group(1):
            return m.group(1).strip(), _unit_word(m.group(2))
    return h, None


def _is_number(cell, delimiter):
    return _parse_number(cell, delimiter) is not None


_DECIMAL_COMMA = re.compile(r"^[-+]?\d*,\d+([eE][-+]?\d+)?$")


def _parse_number(cell, delimiter):
    text = cell.strip()
    if delimiter != "," and _DECIMAL_COMMA.match(text):
        text = text.replace(",", ".")
    try:
        return float(text)
    except ValueError:
        return None


def parse_columns_option(text):
    """Parse ``--columns NAME=COL[:UNIT],...`` into ``{canonical name: (column, unit or None)}``.

    Parameters
    ----------
    text : str
        E.g. ``"bias=Vsrc,current=Imeas:ua,temp=T"``; the names ``bias``, ``current``
        and ``temp`` stand for ``bias_v``, ``current_a`` and ``temp_c``.

    Returns
    -------
    dict

    Raises
    ------
    InputError
        A malformed entry or an unknown name.
    """
    short = {"bias": "bias_v", "current": "current_a", "temp": "temp_c", "channel": "channel"}
    out = {}
    for part in filter(None, (p.strip() for p in str(text).split(","))):
        name, sep, col = part.partition("=")
        name = name.strip().lower()
        if not sep or not col.strip():
            raise InputError(Problem("<command line>", 0, "--columns",
                                     f"expected NAME=COLUMN[:UNIT], got {part!r}"))
        if name not in short and name not in short.values():
            raise InputError(Problem("<command line>", 0, "--columns",
                                     f"unknown name {name!r} (use bias, current, temp or channel)"))
        column, _, unit = col.partition(":")
        out[short.get(name, name)] = (column.strip(), _unit_word(unit) if unit.strip() else None)
    return out


def read_table(path, required, optional=(), prefixes=(), *, columns=None, text=()) -> Table:
    """Read the named numeric columns of a CSV file.

    Parameters
    ----------
    path : str or path-like
        CSV file with a header row.
    required : sequence of str
        Canonical column names that must be present.
    optional : sequence of str
        Canonical column names read when present.
    prefixes : sequence of str
        Canonical names that also match ``NAME_<unit>`` (e.g. ``charge_pc``).
    columns : dict, optional
        ``{canonical name: (column name, unit or None)}`` chosen by the user
        (see :func:`parse_columns_option`); they win over every rule.
    text : sequence of str
        Canonical names of text columns (e.g. ``channel``) read when present.

    Returns
    -------
    Table

    Raises
    ------
    InputError
        One problem: unreadable file, no header, a missing, duplicate or
        ambiguous column, a cell that is not a finite number, or no data rows.
    """
    text_in, note = _read_text_noted(path)
    fast = _read_plain(path, text_in, note, required, optional, prefixes, columns, text)
    if fast is not None:
        return fast
    rows, notes, delimiter = _rows_of_text(path, text_in, note, "a header row and data rows")
    header_line = rows[0][0]
    layout = _resolve_columns(path, rows[:2], notes, delimiter, required, optional, prefixes, columns, text)
    raw, where, factors = layout.raw, layout.where, layout.factors
    body = rows[2:] if layout.units_row else rows[1:]
    if not body:
        fail(path, header_line, "", "no data rows after the header")
    values = {n: [] for n in where if n not in text}
    texts = {n: [] for n in where if n in text}
    lines = []
    comma_seen = False
    for number, cells in body:
        for name, col in where.items():
            label = raw[col]
            if col >= len(cells):
                fail(path, number, label, f"empty cell (the row has {len(cells)} cells, the header {len(raw)})")
            cell = cells[col].strip()
            if not cell:
                fail(path, number, label, "empty cell")
            if name in texts:
                texts[name].append(cell)
                continue
            value = _parse_number(cell, delimiter)
            if value is None:
                hint = ""
                if delimiter == "," and re.fullmatch(r"[-+]?\d+;\d+.*|.*;.*", cell):
                    hint = " (the file looks separated by semicolons but its header is not)"
                fail(path, number, label, f"not a number: {cell!r}{hint}")
            comma_seen |= "," in cell
            if not math.isfinite(value):
                fail(path, number, label, f"not a finite number: {cell!r}")
            values[name].append(value)
        lines.append(number)
    if comma_seen:
        notes.append("decimal commas read as decimal points")
    out = {}
    for name, vals in values.items():
        arr = np.asarray(vals, dtype=float)
        if name in factors:
            factor, offset = factors[name]
            arr = arr * factor + offset
        out[name] = arr
    return Table(str(path), out, {n: raw[c] for n, c in where.items()}, np.asarray(lines, dtype=int), header_line,
                 {n: tuple(v) for n, v in texts.items()}, tuple(notes))


class _Layout(NamedTuple):
    """Where the requested columns are and how to convert them."""

    raw: list
    where: dict
    factors: dict
    units_row: bool


def _resolve_columns(path, head, notes, delimiter, required, optional, prefixes, columns, text) -> _Layout:
    """Columns of the header record (and a units row, if ``head[1]`` is one); appends notes; raises on problems."""
    header_line, header_cells = head[0]
    raw = [h.strip() for h in header_cells]
    header = [h.lower() for h in raw]
    seen = {}
    for i, h in enumerate(header):
        if h and h in seen:
            fail(path, header_line, raw[i], f"columns {seen[h] + 1} and {i + 1} have the same name; rename one")
        seen[h] = i
    split = [_split_header(h) for h in raw]
    body = head[1:]
    units_row = False
    # a units row: no cell is a number, and some cell is a known unit
    if body and not any(_is_number(c, delimiter) for c in body[0][1] if c.strip()):
        known = {u for q in QUANTITIES.values() for u in q.units}
        units = [_unit_word(c.strip().strip("()[]")) for c in body[0][1]]
        if any(u in known for u in units):
            split = [(n, u if u is not None else (units[i] if i < len(units) and units[i] else None))
                     for i, (n, u) in enumerate(split)]
            notes.append(f"units row on line {body[0][0]}")
            units_row = True
    where, factors = {}, {}
    columns = dict(columns or {})
    for name in list(required) + list(optional) + list(text):
        if name in columns:
            col, unit = columns[name]
            if col.lower() not in header:
                fail(path, header_line, col, f"--columns: no such column (the header has {', '.join(raw)})")
            i = header.index(col.lower())
            where[name] = i
            if name in QUANTITIES:
                factors[name] = _unit_factor(path, header_line, raw[i], name, unit or split[i][1] or _suffix_unit(
                    header[i], QUANTITIES[name]), notes)
            continue
        if name in header:
            where[name] = header.index(name)
            continue
        if name in QUANTITIES:
            found = _find_quantity(path, header_line, raw, split, QUANTITIES[name])
            if found is not None:
                i, unit = found
                where[name] = i
                factors[name] = _unit_factor(path, header_line, raw[i], name, unit, notes)
            continue
        if name in prefixes:
            matches = [i for i, h in enumerate(header) if h.startswith(name + "_")]
            if matches:
                where[name] = matches[0]
    missing = [n for n in required if n not in where]
    if missing:
        present = ", ".join(h for h in raw if h) or "none"
        hint = ""
        if delimiter == "," and len(raw) == 1 and re.search(r"\s{2,}|\s", raw[0]):
            hint = "; the header is one column: if the file is separated by spaces, save it with commas, tabs or semicolons"
        elif name_hint := _suggest(missing[0], header):
            hint = f"; {name_hint}"
        fail(path, header_line, missing[0], f"missing column (need {', '.join(required)}; the header has {present}{hint})")
    return _Layout(raw, where, factors, units_row)


#: Plain bodies longer than this (characters) are parsed from the file rather than from a copy in memory.
_LARGE_BODY_CHARS = 64_000_000
#: A blank (or whitespace-only) line inside a body of data, searched from the newline before
#: the body (a literal first character keeps the search at C speed).
_BLANK_LINE = re.compile(r"\n[ \t]*(?:\n|$)")


def _read_plain(path, text, note, required, optional, prefixes, columns, text_names):
    """Fast path for plain numeric files: the body parsed at C speed by ``numpy.loadtxt``.

    A file qualifies when it has no quotes and no text column is requested, and
    its body (after the header and an optional units row) has no comment or
    blank line. Anything the fast parser cannot take (a bad cell, a short row,
    a non-finite value) returns None, and the caller's row-by-row reader then
    names the line and the column at fault, so the errors are the same.
    """
    if '"' in text:
        return None
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    head, pos, line_no = [], 0, 0
    while len(head) < 2 and pos < len(text):  # the header and the next record (maybe a units row)
        end = text.find("\n", pos)
        end = len(text) if end < 0 else end
        line_no += 1
        line = text[pos:end]
        pos = end + 1
        if line.strip() and not line.lstrip().startswith("#"):
            head.append((line_no, line, pos))
    if len(head) < 2:
        return None
    delimiter = _delimiter(path, head[0][1])
    notes = [note] if note else []
    if delimiter != ",":
        notes.append(f"separator {'tab' if delimiter == chr(9) else repr(delimiter)}")
    records = [(no, next(csv.reader([line], delimiter=delimiter))) for no, line, _ in head]
    layout = _resolve_columns(path, records, notes, delimiter, required, optional, prefixes, columns, text_names)
    if any(name in layout.where for name in text_names):
        return None
    first = head[1] if layout.units_row else head[0]
    begin, end = first[2], len(text)
    while end > begin and text[end - 1] in " \t\n":  # trailing blank lines (no copy of the body)
        end -= 1
    if end <= begin or text.find("#", begin, end) >= 0 or _BLANK_LINE.search(text, begin - 1, end):
        return None
    rows = text.count("\n", begin, end) + 1
    comma = delimiter != "," and text.find(",", begin, end) >= 0
    names = list(layout.where)
    usecols = [layout.where[n] for n in names]
    try:
        if comma or note or end - begin < _LARGE_BODY_CHARS:  # parse the decoded text (decimal commas, latin-1)
            body = text[begin:end].replace(",", ".") if comma else text[begin:end]
            data = np.loadtxt(io.StringIO(body), delimiter=delimiter, usecols=usecols, dtype=float, comments=None,
                              ndmin=2)
        else:  # a large body straight from the file: no copy of it in memory (a little slower)
            data = np.loadtxt(path, delimiter=delimiter, usecols=usecols, dtype=float, comments=None, ndmin=2,
                              skiprows=first[0], max_rows=rows, encoding="utf-8-sig")
    except (ValueError, IndexError, OSError, UnicodeDecodeError):
        return None
    if data.shape[0] != rows or not np.all(np.isfinite(data)):
        return None
    if comma:
        notes.append("decimal commas read as decimal points")
    out = {}
    for j, name in enumerate(names):
        factor, offset = layout.factors.get(name, (1.0, 0.0))
        out[name] = data[:, j] * factor + offset if name in layout.factors else data[:, j].copy()
    lines = first[0] + 1 + np.arange(rows)
    return Table(str(path), out, {n: layout.raw[c] for n, c in layout.where.items()}, lines, head[0][0], {},
                 tuple(notes))


def _suffix_unit(header, quantity):
    """The unit of ``name_unit`` when ``name`` is one of the quantity's names, else None."""
    name, sep, unit = header.rpartition("_")
    if sep and name in quantity.names and _unit_word(unit) in quantity.units:
        return _unit_word(unit)
    return None


def _find_quantity(path, line, raw, split, quantity):
    """(column index, unit) of the one column that carries ``quantity``, None when none does."""
    candidates = []
    for i, (name, unit) in enumerate(split):
        h = raw[i].lower()
        if unit is None and (u := _suffix_unit(h, quantity)) is not None:
            candidates.append((i, u))
        elif name in quantity.names:
            candidates.append((i, unit))
    if not candidates:
        return None
    if len(candidates) > 1:
        cols = " and ".join(repr(raw[i]) for i, _ in candidates)
        short = quantity.canonical.split("_")[0]
        fail(path, line, raw[candidates[0][0]], f"columns {cols} both look like {short}; choose one with "
                                                f"--columns {short}=COLUMN")
    i, unit = candidates[0]
    if unit is None:
        short = quantity.canonical.split("_")[0]
        units = ", ".join(quantity.units)
        fail(path, line, raw[i], f"no unit: name the unit in the header (e.g. {short}_{next(iter(quantity.units))}, "
                                 f"'{raw[i]} ({next(iter(quantity.units)).upper()})') or give --columns "
                                 f"{short}={raw[i]}:UNIT (one of {units})")
    return i, unit


def _unit_factor(path, line, column, name, unit, notes):
    quantity = QUANTITIES[name]
    canonical_unit = name.rpartition("_")[2]
    if unit is None:
        unit = canonical_unit
    if unit not in quantity.units:
        fail(path, line, column, f"unit {unit!r} is not a unit of {name.split('_')[0]} "
                                 f"(use one of {', '.join(quantity.units)})")
    if column.lower() != name:
        words = quantity.unit_words
        if unit == canonical_unit or words.get(unit) == words.get(canonical_unit):
            notes.append(f"{name} from column '{column}' ({words[unit]})")
        else:
            notes.append(f"{name} from column '{column}' converted from {words[unit]} to {words[canonical_unit]}")
    return quantity.units[unit]


def _suggest(name, header):
    """A hint naming a header that is close to the missing column, or ""."""
    base = name.split("_")[0]
    close = [h for h in header if h.startswith(base) or base.startswith(h.split("_")[0] or "\0")]
    return f"did you mean {close[0]!r}? name it {name}" if close else ""

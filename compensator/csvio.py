"""Numeric CSV tables at the edge: a header row, units in the column names, one located problem per bad file.

Column names are matched case-insensitively, extra columns are ignored and
lines starting with ``#`` are comments. A file that cannot be used raises
:class:`~compensator.errors.InputError` with a single
:class:`~compensator.errors.Problem` naming the file (as given), the line, the
column and the reason, so a batch can report it and go on.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from compensator.errors import InputError, Problem


@dataclass(frozen=True)
class Table:
    """Numeric columns of one CSV file.

    Attributes
    ----------
    file : str
        Path as given.
    columns : dict of str -> ndarray
        Requested columns that are present, by their canonical name.
    names : dict of str -> str
        Canonical name -> column name as written in the file.
    lines : ndarray of int
        1-based line number of each data row.
    header_line : int
        1-based line number of the header row.
    """

    file: str
    columns: dict
    names: dict
    lines: np.ndarray
    header_line: int = 1


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


def read_text(path) -> str:
    """The file's text (UTF-8, an optional byte-order mark dropped); one-line errors for the usual failures."""
    try:
        data = Path(path).read_bytes()
    except IsADirectoryError:
        fail(path, 0, "", "is a directory, not a file")
    except FileNotFoundError:
        fail(path, 0, "", "no such file")
    except OSError as exc:
        fail(path, 0, "", f"cannot read: {exc.strerror or exc}")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        fail(path, 0, "", "not a text file (cannot decode as UTF-8)")


def csv_rows(path, expected):
    """Non-blank, non-comment lines of a CSV file: ``[(line number, text)]`` and their parsed cells."""
    rows = [(n, r) for n, r in enumerate(io.StringIO(read_text(path)), start=1)
            if r.strip() and not r.strip().startswith("#")]
    if not rows:
        fail(path, 0, "", f"empty file (expected {expected})")
    return rows, list(csv.reader([r for _, r in rows]))


def read_table(path, required, optional=(), prefixes=()) -> Table:
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

    Returns
    -------
    Table

    Raises
    ------
    InputError
        One problem: unreadable file, no header, missing column, a cell that
        is not a finite number, or no data rows.
    """
    rows, parsed = csv_rows(path, "a header row and data rows")
    header = [h.strip().lower() for h in parsed[0]]
    header_line = rows[0][0]
    where = {}
    for name in list(required) + list(optional):
        if name in header:
            where[name] = header.index(name)
        elif name in prefixes:
            matches = [i for i, h in enumerate(header) if h.startswith(name + "_")]
            if matches:
                where[name] = matches[0]
    missing = [n for n in required if n not in where]
    if missing:
        present = ", ".join(h for h in header if h) or "none"
        fail(path, header_line, missing[0],
              f"missing column (need {', '.join(required)}; the header has {present})")
    if len(rows) < 2:
        fail(path, header_line, "", "no data rows after the header")
    values = {n: [] for n in where}
    lines = []
    for (number, _), cells in zip(rows[1:], parsed[1:]):
        for name, col in where.items():
            if col >= len(cells):
                fail(path, number, parsed[0][col].strip(),
                     f"empty cell (the row has {len(cells)} cells, the header {len(parsed[0])})")
            if not cells[col].strip():
                fail(path, number, parsed[0][col].strip(), "empty cell")
            text_cell = cells[col].strip()
            try:
                value = float(text_cell)
            except ValueError:
                fail(path, number, parsed[0][col].strip(), f"not a number: {text_cell!r}")
            if not math.isfinite(value):
                fail(path, number, parsed[0][col].strip(), f"not a finite number: {text_cell!r}")
            values[name].append(value)
        lines.append(number)
    return Table(str(path), {n: np.asarray(v, dtype=float) for n, v in values.items()},
                 {n: parsed[0][c].strip() for n, c in where.items()}, np.asarray(lines, dtype=int), header_line)

"""Reading loop experiments from CSV: ``time_s,input,output``, one row per sample.

Lines starting with ``#`` are comments (a demo file keeps its provenance
there). Extra columns are ignored; the three named columns may come in any
order. Every problem names the file, the line and the column.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from compensator.errors import InputError, Problem

COLUMNS = ("time_s", "input", "output")
MIN_ROWS = 10


@dataclass(frozen=True)
class LoopRecord:
    """A recorded loop experiment.

    Attributes
    ----------
    time_s : ndarray
        Sample times, strictly increasing, second.
    input : ndarray
        Actuator signal (units as recorded).
    output : ndarray
        Measured process variable (units as recorded).
    source : str
        Path as given.
    """

    time_s: np.ndarray
    input: np.ndarray
    output: np.ndarray
    source: str = ""


def read_loop_csv(path) -> LoopRecord:
    """Read a ``time_s,input,output`` CSV file.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    LoopRecord

    Raises
    ------
    InputError
        One :class:`~compensator.errors.Problem` naming file, line and column:
        missing file, missing header column, non-numeric or non-finite value,
        time not strictly increasing, fewer than 10 rows.
    """
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(Problem(name, 0, "", "no such file")) from None
    except UnicodeDecodeError:
        raise InputError(Problem(name, 0, "", "not a UTF-8 text file")) from None
    except OSError as exc:
        raise InputError(Problem(name, 0, "", f"cannot read: {exc.strerror or exc}")) from None
    rows = []
    header = None
    header_line = 0
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        cells = next(csv.reader([stripped]))
        if header is None:
            header = [c.strip() for c in cells]
            header_line = number
            for column in COLUMNS:
                if column not in header:
                    raise InputError(Problem(name, number, column,
                                             f"missing column; the header must name {', '.join(COLUMNS)}"))
            index = [header.index(c) for c in COLUMNS]
            continue
        if len(cells) < len(header):
            missing = header[len(cells)] if len(cells) < len(header) else ""
            raise InputError(Problem(name, number, missing, f"row has {len(cells)} cells, header has {len(header)}"))
        values = []
        for column, i in zip(COLUMNS, index):
            raw = cells[i].strip()
            try:
                value = float(raw)
            except ValueError:
                raise InputError(Problem(name, number, column, f"not a number: {raw!r}")) from None
            if not np.isfinite(value):
                raise InputError(Problem(name, number, column, f"not a finite number: {raw!r}"))
            values.append(value)
        if rows and values[0] <= rows[-1][1][0]:
            raise InputError(Problem(name, number, "time_s",
                                     f"time must increase strictly ({values[0]:g} after {rows[-1][1][0]:g})"))
        rows.append((number, values))
    if header is None:
        raise InputError(Problem(name, 0, "", f"empty file; expected a header {','.join(COLUMNS)} and rows"))
    if len(rows) < MIN_ROWS:
        raise InputError(Problem(name, header_line, "", f"only {len(rows)} data rows; at least {MIN_ROWS} needed"))
    data = np.array([v for _, v in rows])
    return LoopRecord(data[:, 0], data[:, 1], data[:, 2], name)

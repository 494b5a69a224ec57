"""Reading loop experiments from CSV: ``time_s,input,output``, one row per sample.

Lines starting with ``#`` are comments (a demo file keeps its provenance
there). Extra columns are ignored; the three named columns may come in any
order. Every problem names the file, the line and the column.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.csvio import read_table
from compensator.errors import InputError, Problem

__all__ = ["COLUMNS", "MIN_ROWS", "LoopRecord", "read_loop_csv"]

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
    table = read_table(path, COLUMNS)
    time_s, u, y = (table.columns[c] for c in COLUMNS)
    late = np.flatnonzero(np.diff(time_s) <= 0)
    if late.size:
        i = int(late[0]) + 1
        raise InputError(Problem(table.file, int(table.lines[i]), table.names["time_s"],
                                 f"time must increase strictly ({time_s[i]:g} after {time_s[i - 1]:g})"))
    if time_s.size < MIN_ROWS:
        raise InputError(Problem(table.file, table.header_line, "",
                                 f"only {time_s.size} data rows; at least {MIN_ROWS} needed"))
    return LoopRecord(time_s, u, y, table.file)

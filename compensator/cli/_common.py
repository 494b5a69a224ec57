"""Shared printing helpers for commands: tables for people, JSON for machines."""

from __future__ import annotations

import dataclasses
import json
import math
import sys
from collections.abc import Sequence

import numpy as np

from compensator.errors import InputError, Problem

#: Exit statuses, used by every command (and by ``compensator.cli.main``).
EXIT_OK = 0
#: A check the command ran failed (e.g. an unstable loop, a bound not met).
EXIT_FAILURE = 1
#: The user's input is wrong (bad option, bad file): one line per problem on stderr.
EXIT_USAGE = 2
#: The input was well-formed but nothing in it could be analysed (every fit failed).
EXIT_NOTHING_ANALYSED = 3
#: Interrupted by Ctrl-C (128 + SIGINT).
EXIT_INTERRUPTED = 130

COMMAND_LINE = "<command line>"


def usage_error(flag: str, reason: str) -> InputError:
    """The one way to build a command-line usage error (raise what it returns).

    Parameters
    ----------
    flag : str
        The option at fault, e.g. ``"--rate-hz"`` ("" for the command as a whole).
    reason : str
        What is wrong, in plain words, with the value given.
    """
    return InputError(Problem(COMMAND_LINE, 0, flag, reason))


def jsonable(value):
    """Convert dataclasses, numpy scalars and arrays into JSON-ready values.

    Non-finite floats become ``None`` so the output is strict JSON.
    """
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, np.generic):
        return jsonable(value.item())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def print_json(value, stream=None) -> None:
    """Write ``value`` as indented strict JSON to stdout (or ``stream``)."""
    stream = stream or sys.stdout
    json.dump(jsonable(value), stream, indent=2, allow_nan=False)
    stream.write("\n")


def format_table(rows: Sequence[Sequence], headers: Sequence[str], formats: Sequence[str] | None = None) -> str:
    """Render rows as a right-aligned plain-text table.

    Parameters
    ----------
    rows : sequence of sequences
        Cell values, one inner sequence per row.
    headers : sequence of str
        Column titles (put the unit in the title).
    formats : sequence of str, optional
        ``format()`` specs per column, e.g. ``".3f"``; strings pass through.
    """
    formats = list(formats or [""] * len(headers))
    cells = [[str(h) for h in headers]]
    for row in rows:
        cells.append([
            v if isinstance(v, str) else format(v, f) for v, f in zip(row, formats)
        ])
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def add_json_flag(parser) -> None:
    """Add the standard ``--json`` flag."""
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON on stdout")


def finite_float(text: str) -> float:
    """argparse type: a finite number (no nan or inf)."""
    import argparse

    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be finite, got {text!r}")
    return value


def temperature_c(text: str) -> float:
    """argparse type: a finite temperature above absolute zero, degree Celsius."""
    import argparse

    value = finite_float(text)
    if value <= -273.15:
        raise argparse.ArgumentTypeError(f"must be above absolute zero (-273.15 C), got {text!r}")
    return value


def positive_float(text: str) -> float:
    """argparse type: a finite number greater than zero."""
    import argparse

    value = finite_float(text)
    if value <= 0:
        raise argparse.ArgumentTypeError(f"must be greater than 0, got {text!r}")
    return value


def non_negative_float(text: str) -> float:
    """argparse type: a finite number at least zero."""
    import argparse

    value = finite_float(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be at least 0, got {text!r}")
    return value

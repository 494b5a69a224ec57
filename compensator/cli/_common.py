"""Shared printing helpers for commands: tables for people, JSON for machines."""

from __future__ import annotations

import math
import sys
from collections.abc import Sequence

import numpy as np

from compensator.errors import InputError, Problem
from compensator.vocabulary import dumps_json, to_json_value

#: Kept for callers of the old name: the one serialiser is :func:`compensator.vocabulary.to_json_value`.
jsonable = to_json_value

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

#: Where the JSON fields are documented (generated from :mod:`compensator.vocabulary`).
JSON_FIELDS_DOC = "docs/json-fields.md"


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


def print_json(value, stream=None) -> None:
    """Write the JSON document of ``value`` to stdout (or ``stream``).

    The document is built by :func:`compensator.vocabulary.json_document`:
    it carries ``schema_version`` and ``compensator_version``, floats rounded
    to :data:`~compensator.vocabulary.SIGNIFICANT_DIGITS` significant digits,
    no negative zero, and ``null`` for non-finite values.

    Parameters
    ----------
    value : record or mapping
        The command's result; every key must be a registered field name.
    stream : file-like, optional
        Where to write (default ``sys.stdout``).
    """
    (stream or sys.stdout).write(dumps_json(value))


def format_number(value, spec: str = "") -> str:
    """``format(value, spec)``, except that a number that prints as zero never carries a minus sign.

    Parameters
    ----------
    value : object
        A number (other values are formatted as they are).
    spec : str, optional
        A ``format()`` specification, e.g. ``".3f"`` or ``"+.2e"``.

    Examples
    --------
    >>> format_number(-0.0001, ".3f"), format_number(-0.0, "+.1f"), format_number(-0.02, ".1f")
    ('0.000', '+0.0', '0.0')
    """
    text = format(value, spec)
    if isinstance(value, (float, np.floating)) and "-" in text and math.isfinite(value):
        mantissa = text.lower().split("e")[0]
        if not any(ch in "123456789" for ch in mantissa):
            text = format(0.0, spec)
    return text


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
        A number that prints as zero never shows a minus sign ("-0.000").
    """
    formats = list(formats or [""] * len(headers))
    cells = [[str(h) for h in headers]]
    for row in rows:
        cells.append([
            v if isinstance(v, str) else format_number(v, f) for v, f in zip(row, formats)
        ])
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def add_json_flag(parser) -> None:
    """Add the standard ``--json`` flag."""
    parser.add_argument("--json", action="store_true",
                        help=f"print machine-readable JSON on stdout instead of the table; every field's unit and "
                             f"meaning: {JSON_FIELDS_DOC}")


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

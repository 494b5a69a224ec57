"""Shared printing helpers for commands: tables for people, JSON for machines."""

from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Sequence

import numpy as np

from compensator.errors import InputError, Problem
from compensator.vocabulary import dumps_json, to_json_value

__all__ = [
    "EXIT_OK", "EXIT_FAILURE", "EXIT_USAGE", "EXIT_NOTHING_ANALYSED", "EXIT_INTERRUPTED", "COMMAND_LINE",
    "JSON_FIELDS_DOC", "MAX_MAGNITUDE", "MAX_TEMPERATURE_C", "usage_error", "caution", "flush_cautions",
    "numerical_warning_lines", "print_json", "jsonable", "format_number", "format_table", "add_json_flag",
    "bounded_float", "bounded_int", "finite_float", "positive_float", "non_negative_float", "temperature_c",
    "percent", "significance_level", "positive_int", "non_negative_int", "seed", "code", "is_checked_number",
    "LAW_FLAGS", "add_law_arguments", "drop_correction_from_args", "law_from_args", "locate_law_error",
]

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


_CAUTIONS: list[str] = []


def caution(text: str) -> None:
    """Queue a safety caution; :func:`compensator.cli.main` prints it on stderr when the command ends.

    A caution is never printed before, or together with, a usage error: the
    user first sees what is wrong with the command line.

    Parameters
    ----------
    text : str
        The caution, one paragraph, starting with ``caution:``.
    """
    if text not in _CAUTIONS:
        _CAUTIONS.append(text)


def flush_cautions(*, show: bool = True, stream=None) -> None:
    """Print the queued cautions (when ``show``) and empty the queue.

    Parameters
    ----------
    show : bool, optional
        Print them (false after a usage error).
    stream : file-like, optional
        Where to print (default ``sys.stderr``).
    """
    if show:
        for text in _CAUTIONS:
            print(text, file=stream or sys.stderr)
    _CAUTIONS.clear()


#: Warning categories meant for developers: never shown to a user of the command line.
_DEVELOPER_WARNINGS = (DeprecationWarning, PendingDeprecationWarning, FutureWarning, ImportWarning, ResourceWarning)


def numerical_warning_lines(caught) -> list[str]:
    """One ``compensator: warning:`` line per distinct warning, without the library's file and line.

    Parameters
    ----------
    caught : list of warnings.WarningMessage
        As recorded by ``warnings.catch_warnings(record=True)``.
    """
    lines = []
    for item in caught:
        if issubclass(item.category, _DEVELOPER_WARNINGS):
            continue
        text = " ".join(str(item.message).split())
        kind = "numerical problem" if issubclass(item.category, RuntimeWarning) else "note"
        line = f"compensator: warning: {kind}: {text}"
        if line not in lines:
            lines.append(line)
    return lines


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


#: Largest magnitude a command-line number may have: far beyond any physical value
#: the tool handles, and small enough that sums and squares stay finite.
MAX_MAGNITUDE = 1e12

#: Highest temperature a command accepts, degree Celsius: beyond the rating of
#: any SiPM, sensor or cooler the tool models.
MAX_TEMPERATURE_C = 1000.0


def _number(text: str) -> float:
    try:
        value = float(text)
    except (ValueError, OverflowError):
        raise argparse.ArgumentTypeError(f"expected a number, got {_shown(text)}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be a finite number, got {_shown(text)}")
    if abs(value) > MAX_MAGNITUDE:
        raise argparse.ArgumentTypeError(f"must lie within +-{MAX_MAGNITUDE:g}, got {_shown(text)}")
    return value


def _shown(text: str) -> str:
    """The user's text, shortened for a one-line message."""
    text = str(text)
    return repr(text if len(text) <= 40 else text[:20] + "..." + text[-8:])


def bounded_float(minimum: float | None = None, maximum: float | None = None, *, above: bool = False,
                  below: bool = False, unit: str = ""):
    """An argparse type: a finite number within bounds.

    Every number is also finite and within +-:data:`MAX_MAGNITUDE`.

    Parameters
    ----------
    minimum : float, optional
        Smallest value allowed (``None``: no lower bound).
    maximum : float, optional
        Largest value allowed (``None``: no upper bound).
    above : bool, optional
        When true, the value must be strictly greater than ``minimum``.
    below : bool, optional
        When true, the value must be strictly less than ``maximum``.
    unit : str, optional
        Unit shown in the message, e.g. ``"V"``.

    Returns
    -------
    callable
        ``type(text) -> float`` raising ``argparse.ArgumentTypeError``.
    """
    tail = f" {unit}" if unit else ""

    def parse(text: str) -> float:
        value = _number(text)
        if minimum is not None and (value <= minimum if above else value < minimum):
            word = "greater than" if above else "at least"
            raise argparse.ArgumentTypeError(f"must be {word} {minimum:g}{tail}, got {_shown(text)}")
        if maximum is not None and (value >= maximum if below else value > maximum):
            word = "less than" if below else "at most"
            raise argparse.ArgumentTypeError(f"must be {word} {maximum:g}{tail}, got {_shown(text)}")
        return value

    parse.__name__ = "number"
    parse.checked_number = True
    return parse


def bounded_int(minimum: int | None = 0, maximum: int | None = None):
    """An argparse type: a whole number within bounds.

    Parameters
    ----------
    minimum : int, optional
        Smallest value allowed (default 0; ``None``: no lower bound).
    maximum : int, optional
        Largest value allowed (``None``: 2**63 - 1).

    Returns
    -------
    callable
        ``type(text) -> int`` raising ``argparse.ArgumentTypeError``.
    """
    top = 2**63 - 1 if maximum is None else maximum

    def parse(text: str) -> int:
        digits = str(text).strip()
        if len(digits) > 20:
            raise argparse.ArgumentTypeError(f"must be at most {top}, got {_shown(text)}")
        try:
            value = int(digits)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {_shown(text)}") from None
        if minimum is not None and value < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum}, got {_shown(text)}")
        if value > top:
            raise argparse.ArgumentTypeError(f"must be at most {top}, got {_shown(text)}")
        return value

    parse.__name__ = "whole number"
    parse.checked_number = True
    return parse


#: argparse type: any finite number (within +-MAX_MAGNITUDE).
finite_float = bounded_float()
#: argparse type: a finite number greater than zero.
positive_float = bounded_float(0.0, above=True)
#: argparse type: a finite number at least zero.
non_negative_float = bounded_float(0.0)
#: argparse type: a temperature above absolute zero and at most MAX_TEMPERATURE_C, degree Celsius.
temperature_c = bounded_float(-273.15, MAX_TEMPERATURE_C, above=True, unit="C")
#: argparse type: a percentage from 0 to 100.
percent = bounded_float(0.0, 100.0, unit="%")
#: argparse type: a significance level or probability strictly between 0 and 1.
significance_level = bounded_float(0.0, 1.0, above=True, below=True)
#: argparse type: a count of at least 1 (samples, points, files).
positive_int = bounded_int(1)
#: argparse type: a count of at least 0.
non_negative_int = bounded_int(0)
#: argparse type: a seed for the random generator, 0 to 2**32 - 1.
seed = bounded_int(0, 2**32 - 1)
#: argparse type: a raw ADC or DAC code, 0 to 2**32 - 1 (the command checks its own full scale).
code = bounded_int(0, 2**32 - 1)


def is_checked_number(type_) -> bool:
    """Whether an argparse ``type`` is one of the checked number types of this module.

    Parameters
    ----------
    type_ : callable or None
        The ``type`` of an argparse action.
    """
    return bool(getattr(type_, "checked_number", False))


# Arguments shared by the commands that build a compensation law (``budget``, ``table``).

#: Library argument names of :func:`compensator.law.build_law` -> the command-line flags that carry them.
LAW_FLAGS = {"overvoltage_v": "--overvoltage-v", "photon_rate_hz": "--photon-rate-hz", "kind": "--law",
             "drop_correction": "--drop-correction", "breakdown_offset_v": "--breakdown-offset-v"}


def add_law_arguments(parser) -> None:
    """Add the arguments that choose the profiles and the compensation law.

    ``--sipm``, ``--board``, ``--overvoltage-v``, ``--law``,
    ``--drop-correction`` (or ``--no-drop-correction``), ``--photon-rate-hz``
    and ``--breakdown-offset-v``; :func:`law_from_args` builds the law from them.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The command's parser.
    """
    from compensator.law.laws import DROP_CORRECTIONS, LAW_KINDS

    parser.add_argument("--sipm", required=True, metavar="FILE", help="sipm profile")
    parser.add_argument("--board", required=True, metavar="FILE", help="board profile")
    parser.add_argument("--overvoltage-v", required=True, type=finite_float, metavar="V",
                        help="target overvoltage at the breakdown reference temperature, volt")
    parser.add_argument("--law", choices=LAW_KINDS, default="constant_gain",
                        help="compensation law (default constant_gain; equal to constant_overvoltage when the "
                             "cell capacitance has no temperature coefficient; constant_response holds gain x PDE x "
                             "crosstalk x the scintillator's light yield and needs the sipm profile's scintillator "
                             "section)")
    drop = parser.add_mutually_exclusive_group()
    drop.add_argument("--drop-correction", choices=DROP_CORRECTIONS, default=None,
                      help="series-resistor drop: none; modelled (the law adds the drop of the modelled current at "
                           "--photon-rate-hz; the default); measured (the table holds the zero-current law and the "
                           "firmware adds the drop of the current read through the board's current_sense channel)")
    drop.add_argument("--no-drop-correction", action="store_true",
                      help="the same as --drop-correction none")
    parser.add_argument("--photon-rate-hz", type=non_negative_float, default=0.0, metavar="R",
                        help="photon rate assumed for the modelled current (with measured: the light level the "
                             "budget assumes), hertz (default 0: dark)")
    parser.add_argument("--breakdown-offset-v", type=finite_float, default=None, metavar="V",
                        help="volts to add to the profile's breakdown to reach the gain-intercept definition "
                             "(default: the profile's breakdown.definition_offset_v when it holds an I-V breakdown)")


def drop_correction_from_args(args) -> str:
    """The drop-correction mode chosen on the command line (``--no-drop-correction`` means ``"none"``).

    Parameters
    ----------
    args : argparse.Namespace
        Parsed by a parser that has :func:`add_law_arguments`.
    """
    if args.drop_correction is not None:
        return args.drop_correction
    return "none" if args.no_drop_correction else "modelled"


def locate_law_error(exc, sipm_path: str, flags=None):
    """A model error located where its value came from: a flag, or the sipm profile.

    Parameters
    ----------
    exc : compensator.errors.ModelError
        The library's error, with its ``key``.
    sipm_path : str
        The ``--sipm`` file (for keys of the profile, ``breakdown.*``).
    flags : dict, optional
        Library argument names -> flags (default :data:`LAW_FLAGS`).

    Returns
    -------
    CompensatorError
        The error to raise: an :class:`~compensator.errors.InputError` when the key is located, else ``exc``.
    """
    flags = LAW_FLAGS if flags is None else flags
    if exc.key in flags:
        return exc.at(COMMAND_LINE, key=flags[exc.key])
    if exc.key.startswith("breakdown."):
        return exc.at(sipm_path)
    return exc


def law_from_args(args):
    """Load the profiles and build the law the arguments of :func:`add_law_arguments` describe.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments.

    Returns
    -------
    (SipmProfile, BoardProfile, CompensationLaw)
    """
    from compensator.errors import ModelError
    from compensator.law.laws import build_law
    from compensator.profiles import load_board, load_sipm

    sipm = load_sipm(args.sipm)
    board = load_board(args.board)
    try:
        law = build_law(sipm, board, args.overvoltage_v, kind=args.law, photon_rate_hz=args.photon_rate_hz,
                        drop_correction=drop_correction_from_args(args),
                        breakdown_offset_v=getattr(args, "breakdown_offset_v", None))
    except ModelError as exc:
        raise locate_law_error(exc, args.sipm) from None
    return sipm, board, law

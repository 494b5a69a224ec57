"""Command line: thin commands over the library.

Each module in this package that defines ``register(subparsers)`` adds one
top-level command; ``ORDER`` (an int) places it in ``--help``. A module whose
``register`` needs heavy imports (python-control, scipy.signal) also defines
``COMMAND`` (its name) and ``HELP`` (its one-line help): it is then registered
in full only when that command runs, so every other command starts fast. A command's
handler returns an exit status. Library errors a user can cause
(:class:`~compensator.errors.CompensatorError`) become one-line messages on
stderr and exit status 2; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
import warnings

from compensator import __version__
from compensator.cli._common import (
    COMMAND_LINE,
    EXIT_INTERRUPTED,
    EXIT_OK,
    EXIT_USAGE,
    flush_cautions,
    numerical_warning_lines,
)
from compensator.errors import CompensatorError

__all__ = ["build_parser", "main"]


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line on stderr and exit status 2."""

    def error(self, message):
        print(f"compensator: {COMMAND_LINE}: {message} (see '{self.prog} --help')", file=sys.stderr)
        raise SystemExit(EXIT_USAGE)


def _command_modules():
    modules = []
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{__name__}.{info.name}")
        if hasattr(module, "register"):
            modules.append(module)
    return sorted(modules, key=lambda m: (getattr(m, "ORDER", 100), m.__name__))


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """Return the top-level parser.

    Parameters
    ----------
    only : str, optional
        The command about to run. Commands that declare ``COMMAND`` and are
        not this one get a placeholder (listed in ``--help``, never parsed).
        ``None`` registers every command in full.
    """
    parser = _Parser(
        prog="compensator",
        description="Hold SiPM gain constant over temperature.",
    )
    parser.add_argument("--version", action="version", version=f"compensator {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    subparsers.required = True
    for module in _command_modules():
        name = getattr(module, "COMMAND", None)
        if only is not None and name is not None and name != only:
            subparsers.add_parser(name, help=module.HELP)
        else:
            module.register(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status.

    Parameters
    ----------
    argv : list of str, optional
        The arguments after the program name (default ``sys.argv[1:]``).

    Notes
    -----
    Arguments are parsed in full before a command starts, so a usage error
    is one line and comes before anything else, cautions included. Ctrl-C
    and SIGTERM end the command with one line and exit status 130 after its
    clean-up code has run (no temporary or partial file set is left). Cautions
    the command queued (:func:`compensator.cli._common.caution`) are printed
    on stderr when it ends, unless it ends with a usage error or an interrupt. Numerical
    warnings raised inside numpy or scipy become one ``compensator: warning:``
    line each, without the library's file paths.
    """
    words = sys.argv[1:] if argv is None else argv
    parser = build_parser(only=next((w for w in words if not w.startswith("-")), ""))
    args = parser.parse_args(argv)
    from compensator.fileio import terminate_as_interrupt

    status = EXIT_USAGE
    with warnings.catch_warnings(record=True) as caught, terminate_as_interrupt():
        warnings.simplefilter("always")
        try:
            status = int(args.handler(args) or EXIT_OK)
        except CompensatorError as exc:
            for line in str(exc).splitlines() or [type(exc).__name__]:
                print(f"compensator: {line}", file=sys.stderr)
            status = EXIT_USAGE
        except BrokenPipeError:  # e.g. piped into `head`
            status = EXIT_OK
        except KeyboardInterrupt:
            print("compensator: interrupted", file=sys.stderr)
            status = EXIT_INTERRUPTED
        finally:
            flush_cautions(show=status not in (EXIT_USAGE, EXIT_INTERRUPTED))
    for line in numerical_warning_lines(caught):
        print(line, file=sys.stderr)
    return status

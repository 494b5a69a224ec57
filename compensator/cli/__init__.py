"""Command line: thin commands over the library.

Each module in this package that defines ``register(subparsers)`` adds one
top-level command; ``ORDER`` (an int) places it in ``--help``. A module whose
``register`` needs heavy imports (python-control, scipy.signal) also defines
``COMMAND`` (its name) and ``HELP`` (its one-line help): it is then registered
in full only when that command runs, so every other command starts fast. A command's
handler returns an exit status. Library errors a user can cause
(:class:`~compensator.errors.CompensatorError`) become one-line messages on
stderr and exit status 2; anything else is a bug and keeps its traceback.

This module imports nothing heavy at import time: :func:`main` takes charge of
Ctrl-C and SIGTERM before numpy, scipy or python-control load, so an interrupt
at any moment is one line and exit status 130.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import os
import pkgutil
import signal
import sys
import threading
import warnings

from compensator import __version__

__all__ = ["build_parser", "main", "run", "INTERRUPTED_LINE"]

#: What an interrupted command prints on stderr (its only line about the interrupt).
INTERRUPTED_LINE = "compensator: interrupted"
#: 128 + SIGINT, as a shell reports Ctrl-C; the same as ``_common.EXIT_INTERRUPTED`` (kept here so the
#: signal handling needs no heavy import).
_EXIT_INTERRUPTED = 130
_STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line on stderr and exit status 2."""

    def error(self, message):
        from compensator.cli._common import COMMAND_LINE, EXIT_USAGE

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


# --- Ctrl-C and SIGTERM ---------------------------------------------------------------------------------------------
# One handler for SIGINT and SIGTERM whose behaviour follows the phase. While the libraries load and the arguments
# are parsed nothing has been written, so a signal ends the process at once (one line, exit 130). While the command
# runs, the first signal raises KeyboardInterrupt so that its clean-up code removes temporaries and partial file sets;
# later signals are ignored, so a second Ctrl-C cannot cut that clean-up short. Once the command has ended, a signal
# ends the process at once again. The phase is one global changed by single assignments, so no signal can fall
# between two handlers.
_AT_ONCE, _RUNNING, _STOPPING = "at once", "running", "stopping"
_phase = _AT_ONCE


def _on_signal(signum, frame):
    """Handler of SIGINT and SIGTERM for the whole life of a command (see the phases above)."""
    global _phase
    if _phase == _RUNNING:
        _phase = _STOPPING
        raise KeyboardInterrupt(f"signal {signum}")
    if _phase == _STOPPING:
        return
    os.write(2, (INTERRUPTED_LINE + "\n").encode())
    os._exit(_EXIT_INTERRUPTED)


def _install() -> dict:
    """Install the handler for SIGINT and SIGTERM (not for one the parent set to be ignored); return the previous ones.

    Outside the main thread, where handlers cannot be set, nothing changes.
    """
    previous = {}
    if threading.current_thread() is not threading.main_thread():
        return previous
    for sig in _STOP_SIGNALS:
        current = signal.getsignal(sig)
        if current is signal.SIG_IGN:  # e.g. `nohup`, or a background job of a non-interactive shell
            continue
        with contextlib.suppress(ValueError, OSError):
            signal.signal(sig, _on_signal)
            previous[sig] = current
    return previous


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
    (SIGINT) and SIGTERM at any moment end the command with the one line
    ``compensator: interrupted`` and exit status 130: before the command
    starts (while numpy, scipy and python-control load) at once, during
    it after its clean-up code has run (no temporary or partial file set is
    left; a second signal does not cut the clean-up short). The signal
    handlers in place before the call are restored when it returns. Cautions
    the command queued (:func:`compensator.cli._common.caution`) are printed
    on stderr when it ends, unless it ends with a usage error or an interrupt. Numerical
    warnings raised inside numpy or scipy become one ``compensator: warning:``
    line each, without the library's file paths.
    """
    global _phase
    _phase = _AT_ONCE
    previous = _install()
    try:
        return _run_command(argv)
    finally:
        for sig, handler in previous.items():
            with contextlib.suppress(ValueError, OSError, TypeError):
                signal.signal(sig, handler if handler is not None else signal.SIG_DFL)


def _run_command(argv: list[str] | None) -> int:
    global _phase
    from compensator.cli._common import EXIT_INTERRUPTED, EXIT_OK, EXIT_USAGE, flush_cautions, numerical_warning_lines
    from compensator.errors import CompensatorError

    words = sys.argv[1:] if argv is None else argv
    parser = build_parser(only=next((w for w in words if not w.startswith("-")), ""))
    args = parser.parse_args(argv)

    status = EXIT_USAGE
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            try:
                _phase = _RUNNING
                status = int(args.handler(args) or EXIT_OK)
                _phase = _AT_ONCE
            except CompensatorError as exc:
                _phase = _AT_ONCE
                for line in str(exc).splitlines() or [type(exc).__name__]:
                    print(f"compensator: {line}", file=sys.stderr)
                status = EXIT_USAGE
            except BrokenPipeError:  # e.g. piped into `head`
                _phase = _AT_ONCE
                status = EXIT_OK
        except KeyboardInterrupt:  # raised by the signal handler, or by one the command set (the phase is then "stopping")
            _phase = _STOPPING
            print(INTERRUPTED_LINE, file=sys.stderr)
            status = EXIT_INTERRUPTED
        finally:
            flush_cautions(show=status not in (EXIT_USAGE, EXIT_INTERRUPTED))
    for line in numerical_warning_lines(caught):
        print(line, file=sys.stderr)
    return status


def run() -> None:
    """The ``compensator`` program: :func:`main` on ``sys.argv``, then exit with its status.

    Unlike :func:`main`, the signal handler stays in place until the process
    ends, so a Ctrl-C in its last moments is still one line and exit status 130.
    """
    _install()
    sys.exit(main())

"""Safe file handling at the edges: writes all or nothing, never half-written, never silently overwritten;
JSON read within bounds.

Every set of files a command writes goes through :func:`write_file_set`:

1. every target is checked before anything is written (an existing file
   without ``overwrite``, a directory where a file should go, a file where a
   directory should go): all problems are reported at once;
2. each file is written to a temporary file beside its target and flushed to
   disk;
3. only when every temporary is complete are they renamed into place, one
   after the other;
4. temporaries are removed on any exit, including an error, Ctrl-C (SIGINT)
   and SIGTERM; files of the set already renamed are removed again when a
   later rename fails (unless they replaced existing files).

Written files get the permissions of a newly created file (``0666`` less the
umask, ``0644`` by default), so colleagues can read them.

:func:`loads_json` parses JSON a user hands to a command within bounds: at most
:data:`MAX_JSON_DEPTH` levels of nesting and numbers of at most
:data:`MAX_JSON_NUMBER_CHARS` characters, anything else is a one-line error
naming the file and line.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import tempfile
import threading
from collections.abc import Mapping
from pathlib import Path

from compensator.errors import InputError, Problem

__all__ = ["write_file_set", "write_file_atomic", "write_files_atomic", "output_dir", "check_targets",
           "terminate_as_interrupt", "loads_json", "MAX_JSON_DEPTH", "MAX_JSON_NUMBER_CHARS"]

#: Deepest nesting of arrays and objects a JSON input may have (the tool's own documents use 5).
MAX_JSON_DEPTH = 32
#: Longest number, in characters, a JSON input may hold (a double needs at most 24).
MAX_JSON_NUMBER_CHARS = 40

EXISTS = "already exists; not overwriting (use --force to replace it)"


def _reason(exc: OSError) -> str:
    return f"cannot write: {exc.strerror or exc}"


def _file_mode() -> int:
    """Permissions of a newly created file under the current umask."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def check_targets(paths, *, overwrite: bool = False) -> list[Problem]:
    """Every reason the files ``paths`` cannot be written, found before writing any.

    Parameters
    ----------
    paths : iterable of path-like
        The files to be written.
    overwrite : bool, optional
        Whether existing files may be replaced.

    Returns
    -------
    list of Problem
        Empty when every target can be written.
    """
    problems = []
    seen, blocked = set(), set()
    for path in map(Path, paths):
        if path in seen:
            problems.append(Problem(str(path), 0, "", "named twice in one set of files"))
            continue
        seen.add(path)
        if path.is_dir():
            problems.append(Problem(str(path), 0, "", "is a directory; expected a file name"))
        elif path.exists() and not overwrite:
            problems.append(Problem(str(path), 0, "", EXISTS))
        for parent in path.parents:
            if parent.exists():
                if not parent.is_dir() and parent not in blocked:
                    blocked.add(parent)
                    problems.append(Problem(str(parent), 0, "", "is not a directory (wanted as the output folder)"))
                break
    return problems


@contextlib.contextmanager
def terminate_as_interrupt():
    """Within the block, SIGTERM raises :class:`KeyboardInterrupt` so that clean-up code runs.

    Outside the main thread (where signal handlers cannot be set), and when
    SIGTERM is already ignored or handled, the block runs unchanged.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def interrupt(signum, frame):
        raise KeyboardInterrupt(f"signal {signum}")

    if signal.getsignal(signal.SIGTERM) not in (signal.SIG_DFL, None):
        yield  # ignored, or already handled (compensator.cli.main's handler raises KeyboardInterrupt once)
        return
    try:
        previous = signal.signal(signal.SIGTERM, interrupt)
    except (ValueError, OSError):  # not settable here
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _make_dirs(paths) -> list[Path]:
    """Create the missing parent folders of ``paths``; return the folders created, outermost first."""
    created = []
    for path in paths:
        missing = [p for p in reversed(path.parents) if not p.exists()]
        for folder in missing:
            try:
                folder.mkdir()
            except FileExistsError:
                continue
            except OSError as exc:
                raise InputError(Problem(str(folder), 0, "", f"cannot create the folder: {exc.strerror or exc}")) \
                    from None
            created.append(folder)
    return created


def write_file_set(files: Mapping, *, overwrite: bool = False, make_dirs: bool = True) -> list[Path]:
    """Write a set of files: all of them or none.

    Parameters
    ----------
    files : mapping of path-like to str or bytes
        Destination -> content (text is written as UTF-8), in writing order.
    overwrite : bool, optional
        Replace existing files; otherwise an existing file is an error and
        nothing is written.
    make_dirs : bool, optional
        Create missing parent folders (removed again on failure); when false,
        a missing folder is an error.

    Returns
    -------
    list of Path
        The files written, in order.

    Raises
    ------
    InputError
        Listing every target that cannot be written (checked before writing
        anything), or the write that failed (nothing is left behind).
    KeyboardInterrupt
        On Ctrl-C or SIGTERM; temporaries are removed first.
    """
    targets = [Path(p) for p in files]
    problems = check_targets(targets, overwrite=overwrite)
    if problems:
        raise InputError(problems)
    mode = _file_mode()
    temporaries: dict[Path, str] = {}
    placed: list[Path] = []
    created: list[Path] = []
    done = False
    with terminate_as_interrupt():
        try:
            created = _make_dirs(targets) if make_dirs else []
            for target, content in zip(targets, files.values()):
                payload = content.encode("utf-8") if isinstance(content, str) else bytes(content)
                try:
                    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
                except OSError as exc:
                    raise InputError(Problem(str(target), 0, "", _reason(exc))) from None
                temporaries[target] = tmp
                try:
                    with os.fdopen(fd, "wb") as handle:
                        os.fchmod(handle.fileno(), mode)
                        handle.write(payload)
                        handle.flush()
                        os.fsync(handle.fileno())
                except OSError as exc:
                    raise InputError(Problem(str(target), 0, "", _reason(exc))) from None
            for target in targets:
                tmp = temporaries[target]
                try:
                    if overwrite:
                        existed = target.exists()
                        os.replace(tmp, target)
                        if not existed:
                            placed.append(target)
                    else:
                        os.link(tmp, target)  # fails if the target appeared meanwhile
                        placed.append(target)
                        os.unlink(tmp)
                except FileExistsError:
                    raise InputError(Problem(str(target), 0, "", EXISTS)) from None
                except OSError as exc:
                    raise InputError(Problem(str(target), 0, "", _reason(exc))) from None
                del temporaries[target]
            done = True
        finally:
            for tmp in temporaries.values():
                with contextlib.suppress(OSError):
                    os.unlink(tmp)
            if not done:
                for target in placed:
                    with contextlib.suppress(OSError):
                        target.unlink()
                for folder in reversed(created):
                    with contextlib.suppress(OSError):
                        folder.rmdir()
    return targets


def write_file_atomic(path, data, overwrite: bool = False) -> Path:
    """Write one file through a temporary file and a rename (see :func:`write_file_set`).

    Parameters
    ----------
    path : str or path-like
        Destination; its folder must exist.
    data : str or bytes
        Content (text is encoded as UTF-8).
    overwrite : bool
        When false, an existing file is an error and is left untouched.

    Returns
    -------
    Path
        The destination.

    Raises
    ------
    InputError
        The file exists (and ``overwrite`` is false) or cannot be written.
    """
    return write_file_set({Path(path): data}, overwrite=overwrite, make_dirs=False)[0]


def output_dir(path, what: str = "output") -> Path:
    """Create (with parents, if needed) and return an output directory.

    Parameters
    ----------
    path : str or path-like
        The directory.
    what : str
        What goes there, for the error message ("plot", "C output" ...).

    Returns
    -------
    Path

    Raises
    ------
    InputError
        The path exists and is not a directory, or cannot be created.
    """
    path = Path(path)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise InputError(Problem(str(path), 0, "", f"is not a directory (wanted for the {what})")) from None
    except OSError as exc:
        raise InputError(Problem(str(path), 0, "", f"cannot create the {what} directory: {exc.strerror or exc}")) \
            from None
    return path


def write_files_atomic(directory, files: dict, overwrite: bool = False, what: str = "output") -> list[Path]:
    """Write a set of files into one directory: all of them or none (see :func:`write_file_set`).

    Parameters
    ----------
    directory : str or path-like
        Created with its parents when missing (and removed again when the
        set is not written).
    files : dict
        File name -> content (str or bytes), in writing order.
    overwrite : bool
        Replace existing files.
    what : str
        What the directory is for, in error messages.

    Returns
    -------
    list of Path
        The files written, in order.

    Raises
    ------
    InputError
        Listing every file that exists already, or the write that failed.
    """
    directory = Path(directory)
    if directory.exists() and not directory.is_dir():
        raise InputError(Problem(str(directory), 0, "", f"is not a directory (wanted for the {what})"))
    targets = {directory / name: content for name, content in files.items()}
    problems = check_targets(targets, overwrite=overwrite)
    if problems:
        raise InputError(problems)
    missing = [p for p in (directory, *directory.parents) if not p.exists()]  # innermost first
    try:
        output_dir(directory, what)
        return write_file_set(targets, overwrite=overwrite, make_dirs=False)
    except BaseException:  # including Ctrl-C and SIGTERM: the folders this call made go again
        for folder in missing:
            with contextlib.suppress(OSError):
                folder.rmdir()
        raise


class _JsonLimit(ValueError):
    pass


def _number(convert):
    def parse(text):
        if len(text) > MAX_JSON_NUMBER_CHARS:
            raise _JsonLimit(f"a number of {len(text)} characters (at most {MAX_JSON_NUMBER_CHARS})")
        return convert(text)
    return parse


def _depth(value) -> int:
    deepest, stack = 0, [(value, 1)]
    while stack:
        item, level = stack.pop()
        if isinstance(item, (dict, list)):
            deepest = max(deepest, level)
            stack.extend((v, level + 1) for v in (item.values() if isinstance(item, dict) else item))
    return deepest


def loads_json(text: str, *, file: str):
    """Parse JSON a user gave, within bounds; every failure is one located line.

    Parameters
    ----------
    text : str
        The file's text.
    file : str
        The file's name, for the message.

    Returns
    -------
    object
        The parsed document.

    Raises
    ------
    InputError
        Invalid JSON (with its line), nesting deeper than
        :data:`MAX_JSON_DEPTH`, a number longer than
        :data:`MAX_JSON_NUMBER_CHARS` characters, or a non-finite number.
    """
    def constant(name):
        raise _JsonLimit(f"{name} is not a number JSON allows")

    try:
        doc = json.loads(text, parse_int=_number(int), parse_float=_number(float), parse_constant=constant)
    except json.JSONDecodeError as exc:
        raise InputError(Problem(file, exc.lineno, "", f"invalid JSON: {exc.msg}")) from None
    except _JsonLimit as exc:
        raise InputError(Problem(file, 0, "", f"JSON holds {exc}")) from None
    except RecursionError:
        raise InputError(Problem(file, 0, "", f"JSON nested deeper than {MAX_JSON_DEPTH} levels")) from None
    if _depth(doc) > MAX_JSON_DEPTH:
        raise InputError(Problem(file, 0, "", f"JSON nested deeper than {MAX_JSON_DEPTH} levels"))
    return doc

"""Safe file writing at the edges: never half-written, never silently overwritten."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from compensator.errors import InputError, Problem


def write_file_atomic(path: str | Path, data: str | bytes, overwrite: bool = False) -> Path:
    """Write ``data`` to ``path`` through a temporary file and an atomic rename.

    Parameters
    ----------
    path : str or path-like
        Destination; its directory must exist.
    data : str or bytes
        Content (text is encoded as UTF-8 with ``\\n`` line ends).
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
    path = Path(path)
    if not overwrite and path.exists():
        raise InputError(Problem(str(path), 0, "", "already exists; not overwriting (use --force to replace it)"))
    payload = data.encode("utf-8") if isinstance(data, str) else data
    directory = path.parent if str(path.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=directory)
    except OSError as exc:
        raise InputError(Problem(str(path), 0, "", f"cannot write: {exc.strerror or exc}")) from None
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        if overwrite:
            os.replace(tmp, path)
        else:
            os.link(tmp, path)  # fails if the destination appeared meanwhile
            os.unlink(tmp)
    except FileExistsError:
        os.unlink(tmp)
        raise InputError(Problem(str(path), 0, "", "already exists; not overwriting (use --force to replace it)")) from None
    except OSError as exc:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise InputError(Problem(str(path), 0, "", f"cannot write: {exc.strerror or exc}")) from None
    return path


def output_dir(path: str | Path, what: str = "output") -> Path:
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
        raise InputError(Problem(str(path), 0, "", f"cannot create the {what} directory: {exc.strerror or exc}")) from None
    return path


def write_files_atomic(directory: str | Path, files: dict, overwrite: bool = False, what: str = "output") -> list[Path]:
    """Write a set of files into a directory: all of them or none.

    Every existing file is refused (unless ``overwrite``) before the first
    write; each file is written atomically; if a write fails, the files this
    call created are removed again so no partial set is left behind.

    Parameters
    ----------
    directory : str or path-like
        Created with its parents when missing.
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
    targets = [directory / name for name in files]
    if not overwrite:
        existing = [t for t in targets if t.exists()]
        if existing:
            raise InputError([Problem(str(t), 0, "", "already exists; not overwriting (use --force to replace it)")
                              for t in existing])
    output_dir(directory, what)
    written = []
    try:
        for target, content in zip(targets, files.values()):
            write_file_atomic(target, content, overwrite=overwrite)
            written.append(target)
    except InputError:
        if not overwrite:
            for target in written:
                target.unlink(missing_ok=True)
        raise
    return written

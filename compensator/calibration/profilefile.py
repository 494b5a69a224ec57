"""Writing a calibrated ``sipm`` profile: checked against the schema first, then written all or nothing."""

from __future__ import annotations

import tempfile
from pathlib import Path

from compensator.errors import InputError, Problem, ProfileError

__all__ = ["check_profile_target", "write_sipm_profile"]


def check_profile_target(path, *, force=False) -> Path:
    """Refuse a profile destination that cannot be written, before any work is done.

    Parameters
    ----------
    path : str or path-like
        Destination YAML file.
    force : bool, optional
        An existing file may be replaced.

    Returns
    -------
    Path

    Raises
    ------
    InputError
        A directory, a missing folder, or an existing file without ``force``.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(Problem(str(path), 0, "", "is a directory; give a file name for the profile"))
    if not path.parent.is_dir():
        raise InputError(Problem(str(path), 0, "", f"folder {path.parent} does not exist"))
    if path.exists() and not force:
        raise InputError(Problem(str(path), 0, "", "already exists; not overwriting (use --force to replace it)"))
    return path


def write_sipm_profile(path, base_profile, values: dict, *, title: str, settings: dict, force=False):
    """Write ``values`` as a ``sipm`` profile, checked by loading it back, atomically.

    Parameters
    ----------
    path : str or path-like
        Destination YAML file; an existing file is an error unless ``force``.
    base_profile : SipmProfile
        The profile the values came from (named in the provenance header).
    values : dict
        The complete profile values.
    title : str
        First line of the header (e.g. ``"calibrated sipm profile"``).
    settings : dict
        What the values were calibrated from, listed in the header.
    force : bool, optional
        Replace an existing file.

    Returns
    -------
    SipmProfile
        The written profile as loaded back.

    Raises
    ------
    InputError
        The destination cannot be written or the values fall outside the
        profile schema; nothing is written.
    """
    from compensator.fileio import write_file_atomic
    from compensator.profiles import load_sipm, render_profile
    from compensator.provenance import banner_lines

    path = check_profile_target(path, force=force)
    header = "\n".join([title] + banner_lines("", [base_profile], settings)[1:])
    text = render_profile("sipm", values, header)
    with tempfile.TemporaryDirectory() as tmp:
        probe = Path(tmp) / path.name
        probe.write_text(text, encoding="utf-8")
        try:
            load_sipm(probe)
        except ProfileError as exc:
            problems = [Problem(str(path), 0, p.key, f"fitted value rejected by the sipm schema: {p.reason}")
                        for p in exc.problems if isinstance(p, Problem)] or [str(exc)]
            raise InputError(problems) from None
    write_file_atomic(path, text, overwrite=force)
    return load_sipm(path)

"""One error hierarchy, rooted in :class:`CompensatorError`.

Every error a user can cause (a bad profile, a malformed measurement file, a
non-physical argument) is a :class:`CompensatorError`; the command line turns
it into a one-line message and exit status 2. Errors also derive from the
matching builtin (``ValueError``, ``OSError``) so generic handlers still work.
"""

from __future__ import annotations

from dataclasses import dataclass


class CompensatorError(Exception):
    """Base class of every error compensator raises on purpose."""


@dataclass(frozen=True)
class Problem:
    """One problem found in an input file.

    Attributes
    ----------
    file : str
        Path as given by the user.
    line : int
        1-based line number (0 when unknown).
    key : str
        Dotted key path or column name ("" when the whole file is at fault).
    reason : str
        What is wrong, in plain words.
    """

    file: str
    line: int
    key: str
    reason: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        return f"{where}: {self.key}: {self.reason}" if self.key else f"{where}: {self.reason}"


class InputError(CompensatorError, ValueError):
    """A user-supplied file or argument is malformed.

    Parameters
    ----------
    problems : list of Problem or str
        Each problem becomes one line of the message.
    """

    def __init__(self, problems):
        if isinstance(problems, (str, Problem)):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))


class ProfileError(InputError):
    """A hardware profile is missing, malformed or non-physical."""


class ModelError(CompensatorError, ValueError):
    """A numerical routine got arguments outside its physical domain."""


class LinkError(CompensatorError, OSError):
    """The serial link failed (port, framing, timeout or remote error)."""

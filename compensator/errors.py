"""One error hierarchy, rooted in :class:`CompensatorError`.

Every error a user can cause (a bad profile, a malformed measurement file, a
non-physical argument) is a :class:`CompensatorError`; the command line turns
it into a one-line message and exit status 2. Errors also derive from the
matching builtin (``ValueError``, ``OSError``) so generic handlers still work.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["CompensatorError", "Problem", "InputError", "ProfileError", "ModelError", "ModelTypeError", "LinkError"]


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
    """A numerical routine got arguments outside its physical domain.

    Parameters
    ----------
    reason : str
        What is wrong, in plain words (no file or line: the core does not
        know them).
    key : str, optional
        The argument, profile key path or column at fault ("" when none).

    Notes
    -----
    The edge that knows where the value came from calls :meth:`at` to turn
    the error into a located :class:`InputError`; nobody parses the text.
    """

    def __init__(self, reason: str, *, key: str = ""):
        self.reason = str(reason)
        self.key = key
        super().__init__(f"{key}: {self.reason}" if key else self.reason)

    def at(self, file: str, line: int = 0, key: str | None = None) -> "InputError":
        """Return this error located in ``file`` (and ``line``) as an :class:`InputError`.

        Parameters
        ----------
        file : str
            Where the offending value came from (a path, or ``"<command line>"``).
        line : int, optional
            1-based line number, 0 when unknown.
        key : str, optional
            Overrides the error's own key (e.g. the command-line flag that
            carried the value).
        """
        located = InputError(Problem(file, line, self.key if key is None else key, self.reason))
        located.__cause__ = self
        return located


class ModelTypeError(CompensatorError, TypeError):
    """An argument of a numerical routine has the wrong type (not only a bad value)."""


class LinkError(CompensatorError, OSError):
    """The serial link failed (port, framing, timeout or remote error)."""

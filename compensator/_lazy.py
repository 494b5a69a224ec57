"""Names re-exported lazily: a package (or a module split along its seams) that loads each name on first use.

Used where importing the home modules eagerly would cost time (``compensator.loops`` without python-control
for the command line's help) or make a cycle (``compensator.firmware.pid`` re-exports names from the modules
that import it).
"""

from __future__ import annotations

import importlib
from collections.abc import Mapping

__all__ = ["lazy_exports"]


def lazy_exports(namespace: dict, homes: Mapping[str, str]):
    """A module-level ``__getattr__`` that imports each name from its home module on first use.

    Parameters
    ----------
    namespace : dict
        The re-exporting module's ``globals()``: a loaded name is kept there, so it is looked up once.
    homes : mapping of str to str
        Public name -> the fully qualified module that defines it.

    Returns
    -------
    callable
        Assign it to the module's ``__getattr__`` (PEP 562).

    Examples
    --------
    >>> namespace = {"__name__": "example"}
    >>> getattr_ = lazy_exports(namespace, {"sqrt": "math"})
    >>> getattr_("sqrt")(9.0), "sqrt" in namespace
    (3.0, True)
    """
    owner = namespace.get("__name__", "?")

    def __getattr__(name: str):
        home = homes.get(name)
        if home is None:
            raise AttributeError(f"module {owner!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(home), name)
        namespace[name] = value
        return value

    return __getattr__

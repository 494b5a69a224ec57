"""Where the bundled demo profiles and scenario are: inside the installed package, or in the source tree."""

from __future__ import annotations

from pathlib import Path

__all__ = ["bundled_profiles_dir", "DEMO_SCENARIO"]

#: File name of the bundled demo scenario.
DEMO_SCENARIO = "hut-week-scenario.yaml"


def bundled_profiles_dir() -> Path:
    """The folder holding the bundled demo profiles and scenario.

    A plain ``pip install .`` ships ``hardware_profiles/`` as the package
    ``compensator.demo_profiles``; an editable install or a source checkout
    finds it at the top of the repository.

    Returns
    -------
    Path
    """
    import compensator

    here = Path(compensator.__file__).resolve().parent
    for candidate in (here / "demo_profiles", here.parent / "hardware_profiles"):
        if (candidate / DEMO_SCENARIO).is_file():
            return candidate
    try:  # an editable install maps the package elsewhere
        from importlib.resources import files

        found = Path(str(files("compensator.demo_profiles")))
        if (found / DEMO_SCENARIO).is_file():
            return found
    except (ImportError, TypeError, ValueError):
        pass
    return here.parent / "hardware_profiles"

"""The one comparison of generated C with its reviewed golden files (``tests/golden/``, written only by
``tests/golden/update.py``)."""

from __future__ import annotations

from pathlib import Path


def assert_golden(files: dict, directory: Path) -> None:
    """The rendered files are exactly the reviewed ones in ``directory`` (no more, no fewer, byte for byte)."""
    assert sorted(files) == sorted(p.name for p in directory.iterdir())
    for fname, text in files.items():
        assert (directory / fname).read_bytes() == text.encode(), (
            f"{fname} differs from the golden file; if the change is intended, run tests/golden/update.py")

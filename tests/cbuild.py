"""Building generated C in tests with the real compiler (``cc``); tests skip with a reason when it is missing."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

CC = shutil.which("cc")
needs_cc = pytest.mark.skipif(CC is None, reason="no C compiler (cc) on PATH")

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror"]
PEDANTIC = STRICT + ["-pedantic", "-Wconversion", "-Wsign-conversion", "-Wshadow"]


def build(tmp_path: Path, files: dict, flags, output: str = "harness") -> Path:
    """Write ``files`` (name -> text) into ``tmp_path``, compile and link every ``.c`` among them.

    The build must succeed without a single diagnostic; returns the executable's path.
    """
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    sources = [str(tmp_path / n) for n in files if n.endswith(".c")]
    exe = tmp_path / output
    result = subprocess.run([CC, *flags, "-o", str(exe), *sources], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    assert result.stderr == "", result.stderr  # warning-free
    return exe

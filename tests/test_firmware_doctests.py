"""The examples in the firmware docstrings run (build_table, quantise_pid, FloatPid)."""

import doctest
from pathlib import Path

import pytest

import compensator.firmware.pid as pid
import compensator.firmware.pid_fixed as pid_fixed
import compensator.firmware.tables as tables


@pytest.mark.parametrize("module", [tables, pid, pid_fixed], ids=lambda m: m.__name__)
def test_examples(module, monkeypatch):
    monkeypatch.chdir(Path(__file__).resolve().parents[1])  # the examples read hardware_profiles/
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted >= 1 and result.failed == 0

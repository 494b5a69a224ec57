"""Every numeric option of every command goes through the checked number types of cli._common.

The static test fails on an option parsed with a bare float or int; the sweep gives every checked option
nan, infinities, a number too large for a double, and (where the type forbids it) a negative value, and
expects one line on stderr naming the option, exit status 2, and no traceback.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import pytest

from compensator.cli import build_parser
from compensator.cli._common import is_checked_number

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tools"))
import update_json_docs  # noqa: E402

sys.path.pop(0)

# PENDING: options that still take a bare float or int (issue 10 item 3); none are left. A new command's
# numeric options use the types of cli._common from the start.
PENDING_OPTIONS: set[str] = set()


def _options(parser: argparse.ArgumentParser, prefix: str = ""):
    """(command, action) for every option of every (sub)command."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from _options(sub, f"{prefix} {name}".strip())
        elif action.option_strings and prefix:
            yield prefix, action


OPTIONS = list(_options(build_parser()))
NUMERIC = [(c, a) for c, a in OPTIONS if a.type is not None and (a.type in (int, float) or is_checked_number(a.type))]


def _label(command, action):
    return f"{command} {action.option_strings[-1]}"


def test_every_numeric_option_is_checked():
    bare = sorted(_label(c, a) for c, a in NUMERIC if not is_checked_number(a.type))
    new = [name for name in bare if name not in PENDING_OPTIONS]
    assert not new, f"numeric options parsed with a bare float or int (use the types of cli._common): {new}"
    assert len(NUMERIC) >= 40  # the sweep below really covers the command set


#: Commands without a --json invocation: a command line that is complete but for the option under test.
BASE_ARGV = {
    "board-sim": ("board-sim", "--sipm", "{profiles}/hut-sipm-a.yaml", "--board", "{profiles}/hut-board-ntc.yaml"),
    "board": ("board", "--port", "loop://", "--hexdump"),
    "board watch": ("board", "--port", "loop://", "watch"),
    "log": ("log", "--port", "loop://", "--db", "never-written.sqlite"),
    "drift": ("drift", "never-read.sqlite"),
}


def _base_argv(command):
    if command in BASE_ARGV:
        return [a.format(profiles="hardware_profiles") for a in BASE_ARGV[command]]
    inv = next(i for i in update_json_docs.INVOCATIONS if i.command == command)
    places = {"profiles": "hardware_profiles", "demo": "demo", "loops": "loops", "work": "work"}
    return [a.format(**places) for a in inv.argv]


CHECKED = [(c, a) for c, a in NUMERIC if is_checked_number(a.type)]


@pytest.mark.parametrize("value", ["nan", "-inf", "1e400", "1" + "0" * 5000])
@pytest.mark.parametrize("command, action", CHECKED, ids=[_label(c, a) for c, a in CHECKED])
def test_non_finite_and_huge_values_are_one_line_and_exit_2(cli, command, action, value, profiles_dir,
                                                            monkeypatch):
    monkeypatch.chdir(profiles_dir.parent)
    count = action.nargs if isinstance(action.nargs, int) else 1
    result = cli(*_base_argv(command), action.option_strings[-1], *[value] * count)
    assert result.status == 2, result.stderr
    assert result.stderr.count("\n") == 1 and "Traceback" not in result.stderr
    assert action.option_strings[-1] in result.stderr and len(result.stderr) < 300


def test_negative_values_where_the_type_forbids_them(cli, profiles_dir, monkeypatch):
    monkeypatch.chdir(profiles_dir.parent)
    refused = 0
    for command, action in CHECKED:
        if action.type.__name__ not in ("number", "whole number"):  # (a type may refuse "1": --c-word-bits)
            continue
        try:
            action.type("-1")
        except argparse.ArgumentTypeError:
            count = action.nargs if isinstance(action.nargs, int) else 1
            result = cli(*_base_argv(command), action.option_strings[-1], *["-1"] * count)
            assert result.status == 2 and result.stderr.count("\n") == 1, (command, action.option_strings)
            assert "must be" in result.stderr
            refused += 1
    assert refused >= 2


def test_bounded_types_say_the_bound_and_the_value(cli, profiles_dir):
    result = cli("demo", "--profiles", profiles_dir, "--step-c", "1e-6")
    assert result.status == 2
    assert result.stderr.strip() == ("compensator: <command line>: argument --step-c: must be at least 0.1 K, got "
                                     "'1e-6' (see 'compensator demo --help')")
    assert "caution" not in result.stderr  # never a caution before, or with, an argument error


def test_open_bounds_refuse_the_bound_itself(cli, profiles_dir):
    from compensator.cli._common import significance_level

    assert significance_level("0.05") == 0.05 and significance_level("0.999") == 0.999
    for text, word in (("1", "less than 1"), ("0", "greater than 0"), ("1.5", "less than 1")):
        with pytest.raises(argparse.ArgumentTypeError, match=word):
            significance_level(text)
    result = cli("calibrate", "tempco", "never-read.csv", "--alpha", "1")
    assert result.status == 2
    assert "argument --alpha: must be less than 1, got '1'" in result.stderr

"""Hostile and implausible profiles: one located line each, bounded work, never a traceback."""

import time  # noqa: F401  (no wall-clock asserts: the bounds are on sizes, checked before any work)
from pathlib import Path

import pytest

from compensator.errors import ProfileError
from compensator.profiles import load_profile
from compensator.profiles import loader as L
from compensator.profiles.schema import FLOAT, INT, KINDS

REPO = Path(__file__).resolve().parent.parent
GOOD_SIPM = (REPO / "hardware_profiles" / "hut-sipm-a.yaml").read_text()
GOOD_BOARD = (REPO / "hardware_profiles" / "hut-board-ntc.yaml").read_text()
GOOD_THERMAL = (REPO / "hardware_profiles" / "hut-cooler.yaml").read_text()


def problems_of(tmp_path, text):
    path = tmp_path / "p.yaml"
    path.write_text(text)
    with pytest.raises(ProfileError) as info:
        load_profile(path)
    return info.value.problems


def _laughs(levels=9, as_key=False):
    lines = ['a0: &a0 ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]']
    for i in range(1, levels):
        lines.append(f"a{i}: &a{i} [" + ",".join([f"*a{i - 1}"] * 9) + "]")
    lines.append(f"? *a{levels - 1}\n: x" if as_key else f"kind: *a{levels - 1}")
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize("as_key", [False, True])
def test_alias_bomb_refused_before_expansion(tmp_path, as_key):
    # Nine levels of nine aliases expand to 9^9 = 387 million nodes: refused from the counted size alone.
    (p,) = problems_of(tmp_path, _laughs(as_key=as_key))
    assert "aliases expand beyond 20000 nodes" in p.reason and p.line >= 1


def test_deep_nesting_is_one_line(tmp_path):
    (p,) = problems_of(tmp_path, "kind: sipm\nname: " + "[" * 5000 + "]" * 5000 + "\n")
    assert f"nesting deeper than {L.MAX_NESTING} levels" in p.reason and p.line == 2


@pytest.mark.parametrize("number", ["1" * 5000, "0x" + "f" * 5000, "1" * 5000 + ".5"])
def test_huge_numbers_are_one_line(tmp_path, number):
    found = {p.key: p for p in problems_of(tmp_path, GOOD_SIPM.replace("  count: 18980", f"  count: {number}")
                                           .replace("  rate_hz: 1.4e6", f"  rate_hz: {number}"))}
    assert "number too long (" in found["cell.count"].reason and "at most 40" in found["cell.count"].reason
    assert "number too long" in found["dark.rate_hz"].reason


def test_messages_are_capped_in_length_and_number(tmp_path):
    junk = "".join(f"  junk{i}: 1\n" for i in range(50))
    text = GOOD_SIPM.replace("  count: 18980\n", "  count: 18980\n" + junk)
    text = text.replace("breakdown:\n", "breakdown:\n  " + "k" * 1000 + ": 1\n")
    found = problems_of(tmp_path, text)
    assert len(found) == L.MAX_PROBLEMS
    assert found[-1].reason == f"{51 - L.MAX_PROBLEMS + 1} more problems not shown"
    assert all(len(str(p)) < 400 for p in found)


def test_a_mapping_as_key_is_one_line(tmp_path):
    (p,) = problems_of(tmp_path, "? {a: 1}\n: 2\nkind: sipm\n")
    assert "a key must be plain text" in p.reason


def test_every_number_has_both_bounds():
    # Every value is bounded by what the models can handle (issue: a 1e9 s dead time must not pass).
    missing = []
    for kind in KINDS.values():
        for section in kind.sections:
            for key in section.keys:
                if key.kind in (FLOAT, INT):
                    low = key.gt is not None or key.ge is not None
                    high = key.lt is not None or key.le is not None
                    if not (low and high):
                        missing.append(f"{kind.kind}.{section.name}.{key.name}")
    assert missing == []


def test_thermal_dead_time_of_1e9_s_fails(tmp_path):
    text = GOOD_THERMAL.replace("sensor:\n", "sensor:\n  dead_time_s: 1.0e9\n", 1) if "dead_time_s" not in \
        GOOD_THERMAL else GOOD_THERMAL.replace(GOOD_THERMAL.split("dead_time_s:")[1].split("\n")[0], " 1.0e9")
    found = {p.key: p for p in problems_of(tmp_path, text)}
    assert found["sensor.dead_time_s"].reason == "must be at most 600, got 1.0e9"


def test_minus_300_c_refused(tmp_path):
    (p,) = problems_of(tmp_path, GOOD_SIPM.replace("  ref_temp_c: 25.0\n  tempco", "  ref_temp_c: -300\n  tempco"))
    assert p.key == "breakdown.ref_temp_c" and p.reason == "must be at least -200, got -300"


def test_max_bias_below_the_supply_minimum_is_refused(tmp_path):
    # The NTC board's network cannot go below 25.185 V (highest DAC code) nor the regulator below 20 V.
    found = {p.key: p for p in problems_of(tmp_path, GOOD_BOARD.replace("  max_bias_v: 36.0", "  max_bias_v: 22.0"))}
    assert "22 V is not above the lowest output the supply reaches (25.19 V)" in found["limits.max_bias_v"].reason


def test_profile_check_lines_carry_the_prefix(cli, tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(_laughs())
    result = cli("profile", "check", bad)
    assert result.status == 2
    (line,) = result.stderr.strip().splitlines()
    assert line.startswith(f"compensator: {bad}:") and "20000 nodes" in line

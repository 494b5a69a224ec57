"""The board side of the link in C, compared with reviewed golden files (a regression net).

The behavioural checks of this C are in ``tests/test_link_board_c.py`` (compiled with the real compiler and
run against the Python codec over random and corrupted frames) and ``tests/test_link_client_c_board.py``.
This file only pins the text the emitter writes, in milliseconds. The golden files are never rewritten by a
test; after an intended change regenerate them with ``python tests/golden/update.py`` and review the diff.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from compensator.errors import InputError, ModelError
from compensator.firmware.link_c import DEFAULT_LINK_NAME, render_link_c, write_link_c
from compensator.firmware.link_c_messages import C_SIZES, C_TYPES
from compensator.link import protocol as p
from golden_check import assert_golden

GOLDEN = Path(__file__).parent / "golden" / "link"

GOLDEN_NAMES = ["board_link"]


def golden_files(name: str) -> dict:
    """The files the golden test compares (also what ``tests/golden/update.py`` writes)."""
    return render_link_c(name=name, settings={"golden": "yes"})


@pytest.mark.parametrize("name", GOLDEN_NAMES)
def test_golden_files(name):
    assert_golden(golden_files(name), GOLDEN / name)


def test_the_default_name_and_the_protocol_version_in_the_banner():
    assert DEFAULT_LINK_NAME == "board_link"
    files = render_link_c()
    assert set(files) == {"board_link.h", "board_link.c"}
    assert f"protocol_version = {p.PROTOCOL_VERSION}" in files["board_link.h"]
    # a setting of the caller comes after the protocol version and cannot remove it
    text = render_link_c(settings={"zz": "1"})["board_link.c"]
    assert text.index("protocol_version = ") < text.index("zz = 1")


def test_names_are_refused_with_the_rule():
    for bad in ("Board", "1link", "_link", "a" * 25, "", "link-a", "link a", None):
        with pytest.raises(ModelError) as info:
            render_link_c(name=bad)
        assert info.value.key == "name"
        assert info.value.reason == (f"{bad!r} must be a C identifier of at most 24 lower-case letters, digits "
                                     "and underscores, starting with a letter")
    assert set(render_link_c(name="a" * 24)) == {"a" * 24 + ".h", "a" * 24 + ".c"}
    assert set(render_link_c(name="l")) == {"l.h", "l.c"}


def test_wire_types_and_their_sizes():
    # the C99 exact-width types (C99 7.18.1.1) and their sizes in bytes
    assert C_TYPES == {"u8": "uint8_t", "u16": "uint16_t", "u32": "uint32_t", "u64": "uint64_t", "i32": "int32_t"}
    assert C_SIZES == {"u8": 1, "u16": 2, "u32": 4, "u64": 8, "i32": 4}


def test_write_defaults_and_the_profiles_in_the_banner(tmp_path, board_ntc):
    paths = write_link_c(tmp_path, profiles=[board_ntc])
    assert [x.name for x in paths] == ["board_link.h", "board_link.c"]
    for path in paths:
        assert f"profile hut-board-ntc (hut-board-ntc.yaml) sha256 {board_ntc.sha256[:16]}" in path.read_text()


def test_write_is_all_or_nothing_and_refuses_to_overwrite(tmp_path):
    paths = write_link_c(tmp_path, name="uplink", settings={"golden": "yes"})
    assert [x.name for x in paths] == ["uplink.h", "uplink.c"]
    assert {x.name: x.read_text() for x in paths} == render_link_c(name="uplink", settings={"golden": "yes"})
    with pytest.raises(InputError):
        write_link_c(tmp_path, name="uplink")
    write_link_c(tmp_path, name="uplink", overwrite=True)
    assert (tmp_path / "uplink.c").read_text() == render_link_c(name="uplink")["uplink.c"]
    with pytest.raises(InputError) as info:
        write_link_c(tmp_path / "uplink.c", name="uplink")
    assert "(wanted for the C output)" in str(info.value)

"""The generated board side of the link in C against the Python codec: many random and corrupted frames."""

from __future__ import annotations

import random
import subprocess
import zlib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cbuild import needs_cc
from compensator.errors import ModelError
from compensator.firmware.link_c import render_link_c, write_link_c
from compensator.link import protocol as p
from compensator.link.codec import NEED_DATA, LinkCodec, RemoteProtocolError, encode_frame
from link_harness import build_link_harness

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion", "-Wsign-conversion",
          "-Wshadow", "-Wstrict-prototypes", "-Wmissing-prototypes"]
C_ERROR = {2: "cobs", 3: "short", 4: "crc", 5: "too_long"}


@pytest.fixture(scope="module")
def harness(tmp_path_factory):
    if needs_cc.args[0]:
        pytest.skip(needs_cc.kwargs["reason"])
    return build_link_harness(tmp_path_factory.mktemp("link_c"), STRICT)


def _run(exe, mode, data: bytes) -> list[str]:
    return subprocess.run([str(exe), mode], input=data, capture_output=True, check=True).stdout.decode().splitlines()


def _python_events(data: bytes) -> list[str]:
    codec = LinkCodec(max_buffer_bytes=len(data) + 1024)
    codec.receive_data(data)
    out = []
    while True:
        try:
            frame = codec.next_frame()
        except RemoteProtocolError as exc:
            out.append(f"E {exc.code}")
            continue
        if frame is NEED_DATA:
            return out
        out.append(f"F {frame.version} {frame.kind} {frame.seq} {frame.payload.hex()}")


def _random_message(rng: random.Random):
    """A random valid message of any kind (fields drawn over their whole wire range)."""
    cls = rng.choice([*p.MESSAGE_TYPES, p.Reply])
    values = {}
    for name, t in cls.LAYOUT:
        if t == "text":
            values[name] = "".join(chr(rng.randint(0x20, 0x7E)) for _ in range(rng.randint(0, p.MAX_TEXT_BYTES)))
        elif t == "data":
            values[name] = bytes(rng.randrange(256) for _ in range(rng.randint(0, p.MAX_CHUNK_BYTES)))
        elif t == "hash":
            values[name] = bytes(rng.randrange(256) for _ in range(32))
        elif t.endswith("[16]"):
            bits = 64 if t.startswith("u64") else 32
            lo = 0 if t.startswith("u") else -(1 << 31)
            values[name] = tuple(rng.randint(lo, lo + (1 << bits) - 1) for _ in range(16))
        else:
            bits = {"u8": 8, "u16": 16, "u32": 32, "u64": 64, "i32": 32}[t]
            lo = -(1 << 31) if t == "i32" else 0
            values[name] = rng.choice([lo, lo + (1 << bits) - 1, rng.randint(lo, lo + (1 << bits) - 1)])
    if cls is p.Reply:
        values["request_kind"] = rng.choice([3, 4, 5, 7, 8, 9, 10, 11, 12])
    return cls(seq=rng.randrange(65536), **values)


def _stream(seed: int, frames: int, corrupt_rate: float) -> tuple[bytes, list]:
    rng = random.Random(seed)
    codec = LinkCodec()
    messages, out = [], bytearray()
    for _ in range(frames):
        message = _random_message(rng)
        messages.append(message)
        wire = bytearray(codec.encode(message))
        for i in range(len(wire)):
            if rng.random() < corrupt_rate:
                wire[i] = rng.randrange(256)
        out += wire
        if rng.random() < 0.05:
            out += bytes(rng.randrange(256) for _ in range(rng.randint(1, 400))) + b"\x00"  # line noise, even overlong
    return bytes(out), messages


@needs_cc
def test_catalogue_crcs_in_c(harness):
    # CRC catalogue: CRC-16/IBM-3740 check 0x29B1, CRC-32 check 0xCBF43926 (zlib.crc32 as the reference)
    assert _run(harness, "crc", b"123456789") == ["29b1 cbf43926"]
    data = bytes(range(256)) * 3
    assert _run(harness, "crc", data) == [f"{__import__('binascii').crc_hqx(data, 0xFFFF):04x} {zlib.crc32(data):08x}"]


@needs_cc
@pytest.mark.parametrize("seed, corrupt_rate", [(1, 0.0), (2, 0.002), (3, 0.01), (4, 0.05)])
def test_c_receiver_agrees_with_python_on_random_and_corrupted_streams(harness, seed, corrupt_rate):
    data, messages = _stream(seed, 1500, corrupt_rate)
    c_events = [f"E {C_ERROR[int(line.split()[1])]}" if line.startswith("E") else line
                for line in _run(harness, "rx", data)]
    assert c_events == _python_events(data)
    frames = sum(1 for e in c_events if e.startswith("F"))
    if corrupt_rate == 0.0:
        assert frames == len(messages) and len(c_events) >= len(messages)
    else:
        assert 0 < frames < len(messages)


@needs_cc
def test_c_pack_unpack_reproduces_every_python_frame(harness):
    data, messages = _stream(9, 3000, 0.0)
    lines = _run(harness, "echo", data)
    # line noise between frames may decode as a frame now and then; the messages' frames must all echo exactly
    codec = LinkCodec()
    echoed = [bytes.fromhex(line[2:]) for line in lines if line.startswith("O ")]
    expected = [codec.encode(m) for m in messages]
    it = iter(echoed)
    assert all(any(e == x for x in it) for e in expected)
    assert {type(m) for m in messages} == {*p.MESSAGE_TYPES, p.Reply}


@needs_cc
def test_c_unpack_refuses_what_python_refuses(harness):
    cases = [
        (p.Kind.SET_BIAS, b"\x00" * 3),                        # short fixed payload
        (p.Kind.SET_BIAS, b"\x00" * 5),                        # long fixed payload
        (p.Kind.UPLOAD_CHUNK, b"\x01" + bytes(4) + b"\xc1" + bytes(193)),   # data longer than a chunk
        (p.Kind.UPLOAD_CHUNK, b"\x01" + bytes(4) + b"\x05abc"),             # length beyond the payload
        (p.Kind.IDENTITY_REPORT, b"\x01\x02a\x01" + bytes(70)),             # non-printable text
        (p.Kind.IDENTITY_REPORT, b"\x01" + bytes([p.MAX_TEXT_BYTES + 1]) + b"a" * (p.MAX_TEXT_BYTES + 1)
         + b"\x00\x00" + bytes(64)),                                       # text longer than its limit
        (p.Kind.IDENTIFY, b"\x00"),                                         # payload on an empty request
        (0x3F, b""),                                                        # unknown kind
    ]
    data = b"".join(encode_frame(int(k), i, payload) for i, (k, payload) in enumerate(cases))
    c_lines = _run(harness, "echo", data)
    assert c_lines == ["U -1"] * 7 + ["U -2"]
    codec = LinkCodec()
    codec.receive_data(data)
    codes = []
    for _ in cases:
        with pytest.raises(RemoteProtocolError) as info:
            codec.next_message()
        codes.append(info.value.code)
    assert codes == ["payload"] * 7 + ["unknown_kind"]


@needs_cc
@settings(max_examples=60)
@given(st.binary(max_size=600))
def test_c_receiver_on_arbitrary_bytes(data):
    exe = _HARNESS_CACHE.get("exe")
    if exe is None:
        pytest.skip("harness not built")
    c_events = [f"E {C_ERROR[int(line.split()[1])]}" if line.startswith("E") else line for line in _run(exe, "rx", data)]
    assert c_events == _python_events(data)


_HARNESS_CACHE: dict = {}


@pytest.fixture(autouse=True, scope="module")
def _share(harness):
    _HARNESS_CACHE["exe"] = harness
    yield
    _HARNESS_CACHE.clear()


def test_render_is_deterministic_and_named(tmp_path):
    a, b = render_link_c(), render_link_c()
    assert a == b and set(a) == {"board_link.h", "board_link.c"}
    assert "#define BOARD_LINK_KIND_SET_BIAS 0x04u" in a["board_link.h"]
    assert f"#define BOARD_LINK_MAX_ENCODED_BYTES {p.MAX_ENCODED_BYTES}u" in a["board_link.h"]
    with pytest.raises(ModelError) as info:
        render_link_c(name="Board-Link")
    assert info.value.key == "name"
    assert sorted(x.name for x in write_link_c(tmp_path, name="uplink")) == ["uplink.c", "uplink.h"]

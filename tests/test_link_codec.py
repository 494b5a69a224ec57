"""The sans-I/O codec: CRC and COBS against published values, whole/one-byte/garbage feeds, property tests."""

from __future__ import annotations

import random
import struct

import pytest
from cobs import cobs
from hypothesis import given
from hypothesis import strategies as st

from compensator.errors import LinkError
from compensator.link import protocol as p
from compensator.link.codec import (
    NEED_DATA,
    LinkCodec,
    LocalProtocolError,
    RemoteProtocolError,
    crc16,
    encode_frame,
)


def _crc16_bitwise(data: bytes, poly: int = 0x1021, init: int = 0xFFFF) -> int:
    """Independent MSB-first CRC-16 written from the catalogue parameters (not the codec's code path)."""
    crc = init
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ poly) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
    return crc


SAMPLES = [
    p.Identify(seq=1),
    p.ReadStatus(seq=2),
    p.SetOvervoltage(seq=3, overvoltage_uv=3_000_000),
    p.SetBias(seq=0xFFFF, bias_uv=-27_500_000),
    p.SetOutputs(seq=5, enabled=1),
    p.ReadFaults(seq=6),
    p.ClearFaults(seq=7, mask=0xFFFFFFFF),
    p.Heartbeat(seq=8),
    p.SetTelemetryPeriod(seq=9, period_ms=100),
    p.UploadBegin(seq=10, target=1, size_bytes=1000, crc32=0xCBF43926),
    p.UploadChunk(seq=11, target=2, offset_bytes=192, data=bytes(range(192))),
    p.UploadCommit(seq=12, target=1, size_bytes=1000, crc32=1),
    p.IdentityReport(seq=13, protocol_version=1, firmware_version="1.2.3", board_name="hut-board-ntc",
                     serial_number="", table_sha256=bytes(range(32)), coefficients_sha256=b"\xff" * 32),
    p.StatusReport(seq=14, uptime_ms=2**40, sensor_adc_code=4095, sensor_temp_mdegc=-25_000, bias_set_uv=28_000_000,
                   mode=p.Mode.LAW, outputs_enabled=1, bias_dac_code=12345, telemetry_period_ms=1000),
    p.FaultReport(seq=15, faults_live=1, faults_latched=0x81, trip_uptime_ms=tuple(range(16)),
                  trip_value=tuple(-i for i in range(16))),
    p.Reply(seq=16, request_kind=p.Kind.SET_BIAS, result=p.Result.REFUSED_LIMIT, faults=1 << 4, value=36_000_000),
    p.TelemetryReport(seq=17, uptime_ms=0, sensor_adc_code=0, sensor_temp_mdegc=0, bias_set_uv=0),
]


def _drain(codec):
    out, errors = [], []
    while True:
        try:
            message = codec.next_message()
        except RemoteProtocolError as exc:
            errors.append(exc)
            continue
        if message is NEED_DATA:
            return out, errors
        out.append(message)


# ---------------------------------------------------------------- published values

def test_crc_is_the_catalogue_ibm_3740():
    # CRC catalogue: CRC-16/IBM-3740 check value for the ASCII bytes "123456789" is 0x29B1
    assert crc16(b"123456789") == 0x29B1
    # and it is not the XMODEM variant (init 0), whose catalogue check value is 0x31C3
    assert _crc16_bitwise(b"123456789", init=0) == 0x31C3
    rng = random.Random(4)
    for _ in range(200):
        data = bytes(rng.randrange(256) for _ in range(rng.randrange(0, 300)))
        assert crc16(data) == _crc16_bitwise(data)


@pytest.mark.parametrize("raw, encoded", [
    # Cheshire and Baker, IEEE/ACM Trans. Networking 7(2), 159, 1999 (examples)
    (b"\x00", b"\x01\x01"),
    (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33"),
    (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01"),
])
def test_cobs_examples(raw, encoded):
    assert cobs.encode(raw) == encoded
    assert cobs.decode(encoded) == raw


def test_frame_layout_by_hand():
    # version 1, kind 0x04, seq 0x0102, payload i32 LE, CRC-16/IBM-3740 LE, COBS, 0x00
    frame = p.SetBias(seq=0x0102, bias_uv=0x00000010)
    body = bytes([1, 0x04, 0x02, 0x01]) + (0x10).to_bytes(4, "little")
    body += _crc16_bitwise(body).to_bytes(2, "little")
    assert LinkCodec().encode(frame) == cobs.encode(body) + b"\x00"


def test_overhead_bound_and_no_zero_inside():
    # COBS overhead at most ceil(n/254) plus the delimiter (Cheshire and Baker 1999)
    codec = LinkCodec()
    for message in SAMPLES:
        wire = codec.encode(message)
        n = len(wire) - 1
        raw = len(cobs.decode(wire[:-1]))
        assert n <= raw + -(-raw // 254)
        assert wire[-1] == 0 and 0 not in wire[:-1]
        assert len(wire) <= p.MAX_ENCODED_BYTES


# ---------------------------------------------------------------- feeding patterns

def test_whole_buffer_round_trip():
    codec = LinkCodec()
    codec.receive_data(b"".join(codec.encode(m) for m in SAMPLES))
    out, errors = _drain(codec)
    assert out == SAMPLES and errors == []
    assert codec.frames_ok == len(SAMPLES)


def test_one_byte_at_a_time():
    codec = LinkCodec()
    wire = b"".join(codec.encode(m) for m in SAMPLES)
    out = []
    for i in range(len(wire)):
        codec.receive_data(wire[i:i + 1])
        got, errors = _drain(codec)
        assert errors == []
        out += got
    assert out == SAMPLES


def test_garbage_between_frames_resynchronises():
    codec = LinkCodec()
    rng = random.Random(7)
    wire = bytearray()
    for message in SAMPLES:
        wire += bytes(rng.randrange(1, 256) for _ in range(rng.randrange(1, 40))) + b"\x00"
        wire += codec.encode(message)
    wire += b"\x13\x37"  # trailing garbage without a delimiter
    codec.receive_data(bytes(wire))
    out, errors = _drain(codec)
    assert out == SAMPLES
    assert len(errors) == len(SAMPLES)  # one dropped garbage frame before each message
    assert all(isinstance(e, RemoteProtocolError) for e in errors)
    assert codec.buffered_bytes == 2


def test_overlong_run_is_dropped_once_then_recovers():
    codec = LinkCodec()
    codec.receive_data(b"\x01" * 1000)
    with pytest.raises(RemoteProtocolError) as info:
        codec.next_message()
    assert info.value.code == "too_long"
    codec.receive_data(b"\x01" * 100)           # still the same run: dropped silently
    assert codec.next_message() is NEED_DATA
    codec.receive_data(b"\x00" + codec.encode(SAMPLES[2]))
    assert codec.next_message() == SAMPLES[2]
    assert codec.bytes_discarded == 1101


def test_buffer_bound_is_the_callers_fault():
    codec = LinkCodec(max_buffer_bytes=1024)
    codec.receive_data(b"\x01" * 1024)
    with pytest.raises(LocalProtocolError) as info:
        codec.receive_data(b"\x01")
    assert "1025" in str(info.value) and isinstance(info.value, LinkError)
    with pytest.raises(LocalProtocolError):
        LinkCodec(max_buffer_bytes=10)


def test_single_byte_corruption_never_yields_a_wrong_message():
    codec = LinkCodec()
    rng = random.Random(11)
    delivered = 0
    for trial in range(3000):
        message = SAMPLES[trial % len(SAMPLES)]
        wire = bytearray(codec.encode(message))
        pos = rng.randrange(len(wire) - 1)
        wire[pos] ^= rng.randrange(1, 256)
        codec.receive_data(bytes(wire) + b"\x00")
        out, errors = _drain(codec)
        assert errors, "a corrupted frame must be reported"
        assert all(m == message for m in out)  # a lost frame is allowed; a wrong one never
        delivered += len(out)
    assert delivered == 0


def test_version_unknown_kind_and_bad_payload_say_which_frame():
    codec = LinkCodec()
    codec.receive_data(encode_frame(p.Kind.SET_BIAS, 77, b"\x00" * 4, version=2))
    with pytest.raises(RemoteProtocolError) as info:
        codec.next_message()
    assert (info.value.code, info.value.kind, info.value.seq) == ("version", 0x04, 77)
    codec.receive_data(encode_frame(0x3F, 78, b""))
    with pytest.raises(RemoteProtocolError) as info:
        codec.next_message()
    assert (info.value.code, info.value.kind, info.value.seq) == ("unknown_kind", 0x3F, 78)
    codec.receive_data(encode_frame(p.Kind.SET_BIAS, 79, b"\x00" * 3))
    with pytest.raises(RemoteProtocolError) as info:
        codec.next_message()
    assert (info.value.code, info.value.seq) == ("payload", 79)
    codec.receive_data(encode_frame(p.Kind.UPLOAD_CHUNK, 80, b"\x01" + bytes(4) + b"\x05abc"))
    with pytest.raises(RemoteProtocolError) as info:
        codec.next_message()
    assert info.value.code == "payload"
    codec.receive_data(encode_frame(p.Kind.IDENTITY_REPORT, 81, b"\x01\x02a\x01" + bytes(200)))
    with pytest.raises(RemoteProtocolError):
        codec.next_message()
    assert codec.frames_bad == 5 and codec.frames_ok == 0


@pytest.mark.parametrize("message, field", [
    (p.SetBias(bias_uv=2**31), "bias_uv"),
    (p.SetOutputs(enabled=256), "enabled"),
    (p.SetOutputs(enabled=1.5), "enabled"),
    (p.SetOutputs(enabled=True), "enabled"),
    (p.ClearFaults(mask=-1), "mask"),
    (p.UploadChunk(target=1, offset_bytes=0, data=bytes(193)), "data"),
    (p.UploadChunk(target=1, offset_bytes=0, data="text"), "data"),
    (p.IdentityReport(protocol_version=1, firmware_version="x" * 33, board_name="b"), "firmware_version"),
    (p.IdentityReport(protocol_version=1, firmware_version="\n", board_name="b"), "firmware_version"),
    (p.IdentityReport(protocol_version=1, firmware_version="1", board_name="b", table_sha256=b"1"), "table_sha256"),
    (p.FaultReport(faults_live=0, faults_latched=0, trip_value=(1,)), "trip_value"),
    (p.ReadStatus(seq=70000), "seq"),
    (p.Reply(request_kind=p.Kind.IDENTIFY, result=0), "request_kind"),
])
def test_encoding_a_bad_value_is_our_fault(message, field):
    with pytest.raises(LocalProtocolError) as info:
        LinkCodec().encode(message)
    assert str(info.value).startswith(field)


def test_unknown_message_class_refused():
    with pytest.raises(LocalProtocolError):
        LinkCodec().encode(p.Message(seq=1))


def test_layouts_fit_a_frame():
    for cls in p.MESSAGE_TYPES:
        size = sum(p.fixed_size(t) if t not in ("text", "data") else 1 + (
            p.MAX_TEXT_BYTES if t == "text" else p.MAX_CHUNK_BYTES) for _, t in cls.LAYOUT)
        assert size <= p.MAX_PAYLOAD_BYTES
    assert p.fixed_size("u64[16]") == 128 and p.fixed_size("hash") == 32
    assert struct.calcsize("<I") == p.fixed_size("u32")
    assert p.MAX_ENCODED_BYTES == 248


# ---------------------------------------------------------------- property tests

_int = {"u8": st.integers(0, 255), "u16": st.integers(0, 0xFFFF), "u32": st.integers(0, 2**32 - 1),
        "u64": st.integers(0, 2**64 - 1), "i32": st.integers(-2**31, 2**31 - 1),
        "hash": st.binary(min_size=32, max_size=32),
        "text": st.text(st.characters(min_codepoint=0x20, max_codepoint=0x7E), max_size=p.MAX_TEXT_BYTES),
        "data": st.binary(max_size=p.MAX_CHUNK_BYTES),
        "u64[16]": st.tuples(*[st.integers(0, 2**64 - 1)] * 16),
        "i32[16]": st.tuples(*[st.integers(-2**31, 2**31 - 1)] * 16)}


def _message_strategy(cls):
    kwargs = {name: _int[t] for name, t in cls.LAYOUT}
    if cls is p.Reply:
        kwargs["request_kind"] = st.sampled_from([k for k in range(1, 0x0D) if k not in (1, 2, 6)])
    return st.builds(cls, seq=st.integers(0, 0xFFFF), **kwargs)


messages = st.one_of([_message_strategy(c) for c in (*p.MESSAGE_TYPES, p.Reply)])


@given(st.lists(messages, min_size=1, max_size=8), st.integers(1, 64))
def test_round_trip_any_split(batch, chunk):
    codec = LinkCodec()
    wire = b"".join(codec.encode(m) for m in batch)
    out = []
    for i in range(0, len(wire), chunk):
        codec.receive_data(wire[i:i + chunk])
        got, errors = _drain(codec)
        assert errors == []
        out += got
    assert out == batch


@given(st.binary(max_size=2000))
def test_arbitrary_bytes_raise_only_the_protocol_error(data):
    codec = LinkCodec()
    codec.receive_data(data)
    for _ in range(len(data) + 2):
        try:
            if codec.next_message() is NEED_DATA:
                break
        except RemoteProtocolError:
            pass
    assert codec.buffered_bytes <= p.MAX_ENCODED_BYTES


@given(messages, st.binary(min_size=1, max_size=300))
def test_garbage_then_a_frame_always_recovers(message, garbage):
    codec = LinkCodec()
    codec.receive_data(garbage + b"\x00" + codec.encode(message))
    out, _ = _drain(codec)
    assert out[-1] == message

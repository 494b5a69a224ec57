"""The Python client over a real pseudo-terminal (pyserial on the host side) to a compiled C board built from board-code."""

from __future__ import annotations

import os
import subprocess
import time
import tty
import zlib

import pytest

from cbuild import needs_cc
from compensator.link import protocol as p
from compensator.link.client import BoardClient, BoardRefused
from compensator.link.messages import Telemetry
from link_harness import build_link_harness

FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror"]


@pytest.fixture(scope="module")
def c_board(tmp_path_factory):
    if needs_cc.args[0]:
        pytest.skip(needs_cc.kwargs["reason"])
    exe = build_link_harness(tmp_path_factory.mktemp("c_board"), FLAGS)
    master, slave = os.openpty()
    tty.setraw(slave)
    proc = subprocess.Popen([str(exe), "board"], stdin=master, stdout=master)
    os.close(master)
    try:
        yield os.ttyname(slave)
    finally:
        proc.kill()
        proc.wait()
        os.close(slave)


def test_commands_refusals_uploads_and_telemetry(c_board):
    lines = []
    with BoardClient.open(c_board, ramp_down_on_exit=False, hexdump=lines.append, first_seq=100) as board:
        ident = board.identify()
        assert (ident.board_name, ident.firmware_version, ident.protocol_version) == ("stub-board", "c-stub-1", 1)
        assert board.set_bias(30.25) == pytest.approx(30.25, abs=1e-6)
        with pytest.raises(BoardRefused) as info:
            board.set_bias(40.0)
        assert info.value.result == p.Result.REFUSED_LIMIT and "limit 36 V" in str(info.value)
        assert "request_refused" in str(info.value)
        board.enable()
        status = board.status()
        assert status.telemetry.bias_set_v == pytest.approx(30.25, abs=1e-6)
        assert status.mode == "fixed" and status.outputs_enabled
        assert status.telemetry.sensor_adc_code == 1      # one executed set-bias
        assert status.telemetry.sipm_current_a == pytest.approx(1.234e-6)
        assert status.telemetry.bias_measured_v is None    # absent channel
        assert board.clear_faults() == []
        # a 1000-byte image in six chunks; the board's hash field carries its CRC-32
        image = bytes((i * 7) & 0xFF for i in range(1000))
        assert board.upload(p.UploadTarget.TABLE, image) == 1000
        digest = board.identify().table_sha256
        assert bytes.fromhex(digest[:8]) == zlib.crc32(image).to_bytes(4, "little")
        with pytest.raises(BoardRefused) as info:
            board.upload(p.UploadTarget.COEFFICIENTS, b"BAD!" + bytes(300))
        assert info.value.result == p.Result.INVALID_IMAGE
        with pytest.raises(BoardRefused) as info:
            board.upload(p.UploadTarget.TABLE, bytes(p.MAX_IMAGE_BYTES + 1))
        assert info.value.result == p.Result.REFUSED_LIMIT and str(p.MAX_IMAGE_BYTES) in str(info.value)
        board.set_telemetry_period(0.02)
        samples = [s for s in board.stream(duration_s=0.4) if isinstance(s, Telemetry)]
        board.set_telemetry_period(0)
        assert len(samples) >= 5
        assert all(s.sensor_temp_c == 21.5 for s in samples)
        assert all(b > a for a, b in zip([s.uptime_s for s in samples], [s.uptime_s for s in samples][1:]))
    assert lines[0].startswith("> ") and any(line.startswith("< ") for line in lines)


def test_retried_sequence_number_is_answered_not_executed_twice(c_board):
    with BoardClient.open(c_board, ramp_down_on_exit=False) as board:
        before = board.status().telemetry.sensor_adc_code
        codec = board._codec
        wire = codec.encode(p.SetBias(seq=4242, bias_uv=29_000_000))
        answers = []
        for _ in range(3):
            board.transport.write(wire)
            deadline = time.monotonic() + 1.0
            answers.append(board._pump(deadline))
        assert answers[0] == answers[1] == answers[2]
        assert answers[0].result == p.Result.OK and answers[0].value == 29_000_000
        assert board.status().telemetry.sensor_adc_code == before + 1
        # a new sequence number with the same content executes again (the command is absolute: harmless)
        board.transport.write(codec.encode(p.SetBias(seq=4243, bias_uv=29_000_000)))
        assert board._pump(time.monotonic() + 1.0).value == 29_000_000
        assert board.status().telemetry.sensor_adc_code == before + 2


def test_unparsable_requests_get_a_refusal(c_board):
    from compensator.link.codec import encode_frame

    with BoardClient.open(c_board, ramp_down_on_exit=False) as board:
        board.transport.write(encode_frame(p.Kind.SET_BIAS, 7, b"\x01\x02", version=1))
        refusal = board._pump(time.monotonic() + 1.0)
        assert (type(refusal), refusal.result, refusal.seq) == (p.Refusal, p.Result.BAD_REQUEST, 7)
        board.transport.write(encode_frame(p.Kind.SET_BIAS, 8, bytes(4), version=9))
        refusal = board._pump(time.monotonic() + 1.0)
        assert (refusal.result, refusal.value) == (p.Result.BAD_VERSION, 1)
        board.transport.write(encode_frame(0x55, 9, b""))
        assert board._pump(time.monotonic() + 1.0).result == p.Result.UNKNOWN_KIND

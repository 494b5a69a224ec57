"""Benchmark: link codec throughput against the line rate, fuzzing throughput, status round trip over a pty.

Usage: python tools/bench/bench_link.py [--frames N] [--fuzz-bytes N] [--round-trips N]

1. Decoding: telemetry frames per second through ``LinkCodec`` (COBS by the
   ``cobs`` package, CRC by ``binascii``), whole buffer, against the frame
   rate of a 921,600 baud line (8N1: 92,160 bytes/s; a telemetry frame is 64
   bytes on the wire, so 1,440 frames/s). Target: at least 20 times the line
   rate. Baseline measured in the same run: the same decoding with the pure
   Python COBS of the ``cobs`` package and a bitwise CRC (what a hand-written
   codec costs).
2. Fuzzing: random bytes per second through ``receive_data``/``next_message``
   (every frame rejected), beside the decoding rate of valid bytes.
3. Round trip of ``read_status`` from the client (pyserial on the pty) to the
   simulated board, and to a compiled C board built from ``board-code``
   (when ``cc`` is there), beside the round trip of a bare pty echo: median
   and 95th percentile over N requests.
"""

from __future__ import annotations

import argparse
import os
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import tty
from pathlib import Path

from compensator.link import protocol as p
from compensator.link.codec import NEED_DATA, LinkCodec, RemoteProtocolError

from timing import best_of  # tools/bench/timing.py, beside this script

REPO = Path(__file__).resolve().parents[2]
LINE_BAUD = 921_600


def _telemetry_stream(n: int) -> bytes:
    rng = random.Random(1)
    codec = LinkCodec()
    return b"".join(codec.encode(p.TelemetryReport(
        seq=i & 0xFFFF, uptime_ms=100 * i, sensor_adc_code=rng.randrange(4096),
        sensor_temp_mdegc=rng.randrange(-25_000, 45_000), bias_set_uv=rng.randrange(25_000_000, 35_000_000),
        bias_measured_uv=rng.randrange(25_000_000, 35_000_000), sipm_current_na=rng.randrange(0, 5000),
        overvoltage_target_uv=3_000_000)) for i in range(n))


def _decode_all(data: bytes) -> int:
    codec = LinkCodec(max_buffer_bytes=len(data) + 1024)
    codec.receive_data(data)
    n = 0
    while codec.next_message() is not NEED_DATA:
        n += 1
    return n


def _decode_naive(data: bytes) -> int:
    """The baseline: the same framing with pure Python COBS and a bitwise CRC-16/IBM-3740."""
    from cobs.cobs import _cobs_py

    from compensator.link.codec import decode_payload

    def crc16(buf):
        crc = 0xFFFF
        for byte in buf:
            crc ^= byte << 8
            for _ in range(8):
                crc = ((crc << 1) ^ 0x1021) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
        return crc

    n = 0
    for encoded in data.split(b"\x00")[:-1]:
        body = _cobs_py.decode(encoded)
        assert crc16(body[:-2]) == int.from_bytes(body[-2:], "little")
        decode_payload(p.message_type(body[1]), body[4:-2], seq=body[2] | body[3] << 8, kind=body[1])
        n += 1
    return n


def _fuzz(data: bytes) -> int:
    codec = LinkCodec(max_buffer_bytes=len(data) + 1024)
    codec.receive_data(data)
    rejected = 0
    while True:
        try:
            if codec.next_message() is NEED_DATA:
                return rejected
        except RemoteProtocolError:
            rejected += 1


def _percentiles(times):
    times = sorted(times)
    return statistics.median(times), times[int(0.95 * (len(times) - 1))]


def _round_trips(path: str, n: int):
    from compensator.link.client import BoardClient

    times = []
    with BoardClient.open(path, ramp_down_on_exit=False) as board:
        board.status()
        for _ in range(n):
            start = time.perf_counter()
            board.status()
            times.append(time.perf_counter() - start)
    return _percentiles(times)


def _echo_round_trips(n: int):
    """Baseline: a thread echoing bytes on the master side; the host writes a status-sized frame and reads it back."""
    import serial

    master, slave = os.openpty()
    tty.setraw(slave)
    stop = False

    def echo():
        while not stop:
            try:
                data = os.read(master, 4096)
            except OSError:
                return
            os.write(master, data)

    thread = threading.Thread(target=echo, daemon=True)
    thread.start()
    port = serial.serial_for_url(os.ttyname(slave), timeout=1.0)
    frame = bytes(range(1, 75)) + b"\x00"
    times = []
    for _ in range(n):
        start = time.perf_counter()
        port.write(frame)
        got = b""
        while len(got) < len(frame):
            got += port.read(len(frame) - len(got))
        times.append(time.perf_counter() - start)
    stop = True
    port.close()
    os.close(slave)
    os.close(master)
    return _percentiles(times)


def _c_board(n: int):
    cc = shutil.which("cc")
    if cc is None:
        return None
    sys.path.insert(0, str(REPO / "tests"))
    try:
        from link_harness import HARNESS
    finally:
        sys.path.pop(0)
    from compensator.firmware.link_c import render_link_c

    with tempfile.TemporaryDirectory() as tmp:
        for name, text in {**render_link_c(), "main.c": HARNESS}.items():
            Path(tmp, name).write_text(text)
        exe = Path(tmp, "board")
        subprocess.run([cc, "-std=c99", "-O2", "-o", str(exe), *(str(x) for x in Path(tmp).glob("*.c"))], check=True)
        master, slave = os.openpty()
        tty.setraw(slave)
        proc = subprocess.Popen([str(exe), "board"], stdin=master, stdout=master)
        try:
            return _round_trips(os.ttyname(slave), n)
        finally:
            proc.kill()
            proc.wait()
            os.close(master)
            os.close(slave)


def _sim_board(n: int):
    from compensator.board import SimulatedBoard, build_board
    from compensator.profiles import load_board, load_sipm

    profiles = REPO / "hardware_profiles"
    firmware, plant, _ = build_board(load_sipm(profiles / "hut-sipm-a.yaml"), load_board(profiles / "hut-board-ntc.yaml"),
                                     overvoltage_v=3.0, heartbeat_timeout_s=0.0)
    sim = SimulatedBoard(firmware, plant)
    thread = threading.Thread(target=sim.run, daemon=True)
    thread.start()
    try:
        return _round_trips(sim.path, n)
    finally:
        sim.stop()
        thread.join(5.0)
        sim.close()


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=50_000)
    parser.add_argument("--fuzz-bytes", type=int, default=2_000_000)
    parser.add_argument("--round-trips", type=int, default=300)
    args = parser.parse_args(argv)

    data = _telemetry_stream(args.frames)
    frame_bytes = len(data) / args.frames
    line_fps = LINE_BAUD / 10 / frame_bytes
    t_fast, n = best_of(lambda: _decode_all(data), 3)
    assert n == args.frames
    small = data[: int(len(data) / 10)]
    small_frames = small.count(0)
    t_naive, n_naive = best_of(lambda: _decode_naive(small), 1)
    assert n_naive == small_frames
    fast_fps, naive_fps = n / t_fast, n_naive / t_naive
    print(f"decoding telemetry frames ({frame_bytes:.0f} bytes on the wire), best of 3:")
    print(f"  line rate at {LINE_BAUD} baud     {line_fps:12,.0f} frames/s   (1.0x)")
    print(f"  LinkCodec (cobs C, binascii)  {fast_fps:12,.0f} frames/s   ({fast_fps / line_fps:.1f}x line rate; "
          f"target >= 20x: {'met' if fast_fps >= 20 * line_fps else 'NOT met'})")
    print(f"  baseline: pure Python COBS    {naive_fps:12,.0f} frames/s   ({naive_fps / line_fps:.1f}x line rate)")

    rng = random.Random(7)
    noise = bytes(rng.randrange(256) for _ in range(args.fuzz_bytes))
    t_fuzz, rejected = best_of(lambda: _fuzz(noise), 3)
    print(f"fuzzing with {args.fuzz_bytes:,} random bytes, best of 3:")
    print(f"  random bytes                  {args.fuzz_bytes / t_fuzz:12,.0f} bytes/s    ({rejected:,} frames rejected, "
          f"no other error)")
    print(f"  valid telemetry bytes         {len(data) / t_fast:12,.0f} bytes/s    (line: {LINE_BAUD / 10:,.0f} bytes/s)")

    print(f"read_status round trip over a pty, {args.round_trips} requests (median, 95th percentile):")
    med, p95 = _echo_round_trips(args.round_trips)
    print(f"  baseline: bare pty echo       {1e3 * med:8.3f} ms  {1e3 * p95:8.3f} ms")
    c = _c_board(args.round_trips)
    if c is None:
        print("  compiled C board              (skipped: no cc)")
    else:
        print(f"  compiled C board (board-code) {1e3 * c[0]:8.3f} ms  {1e3 * c[1]:8.3f} ms")
    med, p95 = _sim_board(args.round_trips)
    print(f"  simulated board (Python)      {1e3 * med:8.3f} ms  {1e3 * p95:8.3f} ms")
    return 0


if __name__ == "__main__":
    sys.exit(main())

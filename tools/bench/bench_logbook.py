"""Benchmark: logbook ingest against the serial line rate, and drift analysis of 30 days at 1 Hz.

Usage: python tools/bench/bench_logbook.py [--days 30] [--ingest-rows 200000] [--cpu-seconds 5] [--quick]

1. Ingest. The 921,600 baud line carries at most 92,160 bytes/s (10 bits per
   byte); a telemetry frame is sized with the link's codec when it is
   installed (else a stated estimate), which gives the line's frame rate.
   The logbook writer (batched commits every second, WAL, synchronous=FULL)
   ingests Telemetry records as fast as it can; baseline in the same run: a
   naive logger committing every row. Target: >= 10x the line rate.
2. CPU share. The logger runs for a few seconds against a source paced at
   the line's frame rate; CPU time of the process over wall time (the source
   building its records is counted against the logger: conservative).
3. Analysis. A seeded synthetic logbook of DAYS days at 1 Hz (30 days =
   2.59 M rows; invented data) is analysed by `compensator drift --json` in a
   child process: wall time and the child's peak resident memory. Baseline
   in the same run: reading the same rows the obvious way (fetchall into a
   list of tuples, then numpy). Targets: <= 10 s and <= 1 GB.
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from compensator.drift.synthetic import synthetic_run
from compensator.link.messages import Identity, Telemetry
from compensator.logbook import LogbookWriter, run_logger, write_run

BAUD = 921_600
BITS_PER_BYTE = 10
IDENTITY = Identity(firmware_version="bench", board_name="bench", protocol_version=1, serial_number="bench")


def frame_bytes() -> tuple[int, str]:
    """Bytes of one telemetry frame on the wire, and where the figure comes from."""
    try:
        from compensator.link import protocol
        from compensator.link.codec import LinkCodec

        report = protocol.TelemetryReport(uptime_ms=123456789, sensor_adc_code=40000, sensor_temp_mdegc=-12345,
                                          bias_set_uv=27_123_456, bias_measured_uv=27_120_000,
                                          sipm_current_na=1234, overvoltage_target_uv=3_000_000,
                                          dark_peak_gain=1_600_000, dark_peak_gain_err=3000)
        return len(LinkCodec().encode(report)), "the link codec's encoded telemetry frame"
    except Exception:  # the link is not installed in this build
        return 64, "estimate: 56-byte payload + header, CRC-16 and COBS framing"


def sample(k: int) -> Telemetry:
    return Telemetry(uptime_s=k * 1e-3, sensor_adc_code=30000 + k % 1000, sensor_temp_c=5.0 + 1e-4 * (k % 1000),
                     bias_set_v=27.1, bias_measured_v=27.099, sipm_current_a=2e-6, overvoltage_target_v=3.0,
                     faults_live=0, faults_latched=0, dark_peak_gain=1.6e6, dark_peak_gain_err=3e3)


def ingest_rate(rows: int, folder: Path) -> tuple[float, float]:
    """Rows per wall second and per CPU second of the writer."""
    records = [sample(k) for k in range(rows)]
    with LogbookWriter(folder / "ingest.sqlite") as writer:
        writer.start_session(IDENTITY, unit_id="bench", port="bench", rate_hz=None, started_unix_s=0.0)
        start, cpu = time.perf_counter(), time.process_time()
        for k, record in enumerate(records):
            writer.append(record, host_time_unix_s=float(k))
        writer.flush()
        elapsed, cpu = time.perf_counter() - start, time.process_time() - cpu
    return rows / elapsed, rows / cpu


def naive_rate(rows: int, folder: Path) -> tuple[float, float]:
    from compensator.logbook.schema import create_statements
    from compensator.logbook.store import _INSERT_TELEMETRY, _ROW

    conn = sqlite3.connect(folder / "naive.sqlite", isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.execute("PRAGMA synchronous = FULL")
    for statement in create_statements():
        conn.execute(statement)
    conn.execute("INSERT INTO sessions VALUES (1, 0, 'b', 'b', 'b', 1, '', '', '', '', NULL, '')")
    start, cpu = time.perf_counter(), time.process_time()
    for k in range(rows):
        conn.execute(_INSERT_TELEMETRY, (1, float(k), *_ROW(sample(k))))     # autocommit: one transaction per row
    elapsed, cpu = time.perf_counter() - start, time.process_time() - cpu
    conn.close()
    return rows / elapsed, rows / cpu


class PacedBoard:
    def __init__(self, rate_hz: float):
        self.rate_hz = rate_hz

    def identify(self):
        return IDENTITY

    def stream(self, *, duration_s=None):
        start = time.monotonic()
        k = 0
        while time.monotonic() - start < duration_s:
            due = start + k / self.rate_hz
            delay = due - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            yield sample(k)
            k += 1


def cpu_share(rate_hz: float, seconds: float, folder: Path) -> tuple[float, int]:
    wall0, cpu0 = time.perf_counter(), time.process_time()
    result = run_logger(PacedBoard(rate_hz), folder / "paced.sqlite", port="bench", duration_s=seconds)
    return (time.process_time() - cpu0) / (time.perf_counter() - wall0), result.rows


ANALYSE = """
import resource, sys, time
start = time.perf_counter()
from compensator.cli import main
import contextlib, io
with contextlib.redirect_stdout(io.StringIO()):
    status = main(["drift", sys.argv[1], "--json"])
usage = resource.getrusage(resource.RUSAGE_SELF)
workers = resource.getrusage(resource.RUSAGE_CHILDREN)   # the two reader processes of a large run
print(time.perf_counter() - start, usage.ru_utime + usage.ru_stime + workers.ru_utime + workers.ru_stime,
      usage.ru_maxrss / 1024, workers.ru_maxrss / 1024, status)
"""

NAIVE_READ = """
import sqlite3, sys, time
import numpy as np
start = time.perf_counter()
conn = sqlite3.connect(sys.argv[1])
rows = conn.execute("SELECT host_time_unix_s, sensor_temp_c, bias_set_v, bias_measured_v, overvoltage_target_v, "
                    "faults_live, dark_peak_gain, dark_peak_gain_err, session_id FROM telemetry").fetchall()
data = np.array(rows, dtype=float)
print(time.perf_counter() - start)
"""


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=float, default=30.0)
    parser.add_argument("--ingest-rows", type=int, default=200_000)
    parser.add_argument("--cpu-seconds", type=float, default=5.0)
    parser.add_argument("--quick", action="store_true", help="3 days, 50,000 rows, 2 s: checks that it runs")
    args = parser.parse_args(argv)
    if args.quick:
        args.days, args.ingest_rows, args.cpu_seconds = 3.0, 50_000, 2.0
    print(f"load average before the run: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (wall times need an idle "
          "machine; CPU times are less sensitive)")
    size, where = frame_bytes()
    line_hz = BAUD / BITS_PER_BYTE / size
    print(f"line: {BAUD} baud -> {BAUD // BITS_PER_BYTE} bytes/s; telemetry frame {size} bytes ({where}) "
          f"-> {line_hz:.0f} frames/s")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        rate, rate_cpu = ingest_rate(args.ingest_rows, folder)
        naive, naive_cpu = naive_rate(min(2000, args.ingest_rows), folder)
        print(f"ingest, batched commits every 1 s:  {rate:10,.0f} rows/s wall = {rate / line_hz:6.1f}x the line rate "
              f"(target >= 10x); {rate_cpu:10,.0f} rows per CPU second = {rate_cpu / line_hz:6.1f}x; "
              f"one run of {args.ingest_rows} rows")
        print(f"baseline, one commit per row:       {naive:10,.0f} rows/s wall = {naive / line_hz:6.1f}x the line rate; "
              f"{naive_cpu:10,.0f} rows per CPU second")
        share, rows = cpu_share(line_hz, args.cpu_seconds, folder)
        print(f"logger CPU at the line rate:        {100 * share:6.1f} % of one core over {args.cpu_seconds:g} s "
              f"({rows} rows; the paced source's own work included)")

        rows_total = int(args.days * 86400)
        run, _ = synthetic_run(days=args.days, rate_hz=1.0, dark_peak_every=60, gaps=[(args.days / 3, 3600.0)],
                               seed=1)
        db = folder / "month.sqlite"
        start = time.perf_counter()
        write_run(db, run, chunk_rows=200_000)
        made = time.perf_counter() - start
        del run
        print(f"analysis input: {rows_total:,} rows ({args.days:g} days at 1 Hz, invented data), written in {made:.1f} s")
        env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
        out = subprocess.run([sys.executable, "-c", ANALYSE, str(db)], capture_output=True, text=True, env=env)
        seconds, cpu_s, peak_mb, worker_mb, status = out.stdout.split()
        naive_s = subprocess.run([sys.executable, "-c", NAIVE_READ, str(db)], capture_output=True, text=True,
                                 env=env).stdout.strip()
        print(f"compensator drift --json:           {float(seconds):6.2f} s wall (target <= 10 s), {float(cpu_s):6.2f} s "
              f"CPU in all processes; peak resident {float(peak_mb):.0f} MB"
              + (f" + 2 reader processes of at most {float(worker_mb):.0f} MB each" if float(worker_mb) else "")
              + f" (target <= 1024 MB); exit {status}; one run, start-up included")
        print(f"baseline, fetchall + numpy read:    {float(naive_s):6.2f} s wall for the read alone")
    return 0


if __name__ == "__main__":
    sys.exit(main())

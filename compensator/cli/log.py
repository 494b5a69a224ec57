"""``compensator log``: stream the board's telemetry into a crash-safe logbook."""

from __future__ import annotations

import math
import sys
import time

from compensator.cli._common import (
    EXIT_INTERRUPTED,
    EXIT_OK,
    add_json_flag,
    bounded_float,
    caution,
    non_negative_float,
    positive_float,
    print_json,
    usage_error,
)

from compensator.link.protocol import MAX_TELEMETRY_PERIOD_S, MIN_TELEMETRY_PERIOD_S

__all__ = ["register", "run"]

ORDER = 80
#: How long the logger keeps trying to open the port at the start (a board still booting or re-enumerating).
CONNECT_WINDOW_S = 5.0
COMMAND = "log"
HELP = "log the board's telemetry into a crash-safe SQLite logbook"


def register(subparsers) -> None:
    parser = subparsers.add_parser(COMMAND, help=HELP, description=(
        "Stream telemetry from the controller board into a SQLite logbook (write-ahead log, commits at least "
        "every second: a crash or power cut loses at most the last second). A restarted logger appends a new "
        "session to the same file; link outages, missed samples and fault changes are recorded as events. "
        "The logger only listens: it never changes the board's bias or outputs. Caution: the board drives "
        "a SiPM bias of tens of volts; follow local codes and licensed practice when working on it."))
    parser.add_argument("--port", required=True, metavar="URL",
                        help="serial device, pseudo-terminal path or pyserial URL of the board")
    parser.add_argument("--db", required=True, metavar="RUN.sqlite", help="logbook file (created or appended to)")
    parser.add_argument("--duration-s", type=positive_float, metavar="S", help="stop after S seconds "
                        "(default: run until Ctrl-C or SIGTERM)")
    parser.add_argument("--rate-hz", type=bounded_float(1.0 / MAX_TELEMETRY_PERIOD_S, 1.0 / MIN_TELEMETRY_PERIOD_S,
                                                         unit="Hz"), metavar="R",
                        help="telemetry rate to ask the board for, 1/3600 to 1000 Hz")
    parser.add_argument("--unit", default="", metavar="NAME", help="instrument name for fleet views "
                        "(default: the board's serial number)")
    parser.add_argument("--connect-window-s", type=non_negative_float, default=CONNECT_WINDOW_S, metavar="S",
                        help="keep trying to open the port for this long at the start (default 5 s)")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


class _StatusLine:
    """The live status line on stderr: rewritten in place on a terminal, one line every 10 s otherwise."""

    def __init__(self, stream=None):
        self.stream = stream or sys.stderr
        self.tty = self.stream.isatty()
        self.last = -math.inf

    def __call__(self, s) -> None:
        if not self.tty and s.elapsed_s - self.last < 10.0:
            return
        self.last = s.elapsed_s
        faults = ",".join(s.faults) or "none"
        link = "" if s.link_up else "  LINK DOWN"
        text = (f"{s.elapsed_s:8.0f} s  {s.rows} rows ({s.rows_committed} committed)  {s.rate_hz:.2f} rows/s  "
                f"T {s.temp_c:.2f} C  bias {s.bias_v:.3f} V  faults {faults}{link}")
        self.stream.write(("\r" + text + "\x1b[K") if self.tty else text + "\n")
        self.stream.flush()

    def end(self) -> None:
        if self.tty and self.last > -math.inf:
            self.stream.write("\n")


def _connect(client_type, port: str, window_s: float):
    """An opened client; retries for ``window_s``, then the link's one-line error."""
    from compensator.errors import LinkError

    deadline = time.monotonic() + window_s
    delay = 0.1
    while True:
        client = client_type.open(port, ramp_down_on_exit=False)
        try:
            client.transport.open()
            return client
        except LinkError:
            if time.monotonic() + delay > deadline:
                raise
        time.sleep(delay)
        delay = min(2 * delay, 1.0)


def run(args) -> int:
    from compensator.logbook.logger import run_logger

    try:
        from compensator.link.client import BoardClient
    except ImportError:
        raise usage_error("--port", "this build has no link client to reach a board") from None
    from pathlib import Path

    from compensator.logbook.store import open_for_reading

    if Path(args.db).exists():
        open_for_reading(args.db).close()   # not a logbook, newer schema, locked: say so before touching the board
    line = _StatusLine()
    try:
        client = _connect(BoardClient, args.port, args.connect_window_s)
        with client:   # SIGTERM arrives as KeyboardInterrupt (compensator.cli.main): the session ends cleanly
            result = run_logger(client, args.db, port=args.port, duration_s=args.duration_s, rate_hz=args.rate_hz,
                                unit_id=args.unit, status=line)
    finally:
        line.end()
    caution("caution: the logged board drives a SiPM bias of tens of volts (above 60 V dc is hazardous live, "
            "IEC 61010-1); the logger only listens, and work on the board follows local codes and licensed "
            "practice")
    if args.json:
        print_json(result)
    else:
        print(f"{result.logbook}: {result.rows} rows in {result.duration_s:.1f} s (sessions "
              f"{', '.join(map(str, result.session_ids))}; {result.rows_total} rows in the file), "
              f"{result.disconnects} disconnects, {result.missed_gaps} gaps, {result.fault_changes} fault changes"
              + ("; stopped by the user" if result.interrupted else ""))
    return EXIT_INTERRUPTED if result.interrupted else EXIT_OK

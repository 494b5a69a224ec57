"""The logger: events for faults, link outages, missed samples and identity changes; status; a crash test."""

from __future__ import annotations

import dataclasses
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from compensator.drift import analyse_run
from compensator.firmware.faults import FaultFlag
from compensator.link.messages import Identity, Telemetry
from compensator.logbook import EventKind, count_rows, missed_gap_s, read_events, read_run, read_sessions, run_logger

REPO = Path(__file__).resolve().parent.parent
IDENTITY = Identity(firmware_version="2.1.0", board_name="hut-board-ntc", protocol_version=1,
                    table_sha256="ab" * 32, coefficients_sha256="cd" * 32, serial_number="SN-7")


@dataclasses.dataclass
class LinkNote:          # what the link's client yields between samples
    kind: str
    time_s: float
    gap_s: float = 0.0
    detail: str = ""


def sample(uptime_s, faults=0, temp_c=4.0):
    return Telemetry(uptime_s=uptime_s, sensor_adc_code=31000, sensor_temp_c=temp_c, bias_set_v=27.0,
                     bias_measured_v=26.999, overvoltage_target_v=3.0, faults_live=faults, faults_latched=faults)


class ScriptedBoard:
    """A source following a script; identities answered in turn."""

    def __init__(self, script, identities):
        self.script = script
        self.identities = list(identities)
        self.periods = []

    def identify(self):
        return self.identities.pop(0) if len(self.identities) > 1 else self.identities[0]

    def set_telemetry_period(self, period_s):
        self.periods.append(period_s)

    def stream(self, *, duration_s=None):
        yield from self.script


class FakeClock:
    def __init__(self, start):
        self.now = start

    def __call__(self):
        self.now += 1.0
        return self.now


def test_faults_outages_gaps_and_identity_changes_become_events(tmp_path):
    flashed = dataclasses.replace(IDENTITY, table_sha256="ef" * 32)
    script = [sample(0.0), sample(1.0), sample(2.0, faults=int(FaultFlag.SENSOR_OPEN)),
              sample(3.0, faults=int(FaultFlag.SENSOR_OPEN | FaultFlag.OVER_CURRENT)), sample(4.0),
              sample(9.0),                                         # four samples missed
              LinkNote("disconnected", 1_000_020.0, detail="port vanished"),
              LinkNote("reconnected", 1_000_050.0, gap_s=30.0),
              sample(0.5), sample(1.5)]                           # board restarted with a new table
    statuses = []
    board = ScriptedBoard(script, [IDENTITY, flashed])
    result = run_logger(board, tmp_path / "run.sqlite", port="/dev/ttyUSB0", rate_hz=1.0,
                        status=statuses.append, status_interval_s=0.0, wall_clock=FakeClock(1_000_000.0))
    assert board.periods == [1.0, 1.0]
    assert (result.rows, result.disconnects, result.missed_gaps, result.fault_changes) == (8, 1, 1, 3)
    assert len(result.session_ids) == 2 and not result.interrupted
    events = [(e.kind, e.faults, e.duration_s) for e in read_events(tmp_path / "run.sqlite")]
    kinds = [k for k, _, _ in events]
    assert kinds == [EventKind.SESSION_START, EventKind.FAULT_RAISED, EventKind.FAULT_RAISED,
                     EventKind.FAULT_CLEARED, EventKind.SAMPLES_MISSED, EventKind.LINK_LOST,
                     EventKind.LINK_RESTORED, EventKind.SESSION_END, EventKind.SESSION_START, EventKind.SESSION_END]
    assert events[1][1] == int(FaultFlag.SENSOR_OPEN) and events[2][1] == int(FaultFlag.OVER_CURRENT)
    assert events[3][1] == int(FaultFlag.SENSOR_OPEN | FaultFlag.OVER_CURRENT)
    assert events[4][2] == pytest.approx(5.0) and events[6][2] == pytest.approx(30.0)
    sessions = read_sessions(tmp_path / "run.sqlite")
    assert [s.rows for s in sessions] == [6, 2] and sessions[1].table_sha256 == "ef" * 32
    assert statuses[-1].rows == 8 and statuses[-1].temp_c == 4.0 and statuses[-1].bias_v == 26.999
    assert any(not s.link_up for s in statuses) and statuses[-1].link_up
    assert statuses[3].faults == ("sensor_open", "over_current")


def test_missed_gap_rule():
    assert missed_gap_s(10.0, 11.0, 1.0) == 0.0
    assert missed_gap_s(10.0, 12.0, 1.0) == 0.0          # one sample late: not yet a gap
    assert missed_gap_s(10.0, 14.5, 1.0) == 4.5
    assert missed_gap_s(10.0, 10.35, 0.1) == 0.0         # over three periods of 0.1 s, but under period + 1 s
    assert missed_gap_s(10.0, 11.2, 0.1) == pytest.approx(1.2)
    assert missed_gap_s(10.0, 2.0, 1.0) == float("inf")


def test_drift_analysis_names_the_outage_the_logger_recorded(tmp_path):
    script = [sample(float(k), temp_c=4.0 + 0.001 * k) for k in range(20)]
    script += [LinkNote("disconnected", 0.0), LinkNote("reconnected", 0.0, gap_s=40.0)]
    script += [sample(float(k), temp_c=4.0) for k in range(60, 80)]
    clock = FakeClock(5e6)

    class Clocked(ScriptedBoard):
        def stream(self, *, duration_s=None):
            for item in self.script:
                if isinstance(item, LinkNote):
                    clock.now += 20.0
                    item = dataclasses.replace(item, time_s=clock.now)
                yield item

    run_logger(Clocked(script, [IDENTITY]), tmp_path / "run.sqlite", port="p", wall_clock=clock)
    report = analyse_run(read_run(tmp_path / "run.sqlite"))
    assert [(g.cause, g.duration_s) for g in report.gaps] == [("link_lost", 41.0)]   # by the board's clock: uptime 19 s to 60 s
    assert report.samples == 40


# ---------------------------------------------------------------- crash test: SIGKILL while streaming

LOGGER = textwrap.dedent("""
    import sys, time
    from compensator.link.messages import Identity, Telemetry
    from compensator.logbook import run_logger

    class Board:
        def identify(self):
            return Identity(firmware_version="2.1.0", board_name="hut-board-ntc", protocol_version=1,
                            serial_number="SN-CRASH")
        def set_telemetry_period(self, period_s):
            self.period_s = period_s
        def stream(self, duration_s=None):
            k = 0
            while True:
                time.sleep(self.period_s)
                k += 1
                yield Telemetry(uptime_s=k * self.period_s, sensor_adc_code=k % 65536, sensor_temp_c=5.0,
                                bias_set_v=27.0, overvoltage_target_v=3.0, dark_peak_gain=float(k))

    def status(s):
        print(s.rows_committed, flush=True)

    run_logger(Board(), sys.argv[1], port="crash-test", rate_hz=500.0, commit_interval_s=0.2,
               status=status, status_interval_s=0.05)
""")


def test_sigkill_of_a_fast_logger_loses_no_committed_row(tmp_path):
    path = tmp_path / "crash.sqlite"
    env = dict(os.environ, PYTHONPATH=str(REPO))
    last_count = 0
    for round_ in range(2):
        proc = subprocess.Popen([sys.executable, "-c", LOGGER, str(path)], stdout=subprocess.PIPE, text=True,
                                env=env)
        try:
            reported = 0
            for line in proc.stdout:                      # the logger's own count of committed rows
                reported = int(line)
                if reported >= last_count + 200:
                    break
            conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
            seen = conn.execute("SELECT session_id, uptime_s, dark_peak_gain FROM telemetry").fetchall()
            conn.close()
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.wait()
        assert proc.returncode == -signal.SIGKILL
        conn = sqlite3.connect(path)
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        after = set(conn.execute("SELECT session_id, uptime_s, dark_peak_gain FROM telemetry").fetchall())
        sessions = conn.execute("SELECT count(*) FROM sessions").fetchone()[0]
        conn.close()
        assert set(seen) <= after                         # everything a reader saw committed is still there
        assert len(after) >= max(reported, len(seen))     # and everything the logger said it committed
        assert len(after) >= last_count                   # the count only grows
        assert sessions == round_ + 1                     # each restart appended a session
        last_count = len(after)
    run = read_run(path)
    assert run.samples == last_count and len(run.sessions) == 2
    assert count_rows(path) == last_count
    kinds = [e.kind for e in read_events(path)]
    assert kinds.count(EventKind.SESSION_START) == 2 and EventKind.SESSION_END not in kinds


def test_status_line_shows_the_numbers_in_place_on_a_terminal_and_every_10_s_otherwise():
    import io

    from compensator.cli.log import _StatusLine
    from compensator.logbook import LoggerStatus

    def status(elapsed_s, faults=()):
        return LoggerStatus(elapsed_s=elapsed_s, rows=1234, rows_committed=1200, rate_hz=4.0, temp_c=-12.345,
                            bias_v=27.1234, faults=faults, link_up=not faults, disconnects=0)

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    log = io.StringIO()
    line = _StatusLine(log)
    for t in (0.0, 5.0, 10.5):
        line(status(t))
    text = log.getvalue().splitlines()
    assert len(text) == 2 and "1234 rows (1200 committed)" in text[0] and "T -12.35 C" in text[0]
    assert "bias 27.123 V" in text[0] and "4.00 rows/s" in text[1]
    screen = Terminal()
    line = _StatusLine(screen)
    line(status(1.0))
    line(status(1.5, faults=("sensor_open",)))
    line.end()
    out = screen.getvalue()
    assert out.count("\r") == 2 and out.endswith("\n") and "faults sensor_open  LINK DOWN" in out

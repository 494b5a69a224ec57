"""The logger against the simulated board on a real pseudo-terminal: SIGKILL while streaming, and disconnects."""

from __future__ import annotations

import json
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from compensator.logbook import EventKind, read_events, read_run

PROFILES = Path(__file__).resolve().parent.parent / "hardware_profiles"


def _board_sim(*extra):
    proc = subprocess.Popen(
        [sys.executable, "-m", "compensator", "board-sim", "--sipm", str(PROFILES / "hut-sipm-a.yaml"),
         "--board", str(PROFILES / "hut-board-ntc.yaml"), "--ambient-c", "5", "--heartbeat-timeout-s", "0",
         "--seed", "3", *extra], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    return proc, proc.stdout.readline().strip()


def _stop(proc, path):
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    if path:
        shutil.rmtree(Path(path).parent, ignore_errors=True)


def _committed(path):
    if not Path(path).exists():
        return []
    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            return conn.execute("SELECT session_id, uptime_s, sensor_adc_code FROM telemetry").fetchall()
        finally:
            conn.close()
    except sqlite3.OperationalError:     # the logger has not created its tables yet
        return []


def test_sigkill_while_the_simulated_board_streams(tmp_path):
    board, port = _board_sim()
    db = tmp_path / "hut.sqlite"
    last = 0
    try:
        assert port, board.stderr.read()
        for round_ in range(2):
            logger = subprocess.Popen([sys.executable, "-m", "compensator", "log", "--port", port, "--db", str(db),
                                       "--rate-hz", "50"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
            try:
                deadline = time.monotonic() + 120          # a guard against hanging, not a timing assertion
                seen = _committed(db)
                while len(seen) < last + 25:
                    assert logger.poll() is None, logger.stderr.read()
                    assert time.monotonic() < deadline, "the logger committed nothing for two minutes"
                    time.sleep(0.05)
                    seen = _committed(db)
            finally:
                logger.send_signal(signal.SIGKILL)
                logger.wait()
                logger.stderr.close()
            assert logger.returncode == -signal.SIGKILL
            conn = sqlite3.connect(db)
            assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            after = conn.execute("SELECT session_id, uptime_s, sensor_adc_code FROM telemetry").fetchall()
            sessions = conn.execute("SELECT count(*) FROM sessions").fetchone()[0]
            conn.close()
            assert set(seen) <= set(after)           # every row a reader saw committed survived the kill
            assert len(after) >= len(seen) >= last   # the count only grows
            assert sessions == round_ + 1            # each restart appended a session
            last = len(after)
    finally:
        _stop(board, port)
    run = read_run(db)
    assert run.samples == last and len(run.sessions) == 2
    assert {s.board_name for s in run.sessions} == {"hut-board-ntc"}
    assert all(s.table_sha256 for s in run.sessions)        # the board's identity is kept per session


def test_logger_rides_through_disconnects_and_records_them(cli, tmp_path):
    board, port = _board_sim("--disconnect-every-s", "1.0", "--disconnect-s", "0.3")
    db = tmp_path / "flaky.sqlite"
    try:
        assert port, board.stderr.read()
        result = cli("log", "--port", port, "--db", db, "--duration-s", "3", "--rate-hz", "20", "--json")
    finally:
        _stop(board, port)
    assert result.status == 0, result.stderr
    summary = json.loads(result.stdout)
    assert summary["disconnects"] >= 1 and summary["rows"] >= 2
    events = read_events(db)
    lost = [e for e in events if e.kind is EventKind.LINK_LOST]
    restored = [e for e in events if e.kind is EventKind.LINK_RESTORED]
    assert len(lost) == summary["disconnects"] and len(restored) >= 1
    assert all(e.duration_s > 0 for e in restored)
    run = read_run(db)
    assert run.samples == summary["rows"]
    assert run.time_unix_s[-1] > restored[0].time_unix_s       # telemetry came back after the outage
    drift = cli("drift", db, "--json")
    assert drift.status == 0, drift.stderr
    assert json.loads(drift.stdout)["samples"] == summary["rows"]


def test_log_bad_input_is_one_line_and_writes_nothing(cli, tmp_path):
    db = tmp_path / "new.sqlite"
    missing = cli("log", "--port", tmp_path / "no-such-port", "--db", db, "--connect-window-s", "0")
    assert missing.status == 2 and "cannot open the port" in missing.stderr
    assert len(missing.stderr.strip().splitlines()) == 1 and not db.exists()
    notes = tmp_path / "notes.sqlite"
    notes.write_text("field notes, not a logbook\n")
    bad = cli("log", "--port", tmp_path / "no-such-port", "--db", notes, "--connect-window-s", "0")
    assert bad.status == 2 and "not a SQLite database" in bad.stderr and str(notes) in bad.stderr
    assert notes.read_text() == "field notes, not a logbook\n"
    for args in (["--rate-hz", "0"], ["--duration-s", "nan"], ["--connect-window-s", "-1"]):
        usage = cli("log", "--port", "x", "--db", db, *args)
        assert usage.status == 2 and args[0] in usage.stderr.strip().splitlines()[-1]
    assert not db.exists()

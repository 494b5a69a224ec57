"""Command line: board-sim in a subprocess (path first, clean stop on SIGTERM), board against it, board-code, bad input."""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from cbuild import CC, needs_cc
from compensator.physics.sipm import breakdown_v

PROFILES = Path(__file__).resolve().parent.parent / "hardware_profiles"


@pytest.fixture(scope="module")
def sim_port():
    proc = subprocess.Popen(
        [sys.executable, "-m", "compensator", "board-sim", "--sipm", str(PROFILES / "hut-sipm-b.yaml"),
         "--board", str(PROFILES / "hut-board-pt1000.yaml"), "--ambient-c", "10", "--time-scale", "20",
         "--heartbeat-timeout-s", "0", "--seed", "2"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    path = proc.stdout.readline().strip()
    try:
        yield path, proc
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        if path:
            shutil.rmtree(Path(path).parent, ignore_errors=True)   # a killed simulator leaves its folder


def test_status_json_with_numbers(cli, sim_port, sipm_b):
    path, _ = sim_port
    assert Path(path).exists() and os.path.realpath(path).startswith("/dev/pts/")
    result = cli("board", "--port", path, "status", "--json")
    assert result.status == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["temp_c"] == pytest.approx(10.0, abs=0.5)          # the constant 10 C ambient
    assert doc["bias_v"] == pytest.approx(30.0, abs=0.01)         # hut-board-pt1000 at its safe code 0: 30 V
    assert doc["current_a"] is None and doc["faults"] == [] and doc["board_mode"] == "off"


def test_set_bias_refused_with_reason_and_status_2(cli, sim_port, sipm_b):
    path, _ = sim_port
    ceiling = float(breakdown_v(sipm_b.device, 10.0)) + sipm_b.device.max_overvoltage_v   # physics.sipm
    result = cli("board", "--port", path, "set-bias", f"{ceiling + 0.5:.3f}")
    assert result.status == 2
    lines = [line for line in result.stderr.splitlines() if line.startswith("compensator:")]
    assert len(lines) == 1 and "refused: beyond a safety limit" in lines[0]
    limit = float(re.search(r"\(limit ([0-9.]+) V", lines[0]).group(1))
    assert ceiling - 0.1 < limit <= ceiling
    result = cli("board", "--port", path, "set-bias", "40", "--json")
    assert result.status == 0
    assert json.loads(result.stdout)["bias_set_v"] == pytest.approx(40.0, abs=0.001)
    result = cli("board", "--port", path, "faults", "--json")
    assert json.loads(result.stdout)["faults_latched"] == ["request_refused"]
    assert cli("board", "--port", path, "clear-faults").status == 0


def test_upload_what_table_and_tune_write(cli, sim_port, tmp_path):
    import hashlib

    path, _ = sim_port
    table_dir = tmp_path / "table"
    made = cli("table", "--sipm", PROFILES / "hut-sipm-b.yaml", "--board", PROFILES / "hut-board-pt1000.yaml",
               "--overvoltage-v", "4", "--max-gain-error-pct", "0.05", "--out", table_dir)
    assert made.status == 0, made.stderr
    image = (table_dir / "bias_dac_from_adc.image.json").read_bytes()
    result = cli("board", "--port", path, "upload-table", table_dir, "--json")
    assert result.status == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["image_bytes"] == len(image) and doc["image_sha256"] == hashlib.sha256(image).hexdigest()
    pid_dir = tmp_path / "pid"
    assert cli("tune", "--plant", PROFILES / "hut-cooler.yaml", "--method", "simc", "--emit-c", pid_dir).status == 0
    result = cli("board", "--port", path, "upload-pid", pid_dir / "cooler_pid.image.json", "--json")
    assert result.status == 0, result.stderr
    assert json.loads(result.stdout)["image_sha256"] == hashlib.sha256(
        (pid_dir / "cooler_pid.image.json").read_bytes()).hexdigest()
    result = cli("board", "--port", path, "upload-pid", table_dir)
    assert result.status == 2 and "not pid coefficients" in result.stderr
    result = cli("board", "--port", path, "upload-table", tmp_path)
    assert result.status == 2 and "found 0" in result.stderr
    huge = tmp_path / "huge.image.json"
    huge.write_bytes(b" " * 20000)
    result = cli("board", "--port", path, "upload-table", huge)
    assert result.status == 2 and "20000 bytes" in result.stderr and "16384" in result.stderr


def test_sigterm_ends_cleanly(sim_port):
    path, proc = sim_port
    folder = Path(path).parent
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=10)
    assert proc.returncode == 0, err
    assert "Traceback" not in err and "stopped after" in err
    assert not folder.exists()


@pytest.mark.parametrize("argv, needle", [
    (["board", "--port", "/nonexistent/tty", "status"], "cannot open the port"),
    (["board", "--port", "loop://", "set-bias", "nan"], "must be a finite number"),
    (["board-sim", "--sipm", "missing.yaml", "--board", "missing.yaml"], "missing.yaml"),
    (["board-sim", "--board", "x.yaml"], "needs --sipm and --board"),
    (["board-sim", "--sipm", "a", "--board", "b", "--corrupt-rate", "1.5"], "--corrupt-rate: must be at most 1"),
    (["board-code", "--out", "x", "--sipm", "a.yaml"], "--board"),
    (["board-sim", "--sipm", "a", "--board", "b", "--seed", "-1"], "--seed: must be at least 0"),
    (["board-sim", "--sipm", str(PROFILES / "hut-sipm-a.yaml"), "--board", str(PROFILES / "hut-board-ntc.yaml"),
      "--overvoltage-v", "50"], "--overvoltage-v: 50 V is outside"),
])
def test_bad_input_is_one_line_and_status_2(cli, argv, needle, tmp_path):
    result = cli(*argv)
    assert result.status == 2
    assert needle in result.stderr and "Traceback" not in result.stderr


def test_loop_url_times_out_with_one_line(cli):
    # loop:// echoes our own request back: no board answers, so the request times out after its retries
    result = cli("board", "--port", "loop://", "status")
    assert result.status == 2
    lines = [line for line in result.stderr.splitlines() if line.startswith("compensator:")]
    assert len(lines) == 1 and "read_status" in lines[0] and "11 attempts" in lines[0]


@needs_cc
def test_board_code_writes_c_that_compiles(cli, tmp_path):
    out = tmp_path / "fw"
    result = cli("board-code", "--out", out, "--sipm", PROFILES / "hut-sipm-a.yaml", "--board",
                 PROFILES / "hut-board-ntc.yaml", "--thermal", PROFILES / "hut-cooler.yaml", "--json")
    assert result.status == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["max_frame_bytes"] == 248 and doc["interlocks"]["heartbeat_timeout_ms"] == 10_000
    # hut-board-ntc's lowest output (25.19 V) stays above hut-sipm-a's breakdown at -45 C (22.995 V)
    assert doc["interlocks"]["safe_margin_v"] == pytest.approx(22.995 - 25.18534, abs=2e-3)
    assert "danger" in result.stderr
    for source in ("board_link.c", "interlocks.c"):
        compiled = subprocess.run([CC, "-std=c99", "-Wall", "-Wextra", "-Werror", "-c", str(out / source), "-o",
                                   str(tmp_path / (source + ".o"))], capture_output=True, text=True)
        assert compiled.returncode == 0 and compiled.stderr == ""
    again = cli("board-code", "--out", out)
    assert again.status == 2 and "already exists" in again.stderr
    assert "#define SUPPLY_FAULT_TICKS 3u" in (out / "interlocks.c").read_text()


def test_board_code_states_the_supply_check(cli, tmp_path):
    # hut-board-ntc reads its bias back (one code is 3.3 V / 4096 / 0.08 = 10.07 mV of output); hut-board-pt1000
    # does not, and says that a supply fault cannot be detected there.
    ntc = cli("board-code", "--out", tmp_path / "a", "--sipm", PROFILES / "hut-sipm-a.yaml", "--board",
              PROFILES / "hut-board-ntc.yaml")
    assert "supply check: bias read-back within 84 codes of the set value, else supply_fault after 3 ticks" \
        in ntc.stdout
    pt = cli("board-code", "--out", tmp_path / "b", "--sipm", PROFILES / "hut-sipm-b.yaml", "--board",
             PROFILES / "hut-board-pt1000.yaml")
    assert "a supply fault cannot be detected" in pt.stdout
    assert "cannot be detected" in (tmp_path / "b" / "interlocks.h").read_text()


def test_board_code_refuses_in_a_fresh_process(tmp_path):
    # A fresh process loads the interlocks' C renderer before anything else of the firmware package; that once
    # met the PID modules' import cycle and ended in a traceback.
    proc = subprocess.run([sys.executable, "-m", "compensator", "board-code", "--out", str(tmp_path / "c"), "--name",
                           "my link;"], capture_output=True, text=True, timeout=120)
    lines = proc.stderr.strip().splitlines()
    assert proc.returncode == 2 and len(lines) == 1 and lines[0].startswith(
        "compensator: <command line>: --name: 'my link;' must be a C identifier of at most 24"), proc.stderr
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("argv, needle", [
    (["--name", ""], "--name: '' must be a C identifier of at most 24"),
    (["--sipm", str(PROFILES / "hut-sipm-a.yaml")], "--board: the interlocks need both --sipm and --board"),
])
def test_board_code_refusals(cli, argv, needle, tmp_path):
    result = cli("board-code", "--out", tmp_path / "c", *argv)
    lines = result.stderr.strip().splitlines()
    assert result.status == 2 and len(lines) == 1 and lines[0].startswith(f"compensator: <command line>: {needle}"
                                                                          ), result.stderr
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("first", ["pid_fixed", "pid_c", "interlocks_c", "pid"])
def test_firmware_modules_import_in_any_order(first):
    code = (f"import compensator.firmware.{first}; from compensator.firmware.pid import FixedPid, quantise_pid; "
            "from compensator.firmware.pid_fixed import FixedPid as F; print(FixedPid is F, quantise_pid.__name__)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.stdout.split() == ["True", "quantise_pid"], proc.stderr

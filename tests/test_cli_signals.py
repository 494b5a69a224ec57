"""Ctrl-C (SIGINT) and SIGTERM at controlled moments of real ``compensator`` processes: one line, exit 130.

The moment is set by ``tools/signal_gate`` (a ``sitecustomize`` put first on ``PYTHONPATH``): the process writes
``gate: waiting at ...`` on stderr and waits there; the test sends the signal only once it has read that line, so
nothing depends on how fast the machine is.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
GATE = REPO / "tools" / "signal_gate"
H = REPO / "hardware_profiles"
SCRIPT = Path(sys.executable).with_name("compensator")
TABLE = ("table", "--sipm", H / "hut-sipm-a.yaml", "--board", H / "hut-board-ntc.yaml", "--overvoltage-v", "3",
         "--max-gain-error-pct", "0.05")


def _entry(kind: str) -> list[str]:
    if kind == "script":
        if not SCRIPT.exists():
            pytest.skip(f"the console script {SCRIPT} is not installed (pip install -e . makes it)")
        return [str(SCRIPT)]
    return [sys.executable, "-m", "compensator"]


def _interrupt(argv, gate: str, signals, cwd: Path, entry: str = "module") -> tuple[int, list[str]]:
    """Run ``compensator ARGV`` held at ``gate``; send ``signals`` once it waits there; return (status, stderr lines)."""
    env = dict(os.environ, COMPENSATOR_GATE=gate,
               PYTHONPATH=os.pathsep.join([str(GATE), str(REPO), os.environ.get("PYTHONPATH", "")]))
    # A Ctrl-C reaches the command even when the tests run in the background (where SIGINT starts ignored).
    proc = subprocess.Popen([*_entry(entry), *map(str, argv)], cwd=cwd, env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    lines = []
    try:
        for line in proc.stderr:
            lines.append(line.rstrip("\n"))
            if line.startswith("gate: waiting"):
                for sig in signals:
                    proc.send_signal(sig)
                break
        lines += proc.stderr.read().splitlines()
        status = proc.wait(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert any(line.startswith("gate: waiting") for line in lines), lines  # the moment was reached
    return status, [line for line in lines if not line.startswith("gate: ")]


def _commands() -> list[str]:
    from compensator.cli import build_parser

    action = next(a for a in build_parser(only="")._actions if a.__class__.__name__ == "_SubParsersAction")
    return sorted(action.choices)


def test_every_command_is_listed():
    assert {"demo", "table", "tune", "board", "board-sim", "log", "calibrate"} <= set(_commands())


@pytest.mark.parametrize("command", _commands())
def test_an_interrupt_while_the_libraries_load_is_one_line_and_exit_130(command, tmp_path):
    # numpy is the first heavy library every command loads; the handler is in place before it. Commands alternate
    # between the console script and `python -m`, Ctrl-C and SIGTERM.
    i = _commands().index(command)
    status, lines = _interrupt([command], "import:numpy", [(signal.SIGINT, signal.SIGTERM)[i % 2]], tmp_path,
                               entry=("script", "module")[(i // 2) % 2])
    assert (status, lines) == (130, ["compensator: interrupted"])
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["ctrl-c", "sigterm"])
@pytest.mark.parametrize("entry", ["script", "module"])
def test_an_interrupt_while_tune_loads_python_control_is_one_line(sig, entry, tmp_path):
    # `tune` loads python-control once it runs: the interrupt lands inside an import, inside the command.
    status, lines = _interrupt(["tune", "--fopdt", "2", "300", "60", "--method", "simc", "--rate-hz", "10"],
                               "import:control", [sig], tmp_path, entry=entry)
    assert (status, lines) == (130, ["compensator: interrupted"])


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["ctrl-c", "sigterm"])
def test_an_interrupt_inside_demo_ends_with_130_and_writes_nothing(sig, tmp_path):
    # Held where demo's run starts (it loads the instrument model): the command is running, so the interrupt
    # arrives as KeyboardInterrupt and its clean-up runs; nothing of --out exists, no caution is printed.
    status, lines = _interrupt(["demo", "--out", tmp_path / "out"], "import:compensator.instrument", [sig], tmp_path)
    assert (status, lines) == (130, ["compensator: interrupted"])
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("signals", [(signal.SIGINT,), (signal.SIGTERM,), (signal.SIGTERM, signal.SIGINT)],
                         ids=["ctrl-c", "sigterm", "sigterm-then-ctrl-c"])
def test_an_interrupt_half_way_through_a_file_set_leaves_nothing(signals, tmp_path):
    # Held after the second of table's four files has reached the disk as a temporary: the temporaries, and the
    # output folder the command made, are removed; a second signal during that clean-up changes nothing.
    (tmp_path / "keep.txt").write_text("1")
    status, lines = _interrupt([*TABLE, "--out", tmp_path / "out"], "fsync:2", signals, tmp_path)
    assert status == 130 and lines[-1] == "compensator: interrupted" and "Traceback" not in "\n".join(lines)
    assert [p.name for p in tmp_path.iterdir()] == ["keep.txt"]


def test_a_command_that_ends_normally_is_not_affected(tmp_path):
    # The same gate with no signal to wait for is never reached: the handler changes nothing for a normal run.
    proc = subprocess.run([sys.executable, "-m", "compensator", "model", "--sipm", H / "hut-sipm-a.yaml",
                           "--temp-c", "25", "--bias-v", "27", "--json"], capture_output=True, text=True,
                          timeout=120, cwd=tmp_path)
    assert proc.returncode == 0 and '"overvoltage_v"' in proc.stdout, proc.stderr


def test_main_restores_the_handlers_it_found():
    from compensator.cli import main

    before = signal.getsignal(signal.SIGINT), signal.getsignal(signal.SIGTERM)
    with pytest.raises(SystemExit):
        main(["--version"])
    assert (signal.getsignal(signal.SIGINT), signal.getsignal(signal.SIGTERM)) == before

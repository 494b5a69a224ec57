"""Sweep the whole command set with bad input, as a careless or hurried user would give it.

Usage: python tools/bad_input_sweep.py [--quick]

Every case runs ``python -m compensator ...`` as a real process in a scratch
folder and must end with one line per problem on stderr, exit status 2 (130
for Ctrl-C), no traceback, and nothing half-written: no temporary file and no
partial set of outputs left behind, and files that existed untouched. Kinds of
input: NaN and infinities, missing files, a huge file, an existing output, a
directory where a file should go, a file where a directory should go, and
Ctrl-C (SIGINT) or SIGTERM in the middle of writing. Prints one row per case
and exits 1 if any case fails. ``--quick`` skips the interrupt cases.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
H = str(REPO / "hardware_profiles")
TABLE = ("table", "--sipm", f"{H}/hut-sipm-a.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "3",
         "--max-gain-error-pct", "0.05")


@dataclass(frozen=True)
class Case:
    """One bad invocation and what it must give."""

    name: str
    argv: tuple[str, ...]
    status: int = 2
    interrupt: int = 0  # a signal to send once the command has started
    after_s: float = 1.0  # when to send it


def cases(work: Path) -> list[Case]:
    """The cases, with their inputs prepared in ``work``."""
    (work / "huge.csv").write_text("bias_v,current_a\n" + "1e308,1e308\n" * 200_000)
    (work / "binary.csv").write_bytes(bytes(range(256)) * 64)
    (work / "nan.csv").write_text("bias_v,current_a\nnan,nan\n1,2\n")
    (work / "file").write_text("")
    (work / "taken").mkdir()
    (work / "taken" / "bias_dac_from_adc.h").write_text("keep")
    (work / "dir.yaml").mkdir()
    (work / "cols.csv").write_text("voltage_v,amps\n20,1e-9\n")
    (work / "gain_nan.csv").write_text("bias_v,gain\n26,1e6\n27,nan\n28,3e6\n")
    (work / "plots").mkdir()
    (work / "taken.yaml").write_text("keep")
    (work / "plots" / "binary-spectrum.png").write_text("keep")
    (work / "deep.json").write_text('{"scans": ' + "[" * 50_000 + "]" * 50_000 + "}")
    w = str(work)
    return [
        Case("nan temperature", ("model", "--sipm", f"{H}/hut-sipm-a.yaml", "--temp-c", "nan", "--bias-v", "27")),
        Case("inf overvoltage", ("model", "--sipm", f"{H}/hut-sipm-a.yaml", "--temp-c", "25", "--overvoltage-v",
                                 "inf")),
        Case("huge ADC code", ("sensor", "--board", f"{H}/hut-board-ntc.yaml", "--adc-code", "1" + "0" * 30)),
        Case("tiny demo step", ("demo", "--step-c", "1e-6")),
        Case("missing profile", ("model", "--sipm", f"{w}/none.yaml", "--temp-c", "25", "--bias-v", "27")),
        Case("directory as profile", ("model", "--sipm", f"{w}/dir.yaml", "--temp-c", "25", "--bias-v", "27")),
        Case("missing profile dir", ("demo", "--profiles", f"{w}/nowhere")),
        Case("nan in a table budget", ("budget", "--sipm", f"{H}/hut-sipm-a.yaml", "--board",
                                       f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "nan")),
        Case("huge I-V file", ("calibrate", "iv", f"{w}/huge.csv")),
        Case("binary I-V file", ("calibrate", "iv", f"{w}/binary.csv")),
        Case("NaN in I-V file", ("calibrate", "iv", f"{w}/nan.csv")),
        Case("I-V without its columns", ("calibrate", "iv", f"{w}/cols.csv", f"{w}/binary.csv")),
        Case("binary spectrum", ("calibrate", "spectrum", f"{w}/binary.csv", "--json")),
        Case("existing spectrum plot", ("calibrate", "spectrum", f"{w}/binary.csv", "--plot", f"{w}/plots")),
        Case("existing crosstalk profile", ("calibrate", "spectrum", f"{w}/binary.csv", "--write-profile",
                                            f"{w}/taken.yaml", "--base", f"{H}/hut-sipm-a.yaml", "--overvoltage-v",
                                            "3")),
        Case("NaN overvoltage", ("calibrate", "spectrum", f"{w}/binary.csv", "--write-profile", f"{w}/new.yaml",
                                 "--base", f"{H}/hut-sipm-a.yaml", "--overvoltage-v", "nan")),
        Case("NaN in a gain table", ("calibrate", "gain-scan", f"{w}/gain_nan.csv")),
        Case("spectra of a scan missing", ("calibrate", "gain-scan", "--spectra", f"{w}/a.csv", f"{w}/b.csv",
                                           f"{w}/c.csv", "--bias-v", "26", "27", "28")),
        Case("deep JSON", ("calibrate", "tempco", f"{w}/deep.json")),
        Case("missing loop file", ("identify", f"{w}/none.csv")),
        Case("nan tune model", ("tune", "--fopdt", "nan", "30", "5", "--method", "simc", "--rate-hz", "10")),
        Case("existing output", (*TABLE, "--out", f"{w}/taken")),
        Case("file for a folder", (*TABLE, "--out", f"{w}/file")),
        Case("demo into a file", ("demo", "--profiles", H, "--out", f"{w}/file")),
        Case("Ctrl-C early in table", (*TABLE, "--out", f"{w}/int"), status=130, interrupt=signal.SIGINT,
             after_s=0.7),
        Case("Ctrl-C in demo", ("demo", "--profiles", H, "--out", f"{w}/int2"), status=130,
             interrupt=signal.SIGINT, after_s=4.0),
        Case("SIGTERM in demo", ("demo", "--profiles", H, "--out", f"{w}/term"), status=130,
             interrupt=signal.SIGTERM, after_s=4.0),
    ]


def snapshot(work: Path) -> dict:
    """Every file under ``work`` with its size and modification time."""
    return {p: (p.stat().st_size, p.stat().st_mtime_ns) for p in work.rglob("*") if p.is_file()}


def run_case(case: Case, work: Path) -> tuple[bool, str]:
    """Run one case; return (passed, what was seen)."""
    before = snapshot(work)
    env = dict(os.environ, PYTHONPATH=str(REPO))
    # The user's Ctrl-C reaches the command even when this sweep runs in the background (where SIGINT is ignored).
    proc = subprocess.Popen([sys.executable, "-m", "compensator", *case.argv], cwd=work, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    if case.interrupt:
        time.sleep(case.after_s)  # let it start
        if proc.poll() is None:
            proc.send_signal(case.interrupt)
    out, err = proc.communicate(timeout=600)
    lines = err.strip().splitlines()
    problems = []
    # An interrupt that lands before the command starts ends the process by the signal itself (nothing written).
    if proc.returncode != case.status and not (case.interrupt and proc.returncode in (0, -case.interrupt)):
        problems.append(f"exit {proc.returncode}, expected {case.status}")
    if "Traceback" in err:
        problems.append("traceback")
    if case.status == 2 and not any(line.startswith("compensator: ") for line in lines):
        problems.append("no 'compensator:' line")
    if proc.returncode == 2 and any("caution" in line for line in lines):
        problems.append("a caution printed with a usage error")
    if any("site-packages" in line or ".py:" in line for line in lines):
        problems.append("library path on stderr")
    after = snapshot(work)
    changed = [p for p in before if p in after and after[p] != before[p]]
    temporaries = [p for p in after if p.name.endswith(".tmp")]
    new = [p for p in after if p not in before]
    if changed:
        problems.append(f"changed {len(changed)} existing files")
    if temporaries:
        problems.append(f"left {len(temporaries)} temporaries")
    if case.interrupt and proc.returncode == 130 and new:
        problems.append(f"left {len(new)} files of an interrupted set")
    for p in new:  # each case starts from the same state
        p.unlink()
    seen = f"exit {proc.returncode}, {len(lines)} stderr lines: {lines[-1][:100] if lines else ''}"
    return not problems, "; ".join(problems) or seen


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    failed = 0
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        for case in cases(work):
            if "--quick" in argv and case.interrupt:
                continue
            ok, seen = run_case(case, work)
            failed += not ok
            print(f"{'ok  ' if ok else 'FAIL'} {case.name:24s} {seen}")
    print(f"{failed} failed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

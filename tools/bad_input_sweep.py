"""Sweep the whole command set with bad input, as a careless or hurried user would give it.

Usage: python tools/bad_input_sweep.py [--quick]

Every case runs ``python -m compensator ...`` as a real process in a scratch
folder and must end with one line per problem on stderr, exit status 2 (130
for Ctrl-C), no traceback, and nothing half-written: no temporary file and no
partial set of outputs left behind, and files that existed untouched. Kinds of
input: NaN and infinities, missing files, a huge file, an existing output, a
directory where a file should go, a file where a directory should go, and
Ctrl-C (SIGINT) or SIGTERM at a chosen moment (while the libraries load,
inside a command, half-way through writing a file set: ``tools/signal_gate``
holds the process there and says so on stderr, and the signal is sent only
then), NaN and out-of-range option values, non-logbook and truncated SQLite
files, a board port that is no serial device, a board-sim that is asked for
the impossible, and bad images and requests sent to a running simulated
board. Prints one row per case and exits 1 if any case fails. ``--quick``
skips the interrupt cases; ``--only WORD`` runs the cases whose name or
command contains WORD.
"""

from __future__ import annotations

import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
GATE = REPO / "tools" / "signal_gate"
H = str(REPO / "hardware_profiles")
PORT = "{port}"  # replaced by the path of the simulated board the sweep starts
TABLE = ("table", "--sipm", f"{H}/hut-sipm-a.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "3",
         "--max-gain-error-pct", "0.05")


@dataclass(frozen=True)
class Case:
    """One bad invocation and what it must give."""

    name: str
    argv: tuple[str, ...]
    status: int = 2
    interrupt: int = 0  # a signal to send once the command waits at ``gate``
    gate: str = "import:numpy"  # where tools/signal_gate holds it (import:MODULE or fsync:N)


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
        Case("Ctrl-C early in table", (*TABLE, "--out", f"{w}/int"), status=130, interrupt=signal.SIGINT),
        Case("Ctrl-C writing a table", (*TABLE, "--out", f"{w}/int"), status=130, interrupt=signal.SIGINT,
             gate="fsync:2"),
        Case("SIGTERM writing a table", (*TABLE, "--out", f"{w}/int"), status=130, interrupt=signal.SIGTERM,
             gate="fsync:2"),
        Case("Ctrl-C in demo", ("demo", "--profiles", H, "--out", f"{w}/int2"), status=130,
             interrupt=signal.SIGINT, gate="import:compensator.instrument"),
        Case("SIGTERM in demo", ("demo", "--profiles", H, "--out", f"{w}/term"), status=130,
             interrupt=signal.SIGTERM, gate="import:compensator.instrument"),
        Case("SIGTERM loading demo", ("demo", "--profiles", H, "--out", f"{w}/term"), status=130,
             interrupt=signal.SIGTERM),
        Case("Ctrl-C in tune", ("tune", "--fopdt", "2", "300", "60", "--method", "simc", "--rate-hz", "10"),
             status=130, interrupt=signal.SIGINT, gate="import:control"),
        Case("SIGTERM in export", ("export", f"{w}/hut.sqlite", "--csv", f"{w}/int.csv"), status=130,
             interrupt=signal.SIGTERM, gate="fsync:1"),
        Case("Ctrl-C in simulate", ("simulate", f"{H}/hut-week-scenario.yaml", "--days", "1", "--units", "0",
                                    "--report", f"{w}/intrep"), status=130, interrupt=signal.SIGINT,
             gate="import:compensator.sim.report"),
        Case("Ctrl-C in board-code", ("board-code", "--out", f"{w}/intc"), status=130, interrupt=signal.SIGINT,
             gate="fsync:1"),
        *link_cases(work),
    ]


def _logbooks(work: Path) -> None:
    """A small real logbook and bad ones beside it."""
    subprocess.run([sys.executable, str(REPO / "tools" / "make_demo_logbook.py"), str(work / "lb"), "--days", "0.5",
                    "--units", "1"], check=True, capture_output=True, env=dict(os.environ, PYTHONPATH=str(REPO)))
    shutil.move(next((work / "lb").glob("*.sqlite")), work / "hut.sqlite")
    shutil.rmtree(work / "lb")
    data = (work / "hut.sqlite").read_bytes()
    (work / "truncated.sqlite").write_bytes(data[:len(data) // 3])
    (work / "text.sqlite").write_text("time_s,bias_v\n1,2\n")
    (work / "empty.sqlite").write_bytes(b"")
    (work / "zeros.sqlite").write_bytes(bytes(8192))
    with sqlite3.connect(work / "other.sqlite") as db:
        db.execute("CREATE TABLE readings (t REAL, v REAL)")
        db.executemany("INSERT INTO readings VALUES (?, ?)", [(i, i * 0.5) for i in range(10)])
    db.close()
    (work / "lbdir.sqlite").mkdir()
    (work / "taken.csv").write_text("keep")
    (work / "pq").mkdir()


def _images(work: Path) -> None:
    """Upload images gone wrong: not JSON, a NaN, the wrong kind, two in one folder, none, one far too big."""
    (work / "img").mkdir()
    (work / "img" / "t.image.json").write_text('{"image": "lookup_table", "format": 1, "fields": {')
    (work / "imgnan").mkdir()
    (work / "imgnan" / "t.image.json").write_text('{"image": "lookup_table", "format": 1, "fields": {"x": NaN}}')
    (work / "imgkind").mkdir()
    (work / "imgkind" / "t.image.json").write_text('{"image": "firmware", "format": 1, "fields": {}}')
    (work / "imgfmt").mkdir()
    (work / "imgfmt" / "t.image.json").write_text('{"image": "lookup_table", "format": 99, "fields": {}}')
    (work / "imgtwo").mkdir()
    (work / "imgtwo" / "a.image.json").write_text("{}")
    (work / "imgtwo" / "b.image.json").write_text("{}")
    (work / "imgnone").mkdir()
    (work / "imgbig").mkdir()
    (work / "imgbig" / "t.image.json").write_text('{"image": "lookup_table", "pad": "' + "x" * 4_000_000 + '"}')
    (work / "imgdeep").mkdir()
    (work / "imgdeep" / "t.image.json").write_text('{"image": ' + "[" * 50_000 + "]" * 50_000 + "}")


def _scenarios(work: Path) -> None:
    """Scenario files gone wrong, next to copies of the profiles they name."""
    text = (REPO / "hardware_profiles" / "hut-week-scenario.yaml").read_text()
    (work / "scen").mkdir()
    for name in ("hut-sipm-a.yaml", "hut-board-ntc.yaml", "hut-cooler.yaml"):
        shutil.copy(REPO / "hardware_profiles" / name, work / "scen" / name)
    (work / "scen" / "nan.yaml").write_text(text.replace("mean_temp_c: 8.0", "mean_temp_c: .nan"))
    (work / "scen" / "huge.yaml").write_text(text.replace("duration_days: 7", "duration_days: 1e12"))
    (work / "scen" / "rate.yaml").write_text(text.replace("control_rate_hz: 0.5", "control_rate_hz: 1e9"))
    (work / "scen" / "nosipm.yaml").write_text(text.replace("sipm: hut-sipm-a.yaml", "sipm: gone.yaml"))
    (work / "scen" / "self.yaml").write_text(text.replace("sipm: hut-sipm-a.yaml", "sipm: self.yaml"))
    (work / "scen" / "bomb.yaml").write_text(
        "a: &a [x, x, x, x, x, x, x, x, x]\nb: &b [*a, *a, *a, *a, *a, *a, *a, *a, *a]\n"
        "c: &c [*b, *b, *b, *b, *b, *b, *b, *b, *b]\nd: &d [*c, *c, *c, *c, *c, *c, *c, *c, *c]\n"
        "e: [*d, *d, *d, *d, *d, *d, *d, *d, *d]\n")
    (work / "scen" / "latin1.yaml").write_bytes(text.replace("# Invented", "# Invent\xe9d").encode("latin-1"))
    (work / "scen" / "tabs.yaml").write_text(text.replace("  duration_days", "\tduration_days"))


def link_cases(work: Path) -> list[Case]:
    """New inputs for the commands of the link, the board, the logbook, drift, export and simulate."""
    _logbooks(work)
    _images(work)
    _scenarios(work)
    w, a, b = str(work), f"{H}/hut-sipm-a.yaml", f"{H}/hut-board-ntc.yaml"
    sim = ("board-sim", "--sipm", a, "--board", b, "--duration-s", "1")
    board = ("board", "--port", PORT)
    scen = f"{H}/hut-week-scenario.yaml"
    short = ("simulate", scen, "--days", "0.1", "--units", "0")
    return [
        # board: ports that are no board, values a board must refuse, images gone wrong
        Case("board: missing port", ("board", "--port", f"{w}/no-such-tty", "status")),
        Case("board: file as port", ("board", "--port", f"{w}/taken.csv", "status")),
        Case("board: folder as port", ("board", "--port", w, "status")),
        Case("board: unknown URL scheme", ("board", "--port", "nonsense://x", "status")),
        Case("board: NaN baud", ("board", "--port", PORT, "--baud", "nan", "status")),
        Case("board: zero baud", ("board", "--port", PORT, "--baud", "0", "status")),
        Case("board: NaN bias", (*board, "set-bias", "nan")),
        Case("board: bias 1e9 V", (*board, "set-bias", "1e9")),
        Case("board: negative bias", (*board, "set-bias", "-5")),
        Case("board: inf overvoltage", (*board, "set-overvoltage", "inf")),
        Case("board: overvoltage 500 V", (*board, "set-overvoltage", "500")),
        Case("board: image not JSON", (*board, "upload-table", f"{w}/img")),
        Case("board: image with NaN", (*board, "upload-table", f"{w}/imgnan")),
        Case("board: image of no kind", (*board, "upload-table", f"{w}/imgkind")),
        Case("board: image format 99", (*board, "upload-table", f"{w}/imgfmt")),
        Case("board: two images", (*board, "upload-table", f"{w}/imgtwo")),
        Case("board: no image", (*board, "upload-pid", f"{w}/imgnone")),
        Case("board: 4 MB image", (*board, "upload-table", f"{w}/imgbig")),
        Case("board: deep image", (*board, "upload-table", f"{w}/imgdeep")),
        Case("board: missing image", (*board, "upload-pid", f"{w}/none.image.json")),
        # board-sim: impossible line faults and rates
        Case("board-sim: corrupt rate 2", (*sim, "--corrupt-rate", "2")),
        Case("board-sim: NaN drop rate", (*sim, "--drop-rate", "nan")),
        Case("board-sim: negative delay", (*sim, "--delay-ms", "-1")),
        Case("board-sim: huge delay", (*sim, "--delay-ms", "1e300")),
        Case("board-sim: zero time scale", (*sim, "--time-scale", "0")),
        Case("board-sim: inf time scale", (*sim, "--time-scale", "inf")),
        Case("board-sim: NaN ambient", (*sim, "--ambient-c", "nan")),
        Case("board-sim: ambient -300 C", (*sim, "--ambient-c", "-300")),
        Case("board-sim: NaN overvoltage", (*sim, "--overvoltage-v", "nan")),
        Case("board-sim: overvoltage 1e6", (*sim, "--overvoltage-v", "1e6")),
        Case("board-sim: negative heartbeat", (*sim, "--heartbeat-timeout-s", "-1")),
        Case("board-sim: negative seed", (*sim, "--seed", "-1")),
        Case("board-sim: fault at NaN", (*sim, "--sensor-fault", "open", "--fault-at-s", "nan")),
        Case("board-sim: unknown supply fault", (*sim, "--supply-fault", "sideways")),
        Case("board-sim: no profiles", ("board-sim", "--duration-s", "1")),
        Case("board-sim: missing scenario", ("board-sim", "--scenario", f"{w}/none.yaml", "--duration-s", "1")),
        Case("board-sim: NaN scenario", ("board-sim", "--scenario", f"{w}/scen/nan.yaml", "--duration-s", "1")),
        # board-code: names and folders
        Case("board-code: bad C name", ("board-code", "--out", f"{w}/c1", "--name", "my link;")),
        Case("board-code: empty name", ("board-code", "--out", f"{w}/c1", "--name", "")),
        Case("board-code: reserved name", ("board-code", "--out", f"{w}/c1", "--name", "_Link")),
        Case("board-code: file as folder", ("board-code", "--out", f"{w}/taken.csv")),
        Case("board-code: NaN slew", ("board-code", "--out", f"{w}/c1", "--sipm", a, "--board", b,
                                      "--slew-v-per-s", "nan")),
        Case("board-code: zero slew", ("board-code", "--out", f"{w}/c1", "--sipm", a, "--board", b,
                                       "--slew-v-per-s", "0")),
        Case("board-code: sipm alone", ("board-code", "--out", f"{w}/c1", "--sipm", a)),
        Case("board-code: inf heartbeat", ("board-code", "--out", f"{w}/c1", "--heartbeat-timeout-s", "inf")),
        # log: ports, logbooks and rates
        Case("log: missing port", ("log", "--port", f"{w}/no-such-tty", "--db", f"{w}/new.sqlite",
                                   "--connect-window-s", "0")),
        Case("log: text file as logbook", ("log", "--port", PORT, "--db", f"{w}/text.sqlite", "--duration-s", "1")),
        Case("log: other SQLite file", ("log", "--port", PORT, "--db", f"{w}/other.sqlite", "--duration-s", "1")),
        Case("log: folder as logbook", ("log", "--port", PORT, "--db", f"{w}/lbdir.sqlite", "--duration-s", "1")),
        Case("log: NaN rate", ("log", "--port", PORT, "--db", f"{w}/new.sqlite", "--rate-hz", "nan")),
        Case("log: rate 1e9 Hz", ("log", "--port", PORT, "--db", f"{w}/new.sqlite", "--rate-hz", "1e9")),
        Case("log: negative duration", ("log", "--port", PORT, "--db", f"{w}/new.sqlite", "--duration-s", "-1")),
        Case("log: NaN connect window", ("log", "--port", PORT, "--db", f"{w}/new.sqlite", "--connect-window-s",
                                         "nan")),
        # drift: logbooks that are not, options out of range, reports in the way
        Case("drift: missing logbook", ("drift", f"{w}/none.sqlite")),
        Case("drift: text file", ("drift", f"{w}/text.sqlite")),
        Case("drift: empty file", ("drift", f"{w}/empty.sqlite")),
        Case("drift: zeros", ("drift", f"{w}/zeros.sqlite")),
        Case("drift: truncated logbook", ("drift", f"{w}/truncated.sqlite")),
        Case("drift: other SQLite file", ("drift", f"{w}/other.sqlite")),
        Case("drift: folder", ("drift", f"{w}/lbdir.sqlite")),
        Case("drift: NaN bin", ("drift", f"{w}/hut.sqlite", "--bin-s", "nan")),
        Case("drift: zero bin", ("drift", f"{w}/hut.sqlite", "--bin-s", "0")),
        Case("drift: 1e-9 s bin", ("drift", f"{w}/hut.sqlite", "--bin-s", "1e-9")),
        Case("drift: confidence 1.5", ("drift", f"{w}/hut.sqlite", "--confidence", "1.5")),
        Case("drift: confidence NaN", ("drift", f"{w}/hut.sqlite", "--confidence", "nan")),
        Case("drift: report into a file", ("drift", f"{w}/hut.sqlite", "--report", f"{w}/taken.csv")),
        Case("drift: same logbook twice", ("drift", f"{w}/hut.sqlite", f"{w}/hut.sqlite")),
        Case("drift: missing sipm", ("drift", f"{w}/hut.sqlite", "--sipm", f"{w}/none.yaml")),
        # export: the same logbooks, outputs in the way
        Case("export: missing logbook", ("export", f"{w}/none.sqlite", "--csv", f"{w}/o.csv")),
        Case("export: truncated logbook", ("export", f"{w}/truncated.sqlite", "--csv", f"{w}/o.csv")),
        Case("export: other SQLite file", ("export", f"{w}/other.sqlite", "--csv", f"{w}/o.csv")),
        Case("export: one bad of two", ("export", f"{w}/hut.sqlite", f"{w}/text.sqlite", "--csv", f"{w}/o.csv")),
        Case("export: existing CSV", ("export", f"{w}/hut.sqlite", "--csv", f"{w}/taken.csv")),
        Case("export: CSV into a folder", ("export", f"{w}/hut.sqlite", "--csv", f"{w}/pq")),
        Case("export: CSV under a file", ("export", f"{w}/hut.sqlite", "--csv", f"{w}/taken.csv/o.csv")),
        Case("export: existing parquet", ("export", f"{w}/hut.sqlite", "--parquet", f"{w}/pq")),
        Case("export: parquet over a file", ("export", f"{w}/hut.sqlite", "--parquet", f"{w}/taken.csv")),
        Case("export: logbook as output", ("export", f"{w}/hut.sqlite", "--csv", f"{w}/hut.sqlite", "--force")),
        # simulate: option values and scenario files gone wrong
        Case("simulate: NaN days", ("simulate", scen, "--days", "nan")),
        Case("simulate: 1e12 days", ("simulate", scen, "--days", "1e12")),
        Case("simulate: negative units", ("simulate", scen, "--units", "-1")),
        Case("simulate: 1e12 units", ("simulate", scen, "--units", "1000000000000")),
        Case("simulate: zero workers", (*short, "--workers", "0")),
        Case("simulate: unknown strategy", (*short, "--strategy", "magic")),
        Case("simulate: missing scenario", ("simulate", f"{w}/none.yaml")),
        Case("simulate: profile as scenario", ("simulate", a)),
        Case("simulate: NaN weather", ("simulate", f"{w}/scen/nan.yaml", "--days", "0.1", "--units", "0")),
        Case("simulate: 1e12 days in file", ("simulate", f"{w}/scen/huge.yaml", "--units", "0")),
        Case("simulate: 1e9 Hz control", ("simulate", f"{w}/scen/rate.yaml", "--days", "0.1", "--units", "0")),
        Case("simulate: missing profile", ("simulate", f"{w}/scen/nosipm.yaml", "--days", "0.1", "--units", "0")),
        Case("simulate: itself as profile", ("simulate", f"{w}/scen/self.yaml", "--days", "0.1", "--units", "0")),
        Case("simulate: alias bomb", ("simulate", f"{w}/scen/bomb.yaml")),
        Case("simulate: latin-1 comment", ("simulate", f"{w}/scen/latin1.yaml", "--days", "0.1", "--units", "0")),
        Case("simulate: tab indent", ("simulate", f"{w}/scen/tabs.yaml", "--days", "0.1", "--units", "0")),
        Case("simulate: plot into a file", (*short, "--plot", f"{w}/taken.csv")),
        Case("simulate: firmware into a file", (*short, "--firmware", f"{w}/taken.csv")),
        Case("simulate: no scheduler", (*short, "--units", "2", "--scheduler", "tcp://127.0.0.1:1")),
    ]


def snapshot(work: Path) -> dict:
    """Every file and folder under ``work`` with its size and modification time (folders: None).

    SQLite's own companions of a logbook in write-ahead-log mode (``-wal``, ``-shm``), which any reader creates
    and a read-only reader cannot remove, are left out: they are no output of ours.
    """
    return {p: (p.stat().st_size, p.stat().st_mtime_ns) if p.is_file() else None for p in work.rglob("*")
            if not p.name.endswith(("-wal", "-shm"))}


def _signal_at_gate(proc: subprocess.Popen, case: Case) -> list[str]:
    """Read stderr until the process waits at the gate, then send the signal; return the lines read."""
    lines = []
    for line in proc.stderr:
        lines.append(line)
        if line.startswith("gate: waiting"):
            proc.send_signal(case.interrupt)
            break
    return lines


def run_case(case: Case, work: Path, port: str = "") -> tuple[bool, str]:
    """Run one case; return (passed, what was seen)."""
    before = snapshot(work)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(GATE), str(REPO)]) if case.interrupt else str(REPO))
    if case.interrupt:
        env["COMPENSATOR_GATE"] = case.gate
    argv = [a.replace(PORT, port) for a in case.argv]
    # The user's Ctrl-C reaches the command even when this sweep runs in the background (where SIGINT is ignored).
    proc = subprocess.Popen([sys.executable, "-m", "compensator", *argv], cwd=work, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    early = _signal_at_gate(proc, case) if case.interrupt else []
    try:
        out, err = proc.communicate(timeout=600)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
        err += "\n(killed by the sweep after 600 s)"
    err = "".join(early) + err
    lines = [line for line in err.strip().splitlines() if not line.startswith("gate: ")]
    problems = []
    if case.interrupt and not early:
        problems.append(f"never reached {case.gate}")
    if proc.returncode != case.status:
        problems.append(f"exit {proc.returncode}, expected {case.status}")
    if "Traceback" in err:
        problems.append("traceback")
    if case.status == 2 and not any(line.startswith("compensator: ") for line in lines):
        problems.append("no 'compensator:' line")
    if case.status == 130 and lines[-1:] != ["compensator: interrupted"]:
        problems.append("does not end with 'compensator: interrupted'")
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
    if proc.returncode in (2, 130) and new:
        problems.append(f"left {len(new)} new files or folders ({', '.join(sorted(p.name for p in new)[:3])})")
    new += [p for p in work.rglob("*") if p.name.endswith(("-wal", "-shm"))]
    for p in sorted(new, reverse=True):  # each case starts from the same state (contents before their folders)
        shutil.rmtree(p, ignore_errors=True) if p.is_dir() else p.unlink(missing_ok=True)
    seen = f"exit {proc.returncode}, {len(lines)} stderr lines: {lines[-1][:100] if lines else ''}"
    return not problems, "; ".join(problems) or seen


def start_board(work: Path) -> tuple[subprocess.Popen, str]:
    """A simulated board for the cases that talk to one; returns the process and its port path."""
    proc = subprocess.Popen([sys.executable, "-m", "compensator", "board-sim", "--sipm", f"{H}/hut-sipm-a.yaml",
                             "--board", f"{H}/hut-board-ntc.yaml", "--heartbeat-timeout-s", "0"],
                            cwd=work, env=dict(os.environ, PYTHONPATH=str(REPO)), stdout=subprocess.PIPE,
                            stderr=subprocess.DEVNULL, text=True)
    return proc, proc.stdout.readline().strip()


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    only = argv[argv.index("--only") + 1] if "--only" in argv else ""
    failed = 0
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp) / "work"
        work.mkdir()
        board, port = start_board(Path(tmp))
        try:
            for case in cases(work):
                if ("--quick" in argv and case.interrupt) or (only and only not in case.name
                                                              and only not in " ".join(case.argv)):
                    continue
                ok, seen = run_case(case, work, port)
                failed += not ok
                print(f"{'ok  ' if ok else 'FAIL'} {case.name:28s} {seen}", flush=True)
        finally:
            board.send_signal(signal.SIGTERM)
            board.wait(timeout=60)
    print(f"{failed} failed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

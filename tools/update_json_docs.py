"""Regenerate docs/json-fields.md: every JSON field with its unit, and the fields each command prints.

Usage: python tools/update_json_docs.py [--check]

The registry of names is ``compensator/vocabulary.py``; the fields by command
come from running every command with ``--json`` on the bundled profiles and
the seeded demo data (``INVOCATIONS`` below; a new command with ``--json``
adds its invocations here). With --check, exit 1 when the file is out of date
(``tests/test_vocabulary_commands.py`` runs the same check).
"""

from __future__ import annotations

import contextlib
import io
import json
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
DOC = REPO / "docs" / "json-fields.md"


@dataclass(frozen=True, kw_only=True)
class Invocation:
    """One run of a command with ``--json``.

    ``argv`` may hold ``{profiles}``, ``{demo}`` (seeded bench data), ``{runs}`` (seeded logbooks),
    ``{loops}`` (seeded loop experiments) and ``{work}`` (a scratch folder);
    ``save_as`` keeps the JSON in ``{work}/NAME`` for a later invocation.
    """

    command: str
    argv: tuple[str, ...]
    status: int = 0
    save_as: str = ""


_H = "{profiles}"
INVOCATIONS: tuple[Invocation, ...] = (
    Invocation(command="demo", argv=("demo", "--profiles", _H, "--step-c", "35")),
    Invocation(command="model", argv=("model", "--sipm", f"{_H}/hut-sipm-a.yaml", "--temp-c", "-25", "45",
                                      "--bias-v", "27.5")),
    Invocation(command="model", argv=("model", "--sipm", f"{_H}/hut-sipm-c.yaml", "--temp-c", "25",
                                      "--overvoltage-v", "5")),
    Invocation(command="sensor", argv=("sensor", "--board", f"{_H}/hut-board-ntc.yaml", "--temp-c", "-25", "45")),
    Invocation(command="sensor", argv=("sensor", "--board", f"{_H}/hut-board-pt1000.yaml", "--adc-code", "0",
                                       "41023")),
    Invocation(command="budget", argv=("budget", "--sipm", f"{_H}/hut-sipm-b.yaml", "--board",
                                       f"{_H}/hut-board-pt1000.yaml", "--overvoltage-v", "4", "--samples", "200")),
    Invocation(command="table", argv=("table", "--sipm", f"{_H}/hut-sipm-a.yaml", "--board",
                                      f"{_H}/hut-board-ntc.yaml", "--overvoltage-v", "3", "--max-gain-error-pct",
                                      "0.05", "--out", "{work}/table", "--drop-correction", "measured")),
    Invocation(command="tune", argv=("tune", "--plant", f"{_H}/hut-cooler.yaml", "--method", "robust",
                                     "--ambient-range", "-25", "45")),
    Invocation(command="tune", argv=("tune", "--plant", f"{_H}/hut-board-ntc.yaml", "--method", "simc")),
    Invocation(command="tune", argv=("tune", "--fopdt", "2", "30", "5", "--method", "simc", "--rate-hz", "10")),
    Invocation(command="identify", argv=("identify", "{loops}/hut-cooler-step.csv", "--model", "sopdt")),
    Invocation(command="identify", argv=("identify", "{loops}/hut-cooler-relay.csv", "--model", "relay")),
    Invocation(command="profile check", argv=("profile", "check", f"{_H}/hut-sipm-a.yaml", "{work}/bad.yaml"),
               status=2),
    Invocation(command="calibrate iv", argv=("calibrate", "iv", "{demo}/iv/ch01_m20C.csv", "{demo}/iv/ch01_p20C.csv"),
               save_as="iv.json"),
    Invocation(command="calibrate spectrum", argv=("calibrate", "spectrum", "{demo}/spectra/ch01_25C_27.460V.csv")),
    Invocation(command="calibrate spectrum", argv=("calibrate", "spectrum", "{demo}/spectra/ch01_25C_26.960V.csv",
                                                   "{demo}/spectra/ch01_25C_27.960V.csv", "--write-profile",
                                                   "{work}/crosstalk.yaml", "--base", f"{_H}/hut-sipm-a.yaml",
                                                   "--overvoltage-v", "2.5", "3.5")),
    Invocation(command="calibrate gain-scan", argv=("calibrate", "gain-scan", "{demo}/gain/gain_m20C.csv",
                                                    "{demo}/gain/gain_p0C.csv", "{demo}/gain/gain_p40C.csv"),
               save_as="gain-scan.json"),
    Invocation(command="calibrate gain-scan", argv=("calibrate", "gain-scan", "--spectra",
                                                    "{demo}/spectra/ch01_25C_26.960V.csv",
                                                    "{demo}/spectra/ch01_25C_27.960V.csv",
                                                    "{demo}/spectra/ch01_25C_28.460V.csv",
                                                    "--bias-v", "26.96", "27.96", "28.46")),
    Invocation(command="calibrate tempco", argv=("calibrate", "tempco", "{work}/gain-scan.json", "--write-profile",
                                                 "{work}/calibrated.yaml", "--base", f"{_H}/hut-sipm-a.yaml")),
    Invocation(command="calibrate tempco", argv=("calibrate", "tempco", "{work}/iv.json")),
    Invocation(command="simulate", argv=("simulate", f"{_H}/hut-week-scenario.yaml", "--days", "0.02", "--units", "3",
                                         "--workers", "1")),
    Invocation(command="board-code", argv=("board-code", "--out", "{work}/board-code", "--sipm",
                                           f"{_H}/hut-sipm-a.yaml", "--board", f"{_H}/hut-board-ntc.yaml")),
    *(Invocation(command=f"board {action}", argv=("board", "--port", "{board}", action, *extra))
      for action, extra in (("identify", ()), ("status", ()), ("set-overvoltage", ("3",)), ("set-bias", ("27",)),
                            ("enable", ()), ("disable", ()), ("faults", ()), ("clear-faults", ()),
                            ("upload-table", ("{work}/board.table.image.json",)),
                            ("upload-pid", ("{work}/board.pid.image.json",)))),
    Invocation(command="log", argv=("log", "--port", "{board}", "--db", "{work}/logged.sqlite", "--duration-s", "1",
                                    "--rate-hz", "10")),
    Invocation(command="drift", argv=("drift", "{runs}/hut-03.sqlite")),
    Invocation(command="drift", argv=("drift", "{runs}/hut-03.sqlite", "{runs}/hut-07.sqlite")),
    Invocation(command="export", argv=("export", "{runs}/hut-03.sqlite", "--csv", "{work}/hut-03.csv")),
)


@dataclass(frozen=True, kw_only=True)
class Run:
    """What one invocation printed."""

    invocation: Invocation
    argv: tuple[str, ...]
    status: int
    document: object
    stderr: str


def run_command(argv) -> tuple[int, str, str]:
    """Run ``compensator ARGV`` in this process; return ``(status, stdout, stderr)``."""
    from compensator.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main([str(a) for a in argv])
        except SystemExit as exc:
            status = exc.code if isinstance(exc.code, int) else 2
    return status, out.getvalue(), err.getvalue()


def prepare(work: Path) -> dict:
    """Write the seeded demo inputs into ``work``; return the placeholders of the invocations."""
    sys.path.insert(0, str(REPO / "tools"))
    try:
        import make_demo_data
        import make_demo_logbook
        import make_loop_data
    finally:
        sys.path.pop(0)
    demo, loops = work / "demo", work / "loops"
    make_demo_data.write_demo_data(demo)
    loops.mkdir()
    make_loop_data.make_step(loops / "hut-cooler-step.csv")
    make_loop_data.make_relay(loops / "hut-cooler-relay.csv")
    (work / "bad.yaml").write_text("kind: board\n")
    runs = work / "runs"
    runs.mkdir()
    for k, (unit_id, drift, tempco) in enumerate(make_demo_logbook.UNITS[:2]):
        make_demo_logbook.write_unit(runs / f"{unit_id}.sqlite", unit_id, days=2.0, rate_hz=1 / 60, drift=drift,
                                     tempco=tempco, seed=k + 1)
    return {"profiles": str(REPO / "hardware_profiles"), "demo": str(demo), "loops": str(loops), "work": str(work),
            "runs": str(runs), "board": _start_board(work)}


def _start_board(work: Path) -> str:
    """A simulated board for the ``board`` invocations (stopped at exit); writes images to upload; returns its port."""
    import atexit
    import threading

    from compensator.board import SimulatedBoard, build_board
    from compensator.firmware.pid import PidSettings, quantise_pid
    from compensator.link.images import pid_image, table_image
    from compensator.profiles import load_board, load_sipm

    profiles = REPO / "hardware_profiles"
    firmware, plant, _ = build_board(load_sipm(profiles / "hut-sipm-a.yaml"), load_board(profiles / "hut-board-ntc.yaml"),
                                     overvoltage_v=3.0, heartbeat_timeout_s=0.0)
    (work / "board.table.image.json").write_bytes(table_image(firmware.table))
    pid = quantise_pid(PidSettings(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=0.1, out_min=-3.0, out_max=3.0),
                       input_per_count=0.01, output_per_count=0.001)
    (work / "board.pid.image.json").write_bytes(pid_image(pid))
    sim = SimulatedBoard(firmware, plant)
    thread = threading.Thread(target=sim.run, daemon=True)
    thread.start()

    def stop():
        sim.stop()
        thread.join(5.0)
        sim.close()

    atexit.register(stop)
    return sim.path


def collect(work: Path, invocations=INVOCATIONS) -> list[Run]:
    """Run every invocation with ``--json`` in ``work``; return what each printed (documents parsed)."""
    places = prepare(work)
    runs = []
    for inv in invocations:
        argv = tuple(a.format(**places) for a in inv.argv) + ("--json",)
        status, out, err = run_command(argv)
        try:
            document = json.loads(out)
        except ValueError:
            document = None
        if inv.save_as:
            (work / inv.save_as).write_text(out)
        runs.append(Run(invocation=inv, argv=argv, status=status, document=document, stderr=err))
    return runs


def names_by_command(runs) -> dict[str, set]:
    """The field names each command printed, over all its invocations."""
    from compensator.vocabulary import field_names

    names: dict[str, set] = {}
    for run in runs:
        names.setdefault(run.invocation.command, set()).update(n for n, _ in field_names(run.document))
    return names


def render(runs) -> str:
    """The text of docs/json-fields.md."""
    from compensator.vocabulary import fields_markdown

    return fields_markdown(names_by_command(runs))


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    with tempfile.TemporaryDirectory() as tmp:
        text = render(collect(Path(tmp)))
    if "--check" in argv:
        if not DOC.exists() or DOC.read_text() != text:
            print(f"{DOC}: out of date; run python tools/update_json_docs.py", file=sys.stderr)
            return 1
        return 0
    DOC.parent.mkdir(exist_ok=True)
    DOC.write_text(text)
    print(f"wrote {DOC}")
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(REPO))
    sys.exit(main())

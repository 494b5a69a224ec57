"""``compensator board-sim``: a simulated controller board on a pseudo-terminal."""

from __future__ import annotations

import signal
import sys

from compensator.cli.board import CAUTION
from compensator.cli._common import (EXIT_OK, bounded_float, caution, finite_float, non_negative_float, positive_float,
                                     seed, usage_error)

__all__ = ["register", "run"]

ORDER = 72
COMMAND = "board-sim"
HELP = "run a simulated controller board on a pseudo-terminal (prints its path first)"
#: argparse type: a probability.
PROBABILITY = bounded_float(0.0, 1.0)





def register(subparsers) -> None:
    parser = subparsers.add_parser(
        COMMAND, help=HELP,
        description="Run the firmware references (lookup table, fixed-point cooler PID, interlocks, link "
                    "protocol) against the simulated plant of one unit, behind a pseudo-terminal. The first line "
                    "on stdout is the path to open with `compensator board --port PATH` (a stable link to the "
                    "present terminal, kept across injected disconnections). Runs until SIGINT or SIGTERM. "
                    + CAUTION)
    parser.add_argument("--sipm", metavar="FILE", help="sipm profile")
    parser.add_argument("--board", metavar="FILE", help="board profile")
    parser.add_argument("--thermal", metavar="FILE", help="thermal profile: a cooler under the sensor")
    parser.add_argument("--scenario", metavar="FILE", help="field scenario (its weather and profiles) instead")
    parser.add_argument("--overvoltage-v", type=positive_float, metavar="V",
                        help="law target the table is built for, volt (default: midway between the sensor's limits)")
    parser.add_argument("--ambient-c", type=finite_float, metavar="C",
                        help="constant outdoor temperature without a scenario, degree C")
    parser.add_argument("--corrupt-rate", type=PROBABILITY, default=0.0, metavar="P",
                        help="probability that a byte on the line is corrupted (both directions)")
    parser.add_argument("--drop-rate", type=PROBABILITY, default=0.0, metavar="P",
                        help="probability that a frame or read is lost")
    parser.add_argument("--delay-ms", type=non_negative_float, default=0.0, metavar="MS",
                        help="extra delay of every reply, millisecond")
    parser.add_argument("--disconnect-every-s", type=non_negative_float, default=0.0, metavar="S",
                        help="unplug the terminal this often (wall clock), second (0: never)")
    parser.add_argument("--disconnect-s", type=non_negative_float, default=0.5, metavar="S",
                        help="how long each unplug lasts, second (default 0.5)")
    parser.add_argument("--sensor-fault", choices=("open", "short"), help="temperature sensor fault to inject")
    parser.add_argument("--hot-side-fault", action="store_true", help="the cooler's hot side reads over its limit")
    parser.add_argument("--supply-fault", choices=("stuck", "high"),
                        help="the bias supply stops following its DAC: stuck at its output, or failed high (a "
                             "board with a bias read-back latches supply_fault; one without cannot tell)")
    parser.add_argument("--fault-at-s", type=non_negative_float, default=0.0, metavar="S",
                        help="board time from which injected plant faults hold, second")
    parser.add_argument("--time-scale", type=bounded_float(0.0, 1e6, above=True), default=1.0, metavar="X",
                        help="board seconds per wall-clock second (e.g. 1000 runs days of weather in minutes)")
    parser.add_argument("--heartbeat-timeout-s", type=non_negative_float, default=10.0, metavar="S",
                        help="host silence (wall clock) after which the board goes to its safe state, second "
                             "(0: no watchdog; default 10)")
    parser.add_argument("--seed", type=seed, default=1, metavar="N",
                        help="seed of the plant noise and line faults (a non-negative integer)")
    parser.add_argument("--duration-s", type=positive_float, metavar="S", help="stop after this long (wall clock)")
    parser.set_defaults(handler=run)


def run(args) -> int:
    from compensator.board import LineFaults, PlantFaults, SimulatedBoard, build_board
    from compensator.errors import ModelError
    from compensator.profiles import load_board, load_sipm, load_thermal

    if args.scenario is not None and (args.sipm or args.board or args.thermal):
        raise usage_error("--scenario", "give either --scenario or --sipm/--board/--thermal, not both")
    if args.scenario is None and not (args.sipm and args.board):
        raise usage_error("--sipm", "needs --sipm and --board (or --scenario)")
    if args.thermal is None and args.scenario is None and args.hot_side_fault:
        raise usage_error("--hot-side-fault", "needs a cooler (--thermal)")
    caution(CAUTION)
    scenario = sipm = board = thermal = None
    if args.scenario is not None:
        from compensator.profiles.scenario import load_scenario

        scenario = load_scenario(args.scenario)
    else:
        sipm, board = load_sipm(args.sipm), load_board(args.board)
        thermal = load_thermal(args.thermal) if args.thermal else None
    try:
        line = LineFaults(corrupt_rate=args.corrupt_rate, drop_rate=args.drop_rate, delay_ms=args.delay_ms,
                          disconnect_every_s=args.disconnect_every_s, disconnect_s=args.disconnect_s, seed=args.seed)
        firmware, plant, findings = build_board(sipm, board, thermal, scenario=scenario,
                                                overvoltage_v=args.overvoltage_v, ambient_temp_c=args.ambient_c,
                                                heartbeat_timeout_s=args.heartbeat_timeout_s,
                                                time_scale=args.time_scale, seed=args.seed)
    except ModelError as exc:
        raise exc.at("<command line>", key=f"--{exc.key.replace('_', '-')}" if exc.key else None) from None
    for finding in findings:
        print(f"{finding.severity.value}: {finding.message}", file=sys.stderr)
    if args.supply_fault and firmware.config.readback is None:
        print(f"warning: {firmware.config.board_name} has no bias read-back channel: the injected supply fault "
              "cannot be detected, and the SiPM sees whatever the supply gives", file=sys.stderr)
    sim = SimulatedBoard(firmware, plant, time_scale=args.time_scale, line=line,
                         plant_faults=PlantFaults(sensor=args.sensor_fault, hot_side=args.hot_side_fault,
                                                  supply=args.supply_fault, at_s=args.fault_at_s))
    previous = {sig: signal.signal(sig, lambda *_: sim.stop()) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        print(sim.path, flush=True)
        print(f"board {firmware.config.board_name} on {sim.device} (stable path {sim.path}); "
              f"tick {plant.tick_s * 1000:g} ms, time scale {args.time_scale:g}", file=sys.stderr)
        sim.run(duration_s=args.duration_s)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        sim.close()
    print(f"stopped after {sim.ticks} ticks ({sim.ticks * plant.tick_s:.1f} s of board time), "
          f"{firmware.requests} requests, {firmware.replays} replayed, {firmware.codec.frames_bad} bad frames",
          file=sys.stderr)
    return EXIT_OK

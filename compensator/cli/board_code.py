"""``compensator board-code``: the board's side of the link (and its interlocks) as C99 source."""

from __future__ import annotations

import sys

from compensator.cli.board import CAUTION
from compensator.cli._common import EXIT_OK, add_json_flag, caution, non_negative_float, positive_float, print_json

__all__ = ["register", "run"]

ORDER = 74



def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "board-code", help="the board's side of the link protocol (and, with profiles, its interlocks) as C99",
        description="Write the C99 code a controller board needs to speak the link protocol: COBS framing, "
                    "CRC-16/IBM-3740, message packing and a dispatcher that calls handlers you implement "
                    "(integer-only, no dynamic memory). With --sipm and --board it also writes the safety "
                    "interlocks for that sensor on that board (bit-exact with the Python reference). " + CAUTION)
    parser.add_argument("--out", required=True, metavar="DIR", help="output directory (created if missing)")
    parser.add_argument("--name", default="board_link", metavar="NAME", help="C prefix and file stem of the link code")
    parser.add_argument("--sipm", metavar="FILE", help="sipm profile (for the interlocks)")
    parser.add_argument("--board", metavar="FILE", help="board profile (for the interlocks)")
    parser.add_argument("--thermal", metavar="FILE", help="thermal profile: cooler hot-side and dew-point limits")
    parser.add_argument("--slew-v-per-s", type=positive_float, default=2.0, metavar="V",
                        help="bias slew limit, volt per second (default 2)")
    parser.add_argument("--heartbeat-timeout-s", type=non_negative_float, default=10.0, metavar="S",
                        help="host silence that trips the safe state, second (0: no watchdog; default 10)")
    parser.add_argument("--force", action="store_true", help="replace existing output files")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def run(args) -> int:
    from compensator.cli._common import usage_error
    from compensator.errors import ModelError
    from compensator.fileio import write_files_atomic
    from compensator.firmware.interlock_limits import build_interlock_limits
    from compensator.firmware.interlocks_c import render_interlocks_c
    from compensator.firmware.link_c import render_link_c
    from compensator.link import protocol
    from compensator.profiles import load_board, load_sipm, load_thermal

    caution(CAUTION)
    if bool(args.sipm) != bool(args.board):
        raise usage_error("--sipm" if args.board else "--board", "the interlocks need both --sipm and --board")
    if args.thermal and not args.sipm:
        raise usage_error("--thermal", "needs --sipm and --board")
    try:
        profiles, limits = [], None
        if args.sipm:
            sipm, board = load_sipm(args.sipm), load_board(args.board)
            thermal = load_thermal(args.thermal) if args.thermal else None
            profiles = [x for x in (sipm, board, thermal) if x is not None]
            limits = build_interlock_limits(sipm, board, thermal, slew_v_per_s=args.slew_v_per_s,
                                            heartbeat_timeout_s=args.heartbeat_timeout_s)
        files = render_link_c(name=args.name, profiles=profiles)
        if limits is not None:
            files.update(render_interlocks_c(limits, name="interlocks", profiles=profiles,
                                             settings={"slew_v_per_s": f"{args.slew_v_per_s:g}",
                                                       "heartbeat_timeout_s": f"{args.heartbeat_timeout_s:g}"}))
    except ModelError as exc:
        raise exc.at("<command line>", key=f"--{exc.key.replace('_', '-')}" if exc.key else None) from None
    paths = write_files_atomic(args.out, files, overwrite=args.force, what="C output")
    result = {"protocol_version": protocol.PROTOCOL_VERSION, "max_frame_bytes": protocol.MAX_ENCODED_BYTES,
              "files": [str(p) for p in paths], "interlocks": None}
    if limits is not None:
        result["interlocks"] = {
            "safe_dac_code": limits.safe_dac_code, "safe_margin_v": limits.safe_margin_v,
            "slew_levels_per_tick": limits.slew_levels_per_tick, "adc_fault_band": [limits.adc_fault_lo,
                                                                                   limits.adc_fault_hi],
            "heartbeat_timeout_ms": limits.heartbeat_timeout_ms,
            "warnings": [f.message for f in limits.safe_findings]}
        for finding in limits.safe_findings:
            print(f"{finding.severity.value}: {finding.message}", file=sys.stderr)
    if args.json:
        print_json(result)
        return EXIT_OK
    print(f"link protocol version {protocol.PROTOCOL_VERSION}: frames of at most {protocol.MAX_ENCODED_BYTES} bytes "
          f"on the wire")
    if limits is not None:
        print(f"interlocks: safe DAC code {limits.safe_dac_code} ({limits.safe_margin_v:+.3f} V below breakdown at "
              f"the coldest plausible temperature), slew {limits.slew_levels_per_tick} codes per tick, "
              f"sensor band {limits.adc_fault_lo}..{limits.adc_fault_hi}")
        if limits.supply_fault_ticks:
            print(f"supply check: bias read-back within {limits.supply_fault_codes} codes of the set value, else "
                  f"supply_fault after {limits.supply_fault_ticks} ticks")
        else:
            print("supply check: none (the board has no bias read-back channel: a supply fault cannot be detected)")
    for p in paths:
        print(f"wrote {p}")
    return EXIT_OK

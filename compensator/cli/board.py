"""``compensator board``: talk to a controller board (real or simulated) over the serial link."""

from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path

from compensator.cli._common import (EXIT_OK, add_json_flag, bounded_int, caution, finite_float, non_negative_float,
                                     print_json)
from compensator.errors import InputError, Problem

__all__ = ["register", "run"]

ORDER = 70
#: Re-sends of one command before giving up (a one-shot command can afford to wait a second or two).
COMMAND_RETRIES = 10

#: The caution every link command shows (board, board-sim, board-code).
CAUTION = ("caution: a controller board drives a SiPM bias of tens of volts (above 60 V dc is hazardous live, "
           "IEC 61010-1) and possibly a cooler (an unsinked hot side runs away; a cold plate below the dew point "
           "wets the electronics); a simulation is no evidence that hardware is safe. Keep limits in hardware that "
           "does not depend on software (a bias supply that stops following its DAC is seen only through a bias "
           "read-back, and only a hardware enable line or load switch then removes the bias) and follow local "
           "codes and licensed practice.")


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "board", help="talk to a controller board over the serial link: status, set, upload, enable, watch",
        description="Send one command to a controller board over the link protocol (docs/protocol.md). --port "
                    "takes a device path, the path printed by `compensator board-sim`, or a pyserial URL. The "
                    "board refuses unsafe requests (exit status 2, with the reason). It holds its outputs only "
                    "while a host keeps talking to it (`watch` does; a board with its heartbeat watchdog on goes "
                    "to its safe state after the timeout). " + CAUTION)
    parser.add_argument("--port", required=True, metavar="URL", help="device path, pty path or pyserial URL")
    parser.add_argument("--baud", type=bounded_int(1, 100_000_000), default=115200, metavar="N", help="line speed, baud (default 115200)")
    parser.add_argument("--hexdump", action="store_true", help="print the traffic in hex on stderr")
    sub = parser.add_subparsers(dest="action", metavar="ACTION")
    sub.required = True
    p = sub.add_parser("status", help="one status sample: temperature, bias, current, faults")
    add_json_flag(p)
    p = sub.add_parser("identify", help="firmware version, board name, hashes of the loaded table and coefficients")
    add_json_flag(p)
    p = sub.add_parser("faults", help="live and latched faults with the value and time of each trip")
    add_json_flag(p)
    p = sub.add_parser("set-overvoltage", help="hold the law's overvoltage target (bias from the table)")
    p.add_argument("overvoltage_v", type=finite_float, metavar="V", help="overvoltage, volt")
    add_json_flag(p)
    p = sub.add_parser("set-bias", help="hold a fixed bias (refused above the board's or sensor's limits)")
    p.add_argument("bias_v", type=finite_float, metavar="V", help="bias, volt")
    add_json_flag(p)
    for name, what in (("upload-table", "a lookup-table image (NAME.image.json written by `compensator table`)"),
                       ("upload-pid", "a PID-coefficients image (NAME.image.json written by `compensator tune "
                                      "--emit-c`)")):
        p = sub.add_parser(name, help=f"upload {what}; the board applies it only when complete and checked")
        p.add_argument("path", metavar="PATH", help="the image file, or the folder holding exactly one")
        add_json_flag(p)
    for name, what in (("enable", "enable the outputs (the bias ramps up at the slew limit)"),
                       ("disable", "disable the outputs (the bias ramps down at the slew limit)"),
                       ("clear-faults", "clear latched faults whose cause has gone")):
        p = sub.add_parser(name, help=what)
        add_json_flag(p)
    p = sub.add_parser("watch", help="live telemetry on the terminal (keeps the board's watchdog fed)")
    p.add_argument("--period-s", type=non_negative_float, default=1.0, metavar="S",
                   help="telemetry period in board time, second (default 1)")
    p.add_argument("--duration-s", type=non_negative_float, default=None, metavar="S",
                   help="stop after this long, second (default: until Ctrl-C)")
    p.add_argument("--json-lines", action="store_true",
                   help="one JSON object per sample on stdout (JSON lines, field names as in `status --json`)")
    parser.set_defaults(handler=run)


def _image_path(path: str) -> Path:
    target = Path(path)
    if target.is_dir():
        images = sorted(target.glob("*.image.json"))
        if len(images) != 1:
            raise InputError(Problem(path, 0, "", f"needs exactly one *.image.json in the folder, found {len(images)}"))
        return images[0]
    if not target.is_file():
        raise InputError(Problem(path, 0, "", "no such file or folder"))
    return target


def _telemetry_json(t) -> dict:
    from compensator.firmware.faults import fault_names

    out = dataclasses.asdict(t)
    out["faults_live"] = fault_names(t.faults_live)
    out["faults_latched"] = fault_names(t.faults_latched)
    return out


def run(args) -> int:
    from compensator.link.client import BoardClient
    from compensator.link.images import read_image
    from compensator.link.protocol import UploadTarget

    hexdump = (lambda line: print(line, file=sys.stderr)) if args.hexdump else None
    action = args.action
    if action in ("set-bias", "set-overvoltage", "enable"):
        caution(CAUTION)
    image = None
    if action in ("upload-table", "upload-pid"):
        path = _image_path(args.path)
        from compensator.link.protocol import MAX_IMAGE_BYTES

        if path.stat().st_size > MAX_IMAGE_BYTES:
            raise InputError(Problem(str(path), 0, "", f"{path.stat().st_size} bytes; the protocol carries images of "
                                                       f"at most {MAX_IMAGE_BYTES} bytes"))
        try:
            image = path.read_bytes()
        except OSError as exc:
            raise InputError(Problem(str(path), 0, "", f"cannot read: {exc.strerror}")) from None
        try:
            kind, _ = read_image(image)
        except Exception as exc:  # an ImageError: say which file
            raise InputError(Problem(str(path), 0, "", str(exc))) from None
        wanted = "lookup_table" if action == "upload-table" else "pid_coefficients"
        if kind != wanted:
            raise InputError(Problem(str(path), 0, "image", f"holds {kind.replace('_', ' ')}, not "
                                                            f"{wanted.replace('_', ' ')}"))
    with BoardClient.open(args.port, baud_rate=args.baud, hexdump=hexdump, ramp_down_on_exit=False,
                          reconnect_timeout_s=2.0, retries=COMMAND_RETRIES) as board:
        if action == "watch":
            return _watch(board, args)
        result = _act(board, action, args, image, UploadTarget)
    if getattr(args, "json", False):
        print_json(result)
    else:
        for key, value in result.items():
            if isinstance(value, dict):
                continue
            if isinstance(value, list) and value and isinstance(value[0], dict):
                for record in value:
                    print(f"{key}: " + ", ".join(f"{k} {v}" for k, v in record.items()))
            else:
                print(f"{key}: {', '.join(map(str, value)) if isinstance(value, list) else value}")
    return EXIT_OK


def _act(board, action, args, image, UploadTarget) -> dict:
    port = {"port": args.port}
    if action == "status":
        s = board.status()
        t = s.telemetry
        return {**port, "temp_c": t.sensor_temp_c,
                "bias_v": t.bias_measured_v if t.bias_measured_v is not None else t.bias_set_v,
                "current_a": t.sipm_current_a, "faults": _telemetry_json(t)["faults_latched"],
                "board_mode": s.mode, "outputs_enabled": s.outputs_enabled, "bias_dac_code": s.bias_dac_code,
                "telemetry_period_s": s.telemetry_period_s, "telemetry": _telemetry_json(t)}
    if action == "identify":
        return {**port, **dataclasses.asdict(board.identify())}
    if action == "faults":
        f = board.faults()
        return {**port, "faults_live": f.live, "faults_latched": f.latched,
                "trips": [dataclasses.asdict(r) for r in f.trips]}
    if action == "set-overvoltage":
        return {**port, "overvoltage_target_v": board.set_overvoltage(args.overvoltage_v)}
    if action == "set-bias":
        return {**port, "bias_set_v": board.set_bias(args.bias_v)}
    if action in ("upload-table", "upload-pid"):
        target = UploadTarget.TABLE if action == "upload-table" else UploadTarget.COEFFICIENTS
        size = board.upload(target, image)
        ident = board.identify()
        digest = ident.table_sha256 if action == "upload-table" else ident.coefficients_sha256
        return {**port, "image_bytes": size, "image_sha256": digest}
    if action == "enable":
        board.enable()
        return {**port, "outputs_enabled": True}
    if action == "disable":
        board.disable()
        return {**port, "outputs_enabled": False}
    return {**port, "faults_latched": board.clear_faults()}


def _watch(board, args) -> int:
    from compensator.link.messages import Telemetry
    from compensator.vocabulary import to_json_value

    board.set_telemetry_period(args.period_s)
    header = f"{'uptime_s':>10} {'temp_c':>8} {'bias_v':>9} {'ov_target_v':>11} {'current_a':>10} faults"
    if not args.json_lines:
        print(header)
    samples = 0
    try:
        for item in board.stream(duration_s=args.duration_s):
            if not isinstance(item, Telemetry):
                print(f"link: {item.kind} {item.detail}" + (f" after {item.gap_s:.1f} s" if item.gap_s else ""),
                      file=sys.stderr)
                continue
            samples += 1
            if args.json_lines:
                print(json.dumps(to_json_value(_telemetry_json(item))), flush=True)
            else:
                cur = "-" if item.sipm_current_a is None else f"{item.sipm_current_a:.3e}"
                print(f"{item.uptime_s:10.1f} {item.sensor_temp_c:8.3f} {item.bias_set_v:9.4f} "
                      f"{item.overvoltage_target_v:11.4f} {cur:>10} "
                      f"{','.join(_telemetry_json(item)['faults_latched']) or '-'}", flush=True)
    finally:
        try:
            board.set_telemetry_period(0)
        except Exception:  # noqa: BLE001 - the port may be gone; the board keeps its own safety
            pass
    print(f"{samples} samples", file=sys.stderr)
    return EXIT_OK

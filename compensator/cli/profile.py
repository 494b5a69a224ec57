"""``compensator profile``: check profiles and list the keys they accept."""

from __future__ import annotations

import sys
from pathlib import Path

from compensator.cli._common import EXIT_OK, EXIT_USAGE, add_json_flag, print_json
from compensator.errors import ProfileError
from compensator.profiles import load_profile
from compensator.profiles.docs import keys_markdown
from compensator.profiles.schema import KINDS

__all__ = ["ORDER", "YAML_SUFFIXES", "register", "run_check", "run_keys"]

ORDER = 10
YAML_SUFFIXES = (".yaml", ".yml")


def register(subparsers) -> None:
    parser = subparsers.add_parser("profile", help="check hardware profiles; list their keys")
    sub = parser.add_subparsers(dest="profile_command", metavar="ACTION")
    sub.required = True
    check = sub.add_parser("check", help="validate profile files; exit 2 listing FILE:LINE: key: reason for each problem")
    check.add_argument("files", nargs="+", metavar="FILE", help="YAML profiles (other files are skipped with a note)")
    add_json_flag(check)
    check.set_defaults(handler=run_check)
    keys = sub.add_parser("keys", help="print every key of a profile kind, with its unit, as Markdown")
    keys.add_argument("--kind", choices=sorted(KINDS), action="append", help="limit to this kind (repeatable)")
    keys.set_defaults(handler=run_keys)


def run_check(args) -> int:
    results, checked, failed = [], 0, 0
    for name in args.files:
        if Path(name).suffix.lower() not in YAML_SUFFIXES and not Path(name).is_dir() and Path(name).exists():
            print(f"compensator: {name}: skipped (not a .yaml/.yml file)", file=sys.stderr)
            results.append({"file": name, "status": "skipped", "problems": []})
            continue
        checked += 1
        try:
            profile = load_profile(name)
        except ProfileError as exc:
            failed += 1
            for problem in exc.problems:
                print(f"compensator: {problem}", file=sys.stderr)
            results.append({"file": name, "status": "invalid",
                            "problems": [{"line": p.line, "key": p.key, "reason": p.reason} for p in exc.problems]})
            continue
        kind = type(profile).__name__.removesuffix("Profile").lower()
        results.append({"file": name, "status": "ok", "kind": kind, "name": profile.name, "sha256": profile.sha256,
                        "problems": []})
        if not args.json:
            print(f"{name}: ok ({kind} {profile.name})")
    if args.json:
        print_json({"profiles": results, "checked": checked, "invalid": failed})
    if checked == 0:
        print("compensator: no YAML profile among the files given", file=sys.stderr)
        return EXIT_USAGE
    return EXIT_USAGE if failed else EXIT_OK


def run_keys(args) -> int:
    sys.stdout.write(keys_markdown(args.kind))
    return EXIT_OK

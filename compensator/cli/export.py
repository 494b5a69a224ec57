"""``compensator export``: logbooks to CSV, or to a Parquet dataset partitioned by unit and day."""

from __future__ import annotations

import os

from compensator.cli._common import add_json_flag, print_json

__all__ = ["register", "run", "refuse_repeated_logbooks"]

ORDER = 84
COMMAND = "export"
HELP = "export logbooks to CSV or to a Parquet dataset partitioned by unit and day"


def register(subparsers) -> None:
    parser = subparsers.add_parser(COMMAND, help=HELP, description=(
        "Write the telemetry of one or more logbooks to one CSV file, or (with the optional pyarrow extra) to "
        "a Parquet dataset in hive-style folders unit_id=NAME/date_utc=YYYY-MM-DD/ that DuckDB, Dask or "
        "Spark read with one query. Nothing is written when a logbook cannot be read."))
    parser.add_argument("logbooks", nargs="+", metavar="RUN.sqlite", help="logbook files")
    target = parser.add_mutually_exclusive_group(required=True)
    target.add_argument("--csv", metavar="OUT.csv", help="one CSV file with a header row")
    target.add_argument("--parquet", metavar="DIR", help="a Parquet dataset folder (must not exist)")
    parser.add_argument("--force", action="store_true", help="replace an existing output")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def refuse_repeated_logbooks(paths, output=None) -> None:
    """Refuse a logbook named twice (its rows would count twice), or given as the output too.

    Parameters
    ----------
    paths : sequence of str
        The logbooks, as given.
    output : str, optional
        The output file or folder, which must be none of them.

    Raises
    ------
    InputError
        Naming the second mention of a file.
    """
    from compensator.errors import InputError, Problem

    seen = {}
    for path in paths:
        key = os.path.realpath(path)
        if key in seen:
            raise InputError(Problem(path, 0, "", f"named twice (also as {seen[key]}); each logbook counts once"))
        seen[key] = path
    if output is not None and os.path.realpath(output) in seen:
        raise InputError(Problem(output, 0, "", "is one of the logbooks read; choose another output"))


def run(args) -> int:
    from compensator.logbook.export import export_csv, export_parquet

    refuse_repeated_logbooks(args.logbooks, args.csv or args.parquet)
    if args.csv:
        summary = export_csv(args.logbooks, args.csv, overwrite=args.force)
    else:
        summary = export_parquet(args.logbooks, args.parquet, overwrite=args.force)
    if args.json:
        print_json(summary)
    else:
        extra = f" in {summary.parquet_files} files, {summary.partitions} unit-day partitions" if args.parquet else ""
        print(f"{summary.output_path}: {summary.rows} rows from {summary.logbooks} logbooks{extra}")
    return 0

"""``compensator export``: logbooks to CSV, or to a Parquet dataset partitioned by unit and day."""

from __future__ import annotations

from compensator.cli._common import add_json_flag, print_json

__all__ = ["register", "run"]

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


def run(args) -> int:
    from compensator.logbook.export import export_csv, export_parquet

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

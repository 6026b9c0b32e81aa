"""``taprig export FILE``: the session's scan table and points table as CSV or Parquet, or into an archive.

``-o OUT`` writes the scans to OUT and the points (if any) beside it as ``OUT-stem.points.EXT``;
``--partitioned DIR`` adds one or more sessions to an archive of two Hive-style datasets,
``DIR/scans/rig=<id>/date=<YYYY-MM-DD>/`` and ``DIR/points/…``, that pyarrow, DuckDB, Spark or Dask read. Columns are listed in docs/session-format.md. An
existing output is refused unless ``--force``.
"""

from __future__ import annotations

import sys
from pathlib import Path

from taprig.cli import UserError
from taprig.cli.commands.replay import progress_bar, session_errors
from taprig.cli.runopts import add_accept_failed_option, load_calibration_arg


def register(sub) -> None:
    p = sub.add_parser("export", help="write a session's scans and points as CSV or Parquet",
                       description="Replay a session and write one row per scan (session id, UTC time, q, V, Re, "
                                   "coefficients, flags, Cp and pressure per tap, raw counts) and one row per "
                                   "captured point. Missing values are empty (null), with the reason in the flags.")
    p.add_argument("files", nargs="+", metavar="FILE", help="session file(s); several only with --partitioned")
    p.add_argument("--format", choices=("csv", "parquet"), help="table format (default: from OUT's suffix)")
    target = p.add_mutually_exclusive_group(required=True)
    target.add_argument("-o", "--output", metavar="OUT", help="file for the scan table")
    target.add_argument("--partitioned", metavar="DIR",
                        help="add the session(s) to the Parquet archive DIR/scans/ and DIR/points/, "
                             "each partitioned rig=<id>/date=<YYYY-MM-DD>/")
    p.add_argument("--calibration", metavar="CAL", help="re-reduce with this calibration file")
    add_accept_failed_option(p)
    p.add_argument("--force", action="store_true", help="replace outputs that already exist")
    p.set_defaults(func=run)


def _format(args) -> str:
    if args.format:
        return args.format
    suffix = Path(args.output).suffix.lower().lstrip(".")
    if suffix in ("csv", "parquet"):
        return suffix
    raise UserError(f"{args.output}: cannot tell the format from the suffix; give --format csv or --format parquet",
                    2)


def run(args) -> int:
    from taprig.session.export import export_partitioned, export_session

    calibration = load_calibration_arg(args.calibration, accept_failed=args.accept_failed_calibration)
    if args.output is not None:
        if len(args.files) != 1:
            raise UserError("-o OUT takes one session; use --partitioned DIR for several", 2)
        fmt = _format(args)
        if args.partitioned is None and args.format == "csv" and Path(args.output).suffix.lower() == ".parquet":
            raise UserError(f"{args.output}: a .parquet name for --format csv; rename it or change the format", 2)
        with session_errors(), progress_bar("exporting", 1) as update:
            results = [export_session(args.files[0], args.output, fmt, calibration, args.force, update)]
    else:
        if args.format == "csv":
            raise UserError("--partitioned writes Parquet; drop --format csv", 2)
        with session_errors(), progress_bar("exporting", 1) as update:
            results = export_partitioned(args.files, args.partitioned, calibration, args.force, update)
    for result in results:
        line = f"wrote {result.scans} scans to {result.scans_path}"
        if result.points_path is not None:
            line += f" and {result.points} points to {result.points_path}"
        print(line, file=sys.stdout)
    return 0

"""`armlock assign`: arms for a file of ids, streamed; or the Spark SQL that computes them natively."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from armlock.assign import InputError, buckets_and_arms
from armlock.assign.sql import DIALECTS, spark_arm_expr, spark_bucket_expr

from .common import SPEC_HELP, open_spec, progress
from .io_ids import ArmWriter, read_ids


def assign_cmd(
    source: str = typer.Argument(None, metavar="[FILE|-]", help="Ids, one per line, or a CSV/Parquet file with --column; '-' or nothing reads stdin."),
    spec_path: Path = typer.Option(..., "--spec", "-s", help=SPEC_HELP),
    column: str = typer.Option(None, "--column", "-c", help="The id column of a CSV (with header) or Parquet file."),
    out: str = typer.Option(None, "--out", "-o", help="Output file: CSV, or Parquet when it ends in .parquet (default: CSV on stdout)."),
    sql: str = typer.Option(None, "--sql", help=f"Print the SQL expression for the arm instead ({', '.join(DIALECTS)})."),
    id_column: str = typer.Option(None, "--id-column", help="With --sql: the column holding the unit id."),
    bucket_only: bool = typer.Option(False, "--bucket", help="With --sql: print the bucket expression, not the arm."),
) -> None:
    """Assign ids to arms: writes unit_id,bucket,arm rows, streaming in chunks.

    Empty ids get no arm (empty bucket and arm). CSV output quotes ids with commas, quotes or
    newlines so they round-trip.

    Examples:
      armlock assign --spec test.toml ids.txt
      armlock assign --spec test.toml visits.parquet --column visitor_id --out arms.parquet
      armlock assign --spec test.toml --sql spark --id-column visitor_id
    """
    spec = open_spec(spec_path)
    if sql is not None:
        if sql not in DIALECTS:
            raise typer.BadParameter(f"unknown dialect {sql!r}; choose one of: {', '.join(DIALECTS)}", param_hint="--sql")
        if not id_column:
            raise typer.BadParameter("--sql needs --id-column NAME (the column holding the unit id)", param_hint="--id-column")
        if source is not None:
            raise typer.BadParameter("--sql prints an expression; it takes no input file", param_hint="--sql")
        typer.echo((spark_bucket_expr if bucket_only else spark_arm_expr)(spec, id_column))
        return
    if id_column or bucket_only:
        raise typer.BadParameter("--id-column and --bucket only go with --sql; use --column for the id column of a file")
    src = source or "-"
    if src == "-" and sys.stdin.isatty():
        raise InputError("no ids: give a FILE, or pipe ids on stdin (one per line)")
    size = None if src == "-" else (Path(src).stat().st_size if Path(src).is_file() else None)
    writer = ArmWriter(out)
    rows = missing = 0
    try:
        with progress(size, "assigning") as advance:
            for chunk in read_ids(src, column, advance):
                buckets, arms = buckets_and_arms(spec, chunk)
                writer.write(chunk, buckets, arms)
                rows += len(chunk)
                missing += arms.count(None)
    finally:
        writer.close()
    if out:
        typer.echo(f"Wrote {rows:,} rows to {out}" + (f" ({missing:,} empty ids got no arm)" if missing else ""), err=True)
    elif missing:
        typer.echo(f"{missing:,} of {rows:,} ids were empty and got no arm", err=True)


def register(app: typer.Typer) -> None:
    app.command("assign")(assign_cmd)

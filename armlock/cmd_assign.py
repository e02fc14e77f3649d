"""`armlock assign`: arms for a file of ids, streamed; or the Spark SQL that computes them natively."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from armlock.assign import InputError, buckets_and_arms
from armlock.assign.sql import DIALECTS, spark_arm_expr, spark_bucket_expr

from armlock.assign.batch import arms_to_keep

from .common import err, open_spec, progress
from .options import ACCEPT_CHANGED_SPLIT, SPEC
from armlock.shared.ids import ArmWriter, read_ids


def assign_cmd(
    source: str = typer.Argument(None, metavar="[FILE|-]", help="Ids, one per line, or a CSV/Parquet file with --column; '-' or nothing reads stdin."),
    spec_path: Path = SPEC,
    column: str = typer.Option(None, "--column", "-c", help="The id column of a CSV (with header) or Parquet file."),
    out: str = typer.Option(None, "--out", "-o", help="Output file: CSV, or Parquet when it ends in .parquet (default: CSV on stdout)."),
    sql: str = typer.Option(None, "--sql", help=f"Print the SQL expression for the arm instead ({', '.join(DIALECTS)})."),
    id_column: str = typer.Option(None, "--id-column", help="With --sql: the column holding the unit id."),
    bucket_only: bool = typer.Option(False, "--bucket", help="With --sql: print the bucket expression, not the arm."),
    only: list[str] = typer.Option(None, "--only", metavar="ARM|ROLE", help="Keep only the ids of this arm, or of every arm with this role (holdout or exposed); repeat to keep several. E.g. --only holdout for the vendor's exclusion list."),
    ids_only: bool = typer.Option(False, "--ids-only", help="Write only the ids, one per line, no header (the form an exclusion-list upload takes); empty ids are left out."),
    accept: bool = ACCEPT_CHANGED_SPLIT,
) -> None:
    """Assign ids to arms: writes unit_id,bucket,arm rows, streaming in chunks.

    Input: one id per line (stdin or a text file), a CSV file (.csv, .csv.gz, with a header; say
    --column when it has several columns) or Parquet. Empty ids get no arm (empty bucket and arm).
    CSV output keeps ids byte-exact and quotes ids with commas, quotes or newlines so they
    round-trip. The output file appears only when every id was read.

    Examples:
      armlock assign --spec test.toml ids.txt
      armlock assign --spec test.toml visits.parquet --column visitor_id --out arms.parquet
      armlock assign --spec test.toml visits.csv --column visitor_id --only holdout --ids-only --out holdout.txt
      armlock assign --spec test.toml --sql spark --id-column visitor_id
    """
    spec = open_spec(spec_path, accept_changed_split=accept)
    if sql is not None:
        if sql not in DIALECTS:
            raise typer.BadParameter(f"unknown dialect {sql!r}; choose one of: {', '.join(DIALECTS)}", param_hint="--sql")
        if not id_column:
            raise typer.BadParameter("--sql needs --id-column NAME (the column holding the unit id)", param_hint="--id-column")
        if source is not None:
            raise typer.BadParameter("--sql prints an expression; it takes no input file", param_hint="--sql")
        if only or ids_only:
            raise typer.BadParameter("--only and --ids-only filter a file of ids; with --sql, filter on the arm "
                                     "expression in a WHERE clause instead", param_hint="--sql")
        typer.echo((spark_bucket_expr if bucket_only else spark_arm_expr)(spec, id_column))
        return
    if id_column or bucket_only:
        raise typer.BadParameter("--id-column and --bucket only go with --sql; use --column for the id column of a file")
    try:
        keep = arms_to_keep(spec, only or [])
    except ValueError as exc:
        raise typer.BadParameter(str(exc), param_hint="--only") from None
    src = source or "-"
    if src == "-" and sys.stdin.isatty():
        raise InputError("no ids: give a FILE, or pipe ids on stdin (one per line)")
    size = None if src == "-" else (Path(src).stat().st_size if Path(src).is_file() else None)
    writer = ArmWriter(out, ids_only=ids_only)
    rows = missing = kept = 0
    ok = False
    try:
        with progress(size, "assigning") as advance:
            for chunk in read_ids(src, column, advance, note=err):
                buckets, arms = buckets_and_arms(spec, chunk)
                rows += len(chunk)
                missing += arms.count(None)
                if keep is not None:
                    pick = [i for i, a in enumerate(arms) if a in keep]
                    chunk, buckets, arms = [chunk[i] for i in pick], [buckets[i] for i in pick], [arms[i] for i in pick]
                kept += len(chunk)
                writer.write(chunk, buckets, arms)
        ok = True
    finally:
        writer.close(ok)
    empty = f"{missing:,} of {rows:,} ids were empty and got no arm"
    if keep is not None:
        err(f"Kept {kept:,} of {rows:,} ids (arms {', '.join(sorted(keep, key=spec.arm_names.index))})"
            + (f" in {out}" if out else "") + (f"; {empty}" if missing else ""))
    elif out:
        err(f"Wrote {rows:,} rows to {out}" + (f"; {empty}" if missing else ""))
    elif missing:
        err(empty)
    if writer.unwritable:
        err(f"{writer.unwritable:,} id(s) contain a line break, which a one-per-line list cannot hold; they were "
            "left out (write the full CSV without --ids-only to keep them)")


def register(app: typer.Typer) -> None:
    app.command("assign")(assign_cmd)

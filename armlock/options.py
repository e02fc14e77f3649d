"""The options the commands share (spec, logs, dates, engine, formats) and the choice types of --format, --engine, --form.

Each option is defined once here, with its help text, and every command that takes it uses this
definition: the same flag means the same thing, and reads the same in every `--help`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date
from typing import Any

import typer

from armlock.shared.engine import ENGINES, Engine


class OneOf:
    """A choice among fixed names (a --format, --engine or --form): the value, or a usage error (exit 2)
    in armlock's words, e.g. "Invalid value for --format: unknown format 'pdf'; choose one of: text, json"."""

    def __init__(self, choices: Sequence[str], what: str, flag: str, *, listing: str | None = None) -> None:
        self.choices = tuple(choices)
        self.what, self.flag = what, flag
        self.listing = listing or "one of: " + ", ".join(self.choices)
        self.__name__ = what  # click names a parser's type after the function's name

    def __call__(self, value: Any) -> str:
        if value in self.choices:
            return str(value)
        raise typer.BadParameter(f"unknown {self.what} {value!r}; choose {self.listing}", param_hint=self.flag)

    def complete(self, incomplete: str) -> list[str]:
        """Shell completion: the names that start with what was typed."""
        return [c for c in self.choices if c.startswith(incomplete)]


def format_option(formats: Sequence[str], help: str, default: str = "text") -> Any:
    """`--format`/`-f` with its choices (usage error, exit 2, for any other)."""
    kind = OneOf(formats, "format", "--format")
    return typer.Option(default, "--format", "-f", metavar=f"<{'|'.join(formats)}>", help=help, parser=kind,
                        autocompletion=kind.complete)


def as_of_day(text: str | None) -> date | None:
    """--as-of as a date; anything but YYYY-MM-DD is a usage error (exit 2)."""
    if text is None:
        return None
    try:
        return date.fromisoformat(text)
    except ValueError:
        raise typer.BadParameter(f"{text!r} is not a date; write YYYY-MM-DD, e.g. 2026-12-07",
                                 param_hint="--as-of") from None


SPEC_HELP = "The experiment spec file (TOML), as written by `armlock init`."
SPEC: Any = typer.Option(..., "--spec", "-s", help=SPEC_HELP)
# Every command that reads a spec takes this option and passes it to `open_spec`.
ACCEPT_CHANGED_SPLIT: Any = typer.Option(
    False, "--accept-changed-split",
    help="Confirm that the spec's salt or weights were changed on purpose: record the new split in the "
         "lock file and go on (without it, a changed split stops with exit code 6; once the test has "
         "started, its audits then fail naming the change).")


# Where the rows are counted: every command that reads the logs (audit, readout) takes these five.
ENGINE_CHOICE = OneOf(ENGINES, "engine", "--engine", listing="duckdb, pandas or spark")
ENGINE: Any = typer.Option(
    "duckdb", "--engine", parser=ENGINE_CHOICE, autocompletion=ENGINE_CHOICE.complete,
    help="Where the rows are counted: duckdb (this machine, default: memory grows with units, not rows; "
         "spills to disk), pandas (this machine, every exposure row in memory) or spark (needs pip install "
         "'armlock[spark]' and Java 17; uses the active SparkSession, else starts one).")
SPARK_MASTER: Any = typer.Option(
    None, "--spark-master",
    help="With --engine spark and no active session: the master to start one on (default local[*]; "
         "e.g. yarn, spark://host:7077).")
SPARK_CONF: Any = typer.Option(
    None, "--spark-conf", metavar="KEY=VALUE",
    help="With --engine spark: a Spark setting for the session it starts (repeatable), e.g. "
         "spark.executor.memory=8g. spark-defaults.conf (SPARK_CONF_DIR), PYSPARK_SUBMIT_ARGS and "
         "spark-submit --conf also apply.")
MEMORY_LIMIT: Any = typer.Option(
    None, "--memory-limit", metavar="SIZE",
    help="With --engine duckdb: the most memory DuckDB may take, e.g. 4GB (default: 80% of this "
         "machine's memory); beyond it, it spills to --temp-dir.")
TEMP_DIR: Any = typer.Option(
    None, "--temp-dir", metavar="DIR",
    help="With --engine duckdb: the folder DuckDB spills to (default: a new folder in the system's "
         "temporary directory, removed afterwards).")


@dataclass(frozen=True)
class EngineChoice:
    """The engine options of a command, checked together (`engine_settings`); `select()` makes the engine."""

    name: str
    spark_master: str | None
    spark_conf: dict[str, str]
    memory_limit: str | None
    temp_dir: str | None

    def select(self) -> Engine:
        """The engine itself (Spark loads only here, and only when asked for)."""
        from armlock.shared.engine import select_engine

        return select_engine(self.name, spark_master=self.spark_master, spark_conf=self.spark_conf,
                             memory_limit=self.memory_limit, temp_directory=self.temp_dir)


def engine_settings(engine: str, spark_master: str | None, spark_conf: list[str] | None,
                    memory_limit: str | None = None, temp_dir: str | None = None) -> EngineChoice:
    """Check --engine with the Spark and DuckDB settings together (usage errors, exit 2)."""
    conf = {}
    for item in spark_conf or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise typer.BadParameter(f"{item!r} is not KEY=VALUE, e.g. spark.executor.memory=8g",
                                     param_hint="--spark-conf")
        conf[key.strip()] = value
    if engine != "spark" and (spark_master or conf):
        raise typer.BadParameter("--spark-master and --spark-conf need --engine spark", param_hint="--engine")
    if engine != "duckdb" and (memory_limit or temp_dir):
        raise typer.BadParameter("--memory-limit and --temp-dir need --engine duckdb", param_hint="--engine")
    return EngineChoice(engine, spark_master, conf, memory_limit, temp_dir)


# The logs every data command reads (audit, readout)
VISITS: Any = typer.Option(..., "--visits", help="Visits / first-seen log: one row per unit (CSV, CSV.gz or Parquet; with --engine spark also a Parquet or Delta directory, a cluster path, or table:db.name).")
REPORT_OUT: Any = typer.Option(None, "--out", "-o", help="Write the report to this file instead of stdout.")

"""SQL expressions that compute the arm natively in a warehouse, straight from the contract."""

from __future__ import annotations

from .contract import BUCKETS, SEPARATOR
from .spec import Spec

DIALECTS = ("spark",)


def spark_string_literal(text: str) -> str:
    """A Spark SQL string literal (default parser: backslash escapes are processed)."""
    return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"


def spark_identifier(name: str) -> str:
    """A backquoted Spark identifier; dots are kept as path separators (`t.col`)."""
    return ".".join("`" + part.replace("`", "``") + "`" for part in name.split("."))


def spark_bucket_expr(spec: Spec, id_column: str) -> str:
    """Spark SQL for the bucket in [0, 10000); NULL for a NULL or empty id."""
    col = f"CAST({spark_identifier(id_column)} AS STRING)"
    key = f"concat({spark_string_literal(spec.salt + SEPARATOR)}, {col})"
    return (
        f"CASE WHEN {col} IS NULL OR {col} = '' THEN NULL "
        f"ELSE shiftright(shiftrightunsigned(xxhash64({key}), 32) * {BUCKETS}, 32) END"
    )


def spark_arm_expr(spec: Spec, id_column: str) -> str:
    """Spark SQL for the arm name (NULL for a NULL or empty id), with no user-defined function.

    The bucket is bound once to `b` with a one-element `transform`, so the hash runs once per
    row however many arms there are.
    """
    whens = " ".join(
        f"WHEN b < {cum} THEN {spark_string_literal(arm)}"
        for arm, cum in zip(spec.arm_names[:-1], spec.cumulative[:-1])
    )
    last = spark_string_literal(spec.arm_names[-1])
    return (
        f"element_at(transform(array({spark_bucket_expr(spec, id_column)}), "
        f"b -> CASE WHEN b IS NULL THEN NULL {whens} ELSE {last} END), 1)"
    )

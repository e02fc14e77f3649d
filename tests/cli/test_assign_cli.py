"""CLI tests for `init`, `check` and `assign`: run as a user would, exit codes and exact messages."""

from __future__ import annotations

import csv
import io
import subprocess
from pathlib import Path

import pytest

from tests.cli.cli_run import run_cli

from armlock.assign import arm_for, bucket, load_spec


def run(cwd: Path, *args: str, stdin: str | None = None, process: bool = False) -> subprocess.CompletedProcess[bytes]:
    return run_cli(cwd, *args, stdin=stdin, text=False, process=process)


@pytest.fixture
def spec(tmp_path: Path) -> Path:
    r = run(tmp_path, "init", "spring-test", "--holdout-share", "0.2")
    assert r.returncode == 0, r.stderr
    return tmp_path / "spring-test.toml"


def test_version_and_help(tmp_path: Path) -> None:
    r = run(tmp_path, "--version", process=True)  # the installed entry point, in a real process
    assert r.returncode == 0 and r.stdout.decode().startswith("armlock 0.")
    for cmd in ("init", "check", "assign"):
        h = run(tmp_path, cmd, "--help")
        assert h.returncode == 0 and b"Example" in h.stdout, cmd


def test_init_writes_valid_commented_spec(spec: Path, tmp_path: Path) -> None:
    s = load_spec(spec)
    assert s.weights == (2000, 8000) and s.holdout_arms == ("holdout",)
    again = run(tmp_path, "init", "spring-test")
    assert again.returncode == 4
    assert again.stderr.decode() == "Error: spring-test.toml: already exists; choose another --out or pass --force\n"


def test_init_arms_option_and_bad_shares(tmp_path: Path) -> None:
    r = run(tmp_path, "init", "three", "--arms", "holdout=0.2,exposed_a=0.4,exposed_b=40%")
    assert r.returncode == 0 and load_spec(tmp_path / "three.toml").weights == (2000, 4000, 4000)
    bad = run(tmp_path, "init", "odd", "--holdout-share", "0.12345")
    assert bad.returncode == 4
    assert bad.stderr.decode() == ("Error: share 0.12345 is not a whole number of basis points (0.0001); "
                                   "use e.g. 0.1234\n")
    bad = run(tmp_path, "init", "sum", "--arms", "holdout=0.2,exposed=0.7")
    assert bad.returncode == 4 and "arm weights must sum to 10000 basis points (100%); got 2000 + 7000 = 9000" in bad.stderr.decode()


def test_check_reports_fingerprint(spec: Path, tmp_path: Path) -> None:
    r = run(tmp_path, "check", "--spec", spec.name)
    assert r.returncode == 0
    assert f"fingerprint {load_spec(spec).fingerprint}" in r.stdout.decode()


def test_bad_spec_exit_code_and_message(tmp_path: Path) -> None:
    (tmp_path / "bad.toml").write_text('name = "x"\n', encoding="utf-8")
    r = run(tmp_path, "assign", "--spec", "bad.toml", stdin="a\n")
    assert r.returncode == 4
    assert r.stderr.decode().splitlines() == [
        "Error: invalid experiment spec",
        "  bad.toml: salt: required key is missing",
        "  bad.toml: start: required key is missing",
        "  bad.toml: arms: required key is missing",
    ]


def test_assign_lines_from_stdin(spec: Path, tmp_path: Path) -> None:
    # a real process: ids stream through the operating system's stdin and stdout
    r = run(tmp_path, "assign", "--spec", spec.name, stdin="alpha\r\nbeta\n\ngamma", process=True)
    assert r.returncode == 0, r.stderr
    rows = list(csv.reader(io.StringIO(r.stdout.decode())))
    s = load_spec(spec)
    assert rows[0] == ["unit_id", "bucket", "arm"]
    assert rows[1:] == [[u, str(bucket(s.salt, u)), arm_for(s, u)] if u else ["", "", ""]
                        for u in ["alpha", "beta", "", "gamma"]]
    assert r.stderr.decode() == "1 of 4 ids were empty and got no arm\n"


def test_assign_csv_round_trips_hostile_ids(spec: Path, tmp_path: Path) -> None:
    # ids a spreadsheet would read as formulas stay byte-exact: armlock never rewrites an id
    ids = ['a,b', 'say "hi"', "two\nlines", "crlf\r\ninside", " padded ", "é😀", "NA", "", "=1+1", "+41",
           "-cmd", "@SUM(A1)", "\t=x"]
    with open(tmp_path / "in.csv", "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["visitor_id", "other"])
        w.writerows([[i, "x"] for i in ids])
    r = run(tmp_path, "assign", "--spec", spec.name, "in.csv", "--column", "visitor_id", "--out", "out.csv")
    assert r.returncode == 0, r.stderr
    with open(tmp_path / "out.csv", encoding="utf-8", newline="") as fh:
        rows = list(csv.reader(fh))[1:]
    s = load_spec(spec)
    assert [row[0] for row in rows] == ids
    assert [row[2] for row in rows] == [arm_for(s, i) or "" for i in ids]


def test_assign_parquet_in_and_out(spec: Path, tmp_path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    ids = [f"v{i}" for i in range(1000)] + ["", None]
    pq.write_table(pa.table({"uid": ids, "n": list(range(len(ids)))}), tmp_path / "ids.parquet")
    r = run(tmp_path, "assign", "--spec", spec.name, "ids.parquet", "--column", "uid", "--out", "arms.parquet")
    assert r.returncode == 0, r.stderr
    out = pq.read_table(tmp_path / "arms.parquet").to_pydict()
    s = load_spec(spec)
    assert out["unit_id"] == ids
    assert out["arm"] == [arm_for(s, i) if i else None for i in ids]
    assert r.stderr.decode() == "Wrote 1,002 rows to arms.parquet; 2 of 1,002 ids were empty and got no arm\n"
    assert pq.read_schema(tmp_path / "arms.parquet").field("bucket").type == pa.int16()  # nullable integer, not float


def test_assign_bad_files(spec: Path, tmp_path: Path) -> None:
    r = run(tmp_path, "assign", "--spec", spec.name, "missing.txt")
    assert (r.returncode, r.stderr.decode()) == (4, "Error: missing.txt: file not found\n")
    (tmp_path / "v.csv").write_text("id,browser\n1,x\n", encoding="utf-8")
    r = run(tmp_path, "assign", "--spec", spec.name, "v.csv", "--column", "visitor")
    assert (r.returncode, r.stderr.decode()) == (4, "Error: v.csv: no column 'visitor'; the columns are: 'id', 'browser'\n")
    (tmp_path / "latin.txt").write_bytes(b"caf\xe9\n")
    r = run(tmp_path, "assign", "--spec", spec.name, "latin.txt")
    assert (r.returncode, r.stderr.decode()) == (4, "Error: latin.txt: not UTF-8 text (bad byte 0xe9); re-export the ids as UTF-8\n")
    (tmp_path / "short.csv").write_text("a,id\n1,x\n2\n", encoding="utf-8")
    r = run(tmp_path, "assign", "--spec", spec.name, "short.csv", "--column", "id")
    assert (r.returncode, r.stderr.decode()) == (4, "Error: short.csv: row 2 (line 3) has 1 fields, no value for column 'id'\n")
    r = run(tmp_path, "assign", "--spec", spec.name, "v.csv", "--column", "id", "--out", "nowhere/arms.parquet")
    assert (r.returncode, r.stderr.decode()) == (4, "Error: nowhere/arms.parquet: cannot write: folder nowhere does not exist\n")
    (tmp_path / "bad.parquet").write_bytes(b"not parquet")
    r = run(tmp_path, "assign", "--spec", spec.name, "bad.parquet", "--column", "id")
    assert r.returncode == 4 and r.stderr.decode().startswith("Error: bad.parquet: not a readable Parquet file")


def test_assign_sql_spark(spec: Path, tmp_path: Path) -> None:
    r = run(tmp_path, "assign", "--spec", spec.name, "--sql", "spark", "--id-column", "visitor_id")
    assert r.returncode == 0
    sql = r.stdout.decode()
    assert "xxhash64(concat('" in sql and "`visitor_id`" in sql and "WHEN b < 2000 THEN 'holdout'" in sql
    r = run(tmp_path, "assign", "--spec", spec.name, "--sql", "spark")
    assert r.returncode == 2 and b"--sql needs --id-column NAME" in r.stderr
    r = run(tmp_path, "assign", "--spec", spec.name, "--sql", "oracle", "--id-column", "x")
    assert r.returncode == 2 and b"unknown dialect 'oracle'; choose one of: spark" in r.stderr


def test_changed_split_stops_every_command_until_confirmed(spec: Path, tmp_path: Path) -> None:
    # The user's mistake: editing the weights of a running test; a scheduler must see it (exit 6).
    assert run(tmp_path, "assign", "--spec", spec.name, stdin="a\n").returncode == 0  # records lock
    text = spec.read_text(encoding="utf-8").replace("weight = 2000", "weight = 3000").replace("weight = 8000", "weight = 7000")
    spec.write_text(text, encoding="utf-8")
    for cmd in (["assign"], ["snippet"], ["check"], ["history"]):
        r = run(tmp_path, *cmd, "--spec", spec.name, stdin="a\n")
        err = r.stderr.decode()
        assert r.returncode == 6, (cmd, err)
        assert "THE SPLIT HAS CHANGED. the arms changed from [holdout 2000, exposed 8000] to [holdout 3000, exposed 7000]" in err
        assert "rerun with --accept-changed-split to record the new split" in err
        assert r.stdout == b"" or cmd == ["check"]  # check still shows the lock status
    r = run(tmp_path, "assign", "--spec", spec.name, "--accept-changed-split", stdin="a\n")
    assert r.returncode == 0 and b"Recorded the new split" in r.stderr
    assert run(tmp_path, "snippet", "--spec", spec.name).returncode == 0  # confirmed once, for every command

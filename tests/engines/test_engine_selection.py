"""Engine selection: pandas never loads PySpark; asking for Spark without it names the extra to install."""

from __future__ import annotations

import subprocess
import sys

_CHILD = r"""
import sys, json
sys.modules["pyspark"] = None  # as if PySpark were not installed: any import of it raises ImportError
from armlock.cli import main
sys.argv = ["armlock"] + json.loads(sys.argv[1])
try:
    main()
except SystemExit as exc:
    code = exc.code
print("PYSPARK_LOADED" if any(m.startswith("pyspark.") for m in sys.modules) else "PYSPARK_NOT_LOADED")
sys.exit(code)
"""


def _run(args: list[str]) -> subprocess.CompletedProcess[str]:
    import json

    return subprocess.run([sys.executable, "-c", _CHILD, json.dumps(args)], capture_output=True, text=True,
                          timeout=120, check=False)


def test_spark_engine_without_pyspark_says_how_to_install(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = tmp_path / "t.toml"
    r0 = _run(["init", "t", "--out", str(spec)])
    assert r0.returncode == 0, r0.stderr
    (tmp_path / "v.csv").write_text("unit_id,first_seen,arm\n", encoding="utf-8")
    r = _run(["audit", "--spec", str(spec), "--visits", str(tmp_path / "v.csv"), "--engine", "spark"])
    assert r.returncode == 4, r.stderr
    assert "Error: --engine spark needs PySpark, which is not installed; install the extra: " \
           "pip install 'armlock[spark]' (and Java 17)" in r.stderr
    assert "Traceback" not in r.stderr


def test_readout_spark_engine_without_pyspark_says_how_to_install(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = tmp_path / "t.toml"
    assert _run(["init", "t", "--out", str(spec)]).returncode == 0
    r = _run(["readout", "--spec", str(spec), "--visits", "v.csv", "--orders", "o.csv", "--engine", "spark"])
    assert r.returncode == 4, r.stderr
    assert "Error: --engine spark needs PySpark, which is not installed; install the extra: " \
           "pip install 'armlock[spark]' (and Java 17)" in r.stderr
    assert "Traceback" not in r.stderr
    r = _run(["readout", "--spec", str(spec), "--visits", "v.csv", "--orders", "o.csv", "--spark-master", "local"])
    assert r.returncode == 2 and "--spark-master and --spark-conf need --engine spark" in r.stderr


def test_pandas_engine_never_imports_pyspark(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = tmp_path / "t.toml"
    assert _run(["init", "t", "--out", str(spec)]).returncode == 0
    r = _run(["audit", "--spec", str(spec), "--visits", str(tmp_path / "none.csv")])
    assert r.returncode == 4 and "PYSPARK_NOT_LOADED" in r.stdout


def test_spark_options_need_the_spark_engine(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = tmp_path / "t.toml"
    assert _run(["init", "t", "--out", str(spec)]).returncode == 0
    r = _run(["audit", "--spec", str(spec), "--visits", "v.csv", "--spark-master", "local[2]"])
    assert r.returncode == 2 and "--spark-master and --spark-conf need --engine spark" in r.stderr
    r = _run(["audit", "--spec", str(spec), "--visits", "v.csv", "--engine", "spark", "--spark-conf", "nokey"])
    assert r.returncode == 2 and "is not KEY=VALUE" in r.stderr

"""Small invented logs and a spec for the bad-input tests: written once per module, then mangled."""

from __future__ import annotations

import subprocess
from pathlib import Path

from tests.cli.cli_run import run_cli

from armlock.assign import Spec, load_spec
from armlock.audit.synth import generate, write_logs

SPEC_TOML = '''format = 1
name = "mistakes"
salt = "mistakes-salt"
start = 2026-01-05T00:00:00Z

[[arms]]
name = "holdout"
weight = 2000
role = "holdout"

[[arms]]
name = "exposed"
weight = 8000
role = "exposed"

[audit]
segments = ["device"]
covariates = ["pre_orders"]
categorical_covariates = []
'''


def write_spec(folder: Path, extra: str = "") -> Path:
    """The test's spec (start in the past), with `extra` TOML appended."""
    p = folder / "mistakes.toml"
    p.write_text(SPEC_TOML + extra, encoding="utf-8")
    return p


def write_demo_logs(folder: Path, spec: Spec | None = None, fmt: str = "csv", units: int = 3000,
                    faults: tuple[str, ...] = ()) -> dict[str, Path]:
    """Invented visits, exposures and identity links (audit.synth) for four weeks."""
    folder.mkdir(parents=True, exist_ok=True)
    spec = spec or load_spec(write_spec(folder))
    logs = generate(spec, units=units, days=28, seed=7, faults=faults)
    return write_logs(logs, folder / "logs", fmt)


def cli(cwd: Path, *args: str, stdin: str | bytes | None = None) -> subprocess.CompletedProcess[bytes]:
    """armlock as a user runs it (bytes in and out)."""
    return run_cli(cwd, *args, stdin=stdin, text=False)

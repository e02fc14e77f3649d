"""Shared helpers of the snippet tests: specs, the Node harness, acorn, random ids, a local server."""

from __future__ import annotations

import functools
import http.server
import json
import os
import random
import shutil
import subprocess
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest

from armlock.assign.spec import Spec, spec_from_dict

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
HARNESS = HERE / "node_harness.js"
VECTORS = REPO / "shared" / "vectors" / "assignment_vectors.json"
ACORN = REPO / "node_modules" / "acorn"


def make_spec(salt: str = "c0ffee1234abcd5678ef9012",
              arms: list[tuple[str, int, str]] | None = None, **snippet: Any) -> Spec:
    """An invented test spec (10% holdout unless `arms` is given) with these [snippet] settings."""
    arms = arms or [("holdout", 1000, "holdout"), ("exposed", 9000, "exposed")]
    return spec_from_dict({
        "name": "invented-retargeting-test",
        "salt": salt,
        "start": datetime(2026, 12, 1, tzinfo=UTC),
        "arms": [{"name": n, "weight": w, "role": r} for n, w, r in arms],
        "snippet": snippet,
    })


def need(tool: str) -> str:
    """Path of a command-line tool; skip without it, except under CI=true where it must exist."""
    path = shutil.which(tool)
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail(f"{tool} is not installed but CI=true: .ci/run must install it")
        pytest.skip(f"{tool} is not installed")
    return path


def run_node(request: dict[str, Any]) -> dict[str, Any]:
    """Run the Node harness on one request (see node_harness.js) and return its answer."""
    node = need("node")
    proc = subprocess.run([node, str(HARNESS)], input=json.dumps(request, ensure_ascii=True),
                          capture_output=True, text=True, timeout=300, check=False)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def acorn_parse(source: str) -> str:
    """Parse with acorn at ecmaVersion 5; returns '' when it parses, else acorn's message."""
    node = need("node")
    if not ACORN.exists():
        if os.environ.get("CI") == "true":
            pytest.fail("node_modules/acorn is missing under CI=true: .ci/run runs `npm ci`")
        pytest.skip("acorn is not installed (run `npm ci` at the repo root)")
    script = (
        "const acorn = require(process.argv[1]); let src = '';"
        "process.stdin.on('data', c => src += c);"
        "process.stdin.on('end', () => { try { acorn.parse(src, {ecmaVersion: 5}); }"
        " catch (e) { process.stdout.write(String(e.message)); } });"
    )
    proc = subprocess.run([node, "-e", script, str(ACORN)], input=source, capture_output=True,
                          text=True, timeout=60, check=False)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout


def script_body(html: str) -> str:
    """The JavaScript of the html form: between `<script>` + newline and the one `</script>`."""
    assert html.count("<script>") == 1 and html.lower().count("</script") == 1, html[:200]
    return html.split("<script>\n", 1)[1].split("</script>", 1)[0]


def random_ids(n: int, seed: int) -> list[str]:
    """Random ids of length 0..200 code units over every UTF-8 length class, astral characters
    and lone surrogates; about a third are 32+ bytes long (the 4-lane stripe path of XXH64)."""
    rng = random.Random(seed)
    pools = [
        (0x20, 0x7E),        # 1-byte UTF-8
        (0x80, 0x7FF),       # 2-byte
        (0x800, 0xD7FF),     # 3-byte below the surrogates
        (0xE000, 0xFFFF),    # 3-byte above them
        (0x10000, 0x10FFFF),  # 4-byte (a surrogate pair in JS)
        (0xD800, 0xDFFF),    # a lone surrogate: U+FFFD in UTF-8
        (0x00, 0x1F),        # control characters
    ]
    out = []
    for _ in range(n):
        length = rng.choice([rng.randint(0, 12), rng.randint(13, 40), rng.randint(0, 200)])
        classes = rng.sample(range(len(pools)), rng.randint(1, len(pools)))
        chars = []
        while len("".join(chars).encode("utf-16-le", "surrogatepass")) // 2 < length:
            lo, hi = pools[rng.choice(classes)]
            chars.append(chr(rng.randint(lo, hi)))
        out.append("".join(chars))
    return out


@contextmanager
def serve(directory: Path) -> Iterator[str]:
    """Serve `directory` over http on 127.0.0.1 at a free port; yields the base URL."""

    class Quiet(http.server.SimpleHTTPRequestHandler):
        def log_message(self, *args: Any) -> None:
            pass

    handler = functools.partial(Quiet, directory=str(directory))
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}"
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)

"""Shared helpers of the snippet tests: specs, the Node harness, acorn, random ids, a local server."""

from __future__ import annotations

import functools
import http.server
import json
import os
import random
import shutil
import ssl
import subprocess
import tempfile
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


def need_acorn() -> Path:
    """The acorn package; skip without it, except under CI=true where it must exist."""
    if not ACORN.exists():
        if os.environ.get("CI") == "true":
            pytest.fail("node_modules/acorn is missing under CI=true: .ci/run runs `npm ci`")
        pytest.skip("acorn is not installed (run `npm ci` at the repo root)")
    return ACORN


def acorn_parse(source: str) -> str:
    """Parse with acorn at ecmaVersion 5; returns '' when it parses, else acorn's message."""
    node = need("node")
    need_acorn()
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


def self_signed_certificate(directory: Path) -> tuple[Path, Path]:
    """A throw-away self-signed certificate for 127.0.0.1, valid one day: (cert.pem, key.pem).

    Made with the `openssl` command when present, else with the `cryptography` package; without
    either the test skips, except under CI=true where it fails.
    """
    cert, key = directory / "cert.pem", directory / "key.pem"
    openssl = shutil.which("openssl")
    if openssl is not None:
        subprocess.run([openssl, "req", "-x509", "-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:prime256v1",
                        "-nodes", "-keyout", str(key), "-out", str(cert), "-days", "1",
                        "-subj", "/CN=127.0.0.1", "-addext", "subjectAltName=IP:127.0.0.1"],
                       check=True, capture_output=True, timeout=60)
        return cert, key
    try:
        return _certificate_with_cryptography(cert, key)
    except ImportError:
        if os.environ.get("CI") == "true":
            pytest.fail("neither openssl nor the cryptography package is installed but CI=true")
        pytest.skip("neither openssl nor the cryptography package is installed")


def _certificate_with_cryptography(cert: Path, key: Path) -> tuple[Path, Path]:
    import ipaddress
    from datetime import timedelta

    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import NameOID

    private = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "127.0.0.1")])
    now = datetime.now(UTC)
    certificate = (
        x509.CertificateBuilder().subject_name(name).issuer_name(name).public_key(private.public_key())
        .serial_number(x509.random_serial_number()).not_valid_before(now - timedelta(minutes=5))
        .not_valid_after(now + timedelta(days=1))
        .add_extension(x509.SubjectAlternativeName([x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]),
                       critical=False)
        .sign(private, hashes.SHA256())
    )
    key.write_bytes(private.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                          serialization.NoEncryption()))
    cert.write_bytes(certificate.public_bytes(serialization.Encoding.PEM))
    return cert, key


@contextmanager
def serve(directory: Path, tls: bool = False) -> Iterator[str]:
    """Serve `directory` on 127.0.0.1 at a free port, over https with a throw-away self-signed
    certificate when `tls`; yields the base URL."""

    class Quiet(http.server.SimpleHTTPRequestHandler):
        def log_message(self, *args: Any) -> None:
            pass

    class Server(http.server.ThreadingHTTPServer):
        def handle_error(self, request: Any, client_address: Any) -> None:
            pass  # a browser that drops a connection (or a TLS handshake) is not a test failure

    handler = functools.partial(Quiet, directory=str(directory))
    server = Server(("127.0.0.1", 0), handler)
    with tempfile.TemporaryDirectory() as keys:
        if tls:
            context = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
            context.load_cert_chain(*self_signed_certificate(Path(keys)))
            # the handshake happens in each request's own thread, on its first read
            server.socket = context.wrap_socket(server.socket, server_side=True, do_handshake_on_connect=False)
        thread = threading.Thread(target=server.serve_forever, daemon=True)
        thread.start()
        try:
            yield f"{'https' if tls else 'http'}://127.0.0.1:{server.server_address[1]}"
        finally:
            server.shutdown()
            server.server_close()
            thread.join(timeout=5)

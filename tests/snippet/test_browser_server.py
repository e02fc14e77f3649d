"""Issue 23 for real: the id middleware under the standard library's WSGI server and uvicorn (ASGI),
visited by headless Chromium with the snippet in `id_from = "server"` mode."""

from __future__ import annotations

import os
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any
from wsgiref.simple_server import WSGIRequestHandler, make_server

import pytest

from armlock.assign.batch import arm_for
from armlock.assign.middleware import KEY, IdCookieASGI, IdCookieWSGI
from armlock.assign.snippet import render_snippet
from armlock.assign.spec import Spec

from .browser import VENDOR, Page
from .helpers import make_spec

pytestmark = pytest.mark.slow
DAY = 86_400
SPEC = make_spec(arms=[("holdout", 5000, "holdout"), ("exposed", 5000, "exposed")], id_from="server")


def page_for(spec: Spec, visitor: Any) -> bytes:
    """The shop's page: the server writes the arm it computed, then the snippet and the vendor tag."""
    arm = visitor.arm(spec.name) or ""
    return ("<!doctype html><html><head><meta charset='utf-8'><title>invented shop</title>"
            f"<meta name='server-arm' content='{arm}'>{render_snippet(spec, 'html')}{VENDOR}</head>"
            "<body>shop.example page (invented)</body></html>").encode("utf-8")


def consent(request: dict[str, Any]) -> bool:
    """The invented shop's consent rule: a page opened with ?noconsent has none."""
    query = request.get("QUERY_STRING")
    if query is None:
        query = (request.get("query_string") or b"").decode("latin-1")
    return "noconsent" not in query


def wsgi_app(environ: dict[str, Any], start_response: Callable[..., Any]) -> list[bytes]:
    if environ["PATH_INFO"] != "/":
        start_response("404 Not Found", [("Content-Type", "text/plain")])
        return [b"not here"]
    start_response("200 OK", [("Content-Type", "text/html; charset=utf-8")])
    return [page_for(SPEC, environ[KEY])]


async def asgi_app(scope: dict[str, Any], receive: Any, send: Any) -> None:
    found = scope["path"] == "/"
    await send({"type": "http.response.start", "status": 200 if found else 404,
                "headers": [(b"content-type", b"text/html; charset=utf-8" if found else b"text/plain")]})
    await send({"type": "http.response.body", "body": page_for(SPEC, scope[KEY]) if found else b"not here"})


class Quiet(WSGIRequestHandler):
    def log_message(self, *args: Any) -> None:
        pass


@contextmanager
def wsgiref_server() -> Iterator[str]:
    server = make_server("127.0.0.1", 0, IdCookieWSGI(wsgi_app, SPEC, consent=consent), handler_class=Quiet)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_port}"
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)


@contextmanager
def uvicorn_server() -> Iterator[str]:
    if os.environ.get("CI") == "true":
        import uvicorn  # in the test extra: under CI a missing uvicorn fails, never skips
    else:
        uvicorn = pytest.importorskip("uvicorn")
    config = uvicorn.Config(IdCookieASGI(asgi_app, SPEC, consent=consent), host="127.0.0.1", port=0,
                            log_level="error", lifespan="off", access_log=False)
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started:
        assert thread.is_alive() and time.monotonic() < deadline, "uvicorn did not start"
        time.sleep(0.02)
    port = server.servers[0].sockets[0].getsockname()[1]
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)


@pytest.mark.parametrize("serve", [wsgiref_server, uvicorn_server], ids=["wsgiref", "uvicorn"])
def test_server_sets_the_id_the_snippet_adopts_it_and_a_return_visit_keeps_it(browser: Any, serve: Any) -> None:
    with serve() as base:
        p = Page(browser, base)
        try:
            t0 = time.time()
            p.open("")
            c = p.cookie()
            assert c is not None
            uid = c["value"]
            assert uuid.UUID(uid).version == 4 and str(uuid.UUID(uid)) == uid
            # set by the server: 400 days (RFC 6265bis cap), Path=/, SameSite=Lax, readable by script
            assert 400 * DAY - 120 <= c["expires"] - t0 <= 400 * DAY + 120
            assert c["path"] == "/" and c["sameSite"] == "Lax" and c["httpOnly"] is False and c["secure"] is False
            arm = arm_for(SPEC, uid)
            assert p.js("document.querySelector('meta[name=server-arm]').content") == arm  # the server's arm
            assert p.js("armlock.arm") == arm and p.js("armlock.state") == "ready"  # the snippet's arm
            assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
            assert p.js("localStorage.length") == 0  # server mode keeps no mirror
            first_expiry = c["expires"]
            time.sleep(1.1)
            # a return visit: the same id, its lifetime refreshed from the server
            p.page.reload(wait_until="load")
            again = p.cookie()
            assert again["value"] == uid and again["expires"] > first_expiry
            assert p.js("armlock.arm") == arm and p.events("armlock_error") == []
            assert p.errors == []
        finally:
            p.ctx.close()


@pytest.mark.parametrize("serve", [wsgiref_server, uvicorn_server], ids=["wsgiref", "uvicorn"])
def test_without_consent_no_cookie_and_the_snippet_fails_closed(browser: Any, serve: Any) -> None:
    with serve() as base:
        p = Page(browser, base)
        try:
            p.open("?noconsent")
            assert p.cookie() is None
            assert p.js("document.querySelector('meta[name=server-arm]').content") == ""
            assert p.js("armlock.arm") is None and p.js("armlock.state") == "failed"
            assert p.js("window.vendorFired || 0") == 0 and p.events() == []
            (err,) = p.events("armlock_error")
            assert err["armlock_error"] == "no server-set id in cookie armlock_uid"
            assert p.errors == []
        finally:
            p.ctx.close()


def test_a_visitor_exposed_before_login_stays_exposed_after_it(site: tuple[Any, str], opened: Any) -> None:
    # the snippet in its own mode with a customer key (unwisely) among the id sources: the first
    # id the browser had stays its unit when a later page names a customer
    from .browser import write_page

    spec = make_spec(arms=[("holdout", 5000, "holdout"), ("exposed", 5000, "exposed")],
                     id_sources=[{"kind": "global", "name": "site.customer.key"}])
    root = site[0]
    write_page(root, "anonymous.html", spec)
    p = opened().open("anonymous.html")
    uid, arm = p.cookie()["value"], p.js("armlock.arm")
    assert arm == arm_for(spec, uid)
    other = "holdout" if arm == "exposed" else "exposed"
    key = next(f"customer-{i}" for i in range(1000) if arm_for(spec, f"customer-{i}") == other)
    write_page(root, "logged-in.html", spec, before=f"<script>window.site = {{customer: {{key: '{key}'}}}};</script>")
    p.open("logged-in.html")
    assert p.js("armlock.arm") == arm and p.cookie()["value"] == uid
    assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
    assert p.errors == []

"""The server-set id (issue 23): the cookie rule and the WSGI / ASGI middleware, called directly."""

from __future__ import annotations

import asyncio
import re
import uuid
from typing import Any
from wsgiref.util import setup_testing_defaults

import pytest

from armlock.assign.batch import arm_for
from armlock.assign.identity import MAX_AGE, IdCookie, cookie_values, read_id, valid_id
from armlock.assign.middleware import KEY, IdCookieASGI, IdCookieWSGI

from ..snippet.helpers import make_spec

SPEC = make_spec()
OTHER = make_spec(salt="another-salt-0123456789").model_copy(update={"name": "second-test"})
COOKIE = re.compile(r"^armlock_uid=([^;]+); Max-Age=34560000; Path=/; SameSite=Lax$")


def test_lifetime_is_the_400_day_cap_of_rfc_6265bis() -> None:
    # draft-ietf-httpbis-rfc6265bis-15, section 5.5 (applied in 5.6.1 Expires, 5.6.2 Max-Age): the
    # cookie age limit "SHOULD NOT be greater than 400 days (34560000 seconds)"
    assert MAX_AGE == 400 * 24 * 60 * 60 == 34_560_000


def test_the_first_valid_value_is_the_id() -> None:
    header = "a=1; armlock_uid=; armlock_uid=has space; armlock_uid=v-1; armlock_uid=v-2"
    assert cookie_values(header, "armlock_uid") == ["", "has space", "v-1", "v-2"]
    assert read_id(header, "armlock_uid") == "v-1"
    assert read_id("xarmlock_uid=v-9; armlock_uidx=v-8", "armlock_uid") is None
    assert read_id(None, "armlock_uid") is None
    for bad in ("", "x" * 129, "a;b", "é", "a,b", '"q"'):
        assert not valid_id(bad), bad
    assert valid_id("x" * 128) and valid_id(str(uuid.uuid4()))


def wsgi_call(mw: Any, cookie: str | None = None, content_type: str = "text/html; charset=utf-8",
              https: bool = False, extra: list[tuple[str, str]] | None = None) -> tuple[Any, list[tuple[str, str]]]:
    env: dict[str, Any] = {}
    setup_testing_defaults(env)
    env["wsgi.url_scheme"] = "https" if https else "http"
    if cookie is not None:
        env["HTTP_COOKIE"] = cookie
    seen: dict[str, Any] = {}

    def app(environ: dict[str, Any], start_response: Any) -> list[bytes]:
        seen["visitor"] = environ[KEY]
        start_response("200 OK", [("Content-Type", content_type), *(extra or [])])
        return [b"<p>invented shop</p>"]

    got: list[list[tuple[str, str]]] = []
    body = IdCookieWSGI(app, mw[0], **mw[1])(env, lambda status, headers, exc=None: got.append(headers))
    assert body == [b"<p>invented shop</p>"]
    return seen["visitor"], got[0]


def set_cookies(headers: list[tuple[str, str]]) -> list[str]:
    return [v for k, v in headers if k.lower() == "set-cookie"]


def test_wsgi_first_view_mints_a_v4_id_sets_the_cookie_and_gives_the_arms() -> None:
    visitor, headers = wsgi_call(((SPEC, OTHER), {}))
    (value,) = set_cookies(headers)
    uid = COOKIE.match(value).group(1)  # type: ignore[union-attr]
    assert uuid.UUID(uid).version == 4 and str(uuid.UUID(uid)) == uid
    assert visitor.id == uid and visitor.new is True
    assert visitor.arms == {SPEC.name: arm_for(SPEC, uid), OTHER.name: arm_for(OTHER, uid)}
    assert visitor.arm(SPEC.name) == arm_for(SPEC, uid)
    assert "HttpOnly" not in value  # the snippet reads it


def test_wsgi_keeps_a_valid_id_refreshes_it_and_never_overwrites_it() -> None:
    for _ in range(3):
        visitor, headers = wsgi_call(((SPEC,), {}), cookie="x=1; armlock_uid=visitor-1")
        assert visitor.id == "visitor-1" and visitor.new is False
        assert set_cookies(headers) == ["armlock_uid=visitor-1; Max-Age=34560000; Path=/; SameSite=Lax"]
        assert visitor.arms == {SPEC.name: arm_for(SPEC, "visitor-1")}
    # an invalid value is not an id: a new one replaces it
    visitor, headers = wsgi_call(((SPEC,), {}), cookie="armlock_uid=a b")
    assert visitor.new and COOKIE.match(set_cookies(headers)[0]).group(1) == visitor.id  # type: ignore[union-attr]


def test_wsgi_secure_on_https_domain_and_other_settings() -> None:
    spec = make_spec(cookie_domain=".shop.example", cookie_name="shop_id")
    _, headers = wsgi_call(((spec,), {}), cookie="shop_id=v-7", https=True)
    assert set_cookies(headers) == ["shop_id=v-7; Max-Age=34560000; Path=/; Domain=.shop.example; SameSite=Lax; Secure"]
    _, headers = wsgi_call(((spec,), {"secure": True, "max_age": 86_400}), cookie="shop_id=v-7")
    assert set_cookies(headers)[0].endswith("Max-Age=86400; Path=/; Domain=.shop.example; SameSite=Lax; Secure")
    with pytest.raises(ValueError, match="400 days"):
        IdCookieWSGI(lambda e, s: [], spec, max_age=MAX_AGE + 1)
    with pytest.raises(ValueError, match="different id cookies"):
        IdCookieWSGI(lambda e, s: [], [SPEC, spec])


def test_wsgi_leaves_non_html_responses_and_an_id_the_application_set() -> None:
    visitor, headers = wsgi_call(((SPEC,), {}), content_type="application/json")
    assert set_cookies(headers) == [] and visitor.id is not None
    _, headers = wsgi_call(((SPEC,), {}), content_type="image/png", cookie="armlock_uid=v-1")
    assert set_cookies(headers) == []
    _, headers = wsgi_call(((SPEC,), {}), cookie="armlock_uid=v-1",
                           extra=[("Set-Cookie", "armlock_uid=chosen-by-the-app; Path=/")])
    assert set_cookies(headers) == ["armlock_uid=chosen-by-the-app; Path=/"]
    _, headers = wsgi_call(((SPEC,), {}), content_type="application/xhtml+xml", cookie="armlock_uid=v-1")
    assert len(set_cookies(headers)) == 1


def test_wsgi_without_consent_reads_mints_and_sets_nothing() -> None:
    said: list[Any] = []

    def consent(environ: dict[str, Any]) -> bool:
        said.append(environ.get("HTTP_COOKIE"))
        return "consent=yes" in (environ.get("HTTP_COOKIE") or "")

    visitor, headers = wsgi_call(((SPEC,), {"consent": consent}), cookie="armlock_uid=v-1")
    assert visitor.id is None and visitor.consented is False and visitor.arms == {SPEC.name: None}
    assert set_cookies(headers) == [] and said == ["armlock_uid=v-1"]
    visitor, headers = wsgi_call(((SPEC,), {"consent": consent}), cookie="consent=yes; armlock_uid=v-1")
    assert visitor.id == "v-1" and len(set_cookies(headers)) == 1
    # only True is consent (a truthy non-bool from a sloppy callable is not)
    visitor, _ = wsgi_call(((SPEC,), {"consent": lambda e: "yes"}))
    assert visitor.id is None


def asgi_call(mw: IdCookieASGI, headers: list[tuple[bytes, bytes]], scheme: str = "http",
              content_type: bytes = b"text/html") -> tuple[Any, list[tuple[bytes, bytes]]]:
    seen: dict[str, Any] = {}
    sent: list[dict[str, Any]] = []

    async def app(scope: dict[str, Any], receive: Any, send: Any) -> None:
        seen["visitor"] = scope[KEY]
        await send({"type": "http.response.start", "status": 200, "headers": [(b"content-type", content_type)]})
        await send({"type": "http.response.body", "body": b"<p>invented</p>"})

    async def receive() -> dict[str, Any]:
        return {"type": "http.request", "body": b""}

    async def send(message: dict[str, Any]) -> None:
        sent.append(message)

    mw.app = app
    scope = {"type": "http", "scheme": scheme, "method": "GET", "path": "/", "headers": headers}
    asyncio.run(mw(scope, receive, send))
    assert KEY not in scope  # the caller's scope is not changed
    return seen["visitor"], sent[0]["headers"]


def test_asgi_same_rule_with_split_cookie_fields_and_async_consent() -> None:
    mw = IdCookieASGI(None, SPEC)  # type: ignore[arg-type]
    visitor, headers = asgi_call(mw, [(b"cookie", b"a=1"), (b"cookie", b"armlock_uid=v-1")], scheme="https")
    assert visitor.id == "v-1" and visitor.arms == {SPEC.name: arm_for(SPEC, "v-1")}
    assert headers[-1] == (b"set-cookie", b"armlock_uid=v-1; Max-Age=34560000; Path=/; SameSite=Lax; Secure")
    visitor, headers = asgi_call(mw, [])
    assert visitor.new and COOKIE.match(headers[-1][1].decode()).group(1) == visitor.id  # type: ignore[union-attr]
    _, headers = asgi_call(mw, [], content_type=b"application/json")
    assert [h for h in headers if h[0] == b"set-cookie"] == []

    async def no(scope: dict[str, Any]) -> bool:
        return False

    refused = IdCookieASGI(None, SPEC, consent=no)  # type: ignore[arg-type]
    visitor, headers = asgi_call(refused, [(b"cookie", b"armlock_uid=v-1")])
    assert visitor.id is None and [h for h in headers if h[0] == b"set-cookie"] == []


def test_asgi_passes_lifespan_through() -> None:
    calls: list[str] = []

    async def app(scope: dict[str, Any], receive: Any, send: Any) -> None:
        calls.append(scope["type"])

    asyncio.run(IdCookieASGI(app, SPEC)({"type": "lifespan"}, None, None))
    assert calls == ["lifespan"]


def test_specs_must_have_distinct_names_and_one_cookie() -> None:
    with pytest.raises(ValueError, match="share an experiment name"):
        IdCookie.for_specs([SPEC, SPEC])
    assert IdCookie.for_specs(SPEC).name == "armlock_uid"

"""WSGI and ASGI middleware that give each visitor a server-set first-party id and its arms.

Standard library only, so any Python web framework can use them (WSGI: PEP 3333; ASGI: the
ASGI 3.0 HTTP connection scope). On every request the application finds a `Visitor`
(`assign/identity.py`) under the key ``"armlock.visitor"`` of the WSGI environ or the ASGI scope:
its id (kept from the cookie, or new) and its arm in each spec, computed by `arm_for`. On every
HTML response the id cookie is set (or refreshed) from the server; other responses (JSON, images)
are left alone, as is a response that already sets the cookie itself.

    from armlock.assign import load_spec
    from armlock.assign.middleware import IdCookieWSGI
    app = IdCookieWSGI(app, load_spec("spring-retargeting.toml"))
    # in a view: environ["armlock.visitor"].arm("spring-retargeting") -> "holdout" / "exposed"
"""

from __future__ import annotations

import inspect
from collections.abc import Awaitable, Callable, Iterable
from typing import Any

from .identity import IdCookie, Visitor, is_html
from .spec import Spec

KEY = "armlock.visitor"


def _header(headers: Iterable[tuple[Any, Any]], name: str) -> list[str]:
    """Values of one header (case-insensitive) from (name, value) pairs of str or latin-1 bytes."""
    out = []
    for k, v in headers:
        k = k.decode("latin-1") if isinstance(k, bytes) else k
        if k.lower() == name:
            out.append(v.decode("latin-1") if isinstance(v, bytes) else v)
    return out


def _cookie_to_add(cookie: IdCookie, visitor: Visitor, headers: list[tuple[Any, Any]], https: bool) -> str | None:
    """The Set-Cookie value to append to a response, or None (not HTML, no consent, or set already)."""
    types = _header(headers, "content-type")
    if not types or not is_html(types[0]):
        return None
    if any(v.split("=", 1)[0].strip() == cookie.name for v in _header(headers, "set-cookie")):
        return None  # the application set the id itself: never overwrite it
    return cookie.set_cookie(visitor, https)


class IdCookieWSGI:
    """WSGI middleware: the visitor's id and arms in ``environ["armlock.visitor"]``, the id cookie on HTML.

    `specs`: the spec (or specs) the application serves; the cookie's name and domain come from
    their `[snippet]` tables. `consent(environ) -> bool`: without consent nothing is read or set
    and every arm is None. `cookie` overrides `IdCookie` fields (`secure=True` behind a proxy
    that ends TLS, where the scheme the application sees is http).
    """

    def __init__(self, app: Callable[..., Any], specs: Spec | Iterable[Spec], *,
                 consent: Callable[[dict[str, Any]], bool] | None = None, **cookie: Any) -> None:
        self.app = app
        self.cookie = IdCookie.for_specs(specs, **cookie)
        self.consent = consent

    def __call__(self, environ: dict[str, Any], start_response: Callable[..., Any]) -> Any:
        ok = self.consent is None or self.consent(environ) is True
        visitor = self.cookie.visitor(environ.get("HTTP_COOKIE"), consented=ok)
        environ[KEY] = visitor
        https = environ.get("wsgi.url_scheme") == "https"

        def start(status: str, headers: list[tuple[str, str]], exc_info: Any = None) -> Any:
            value = _cookie_to_add(self.cookie, visitor, headers, https)
            if value is not None:
                headers = [*headers, ("Set-Cookie", value)]
            return start_response(status, headers) if exc_info is None else start_response(status, headers, exc_info)

        return self.app(environ, start)


class IdCookieASGI:
    """ASGI middleware: the visitor's id and arms in ``scope["armlock.visitor"]``, the id cookie on HTML.

    The same settings as `IdCookieWSGI`; `consent(scope)` may also be a coroutine function.
    Lifespan and websocket connections pass through untouched.
    """

    def __init__(self, app: Callable[..., Awaitable[None]], specs: Spec | Iterable[Spec], *,
                 consent: Callable[[dict[str, Any]], Any] | None = None, **cookie: Any) -> None:
        self.app = app
        self.cookie = IdCookie.for_specs(specs, **cookie)
        self.consent = consent

    async def __call__(self, scope: dict[str, Any], receive: Callable[..., Any], send: Callable[..., Any]) -> None:
        if scope.get("type") != "http":
            await self.app(scope, receive, send)
            return
        ok = True
        if self.consent is not None:
            said = self.consent(scope)
            ok = (await said if inspect.isawaitable(said) else said) is True
        # HTTP/2 may send several cookie fields; joined with "; " they are one header (RFC 9113, 8.2.3)
        header = "; ".join(_header(scope.get("headers") or [], "cookie"))
        visitor = self.cookie.visitor(header, consented=ok)
        scope = {**scope, KEY: visitor}
        https = scope.get("scheme") == "https"

        async def wrapped(message: dict[str, Any]) -> None:
            if message.get("type") == "http.response.start":
                headers = list(message.get("headers") or [])
                value = _cookie_to_add(self.cookie, visitor, headers, https)
                if value is not None:
                    message = {**message, "headers": [*headers, (b"set-cookie", value.encode("latin-1"))]}
            await send(message)

        await self.app(scope, receive, wrapped)

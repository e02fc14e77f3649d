"""The server-set first-party id: the cookie rule (read, validate, mint, Set-Cookie) and a visitor's arms.

Framework-free (standard library only) so the WSGI and ASGI middlewares in `assign/middleware.py`,
any other server and the tests share one rule. The JavaScript module rendered by
`armlock snippet --form module` (snippets/armlock-server.mjs) implements the same rule.

The rule, on each HTML response:
- the id is the first cookie named `cookie_name` in the request's Cookie header whose value is a
  valid id (`valid_id`: 1-128 of ``A-Z a-z 0-9 _ . -``, which every id the browser snippet ever
  minted or mirrored also is); a valid id is never replaced, so a visitor never changes id;
- without one, a new id is minted: a random RFC 9562 version-4 UUID from the operating system's
  generator (`uuid.uuid4` reads `os.urandom`);
- the cookie is (re)set from the server on every HTML page view: `Max-Age` 400 days (the cap of
  RFC 6265bis, draft-ietf-httpbis-rfc6265bis-15, section 5.5: the cookie age limit "SHOULD NOT be
  greater than 400 days (34560000 seconds)", and a longer Max-Age or Expires is reduced to it,
  sections 5.6.1-5.6.2), `Path=/`, `SameSite=Lax`, `Secure` on https, an optional `Domain`, never
  `HttpOnly` (the browser snippet reads it);
- without consent nothing is read, minted or set, and the visitor has no id and no arm.
"""

from __future__ import annotations

import re
import uuid
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

from .batch import arm_for
from .spec import Spec
from .spec_snippet import COOKIE_DOMAIN, COOKIE_TOKEN, MAX_COOKIE_DAYS

MAX_AGE = MAX_COOKIE_DAYS * 86_400  # 34,560,000 s: RFC 6265bis caps cookie lifetimes at 400 days
VALID_ID = re.compile(r"[A-Za-z0-9_.\-]{1,128}")  # the snippet's localStorage rule, /^[\w.\-]{1,128}$/
HTML_TYPES = ("text/html", "application/xhtml+xml")


def valid_id(value: str | None) -> bool:
    """Whether a cookie value is an id the server keeps (ids are kept byte-exact, never repaired).

    >>> valid_id("0b6f0c1e-5d7a-4c39-9c51-3f1f4f0b9e2a"), valid_id(""), valid_id("a b")
    (True, False, False)
    """
    return isinstance(value, str) and VALID_ID.fullmatch(value) is not None


def mint_id() -> str:
    """A random version-4 UUID (RFC 9562, section 5.4) from the OS's random source."""
    return str(uuid.uuid4())


def cookie_values(header: str | None, name: str) -> list[str]:
    """Every value of cookie `name` in a Cookie request header, in the header's order.

    RFC 6265, section 5.4: the browser sends pairs joined by "; ", cookies with longer paths
    first, then the earlier-created first; so with `Path=/` the first value is the oldest.
    """
    out = []
    for part in (header or "").split(";"):
        key, eq, value = part.partition("=")
        if eq and key.strip() == name:  # name and value are trimmed (RFC 6265, 5.2, steps 4-5)
            out.append(value.strip())
    return out


def read_id(header: str | None, name: str) -> str | None:
    """The visitor's id: the first valid value of cookie `name`, or None."""
    return next((v for v in cookie_values(header, name) if valid_id(v)), None)


def set_cookie_value(name: str, value: str, *, secure: bool, domain: str = "", max_age: int = MAX_AGE) -> str:
    """The Set-Cookie header value for the id (RFC 6265bis, section 4.1: the attributes).

    >>> set_cookie_value("armlock_uid", "v-1", secure=True)
    'armlock_uid=v-1; Max-Age=34560000; Path=/; SameSite=Lax; Secure'
    """
    if not valid_id(value):
        raise ValueError(f"not a valid id for a cookie: {value!r}")
    out = f"{name}={value}; Max-Age={max_age}; Path=/"
    if domain:
        out += f"; Domain={domain}"
    out += "; SameSite=Lax"
    return out + ("; Secure" if secure else "")


def is_html(content_type: str | None) -> bool:
    """Whether a Content-Type is an HTML page (where the id cookie is set)."""
    media = (content_type or "").split(";")[0].strip().lower()
    return media in HTML_TYPES


@dataclass(frozen=True)
class Visitor:
    """What the application gets for one request: the id, whether it is new, the arm per experiment."""

    id: str | None
    new: bool = False
    arms: Mapping[str, str | None] = field(default_factory=dict)
    consented: bool = True

    def arm(self, experiment: str) -> str | None:
        """The arm in this experiment (None without id or consent); KeyError for an unknown name."""
        return self.arms[experiment]


@dataclass(frozen=True)
class IdCookie:
    """The id cookie's settings and the specs whose arms the application serves."""

    specs: tuple[Spec, ...]
    name: str = "armlock_uid"
    domain: str = ""
    max_age: int = MAX_AGE
    secure: bool | None = None  # None: Secure exactly when the request came over https

    def __post_init__(self) -> None:
        if not re.match(COOKIE_TOKEN, self.name):
            raise ValueError(f"cookie name {self.name!r} is not an RFC 6265 token")
        if not re.match(COOKIE_DOMAIN, self.domain):
            raise ValueError(f"cookie domain {self.domain!r} is not a host name such as .shop.example")
        if not (isinstance(self.max_age, int) and 1 <= self.max_age <= MAX_AGE):
            raise ValueError(f"max_age must be 1..{MAX_AGE} seconds (400 days, RFC 6265bis), got {self.max_age!r}")
        names = [s.name for s in self.specs]
        if len(set(names)) != len(names):
            raise ValueError(f"two specs share an experiment name: {names}")

    @classmethod
    def for_specs(cls, specs: Spec | Iterable[Spec], **overrides: object) -> IdCookie:
        """Settings from the specs' `[snippet]` tables (cookie_name, cookie_domain); they must agree."""
        seq = (specs,) if isinstance(specs, Spec) else tuple(specs)
        if not seq:
            raise ValueError("give at least one spec")
        found = {(s.snippet.cookie_name, s.snippet.cookie_domain) for s in seq}
        if len(found) > 1:
            raise ValueError("the specs name different id cookies (cookie_name, cookie_domain): "
                             f"{sorted(found)}; one browser has one id, so give them the same cookie")
        name, domain = found.pop()
        kwargs: dict = {"name": name, "domain": domain, **overrides}
        return cls(specs=seq, **kwargs)

    def visitor(self, cookie_header: str | None, *, consented: bool = True) -> Visitor:
        """The visitor of a request: its kept id or a new one, and its arm in every spec (`arm_for`)."""
        if not consented:
            return Visitor(id=None, arms={s.name: None for s in self.specs}, consented=False)
        kept = read_id(cookie_header, self.name)
        uid = kept or mint_id()
        return Visitor(id=uid, new=kept is None, arms={s.name: arm_for(s, uid) for s in self.specs})

    def set_cookie(self, visitor: Visitor, https: bool) -> str | None:
        """The Set-Cookie value for this visitor's response (None without consent)."""
        if visitor.id is None:
            return None
        secure = https if self.secure is None else self.secure
        return set_cookie_value(self.name, visitor.id, secure=secure, domain=self.domain, max_age=self.max_age)

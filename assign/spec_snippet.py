"""Settings of the browser snippet, the `[snippet]` table of the spec (issue: snippet)."""

from __future__ import annotations

import re
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, field_validator, model_validator

MAX_COOKIE_DAYS = 400  # RFC 6265bis caps cookie lifetime at 400 days (34,560,000 s)

# A JavaScript identifier in the ASCII range (ECMA-262 5.1, section 7.6, restricted to ASCII).
JS_IDENT = r"[A-Za-z_$][A-Za-z0-9_$]*"
# A dotted path of identifiers, read property by property from `window` (never evaluated).
JS_PATH = rf"^{JS_IDENT}(\.{JS_IDENT}){{0,7}}$"
# A cookie name is an RFC 6265 section 4.1.1 token (RFC 2616 token characters).
COOKIE_TOKEN = r"^[!#$%&'*+\-.^_`|~0-9A-Za-z]{1,128}$"
# A cookie Domain attribute: a host name, optionally with a leading dot (RFC 6265 section 5.2.3).
_LABEL = r"[A-Za-z0-9]([A-Za-z0-9\-]{0,61}[A-Za-z0-9])?"
COOKIE_DOMAIN = rf"^(\.?{_LABEL}(\.{_LABEL})*)?$"

# Window properties the snippet must never overwrite with its global object or data layer:
# assigning some of them navigates the page or breaks it (HTML Living Standard, Window interface).
RESERVED_GLOBALS = frozenset(
    {
        "window",
        "self",
        "top",
        "parent",
        "frames",
        "opener",
        "document",
        "location",
        "history",
        "navigator",
        "name",
        "status",
        "length",
        "origin",
        "closed",
        "frameElement",
        "localStorage",
        "sessionStorage",
        "crypto",
        "console",
        "setInterval",
        "clearInterval",
        "setTimeout",
        "Object",
        "Array",
        "String",
        "Math",
        "JSON",
        "RegExp",
        "Error",
        "Uint8Array",
        "undefined",
        "NaN",
        "Infinity",
        "eval",
    }
)

# Regular-expression syntax that Python accepts but JavaScript (ES5 RegExp) reads differently.
_PY_ONLY_REGEX = re.compile(r"\(\?[^:=!]|\\[AZzQEGh]|\[\[:|\(\?<")


class IdSource(BaseModel):
    """One place the page already keeps a visitor id, tried in the order listed."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    kind: Literal["cookie", "global", "data_layer"]
    name: str = Field(min_length=1, max_length=128)
    pattern: str = Field(default="", max_length=200)

    @model_validator(mode="after")
    def _name_fits_kind(self) -> IdSource:
        if self.kind == "cookie" and not re.match(COOKIE_TOKEN, self.name):
            raise ValueError(
                f"a cookie name is letters, digits and !#$%&'*+-.^_`|~ (RFC 6265 token), got {self.name!r}"
            )
        if self.kind != "cookie" and not re.match(JS_PATH, self.name):
            raise ValueError(
                f"a {self.kind} source is a dotted path of identifiers such as site.visitor.id, "
                f"got {self.name!r}"
            )
        return self

    @field_validator("pattern")
    @classmethod
    def _pattern_ok(cls, v: str) -> str:
        if v == "":
            return v
        try:
            compiled = re.compile(v)
        except re.error as exc:
            raise ValueError(f"pattern is not a regular expression: {exc}") from None
        if compiled.groups < 1:
            raise ValueError(
                "pattern needs a capture group: its first group is the id, e.g. ^uid\\.(.+)$"
            )
        if _PY_ONLY_REGEX.search(v) or any(ord(c) < 32 for c in v):
            raise ValueError(
                "pattern uses syntax the browser reads differently (named groups, inline flags, "
                "\\A, \\Z, lookbehind, control characters); use plain groups, classes and anchors ^ $"
            )
        return v


class ConsentRule(BaseModel):
    """What must say yes before the snippet sets a cookie or picks an arm (mode "none": no wait)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: Literal["none", "data_layer", "function"] = "none"
    key: str = Field(default="", max_length=128)
    value: str = Field(default="", max_length=128)
    function: str = Field(default="", max_length=128)

    @model_validator(mode="after")
    def _complete(self) -> ConsentRule:
        if self.mode == "data_layer":
            if not re.match(JS_PATH, self.key):
                raise ValueError(
                    'mode "data_layer" needs key, a data-layer key path such as consent.ads '
                    f"(got {self.key!r})"
                )
            if self.value == "":
                raise ValueError(
                    'mode "data_layer" needs value, the text that means yes, e.g. "granted"'
                )
            if self.function:
                raise ValueError('function is only used with mode "function"')
        elif self.mode == "function":
            if not re.match(JS_PATH, self.function):
                raise ValueError(
                    'mode "function" needs function, a global function path such as '
                    f"site.consent.adsAllowed that returns true (got {self.function!r})"
                )
            if self.key or self.value:
                raise ValueError('key and value are only used with mode "data_layer"')
        elif self.key or self.value or self.function:
            raise ValueError('mode is "none", so key, value and function must stay empty')
        return self


def _global_name(v: str, what: str) -> str:
    if not re.match(rf"^{JS_IDENT}$", v) or len(v) > 64:
        raise ValueError(
            f"{what} is a JavaScript identifier: a letter, _ or $, then letters, digits, _ or $"
        )
    if v in RESERVED_GLOBALS:
        raise ValueError(
            f"{what} names a built-in property of the page's window; choose another name"
        )
    return v


# Plain-pattern fields of [snippet]: (pattern, what would be valid).
_FIELD_PATTERNS = {
    "cookie_name": (r"^[A-Za-z0-9_\-]{1,64}$",
                    "cookie_name is 1-64 letters, digits, _ or - (it is also the localStorage key)"),
    "cookie_domain": (COOKIE_DOMAIN,
                      'cookie_domain is a host name such as ".shop.example", or "" for this host only'),
    "qa_param": (r"^([A-Za-z0-9_\-.]{1,64})?$",
                 'qa_param is a URL parameter name of letters, digits, _, - or . (or "" for off)'),
}


class SnippetSettings(BaseModel):
    """Cookie and page integration settings the snippet is rendered with."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    id_sources: tuple[IdSource, ...] = Field(default=(), max_length=8)
    id_from: Literal["script", "server"] = "script"
    cookie_name: str = "armlock_uid"
    cookie_days: int = Field(default=395, ge=1, le=MAX_COOKIE_DAYS, strict=True)
    cookie_domain: str = Field(default="", max_length=253)
    data_layer: str = "dataLayer"
    event_name: str = Field(default="armlock_arm", min_length=1, max_length=100)
    error_event_name: str = Field(default="armlock_error", min_length=1, max_length=100)
    global_name: str = "armlock"
    consent: ConsentRule = ConsentRule()
    qa_param: str = ""

    @field_validator("cookie_name", "cookie_domain", "qa_param")
    @classmethod
    def _pattern_fields(cls, v: str, info: ValidationInfo) -> str:
        pattern, message = _FIELD_PATTERNS[info.field_name]  # type: ignore[index]
        if not re.match(pattern, v):
            raise ValueError(message)
        return v

    @field_validator("data_layer")
    @classmethod
    def _dl_ok(cls, v: str) -> str:
        return _global_name(v, "data_layer")

    @field_validator("global_name")
    @classmethod
    def _global_ok(cls, v: str) -> str:
        return _global_name(v, "global_name")

    @field_validator("event_name", "error_event_name")
    @classmethod
    def _printable(cls, v: str) -> str:
        if any(ord(c) < 32 or ord(c) == 127 for c in v):
            raise ValueError("event names must not contain control characters")
        return v

    @model_validator(mode="after")
    def _distinct(self) -> SnippetSettings:
        if self.data_layer == self.global_name:
            raise ValueError(
                "data_layer and global_name must differ (both are properties of window)"
            )
        if self.event_name == self.error_event_name:
            raise ValueError("event_name and error_event_name must differ")
        if self.id_from == "server" and self.id_sources:
            raise ValueError(
                'with id_from = "server" the id cookie the server sets (cookie_name) is the only id; '
                "remove the id_sources (a site id or customer key can go into the identity links)"
            )
        return self


def snippet_section_toml() -> str:
    """The commented `[snippet]` table written by `armlock init`."""
    return """
[snippet]
# Settings of the tag-manager snippet (`armlock snippet`). Cosmetic: changing them never
# moves a visitor to another arm (only id_sources can, by changing which id is hashed).
cookie_name = "armlock_uid"  # armlock's own first-party id cookie (and its localStorage key)
cookie_days = 395            # lifetime; browsers cap cookies at 400 days (RFC 6265bis)
cookie_domain = ""           # e.g. ".shop.example" to share the id across subdomains; "" = this host
data_layer = "dataLayer"     # the page's data-layer array (created if absent)
event_name = "armlock_arm"   # event pushed once the arm is known
error_event_name = "armlock_error"  # event pushed when the snippet fails closed (no arm, no tag)
global_name = "armlock"      # window.armlock: .arm, .gate(callback) for the vendor's tag
qa_param = ""                # e.g. "armlock_qa": ?armlock_qa=exposed forces an arm for one page view
id_from = "script"           # "server": the shop's server sets cookie_name (docs/identity.md); the
                             # snippet then never mints an id and fails closed without one

# Where a browser's first id comes from when it has no armlock cookie yet (the cookie then keeps
# it, so a later login never moves the visitor). Not a login or customer key: that only links
# ids ([audit.identities]). Tried in this order; not with id_from = "server". Examples:
# [[snippet.id_sources]]
# kind = "cookie"            # "cookie", "global" (window.a.b) or "data_layer" (latest value at a key)
# name = "site_uid"
# pattern = "^v1\\\\.(.+)$"    # optional: a regular expression whose first group is the id
# [[snippet.id_sources]]
# kind = "global"
# name = "site.visitor.id"

[snippet.consent]
# Before consent the snippet does nothing: no cookie, no arm, no vendor tag.
mode = "none"                # "none", "data_layer" (key = value pushed) or "function" (returns true)
# key = "consent.ads"        # mode "data_layer": the key path pushed into the data layer
# value = "granted"          # mode "data_layer": the value that means yes
# function = "site.consent.adsAllowed"  # mode "function": a global function returning true
"""

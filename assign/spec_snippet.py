"""Settings of the browser snippet, the `[snippet]` table of the spec (issue: snippet)."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field

MAX_COOKIE_DAYS = 400  # RFC 6265bis caps cookie lifetime at 400 days (34,560,000 s)


class SnippetSettings(BaseModel):
    """Cookie and page integration settings the snippet is rendered with."""

    model_config = ConfigDict(extra="forbid")

    cookie_name: str = Field("armlock_uid", pattern=r"^[A-Za-z0-9_\-]{1,64}$")
    cookie_days: int = Field(395, ge=1, le=MAX_COOKIE_DAYS, strict=True)
    cookie_domain: str = ""


def snippet_section_toml() -> str:
    """The commented `[snippet]` table written by `armlock init`."""
    return '''
[snippet]
# Settings of the tag-manager snippet (`armlock snippet`). Cosmetic: changing them never
# moves a visitor to another arm.
cookie_name = "armlock_uid"  # armlock's own first-party visitor-id cookie
cookie_days = 395            # lifetime; browsers cap cookies at 400 days (RFC 6265bis)
cookie_domain = ""           # e.g. ".shop.example" to share the id across subdomains; "" = this host
'''

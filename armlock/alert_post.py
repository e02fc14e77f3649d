"""Posting an alert to a webhook: JSON over HTTP(S) with a bounded number of retries; never raises.

A webhook that is down, slow or refuses never changes the audit's result or exit code: the
caller gets a sentence to print. The URL often carries a secret token, so messages name only
its scheme and host.
"""

from __future__ import annotations

import json
import time
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Callable
from typing import Any

ATTEMPTS = 3
TIMEOUT_S = 5.0
BACKOFF_S = 0.5  # waits 0.5 s, then 1 s, between attempts (at most ~16.5 s in all with the timeouts)


def where(url: str) -> str:
    """The URL without path, query or credentials (they may hold a token)."""
    p = urllib.parse.urlsplit(url)
    return f"{p.scheme}://{p.hostname or '?'}" + (f":{p.port}" if p.port else "")


def check_url(url: str) -> str | None:
    """Why a webhook URL cannot be used, or None (http and https only)."""
    p = urllib.parse.urlsplit(url)
    if p.scheme not in ("http", "https") or not p.hostname:
        return f"{url!r} is not an http(s) URL, e.g. https://chat.example/hooks/T0KEN"
    return None


def post(url: str, payload: dict[str, Any], *, attempts: int = ATTEMPTS, timeout: float = TIMEOUT_S,
         backoff: float = BACKOFF_S, sleep: Callable[[float], None] = time.sleep) -> tuple[bool, str]:
    """POST `payload` as JSON; retries on a network error, a timeout, 429 or a 5xx answer.

    Returns (delivered, what happened), e.g. (False, "https://chat.example: HTTP 503 after 3 attempts").
    """
    data = json.dumps(payload, ensure_ascii=False).encode("utf-8")
    last = ""
    for attempt in range(1, attempts + 1):
        req = urllib.request.Request(url, data=data, method="POST",
                                     headers={"Content-Type": "application/json; charset=utf-8",
                                              "User-Agent": "armlock-alert"})
        try:
            with urllib.request.urlopen(req, timeout=timeout) as resp:  # noqa: S310 (http(s) checked)
                return True, f"{where(url)}: HTTP {resp.status}"
        except urllib.error.HTTPError as exc:
            last = f"HTTP {exc.code}"
            if exc.code != 429 and exc.code < 500:  # the receiver refuses this message: retrying will not help
                return False, f"{where(url)}: {last} (not retried)"
        except (urllib.error.URLError, TimeoutError, OSError) as exc:
            reason = getattr(exc, "reason", exc)
            last = str(reason) or type(exc).__name__
        if attempt < attempts:
            sleep(backoff * 2 ** (attempt - 1))
    return False, f"{where(url)}: {last} after {attempts} attempts"

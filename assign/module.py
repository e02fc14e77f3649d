"""Render the server/edge ES module from the spec: the template plus one escaped JSON literal."""

from __future__ import annotations

from typing import Any

from .identity import MAX_AGE
from .snippet import CONFIG_MARK, _template, js_literal
from .spec import Spec

MODULE_TEMPLATE = "armlock-server.mjs"


def module_config(spec: Spec) -> dict[str, Any]:
    """What the module needs from the spec: the split and the id cookie's settings."""
    return {
        "experiment": spec.name,
        "fingerprint": spec.fingerprint,
        "salt": spec.salt,
        "arms": list(spec.arm_names),
        "cumulative": list(spec.cumulative),
        "exposed": list(spec.exposed_arms),
        "cookie": {"name": spec.snippet.cookie_name, "domain": spec.snippet.cookie_domain, "maxAge": MAX_AGE},
    }


def render_module(spec: Spec) -> str:
    """The ES module for Node and edge runtimes (`armlock snippet --form module`).

    >>> from armlock.assign.spec import Spec
    >>> s = Spec(name="t", salt="s1", start="2026-01-01T00:00:00Z",
    ...          arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])
    >>> "export function armFor" in render_module(s)
    True
    """
    code = _template(MODULE_TEMPLATE)
    if code.count(CONFIG_MARK) != 1:
        raise RuntimeError(f"snippets/{MODULE_TEMPLATE}: expected exactly one {CONFIG_MARK} marker")
    return code.replace(CONFIG_MARK, js_literal(module_config(spec)))

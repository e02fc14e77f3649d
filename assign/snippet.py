"""Render the browser snippet from the spec: the JS template plus one escaped JSON literal."""

from __future__ import annotations

import json
import re
from functools import lru_cache
from importlib import resources
from itertools import product
from string import ascii_lowercase, ascii_uppercase
from typing import Any, Literal

from .contract import bucket
from .spec import Spec
from .spec_snippet import MAX_COOKIE_DAYS

FORMS = ("js", "html")
TEMPLATE = "armlock.js"
HTML_TEMPLATE = "armlock.html"
CONFIG_MARK = "/*@CONFIG@*/null"
SCRIPT_MARK = "/*@SCRIPT@*/"
SECONDS_PER_DAY = 86_400

# Characters that must not appear raw inside an inline <script>: `<` and `>` cover `</script`
# and `<!--` (HTML Living Standard, "Restrictions for contents of script elements"); `&` is
# escaped too so the literal reads the same in XHTML. U+2028/U+2029 are line terminators in
# ES5 string literals (ECMA-262 5.1, section 7.3) although JSON allows them raw.
_ESCAPES = {
    "<": "\\u003c",
    ">": "\\u003e",
    "&": "\\u0026",
    "\u2028": "\\u2028",
    "\u2029": "\\u2029",
}


def js_literal(value: Any) -> str:
    """JSON text of `value` that is also a safe ES5 expression inside an HTML <script> block.

    >>> js_literal({"a": "</script><!--"})
    '{"a":"\\\\u003c/script\\\\u003e\\\\u003c!--"}'
    """
    text = json.dumps(value, ensure_ascii=True, separators=(",", ":"), allow_nan=False)
    for raw, esc in _ESCAPES.items():
        text = text.replace(raw, esc)
    return text


def snippet_config(spec: Spec) -> dict[str, Any]:
    """Everything the snippet needs from the spec, under the short keys the template reads."""
    s = spec.snippet
    consent: list[str] | None
    if s.consent.mode == "data_layer":
        consent = [s.consent.key, s.consent.value]
    elif s.consent.mode == "function":
        consent = [s.consent.function]
    else:
        consent = None
    return {
        "n": spec.name,
        "f": spec.fingerprint,
        "s": spec.salt,
        "a": list(spec.arm_names),
        "b": list(spec.cumulative),
        "x": list(spec.exposed_arms),
        "k": s.cookie_name,
        "m": min(s.cookie_days, MAX_COOKIE_DAYS) * SECONDS_PER_DAY,
        "o": s.cookie_domain,
        "l": s.data_layer,
        "e": s.event_name,
        "r": s.error_event_name,
        "g": s.global_name,
        "i": [[src.kind, src.name, src.pattern] for src in s.id_sources],
        "c": consent,
        "q": s.qa_param,
        # self-test at load: the experiment name's bucket by Python. A page whose built-ins were
        # patched before the snippet loaded, so that it would hash differently, fails closed.
        "t": bucket(spec.salt, spec.name),
        "u": 1 if s.id_from == "server" else 0,
    }


# ---- shrinking armlock's own template ------------------------------------------------------
# Not a general JavaScript minifier: it relies on rules the template in snippets/ keeps (every
# statement ends with `;`, no empty statements, regex literals follow `(`, `!` or `,`, no
# `? name :` ternary) and runs only on that template, before the spec's values are inserted, so
# a spec value is never touched. The output is pinned by the golden file and parsed as ES5 by
# the tests.
_TOKEN = re.compile(
    r"""
     (?P<ws>\s+)
    |(?P<keep>/\*@[A-Z]+@\*/|/\*\ armlock\ [^*]*\*/)
    |(?P<comment>/\*.*?\*/|//[^\n]*)
    |(?P<str>'(?:\\.|[^'\\\n])*'|"(?:\\.|[^"\\\n])*")
    |(?P<word>[A-Za-z0-9_$]+(?:\.[A-Za-z0-9_$]+)*)
    |(?P<punct>.)
    """,
    re.DOTALL | re.VERBOSE,
)
_REGEX_AFTER = set("(,=:[!&|?{};")
_REGEX_BODY = re.compile(r"/(?:\\.|\[(?:\\.|[^\]\\])*\]|[^/\\\[\n])+/[gim]*")
_WORD_CHAR = re.compile(r"[\w$]")
_KEYWORDS = frozenset(
    (
        "break",
        "case",
        "catch",
        "continue",
        "debugger",
        "default",
        "delete",
        "do",
        "else",
        "finally",
        "for",
        "function",
        "if",
        "in",
        "instanceof",
        "new",
        "return",
        "switch",
        "this",
        "throw",
        "try",
        "typeof",
        "var",
        "void",
        "while",
        "with",
        "null",
        "true",
        "false",
        "class",
        "const",
        "enum",
        "export",
        "extends",
        "import",
        "super",
        "implements",
        "interface",
        "let",
        "package",
        "private",
        "protected",
        "public",
        "static",
        "yield",
    )
)  # ECMA-262 5.1, 7.6.1: reserved words, never chosen as a short name


def _tokens(src: str) -> list[tuple[str, str]]:
    out: list[tuple[str, str]] = []
    pos = 0
    last: tuple[str, str] | None = None
    while pos < len(src):
        if src[pos] == "/" and (
            last is None
            or (last[0] == "punct" and last[1] in _REGEX_AFTER)
            or last == ("word", "return")
        ):
            m = _REGEX_BODY.match(src, pos)
            if m and not src.startswith(("//", "/*"), pos):
                out.append(("regex", m.group()))
                last = out[-1]
                pos = m.end()
                continue
        m = _TOKEN.match(src, pos)
        assert m is not None and m.lastgroup is not None
        kind, text = m.lastgroup, m.group()
        pos = m.end()
        if kind == "comment":
            kind, text = "ws", " "
        out.append((kind, text))
        if kind != "ws":
            last = (kind, text)
    return out


def _declared(tokens: list[tuple[str, str]]) -> list[str]:
    """Names the template declares itself: after `function`/`var`/`catch`, and parameter lists."""
    sig = [t for t in tokens if t[0] != "ws"]
    names: list[str] = []
    for i, (kind, text) in enumerate(sig):
        if kind != "word":
            continue
        if text in ("function", "catch"):
            j = i + 1
            if sig[j][0] == "word":
                names.append(sig[j][1])
                j += 1
            if sig[j][1] == "(":
                j += 1
                while sig[j][1] != ")":
                    if sig[j][0] == "word":
                        names.append(sig[j][1])
                    j += 1
        elif text == "var":
            j, depth = i + 1, 0
            expect_name = True
            while not (depth == 0 and sig[j][1] == ";"):
                k, t = sig[j]
                if t in "([{":
                    depth += 1
                elif t in ")]}":
                    depth -= 1
                elif depth == 0 and t == ",":
                    expect_name = True
                elif expect_name and k == "word":
                    names.append(t)
                    expect_name = False
                elif depth == 0 and t == "=":
                    expect_name = False
                j += 1
    return list(dict.fromkeys(names))


def minify(src: str, keep_names: frozenset[str] = frozenset()) -> str:
    """The template with comments (except `/* armlock ...*/` and markers), spaces and long
    local names removed; names in `keep_names` stay as written."""
    tokens = _tokens(src)
    used = {t.split(".")[0] for k, t in tokens if k == "word"}
    letters = ascii_lowercase + ascii_uppercase
    pool = ("".join(p) for n in (1, 2, 3) for p in product(letters, repeat=n))
    fresh = (p for p in pool if p not in used and p not in _KEYWORDS)
    # the most used names get the shortest replacements (ties keep the order of declaration)
    count: dict[str, int] = {}
    for k, t in tokens:
        if k == "word":
            count[t.split(".")[0]] = count.get(t.split(".")[0], 0) + 1
    long_names = [n for n in _declared(tokens) if len(n) > 1 and n not in keep_names]
    rename = {n: next(fresh) for n in sorted(long_names, key=lambda n: -count[n])}
    sig = [i for i, t in enumerate(tokens) if t[0] != "ws"]
    out = ""
    space = False
    for n, i in enumerate(sig):
        kind, text = tokens[i]
        space = i > 0 and tokens[i - 1][0] == "ws"
        before = tokens[sig[n - 1]][1] if n else ""
        after = tokens[sig[n + 1]][1] if n + 1 < len(sig) else ""
        # a property name (after `.`) or an object key (`{name:` / `,name:`) keeps its name
        # (an ES5 accessor `get name(` is a key too)
        is_key = (before in ("{", ",") and after == ":") or (before in ("get", "set") and after == "(")
        if text == ";" and after == "}":
            continue  # `;}` -> `}`: the template has no empty statements, so this is ASI-safe
        if kind == "word" and before != "." and not is_key:
            head, dot, rest = text.partition(".")
            text = rename.get(head, head) + dot + rest
        if out and space:
            a, b = out[-1], text[0]
            if (
                (_WORD_CHAR.match(a) and _WORD_CHAR.match(b))
                or (a in "+-" and b in "+-")
                or (a == "/" and b == "/")
            ):
                out += " "
        out += text
    return out + "\n"


def preload_stub(global_name: str = "armlock") -> str:
    """The one-line queue a page may run before the snippet has loaded (README, "Paste it").

    `gate()` calls made before the snippet arrives are kept in `q` as their argument lists; the
    snippet runs them through its own gate when it loads. Run after the snippet, it does nothing.
    """
    g = global_name
    return f"window.{g}=window.{g}||{{q:[],gate:function(){{window.{g}.q.push(arguments)}}}};"


@lru_cache(maxsize=1)
def _minified() -> str:
    return minify(_template(TEMPLATE))


@lru_cache(maxsize=4)
def _template(name: str) -> str:
    return resources.files("armlock.snippets").joinpath(name).read_text(encoding="utf-8")


def render_snippet(spec: Spec, form: Literal["js", "html"] | str = "js") -> str:
    """The snippet for this spec: `js` a file to self-host, `html` a <script> block to paste.

    >>> from armlock.assign.spec import Spec
    >>> s = Spec(name="t", salt="s1", start="2026-01-01T00:00:00Z",
    ...          arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])
    >>> render_snippet(s, "html").startswith("<script>")
    True
    """
    if form not in FORMS:
        raise ValueError(f"form must be one of {', '.join(FORMS)}, got {form!r}")
    code = _minified()
    if code.count(CONFIG_MARK) != 1:
        raise RuntimeError(f"snippets/{TEMPLATE}: expected exactly one {CONFIG_MARK} marker")
    code = code.replace(CONFIG_MARK, js_literal(snippet_config(spec)))
    if form == "js":
        return code
    page = _template(HTML_TEMPLATE)
    if page.count(SCRIPT_MARK) != 1:
        raise RuntimeError(f"snippets/{HTML_TEMPLATE}: expected exactly one {SCRIPT_MARK} marker")
    return page.replace(SCRIPT_MARK, code)

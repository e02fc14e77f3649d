"""The server/edge ES module (issue 23) under Node: the frozen vectors, xxHash's own, the cookie rule."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import uuid
from http.client import HTTPConnection
from pathlib import Path
from typing import Any

import xxhash

from armlock.assign.batch import arm_for
from armlock.assign.contract import bucket
from armlock.assign.identity import MAX_AGE, read_id, set_cookie_value, valid_id
from armlock.assign.module import MODULE_TEMPLATE, render_module
from armlock.assign.snippet import _template

from ..cli.cli_run import run_cli
from .helpers import REPO, VECTORS, make_spec, need, random_ids
from .test_node_hash import XXH64_SANITY, sanity_buffer

EXAMPLE = REPO / "docs" / "examples" / "node-http-server.mjs"


def node_module(tmp: Path, modules: dict[str, str], script: str, request: Any, flags: tuple[str, ...] = ()) -> Any:
    """Write the modules and an ES module `script` (reading JSON `request` as REQ) into tmp; run it."""
    for name, text in modules.items():
        (tmp / name).write_text(text, encoding="utf-8")
    runner = tmp / "run.mjs"
    runner.write_text("let inp = ''; process.stdin.on('data', c => inp += c);"
                      "process.stdin.on('end', async () => { const REQ = JSON.parse(inp);"
                      f"{script} }});", encoding="utf-8")
    proc = subprocess.run([need("node"), *flags, str(runner)], input=json.dumps(request, ensure_ascii=True),
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def test_every_vector_row(tmp_path: Path) -> None:
    # shared/vectors/assignment_vectors.json: every layout, every id, hash, bucket and arm
    layouts = json.loads(VECTORS.read_text(encoding="utf-8"))["layouts"]
    modules, cases = {}, []
    for i, lay in enumerate(layouts):
        arms = [(n, w, "holdout" if n.startswith("holdout") else "exposed") for n, w in lay["arms"]]
        modules[f"m{i}.mjs"] = render_module(make_spec(salt=lay["salt"], arms=arms))
        cases.append([c["id"] for c in lay["cases"]])
    got = node_module(tmp_path, modules, """
        const out = [];
        for (let i = 0; i < REQ.length; i++) {
          const m = await import('./m' + i + '.mjs');
          out.push(REQ[i].map(id => [id === '' ? null : m.hash64(m.config.salt, id).toString(16).padStart(16, '0'),
                                     m.bucketOf(m.config.salt, id), m.armFor(id)]));
        }
        process.stdout.write(JSON.stringify(out));""", cases)
    rows = 0
    for lay, res in zip(layouts, got):
        for case, (h, b, a) in zip(lay["cases"], res):
            want_hash = case["hash"] if case["id"] != "" else None
            assert (h if case["id"] != "" else None, b, a) == (want_hash, case["bucket"], case["arm"]), repr(case["id"])
            rows += 1
    assert rows == sum(len(lay["cases"]) for lay in layouts) == 348


def test_hash_matches_xxhash_reference_and_python_on_every_length(tmp_path: Path) -> None:
    # Collet, xxHash, cli/xsum_sanity_check.c (XSUM_XXH64_testdata), and python-xxhash (Collet's C
    # code) on every length 0..300: the short path, the 4-lane stripes and every tail
    cases = [(sanity_buffer(n), seed) for n, seed, _ in XXH64_SANITY]
    buf = sanity_buffer(300)
    cases += [(buf[:n], seed) for n in range(301) for seed in (42, 0)]
    want = [f"{h:016x}" for _, _, h in XXH64_SANITY]
    want += [f"{xxhash.xxh64_intdigest(bytes(b), s):016x}" for b, s in cases[len(XXH64_SANITY):]]
    got = node_module(tmp_path, {"m.mjs": render_module(make_spec())}, """
        const m = await import('./m.mjs');
        process.stdout.write(JSON.stringify(REQ.map(([b, s]) =>
          m.xxh64(Uint8Array.from(b), BigInt(s)).toString(16).padStart(16, '0'))));""", cases)
    assert got == want


def test_random_ids_match_python(tmp_path: Path) -> None:
    # Reference: python-xxhash via assign.contract.bucket and assign.batch.arm_for; lone
    # surrogates (TextEncoder's U+FFFD) and astral characters included
    spec = make_spec(salt="s\u00e5lt-\U0001d530", arms=[("holdout", 2000, "holdout"), ("exposed_a", 4000, "exposed"),
                                                          ("exposed_b", 4000, "exposed")])
    ids = random_ids(5000, seed=23)
    got = node_module(tmp_path, {"m.mjs": render_module(spec)}, """
        const m = await import('./m.mjs');
        process.stdout.write(JSON.stringify([REQ.map(id => m.bucketOf(m.config.salt, id)), REQ.map(id => m.armFor(id))]));""",
                      ids)
    assert got[0] == [bucket(spec.salt, i) if i else None for i in ids]
    assert got[1] == [arm_for(spec, i) for i in ids]


HEADERS = ["", "armlock_uid=v-1", "a=1; armlock_uid=; armlock_uid=a b; armlock_uid=v-2; armlock_uid=v-3",
           "xarmlock_uid=v-9;armlock_uid=v-4", "armlock_uid=" + "x" * 129, "armlock_uid=" + "x" * 128,
           "armlock_uid = v-5 ", "armlock_uid=\u00e9; armlock_uid=ok"]


def test_cookie_rule_is_python_s(tmp_path: Path) -> None:
    spec = make_spec(cookie_domain=".shop.example")
    got = node_module(tmp_path, {"m.mjs": render_module(spec)}, """
        const m = await import('./m.mjs');
        const ids = REQ.map(h => m.readId(h));
        const v = m.visitor('', {https: true}), kept = m.visitor('armlock_uid=v-1');
        const no = m.visitor('armlock_uid=v-1', {consented: false});
        process.stdout.write(JSON.stringify({ids, valid: ['', 'a;b', 'ok-1.2_3'].map(m.validId),
          cookies: ids.filter(Boolean).map(id => m.setCookie(id, {https: true})),
          minted: v, kept, no, maxAge: m.MAX_AGE, html: ['text/html; charset=utf-8', 'application/json'].map(m.isHtml)}));""",
                      HEADERS)
    want = [read_id(h, "armlock_uid") for h in HEADERS]
    assert got["ids"] == want and got["valid"] == [valid_id(x) for x in ("", "a;b", "ok-1.2_3")]
    assert got["cookies"] == [set_cookie_value("armlock_uid", i, secure=True, domain=".shop.example")
                              for i in want if i]
    assert got["maxAge"] == MAX_AGE and got["html"] == [True, False]
    minted = got["minted"]
    assert uuid.UUID(minted["id"]).version == 4 and minted["new"] is True
    assert minted["arm"] == arm_for(spec, minted["id"]) and minted["setCookie"].endswith("; Secure")
    assert got["kept"]["id"] == "v-1" and got["kept"]["new"] is False and got["kept"]["arm"] == arm_for(spec, "v-1")
    assert got["no"] == {"id": None, "new": False, "arm": None, "consented": False, "setCookie": None}


def test_the_module_needs_no_node_api(tmp_path: Path) -> None:
    # as in a worker: a fresh context with only ECMAScript and the two web globals it uses
    src = _template(MODULE_TEMPLATE)
    assert not re.search(r"\brequire\(|\bprocess\.|\bBuffer\b|['\"]node:|^\s*import\s", src, re.M)
    spec = make_spec()
    got = node_module(tmp_path, {"m.mjs": render_module(spec)}, """
        const vm = await import('node:vm'); const fs = await import('node:fs');
        const ctx = vm.createContext({TextEncoder, crypto: {randomUUID: () => crypto.randomUUID()}});
        const mod = new vm.SourceTextModule(fs.readFileSync(new URL('./m.mjs', import.meta.url), 'utf8'), {context: ctx});
        await mod.link(() => { throw new Error('the module imports nothing'); });
        await mod.evaluate();
        const m = mod.namespace;
        process.stdout.write(JSON.stringify([typeof ctx.process, m.armFor('visitor-1'), m.visitor('').new]));""",
                      None, flags=("--experimental-vm-modules", "--no-warnings"))
    assert got == ["undefined", arm_for(spec, "visitor-1"), True]


def test_cli_renders_the_module_and_the_node_http_example_serves_it(tmp_path: Path) -> None:
    spec_file = tmp_path / "s.toml"
    spec_file.write_text((REPO / "tests" / "snippet" / "golden" / "invented-shop.toml").read_text(encoding="utf-8")
                         .replace("[[snippet.id_sources]]\nkind = \"cookie\"\nname = \"shop_uid\"\npattern = \"^v1\\\\.(.+)$\"\n\n", "")
                         .replace("[[snippet.id_sources]]\nkind = \"global\"\nname = \"shop.customer.key\"\n\n", "")
                         .replace('cookie_domain = ".shop.example"', 'cookie_domain = ""'),
                         encoding="utf-8")
    out = run_cli(tmp_path, "snippet", "--spec", "s.toml", "--form", "module", "--out", "armlock-server.mjs")
    assert out.returncode == 0, out.stderr
    from armlock.assign.spec import load_spec

    spec = load_spec(spec_file)
    assert (tmp_path / "armlock-server.mjs").read_text(encoding="utf-8") == render_module(spec)
    shutil.copy(EXAMPLE, tmp_path / "server.mjs")
    proc = subprocess.Popen([need("node"), str(tmp_path / "server.mjs"), "0"], stdout=subprocess.PIPE, text=True)
    try:
        port = int(proc.stdout.readline())  # type: ignore[union-attr]

        def get(cookie: str | None = None) -> tuple[str, str]:
            conn = HTTPConnection("127.0.0.1", port, timeout=10)
            conn.request("GET", "/", headers={"Cookie": cookie} if cookie else {})
            r = conn.getresponse()
            body, set_cookie = r.read().decode(), r.getheader("Set-Cookie") or ""
            conn.close()
            return body, set_cookie

        body, first = get()
        uid = re.fullmatch(r"armlock_uid=([^;]+); Max-Age=34560000; Path=/; SameSite=Lax", first).group(1)  # type: ignore[union-attr]
        assert f'data-arm="{arm_for(spec, uid)}"' in body
        body, again = get(f"armlock_uid={uid}")
        assert again == first and f'data-arm="{arm_for(spec, uid)}"' in body
    finally:
        proc.terminate()
        proc.wait(timeout=10)

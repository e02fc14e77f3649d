"""The README says what the code does: its opening, set-up lines, links, synopses and sizes are checked here.

The demo's output, the tour and the library example (docs/library.md) are checked against a real
demo run in tests/cli/test_demo_cli.py (one demo run serves both). The README is a front door of at
most 600 lines; methods, calibration, benchmarks and reference material live in docs/.
"""

from __future__ import annotations

import re
from pathlib import Path

import typer

from armlock.assign.init import render_spec_toml
from armlock.assign.snippet import render_snippet
from armlock.assign.spec import load_spec
from armlock.cli import app

ROOT = Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def section(title: str) -> str:
    """The README's text from a `## title` heading to the next `## ` heading."""
    start = README.index(f"\n## {title}\n")
    end = README.find("\n## ", start + 1)
    return README[start:end if end > 0 else None]


def code_blocks(text: str) -> list[str]:
    return re.findall(r"```[a-z]*\n(.*?)```", text, flags=re.S)


def test_readme_opens_with_one_paragraph_then_two_setup_commands() -> None:
    body = README.split("\n", 1)[1].lstrip("\n")
    paragraph, rest = body.split("\n\n", 1)
    assert not paragraph.startswith(("```", "#", "-", "|")) and "holdout" in paragraph
    assert rest.startswith("```sh\n")
    commands = [ln for ln in code_blocks(rest)[0].splitlines() if ln.strip()]
    assert len(commands) == 2
    assert "armlock demo" in commands[0] and "pip install ." in commands[0]
    assert "python -m pytest" in commands[1]


def test_readme_test_command_is_the_line_ci_runs() -> None:
    line = code_blocks(README)[0].splitlines()[1].split("  #")[0].strip()
    ci = [ln.strip() for ln in (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
          if ln.strip() and not ln.lstrip().startswith("#")]
    assert line in ci
    assert "npm ci" in line  # the Node tests need their packages on a fresh machine


DOCS = ["README.md", "DEVELOPERS.md", "shared/CONTRACT.md", "shared/REFERENCES.md",
        *sorted(p.relative_to(ROOT).as_posix() for p in (ROOT / "docs").glob("*.md"))]


def slug(heading: str) -> str:
    """The anchor a markdown heading gets (lower case, punctuation dropped, spaces to hyphens)."""
    return re.sub(r"[^\w\- ]", "", heading.lower()).strip().replace(" ", "-")


def anchors_of(text: str) -> set[str]:
    text = re.sub(r"^```.*?^```", "", text, flags=re.M | re.S)  # a `#` line in a code block is no heading
    return {slug(h) for h in re.findall(r"^#+ (.+)$", text, flags=re.M)}


def test_links_point_to_files_in_the_repo() -> None:
    for doc in DOCS:
        text = (ROOT / doc).read_text(encoding="utf-8")
        for target in re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", text):
            if target.startswith(("http://", "https://", "mailto:")):
                continue
            assert (ROOT / doc).parent.joinpath(target).exists(), f"{doc}: link to missing {target}"
        assert "DESIGN.md" not in text, doc


def test_readme_anchors_exist() -> None:
    anchors = anchors_of(README)
    for anchor in re.findall(r"\]\(#([^)]+)\)", README):
        assert anchor in anchors, anchor


def test_anchors_into_other_pages_exist() -> None:
    # `[x](page.md#anchor)` and `[x](#anchor)` in the README, DEVELOPERS.md and every page of docs/
    for doc in DOCS:
        text = (ROOT / doc).read_text(encoding="utf-8")
        for target, anchor in re.findall(r"\]\(([^)#\s]*)#([^)\s]+)\)", text):
            if target.startswith(("http://", "https://")):
                continue
            page = (ROOT / doc).parent.joinpath(target) if target else ROOT / doc
            if page.suffix == ".md":
                assert anchor in anchors_of(page.read_text(encoding="utf-8")), f"{doc}: {target}#{anchor}"


def test_readme_is_a_front_door_and_docs_has_the_rest() -> None:
    assert README.count("\n") <= 600, f"README.md has {README.count(chr(10))} lines; move long text to docs/"
    # the set-up commands say how long they take
    opening = README[:README.index("\n## ")]
    assert "10-15 s" in opening and "6-15 minutes" in opening and "approximate" in opening
    # every page of docs/ is listed in its index, and the README links the index
    index = (ROOT / "docs" / "README.md").read_text(encoding="utf-8")
    assert "](docs/README.md)" in README
    for page in (ROOT / "docs").glob("*.md"):
        if page.name != "README.md":
            assert f"]({page.name})" in index, f"docs/README.md does not list {page.name}"


def test_synopsis_of_every_command_lists_all_its_options() -> None:
    reference = code_blocks(section("Command reference"))[0]
    group = typer.main.get_command(app)
    entries: list[str] = []
    for ln in reference.splitlines():  # a synopsis may continue on indented lines
        if ln.startswith("armlock "):
            entries.append(ln)
        elif ln.startswith(" ") and entries:
            entries[-1] += " " + ln.strip()
    for name in group.list_commands(None):  # type: ignore[attr-defined]
        text = " ".join(e for e in entries if e.split()[1] == name)
        assert text, f"no synopsis of `armlock {name}` in the README's command reference"
        for param in group.commands[name].params:  # type: ignore[attr-defined]
            for opt in param.opts:
                if opt.startswith("--") and opt != "--help":
                    assert re.search(rf"{re.escape(opt)}\b", text), f"`armlock {name}` synopsis lacks {opt}"


def test_snippet_sizes_in_the_readme_are_the_rendered_sizes(tmp_path: Path) -> None:
    # the README's example spec: `armlock init spring-retargeting`, whose salt is always 24 hex digits
    spec_path = tmp_path / "spring-retargeting.toml"
    # A fixed salt: the snippet carries the experiment name's bucket under this salt (its load-time
    # self-test), whose digit count varies by salt, so a random salt moves the size by a few bytes.
    text = render_spec_toml("spring-retargeting", [("holdout", 1000), ("exposed", 9000)])
    text = re.sub(r'^salt = "[0-9a-f]{24}"', 'salt = "000000000000000000000000"', text, count=1, flags=re.M)
    spec_path.write_text(text, encoding="utf-8")
    spec = load_spec(spec_path)
    for form in ("html", "js"):
        size = len(render_snippet(spec, form).encode("utf-8"))
        pattern = rf"\({form}, ([\d,]+) bytes\) for experiment 'spring-retargeting'"
        quoted = re.search(pattern, README)
        assert quoted, pattern
        assert int(quoted.group(1).replace(",", "")) == size, (form, size)
    js_kb = len(render_snippet(spec, "js").encode("utf-8")) / 1000
    assert f"about {js_kb:.1f} KB raw" in README


def test_demo_figures_in_the_readme_come_from_the_code() -> None:
    from armlock import demo as demo_lib

    text = section("What the demo shows: `armlock demo`")
    assert f"{demo_lib.UNITS:,} visitors" in text
    assert demo_lib.WEEKS == 12 and "twelve weeks" in text

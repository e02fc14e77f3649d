"""One page for all tests: a folder of specs and their histories as a JSON document and a static HTML page.

For each spec of the folder: the latest recorded audit (verdict, what failed, what changed since
the run before), weeks and units against the plan, the latest recorded readout (its gate and, when
the readout records one, its decision), and links to the reports in the folder that carry the
spec's fingerprint. Reads only spec files, history files and the first bytes of report files.
"""

from __future__ import annotations

import os
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

from armlock.assign import ArmlockError, __version__, load_spec
from armlock.assign.portfolio import folder_specs
from armlock.shared.words import answer_phrase

SCHEMA = "armlock.overview/1"
REPORT_SUFFIXES = (".html", ".json", ".md")
HEAD_BYTES = 16_384  # a report names its spec's fingerprint near its top (title, header or first keys)


def _day(value: datetime | None) -> str | None:
    return value.astimezone(UTC).date().isoformat() if value is not None else None


def _figure(run: dict[str, Any], key: str) -> Any:
    return run.get("figures", {}).get(key, {}).get("value")


def _reports(fingerprint: str, folders: list[Path], page_dir: Path) -> list[dict[str, str]]:
    """Report files (html, json, markdown) in `folders` that name this fingerprint, linked from the page."""
    out: dict[Path, dict[str, str]] = {}
    for folder in folders:
        for p in sorted(folder.iterdir()) if folder.is_dir() else []:
            if p.suffix.lower() not in REPORT_SUFFIXES or not p.is_file() or p.resolve() in out:
                continue
            try:
                with p.open("rb") as fh:
                    head = fh.read(HEAD_BYTES)
            except OSError:
                continue
            if fingerprint.encode() in head:
                out[p.resolve()] = {"name": p.name, "href": Path(os.path.relpath(p.resolve(), page_dir.resolve())).as_posix()}
    return list(out.values())


def _progress(spec: Any, as_of: str | None) -> dict[str, Any]:
    """Weeks since the start (to the latest as-of date, else today) and the planned weeks, if an end is set."""
    start = spec.start.astimezone(UTC).date()
    upto = date.fromisoformat(as_of) if as_of else datetime.now(UTC).date()
    weeks = max((upto - start).days + 1, 0) / 7
    planned = ((spec.end.astimezone(UTC).date() - start).days / 7) if spec.end is not None else None
    ended = spec.end is not None and upto >= spec.end.astimezone(UTC).date()
    return {"weeks": round(weeks, 1), "planned_weeks": round(planned, 1) if planned is not None else None,
            "reached_end": ended}


def entry_of(spec_path: Path, page_dir: Path, history: str | None = None) -> dict[str, Any]:
    """One test's line of the page: everything the HTML shows, as plain JSON values. `history` is a
    folder of history files, or a PostgreSQL URL (default: the file beside the spec)."""
    from armlock.shared.history import changes, default_history_path, load, load_readouts, not_passing
    from armlock.shared.history_pg import is_url, shown

    spec = load_spec(spec_path)
    hist: Path | str = (history if is_url(history) else Path(history) / default_history_path(spec_path).name
                        ) if history else default_history_path(spec_path)
    hist_name = shown(hist) if isinstance(hist, str) else hist.name
    entry: dict[str, Any] = {
        "experiment": spec.name, "spec": Path(os.path.relpath(spec_path.resolve(), page_dir.resolve())).as_posix(),
        "fingerprint": spec.fingerprint, "start": _day(spec.start), "end": _day(spec.end),
        "arms": [{"name": a.name, "weight": a.weight, "role": a.role} for a in spec.arms],
        "status": "none", "as_of": None, "not_passing": None, "checks": [], "changes": [],
        "units": None, "planned_units": spec.readout.planned_units or None, "readout": None, "notes": [],
    }
    try:
        runs = load(hist, spec.fingerprint)
        readouts = load_readouts(hist, spec.fingerprint)
    except ArmlockError as exc:  # one unreadable history never hides the other tests: it is said here
        entry["status"] = "unreadable"
        entry["notes"].append(str(exc))
        runs, readouts = [], []
    if not runs and entry["status"] == "none":
        entry["notes"].append(f"no audit recorded in {hist_name} (record one with armlock audit --record)")
    if runs:
        last = runs[-1]
        entry.update(status=last["verdict"], as_of=last["as_of"], not_passing=not_passing(last),
                     units=_figure(last, "srm.units"),
                     checks=[{"id": cid, "title": c.get("title", cid), "status": c.get("status")}
                             for cid, c in last.get("checks", {}).items()],
                     changes=changes(runs[-2], last, spec.audit.thresholds) if len(runs) >= 2 else [])
    if readouts:
        r = readouts[-1]
        decision = _figure(r, "decision")
        entry["readout"] = {"as_of": r["as_of"], "status": r["status"], "decision": decision,
                            "decision_text": answer_phrase(decision) if decision else None,
                            "basis": _figure(r, "basis")}
    entry.update(_progress(spec, entry["as_of"]))
    folders = list(dict.fromkeys([spec_path.parent.resolve(), page_dir.resolve()]))
    entry["reports"] = _reports(spec.fingerprint, folders, page_dir)
    return entry


def build_overview(folder: Path, page_dir: Path, history: str | None = None) -> dict[str, Any]:
    """The whole page as JSON: every spec of `folder` (by file name), salt clashes and notes."""
    from armlock.assign.portfolio import SPEC_SUFFIX

    notes: list[str] = []
    sibs = folder_specs(folder, notes=notes)
    tests = []
    for s in sibs:
        try:
            tests.append(entry_of(s.path, page_dir, history))
        except ArmlockError as exc:  # an invalid spec is shown as such, never left out
            tests.append({"experiment": s.name, "spec": s.path.name, "status": "unreadable",
                          "notes": [str(exc)], "checks": [], "changes": [], "reports": [], "arms": []})
    by_salt: dict[str, list[str]] = {}
    for s in sibs:
        by_salt.setdefault(s.salt, []).append(s.path.name)
    clashes = [names for names in by_salt.values() if len(names) > 1]
    for names in clashes:
        notes.append(f"{' and '.join(names)} share one salt: their arms nest and each confounds the other "
                     "(armlock check refuses them; give one a fresh salt)")
    if not sibs:
        notes.append(f"{folder} has no spec file (*{SPEC_SUFFIX} with a salt and arms)")
    return {"schema": SCHEMA, "folder": str(folder), "generated_at":
            datetime.now(UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z"),
            "armlock_version": __version__, "notes": notes, "salt_clashes": clashes, "tests": tests}

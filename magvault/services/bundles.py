"""Freezing a selection into a citable, checksummed dataset (a Frictionless Data Package).

A bundle folder holds the raw exports byte for byte, each run's normalised SI
table, the derived transitions and results with the derivations that made
them, the specimens with their lineage and compositions, a datapackage.json
describing every table, a CITATION.cff, and SHA256SUMS over every file.  The
bundle's manifest and the checksum of SHA256SUMS are recorded in the vault, so
a later `verify` can tell whether the folder still holds what was published.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd
from sqlalchemy import func, select

from ..errors import InvalidValue, NotFound
from ..store.models import Bundle, RawFile
from . import events

if TYPE_CHECKING:
    from ..vault import Vault

SUMS = "SHA256SUMS"


def _safe_name(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or "file"


def _sha(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _table(frame: pd.DataFrame, out: Path, path: Path) -> dict[str, Any]:
    """Write ``frame`` as CSV at ``out/path``; return its Data Package resource description."""
    frame.to_csv(out / path, index=False, lineterminator="\n")
    kinds = {"f": "number", "i": "integer", "b": "boolean"}
    return {"path": path.as_posix(), "format": "csv", "mediatype": "text/csv",
            "schema": {"fields": [{"name": str(c), "type": kinds.get(frame[c].dtype.kind, "string")}
                                  for c in frame.columns]}}


def build(vault: "Vault", out: Path, *, name: str, specimens: list[str] | None, kinds: list[str] | None,
          title: str | None, authors: list[str] | None) -> dict[str, Any]:
    """Write the bundle into ``out`` (which must not exist or be empty) and record it in the vault."""
    out = Path(out)
    if out.exists() and any(out.iterdir()):
        raise InvalidValue(f"--out: {out} is not empty; choose a new folder for the bundle", field="out")
    runs = vault.runs(status="recorded")
    every = vault.specimens()
    if specimens:
        unknown = sorted(set(specimens) - set(every["code"]))
        if unknown:
            raise NotFound(f"--specimen: no specimen {', '.join(unknown)}", field="specimen")
        runs = runs[runs["specimen"].isin(specimens)]
    if kinds:
        runs = runs[runs["kind"].isin(kinds)]
    if runs.empty:
        raise InvalidValue("bundle: the selection holds no recorded runs", field="specimen")
    chosen = sorted(set(runs["specimen"]))
    out.mkdir(parents=True, exist_ok=True)
    for folder in ("raw", "series", "derived"):
        (out / folder).mkdir()
    resources = []
    raw_names: dict[str, str] = {}
    for sha, source in zip(runs["sha256"], runs["source_name"]):
        if sha in raw_names:
            continue
        data, first, media = vault.raw_file(sha)
        rel = Path("raw") / f"{sha[:12]}-{_safe_name(source or first)}"
        (out / rel).write_bytes(data)  # the exact bytes, never re-encoded
        raw_names[sha] = rel.as_posix()
        resources.append({"name": f"raw-{sha[:12]}", "path": rel.as_posix(), "mediatype": media, "hash": sha,
                          "bytes": len(data)})
    for run_id in runs["id"]:
        res = _table(vault.series(int(run_id)), out, Path("series") / f"run-{int(run_id)}.csv")
        resources.append({"name": f"series-run-{int(run_id)}", **res})
    run_ids = set(int(i) for i in runs["id"])
    transitions = vault.transitions()
    transitions = transitions[transitions["run"].isin(run_ids)]
    results = vault.results()
    results = results[results["run"].isin(run_ids)]
    derivations = {d["id"]: d for r in sorted(run_ids) for d in vault.derivations(r, all_versions=False)}
    spec_rows = every[every["code"].isin(chosen)]
    run_table = runs.assign(raw_path=runs["sha256"].map(raw_names),
                            conditions=runs["conditions"].map(lambda c: json.dumps(events.jsonable(c or {}))))
    for frame, rel, label in ((spec_rows, "specimens.csv", "specimens"), (run_table, "runs.csv", "runs"),
                              (transitions, "derived/transitions.csv", "transitions"),
                              (results, "derived/results.csv", "results")):
        res = _table(frame, out, Path(rel))
        resources.append({"name": label, **res})
    (out / "derived" / "derivations.json").write_text(
        json.dumps(events.jsonable(list(derivations.values())), indent=1, sort_keys=True) + "\n")
    resources.append({"name": "derivations", "path": "derived/derivations.json", "format": "json",
                      "mediatype": "application/json"})
    detail = {code: vault.specimen(code) for code in chosen}
    (out / "specimens.json").write_text(json.dumps(events.jsonable(detail), indent=1, sort_keys=True) + "\n")
    resources.append({"name": "specimen-records", "path": "specimens.json", "format": "json",
                      "mediatype": "application/json"})

    with vault.write() as s:
        version = (s.scalar(select(func.max(Bundle.version)).where(Bundle.name == name)) or 0) + 1
    package = {"name": _safe_name(name).lower(), "version": str(version), "title": title or name,
               "profile": "data-package", "licenses": [], "resources": resources,
               "sources": [{"title": "magvault vault", "path": vault.url.split("@")[-1]}],
               "selection": {"specimens": chosen, "kinds": kinds or None}}
    (out / "datapackage.json").write_text(json.dumps(package, indent=1) + "\n")
    people = authors or [events.current_user()]
    cff = ["cff-version: 1.2.0", "message: If you use this dataset, please cite it as below.",
           f"title: {json.dumps(title or name)}", f"version: {version}", "type: dataset", "authors:"]
    cff += [f"  - name: {json.dumps(a)}" for a in people]
    (out / "CITATION.cff").write_text("\n".join(cff) + "\n")
    files = sorted(p for p in out.rglob("*") if p.is_file() and p.name != SUMS)
    sums = "".join(f"{_sha(p)}  {p.relative_to(out).as_posix()}\n" for p in files)
    (out / SUMS).write_text(sums)
    digest = hashlib.sha256(sums.encode()).hexdigest()
    manifest = {"files": len(files), "runs": sorted(run_ids), "specimens": chosen, "sums_sha256": digest}
    with vault.write() as s:
        s.add(Bundle(name=name, version=version, selection={"specimens": chosen, "kinds": kinds or None},
                     manifest=manifest, sha256=digest))
        events.record(s, "create", "bundle", f"{name} v{version}", after=manifest, message=str(out))
    return {"name": name, "version": version, "folder": str(out), **manifest}


def verify_folder(out: Path) -> list[str]:
    """Problems with a bundle folder (empty when every checksum matches and nothing was added)."""
    out = Path(out)
    sums = out / SUMS
    if not sums.is_file():
        raise InvalidValue(f"{out}: no {SUMS} here; is this a magvault bundle?", field="bundle")
    problems, listed = [], set()
    for line_no, line in enumerate(sums.read_text().splitlines(), 1):
        try:
            digest, rel = line.split("  ", 1)
        except ValueError:
            problems.append(f"{SUMS} line {line_no}: unreadable")
            continue
        listed.add(rel)
        path = out / rel
        if not path.is_file():
            problems.append(f"{rel}: missing")
        elif _sha(path) != digest:
            problems.append(f"{rel}: changed since the bundle was made")
    extra = sorted(p.relative_to(out).as_posix() for p in out.rglob("*")
                   if p.is_file() and p.name != SUMS and p.relative_to(out).as_posix() not in listed)
    problems += [f"{rel}: not part of the bundle" for rel in extra]
    return problems


def verify_store(vault: "Vault") -> list[str]:
    """Problems in the vault's raw store: bytes that no longer hash to their address."""
    problems = []
    with vault.read() as s:
        for raw_id, sha in s.execute(select(RawFile.id, RawFile.sha256)).all():
            data = s.scalar(select(RawFile.data).where(RawFile.id == raw_id))
            if hashlib.sha256(data).hexdigest() != sha:
                problems.append(f"raw file {sha[:12]}: stored bytes do not match their SHA-256")
    return problems

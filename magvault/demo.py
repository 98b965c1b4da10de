"""Build the demo collection: generate the invented exports, then log them through the Vault.

The generator (``seed_demo``, installed as ``magvault.seed_demo``) writes the
exports, ``plan.json`` (what to register, in order) and ``manifest.json`` (what
it planted).  This module feeds the plan through the same Vault API that users
call, so the demo exercises the real import path.  Re-running replaces what the
demo itself wrote (its database and its folder) and nothing else.
"""

from __future__ import annotations

import json
import shutil
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from .paths import part

DB_NAME = "magvault-demo.db"
FOLDER = "magvault-demo"
DEFAULT_SEED = 20261


@dataclass
class DemoSummary:
    database: Path
    folder: Path
    manifest: Path
    specimens: int
    runs_by_kind: dict[str, int]
    planted: list[str]
    seconds: float
    derived: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)

    def text(self) -> str:
        runs = ", ".join(f"{n} {k}" for k, n in sorted(self.runs_by_kind.items()))
        lines = [f"demo vault: {self.database}",
                 f"exports and manifest: {self.folder} (manifest {self.manifest.name})",
                 f"{self.specimens} specimens; {sum(self.runs_by_kind.values())} runs ({runs})"]
        if self.derived:
            lines.append("derived: " + ", ".join(f"{k} {v}" for k, v in self.derived.items()))
        if self.planted:
            lines.append("planted in the low-temperature transition:")
            lines += [f"  - {p}" for p in self.planted]
        lines.append(f"built in {self.seconds:.0f} s")
        return "\n".join(lines)


def build(out_dir: str | Path = ".", *, seed: int = DEFAULT_SEED, derive: bool = True,
          progress: Callable[[str], None] | None = None) -> DemoSummary:
    """Generate and load the demo into ``out_dir/magvault-demo.db``; returns a summary."""
    from . import open as open_vault

    say = progress or (lambda _msg: None)
    t0 = time.perf_counter()
    out = Path(out_dir).resolve()
    db, folder = out / DB_NAME, out / FOLDER
    for stale in (db, db.with_name(db.name + "-wal"), db.with_name(db.name + "-shm")):
        stale.unlink(missing_ok=True)
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    say("generating invented exports")
    part("seed_demo").generate(folder, seed=seed)
    plan = json.loads((folder / "plan.json").read_text())
    manifest = json.loads((folder / "manifest.json").read_text())
    vault = open_vault(db, create=True)
    try:
        say("registering specimens and importing runs")
        warnings = load_plan(vault, plan, folder)
        derived: dict[str, Any] = {}
        if derive and hasattr(vault, "derive"):
            say("deriving transitions and results")
            derived = vault.derive(all=True)
        counts = Counter(vault.runs()["kind"])
        n_specimens = len(vault.specimens())
    finally:
        vault.close()
    planted = [f"{s['specimen']}: {s['cause']}" for s in manifest.get("shifts", [])]
    return DemoSummary(database=db, folder=folder, manifest=folder / "manifest.json", specimens=n_specimens,
                       runs_by_kind=dict(counts), planted=planted, seconds=time.perf_counter() - t0,
                       derived={k: v for k, v in derived.items() if isinstance(v, (int, float))},
                       warnings=warnings)


def load_plan(vault, plan: dict[str, Any], folder: Path) -> list[str]:
    """Register everything in ``plan`` through the Vault, in order; returns import warnings."""
    notes: list[str] = []
    for o in plan.get("origins", []):
        vault.add_origin(o["name"], kind=o.get("kind"), notes=o.get("notes"))
    for inst in plan.get("instruments", []):
        vault.add_instrument(inst["name"], kind=inst["kind"], place=inst.get("place"))
        for cal in inst.get("calibrations", []):
            vault.calibrate_instrument(inst["name"], at=cal["at"], note=cal.get("note"))
    for s in plan.get("specimens", []):
        out = vault.add_specimen(s["code"], parent=s.get("parent"), mass=s.get("mass"), kind=s.get("kind"),
                                 dims=s.get("dims"), origin=s.get("origin"), storage=s.get("storage"),
                                 notes=s.get("notes"), same_orientation=bool(s.get("same_orientation")),
                                 created=s.get("created"))
        notes += out["warnings"]
    for o in plan.get("orientations", []):
        vault.add_orientation(o["specimen"], system=o["system"], method=o["method"],
                              matrix=",".join(repr(float(v)) for v in o["matrix"]), cell=o.get("cell"),
                              uncertainty=o.get("uncertainty"), measured=o.get("at"))
    for c in plan.get("compositions", []):
        wt = {el: tuple(v) for el, v in c["wt"].items()} if c.get("wt") else None
        at = {el: tuple(v) for el, v in c["at"].items()} if c.get("at_percent") else None
        vault.add_composition(c["specimen"], method=c["method"], wt=wt, at=at,
                              superstructure=c.get("superstructure"), measured=c.get("at"))
    for t in plan.get("treatments", []):
        vault.add_treatment(t["specimen"], kind=t["kind"], at=t["at"], conditions=t.get("conditions") or {})
    for r in plan.get("runs", []):
        overrides = list(r.get("set") or [])
        if r.get("started") and not any(o.startswith("started") for o in overrides):
            overrides.append(f"started={r['started']}")
        report = vault.ingest(folder / r["file"], specimen=r["specimen"], kind=r["kind"],
                              instrument=r.get("instrument"), operator=r.get("operator"),
                              direction=r.get("direction"), group=r.get("group"), overrides=overrides)
        notes += list(report.warnings)
    return notes

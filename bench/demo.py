"""Build time of the demo collection (exports generated, imported and derived).

    python bench/demo.py [--quick]

Goal (bench brief): ``magvault.demo.build(folder)`` -- generating the invented
exports, registering specimens, importing every run through the Vault and
deriving transitions and results -- takes about a minute or less on a 2-core
machine.  Printed against 60 s, with the time of each phase (from the build's
own progress messages).  Each repeat builds into a fresh temporary folder.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

from _common import Row, arguments, machine, print_table, seconds

GOAL_S = 60.0


def build_once() -> tuple[float, list[tuple[str, float]], str]:
    import magvault.demo

    folder = Path(tempfile.mkdtemp(prefix="magvault-bench-demo-"))
    marks: list[tuple[str, float]] = []
    try:
        t0 = time.perf_counter()
        summary = magvault.demo.build(folder, progress=lambda msg: marks.append((msg, time.perf_counter())))
        total = time.perf_counter() - t0
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    ends = [t for _, t in marks[1:]] + [t0 + total]
    phases = [(msg, end - start) for (msg, start), end in zip(marks, ends)]
    counts = ", ".join(f"{n} {k}" for k, n in sorted(summary.runs_by_kind.items()))
    return total, phases, f"{summary.specimens} specimens; runs: {counts}; derived: {summary.derived}"


def main() -> int:
    args = arguments(__doc__.splitlines()[0])
    repeats = 1 if args.quick else 2
    print(f"magvault demo benchmark -- {machine()}")
    best, best_phases, what = float("inf"), [], ""
    for _ in range(repeats):
        total, phases, what = build_once()
        if total < best:
            best, best_phases = total, phases
    print(what)
    print_table(f"demo build (best of {repeats})", [
        Row("magvault.demo.build (with derivations) / 60 s", "<= 1.0 (about a minute)",
            f"{best / GOAL_S:.2f} ({seconds(best)})", best <= GOAL_S)])
    print("\nphases of the best build:")
    for msg, took in best_phases:
        print(f"  {msg:45s} {seconds(took):>10s}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

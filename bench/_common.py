"""Shared helpers for magvault's benchmarks: timing, peak memory, tables, databases.

Benchmarks measure ratios on one machine in one run (DESIGN.md section 8):
the baseline and our code run in the same process, interleaved, and the best of
several repeats is kept, because the benchmark machines are shared and a
neighbour's job slows whatever happens to run at that moment.
"""

from __future__ import annotations

import argparse
import contextlib
import datetime as dt
import os
import platform
import subprocess
import sys
import time
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

ROOT = Path(__file__).resolve().parent.parent
PG_ADMIN_URL = os.environ.get("MAGVAULT_BENCH_PG", "postgresql+psycopg://postgres@127.0.0.1:5432/test")


def arguments(description: str, extra: Callable[[argparse.ArgumentParser], None] | None = None
              ) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--quick", action="store_true",
                        help="smaller sizes and fewer repeats (a smoke run; its ratios are not the goals' numbers)")
    if extra is not None:
        extra(parser)
    return parser.parse_args()


def machine() -> str:
    """One line naming the machine and the software the numbers belong to."""
    import numpy
    import pandas
    import sqlalchemy

    return (f"{dt.date.today().isoformat()}; {platform.machine()}, {os.cpu_count()} CPUs (shared); "
            f"Python {platform.python_version()}, numpy {numpy.__version__}, pandas {pandas.__version__}, "
            f"SQLAlchemy {sqlalchemy.__version__}")


def clock(fn: Callable[[], object]) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def interleaved_best(contenders: dict[str, Callable[[], object]], repeats: int) -> dict[str, float]:
    """Best time of each contender over ``repeats`` rounds, run in turn within each round.

    A contender either returns its own measured seconds as a float (when it has untimed
    setup, such as creating a fresh database) or anything else, in which case its whole
    call is timed.
    """
    best = {name: float("inf") for name in contenders}
    for _ in range(repeats):
        for name, fn in contenders.items():
            t0 = time.perf_counter()
            own = fn()
            took = time.perf_counter() - t0
            if isinstance(own, float):
                took = own
            best[name] = min(best[name], took)
    return best


def peak_rss_bytes(code: str, *, cwd: Path | None = None, env: dict[str, str] | None = None) -> int:
    """Peak resident memory (VmHWM, from the operating system) of a fresh interpreter running ``code``."""
    probe = (code + "\n"
             "for _line in open('/proc/self/status'):\n"
             "    if _line.startswith('VmHWM:'):\n"
             "        print('VmHWM', int(_line.split()[1]) * 1024)\n")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=cwd or ROOT,
                         env={**os.environ, **(env or {})}, check=False)
    if out.returncode != 0:
        raise RuntimeError(f"memory probe failed:\n{out.stderr}")
    for line in out.stdout.splitlines():
        if line.startswith("VmHWM "):
            return int(line.split()[1])
    raise RuntimeError(f"memory probe printed no VmHWM:\n{out.stdout}\n{out.stderr}")


@dataclass
class Row:
    measure: str
    goal: str
    measured: str
    passed: bool | None  # None: information only

    @property
    def status(self) -> str:
        return "" if self.passed is None else ("PASS" if self.passed else "MISS")


def print_table(title: str, rows: list[Row]) -> None:
    head = ("measure", "goal", "measured", "")
    cells = [head] + [(r.measure, r.goal, r.measured, r.status) for r in rows]
    widths = [max(len(c[k]) for c in cells) for k in range(4)]
    print(f"\n{title}")
    for k, c in enumerate(cells):
        print("  " + "  ".join(v.ljust(w) for v, w in zip(c, widths)).rstrip())
        if k == 0:
            print("  " + "  ".join("-" * w for w in widths))


def seconds(value: float) -> str:
    return f"{value * 1000:.1f} ms" if value < 1 else f"{value:.2f} s"


# --- PostgreSQL --------------------------------------------------------------------------------

def postgres_reason() -> str | None:
    """None when the benchmark server answers and may create databases, else why not."""
    try:
        import psycopg

        with psycopg.connect(**_pg_params(), connect_timeout=3, autocommit=True):
            return None
    except Exception as exc:  # reported in the table, never hidden
        return f"{type(exc).__name__}: {str(exc).strip().splitlines()[0] if str(exc).strip() else ''}"


def _pg_params(dbname: str | None = None) -> dict:
    from sqlalchemy.engine import make_url

    u = make_url(PG_ADMIN_URL)
    return dict(host=u.host, port=u.port or 5432, user=u.username, password=u.password,
                dbname=dbname or u.database)


@contextlib.contextmanager
def postgres_database() -> Iterator[str]:
    """A fresh database ``magvault_bench_<random>`` for one benchmark run, dropped afterwards."""
    import psycopg
    from sqlalchemy.engine import make_url

    name = f"magvault_bench_{uuid.uuid4().hex[:10]}"
    with psycopg.connect(**_pg_params(), autocommit=True) as conn:
        conn.execute(f'CREATE DATABASE "{name}"')
    try:
        yield make_url(PG_ADMIN_URL).set(database=name).render_as_string(hide_password=False)
    finally:
        with psycopg.connect(**_pg_params(), autocommit=True) as conn:
            conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')

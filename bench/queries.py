"""Collection queries over 1k, 10k and 100k runs, against hand-written SQL, on SQLite and PostgreSQL.

    python bench/queries.py [--quick] [--backend sqlite|postgresql|both] [--profile N]

DESIGN.md section 8: transitions and shifts within 1.5x of the equivalent
hand-written SQL on the same database -- one raw DB-API statement returning the
same rows, plus the same numpy aggregation where SQL has none (here: the same
pure function of :mod:`magvault.queries` on a DataFrame built from the raw rows,
so the ratio measures our fetch path) -- and, for indexed look-ups (one
specimen, one kind), 10x more runs costs at most 2x more time.  Full listings
should grow about linearly (printed for information).

The collections are invented: specimens ``SYN-000001``..., ten runs each (six
low-temperature and two high-temperature thermomagnetic sweeps, two hysteresis
loops), one raw-file row per recorded run, one derivation per derived run with
its transitions (heating and cooling primaries, some second components and
per-method rows, an older superseded version for one run in ten), a few
retracted and superseded runs, and one composition analysis for four specimens
in five.  They are written straight through SQLAlchemy Core ``executemany``
(the bench's own bulk path; the vault's services are not used for loading).
Every comparison first checks that our query and the baseline return the same
rows.  PostgreSQL gets a fresh database per collection (``magvault_bench_*``,
dropped at the end) and ``ANALYZE`` after loading, as autovacuum would do.
"""

from __future__ import annotations

import cProfile
import datetime as dt
import hashlib
import pstats
import shutil
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from _common import (Row, arguments, interleaved_best, machine, postgres_database, postgres_reason,
                     print_table, seconds)

GOAL_RATIO = 1.5
GOAL_GROWTH = 2.0
RUNS_PER_SPECIMEN = 10
LOOKUPS_PER_TIMING = 20
BASE_TIME = dt.datetime(2025, 3, 3, 8, 0, tzinfo=dt.timezone.utc)
KIND = "low-t"
INACTIVE = ("retracted", "superseded")


# --- the synthetic collection -------------------------------------------------------------------

def build_collection(vault, n_runs: int, seed: int = 11) -> list[str]:
    """Load an invented collection of ``n_runs`` runs; returns the specimen codes."""
    from sqlalchemy import bindparam, insert, text, update

    from magvault.store.models import (Composition, Derivation, DerivationInput, RawFile, Run, Specimen,
                                       Transition)

    rng = np.random.default_rng(seed)
    n_specimens = n_runs // RUNS_PER_SPECIMEN
    specimens, compositions, raws, runs, derivations, inputs, transitions = [], [], [], [], [], [], []
    supersede: list[dict] = []
    codes = [f"SYN-{i + 1:06d}" for i in range(n_specimens)]
    run_id = derivation_id = 0
    for i, code in enumerate(codes):
        sid = i + 1
        mass = float(rng.uniform(5e-6, 5e-5))
        specimens.append(dict(id=sid, code=code, kind="single crystal", mass_kg=mass, same_orientation=False,
                              created_at=BASE_TIME))
        x = float(rng.uniform(0.09, 0.13))
        has_x = rng.random() < 0.8
        if has_x:
            compositions.append(dict(specimen_id=sid, method="microprobe", basis="wt", amounts={}, x=x,
                                     x_uncertainty=0.002, fe_s_ratio=1.0 - x, fe_s_ratio_uncertainty=0.002,
                                     superstructure="4C", measured_at=BASE_TIME, warnings=[]))
        shifted = 3.0 if rng.random() < 0.01 else 0.0  # a planted shift in one specimen in a hundred
        first = run_id + 1
        for j in range(RUNS_PER_SPECIMEN):
            run_id += 1
            kind = "hysteresis" if j >= 8 else "thermomagnetic"
            status = "recorded"
            successor = None
            draw = rng.random()
            if j < 5 and draw < 0.02:
                status, successor = "superseded", run_id + 1
            elif draw < 0.05:
                status = "retracted"
            started = BASE_TIME + dt.timedelta(hours=3 * i, minutes=7 * j, seconds=float(rng.integers(0, 60)),
                                               microseconds=int(rng.integers(0, 1_000_000)) if j % 3 == 0 else 0)
            raws.append(dict(id=run_id, sha256=hashlib.sha256(f"bench run {run_id}".encode()).hexdigest(), size=64,
                             media_type="text/csv", first_name=f"sweep-{run_id}.csv", data=b"\0" * 64,
                             stored_at=started))
            runs.append(dict(id=run_id, specimen_id=sid, kind=kind, status=status, operator="recorder-3",
                             started=started, conditions={"field_T": float(rng.choice([0.0, 0.1, 1.0])),
                                                          "sweep_rate_K_per_s": 0.0333, "mass_kg": mass,
                                                          "atmosphere": "helium", "operator": "recorder-3"},
                             direction=str(rng.choice(["X", "Y", "Z"])), raw_file_id=run_id,
                             source_name=f"sweep-{run_id}.csv",
                             status_reason="bench" if status != "recorded" else None, created_at=started))
            if successor is not None:  # set after loading: the successor row does not exist yet
                runs[-1]["status"] = "recorded"
                supersede.append({"rid": run_id, "by": successor})
            if kind == "hysteresis":
                continue
            versions = 2 if rng.random() < 0.1 else 1
            for version in range(versions):
                derivation_id += 1
                current = version == versions - 1
                method = "low-temperature-peaks" if j < 6 else "ordering-temperature"
                derivations.append(dict(
                    id=derivation_id, method=method, version=f"1.{version}", parameters={"grid_step_K": 0.1},
                    inputs_key=hashlib.sha256(f"bench derivation {derivation_id}".encode()).hexdigest(),
                    lineage_key=hashlib.sha256(f"bench lineage {run_id}".encode()).hexdigest(),
                    input_runs=[run_id], input_hashes=[], software_version="bench", operator="recorder-3",
                    created_at=started, current=current, warnings=[], diagnostics={}))
                inputs.append(dict(derivation_id=derivation_id, run_id=run_id, series_id=None))
                common = dict(derivation_id=derivation_id, run_id=run_id, specimen_id=sid, current=current,
                              ambiguous=False, diagnostics={"height": 1.0})
                if j < 6:
                    t_heat = 32.0 + 40.0 * (x - 0.11) + shifted + float(rng.normal(0.0, 0.3))
                    u = float(rng.uniform(0.2, 0.6))
                    transitions.append(dict(common, kind="low-t", temperature_k=t_heat, uncertainty_k=u,
                                            method="dmdt-peak", branch="heating", component=1, is_primary=True,
                                            width_k=2.0))
                    transitions.append(dict(common, kind="low-t", temperature_k=t_heat + 1.5, uncertainty_k=u,
                                            method="dmdt-peak", branch="cooling", component=1, is_primary=True,
                                            width_k=2.0))
                    if rng.random() < 0.2:
                        transitions.append(dict(common, kind="low-t", temperature_k=t_heat - 4.0,
                                                uncertainty_k=u, method="dmdt-peak", branch="heating",
                                                component=2, is_primary=False, width_k=3.0))
                else:
                    t_order = float(590.0 + rng.normal(0.0, 2.0))
                    for branch, offset in (("heating", 0.0), ("cooling", -3.0)):
                        transitions.append(dict(common, kind="ordering", temperature_k=t_order + offset,
                                                uncertainty_k=1.0, method="combined", branch=branch, component=1,
                                                is_primary=True, width_k=None))
                    for method in ("dmdt-extremum", "two-tangent"):
                        transitions.append(dict(common, kind="ordering", temperature_k=t_order + 0.5,
                                                uncertainty_k=1.5, method=method, branch="heating", component=1,
                                                is_primary=False, width_k=None))
        assert run_id == first + RUNS_PER_SPECIMEN - 1

    # Core executemany on the tables (dictionaries keyed by column name).
    with vault.engine.begin() as conn:
        for model, rows in ((Specimen, specimens), (Composition, compositions), (RawFile, raws), (Run, runs),
                            (Derivation, derivations), (DerivationInput, inputs), (Transition, transitions)):
            for start in range(0, len(rows), 20_000):
                conn.execute(insert(model.__table__), rows[start:start + 20_000])
        run_table = Run.__table__
        conn.execute(update(run_table).where(run_table.c.id == bindparam("rid"))
                     .values(status="superseded", superseded_by_id=bindparam("by")), supersede)
        if vault.backend == "postgresql":
            for table, last in (("specimen", n_specimens), ("raw_file", run_id), ("run", run_id),
                                ("derivation", derivation_id)):
                conn.execute(text(f"SELECT setval(pg_get_serial_sequence('{table}', 'id'), {last})"))
    if vault.backend == "postgresql":
        with vault.engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
            conn.execute(text("ANALYZE"))
    return codes


# --- baselines: one raw DB-API statement each ---------------------------------------------------

LISTING_SQL = """
SELECT s.code, t.run_id, t.kind, t.temperature_k, t.uncertainty_k, t.method, t.branch, t.component,
       t.is_primary, t.width_k, t.ambiguous, t.derivation_id, t.current, r.kind, r.started
FROM transition t JOIN run r ON r.id = t.run_id JOIN specimen s ON s.id = t.specimen_id
WHERE t.current = {true} AND r.status NOT IN ('retracted', 'superseded') AND t.kind = {p} {extra}
ORDER BY s.code, r.started, t.run_id, t.kind, t.branch, t.component, t.is_primary DESC, t.method, t.id
"""

SHIFT_ROWS_SQL = """
SELECT s.code, t.run_id, r.started, t.temperature_k, t.uncertainty_k, {field} {x}
FROM transition t JOIN run r ON r.id = t.run_id JOIN specimen s ON s.id = t.specimen_id {join}
WHERE t.kind = {p} AND t.current = {true} AND t.component = 1 AND r.status NOT IN ('retracted', 'superseded')
  AND t.is_primary = {true} AND (t.branch = 'heating' OR t.branch IS NULL)
ORDER BY s.code, r.started, t.run_id
"""


class Baseline:
    """Hand-written SQL on the vault's own engine (same connection settings), through the raw DB-API."""

    def __init__(self, vault):
        self.vault = vault
        self.pg = vault.backend == "postgresql"
        self.p = "%s" if self.pg else "?"
        self.true = "true" if self.pg else "1"
        # One DB-API connection held for the whole run (taken from the vault's pool, so SQLite
        # has the vault's pragmas): the baseline pays for its statement and nothing else.
        self.conn = vault.engine.raw_connection()

    def close(self) -> None:
        self.conn.close()

    def fetch(self, sql: str, params: tuple) -> list[tuple]:
        cur = self.conn.cursor()
        cur.execute(sql, params)
        rows = cur.fetchall()
        cur.close()
        self.conn.rollback()
        return rows

    def listing(self, kind: str, *, specimen: str | None = None, primary_only: bool = False) -> list[tuple]:
        extra, params = "", [kind]
        if specimen is not None:
            extra += f" AND s.code = {self.p}"
            params.append(specimen)
        if primary_only:
            extra += f" AND t.is_primary = {self.true}"
        return self.fetch(LISTING_SQL.format(true=self.true, p=self.p, extra=extra), tuple(params))

    def shifts(self, kind: str, against: str) -> pd.DataFrame:
        from magvault.queries import shifts

        field = "(r.conditions ->> 'field_T')::float" if self.pg else "json_extract(r.conditions, '$.field_T')"
        trend = against == "trend"
        sql = SHIFT_ROWS_SQL.format(field=field, x=", c.x" if trend else "", p=self.p, true=self.true,
                                    join="LEFT JOIN composition c ON c.specimen_id = s.id" if trend else "")
        columns = ["specimen", "run", "started", "temperature_K", "uncertainty_K", "field_T"] + (["x"] if trend else [])
        rows = pd.DataFrame.from_records(self.fetch(sql, (kind,)), columns=columns)
        specimens = rows[["specimen", "x"]].drop_duplicates("specimen") if trend else None
        return shifts(rows.drop(columns=["x"]) if trend else rows, specimens, mode=against)


# --- checks that both sides answer the same question --------------------------------------------

def check_listing(ours: pd.DataFrame, rows: list[tuple], what: str) -> None:
    if len(ours) != len(rows):
        raise AssertionError(f"{what}: {len(ours)} rows from the vault, {len(rows)} from the baseline")
    if rows:
        theirs = np.asarray([r[3] for r in rows], dtype=float)
        if not np.array_equal(ours["temperature_K"].to_numpy(), theirs):
            raise AssertionError(f"{what}: temperatures differ between the vault and the baseline")
        if list(ours["run"]) != [int(r[1]) for r in rows]:
            raise AssertionError(f"{what}: row order differs between the vault and the baseline")


def check_shifts(ours: pd.DataFrame, theirs: pd.DataFrame, what: str) -> None:
    cols = ["specimen", "temperature_K", "uncertainty_K", "reference_K", "shift_K", "sigma", "flagged", "note"]
    pd.testing.assert_frame_equal(ours[cols].reset_index(drop=True), theirs[cols].reset_index(drop=True),
                                  check_dtype=False, rtol=1e-9, obj=what)


# --- the measurements ---------------------------------------------------------------------------

@dataclass
class Timings:
    listing: tuple[float, float]          # ours, baseline
    lookup: tuple[float, float]           # per look-up
    collection: tuple[float, float]
    trend: tuple[float, float]
    n_listing_rows: int


def measure(vault, codes: list[str], repeats: int, seed: int = 5) -> Timings:
    base = Baseline(vault)
    try:
        return _measure(vault, base, codes, repeats, seed)
    finally:
        base.close()


def _measure(vault, base: Baseline, codes: list[str], repeats: int, seed: int) -> Timings:
    probes = [codes[k] for k in np.random.default_rng(seed).choice(len(codes), LOOKUPS_PER_TIMING, replace=False)]

    listing = vault.transitions(kind=KIND, primary_only=True)
    check_listing(listing, base.listing(KIND, primary_only=True), "listing")
    for code in probes[:3]:
        check_listing(vault.transitions(specimen=code, kind=KIND), base.listing(KIND, specimen=code),
                      f"look-up {code}")
    for against in ("collection", "trend"):
        check_shifts(vault.shifts(KIND, against=against), base.shifts(KIND, against), f"shifts {against}")

    def lookups_ours():
        for code in probes:
            vault.transitions(specimen=code, kind=KIND)

    def lookups_base():
        for code in probes:
            base.listing(KIND, specimen=code)

    best = interleaved_best({
        "listing": lambda: vault.transitions(kind=KIND, primary_only=True),
        "listing_base": lambda: base.listing(KIND, primary_only=True),
        "lookup": lookups_ours,
        "lookup_base": lookups_base,
        "collection": lambda: vault.shifts(KIND, against="collection"),
        "collection_base": lambda: base.shifts(KIND, "collection"),
        "trend": lambda: vault.shifts(KIND, against="trend"),
        "trend_base": lambda: base.shifts(KIND, "trend"),
    }, repeats)
    per = LOOKUPS_PER_TIMING
    return Timings(listing=(best["listing"], best["listing_base"]),
                   lookup=(best["lookup"] / per, best["lookup_base"] / per),
                   collection=(best["collection"], best["collection_base"]),
                   trend=(best["trend"], best["trend_base"]), n_listing_rows=len(listing))


def profile(vault, codes: list[str], top: int) -> None:
    for label, call in (("listing", lambda: vault.transitions(kind=KIND, primary_only=True)),
                        ("look-up", lambda: vault.transitions(specimen=codes[len(codes) // 2], kind=KIND)),
                        ("shifts collection", lambda: vault.shifts(KIND, against="collection")),
                        ("shifts trend", lambda: vault.shifts(KIND, against="trend"))):
        prof = cProfile.Profile()
        prof.enable()
        call()
        prof.disable()
        print(f"\nprofile: {label} ({vault.backend}, {len(codes) * RUNS_PER_SPECIMEN:,} runs)")
        pstats.Stats(prof).sort_stats("tottime").print_stats(top)


def run_backend(backend: str, sizes: tuple[int, ...], quick: bool, folder: Path, top: int) -> list[Row]:
    import magvault

    results: dict[int, Timings] = {}
    for n in sizes:
        repeats = 3 if n >= 100_000 else (5 if quick else 9)
        if backend == "sqlite":
            db = folder / f"collection-{n}.db"
            vault = magvault.open(db, create=True)
            t0 = time.perf_counter()
            codes = build_collection(vault, n)
            print(f"  {backend}: {n:,} runs loaded in {time.perf_counter() - t0:.1f} s", flush=True)
            try:
                results[n] = measure(vault, codes, repeats)
                if top and n == sizes[-1]:
                    profile(vault, codes, top)
            finally:
                vault.close()
        else:
            with postgres_database() as url:
                vault = magvault.open(url, create=True)
                try:
                    t0 = time.perf_counter()
                    codes = build_collection(vault, n)
                    print(f"  {backend}: {n:,} runs loaded in {time.perf_counter() - t0:.1f} s", flush=True)
                    results[n] = measure(vault, codes, repeats)
                    if top and n == sizes[-1]:
                        profile(vault, codes, top)
                finally:
                    vault.close()
    rows = []
    for n, t in results.items():
        for label, (ours, theirs) in (("transitions listing", t.listing), ("transitions look-up", t.lookup),
                                      ("shifts --against collection", t.collection),
                                      ("shifts --against trend", t.trend)):
            ratio = ours / theirs
            rows.append(Row(f"{backend} {n:>7,} runs: {label}", f"<= {GOAL_RATIO}x",
                            f"{ratio:.2f}x ({seconds(ours)} / {seconds(theirs)})", ratio <= GOAL_RATIO))
    big = [n for n in sizes if n >= 100_000]
    if big and 10_000 in results:
        small, large = results[10_000], results[big[0]]
        for label, pick in (("ours", 0), ("baseline", 1)):
            growth = large.lookup[pick] / small.lookup[pick]
            rows.append(Row(f"{backend} look-up growth 10k -> 100k runs ({label})", f"<= {GOAL_GROWTH}x",
                            f"{growth:.2f}x", growth <= GOAL_GROWTH if label == "ours" else None))
        growth = large.listing[0] / small.listing[0]
        rows.append(Row(f"{backend} full listing growth 10k -> 100k runs (ours)", "about linear",
                        f"{growth:.1f}x for {large.n_listing_rows / small.n_listing_rows:.1f}x the rows", None))
    return rows


def main() -> int:
    def extra(parser):
        parser.add_argument("--backend", choices=("sqlite", "postgresql", "both"), default="both")
        parser.add_argument("--profile", type=int, default=0, metavar="N",
                            help="print the N costliest functions of each query at the largest size")

    args = arguments(__doc__.splitlines()[0], extra)
    sizes = (1_000, 10_000) if args.quick else (1_000, 10_000, 100_000)
    backends = ["sqlite", "postgresql"] if args.backend == "both" else [args.backend]
    print(f"magvault queries benchmark -- {machine()}")
    print(f"collections of {', '.join(f'{n:,}' for n in sizes)} runs; {LOOKUPS_PER_TIMING} look-ups per timing; "
          "best of several interleaved repeats")
    folder = Path(tempfile.mkdtemp(prefix="magvault-bench-queries-"))
    rows: list[Row] = []
    notes: list[str] = []
    try:
        for backend in backends:
            if backend == "postgresql":
                reason = postgres_reason()
                if reason:
                    notes.append(f"PostgreSQL not measured: {reason}")
                    continue
            rows += run_backend(backend, sizes, args.quick, folder, args.profile)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    print_table("queries", rows)
    missed = [r for r in rows if r.passed is False]
    if missed:
        notes.append(f"{len(missed)} goal(s) missed: " + "; ".join(f"{r.measure} {r.measured}" for r in missed))
    for n in notes:
        print(f"note: {n}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

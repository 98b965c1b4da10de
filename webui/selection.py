"""Filtering and sorting the collection: one pure function shared by the page and the API."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

# Public sort key -> column of Vault.specimens().
SORT_KEYS = {"code": "code", "parent": "parent", "kind": "kind", "mass": "mass_kg", "origin": "origin",
             "x": "x", "superstructure": "superstructure", "runs": "n_runs", "created": "created_at"}


@dataclass(frozen=True)
class Selection:
    """What the user asked for; None means 'any'."""

    q: str | None = None
    origin: str | None = None
    superstructure: str | None = None
    x_min: float | None = None
    x_max: float | None = None
    run_kind: str | None = None
    transition: str | None = None
    sort: str = "code"
    descending: bool = False


def select_specimens(frame: pd.DataFrame, sel: Selection, *, with_run_kind: set[str] | None = None,
                     with_transition: set[str] | None = None) -> pd.DataFrame:
    """Rows of ``frame`` (Vault.specimens()) that match ``sel``, sorted.

    ``with_run_kind`` and ``with_transition`` are the specimen codes that have a
    run of ``sel.run_kind`` and a current primary transition of
    ``sel.transition``; the caller asks the Vault for them.  A composition range
    keeps only specimens with a known x inside it (inherited x counts).
    Missing values sort last in either direction.
    """
    out = frame
    if sel.q:
        needle = sel.q.strip().lower()
        hay = pd.Series(False, index=out.index)
        for col in ("code", "parent", "origin", "storage", "kind", "superstructure"):
            hay |= out[col].astype("string").str.lower().str.contains(needle, regex=False).fillna(False).astype(bool)
        out = out[hay]
    if sel.origin:
        out = out[out["origin"] == sel.origin]
    if sel.superstructure:
        out = out[out["superstructure"] == sel.superstructure]
    if sel.x_min is not None:
        out = out[out["x"].notna() & (out["x"] >= sel.x_min)]
    if sel.x_max is not None:
        out = out[out["x"].notna() & (out["x"] <= sel.x_max)]
    if sel.run_kind:
        out = out[out["code"].isin(with_run_kind or set())]
    if sel.transition:
        out = out[out["code"].isin(with_transition or set())]
    column = SORT_KEYS.get(sel.sort, "code")
    if column == "code":
        return out.sort_values("code", ascending=not sel.descending, kind="stable")
    return out.sort_values([column, "code"], ascending=[not sel.descending, True], na_position="last",
                           kind="stable")

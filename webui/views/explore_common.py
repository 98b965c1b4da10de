"""What the pages that look across the collection share: choosing specimens, kinds, and the save form.

A *selection* is a set of specimen codes, chosen in one of three ways: the
collection page's filters, a lineage (a specimen and every piece cut from
it), or the result of a saved query (the specimens it flags, or all of them).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any
from urllib.parse import urlencode

import pandas as pd
from flask import request

from magvault.errors import InvalidValue, MagvaultError

from ..selection import Selection, select_specimens
from .explore_forms import SaveQueryForm, check_choice, page_message, set_choices

#: Saved queries that name specimens (so they can serve as a selection), and what "flagged" means in each.
FLAG_MEANING = {"shifts": "flagged as shifted", "coupled": "whose two transitions do not coincide",
                "correlate": "marked as outliers of the fit", "composition_map": "in it (a map flags none)",
                "overlay": "in its selection"}
MAX_SAVED_DEPTH = 3


@dataclass(frozen=True)
class Chosen:
    """The specimens of a selection and a sentence saying how they were chosen."""

    codes: frozenset[str]
    description: str


def default_kind(kinds: list[dict[str, Any]], preferred: str = "low-t") -> str | None:
    ids = [k["id"] for k in kinds]
    if preferred in ids:
        return preferred
    return ids[0] if ids else None


def kind_choices(kinds: list[dict[str, Any]]) -> list[tuple[str, str]]:
    return [(k["id"], f"{k['id']}: {k['name']}") for k in kinds]


def prepare_filters(form, specimens: pd.DataFrame, origins: list[str]) -> Selection:
    """Fill the filter choices and read the filters; unknown choices become inline errors."""
    labels = sorted({s for s in specimens["superstructure"].dropna().unique()}) if not specimens.empty else []
    set_choices(form.origin, [("", "any origin")] + [(o, o) for o in origins])
    set_choices(form.superstructure, [("", "any")] + [(s, s) for s in labels])
    origin = check_choice(form.origin, origins, "origin", None)
    superstructure = check_choice(form.superstructure, labels, "superstructure", None)
    x_min = form.x_min.data if not form.x_min.errors else None
    x_max = form.x_max.data if not form.x_max.errors else None
    if x_min is not None and x_max is not None and x_max < x_min:
        form.x_max.errors = [*form.x_max.errors, f"x to: {x_max:g} is below x from ({x_min:g}); "
                                                 "give the range low to high"]
        x_max = None
    q = (form.q.data or "").strip() or None if not form.q.errors else None
    return Selection(q=q, origin=origin, superstructure=superstructure, x_min=x_min, x_max=x_max)


def filtered(sel: Selection) -> bool:
    return any([sel.q, sel.origin, sel.superstructure, sel.x_min is not None, sel.x_max is not None])


def by_filters(specimens: pd.DataFrame, sel: Selection) -> Chosen:
    chosen = select_specimens(specimens, sel)
    codes = frozenset(chosen["code"])
    if not filtered(sel):
        return Chosen(codes, f"all {len(codes)} specimens")
    parts = []
    if sel.q:
        parts.append(f"matching “{sel.q}”")
    if sel.origin:
        parts.append(f"from {sel.origin}")
    if sel.superstructure:
        parts.append(f"{sel.superstructure}")
    if sel.x_min is not None or sel.x_max is not None:
        lo = f"{sel.x_min:g}" if sel.x_min is not None else "0"
        hi = f"{sel.x_max:g}" if sel.x_max is not None else "…"
        parts.append(f"x from {lo} to {hi}")
    return Chosen(codes, f"{len(codes)} specimens " + ", ".join(parts))


def by_lineage(vault, code: str) -> Chosen:
    doc = vault.specimen(code)
    pieces = _codes_below(doc["lineage"].get("descendants") or [])
    n = len(pieces)
    words = "no pieces cut from it" if n == 0 else ("1 piece cut from it" if n == 1 else f"{n} pieces cut from it")
    return Chosen(frozenset([code, *pieces]), f"{code} and {words}")


def _codes_below(nodes: list[Any]) -> list[str]:
    """Every code in a lineage subtree (nodes are {code, children} dicts, or plain codes)."""
    out: list[str] = []
    for node in nodes:
        if isinstance(node, dict):
            out.append(str(node["code"]))
            out.extend(_codes_below(node.get("children") or []))
        else:
            out.append(str(node))
    return out


def by_saved(vault, name: str, rows: str, *, depth: int = 0) -> Chosen:
    """The specimens of a saved query's result: those it flags (``rows='flagged'``) or all of them.

    Raises MagvaultError when the query cannot be run (its parameters no longer fit the vault).
    """
    doc = vault.saved_query(name)
    query = doc["query"]
    if query == "overlay":
        if depth >= MAX_SAVED_DEPTH:
            raise InvalidValue(f"saved query {name!r}: its selection refers to saved queries {MAX_SAVED_DEPTH} deep; "
                               "choose the specimens another way", field="saved")
        return overlay_selection(vault, doc["parameters"], depth=depth + 1, name=name)
    try:
        result = vault.run_saved_query(name)
    except TypeError as exc:  # parameters written by another client that this version's query does not take
        raise InvalidValue(f"saved query {name!r} has parameters this version cannot use ({exc})",
                           field="saved") from None
    frame = result.points if hasattr(result, "points") else result
    if frame is None or frame.empty or "specimen" not in frame.columns:
        return Chosen(frozenset(), f"saved query “{name}” returns no specimens")
    flag = {"shifts": "flagged", "correlate": "outlier"}.get(query)
    if rows == "flagged" and query == "coupled" and "coincide" in frame.columns:
        frame = frame[frame["coincide"].eq(False).fillna(False).astype(bool)]
    elif rows == "flagged" and flag and flag in frame.columns:
        frame = frame[frame[flag].eq(True).fillna(False).astype(bool)]
    codes = frozenset(str(c) for c in frame["specimen"].dropna())
    what = FLAG_MEANING.get(query, "in it") if rows == "flagged" else "in its result"
    return Chosen(codes, f"the {len(codes)} specimens {what} (saved query “{name}”)")


def overlay_selection(vault, params: dict[str, Any], *, depth: int = 0, name: str | None = None) -> Chosen:
    """Re-apply the selection stored with a saved overlay."""
    source = params.get("source") or "filters"
    if source == "lineage" and params.get("root"):
        return by_lineage(vault, str(params["root"]))
    if source == "saved" and params.get("saved"):
        return by_saved(vault, str(params["saved"]), str(params.get("saved_rows") or "flagged"), depth=depth)
    sel = Selection(q=params.get("q") or None, origin=params.get("origin") or None,
                    superstructure=params.get("superstructure") or None,
                    x_min=_float_or_none(params.get("x_min")), x_max=_float_or_none(params.get("x_max")))
    chosen = by_filters(vault.specimens(), sel)
    return Chosen(chosen.codes, chosen.description + (f" (saved overlay “{name}”)" if name else ""))


def _float_or_none(value: Any) -> float | None:
    try:
        return float(value) if value not in (None, "") else None
    except (TypeError, ValueError):
        return None


def lineage_tops(specimens: pd.DataFrame) -> dict[str, str]:
    """Each specimen's top ancestor (the crystal it was cut from, or itself)."""
    parent = dict(zip(specimens["code"], specimens["parent"]))
    out = {}
    for code in parent:
        seen, here = {code}, code
        while isinstance(parent.get(here), str) and parent[here] and parent[here] not in seen:
            here = parent[here]
            seen.add(here)
        out[code] = here
    return out


def save_form(page: str) -> SaveQueryForm:
    """The “save these settings” form for a page, carrying the page's query string."""
    args = urlencode(list(request.args.items(multi=True)))
    return SaveQueryForm(formdata=None, page=page, args=args)


def error_text(exc: MagvaultError) -> str:
    return page_message(exc)


__all__ = ["Chosen", "default_kind", "kind_choices", "prepare_filters", "filtered", "by_filters", "by_lineage",
           "by_saved", "overlay_selection", "lineage_tops", "save_form", "error_text", "FLAG_MEANING"]

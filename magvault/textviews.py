"""Plain-text renderings of vault documents for the terminal (no click, no colours)."""

from __future__ import annotations

from typing import Any


def fmt_unc(value: float | None, unc: float | None, unit: str = "", scale: float = 1.0) -> str:
    """'12.50 ± 0.02 mg': the uncertainty to two significant digits, the value to match."""
    if value is None:
        return "-"
    v = value * scale
    suffix = f" {unit}" if unit else ""
    if unc is None or unc <= 0:
        return f"{v:.6g}{suffix}"
    u = unc * scale
    from math import floor, log10

    digits = max(0, 1 - int(floor(log10(abs(u)))))
    return f"{v:.{digits}f} ± {u:.{digits}f}{suffix}"


def _tree_lines(node: dict[str, Any], focus: str, prefix: str = "", last: bool = True, root: bool = True) -> list[str]:
    mark = "  <- this specimen" if node["code"] == focus else ""
    label = node["code"] + (f" ({node['kind']})" if node.get("kind") else "") + mark
    lines = [label if root else f"{prefix}{'└─ ' if last else '├─ '}{label}"]
    children = node.get("children", [])
    for i, child in enumerate(children):
        ext = "" if root else prefix + ("   " if last else "│  ")
        lines += _tree_lines(child, focus, ext, i == len(children) - 1, root=False)
    return lines


def specimen_text(doc: dict[str, Any]) -> str:
    out = []
    mass = fmt_unc(doc.get("mass_kg"), doc.get("mass_uncertainty_kg"), "mg", 1e6)
    dims = (doc.get("dimensions") or {}).get("text")
    head = [doc.get("kind") or "kind not recorded", f"mass {mass}"]
    if dims:
        head.append(dims)
    if doc.get("origin"):
        head.append(f"origin {doc['origin']}")
    out.append(f"{doc['code']}: " + ", ".join(head))
    out.append("")
    out.append("Lineage:")
    out += ["  " + line for line in _tree_lines(doc["lineage"]["tree"], doc["code"])]
    out.append("")
    o = doc.get("orientation")
    if o:
        src = f" (inherited from {o['from']})" if o.get("inherited") else ""
        unc = f", ±{o['uncertainty_deg']:g}°" if o.get("uncertainty_deg") is not None else ""
        out.append(f"Orientation: {o['system']}, {o['method']}{unc}{src}")
        m = o["matrix"]
        for r in range(3):
            out.append("  [" + "  ".join(f"{m[3 * r + c]: .4f}" for c in range(3)) + "]")
    else:
        out.append("Orientation: not measured")
    out.append("")
    if doc.get("compositions"):
        comp = doc["composition"]
        src = f" (inherited from {comp['from']})" if comp.get("inherited") else ""
        out.append(f"Composition: x = {fmt_unc(comp['x'], comp['x_uncertainty'])} in Fe(1-x)S"
                   + (f", {comp['superstructure']}" if comp.get("superstructure") else "") + src)
        for c in doc["compositions"]:
            out.append(f"  {c['measured_at'][:10]} {c['method']}: x = {fmt_unc(c['x'], c['x_uncertainty'])}, "
                       f"Fe/S = {fmt_unc(c['fe_s_ratio'], c['fe_s_ratio_uncertainty'])}"
                       + (f", {c['superstructure']}" if c.get("superstructure") else ""))
    else:
        out.append("Composition: no analysis")
    out.append("")
    runs = {r["id"]: r for r in doc["runs"]}
    out.append("Treatments and runs in time order:")
    for seg in doc["timeline"]:
        t = seg["treatment"]
        if t is not None:
            conds = ", ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in t["conditions"].items())
            out.append(f"  {t['at']}  {t['kind'].upper()}" + (f" ({conds})" if conds else ""))
        elif seg["runs"]:
            out.append("  before any treatment:")
        for rid in seg["runs"]:
            r = runs[rid]
            out.append(f"    run {rid:<5} {r['kind']:<15} {r['status']:<10} {r['started'] or '-':<21} "
                       f"{r['source_name'] or ''}")
    if not doc["runs"]:
        out.append("  (no runs)")
    return "\n".join(out)

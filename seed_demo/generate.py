"""Write the demo collection: exports, ``plan.json`` and ``manifest.json``.

``generate(out_dir, seed)`` draws the invented collection (:mod:`.scenario`),
synthesises every run (:mod:`.synthesis`), writes each in one of the export
layouts (:mod:`.writers`) under ``out_dir/exports/``, and writes

* ``plan.json``: what the vault's loader feeds through the API, in order
  (origins, instruments, specimens parents first, orientations, compositions,
  treatments, runs ordered by start time);
* ``manifest.json``: everything planted (per file, per specimen), the planted
  shifts with their causes, and what each shift query must and must not flag,
  predicted from the planted values (:mod:`.expectations`).

The same seed gives byte-identical files: numbers are written with fixed
decimals, JSON floats are rounded to 12 significant digits, spreadsheets carry
fixed timestamps, and each run draws its noise from its own generator seeded by
(seed, run number).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, TypedDict

import numpy as np

from .expectations import MODES, TREND_CONVENTION, expected_flags, expected_shifts
from .scenario import (ASSUMED_RUN_UNCERTAINTY_K, DEFAULT_SEED, LOWT_COOLING_LAG_K, SPLIT_SEPARATION_K,
                       Scenario, build_scenario, iso)
from .synthesis import synthesise
from .writers import FORMATS, REQUIRED_CONDITIONS, VARIANTS, Export, Format, write_export

MASS_DISAGREEMENT_FACTOR = 1.04


class Plan(TypedDict):
    """The content of ``plan.json`` (see the module docstring)."""

    seed: int
    origins: list[dict[str, Any]]
    instruments: list[dict[str, Any]]
    specimens: list[dict[str, Any]]
    orientations: list[dict[str, Any]]
    compositions: list[dict[str, Any]]
    treatments: list[dict[str, Any]]
    runs: list[dict[str, Any]]


def generate(out_dir: str | Path, seed: int = DEFAULT_SEED) -> Plan:
    """Generate the demo collection into ``out_dir``.

    Parameters
    ----------
    out_dir : str or Path
        Directory to write into (created if missing).  Files named in a
        ``plan.json`` left there by an earlier generation are removed first;
        nothing else is touched.
    seed : int
        Seed of the whole scenario; the same seed gives byte-identical output.

    Returns
    -------
    Plan
        The content of ``plan.json``.
    """
    out = Path(out_dir)
    exports = out / "exports"
    exports.mkdir(parents=True, exist_ok=True)
    _remove_previous(out)
    scenario = build_scenario(seed)

    used: dict[str, int] = {}
    runs: list[dict[str, Any]] = []
    planted: dict[str, dict[str, Any]] = {}
    mass_notes: list[dict[str, Any]] = []
    for run in scenario.runs:
        specimen = scenario.specimen(run.specimen)
        variants = VARIANTS[run.protocol]
        fmt = FORMATS[variants[used.get(run.protocol, 0) % len(variants)]]
        used[run.protocol] = used.get(run.protocol, 0) + 1
        rel = f"exports/{run.index:03d}_{run.specimen}_{run.protocol}.{fmt.ext}"
        synth = synthesise(run, specimen, np.random.default_rng([seed, run.index]))

        mass_factor = 1.0
        if (not mass_notes and fmt.shape == "sectioned" and "mass" in fmt.meta
                and run.protocol == "tm-high" and run.phase == 2):
            mass_factor = MASS_DISAGREEMENT_FACTOR
            mass_notes.append({"file": rel, "specimen": run.specimen,
                               "stated_mass_mg": round(specimen.mass_mg * mass_factor, 2),
                               "recorded_mass": specimen.mass_text(),
                               "note": "weighed before a chip broke off; the recorded mass is right"})
        metadata = _metadata(fmt, synth.conditions, specimen.mass_mg * mass_factor, run.specimen,
                             iso(run.started), run.operator)
        export = Export(run.specimen, synth.tables, metadata, specimen.mass_kg,
                        title_temperature=metadata.get("temperature", ""))
        write_export(out / rel, fmt, export)
        runs.append({"file": rel, "specimen": run.specimen, "kind": run.kind, "started": iso(run.started),
                     "instrument": run.instrument, "operator": run.operator, "direction": run.direction,
                     "group": run.group, "shape": fmt.shape,
                     "set": _overrides(run.protocol, fmt, synth.conditions)})
        entry = {"specimen": run.specimen, "kind": run.kind, "protocol": run.protocol, "layout": fmt.name,
                 "started": iso(run.started)}
        entry.update({k: v for k, v in run.params.items() if k != "specimen"})
        entry.update(synth.extra)
        planted[rel] = entry

    plan: Plan = _jsonable({
        "seed": int(seed),
        "origins": [{"name": o.name, "kind": o.kind, "notes": o.notes} for o in scenario.origins],
        "instruments": [{"name": i.name, "kind": i.kind, "place": i.place,
                         "calibrations": [{"at": at, "note": note} for at, note in i.calibrations]}
                        for i in scenario.instruments],
        "specimens": [{"code": s.code, "parent": s.parent, "origin": s.origin, "kind": s.kind,
                       "mass": s.mass_text(), "dims": s.dims_text(), "same_orientation": s.same_orientation,
                       "storage": s.storage, "notes": s.notes, "created": iso(s.created)}
                      for s in scenario.specimens],
        "orientations": scenario.orientations,
        "compositions": scenario.compositions,
        "treatments": [{"specimen": t.specimen, "kind": t.kind, "at": iso(t.at), "conditions": t.conditions}
                       for t in scenario.treatments],
        "runs": runs,
    })
    manifest = _jsonable(_manifest(scenario, plan, planted, mass_notes))
    _write_json(out / "plan.json", plan)
    _write_json(out / "manifest.json", manifest)
    return plan


# ---------------------------------------------------------------- metadata and overrides

def _metadata(fmt: Format, conditions: dict[str, Any], mass_mg: float, code: str, started: str,
              operator: str) -> dict[str, str]:
    meta = {"specimen": code, "mass": f"{mass_mg:.2f} mg", "started": started, "operator": operator}
    if "field_T" in conditions:
        field = conditions["field_T"]
        meta["field"] = f"{field * 1e4:g} Oe" if fmt.units.get("field") == "Oe" else f"{field:g} T"
    if "sweep_rate_K_per_s" in conditions:
        meta["sweep rate"] = f"{conditions['sweep_rate_K_per_s'] * 60.0:g} K/min"
    if "temperature_K" in conditions:
        meta["temperature"] = f"{conditions['temperature_K']:g} K"
    if "frequency_Hz" in conditions:
        meta["frequency"] = f"{conditions['frequency_Hz']:g} Hz"
    if "wavelength_m" in conditions:
        meta["wavelength"] = f"{conditions['wavelength_m'] * 1e10:.8f} A"
        meta["radiation"] = "Cu K-alpha1"
    if "atmosphere" in conditions:
        meta["atmosphere"] = conditions["atmosphere"]
    return meta


def _overrides(protocol: str, fmt: Format, conditions: dict[str, Any]) -> list[str]:
    """``--set`` values for the conditions a run needs and its file does not state."""
    stated = set(fmt.meta)
    if "radiation" in stated:
        stated.add("wavelength")
    out = []
    for key in REQUIRED_CONDITIONS[protocol]:
        if key in stated:
            continue
        if key == "field":
            out.append(f"field={conditions['field_T']:g} T")
        elif key == "temperature":
            out.append(f"temperature={conditions['temperature_K']:g} K")
        elif key == "frequency":
            out.append(f"frequency={conditions['frequency_Hz']:g} Hz")
        elif key == "wavelength":
            out.append("wavelength=Cu K-alpha1")
    return out


# ---------------------------------------------------------------- manifest

def _manifest(scenario: Scenario, plan: Plan, planted: dict[str, Any],
              mass_notes: list[dict[str, Any]]) -> dict[str, Any]:
    runs = scenario.lowt_runs()
    x = scenario.x_of()
    treated = scenario.treated_at()
    design = expected_shifts(runs, x, treated, u_run=ASSUMED_RUN_UNCERTAINTY_K)
    scaled = expected_shifts(runs, x, treated, u_run=ASSUMED_RUN_UNCERTAINTY_K, convention="scaled")
    kinds: dict[str, int] = {}
    for r in plan["runs"]:
        kinds[r["kind"]] = kinds.get(r["kind"], 0) + 1
    lowt: dict[str, list[float]] = {}
    for r in runs:
        lowt.setdefault(r.specimen, []).append(r.temperature_K)
    by_code = {s.code: s for s in scenario.specimens}

    def expectation_table(result: dict[str, Any]) -> dict[str, Any]:
        return {mode: {code: {"shift_K": e.shift_K, "combined_uncertainty_K": e.combined_uncertainty_K,
                              "sigma": e.sigma} for code, e in sorted(result[mode].items())}
                for mode in MODES}

    return {
        "seed": scenario.seed,
        "counts": {"specimens": len(plan["specimens"]), "runs": len(plan["runs"]),
                   "runs_by_kind": dict(sorted(kinds.items()))},
        "lineage": {s.code: s.parent for s in scenario.specimens},
        "compositions": {s.code: {"x": s.x, "superstructure": s.family, "analysed": s.analysed,
                                  "inherited_from": None if s.analysed else s.parent}
                         for s in scenario.specimens},
        "specimens_planted": {s.code: _specimen_planted(s) for s in scenario.specimens},
        "planted": planted,
        "specimens_lowT": {code: float(np.mean(v)) for code, v in sorted(lowt.items())},
        "trend": scenario.trend,
        "roles": dict(sorted(scenario.roles.items())),
        "shifts": scenario.shifts,
        "expected_flags": expected_flags(runs, x, treated),
        "expected": expectation_table(design),
        "expected_if_p_scaled": {"trend": expectation_table(scaled)["trend"]},
        "assumptions": {
            "query_sigma_threshold": 3.0,
            "single_run_uncertainty_K": ASSUMED_RUN_UNCERTAINTY_K,
            "flags_hold_for_single_run_uncertainties_K": [0.1, 0.2, 0.3],
            "must_flag_at_least_sigma": 5.0,
            "must_not_flag_at_most_sigma": 2.0,
            "participants": "specimens whose runs show the 4C low-temperature step (heating branch, component 1); "
                            "troilite-like, NC and 6C specimens have none",
            "trend_prediction_uncertainty": f"{TREND_CONVENTION}: p_i from (X^T W X)^-1 of the weighted fit, "
                                            "W = 1/u_j^2, not scaled by the fit's reduced chi-square",
            "estimate": "weighted mean over the specimen's runs, Birge-inflated",
        },
        "file_mass_disagreements": mass_notes,
        "notes": [
            f"split transition in {scenario.roles['split']}: component 2 lies {SPLIT_SEPARATION_K:g} K below "
            "component 1 with 60 % of its step height, in every low-T run of that specimen",
            f"mild alteration on cooling in {scenario.roles['altered']}: the cooling branch of its furnace runs "
            "carries a 7 % larger moment",
            f"low-T runs with a cooling branch show the step {LOWT_COOLING_LAG_K:g} K lower on cooling",
            "curie_heating_K and curie_cooling_K are zero-field mean-field ordering temperatures; "
            "the applied field adds a small tail above them",
            "moments along X, Y, Z of single crystals carry an invented basal-plane anisotropy (direction_factor)",
            "diffraction patterns hold the NiAs-type subcell reflections only; d(102) follows the "
            "Toulmin & Barton (1964) calibration exactly at 295 K",
        ],
    }


def _specimen_planted(s: Any) -> dict[str, Any]:
    out = {"family": s.family, "x": s.x, "measured": s.measured, "curie_K": s.curie_K,
           "lowt_before_treatment_K": s.lowt_K, "split": s.split,
           "spin_reorientation_K": s.spin_reorientation_K, "vacancy_order_K": s.vacancy_order_K,
           "saturation_A_m2_per_kg_at_0K": s.M0_A_m2_per_kg, "theta_D_K": s.theta_D_K,
           "role": s.role}
    if s.orientation is not None:
        out["orientation"] = [float(v) for v in np.asarray(s.orientation).ravel()]
    return out


# ---------------------------------------------------------------- JSON

def _jsonable(obj: Any) -> Any:
    """Plain JSON types with floats rounded to 12 significant digits (stable text)."""
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        if not np.isfinite(value):
            raise ValueError("non-finite number in the plan or manifest")
        return float(f"{value:.12g}")
    return obj


def _write_json(path: Path, doc: Any) -> None:
    path.write_bytes((json.dumps(doc, indent=1, ensure_ascii=False) + "\n").encode("utf-8"))


def _remove_previous(out: Path) -> None:
    old = out / "plan.json"
    if not old.exists():
        return
    try:
        files = [r["file"] for r in json.loads(old.read_text(encoding="utf-8")).get("runs", [])]
    except (ValueError, AttributeError, KeyError, TypeError):
        return
    exports = (out / "exports").resolve()
    for name in files:
        path = (out / name).resolve()
        if path.parent == exports and path.is_file():
            path.unlink()

"""Which analyses a run gets, by run kind: canonical series in, outcomes out.

Pure, like the rest of :mod:`magvault.analysis`: it receives the run's
canonical DataFrame and conditions and returns :class:`Outcome` objects; the
vault stores them as derivations.  Analyses that need several runs (a loop
with its backfield run, three orthogonal components of a moment, runs at
several fields) have their own entry points below, which the vault calls
after pairing the runs.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from ..errors import MagvaultError
from .results import Outcome, ResultValue, TransitionEstimate

# Signal columns in order of preference, with what they measure.
_SIGNALS = {
    "thermomagnetic": (("moment_A_m2", "moment"), ("moment_A_m2_per_kg", "moment"),
                       ("chi_vol", "susceptibility"), ("chi_mass_m3_per_kg", "susceptibility")),
    "susceptibility": (("chi_vol", "susceptibility"), ("chi_mass_m3_per_kg", "susceptibility"),
                       ("moment_A_m2", "moment"), ("moment_A_m2_per_kg", "moment")),
}
ANALYSED_KINDS = ("thermomagnetic", "susceptibility", "hysteresis", "backfield", "diffraction",
                  "calorimetry", "resonance")


class NothingToAnalyse(MagvaultError):
    """The run's series lacks what an analysis needs (said in the message)."""


def signal_column(run_kind: str, frame: pd.DataFrame) -> tuple[str, str]:
    for column, what in _SIGNALS.get(run_kind, ()):
        if column in frame.columns and np.isfinite(frame[column].to_numpy(dtype=float)).sum() >= 10:
            return column, what
    raise NothingToAnalyse(f"no moment or susceptibility column with data among {list(frame.columns)}")


def _branch(frame: pd.DataFrame):
    if "branch" not in frame.columns:
        return None
    labels = frame["branch"].astype(object).where(frame["branch"].notna(), "").to_numpy(dtype=object)
    return labels if any(lab in ("heating", "cooling") for lab in labels) else None


def analyse_run(run_kind: str, frame: pd.DataFrame, conditions: Mapping[str, Any]) -> list[Outcome]:
    """Every single-run analysis of a run kind; an empty list for kinds not analysed yet."""
    if run_kind in ("thermomagnetic", "susceptibility"):
        return _thermal(run_kind, frame)
    if run_kind == "hysteresis":
        return [analyse_loops(frame, conditions)]
    if run_kind == "backfield":
        return [analyse_backfields(frame, conditions)]
    if run_kind == "diffraction":
        from .diffraction import from_series as lattice_from_series

        return [lattice_from_series(frame, conditions)]
    if run_kind == "calorimetry":
        from .calorimetry import from_series as heat_capacity_from_series

        return [heat_capacity_from_series(frame, conditions)]
    if run_kind == "resonance":
        from .resonance import from_series as resonance_from_series

        return [resonance_from_series(frame, conditions)]
    return []


def _thermal(run_kind: str, frame: pd.DataFrame) -> list[Outcome]:
    from .thermomagnetic import analyse_series

    if "temperature_K" not in frame.columns:
        raise NothingToAnalyse("no temperature_K column")
    column, what = signal_column(run_kind, frame)
    T = frame["temperature_K"].to_numpy(dtype=float)
    y = frame[column].to_numpy(dtype=float)
    keep = np.isfinite(T) & np.isfinite(y)
    branch = _branch(frame)
    options = {"unit": "m^3/kg"} if column == "chi_mass_m3_per_kg" else {}
    outcomes = analyse_series(T[keep], y[keep], None if branch is None else branch[keep], run_kind=run_kind,
                              signal_kind=what, curie_weiss_options=options or None)
    return [_with_parameters(o, signal_column=column) for o in outcomes]


def _with_parameters(outcome: Outcome, **extra: Any) -> Outcome:
    return Outcome(method=outcome.method, version=outcome.version, parameters={**outcome.parameters, **extra},
                   transitions=outcome.transitions, results=outcome.results, warnings=outcome.warnings,
                   diagnostics=outcome.diagnostics)


def _moment(frame: pd.DataFrame) -> np.ndarray:
    if "moment_A_m2" not in frame.columns:
        raise NothingToAnalyse("no moment_A_m2 column (a mass-normalised moment needs the specimen's mass)")
    return frame["moment_A_m2"].to_numpy(dtype=float)


def merge_outcomes(outcomes: Sequence[Outcome], *, method: str, version: str) -> Outcome:
    """One outcome from several of one method (the blocks of a multi-block run)."""
    return Outcome(method=method, version=version,
                   parameters={"blocks": [o.parameters for o in outcomes]},
                   transitions=tuple(t for o in outcomes for t in o.transitions),
                   results=tuple(r for o in outcomes for r in o.results),
                   warnings=tuple(w for o in outcomes for w in o.warnings),
                   diagnostics={"blocks": [o.diagnostics for o in outcomes]})


def analyse_loops(frame: pd.DataFrame, conditions: Mapping[str, Any]) -> Outcome:
    """One loop, or one per block of a multi-block run (with Hc(T), Ms(T) trends)."""
    from .hysteresis import LOOP_METHOD, VERSION, analyse_loop, analyse_loop_blocks, loop_temperature_series

    if "mu0H_T" not in frame.columns:
        raise NothingToAnalyse("no mu0H_T column")
    H, m = frame["mu0H_T"].to_numpy(dtype=float), _moment(frame)
    t = frame["time_s"].to_numpy(dtype=float) if "time_s" in frame.columns else None
    mass = conditions.get("mass_kg")
    if "block_temperature_K" in frame.columns and frame["block_temperature_K"].nunique() > 1:
        blocks = analyse_loop_blocks(H, m, frame["block_temperature_K"].to_numpy(dtype=float), time_s=t,
                                     mass_kg=mass)
        merged = merge_outcomes(blocks, method=LOOP_METHOD, version=VERSION)
        series = loop_temperature_series(blocks)
        # The series repeats each block's Hc and Ms; keep only its trends.
        trends = tuple(r for r in series.results if r.block_temperature_K is None)
        return Outcome(method=merged.method, version=merged.version, parameters=merged.parameters,
                       results=merged.results + trends, warnings=merged.warnings + series.warnings,
                       diagnostics=merged.diagnostics)
    return analyse_loop(H, m, time_s=t, mass_kg=mass, block_temperature_K=conditions.get("temperature_K"))


def analyse_backfields(frame: pd.DataFrame, conditions: Mapping[str, Any]) -> Outcome:
    from .hysteresis import BACKFIELD_METHOD, VERSION, analyse_backfield

    if "mu0H_T" not in frame.columns:
        raise NothingToAnalyse("no mu0H_T column")
    H, m = frame["mu0H_T"].to_numpy(dtype=float), _moment(frame)
    if "block_temperature_K" in frame.columns and frame["block_temperature_K"].nunique() > 1:
        blocks = frame["block_temperature_K"].to_numpy(dtype=float)
        outs = [analyse_backfield(H[blocks == b], m[blocks == b], block_temperature_K=float(b))
                for b in pd.unique(blocks)]
        return merge_outcomes(outs, method=BACKFIELD_METHOD, version=VERSION)
    return analyse_backfield(H, m, block_temperature_K=conditions.get("temperature_K"))


# --- analyses of several runs ------------------------------------------------------------------

def loop_with_backfield(loop: Outcome, backfield: Outcome) -> Outcome:
    """Day-plot placement of a loop and its backfield run (blocks matched by temperature)."""
    from .hysteresis import DAY_PLOT_METHOD, VERSION, day_plot

    loops = _split_by_block(loop, "Ms")
    backs = _split_by_block(backfield, "Hcr")
    pairs = [(loops[t], backs[t2]) for t in loops for t2 in backs
             if (t is None and t2 is None) or (t is not None and t2 is not None and abs(t - t2) <= 1.0)]
    if not pairs and len(loops) == 1 and len(backs) == 1:
        pairs = [(next(iter(loops.values())), next(iter(backs.values())))]
    if not pairs:
        raise NothingToAnalyse("no loop block at the backfield run's temperature")
    outs = [day_plot(a, b) for a, b in pairs]
    return outs[0] if len(outs) == 1 else merge_outcomes(outs, method=DAY_PLOT_METHOD, version=VERSION)


def _split_by_block(outcome: Outcome, needed: str) -> dict[float | None, Outcome]:
    blocks: dict[float | None, list[ResultValue]] = {}
    for r in outcome.results:
        blocks.setdefault(r.block_temperature_K, []).append(r)
    return {t: Outcome(method=outcome.method, version=outcome.version, parameters=outcome.parameters,
                       results=tuple(rs)) for t, rs in blocks.items() if any(r.quantity == needed for r in rs)}


def moment_direction(components: Mapping[str, pd.DataFrame], orientation: np.ndarray | None, *,
                     grid_step_K: float = 5.0) -> Outcome:
    """Moment direction from runs along orthogonal specimen axes (keys 'X', 'Y', 'Z' or signed)."""
    from .direction import moment_directions

    arrays, directions = {}, {}
    for label, frame in components.items():
        column, _ = signal_column("thermomagnetic", frame)
        sub = frame
        if "branch" in frame.columns and (frame["branch"] == "heating").any():
            sub = frame[frame["branch"] == "heating"]
        arrays[label] = (sub["temperature_K"].to_numpy(dtype=float), sub[column].to_numpy(dtype=float))
        if label.lstrip("+-").upper() not in ("X", "Y", "Z"):  # a stored vector 'x,y,z'
            directions[label] = [float(v) for v in label.split(",")]
    lo = max(float(np.nanmin(t)) for t, _ in arrays.values())
    hi = min(float(np.nanmax(t)) for t, _ in arrays.values())
    if not hi > lo:
        raise NothingToAnalyse("the runs of the group share no temperature range")
    # A grid of about grid_step_K (never denser than the data) keeps the track readable;
    # the Fisher mean over the whole range says how far the direction wanders.
    grid = int(min(min(len(t) for t, _ in arrays.values()), (hi - lo) / grid_step_K + 1))
    return moment_directions(arrays, orientation, directions=directions or None, grid_points=max(grid, 2),
                             average_range_K=(lo, hi))


def field_dependence_of(pairs: Sequence[tuple[float, TransitionEstimate]]) -> Outcome:
    from .lowtemp import field_dependence

    return field_dependence(pairs)

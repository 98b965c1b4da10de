"""The transition catalogue: kinds of transition, their typical ranges and search windows.

The ranges are facts of the trade (common practice, no single source); see
DESIGN.md section 3.  ``typical_K`` is where the transition usually lies;
``window_K`` is the wider search window, so that a shifted transition keeps its
kind.  A peak inside two windows goes to the kind whose typical range is nearer
and is marked ambiguous; a peak outside every window is ``unassigned``.
The catalogue is seeded into the database; labs may add kinds of their own.
"""

from __future__ import annotations

from dataclasses import dataclass, field

UNASSIGNED = "unassigned"


@dataclass(frozen=True)
class TransitionKind:
    id: str
    name: str
    typical_K: tuple[float, float]
    window_K: tuple[float, float]
    run_kinds: tuple[str, ...]
    mineral: str = ""
    note: str = ""

    def distance_to_typical(self, temperature_K: float) -> float:
        lo, hi = self.typical_K
        return 0.0 if lo <= temperature_K <= hi else min(abs(temperature_K - lo), abs(temperature_K - hi))


@dataclass(frozen=True)
class Assignment:
    kind: str
    ambiguous: bool = False
    candidates: tuple[str, ...] = field(default=())


_ALL = ("thermomagnetic", "susceptibility", "resonance", "diffraction", "calorimetry")

SEED_KINDS: tuple[TransitionKind, ...] = (
    TransitionKind("ordering", "Magnetic ordering of pyrrhotite", (585.0, 605.0), (540.0, 650.0),
                   _ALL, "pyrrhotite",
                   "Ferrimagnetic ordering; remarkably insensitive to composition."),
    TransitionKind("low-t", "Low-temperature transition of 4C pyrrhotite", (30.0, 34.0), (20.0, 45.0),
                   ("thermomagnetic", "susceptibility", "resonance", "calorimetry", "hysteresis"),
                   "pyrrhotite (4C)", "Belongs to 4C-bearing pyrrhotite near Fe7S8; absent in troilite."),
    TransitionKind("spin-reorientation", "Spin reorientation of troilite", (410.0, 450.0), (380.0, 462.0),
                   ("thermomagnetic", "susceptibility", "resonance", "diffraction", "calorimetry"), "troilite"),
    TransitionKind("vacancy-order", "Vacancy order-disorder of pyrrhotite", (470.0, 500.0), (455.0, 535.0),
                   ("diffraction", "calorimetry", "resonance", "susceptibility", "thermomagnetic"),
                   "pyrrhotite"),
    TransitionKind("verwey", "Verwey transition of magnetite", (118.0, 125.0), (95.0, 145.0),
                   ("thermomagnetic", "susceptibility", "calorimetry", "resonance"), "magnetite"),
    TransitionKind("magnetite-curie", "Curie temperature of magnetite", (845.0, 860.0), (800.0, 900.0),
                   ("thermomagnetic", "susceptibility"), "magnetite"),
    TransitionKind("morin", "Morin transition of hematite", (250.0, 260.0), (225.0, 280.0),
                   ("thermomagnetic", "susceptibility"), "hematite"),
)


def seed_kinds() -> dict[str, TransitionKind]:
    return {k.id: k for k in SEED_KINDS}


def assign_kind(temperature_K: float, run_kind: str,
                kinds: dict[str, TransitionKind] | None = None,
                allowed: tuple[str, ...] | None = None) -> Assignment:
    """Assign a transition at ``temperature_K`` seen in a ``run_kind`` run to a catalogue kind.

    Parameters
    ----------
    temperature_K : float
        Position of the anomaly in kelvin.
    run_kind : str
        Kind of run the anomaly was found in; only kinds revealed by it qualify.
    kinds : dict, optional
        The catalogue (defaults to the seeded one).
    allowed : tuple of str, optional
        Restrict to these kind ids (for example an analysis that only looks for
        ordering transitions).
    """
    kinds = kinds if kinds is not None else seed_kinds()
    hits = [k for k in kinds.values()
            if run_kind in k.run_kinds and k.window_K[0] <= temperature_K <= k.window_K[1]
            and (allowed is None or k.id in allowed)]
    if not hits:
        return Assignment(UNASSIGNED)
    hits.sort(key=lambda k: (k.distance_to_typical(temperature_K), k.id))
    return Assignment(hits[0].id, ambiguous=len(hits) > 1, candidates=tuple(k.id for k in hits))

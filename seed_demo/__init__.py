"""The invented demo collection of magvault (installed as ``magvault.seed_demo``).

A fictional magnetic-mineral lab: five parent crystals of pyrrhotite and
troilite-like iron sulfide from invented origins, cut into about thirty
specimens, measured a few hundred times on generic instruments.  Every curve is
synthesised from a small physical model with noise; ``manifest.json`` states
exactly what was planted, so that tests and features compare against it.

>>> from magvault.seed_demo import generate        # doctest: +SKIP
>>> plan = generate("demo-out", seed=2026)          # doctest: +SKIP

No name in the demo belongs to a real person, place, mine, meteorite, lab,
instrument maker or product.

The scenario describes work that can hurt: heating sulfides releases SO2 and H2S
(furnace runs and anneals under argon, with extraction), cryostats use cryogens,
magnets produce strong fields, and ground sulfide powders are a dust hazard.  The
demo only describes such work; in a real lab follow local safety rules and the
lab's trained staff.
"""

from .generate import Plan, generate
from .scenario import DEFAULT_SEED, Scenario, build_scenario
from .writers import SHAPES

RUN_KINDS = ("thermomagnetic", "hysteresis", "backfield", "susceptibility", "resonance", "diffraction",
             "calorimetry")

__all__ = ["generate", "Plan", "build_scenario", "Scenario", "DEFAULT_SEED", "SHAPES", "RUN_KINDS"]

"""Result shapes shared by every analysis.

An analysis returns an :class:`Outcome`: the method's name and version, the
parameters it used (every numerical choice, so that re-running gives the same
numbers), and its transitions and other results.  The vault stores one
derivation per outcome.  All values are SI (kelvin, tesla as mu0*H, A m^2, ...).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class TransitionEstimate:
    """A derived transition temperature.

    ``kind`` is a catalogue id (or ``"unassigned"``); ``uncertainty_K`` is a
    standard uncertainty (None only when the method cannot give one: such rows
    are never used in significance computations).  ``component`` numbers
    several peaks of one kind in one curve, 1 being the strongest; ``primary``
    marks the combined estimate of a run, kind, branch and component 1.
    """

    kind: str
    temperature_K: float
    uncertainty_K: float | None
    method: str
    branch: str | None = None
    component: int = 1
    primary: bool = False
    width_K: float | None = None
    ambiguous: bool = False
    diagnostics: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class ResultValue:
    """Any other derived number (Ms, Hc, theta, alpha95, ...), in SI."""

    quantity: str
    value: float
    uncertainty: float | None
    unit: str
    method: str
    block_temperature_K: float | None = None
    branch: str | None = None
    diagnostics: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Outcome:
    """What one method made of one run (or one group of runs)."""

    method: str
    version: str
    parameters: dict[str, Any]
    transitions: tuple[TransitionEstimate, ...] = ()
    results: tuple[ResultValue, ...] = ()
    warnings: tuple[str, ...] = ()
    diagnostics: dict[str, Any] = field(default_factory=dict)

"""The invented demo collection: origins, crystals, pieces, compositions, runs and what they plant.

Everything here is fiction made for the demo: the localities, the drill core, the
synthesis batches, the specimen codes, the people (roles only) and the instruments
(described by what they do).  :func:`build_scenario` draws the collection from one
seed; the physical parameters of every run are *planted* here and written to the
manifest, so that tests and features compare against the manifest and never
against hand-copied numbers.

The low-temperature transition of the 4C pieces follows an invented linear trend
with composition, T = T_ref + slope (x - 0.11), inside 30-34 K over x = 0.09-0.125
(the transition near 30-34 K is common practice, no single source).  About that
trend the ordinary pieces scatter by ``TREND_SCATTER_K`` (residuals placed on the
quantiles of a normal distribution, so the scatter is the same for every seed).
Five pieces are planted on purpose (see :data:`ROLES`):

* ``anneal``: measured once before and twice after an anneal that raises its
  transition by ``ANNEAL_SHIFT_K`` (10 assumed single-run uncertainties of 0.2 K);
* ``off-trend``: above the trend by 6.5 combined uncertainties of the trend
  comparison (and by at least 6 times the scatter about the trend);
* ``foreign``: a piece from another origin whose every run lies about 6 K below
  the rest of the collection;
* ``small``: 1.5 combined uncertainties above the trend, which no honest query may flag;
* ``end``: at the Fe-poor end of the 4C range (x = 0.1248), on the trend.

The trend comparison fits a straight line by weighted least squares, so the
foreign piece pulls every other piece's reference down by a few tenths of a
kelvin and widens the robust scatter s_r; the off-trend offset is therefore set
from the computed combined uncertainty rather than from the scatter alone.

One piece shows a split transition (a weaker second step 5 K below the first),
one shows mild alteration on cooling from 700 K, and troilite-like pieces (2C)
show no low-temperature step but a spin reorientation near 410-450 K.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from typing import Any

import numpy as np
from scipy.special import ndtri

from . import physics
from .expectations import TREND_CONVENTION, LowTRun, expected_shifts

DEFAULT_SEED = 2026

ROLES = ("anneal", "off-trend", "foreign", "small", "end", "anneal-no-shift", "split", "altered")

# Design values of the invented scenario.
TREND_X_REF = 0.11
TREND_SCATTER_K = 0.30
ANNEAL_SHIFT_K = 2.0
OFF_TREND_MIN_K = 6.0 * TREND_SCATTER_K
OFF_TREND_SIGMA = 6.5
SMALL_SIGMA = 1.5
SPLIT_SEPARATION_K = 5.0
# The split piece has larger steps (twice the usual) so that its weaker component
# (60 % of the first) still stands clear of the noise.
SPLIT_STRENGTH = 2.0
SPLIT_SECOND_FRACTION = 0.6
ASSUMED_RUN_UNCERTAINTY_K = 0.2
LOWT_COOLING_LAG_K = 0.8
ALTERATION_FACTOR = 1.07
THERMOMAGNETIC_FIELD_T = 0.1
LOWT_FIELD_T = 0.5
AC_FREQUENCY_HZ = 976.0
LOOP_TEMPERATURE_K = 300.0
DIFFRACTION_TEMPERATURE_K = 295.0

ROLES_OF_PEOPLE = ("student", "postdoc", "lab manager")

DENSITY_G_CM3 = {"4C": 4.61, "6C": 4.63, "NC": 4.65, "2C": 4.83}  # common practice, no single source


def iso(t: datetime) -> str:
    """ISO 8601 in UTC with a Z suffix, seconds precision."""
    return t.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def _utc(y: int, mo: int, d: int, h: int = 0, mi: int = 0) -> datetime:
    return datetime(y, mo, d, h, mi, tzinfo=timezone.utc)


@dataclass(frozen=True)
class Origin:
    name: str
    kind: str  # "locality" | "drill core" | "synthesis"
    notes: str


@dataclass(frozen=True)
class Instrument:
    name: str
    kind: str  # "magnetometer" | "ultrasound" | "diffractometer" | "calorimeter"
    place: str
    calibrations: tuple[tuple[str, str], ...]


@dataclass
class Specimen:
    code: str
    parent: str | None
    origin: str
    kind: str
    family: str                   # superstructure of the material: "4C", "6C", "NC", "2C"
    x: float
    analysed: bool                # own microprobe analysis (else inherits its parent's)
    mass_mg: float
    mass_unc_mg: float
    dims_mm: tuple[float, float, float] | None
    same_orientation: bool
    storage: str
    notes: str
    created: datetime
    role: str | None = None
    measured: bool = True
    curie_K: float = 0.0
    lowt_K: float | None = None    # planted low-T transition before any treatment
    split: bool = False
    spin_reorientation_K: float | None = None
    vacancy_order_K: float | None = None
    M0_A_m2_per_kg: float = 0.0    # at 0 K
    chi0_SI: float = 0.0
    mr_ratio: float = 0.0
    hc_T: float = 0.0
    hcr_ratio: float = 0.0
    coercivity_dispersion: float = 0.0
    chi_hf_A_m2_per_kg_T: float = 0.0
    theta_D_K: float = 0.0
    rus_f300_Hz: tuple[float, ...] = ()
    rus_q_base: float = 0.0
    orientation: np.ndarray | None = None   # specimen frame -> crystal Cartesian frame
    options: frozenset[str] = frozenset()   # which runs the schedule gives it (see _PIECES)

    @property
    def mass_kg(self) -> float:
        return self.mass_mg * 1e-6

    @property
    def density_kg_m3(self) -> float:
        return DENSITY_G_CM3[self.family] * 1e3

    @property
    def shows_lowt(self) -> bool:
        return self.lowt_K is not None

    def mass_text(self) -> str:
        if self.mass_unc_mg >= 0.1:
            return f"{self.mass_mg:.1f}+/-{self.mass_unc_mg:.1f} mg"
        return f"{self.mass_mg:.2f}+/-{self.mass_unc_mg:.2f} mg"

    def dims_text(self) -> str | None:
        if self.dims_mm is None:
            return None
        return " x ".join(f"{d:.1f}" for d in self.dims_mm) + " mm"


@dataclass(frozen=True)
class Treatment:
    specimen: str
    kind: str
    at: datetime
    conditions: dict[str, str]
    lowt_shift_K: float


@dataclass
class RunSpec:
    specimen: str
    kind: str          # run kind of DESIGN.md section 2
    protocol: str      # how it was measured: "tm-high", "tm-low", "loop", "loops-blocks", ...
    instrument: str
    operator: str
    direction: str | None
    group: str | None
    phase: int
    duration_min: int
    params: dict[str, Any]
    started: datetime | None = None
    index: int = -1


@dataclass
class Scenario:
    seed: int
    origins: list[Origin]
    instruments: list[Instrument]
    specimens: list[Specimen]
    orientations: list[dict[str, Any]]
    compositions: list[dict[str, Any]]
    treatments: list[Treatment]
    runs: list[RunSpec]
    trend: dict[str, float]
    roles: dict[str, str]
    shifts: list[dict[str, Any]] = field(default_factory=list)

    def specimen(self, code: str) -> Specimen:
        return next(s for s in self.specimens if s.code == code)

    def lowt_runs(self) -> list[LowTRun]:
        """Every planted low-T transition seen on warming (primary component)."""
        return [LowTRun(r.specimen, iso(r.started), r.params["lowt_heating_K"][0])
                for r in self.runs if r.params.get("lowt_heating_K")]

    def treated_at(self) -> dict[str, list[str]]:
        out: dict[str, list[str]] = {}
        for t in self.treatments:
            out.setdefault(t.specimen, []).append(iso(t.at))
        return out

    def x_of(self) -> dict[str, float]:
        return {s.code: s.x for s in self.specimens}


# --------------------------------------------------------------------------- the fiction

ORIGINS = (
    Origin("Quillmere Scarp", "locality",
           "Invented outcrop of the demo: a massive sulfide lens in a fictional valley wall."),
    Origin("core QD-7", "drill core",
           "Invented drill core of the demo; pieces from the 212-214 m and 388-390 m intervals."),
    Origin("batch SY-3", "synthesis",
           "Invented synthesis batch: Fe-poor pyrrhotite crystals grown from the elements in a sealed silica tube."),
    Origin("batch SY-5", "synthesis",
           "Invented synthesis batch: near-stoichiometric FeS crystals grown in a sealed silica tube."),
    Origin("Dunvarrow Hollow", "locality",
           "Invented locality of the demo, far from the others; one loose piece donated to the collection."),
)

INSTRUMENTS = (
    Instrument("furnace magnetometer", "magnetometer", "room B12", (
        ("2026-01-06T09:00:00Z", "moment scale checked against the lab's palladium reference"),
        ("2026-02-16T09:00:00Z", "furnace thermocouple checked at the melting point of tin"))),
    Instrument("cryo magnetometer", "magnetometer", "room B14", (
        ("2026-01-07T09:00:00Z", "moment scale checked against the lab's palladium reference"),)),
    Instrument("ac susceptometer", "magnetometer", "room B14", (
        ("2026-01-07T14:00:00Z", "in-phase and quadrature signals checked with a paramagnetic salt"),)),
    Instrument("RUS rig 1", "ultrasound", "room C03", (
        ("2026-01-08T09:00:00Z", "frequency scale checked with the lab's reference cylinder"),)),
    Instrument("powder diffractometer", "diffractometer", "room A07", (
        ("2026-01-08T13:00:00Z", "zero shift checked with a silicon powder standard"),)),
    Instrument("calorimeter", "calorimeter", "room C05", (
        ("2026-01-09T09:00:00Z", "heat-flow scale checked with a sapphire reference run"),)),
)

# code, parent, kind, x (None: no analysis of its own, the parent's x), analysed, role, options
# options: xyz (thermomagnetic along X, Y, Z as a group), chi_low (low-T susceptibility),
# cool (low-T run also on cooling), repeat (second low-T run in the second campaign),
# loops ("blocks" or "group"), rus, cp, xrd_series, reoriented, lowt_single (one low-T run only)
_PARENTS = (
    ("QS1", "Quillmere Scarp", "single crystal", 0.1205, 850.0,
     "Parent crystal; platy habit, one face polished for Laue."),
    ("QD7", "core QD-7", "aggregate", 0.1055, 640.0, "Massive aggregate from the 212-214 m interval."),
    ("SY3", "batch SY-3", "single crystal", 0.0950, 420.0, "Synthetic crystal, hexagonal prism."),
    ("SY5", "batch SY-5", "single crystal", 0.0040, 510.0, "Synthetic near-stoichiometric crystal."),
    ("QD9", "core QD-7", "aggregate", 0.0700, 380.0, "Aggregate from the 388-390 m interval; intergrown phases."),
)

_PIECES = (
    ("QS1-a", "QS1", "single crystal", 0.1200, True, None, {"xyz", "chi_low", "repeat", "rus", "loops:blocks"}),
    ("QS1-b", "QS1", "single crystal", 0.1190, True, "split", {"repeat", "rus"}),
    ("QS1-c", "QS1", "single crystal", 0.1215, True, None, {"xyz", "chi_low", "repeat", "loops:group", "cp"}),
    ("QS1-d", "QS1", "single crystal", 0.1180, True, None, {"cool", "repeat", "loops:group"}),
    ("QS1-e", "QS1", "single crystal", 0.1248, True, "end", {"xyz", "chi_low", "repeat", "rus"}),
    ("QS1-f", "QS1", "powder", None, False, None, {"cp", "no_lowt"}),
    ("QS1-a1", "QS1-a", "single crystal", 0.1205, True, "altered", {"repeat"}),
    ("QS1-a2", "QS1-a", "single crystal", 0.1210, True, None, {"xyz", "reoriented", "lowt_single"}),
    ("QD7-a", "QD7", "aggregate", 0.1020, True, None, {"chi_low", "repeat", "cp"}),
    ("QD7-b", "QD7", "aggregate", 0.1085, True, None, {"repeat", "loops:group"}),
    ("QD7-c", "QD7", "aggregate", 0.1050, True, "anneal", set()),
    ("QD7-d", "QD7", "aggregate", 0.1110, True, None, {"cool", "repeat", "chi_low"}),
    ("QD7-e", "QD7", "aggregate", 0.1040, True, "small", {"repeat"}),
    ("QD7-f", "QD7", "polished section", 0.1000, True, None, {"lowt_single"}),
    ("SY3-a", "SY3", "single crystal", 0.0930, True, None, {"xyz", "repeat", "rus", "cp"}),
    ("SY3-b", "SY3", "single crystal", 0.0960, True, "anneal-no-shift", {"chi_low", "rus"}),
    ("SY3-c", "SY3", "single crystal", 0.0945, True, "off-trend", {"xyz", "chi_low", "repeat", "loops:blocks"}),
    ("SY3-d", "SY3", "single crystal", 0.0975, True, None, {"repeat", "cool"}),
    ("SY5-a", "SY5", "single crystal", 0.0035, True, None, {"xyz", "rus", "xrd_series", "lowt_absent"}),
    ("SY5-b", "SY5", "single crystal", 0.0045, True, "anneal-no-shift", {"xyz", "rus"}),
    ("SY5-c", "SY5", "single crystal", None, False, None, {"loops:blocks"}),
    ("SY5-d", "SY5", "powder", None, False, None, {"cp"}),
    ("QD9-a", "QD9", "aggregate", 0.0550, True, None, {"cp", "lowt_absent", "xrd_series"}),
    ("QD9-b", "QD9", "aggregate", 0.0830, True, None, {"loops:group"}),
    ("QD9-c", "QD9", "polished section", 0.0650, True, None, set()),
)

_FOREIGN = ("DH1", "Dunvarrow Hollow", "aggregate", 0.1100, 96.0, "foreign",
            "Loose piece from another origin; gift to the collection.",
            {"repeat"})

_STORAGE = ("desiccator D1", "desiccator D2", "argon glovebox, shelf 2", "cabinet S3, drawer 1")

CELLS = {
    # Published cells (Evans, 1970, for troilite; the usual F2/d setting of 4C pyrrhotite).
    "QS1": ("monoclinic", "a=11.88 b=6.87 c=22.79 beta=90.47"),
    "SY3": ("hexagonal", "a=3.43 c=5.70"),
    "SY5": ("hexagonal", "a=5.962 c=11.750"),
}


# --------------------------------------------------------------------------- building

def build_scenario(seed: int = DEFAULT_SEED) -> Scenario:
    """Draw the whole invented collection and its run schedule from ``seed``.

    Parameters
    ----------
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same scenario.

    Returns
    -------
    Scenario
        Specimens parents-first, runs ordered by start time, every planted value
        in each run's ``params``.
    """
    rng = np.random.default_rng(seed)
    specimens = _specimens(rng)
    trend = {"T_ref_K": float(32.0 + rng.uniform(-0.2, 0.2)),
             "slope_K_per_x": float(rng.uniform(55.0, 70.0)),
             "x_ref": TREND_X_REF, "scatter_K": TREND_SCATTER_K}
    _material(rng, specimens, trend)
    orientations = _orientations(rng, specimens)
    compositions = _compositions(rng, specimens)
    runs, treatments = _schedule(rng, specimens)
    roles = {s.role: s.code for s in specimens if s.role and s.role != "anneal-no-shift"}
    scenario = Scenario(seed, list(ORIGINS), list(INSTRUMENTS), specimens, orientations,
                        compositions, treatments, runs, trend, roles)
    _place_planted_offsets(scenario)
    scenario.shifts = _shift_records(scenario)
    return scenario


def _specimens(rng: np.random.Generator) -> list[Specimen]:
    out: list[Specimen] = []
    x_known = {}
    masses = {}
    for i, (code, origin, kind, x, mass, notes) in enumerate(_PARENTS):
        m = mass * rng.uniform(0.95, 1.05)
        x_known[code] = x
        masses[code] = m
        fam = physics.superstructure_label(x)
        out.append(Specimen(code, None, origin, kind, fam, x, True, m, 0.1, _dims(rng, m, fam, kind),
                            False, _STORAGE[i % 2], notes, _utc(2026, 1, 12 + i, 10), measured=False))
    # Children take a share of their parent's mass; cutting and grinding lose 10-20 %.
    shares: dict[str, list[float]] = {}
    for parent in [p[0] for p in _PARENTS] + ["QS1-a"]:
        n = sum(1 for p in _PIECES if p[1] == parent)
        shares[parent] = list(rng.dirichlet(np.full(n, 4.0)) * rng.uniform(0.80, 0.90))
    for j, (code, parent, kind, x, analysed, role, opts) in enumerate(_PIECES):
        if x is None:
            x = x_known[parent]  # no analysis of its own: inherits its parent's
        x_known[code] = x
        fam = physics.superstructure_label(x)
        m = masses[parent] * shares[parent].pop(0)
        masses[code] = m
        depth = 2 if parent in {p[0] for p in _PIECES} else 1
        created = _utc(2026, 1, 19 + 6 * (depth - 1), 9) + timedelta(minutes=25 * j)
        same = kind == "single crystal" and "reoriented" not in opts
        notes = _piece_notes(kind, parent)
        s = Specimen(code, parent, _origin_of(parent), kind, fam, float(x), analysed,
                     m, 0.1 if m >= 100 else 0.02, _dims(rng, m, fam, kind), same,
                     _STORAGE[2 + (j % 2)] if kind == "powder" else _STORAGE[j % 2], notes, created,
                     role=role, options=frozenset(opts))
        out.append(s)
    code, origin, kind, x, mass, role, notes, opts = _FOREIGN
    m = mass * rng.uniform(0.95, 1.05)
    s = Specimen(code, None, origin, kind, physics.superstructure_label(x), x, True, m, 0.02,
                 _dims(rng, m, "4C", kind), False, _STORAGE[0], notes, _utc(2026, 1, 21, 15), role=role,
                 options=frozenset(opts))
    out.append(s)
    return out


def _origin_of(parent: str) -> str:
    root = parent.split("-")[0]
    return next(p[1] for p in _PARENTS if p[0] == root)


def _piece_notes(kind: str, parent: str) -> str:
    if kind == "powder":
        return f"Ground from a chip of {parent} in an agate mortar under ethanol; fine powder, handled in a fume hood."
    if kind == "polished section":
        return f"Chip of {parent} mounted and polished for the microprobe."
    return f"Cut from {parent} with a low-speed wire saw."


def _dims(rng: np.random.Generator, mass_mg: float, family: str, kind: str) -> tuple[float, float, float] | None:
    if kind == "powder":
        return None
    volume_mm3 = mass_mg / DENSITY_G_CM3[family]  # 1 g/cm^3 = 1 mg/mm^3
    aspect = np.array([1.0, rng.uniform(0.6, 0.9), rng.uniform(0.4, 0.7)])
    if kind == "polished section":
        aspect[2] = rng.uniform(0.2, 0.3)
    k = (volume_mm3 / aspect.prod()) ** (1.0 / 3.0)
    return tuple(float(round(v, 1)) for v in aspect * k)  # type: ignore[return-value]


def _material(rng: np.random.Generator, specimens: list[Specimen], trend: dict[str, float]) -> None:
    """Plant the physical parameters of every specimen (parents too, for completeness)."""
    lowt_codes = [s.code for s in specimens if s.measured and s.family == "4C" and s.kind != "powder"]
    ordinary = [c for c in lowt_codes
                if next(s for s in specimens if s.code == c).role not in ("off-trend", "foreign", "small", "end")]
    n = len(ordinary)
    quantiles = ndtri((np.arange(n) + 0.5) / n) * TREND_SCATTER_K
    residual = dict(zip(ordinary, rng.permutation(quantiles)))
    for s in specimens:
        fam = s.family
        s.curie_K = float(rng.uniform(586.0, 598.0))
        s.theta_D_K = float(rng.uniform(360.0, 430.0))
        if fam == "4C":
            s.M0_A_m2_per_kg = float(rng.uniform(18.0, 22.0))
            s.chi0_SI = float(rng.uniform(0.10, 0.30))
            s.mr_ratio, s.hc_T = float(rng.uniform(0.15, 0.45)), float(rng.uniform(0.015, 0.055))
            s.chi_hf_A_m2_per_kg_T = float(rng.uniform(0.3, 0.8))
        elif fam in ("NC", "6C"):
            s.M0_A_m2_per_kg = float(rng.uniform(2.0, 4.0))
            s.chi0_SI = float(rng.uniform(0.01, 0.03))
            s.mr_ratio, s.hc_T = float(rng.uniform(0.10, 0.20)), float(rng.uniform(0.010, 0.020))
            s.chi_hf_A_m2_per_kg_T = float(rng.uniform(0.3, 0.6))
            s.vacancy_order_K = float(rng.uniform(478.0, 495.0))
        else:
            s.M0_A_m2_per_kg = float(rng.uniform(0.10, 0.20))
            s.chi0_SI = float(rng.uniform(4e-4, 8e-4))
            s.mr_ratio, s.hc_T = float(rng.uniform(0.10, 0.20)), float(rng.uniform(0.010, 0.030))
            s.chi_hf_A_m2_per_kg_T = float(rng.uniform(0.20, 0.35))
            s.spin_reorientation_K = float(440.0 - 2500.0 * s.x + rng.uniform(-3.0, 3.0))
        s.hcr_ratio = float(rng.uniform(1.3, 2.5))
        s.coercivity_dispersion = float(rng.uniform(0.45, 0.70))
        f1 = rng.uniform(320e3, 420e3)
        s.rus_f300_Hz = (float(f1), float(f1 * rng.uniform(1.25, 1.45)), float(f1 * rng.uniform(1.70, 2.00)))
        s.rus_q_base = float(rng.uniform(2.5e-4, 4.0e-4))
        if s.code in lowt_codes:
            on_trend = trend["T_ref_K"] + trend["slope_K_per_x"] * (s.x - trend["x_ref"])
            if s.role == "foreign":
                offset = -float(rng.uniform(5.5, 6.0))
            elif s.role == "off-trend":
                offset = OFF_TREND_MIN_K  # raised to its planted sigma later (_place_planted_offsets)
            elif s.role in ("small", "end"):
                offset = 0.0
            else:
                offset = residual[s.code]
            s.lowt_K = float(on_trend + offset)
            s.split = s.role == "split"


def _orientations(rng: np.random.Generator, specimens: list[Specimen]) -> list[dict[str, Any]]:
    out = []
    by_code = {s.code: s for s in specimens}
    for s in specimens:
        if s.kind != "single crystal":
            continue
        if s.parent is None or not s.same_orientation:
            s.orientation = physics.random_rotation(rng)
            root = s.code.split("-")[0]
            system, cell = CELLS[root]
            at = s.created + timedelta(days=2 if s.parent is None else 1, hours=3)
            out.append({"specimen": s.code, "matrix": [float(round(v, 9)) for v in s.orientation.ravel()],
                        "system": system, "cell": cell, "method": "Laue", "uncertainty": "2 deg",
                        "at": iso(at)})
        else:
            s.orientation = by_code[s.parent].orientation
    return out


def _compositions(rng: np.random.Generator, specimens: list[Specimen]) -> list[dict[str, Any]]:
    out = []
    start = _utc(2026, 1, 28, 9)
    k = 0
    for s in specimens:
        if not s.analysed:
            continue
        total = float(rng.uniform(99.3, 100.6))
        fe, su = physics.weight_percent(s.x, total)
        out.append({"specimen": s.code, "method": "microprobe",
                    "wt": {"Fe": [round(fe, 2), round(float(rng.uniform(0.20, 0.30)), 2)],
                           "S": [round(su, 2), round(float(rng.uniform(0.20, 0.30)), 2)]},
                    "superstructure": physics.superstructure_label(s.x),
                    "at": iso(start + timedelta(minutes=40 * k))})
        k += 1
    return out


# --------------------------------------------------------------------------- the runs

_DURATION_MIN = {"tm-high": 180, "tm-low": 200, "tm-low-cool": 395, "loop": 45, "loops-blocks": 260,
                 "backfield": 40, "chi-high": 190, "chi-low": 120, "rus": 330, "xrd": 75, "cp": 420}

_INSTRUMENT = {"tm-high": "furnace magnetometer", "tm-low": "cryo magnetometer",
               "loop": "furnace magnetometer", "loops-blocks": "cryo magnetometer",
               "backfield": "furnace magnetometer", "chi-high": "ac susceptometer",
               "chi-low": "ac susceptometer", "rus": "RUS rig 1", "xrd": "powder diffractometer",
               "cp": "calorimeter"}

_KIND = {"tm-high": "thermomagnetic", "tm-low": "thermomagnetic", "loop": "hysteresis",
         "loops-blocks": "hysteresis", "backfield": "backfield", "chi-high": "susceptibility",
         "chi-low": "susceptibility", "rus": "resonance", "xrd": "diffraction", "cp": "calorimetry"}

_PHASE1_ORDER = ("xrd", "tm-high", "loop", "backfield", "tm-low", "loops-blocks", "chi-low", "chi-high",
                 "rus", "cp")

RUS_BLOCK_TEMPERATURES_K = (300.0, 350.0, 400.0, 425.0, 450.0, 500.0, 540.0, 570.0, 585.0, 595.0, 610.0, 640.0)
LOOP_BLOCK_TEMPERATURES_K = (10.0, 20.0, 40.0, 80.0, 150.0, 300.0)
LOOP_GROUP_TEMPERATURES_K = (100.0, 200.0, 300.0)
XRD_SERIES_TEMPERATURES_K = (295.0, 400.0, 450.0, 500.0)
XRD_VACANCY_SERIES_TEMPERATURES_K = (295.0, 450.0, 470.0, 500.0, 520.0)


def _direction_factor(s: Specimen, direction: str | None) -> float:
    """Moment along a specimen axis relative to the basal plane (invented anisotropy).

    The basal plane is the easy plane (common practice, no single source); the moment
    along a specimen axis at angle theta to the crystal c axis is taken as
    0.35 + 0.65 sin^2(theta).  The orientation matrix maps specimen-frame vectors to
    the crystal Cartesian frame (x along a, z along c*), so the c axis in the
    specimen frame is the matrix's third row.
    """
    if s.orientation is None or direction is None:
        return 1.0
    k = "XYZ".index(direction)
    cos_theta = float(s.orientation[2, k])
    return 0.35 + 0.65 * (1.0 - cos_theta ** 2)


def _schedule(rng: np.random.Generator, specimens: list[Specimen]) -> tuple[list[RunSpec], list[Treatment]]:
    measured = [s for s in specimens if s.measured]
    phase1: list[RunSpec] = []
    phase2: list[RunSpec] = []
    for s in measured:
        opts = s.options
        crystal = s.kind == "single crystal"
        default_dir = "Z" if crystal else None
        # diffraction
        if "xrd_series" in opts:
            series = XRD_SERIES_TEMPERATURES_K if s.spin_reorientation_K else XRD_VACANCY_SERIES_TEMPERATURES_K
            for T in series:
                phase1.append(_run(rng, s, "xrd", None, f"{s.code}/xrd-T", 1, _xrd_params(s, T)))
        else:
            phase1.append(_run(rng, s, "xrd", None, None, 1, _xrd_params(s, DIFFRACTION_TEMPERATURE_K)))
        # high-temperature thermomagnetic
        if "xyz" in opts:
            for d in "XYZ":
                phase1.append(_run(rng, s, "tm-high", d, f"{s.code}/xyz", 1, _tm_high_params(s, d)))
        else:
            phase1.append(_run(rng, s, "tm-high", default_dir, None, 1, _tm_high_params(s, default_dir)))
        # hysteresis and backfield at room temperature
        if "xyz" in opts:
            for d in "XYZ":
                phase1.append(_run(rng, s, "loop", d, f"{s.code}/xyz-loop", 1,
                                   _loop_params(s, LOOP_TEMPERATURE_K, d)))
        else:
            phase1.append(_run(rng, s, "loop", default_dir, None, 1,
                               _loop_params(s, LOOP_TEMPERATURE_K, default_dir)))
        if "loops:blocks" in opts:
            blocks = [_loop_params(s, T, default_dir) for T in LOOP_BLOCK_TEMPERATURES_K]
            phase1.append(_run(rng, s, "loops-blocks", default_dir, None, 1, {"blocks": blocks}))
        if "loops:group" in opts:
            for T in LOOP_GROUP_TEMPERATURES_K:
                phase1.append(_run(rng, s, "loop", default_dir, f"{s.code}/loops-T", 1,
                                   _loop_params(s, T, default_dir)))
        phase1.append(_run(rng, s, "backfield", default_dir, None, 1, _backfield_params(s, default_dir)))
        # low temperature
        if s.shows_lowt:
            cool = "cool" in opts
            phase1.append(_run(rng, s, "tm-low", default_dir, None, 1, _tm_low_params(rng, s, default_dir, 0.0, cool)))
            if "chi_low" in opts:
                phase1.append(_run(rng, s, "chi-low", None, None, 1, _chi_low_params(rng, s, 0.0)))
        elif "lowt_absent" in opts:
            phase1.append(_run(rng, s, "tm-low", default_dir, None, 1, _tm_low_params(rng, s, default_dir, 0.0, False)))
        phase1.append(_run(rng, s, "chi-high", None, None, 1, _chi_high_params(s)))
        if "rus" in opts:
            phase1.append(_run(rng, s, "rus", None, None, 1, _rus_params(s)))
        if "cp" in opts:
            phase1.append(_run(rng, s, "cp", None, None, 1, _cp_params(s)))
        # second campaign: every piece (not the powders) goes round the furnace once more
        shift = ANNEAL_SHIFT_K if s.role == "anneal" else 0.0
        if s.kind != "powder":
            phase2.append(_run(rng, s, "tm-high", default_dir, None, 2, _tm_high_params(s, default_dir)))
        if crystal:
            phase2.append(_run(rng, s, "chi-high", None, None, 2, _chi_high_params(s)))
        if s.role in ("anneal", "anneal-no-shift"):
            phase2.append(_run(rng, s, "xrd", None, None, 2, _xrd_params(s, DIFFRACTION_TEMPERATURE_K)))
            phase2.append(_run(rng, s, "loop", default_dir, None, 2, _loop_params(s, LOOP_TEMPERATURE_K, default_dir)))
            phase2.append(_run(rng, s, "backfield", default_dir, None, 2, _backfield_params(s, default_dir)))
            if "rus" in opts:
                phase2.append(_run(rng, s, "rus", None, None, 2, _rus_params(s)))
        if s.shows_lowt and (("repeat" in opts) or s.role in ("anneal", "anneal-no-shift")):
            phase2.append(_run(rng, s, "tm-low", default_dir, None, 2,
                               _tm_low_params(rng, s, default_dir, shift, "cool" in opts)))
        if s.role == "anneal":
            phase2.append(_run(rng, s, "chi-low", None, None, 2, _chi_low_params(rng, s, shift)))
    phase1.sort(key=lambda r: _PHASE1_ORDER.index(r.protocol))  # stable: specimens keep their order
    # Campaign 1 on consecutive slots, then the anneals, then campaign 2.
    t = _utc(2026, 2, 2, 8)
    for r in phase1:
        r.started = t
        t = t + timedelta(minutes=r.duration_min + 20)
    anneal_day = (t + timedelta(days=1)).replace(hour=9, minute=0, second=0)
    treatments = []
    for k, s in enumerate(s for s in measured if s.role in ("anneal", "anneal-no-shift")):
        conditions = {"temperature": "573 K" if s.role == "anneal" or s.family == "2C" else "473 K",
                      "duration": "48 h" if s.role == "anneal" else "2 h", "atmosphere": "argon"}
        treatments.append(Treatment(s.code, "anneal", anneal_day + timedelta(hours=k),
                                    conditions, ANNEAL_SHIFT_K if s.role == "anneal" else 0.0))
    t = anneal_day + timedelta(days=3)
    t = t.replace(hour=8)
    for r in phase2:
        r.started = t
        t = t + timedelta(minutes=r.duration_min + 20)
    runs = phase1 + phase2
    for i, r in enumerate(runs):
        r.index = i + 1
    return runs, treatments


def _run(rng: np.random.Generator, s: Specimen, protocol: str, direction: str | None,
         group: str | None, phase: int, params: dict[str, Any]) -> RunSpec:
    operator = ROLES_OF_PEOPLE[int(rng.integers(len(ROLES_OF_PEOPLE)))]
    duration = _DURATION_MIN["tm-low-cool" if params.get("lowt_cooling_K") else protocol]
    params = {"specimen": s.code, **params}
    return RunSpec(s.code, _KIND[protocol], protocol, _INSTRUMENT[protocol], operator, direction, group,
                   phase, duration, params)


def _tm_high_params(s: Specimen, direction: str | None) -> dict[str, Any]:
    factor = _direction_factor(s, direction)
    p: dict[str, Any] = {
        "field_T": THERMOMAGNETIC_FIELD_T,
        "curie_heating_K": s.curie_K,  # zero-field mean-field Tc; the field term uses a nominal 592 K
        "curie_cooling_K": s.curie_K - 0.6,
        "moment0_A_m2": s.M0_A_m2_per_kg * s.mass_kg * factor,
        "direction_factor": factor,
        "cooling_moment_factor": ALTERATION_FACTOR if s.role == "altered" else 1.0,
        "sweep_rate_K_per_s": 5.0 / 60.0,
    }
    if s.spin_reorientation_K is not None:
        p["spin_reorientation_K"] = s.spin_reorientation_K
    if s.vacancy_order_K is not None:
        p["vacancy_order_K"] = s.vacancy_order_K
    return p


def _tm_low_params(rng: np.random.Generator, s: Specimen, direction: str | None, shift: float,
                   cool: bool) -> dict[str, Any]:
    factor = _direction_factor(s, direction)
    p: dict[str, Any] = {"field_T": LOWT_FIELD_T,
                         "moment0_A_m2": s.M0_A_m2_per_kg * s.mass_kg * factor,
                         "sweep_rate_K_per_s": 1.0 / 60.0}
    if s.lowt_K is None:
        p.update(lowt_heating_K=[], lowt_cooling_K=None, step_heights=[], width_K=None)
        return p
    t1 = s.lowt_K + shift
    # Step of 2-3 % of M, logistic scale 0.6-0.8 K (derivative FWHM 2.1-2.8 K), with 0.2 %
    # noise every 0.5 K (see synthesis.tm_low): a single run places the step to about
    # 0.1-0.3 K by derivative-peak fitting.
    h1 = float(rng.uniform(0.02, 0.03)) * (SPLIT_STRENGTH if s.split else 1.0)
    temps, heights = [t1], [h1]
    if s.split:
        temps.append(t1 - SPLIT_SEPARATION_K)
        heights.append(SPLIT_SECOND_FRACTION * h1)
    p.update(lowt_heating_K=temps,
             lowt_cooling_K=[t - LOWT_COOLING_LAG_K for t in temps] if cool else None,
             step_heights=heights, width_K=float(rng.uniform(0.6, 0.8)),
             background_slope_per_K=-1e-4)
    return p


def _chi_low_params(rng: np.random.Generator, s: Specimen, shift: float) -> dict[str, Any]:
    t1 = s.lowt_K + shift  # type: ignore[operator]
    temps, heights = [t1], [float(rng.uniform(0.02, 0.03)) * (SPLIT_STRENGTH if s.split else 1.0)]
    if s.split:
        temps.append(t1 - SPLIT_SEPARATION_K)
        heights.append(SPLIT_SECOND_FRACTION * heights[0])
    return {"frequency_Hz": AC_FREQUENCY_HZ, "chi0_SI": 0.6 * s.chi0_SI, "lowt_heating_K": temps,
            "step_heights": heights, "width_K": float(rng.uniform(0.6, 0.8)),
            "sweep_rate_K_per_s": 0.5 / 60.0}


def _chi_high_params(s: Specimen) -> dict[str, Any]:
    p: dict[str, Any] = {"frequency_Hz": AC_FREQUENCY_HZ, "curie_K": s.curie_K, "chi0_SI": s.chi0_SI,
                         "sweep_rate_K_per_s": 4.0 / 60.0}
    if s.spin_reorientation_K is not None:
        p["spin_reorientation_K"] = s.spin_reorientation_K
    if s.vacancy_order_K is not None:
        p["vacancy_order_K"] = s.vacancy_order_K
    return p


def _loop_params(s: Specimen, T: float, direction: str | None) -> dict[str, Any]:
    factor = _direction_factor(s, direction)
    m = float(physics.reduced_magnetisation(np.array([T]), s.curie_K)[0])
    ms = s.M0_A_m2_per_kg * s.mass_kg * m * factor
    # Coercivity rises on cooling, and steps up below the low-T transition (invented).
    hc = s.hc_T * (1.0 + 0.5 * np.exp(-T / 80.0))
    mr_ratio = s.mr_ratio
    if s.lowt_K is not None:
        below = 1.0 - float(physics.step(np.array([T]), s.lowt_K, 1.0)[0])
        hc = hc * (1.0 + 0.6 * below)
        mr_ratio = min(0.6, mr_ratio * (1.0 + 0.3 * below))
    return {"temperature_K": float(T), "Ms_A_m2": ms, "Mr_A_m2": ms * mr_ratio, "Hc_T": float(hc),
            "chi_hf_A_m2_per_T": s.chi_hf_A_m2_per_kg_T * s.mass_kg, "max_field_T": 1.0}


def _backfield_params(s: Specimen, direction: str | None) -> dict[str, Any]:
    loop = _loop_params(s, LOOP_TEMPERATURE_K, direction)
    return {"temperature_K": LOOP_TEMPERATURE_K, "Mr_A_m2": loop["Mr_A_m2"], "Hc_T": loop["Hc_T"],
            "Hcr_T": loop["Hc_T"] * s.hcr_ratio, "dispersion": s.coercivity_dispersion}


def _rus_transitions(s: Specimen) -> list[tuple[float, float, float]]:
    out = [(s.curie_K, 0.04, 12.0)]
    if s.spin_reorientation_K is not None:
        out.append((s.spin_reorientation_K, 0.03, 8.0))
    if s.vacancy_order_K is not None:
        out.append((s.vacancy_order_K, 0.02, 10.0))
    return out


def _rus_params(s: Specimen) -> dict[str, Any]:
    transitions = _rus_transitions(s)
    q_peaks = [(t, 4.5e-4, 10.0) for t, _, _ in transitions]
    blocks = []
    for T in RUS_BLOCK_TEMPERATURES_K:
        q = float(physics.inverse_quality(np.array([T]), base=s.rus_q_base, peaks=q_peaks)[0])
        modes = []
        for f300 in s.rus_f300_Hz:
            f = float(physics.softened_frequency(np.array([T]), f300, transitions=transitions)[0])
            modes.append({"frequency_Hz": f, "fwhm_Hz": q * f, "inverse_q": q})
        blocks.append({"temperature_K": T, "modes": modes})
    return {"transitions_K": [t for t, _, _ in transitions], "blocks": blocks,
            "lineshape": "Lorentzian in the recorded amplitude"}


_HKL = ((1, 0, 0, 15.0), (1, 0, 1, 55.0), (0, 0, 2, 10.0), (1, 0, 2, 100.0), (1, 1, 0, 60.0),
        (1, 0, 3, 8.0), (2, 0, 0, 5.0), (1, 1, 2, 12.0), (2, 0, 1, 10.0), (0, 0, 4, 4.0),
        (2, 0, 2, 12.0), (1, 0, 4, 6.0))


def _xrd_params(s: Specimen, T: float) -> dict[str, Any]:
    A, C = physics.subcell_parameters(s.x)
    # Thermal expansion and a small c-axis jump at the spin reorientation (invented).
    A = A * (1.0 + 1.5e-5 * (T - DIFFRACTION_TEMPERATURE_K))
    C = C * (1.0 + 3.0e-5 * (T - DIFFRACTION_TEMPERATURE_K))
    if s.spin_reorientation_K is not None:
        C = C * (1.0 + 0.004 * float(physics.step(np.array([T]), s.spin_reorientation_K, 3.0)[0]))
    peaks = []
    for h, k, l, rel in _HKL:
        d = physics.hexagonal_d_spacing(h, k, l, A, C)
        tt = physics.two_theta_deg(d)
        if 20.0 < tt < 80.0:
            peaks.append({"hkl": f"{h}{k}{l}", "d_m": float(d * 1e-10), "two_theta_deg": tt,
                          "relative_intensity": rel})
    return {"temperature_K": float(T), "wavelength_m": physics.CU_KALPHA1_ANGSTROM * 1e-10,
            "x": s.x, "subcell_A_m": A * 1e-10, "subcell_C_m": C * 1e-10,
            "d102_m": physics.hexagonal_d_spacing(1, 0, 2, A, C) * 1e-10, "peaks": peaks,
            "note": "NiAs-type subcell reflections only; relative intensities are illustrative"}


def _cp_params(s: Specimen) -> dict[str, Any]:
    anomalies = [{"kind": "ordering", "temperature_K": s.curie_K, "height_J_per_mol_K": 4.0}]
    if s.spin_reorientation_K is not None:
        anomalies.append({"kind": "spin-reorientation", "temperature_K": s.spin_reorientation_K,
                          "height_J_per_mol_K": 9.0})
    if s.vacancy_order_K is not None:
        anomalies.append({"kind": "vacancy-order", "temperature_K": s.vacancy_order_K,
                          "height_J_per_mol_K": 3.0})
    molar_mass = (1.0 - s.x) * physics.ATOMIC_WEIGHT_FE + physics.ATOMIC_WEIGHT_S
    return {"theta_D_K": s.theta_D_K, "atoms_per_formula": 2.0 - s.x,
            "molar_mass_g_per_mol": molar_mass, "anomalies": anomalies,
            "per": "mole of Fe(1-x)S formula units", "sweep_rate_K_per_s": 2.0 / 60.0}


# --------------------------------------------------------------------------- planted shifts

def _place_planted_offsets(scenario: Scenario) -> None:
    """Place the ``off-trend`` and ``small`` pieces at their planted trend sigmas.

    The trend comparison of a piece uses only the *other* pieces (leave one out),
    so its combined uncertainty does not depend on its own value: the offset that
    puts it at a given sigma follows directly.  The two pieces enter each other's
    references, hence a few alternating passes (each changes the other's reference
    by about 1/17 of the change, so four passes settle to well below 1e-4 K).
    """
    for _ in range(4):
        _set_trend_sigma(scenario, scenario.roles["off-trend"], OFF_TREND_SIGMA, OFF_TREND_MIN_K)
        _set_trend_sigma(scenario, scenario.roles["small"], SMALL_SIGMA, 0.0)


def _set_trend_sigma(scenario: Scenario, code: str, target_sigma: float, min_offset_K: float) -> None:
    s = scenario.specimen(code)
    result = expected_shifts(scenario.lowt_runs(), scenario.x_of(), scenario.treated_at(),
                             u_run=ASSUMED_RUN_UNCERTAINTY_K, convention=TREND_CONVENTION)
    e = result["trend"][code]
    delta = target_sigma * e.combined_uncertainty_K - e.shift_K
    tr = scenario.trend
    on_trend = tr["T_ref_K"] + tr["slope_K_per_x"] * (s.x - tr["x_ref"])
    if (s.lowt_K + delta) - on_trend < min_offset_K:  # type: ignore[operator]
        delta = on_trend + min_offset_K - s.lowt_K  # type: ignore[operator]
    s.lowt_K = float(s.lowt_K + delta)  # type: ignore[operator]
    for r in scenario.runs:
        if r.specimen == code and r.params.get("lowt_heating_K"):
            r.params["lowt_heating_K"] = [t + delta for t in r.params["lowt_heating_K"]]
            if r.params.get("lowt_cooling_K"):
                r.params["lowt_cooling_K"] = [t + delta for t in r.params["lowt_cooling_K"]]


def _shift_records(scenario: Scenario) -> list[dict[str, Any]]:
    tr = scenario.trend

    def on_trend(x: float) -> float:
        return tr["T_ref_K"] + tr["slope_K_per_x"] * (x - tr["x_ref"])

    roles = scenario.roles
    out = []
    a = scenario.specimen(roles["anneal"])
    out.append({"specimen": a.code, "cause": "anneal", "planted_shift_K": ANNEAL_SHIFT_K,
                "relative_to": "its runs before the anneal",
                "shift_in_single_run_uncertainties": ANNEAL_SHIFT_K / ASSUMED_RUN_UNCERTAINTY_K})
    o = scenario.specimen(roles["off-trend"])
    out.append({"specimen": o.code, "cause": "off the composition trend (unexplained, intrinsic)",
                "planted_shift_K": o.lowt_K - on_trend(o.x), "relative_to": "composition trend",
                "shift_in_trend_scatters": (o.lowt_K - on_trend(o.x)) / TREND_SCATTER_K,
                "planted_sigma_trend": OFF_TREND_SIGMA})
    f = scenario.specimen(roles["foreign"])
    out.append({"specimen": f.code, "cause": "another origin", "planted_shift_K": f.lowt_K - on_trend(f.x),
                "relative_to": "composition trend"})
    sm = scenario.specimen(roles["small"])
    out.append({"specimen": sm.code, "cause": "small offset below detection",
                "planted_shift_K": sm.lowt_K - on_trend(sm.x), "relative_to": "composition trend",
                "planted_sigma_trend": SMALL_SIGMA})
    e = scenario.specimen(roles["end"])
    out.append({"specimen": e.code, "cause": "none: end of the 4C composition range, on the trend",
                "planted_shift_K": e.lowt_K - on_trend(e.x), "relative_to": "composition trend"})
    return out

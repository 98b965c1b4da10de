"""Canonical names of the import layer: shapes, run kinds, series columns, run conditions.

Everything here is a plain constant so that readers, the unit normaliser and the
column guesser agree on one vocabulary (DESIGN.md section 5).
"""

from __future__ import annotations

SHAPES: tuple[str, ...] = ("delimited", "sectioned", "commented", "blocks", "spreadsheet")

RUN_KINDS: tuple[str, ...] = (
    "thermomagnetic", "hysteresis", "backfield", "susceptibility", "resonance",
    "diffraction", "calorimetry",
)

# Canonical series column -> (quantity, stored unit).  The quantity names are
# those returned by :func:`magvault.ingest.spelling.si_conversion`.
CANONICAL_COLUMNS: dict[str, tuple[str, str]] = {
    "time_s": ("time", "s"),
    "temperature_K": ("temperature", "K"),
    "mu0H_T": ("field", "T"),
    "moment_A_m2": ("moment", "A m^2"),
    "moment_A_m2_per_kg": ("mass_moment", "A m^2/kg"),
    "chi_vol": ("volume_susceptibility", "1 (SI)"),
    "chi_mass_m3_per_kg": ("mass_susceptibility", "m^3/kg"),
    "chi_quad_vol": ("volume_susceptibility", "1 (SI)"),
    "chi_quad_mass_m3_per_kg": ("mass_susceptibility", "m^3/kg"),
    "frequency_Hz": ("frequency", "Hz"),
    "amplitude": ("amplitude", "instrument units"),
    "phase_rad": ("angle", "rad"),
    "two_theta_deg": ("two_theta", "deg"),
    "intensity_counts": ("counts", "counts"),
    "intensity_sigma_counts": ("counts", "counts"),
    "heat_capacity_J_per_mol_K": ("molar_heat_capacity", "J/(mol K)"),
    "heat_capacity_J_per_kg_K": ("specific_heat_capacity", "J/(kg K)"),
    "block_temperature_K": ("temperature", "K"),
    "block_field_T": ("field", "T"),
}

BRANCH = "branch"
BRANCH_VALUES = ("heating", "cooling")
IGNORE = "ignore"  # mapping target that drops a source column

# Targets a mapping may name.
MAPPING_TARGETS: tuple[str, ...] = (*CANONICAL_COLUMNS, BRANCH, IGNORE)

# Family of each canonical column: the context that tells the unit normaliser how
# to read an ambiguous spelling (``C`` is degrees Celsius only in a temperature column).
TARGET_FAMILY: dict[str, str] = {
    "time_s": "time",
    "temperature_K": "temperature",
    "mu0H_T": "field",
    "moment_A_m2": "moment",
    "moment_A_m2_per_kg": "moment",
    "chi_vol": "chi",
    "chi_mass_m3_per_kg": "chi",
    "chi_quad_vol": "chi_quad",
    "chi_quad_mass_m3_per_kg": "chi_quad",
    "frequency_Hz": "frequency",
    "amplitude": "amplitude",
    "phase_rad": "phase",
    "two_theta_deg": "two_theta",
    "intensity_counts": "intensity",
    "intensity_sigma_counts": "sigma",
    "heat_capacity_J_per_mol_K": "heat_capacity",
    "heat_capacity_J_per_kg_K": "heat_capacity",
    "block_temperature_K": "temperature",
    "block_field_T": "field",
    BRANCH: "branch",
}

# Required columns per run kind: every group must be met by at least one column.
REQUIRED: dict[str, tuple[tuple[str, ...], ...]] = {
    "thermomagnetic": (("temperature_K",),
                       ("moment_A_m2", "moment_A_m2_per_kg", "chi_vol", "chi_mass_m3_per_kg")),
    "hysteresis": (("mu0H_T",), ("moment_A_m2", "moment_A_m2_per_kg")),
    "backfield": (("mu0H_T",), ("moment_A_m2", "moment_A_m2_per_kg")),
    "susceptibility": (("chi_vol", "chi_mass_m3_per_kg"),),
    "resonance": (("frequency_Hz",), ("amplitude",)),
    "diffraction": (("two_theta_deg",), ("intensity_counts",)),
    "calorimetry": (("temperature_K",), ("heat_capacity_J_per_mol_K", "heat_capacity_J_per_kg_K")),
}

# Column families a name alone may be guessed into, per run kind.  A header whose
# name suggests a family outside this set is kept as an ordinary column unless its
# unit says what it is (an ``I`` in a magnetometer export is more likely a current).
RELEVANT_FAMILIES: dict[str, frozenset[str]] = {
    "thermomagnetic": frozenset({"temperature", "moment", "chi", "chi_quad", "field", "time", "branch"}),
    "hysteresis": frozenset({"field", "moment", "temperature", "time"}),
    "backfield": frozenset({"field", "moment", "temperature", "time"}),
    "susceptibility": frozenset({"chi", "chi_quad", "temperature", "frequency", "field", "time",
                                 "phase", "branch"}),
    "resonance": frozenset({"frequency", "amplitude", "phase", "temperature", "time"}),
    "diffraction": frozenset({"two_theta", "intensity", "sigma", "temperature", "time"}),
    "calorimetry": frozenset({"temperature", "heat_capacity", "time"}),
}

# Canonical run conditions and their value types.
CONDITION_KEYS: dict[str, type] = {
    "field_T": float,
    "sweep_rate_K_per_s": float,
    "temperature_K": float,
    "frequency_Hz": float,
    "wavelength_m": float,
    "atmosphere": str,
    "operator": str,
    "started": str,
    "mass_kg": float,
}

# Kinds whose series get a heating/cooling ``branch`` column.
BRANCHED_KINDS = ("thermomagnetic", "susceptibility")

"""Synthesise one run's curves from its planted parameters, with realistic noise.

Each protocol of :mod:`.scenario` has one function here: planted parameters and a
random generator in, canonical SI columns out (``temperature_K``, ``moment_A_m2``,
``mu0H_T``, ``chi_vol``, ...), plus any planted value that only the curve model
knows (e.g. where the Hopkinson peak lies).  Noise levels are stated beside each
function; all noise is Gaussian except diffraction counts (Poisson).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from . import physics
from .scenario import RunSpec, Specimen

Table = dict[str, np.ndarray]
NOMINAL_CURIE_K = 592.0
Label = tuple[str, float, str] | None


@dataclass
class Synthesised:
    """Curves of one run: (block label, table) pairs, conditions in SI, extra planted values."""

    tables: list[tuple[Label, Table]]
    conditions: dict[str, Any]
    extra: dict[str, Any] = field(default_factory=dict)


def synthesise(run: RunSpec, specimen: Specimen, rng: np.random.Generator) -> Synthesised:
    """Dispatch on the run's protocol."""
    return _PROTOCOLS[run.protocol](run.params, specimen, rng)


def _sweep_time(T: np.ndarray, rate_K_per_s: float) -> np.ndarray:
    steps = np.abs(np.diff(T, prepend=T[0]))
    return np.cumsum(steps) / rate_K_per_s


# ---------------------------------------------------------------- thermomagnetic

def _tm_feature(T: np.ndarray, s: Specimen) -> np.ndarray:
    """Composition-specific features on top of the mean-field curve (invented sizes).

    Troilite-like pieces: the weak moment rises by 40 % through the spin
    reorientation; NC and 6C pieces: the moment is small below the vacancy
    order-disorder transition and grows above it.
    """
    if s.spin_reorientation_K is not None:
        return 1.0 + 0.4 * physics.step(T, s.spin_reorientation_K, 3.0)
    if s.vacancy_order_K is not None:
        return 0.12 + 0.88 * physics.step(T, s.vacancy_order_K, 4.0)
    return np.ones_like(T)


def tm_high(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Heating 300 -> 700 K then cooling to 300 K in 1 K steps; noise 0.3 % of M0.

    Mean-field magnetisation (J = 1/2) in the applied field, which also gives the
    small paramagnetic tail above Tc.
    """
    heat = np.arange(300.0, 700.5, 1.0)
    cool = np.arange(699.0, 299.5, -1.0)
    T = np.concatenate([heat, cool])
    # The field term is evaluated at a nominal ordering temperature: the 2 % spread of
    # Tc between specimens changes it by far less than the noise, and one cached
    # mean-field table then serves every run.
    b_h = b_c = physics.field_ratio(p["field_T"], NOMINAL_CURIE_K)
    m_h = physics.reduced_magnetisation(heat, p["curie_heating_K"], b=b_h) * _tm_feature(heat, s)
    m_c = (physics.reduced_magnetisation(cool, p["curie_cooling_K"], b=b_c) * _tm_feature(cool, s)
           * p["cooling_moment_factor"])
    moment = p["moment0_A_m2"] * np.concatenate([m_h, m_c])
    moment = moment + rng.normal(0.0, 0.003 * p["moment0_A_m2"], T.size)
    table = {"time_s": _sweep_time(T, p["sweep_rate_K_per_s"]), "temperature_K": T,
             "moment_A_m2": moment, "mu0H_T": np.full(T.size, p["field_T"])}
    return Synthesised([(None, table)], {"field_T": p["field_T"], "sweep_rate_K_per_s": p["sweep_rate_K_per_s"],
                                         "atmosphere": "argon"})


LOWT_GRID_K = np.arange(5.0, 200.001, 0.5)


def tm_low(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Warming 5 -> 200 K in 0.5 K steps (and cooling back when planted); noise 0.2 % of M0.

    The background is the mean-field magnetisation (ordering at the specimen's Tc)
    with a gentle extra slope; the low-temperature step(s) sit on top of it.
    """
    branches = [(LOWT_GRID_K, p["lowt_heating_K"])]
    if p.get("lowt_cooling_K"):
        branches.append((LOWT_GRID_K[::-1][1:], p["lowt_cooling_K"]))
    T_all, M_all = [], []
    m10 = float(physics.reduced_magnetisation(np.array([10.0]), s.curie_K)[0])
    for T, temps in branches:
        components = list(zip(temps, p["step_heights"]))
        width = p["width_K"] if p["width_K"] is not None else 1.0
        ordered = physics.reduced_magnetisation(T, s.curie_K) / m10
        M = ordered * physics.low_t_moment(T, p["moment0_A_m2"], components, width_K=width,
                                           slope_per_K=p.get("background_slope_per_K", -1e-4))
        T_all.append(T)
        M_all.append(M)
    T = np.concatenate(T_all)
    moment = np.concatenate(M_all) + rng.normal(0.0, 0.002 * p["moment0_A_m2"], T.size)
    table = {"time_s": _sweep_time(T, p["sweep_rate_K_per_s"]), "temperature_K": T,
             "moment_A_m2": moment, "mu0H_T": np.full(T.size, p["field_T"])}
    return Synthesised([(None, table)], {"field_T": p["field_T"], "sweep_rate_K_per_s": p["sweep_rate_K_per_s"]})


# ---------------------------------------------------------------- loops and backfield

def _loop_table(p: dict[str, Any], rng: np.random.Generator) -> Table:
    top = p["max_field_T"]
    down = np.linspace(top, -top, 401)
    up = np.linspace(-top, top, 401)
    desc, _ = physics.hysteresis_branches(down, Ms=p["Ms_A_m2"], Mr=p["Mr_A_m2"], Hc_T=p["Hc_T"],
                                          chi_hf=p["chi_hf_A_m2_per_T"])
    _, asc = physics.hysteresis_branches(up, Ms=p["Ms_A_m2"], Mr=p["Mr_A_m2"], Hc_T=p["Hc_T"],
                                         chi_hf=p["chi_hf_A_m2_per_T"])
    B = np.concatenate([down, up])
    sigma = float(np.hypot(1e-3 * p["Ms_A_m2"], 2e-9))  # 0.1 % of Ms over a 2e-9 A m^2 floor
    return {"mu0H_T": B, "moment_A_m2": np.concatenate([desc, asc]) + rng.normal(0.0, sigma, B.size)}


def loop(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """One loop, +1 T -> -1 T -> +1 T in 5 mT steps; noise 0.1 % of Ms."""
    return Synthesised([(None, _loop_table(p, rng))], {"temperature_K": p["temperature_K"]})


def loops_blocks(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Loops at several temperatures, one block each."""
    tables = [(("temperature", b["temperature_K"], "K"), _loop_table(b, rng)) for b in p["blocks"]]
    return Synthesised(tables, {})


def backfield(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Remanence after saturation in +1 T and back fields 0 to -1 T (log-spaced); noise 0.1 % of Mr."""
    B = np.concatenate([[0.0], np.logspace(-3.0, 0.0, 45)])
    M = physics.backfield_remanence(B, Mr=p["Mr_A_m2"], Hcr_T=p["Hcr_T"], dispersion=p["dispersion"])
    M = M + rng.normal(0.0, 1e-3 * p["Mr_A_m2"], B.size)
    return Synthesised([(None, {"mu0H_T": -B, "moment_A_m2": M})], {"temperature_K": p["temperature_K"]})


# ---------------------------------------------------------------- susceptibility

def _chi_high_model(T: np.ndarray, p: dict[str, Any], s: Specimen) -> tuple[np.ndarray, np.ndarray]:
    chi0 = p["chi0_SI"]
    if s.spin_reorientation_K is not None:
        tn = p["curie_K"]
        af = np.where(T < tn, 0.85 + 0.15 * (T / tn) ** 2, tn / T)
        real = chi0 * (1.0 + 0.15 * physics.step(T, s.spin_reorientation_K, 3.0)) * af
        quad = 0.005 * real + 0.02 * chi0 * physics.gaussian((T - s.spin_reorientation_K) / 3.0)
        return real, quad
    real = physics.hopkinson_susceptibility(T, p["curie_K"], chi0=chi0)
    if s.vacancy_order_K is not None:
        real = real * (0.12 + 0.88 * physics.step(T, s.vacancy_order_K, 4.0))
    peak = _hopkinson_peak(p, s)
    quad = 0.01 * real + 0.03 * chi0 * physics.gaussian((T - peak - 3.0) / 6.0)
    return real, quad


def _hopkinson_peak(p: dict[str, Any], s: Specimen) -> float:
    fine = np.arange(p["curie_K"] - 60.0, p["curie_K"] + 0.001, 0.05)
    real = physics.hopkinson_susceptibility(fine, p["curie_K"], chi0=1.0)
    return float(fine[int(np.argmax(real))])


def chi_high(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """In-phase and quadrature susceptibility on heating 300 -> 700 K; noise 0.2 % / 0.05 % of chi0."""
    T = np.arange(300.0, 700.5, 1.0)
    real, quad = _chi_high_model(T, p, s)
    real = real + rng.normal(0.0, 2e-3 * p["chi0_SI"], T.size)
    quad = quad + rng.normal(0.0, 5e-4 * p["chi0_SI"], T.size)
    extra = {} if s.spin_reorientation_K is not None else {"hopkinson_peak_K": _hopkinson_peak(p, s)}
    return _chi_result(T, real, quad, p, s, extra)


def chi_low(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Warming 5 -> 60 K in 0.5 K steps; in-phase rise and quadrature peak at each planted T.

    Noise 0.2 % of chi0 (in-phase) and 0.05 % (quadrature).
    """
    T = np.arange(5.0, 60.001, 0.5)
    chi0, w = p["chi0_SI"], p["width_K"]
    real = chi0 * (1.0 - 3e-4 * (T - 5.0))
    quad = np.full(T.size, 0.004 * chi0)
    for centre, height in zip(p["lowt_heating_K"], p["step_heights"]):
        real = real * (1.0 + height * physics.step(T, centre, w))
        quad = quad + 0.25 * height * chi0 * physics.gaussian((T - centre) / (1.5 * w))
    real = real + rng.normal(0.0, 2e-3 * chi0, T.size)
    quad = quad + rng.normal(0.0, 5e-4 * chi0, T.size)
    return _chi_result(T, real, quad, p, s, {})


def _chi_result(T: np.ndarray, real: np.ndarray, quad: np.ndarray, p: dict[str, Any], s: Specimen,
                extra: dict[str, Any]) -> Synthesised:
    rho = s.density_kg_m3
    table = {"temperature_K": T, "chi_vol": real, "chi_quad_vol": quad,
             "chi_mass_m3_per_kg": real / rho, "chi_quad_mass_m3_per_kg": quad / rho}
    conditions = {"frequency_Hz": p["frequency_Hz"], "sweep_rate_K_per_s": p["sweep_rate_K_per_s"]}
    if T.max() > 300.0:
        conditions["atmosphere"] = "argon"  # furnace runs; low-T runs sit in helium exchange gas
    return Synthesised([(None, table)], conditions, extra)


# ---------------------------------------------------------------- resonance

def rus(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Spectra at several temperatures, one block each; a +/-1.5 kHz window around each mode.

    Amplitude: sum of Lorentzians (peak amplitudes 0.05-0.4 V) on a 2 mV baseline,
    noise 0.5 mV; phase of the window's mode with 0.01 rad noise.
    """
    heights = rng.uniform(0.05, 0.4, len(p["blocks"][0]["modes"]))
    tables = []
    for block in p["blocks"]:
        freqs, amps, phases = [], [], []
        for k, mode in enumerate(block["modes"]):
            centre = mode["frequency_Hz"] + rng.uniform(-300.0, 300.0)
            f = np.round(centre, 0) + np.arange(-1500.0, 1500.1, 25.0)
            amp = np.full(f.size, 0.002)
            for h, other in zip(heights, block["modes"]):
                amp = amp + h * physics.lorentzian(f, other["frequency_Hz"], other["fwhm_Hz"])
            freqs.append(f)
            amps.append(amp + rng.normal(0.0, 5e-4, f.size))
            phases.append(physics.resonance_phase(f, mode["frequency_Hz"], mode["fwhm_Hz"])
                          + rng.normal(0.0, 0.01, f.size))
        tables.append((("temperature", block["temperature_K"], "K"),
                       {"frequency_Hz": np.concatenate(freqs), "amplitude": np.concatenate(amps),
                        "phase_rad": np.concatenate(phases)}))
    return Synthesised(tables, {}, {"mode_amplitudes_V": [float(h) for h in heights]})


# ---------------------------------------------------------------- diffraction

def xrd(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Powder pattern 20-80 deg 2theta in 0.02 deg steps; pseudo-Voigt peaks (eta 0.45), Poisson counts."""
    tt = np.round(np.arange(20.0, 80.0001, 0.02), 3)
    scale = rng.uniform(4000.0, 9000.0)
    expected = 60.0 + 40.0 * np.exp(-(tt - 20.0) / 15.0)
    for peak in p["peaks"]:
        fwhm = float(physics.caglioti_fwhm_deg(np.array([peak["two_theta_deg"]]))[0])
        expected = expected + scale * peak["relative_intensity"] / 100.0 * physics.pseudo_voigt(
            tt, peak["two_theta_deg"], fwhm, 0.45)
    counts = rng.poisson(expected).astype(float)
    table = {"two_theta_deg": tt, "intensity_counts": counts,
             "intensity_sigma_counts": np.sqrt(np.maximum(counts, 1.0))}
    return Synthesised([(None, table)], {"wavelength_m": p["wavelength_m"], "temperature_K": p["temperature_K"]},
                       {"peak_102_height_counts": float(scale), "pseudo_voigt_eta": 0.45})


# ---------------------------------------------------------------- calorimetry

CP_LINEAR_TERM = 0.0035  # J/(mol K^2): Cp - Cv and anharmonic terms, lumped (invented size)


def cp(p: dict[str, Any], s: Specimen, rng: np.random.Generator) -> Synthesised:
    """Heat capacity 300-650 K in 1 K steps: Debye lattice term + linear term + lambda anomalies.

    Noise 0.15 % of Cp.
    """
    T = np.arange(300.0, 650.5, 1.0)
    molar = physics.debye_heat_capacity(T, p["theta_D_K"], p["atoms_per_formula"]) + CP_LINEAR_TERM * T
    for a in p["anomalies"]:
        molar = molar + physics.lambda_anomaly(T, a["temperature_K"], a["height_J_per_mol_K"],
                                               rise_K=15.0, fall_K=2.0)
    molar = molar + rng.normal(0.0, 1.5e-3 * molar)
    per_kg = molar / (p["molar_mass_g_per_mol"] * 1e-3)
    return Synthesised([(None, {"temperature_K": T, "heat_capacity_J_per_mol_K": molar,
                                "heat_capacity_J_per_kg_K": per_kg})],
                       {"sweep_rate_K_per_s": p["sweep_rate_K_per_s"], "atmosphere": "argon"},
                       {"linear_term_J_per_mol_K2": CP_LINEAR_TERM})


_PROTOCOLS: dict[str, Callable[[dict[str, Any], Specimen, np.random.Generator], Synthesised]] = {
    "tm-high": tm_high, "tm-low": tm_low, "loop": loop, "loops-blocks": loops_blocks,
    "backfield": backfield, "chi-high": chi_high, "chi-low": chi_low, "rus": rus, "xrd": xrd, "cp": cp,
}

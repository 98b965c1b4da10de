"""Curve models for the invented demo collection.

Small, deterministic, vectorised models: mean-field magnetisation, smooth steps,
hysteresis branches, a coercivity spectrum for backfield curves, a Hopkinson-like
susceptibility, Lorentzian resonances, pseudo-Voigt powder peaks on the NiAs-type
subcell, and a Debye heat capacity.  They make plausible curves for the demo; they
are not fits to any real material.  Every function takes and returns SI values
(K, T as mu0*H, A m^2, Hz, J/(mol K)) unless its name says otherwise (angstrom and
degrees for diffraction, as the trade uses them).  Noise is added elsewhere
(:mod:`.synthesis`); nothing here draws random numbers except
:func:`random_rotation`, which takes the generator it uses.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import constants
from scipy.special import ndtr

# IUPAC 2021 standard atomic weights, abridged (Prohaska et al., 2022,
# Pure Appl. Chem. 94, 573): Fe 55.845(2), S 32.06(2).
ATOMIC_WEIGHT_FE = 55.845
ATOMIC_WEIGHT_S = 32.06

# Cu K-alpha1, International Tables for Crystallography Vol. C (2006), Table 4.2.2.6.
CU_KALPHA1_ANGSTROM = 1.54059292

# Troilite FeS, P-62c, a = 5.962 A, c = 11.750 A (Evans, 1970, Science 167, 621);
# the NiAs-type subcell has A = a/sqrt(3), C = c/2.
TROILITE_SUBCELL_A = 5.962 / np.sqrt(3.0)
TROILITE_SUBCELL_C = 11.750 / 2.0

GAS_CONSTANT = constants.R  # J/(mol K), exact in the 2019 SI

# mu_B / k_B in K/T, from scipy's CODATA constants.
_MUB_OVER_KB = constants.physical_constants["Bohr magneton"][0] / constants.k


# --------------------------------------------------------------------------- mean field

def brillouin(J: float, y: np.ndarray) -> np.ndarray:
    """Brillouin function B_J(y); B_{1/2}(y) = tanh(y).

    Parameters
    ----------
    J : float
        Angular-momentum quantum number (1/2, 1, 3/2, ...).
    y : array_like
        Dimensionless argument g mu_B J B_eff / (k_B T).

    Returns
    -------
    ndarray
        B_J(y), between -1 and 1; the small-argument series is used near zero so
        that no division by zero occurs.

    References
    ----------
    .. [1] Kittel, C. (2005). Introduction to Solid State Physics, 8th ed., ch. 11.
    """
    y = np.asarray(y, dtype=float)
    if J == 0.5:
        return np.tanh(y)
    a = (2.0 * J + 1.0) / (2.0 * J)
    b = 1.0 / (2.0 * J)
    small = np.abs(y) < 1e-4
    ys = np.where(small, 1.0, y)
    full = a / np.tanh(a * ys) - b / np.tanh(b * ys)
    series = (J + 1.0) / (3.0 * J) * y
    return np.where(small, series, full)


def field_ratio(field_T: float, curie_K: float, *, J: float = 0.5, g: float = 2.0) -> float:
    """Dimensionless applied-field term b = g mu_B J B / (k_B Tc) of one moment.

    Parameters
    ----------
    field_T : float
        Applied field mu0*H in tesla.
    curie_K : float
        Ordering temperature in kelvin.
    J, g : float
        Quantum number and g factor of the moment.
    """
    return g * J * _MUB_OVER_KB * field_T / curie_K


def solve_mean_field(t: np.ndarray, *, J: float = 0.5, b: float = 0.0,
                     iterations: int = 64) -> np.ndarray:
    """Solve m = B_J(3J/(J+1) m / t + b / t) for the reduced magnetisation m(t).

    Vectorised bisection on [0, 1]: the right-hand side is below m just above
    the positive root and above it just below, so bisection converges to the
    ordered solution below Tc and to the field-induced one above.

    Parameters
    ----------
    t : array_like
        Reduced temperature T/Tc (> 0).
    J : float
        Quantum number.
    b : float
        Field term g mu_B J B / (k_B Tc) (>= 0), see :func:`field_ratio`.
    iterations : int
        Bisection steps; 64 halve the interval to below double precision.

    Returns
    -------
    ndarray
        m(t) between 0 and 1.

    References
    ----------
    .. [1] Weiss, P. (1907). L'hypothese du champ moleculaire et la propriete
       ferromagnetique. J. Phys. Theor. Appl. 6, 661.
    .. [2] Kittel, C. (2005). Introduction to Solid State Physics, 8th ed., ch. 11.
    """
    t = np.asarray(t, dtype=float)
    coupling = 3.0 * J / (J + 1.0)
    lo = np.zeros_like(t)
    hi = np.ones_like(t)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        above = mid - brillouin(J, (coupling * mid + b) / t) > 0.0
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return 0.5 * (lo + hi)


@lru_cache(maxsize=32)
def _mean_field_table(J: float, b: float) -> tuple[np.ndarray, np.ndarray]:
    # Dense near t = 1, where m(t) has its square-root onset.
    coarse = np.linspace(0.004, 2.5, 5001)
    near = 1.0 + np.concatenate([-np.logspace(-7, -1.3, 300), np.logspace(-7, -1.3, 300)])
    grid = np.unique(np.concatenate([coarse, near, [1.0]]))
    grid.setflags(write=False)
    values = solve_mean_field(grid, J=J, b=b)
    values.setflags(write=False)
    return grid, values


def reduced_magnetisation(T_K: np.ndarray, curie_K: float, *, J: float = 0.5,
                          b: float = 0.0) -> np.ndarray:
    """Mean-field m(T) = M(T)/M(0), solved once on a grid of T/Tc and interpolated.

    Parameters
    ----------
    T_K : array_like
        Temperatures in kelvin.
    curie_K : float
        Zero-field ordering temperature in kelvin.
    J, b :
        As in :func:`solve_mean_field`; the grid is cached per (J, b).

    Returns
    -------
    ndarray
        m between 0 and 1 (the field-induced tail above Tc when b > 0).
    """
    grid, values = _mean_field_table(float(J), float(b))
    t = np.asarray(T_K, dtype=float) / curie_K
    return np.interp(t, grid, values)


# --------------------------------------------------------------------------- smooth steps

def logistic(u: np.ndarray) -> np.ndarray:
    """1/(1 + exp(-u)), written so that no overflow occurs for large |u|."""
    u = np.asarray(u, dtype=float)
    return 0.5 * (1.0 + np.tanh(0.5 * u))


def step(T_K: np.ndarray, centre_K: float, width_K: float) -> np.ndarray:
    """Smooth step from 0 to 1 centred at ``centre_K``; ``width_K`` is the logistic scale.

    The derivative peaks at ``centre_K`` with a full width at half maximum of
    3.525 * width_K.
    """
    return logistic((np.asarray(T_K, dtype=float) - centre_K) / width_K)


def gaussian(u: np.ndarray) -> np.ndarray:
    """exp(-u^2/2)."""
    u = np.asarray(u, dtype=float)
    return np.exp(-0.5 * u * u)


def low_t_moment(T_K: np.ndarray, moment0: float, components: list[tuple[float, float]], *,
                 width_K: float, slope_per_K: float) -> np.ndarray:
    """Moment through the low-temperature transition(s) of 4C pyrrhotite (phenomenological).

    M(T) = M0 (1 + slope (T - 10 K)) prod_k (1 - h_k step(T; T_k, w)): the moment
    falls by a fraction h_k on warming through each T_k (a peak of -dM/dT), on a
    gently sloping background.

    Parameters
    ----------
    T_K : array_like
        Temperatures in kelvin.
    moment0 : float
        Moment at 10 K below the transitions, A m^2.
    components : list of (T_k in K, h_k fraction)
        Transition temperatures and relative step heights; the stronger first.
    width_K : float
        Logistic scale of each step, K.
    slope_per_K : float
        Relative background slope per kelvin.
    """
    T = np.asarray(T_K, dtype=float)
    out = moment0 * (1.0 + slope_per_K * (T - 10.0))
    for centre, height in components:
        out = out * (1.0 - height * step(T, centre, width_K))
    return out


# --------------------------------------------------------------------------- hysteresis

def hysteresis_branches(B_T: np.ndarray, *, Ms: float, Mr: float, Hc_T: float,
                        chi_hf: float) -> tuple[np.ndarray, np.ndarray]:
    """Descending and ascending branches of a tanh-shaped loop plus a linear high-field term.

    M_desc(B) = Ms tanh((B + Hc)/a) + chi_hf B and M_asc(B) = Ms tanh((B - Hc)/a) + chi_hf B,
    with a = Hc / artanh(Mr/Ms), so that the ferromagnetic part has exactly the
    remanence Mr at B = 0 and crosses zero at B = -/+Hc.

    Parameters
    ----------
    B_T : array_like
        Applied field mu0*H, T.
    Ms, Mr : float
        Saturation and remanent moment of the ferromagnetic part, A m^2 (0 < Mr < Ms).
    Hc_T : float
        Coercive field mu0*Hc, T.
    chi_hf : float
        High-field slope (paramagnetic and antiferromagnetic part), A m^2 per T.

    Returns
    -------
    (descending, ascending) : tuple of ndarray
        Moments in A m^2 at the fields given.
    """
    B = np.asarray(B_T, dtype=float)
    scale = Hc_T / np.arctanh(Mr / Ms)
    desc = Ms * np.tanh((B + Hc_T) / scale) + chi_hf * B
    asc = Ms * np.tanh((B - Hc_T) / scale) + chi_hf * B
    return desc, asc


def backfield_remanence(B_back_T: np.ndarray, *, Mr: float, Hcr_T: float,
                        dispersion: float) -> np.ndarray:
    """Remanence after saturation and a back field of magnitude |B|: Mr (1 - 2 F(|B|)).

    F is a lognormal cumulative coercivity spectrum with median Hcr, so the
    remanence crosses zero exactly at |B| = Hcr and goes from +Mr to -Mr.

    Parameters
    ----------
    B_back_T : array_like
        Back-field magnitudes mu0*H in T (the sign is ignored).
    Mr : float
        Saturation remanence, A m^2.
    Hcr_T : float
        Coercivity of remanence, T.
    dispersion : float
        Standard deviation of ln(coercivity).

    References
    ----------
    .. [1] Robertson, D. J., & France, D. E. (1994). Discrimination of remanence-carrying
       minerals in mixtures, using isothermal remanent magnetisation acquisition curves.
       Phys. Earth Planet. Inter. 82, 223-234 (lognormal coercivity spectra).
    """
    B = np.abs(np.asarray(B_back_T, dtype=float))
    z = (np.log(np.where(B > 0, B, 1.0)) - np.log(Hcr_T)) / dispersion
    F = np.where(B > 0, ndtr(z), 0.0)
    return Mr * (1.0 - 2.0 * F)


# --------------------------------------------------------------------------- susceptibility

def hopkinson_susceptibility(T_K: np.ndarray, curie_K: float, *, chi0: float,
                             residual_anisotropy: float = 0.006,
                             paramagnetic_fraction: float = 0.02) -> np.ndarray:
    """In-phase initial susceptibility with a Hopkinson peak below Tc (phenomenological).

    Below Tc the initial susceptibility of rotation is taken as proportional to
    Ms^2/K1 with K1 proportional to Ms^3 (Callen & Callen, 1966) plus a small
    residual anisotropy, chi ~ m^2 / (m^3 + eps): it rises towards Tc and falls
    to zero at Tc, peaking where m^3 = 2 eps.  Above Tc a Curie-Weiss tail
    C/(T - Tc + 2 K) is blended in.  Scaled so that chi(300 K) is about chi0.

    Parameters
    ----------
    T_K : array_like
        Temperatures in kelvin.
    curie_K : float
        Ordering temperature, K.
    chi0 : float
        Susceptibility scale (SI volume susceptibility, dimensionless).
    residual_anisotropy : float
        eps above; sets how far below Tc the peak lies.
    paramagnetic_fraction : float
        Curie-Weiss tail 20 K above Tc as a fraction of chi0.

    References
    ----------
    .. [1] Hopkinson, J. (1889). Magnetic and other physical properties of iron at a
       high temperature. Phil. Trans. R. Soc. Lond. A 180, 443-465.
    .. [2] Callen, H. B., & Callen, E. (1966). The present status of the temperature
       dependence of magnetocrystalline anisotropy, and the l(l+1)/2 power law.
       J. Phys. Chem. Solids 27, 1271-1285.
    """
    T = np.asarray(T_K, dtype=float)
    m = reduced_magnetisation(T, curie_K)
    ferro = m * m / (m ** 3 + residual_anisotropy)
    m300 = float(reduced_magnetisation(np.array([300.0]), curie_K)[0])
    ferro = ferro / (m300 * m300 / (m300 ** 3 + residual_anisotropy))
    excess = np.maximum(T - curie_K + 2.0, 2.0)
    para = paramagnetic_fraction * 22.0 / excess * step(T, curie_K, 2.0)
    return chi0 * (ferro + para)


# --------------------------------------------------------------------------- resonance

def lorentzian(f_Hz: np.ndarray, centre_Hz: float, fwhm_Hz: float) -> np.ndarray:
    """Lorentzian line shape with peak value 1 and full width at half maximum ``fwhm_Hz``.

    The demo's resonance amplitude is this shape directly (the recorded amplitude
    itself, not its square, is Lorentzian), so Q^-1 = FWHM / f0.

    References
    ----------
    .. [1] Migliori, A., & Sarrao, J. L. (1997). Resonant Ultrasound Spectroscopy.
       Wiley, New York.
    """
    half = 0.5 * fwhm_Hz
    d = np.asarray(f_Hz, dtype=float) - centre_Hz
    return half * half / (d * d + half * half)


def resonance_phase(f_Hz: np.ndarray, centre_Hz: float, fwhm_Hz: float) -> np.ndarray:
    """Phase (rad) of a damped oscillator response, -pi/2 at resonance, in (-pi, 0)."""
    d = np.asarray(f_Hz, dtype=float) - centre_Hz
    return -np.arctan2(0.5 * fwhm_Hz, -d)


def softened_frequency(T_K: np.ndarray, f300_Hz: float, *, transitions: list[tuple[float, float, float]],
                       slope_per_K: float = 4.0e-4) -> np.ndarray:
    """Mode frequency with a linear stiffening background and cusp-like softening at transitions.

    f^2(T) = f300^2 [1 - slope (T - 300 K)] prod_k [1 - A_k exp(-|T - T_k| / tau_k)]
    (f^2 is proportional to the elastic modulus, Migliori & Sarrao, 1997).

    Parameters
    ----------
    transitions : list of (T_k in K, A_k fraction, tau_k in K)
    """
    T = np.asarray(T_K, dtype=float)
    f2 = f300_Hz ** 2 * (1.0 - slope_per_K * (T - 300.0))
    for centre, depth, tau in transitions:
        f2 = f2 * (1.0 - depth * np.exp(-np.abs(T - centre) / tau))
    return np.sqrt(f2)


def inverse_quality(T_K: np.ndarray, *, base: float, peaks: list[tuple[float, float, float]]) -> np.ndarray:
    """Q^-1(T) = base + sum_k q_k exp(-(T - T_k)^2 / (2 w_k^2)) (dimensionless).

    Parameters
    ----------
    peaks : list of (T_k in K, q_k, w_k in K)
    """
    T = np.asarray(T_K, dtype=float)
    out = np.full_like(T, base)
    for centre, height, width in peaks:
        out = out + height * gaussian((T - centre) / width)
    return out


# --------------------------------------------------------------------------- diffraction

def hexagonal_d_spacing(h: int, k: int, l: int, A: float, C: float) -> float:
    """d-spacing of a hexagonal cell: 1/d^2 = 4/3 (h^2 + hk + k^2)/A^2 + l^2/C^2 (angstrom)."""
    return 1.0 / np.sqrt(4.0 / 3.0 * (h * h + h * k + k * k) / (A * A) + l * l / (C * C))


def two_theta_deg(d_angstrom: float, wavelength_angstrom: float = CU_KALPHA1_ANGSTROM) -> float:
    """Bragg's law, 2 theta in degrees for spacing d: lambda = 2 d sin(theta)."""
    return float(np.degrees(2.0 * np.arcsin(wavelength_angstrom / (2.0 * d_angstrom))))


def d102_from_atomic_percent_fe(N: float) -> float:
    """Subcell (102) d-spacing (angstrom) for N at.% Fe, inverting Toulmin & Barton (1964).

    N = 45.212 + 72.86 (d - 2.0400) + 311.5 (d - 2.0400)^2, solved for the root on
    the physical branch (d > 2.0400 - 72.86/623).

    References
    ----------
    .. [1] Toulmin, P., & Barton, P. B. (1964). A thermodynamic study of pyrite and
       pyrrhotite. Geochim. Cosmochim. Acta 28, 641-671 (fit to the data of
       Arnold & Reichen, 1962, Am. Mineral. 47, 105).
    """
    a, b, c = 311.5, 72.86, 45.212 - N
    return 2.0400 + (-b + np.sqrt(b * b - 4.0 * a * c)) / (2.0 * a)


def atomic_percent_fe(x: float) -> float:
    """At.% Fe of Fe(1-x)S: 100 (1 - x) / (2 - x)."""
    return 100.0 * (1.0 - x) / (2.0 - x)


def subcell_parameters(x: float) -> tuple[float, float]:
    """NiAs-type subcell (A, C) in angstrom for Fe(1-x)S (invented interpolation, demo only).

    A runs linearly from the troilite subcell (Evans, 1970) at x = 0 to 3.430 A at
    x = 0.125; C is then chosen so that d(102) follows the Toulmin & Barton (1964)
    composition calibration exactly.
    """
    A = TROILITE_SUBCELL_A + (3.430 - TROILITE_SUBCELL_A) * (x / 0.125)
    d = d102_from_atomic_percent_fe(atomic_percent_fe(x))
    inv_c2 = (1.0 / (d * d) - 4.0 / (3.0 * A * A)) / 4.0
    return float(A), float(1.0 / np.sqrt(inv_c2))


def caglioti_fwhm_deg(two_theta: np.ndarray, U: float = 0.010, V: float = -0.005,
                      W: float = 0.008) -> np.ndarray:
    """Peak FWHM in degrees 2theta: sqrt(U tan^2 theta + V tan theta + W).

    References
    ----------
    .. [1] Caglioti, G., Paoletti, A., & Ricci, F. P. (1958). Choice of collimators for
       a crystal spectrometer for neutron diffraction. Nucl. Instrum. 3, 223-228.
    """
    tan = np.tan(np.radians(np.asarray(two_theta, dtype=float) / 2.0))
    return np.sqrt(U * tan * tan + V * tan + W)


def pseudo_voigt(x: np.ndarray, centre: float, fwhm: float, eta: float) -> np.ndarray:
    """Pseudo-Voigt with peak value 1: eta Lorentzian + (1 - eta) Gaussian of equal FWHM.

    References
    ----------
    .. [1] Wertheim, G. K., Butler, M. A., West, K. W., & Buchanan, D. N. E. (1974).
       Determination of the Gaussian and Lorentzian content of experimental line
       shapes. Rev. Sci. Instrum. 45, 1369-1371.
    """
    u = (np.asarray(x, dtype=float) - centre) / (0.5 * fwhm)
    lor = 1.0 / (1.0 + u * u)
    gau = np.exp(-np.log(2.0) * u * u)
    return eta * lor + (1.0 - eta) * gau


# --------------------------------------------------------------------------- heat capacity

_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(64)


def debye_function(x: np.ndarray) -> np.ndarray:
    """Cv/(3 N k) of the Debye model: (3/x^3) int_0^x t^4 e^t/(e^t - 1)^2 dt, x = thetaD/T.

    64-point Gauss-Legendre quadrature on [0, x]; the integrand is written as
    t^4 e^-t / (1 - e^-t)^2 so that no overflow occurs at large t.

    References
    ----------
    .. [1] Debye, P. (1912). Zur Theorie der spezifischen Waerme. Ann. Phys. 344, 789-839.
    """
    x = np.atleast_1d(np.asarray(x, dtype=float))
    t = 0.5 * x[:, None] * (_GL_NODES[None, :] + 1.0)
    t = np.maximum(t, 1e-12)
    e = np.exp(-t)
    integrand = t ** 4 * e / (1.0 - e) ** 2
    integral = 0.5 * x * (integrand @ _GL_WEIGHTS)
    return 3.0 * integral / x ** 3


def debye_heat_capacity(T_K: np.ndarray, theta_D_K: float, atoms_per_formula: float) -> np.ndarray:
    """Lattice heat capacity in J/(mol K) per mole of formula units: 3 n R D(thetaD/T)."""
    T = np.asarray(T_K, dtype=float)
    return 3.0 * atoms_per_formula * GAS_CONSTANT * debye_function(theta_D_K / T)


def lambda_anomaly(T_K: np.ndarray, centre_K: float, height: float, *, rise_K: float,
                   fall_K: float) -> np.ndarray:
    """Lambda-shaped excess: slow exponential rise below ``centre_K``, sharp fall above it."""
    T = np.asarray(T_K, dtype=float)
    below = np.exp(np.minimum(T - centre_K, 0.0) / rise_K)
    above = np.exp(-np.maximum(T - centre_K, 0.0) / fall_K)
    return height * np.where(T <= centre_K, below, above)


# --------------------------------------------------------------------------- composition

def weight_percent(x: float, total: float = 100.0) -> tuple[float, float]:
    """(wt% Fe, wt% S) of Fe(1-x)S for an analytical total ``total`` (wt%)."""
    fe = (1.0 - x) * ATOMIC_WEIGHT_FE
    s = ATOMIC_WEIGHT_S
    return total * fe / (fe + s), total * s / (fe + s)


def x_from_weight_percent(wt_fe: float, wt_s: float) -> float:
    """x in Fe(1-x)S from wt% Fe and S: x = 1 - n_Fe / n_S (IUPAC 2021 weights)."""
    return 1.0 - (wt_fe / ATOMIC_WEIGHT_FE) / (wt_s / ATOMIC_WEIGHT_S)


def superstructure_label(x: float) -> str:
    """Superstructure label for the demo (invented bands: 2C, NC, 6C, 4C with rising x)."""
    if x < 0.02:
        return "2C"
    if x < 0.075:
        return "NC"
    if x < 0.09:
        return "6C"
    return "4C"


# --------------------------------------------------------------------------- orientation

def random_rotation(rng: np.random.Generator) -> np.ndarray:
    """Uniformly random proper rotation (3x3, det +1) from a normalised Gaussian quaternion.

    References
    ----------
    .. [1] Shoemake, K. (1992). Uniform random rotations. Graphics Gems III, 124-132.
    """
    q = rng.normal(size=4)
    w, x, y, z = q / np.linalg.norm(q)
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)],
        [2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)],
        [2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)],
    ])

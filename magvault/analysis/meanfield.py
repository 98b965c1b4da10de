"""Mean-field (Weiss) magnetisation of a ferromagnet or of one sublattice.

The reduced magnetisation m = M/M0 of a mean-field magnet with spin quantum
number J solves the self-consistent equation

    m = B_J(x),    x = (3J/(J+1)) * m * Tc/T + g*J*mu_B*B/(k_B*T),

where B_J is the Brillouin function and B = mu0*H is the applied field in
tesla.  At zero field m vanishes at Tc with the critical exponent 1/2; in a
field a tail persists above Tc and, for small fields, the susceptibility
follows the Curie-Weiss law with the paramagnetic Curie temperature equal to
Tc.  The demo generator and the tests of the thermomagnetic analyses use
these curves as curves of known Tc.

The equation is solved, element by element and vectorised, with the
bracketing root finder of scipy (:func:`scipy.optimize.elementwise.find_root`,
Chandrupatla's method) in the variable x, where it is monotonic:

    G(x) = (3J/(J+1)) * Tc * B_J(x)/x + h/x - T = 0,   h = g*J*mu_B*B/k_B.

References
----------
Weiss, P. (1907). L'hypothese du champ moleculaire et la propriete
ferromagnetique. J. Phys. Theor. Appl. 6, 661.
Blundell, S. (2001). Magnetism in Condensed Matter, Oxford University Press,
chapters 2 and 5 (Brillouin function, mean-field theory).
Chandrupatla, T. R. (1997). A new hybrid quadratic/bisection algorithm for
finding the zero of a nonlinear function without using derivatives. Adv.
Eng. Softw. 28, 145 (the root finder behind scipy's find_root).
These citations are given from memory.
"""

from __future__ import annotations

import numpy as np
from scipy import constants
from scipy.optimize import elementwise

__all__ = ["brillouin", "reduced_magnetisation", "curve_with_field", "zeeman_temperature_K"]

# Below this |x| the Brillouin function is evaluated from its Taylor series:
# the closed form loses digits to the cancellation of two 1/x terms.
_SERIES_BELOW = 1e-2
# Lower end of the bracket in x; at zero field the root lies below it only
# within about 1e-16 (relative) of Tc, where m < 1e-7 is returned as zero.
_X_FLOOR = 1e-8


def brillouin(x, J: float = 0.5) -> np.ndarray:
    """Brillouin function B_J(x).

    Parameters
    ----------
    x : array_like
        Argument (dimensionless).
    J : float
        Spin (total angular momentum) quantum number, J > 0; ``numpy.inf``
        gives the classical Langevin function.

    Returns
    -------
    numpy.ndarray
        B_J(x), odd in x, with B_J(0) = 0 and B_J -> 1 as x -> infinity.

    References
    ----------
    Blundell, S. (2001). Magnetism in Condensed Matter, section 2.7.
    """
    x = np.asarray(x, dtype=float)
    if not J > 0:
        raise ValueError(f"J must be positive, got {J!r}")
    if J == 0.5:
        return np.tanh(x)
    small = np.abs(x) < _SERIES_BELOW
    big = np.where(small, 1.0, x)  # keeps the closed form away from x = 0
    if np.isinf(J):
        # Langevin function L(x) = coth(x) - 1/x = x/3 - x^3/45 + 2x^5/945 - ...
        closed = 1.0 / np.tanh(big) - 1.0 / big
        series = x / 3.0 - x**3 / 45.0 + 2.0 * x**5 / 945.0
        return np.where(small, series, closed)
    q = 2.0 * J
    p = 2.0 * J + 1.0
    closed = (p / q) / np.tanh(p * big / q) - (1.0 / q) / np.tanh(big / q)
    # coth(y) = 1/y + y/3 - y^3/45 + 2y^5/945 - ..., term by term
    series = (x * (p**2 - 1.0) / (3.0 * q**2)
              - x**3 * (p**4 - 1.0) / (45.0 * q**4)
              + 2.0 * x**5 * (p**6 - 1.0) / (945.0 * q**6))
    return np.where(small, series, closed)


def zeeman_temperature_K(field_T: float, J: float = 0.5, g: float = 2.0) -> float:
    """Zeeman energy g*J*mu_B*B of one moment in the field, expressed in kelvin.

    Parameters
    ----------
    field_T : float
        Applied field mu0*H in tesla.
    J : float
        Spin quantum number.
    g : float
        Lande g-factor.

    Returns
    -------
    float
        g*J*mu_B*B/k_B in K (CODATA constants from :mod:`scipy.constants`).
    """
    mu_B = constants.physical_constants["Bohr magneton"][0]
    return float(g * J * mu_B * field_T / constants.k)


def _molecular_field_coefficient(J: float) -> float:
    return 3.0 if np.isinf(J) else 3.0 * J / (J + 1.0)


def _solve(T: np.ndarray, Tc: float, h_K: float, J: float) -> np.ndarray:
    """Positive root m of the mean-field equation at each temperature."""
    a = _molecular_field_coefficient(J)
    m = np.zeros_like(T)
    if h_K > 0:
        ordered = T > 0
    else:
        ordered = (T > 0) & (T < Tc)
    m[T <= 0] = 1.0
    if not np.any(ordered):
        return m
    Ts = T[ordered]

    def excess(x, temperature):
        return a * Tc * brillouin(x, J) / x + h_K / x - temperature

    # G decreases monotonically in x; G(x_hi) <= -T/2 < 0 because B_J <= 1.
    x_hi = 2.0 * (a * Tc + h_K) / Ts
    x_lo = np.full_like(Ts, _X_FLOOR)
    g_lo = excess(x_lo, Ts)
    valid = g_lo > 0  # false only within ~1e-16 (relative) of Tc at zero field
    sol = np.zeros_like(Ts)
    if np.any(valid):
        res = elementwise.find_root(excess, (x_lo[valid], x_hi[valid]), args=(Ts[valid],),
                                    tolerances={"xrtol": 4 * np.finfo(float).eps, "xatol": 0.0})
        if not np.all(res.success):
            raise RuntimeError("mean-field root finding failed to converge")
        sol[valid] = brillouin(res.x, J)
    m[ordered] = sol
    return m


def reduced_magnetisation(T, Tc: float, J: float = 0.5) -> np.ndarray:
    """Zero-field mean-field magnetisation m(T) = M(T)/M(0).

    Parameters
    ----------
    T : array_like
        Temperatures in K (any shape).
    Tc : float
        Ordering (Curie) temperature in K, > 0.
    J : float, optional
        Spin quantum number (default 1/2, for which m = tanh(m*Tc/T));
        ``numpy.inf`` gives the classical (Langevin) limit.

    Returns
    -------
    numpy.ndarray
        m in [0, 1], same shape as `T`: 1 at T = 0, exactly 0 at and above Tc,
        and m ~ (1 - T/Tc)^(1/2) just below Tc.

    References
    ----------
    Weiss (1907); Blundell (2001), section 5.1.
    """
    return curve_with_field(T, Tc, 0.0, J=J)


def curve_with_field(T, Tc: float, field_T: float, J: float = 0.5, g: float = 2.0) -> np.ndarray:
    """Mean-field magnetisation m(T) = M/M_sat in an applied field.

    Parameters
    ----------
    T : array_like
        Temperatures in K (any shape).
    Tc : float
        Zero-field ordering temperature in K, > 0.
    field_T : float
        Applied field mu0*H in tesla, >= 0.  Enters as the Zeeman term
        g*J*mu_B*B/(k_B*T) of the Brillouin argument (see
        :func:`zeeman_temperature_K`): about 0.67 K per tesla for J = 1/2,
        g = 2, so that 1 T leaves m(Tc) ~ 0.15 for J = 1/2.
    J : float, optional
        Spin quantum number (default 1/2).
    g : float, optional
        Lande g-factor (default 2).

    Returns
    -------
    numpy.ndarray
        m in [0, 1) with a paramagnetic tail above Tc when `field_T` > 0.

    References
    ----------
    Weiss (1907); Blundell (2001), sections 5.1-5.2.
    """
    T = np.asarray(T, dtype=float)
    if not (np.isfinite(Tc) and Tc > 0):
        raise ValueError(f"Tc must be a positive temperature in K, got {Tc!r}")
    if not (np.isfinite(field_T) and field_T >= 0):
        raise ValueError(f"field_T must be a non-negative field in T, got {field_T!r}")
    if np.any(~np.isfinite(T)) or np.any(T < 0):
        raise ValueError("T must hold finite, non-negative temperatures in K")
    if field_T > 0 and np.isinf(J):
        raise ValueError("the Zeeman term g*J*mu_B*B needs a finite J")
    h_K = zeeman_temperature_K(field_T, J, g) if field_T > 0 else 0.0
    flat = T.reshape(-1)
    return _solve(flat, float(Tc), h_K, J).reshape(T.shape)

"""Tests of the mean-field magnetisation against outside references.

Outside references used here:
* the self-consistent mean-field equation m = B_J(3J/(J+1) * m * Tc/T + h/T)
  itself (Weiss, 1907; Blundell, 2001, "Magnetism in Condensed Matter",
  sections 2.7 and 5.1), solved independently point by point with
  :func:`scipy.optimize.brentq`;
* closed forms of the Brillouin function: B_1/2(x) = tanh(x) and the
  Langevin limit coth(x) - 1/x as J -> infinity (Blundell, 2001, section 2.7);
* the Taylor series coth(y) = 1/y + y/3 - y^3/45 + ... (Abramowitz & Stegun,
  1964, Handbook of Mathematical Functions, 4.5.67; from memory), from which
  the critical amplitude m^2 = (10/3) (J+1)^2/((J+1)^2 + J^2) (1 - T/Tc) is
  re-derived in the test docstring (the closed form is "from memory",
  Blundell 2001, section 5.1);
* CODATA constants as given by :mod:`scipy.constants` ("Bohr magneton in K/T").
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants
from scipy.optimize import brentq

from magvault.analysis.meanfield import (brillouin, curve_with_field, reduced_magnetisation,
                                         zeeman_temperature_K)

TC = 590.0


def _brillouin_reference(x: float, J: float) -> float:
    """B_J(x) straight from its textbook definition (Blundell 2001, eq. 2.45).

    Evaluated in extended precision (numpy.longdouble) so that the
    cancellation of the two coth terms at small x stays far below the
    tolerances used here.
    """
    x = np.longdouble(x)
    a = (2 * np.longdouble(J) + 1) / (2 * np.longdouble(J))
    b = 1 / (2 * np.longdouble(J))
    return float(a / np.tanh(a * x) - b / np.tanh(b * x))


def _brentq_solution(T: float, Tc: float, J: float, h_K: float = 0.0) -> float:
    """Independent point-by-point solution of the mean-field equation in m."""
    k = 3 * J / (J + 1)

    def f(m):
        x = (k * m * Tc + h_K) / T
        return _brillouin_reference(x, J) - m if x != 0 else -m

    if h_K == 0.0 and T >= Tc:
        return 0.0
    # at zero field m = 0 is also a root: bracket the ordered one from below
    # (m exceeds 0.1 sqrt(1 - T/Tc) for every J near Tc, and far below it)
    lo = 0.1 * np.sqrt(1 - T / Tc) if h_K == 0.0 else 0.0
    if f(1.0) == 0.0:
        return 1.0  # saturated to rounding precision
    return brentq(f, lo, 1.0, xtol=1e-15, rtol=4 * np.finfo(float).eps)


def test_brillouin_half_is_tanh_and_large_j_is_langevin():
    """B_1/2 = tanh; B_J -> Langevin as J grows (Blundell 2001, sec. 2.7)."""
    x = np.array([-3.0, -0.4, 0.2, 1.0, 7.0, 40.0])
    assert np.allclose(brillouin(x, 0.5), np.tanh(x), rtol=0, atol=1e-15)
    langevin = 1 / np.tanh(x) - 1 / x
    assert np.allclose(brillouin(x, np.inf), langevin, rtol=1e-12, atol=0)
    small = np.array([1e-6, 1e-3, 5e-3])
    assert np.allclose(brillouin(small, np.inf), small / 3, rtol=1e-5)  # L(x) ~ x/3
    # B_J approaches the Langevin function as J grows, with an error falling like 1/J
    err_100 = np.max(np.abs(brillouin(x, 100.0) - langevin))
    err_1000 = np.max(np.abs(brillouin(x, 1000.0) - langevin))
    assert err_1000 < err_100 / 5


@pytest.mark.parametrize("J", [0.5, 1.0, 2.0, 3.5])
def test_brillouin_matches_definition_and_small_x_slope(J):
    """Closed form of B_J and its slope (J+1)/(3J) at x = 0 (Blundell 2001, eq. 2.46)."""
    # on both sides of |x| = 0.01, where the module switches from its series to the
    # closed form; there the double-precision closed form is good to ~eps/x^2 ~ 2e-12
    x = np.array([0.0099, 0.0101, 0.3, 1.0, 2.5, 9.0])
    reference = np.array([_brillouin_reference(v, J) for v in x])
    assert np.allclose(brillouin(x, J), reference, rtol=1e-11, atol=0)
    tiny = np.array([1e-7, 1e-4, 5e-3, -2e-3])
    assert np.allclose(brillouin(tiny, J) / tiny, (J + 1) / (3 * J), rtol=1e-4)


@pytest.mark.parametrize("J", [0.5, 1.0, 2.5, np.inf])
def test_solution_satisfies_the_self_consistent_equation(J):
    """m solves m = B_J(3J/(J+1) m Tc/T) (Weiss 1907) to rounding precision."""
    T = np.linspace(5.0, 589.0, 300)
    m = reduced_magnetisation(T, TC, J)
    k = 3.0 if np.isinf(J) else 3 * J / (J + 1)
    residual = brillouin(k * m * TC / T, J) - m
    assert np.max(np.abs(residual)) < 1e-12
    assert np.all(np.diff(m) <= 0)         # never rises with T ...
    assert np.all(np.diff(m)[T[1:] > 100] < 0)  # ... and falls strictly once not saturated
    assert np.all((m > 0) & (m <= 1))


@pytest.mark.parametrize("J", [0.5, 1.0, 3.5])
def test_against_independent_brentq_solution(J):
    """The vectorised solver agrees with scipy's brentq applied point by point."""
    T = np.array([1.0, 50.0, 200.0, 400.0, 550.0, 585.0, 589.9, 590.0, 600.0, 650.0])
    ours = reduced_magnetisation(T, TC, J)
    theirs = np.array([_brentq_solution(t, TC, J) for t in T])
    # the root is ill-conditioned just below Tc (the equation is flat in m there):
    # agreement to 1e-9 relative there, to rounding elsewhere
    assert np.allclose(ours, theirs, rtol=1e-9, atol=1e-12)
    assert np.allclose(ours[T < 560], theirs[T < 560], rtol=1e-13, atol=0)
    assert ours[-3:].tolist() == [0.0, 0.0, 0.0]  # exactly zero at and above Tc at zero field


@pytest.mark.parametrize("J", [0.5, 1.0, 2.0])
def test_critical_amplitude_near_tc(J):
    """Near Tc, m^2 -> (10/3) (J+1)^2/((J+1)^2 + J^2) (1 - T/Tc).

    Derivation (checked here rather than trusted): from coth(y) = 1/y + y/3 -
    y^3/45 + ... (Abramowitz & Stegun 4.5.67, from memory), B_J(x) = a1 x -
    a3 x^3 with a1 = (J+1)/(3J), a3 = ((2J+1)^4 - 1)/(45 (2J)^4).  With
    x = k m/t, k = 3J/(J+1), t = T/Tc: m = m/t - a3 k^3 m^3/t^3, so
    m^2 -> (1 - t)/(a3 k^3) = (10/3) (J+1)^2/(2J^2 + 2J + 1) (1 - t).  The
    closed form is the textbook one (Blundell 2001, sec. 5.1; from memory):
    both are compared.  Mean-field exponent beta = 1/2 (Landau theory).
    """
    a3 = ((2 * J + 1) ** 4 - 1) / (45 * (2 * J) ** 4)
    k = 3 * J / (J + 1)
    derived = 1 / (a3 * k**3)
    textbook = (10 / 3) * (J + 1) ** 2 / ((J + 1) ** 2 + J**2)
    assert derived == pytest.approx(textbook, rel=1e-12)
    t = 1 - np.array([1e-4, 1e-5, 1e-6])
    m = reduced_magnetisation(t * TC, TC, J)
    assert np.allclose(m**2 / (1 - t), textbook, rtol=1e-3)
    # the local exponent d ln m / d ln(1 - t) tends to 1/2
    slope = np.diff(np.log(m)) / np.diff(np.log(1 - t))
    assert np.allclose(slope, 0.5, atol=2e-3)


def test_low_temperature_limit_spin_half():
    """For J = 1/2, 1 - m ~ 2 exp(-2 Tc/T) as T -> 0 (expansion of tanh; Blundell 2001, sec. 5.1)."""
    T = np.array([60.0, 80.0, 100.0])
    m = reduced_magnetisation(T, TC)
    # tanh(x) = 1 - 2 e^{-2x} + O(e^{-4x}) with x = m Tc/T, m -> 1
    assert np.allclose((1 - m) / (2 * np.exp(-2 * TC / T)), 1.0, rtol=1e-3)


def test_zeeman_temperature_matches_codata():
    """g J mu_B B / k_B for g = 2, J = 1/2 equals mu_B/k_B per tesla (CODATA, scipy.constants)."""
    per_tesla = constants.physical_constants["Bohr magneton in K/T"][0]
    assert zeeman_temperature_K(1.0) == pytest.approx(per_tesla, rel=1e-9)
    assert zeeman_temperature_K(0.5, J=2.0, g=2.0) == pytest.approx(2.0 * per_tesla, rel=1e-9)


def test_field_curve_against_brentq_and_curie_weiss_tail():
    """In a field: agrees with brentq; far above Tc, m (T - Tc) -> h (Curie-Weiss with theta = Tc).

    For J = 1/2, m = tanh((m Tc + h)/T) ~ (m Tc + h)/T when small, so
    m = h/(T - Tc): the Curie-Weiss law chi = C/(T - theta) with theta = Tc
    in mean-field theory (Weiss 1907; Blundell 2001, sec. 5.1).
    """
    field = 0.2
    h = zeeman_temperature_K(field)
    T = np.array([20.0, 300.0, 580.0, 590.0, 600.0, 700.0, 900.0])
    ours = curve_with_field(T, TC, field)
    theirs = np.array([_brentq_solution(t, TC, 0.5, h) for t in T])
    assert np.allclose(ours, theirs, rtol=1e-9, atol=1e-13)
    assert ours[3] > 0  # no sharp zero at Tc in a field
    assert ours[2] > reduced_magnetisation(np.array([580.0]), TC)[0]  # the field raises m
    far = np.array([800.0, 1000.0, 1500.0])
    assert np.allclose(curve_with_field(far, TC, 0.01) * (far - TC) / zeeman_temperature_K(0.01), 1.0,
                       rtol=1e-6)


def test_shapes_and_bad_input():
    T = np.linspace(10, 700, 12).reshape(3, 4)
    assert reduced_magnetisation(T, TC).shape == (3, 4)
    assert reduced_magnetisation(0.0, TC) == 1.0
    with pytest.raises(ValueError, match="Tc"):
        reduced_magnetisation([300.0], -5.0)
    with pytest.raises(ValueError, match="field_T"):
        curve_with_field([300.0], TC, -1.0)
    with pytest.raises(ValueError, match="T must"):
        reduced_magnetisation([np.nan], TC)
    with pytest.raises(ValueError, match="finite J"):
        curve_with_field([300.0], TC, 1.0, J=np.inf)

"""Stoner-Wohlfarth ensembles: hysteresis of non-interacting uniaxial particles.

Each particle is a single-domain grain with one easy axis at angle ``psi`` to
the applied field and an anisotropy field ``Hk`` (given, like every field in
magvault, as mu0*H in tesla).  Its reduced energy is

    e(t) = 1/2 sin^2(t) - h cos(t - psi),    h = B / Hk,

with ``t`` the angle of the moment from the easy axis.  The moment sits in a
local minimum of e and follows it as the field changes until that minimum
vanishes at the switching field

    h_sw(psi) = (cos^(2/3) psi + sin^(2/3) psi)^(-3/2)

(the Stoner-Wohlfarth astroid), where it jumps to the other minimum.  The
component of the unit moment along the field, cos(t - psi), averaged over the
particles, is the ensemble's m = M/Ms.

How the equilibrium is found.  On the branch that comes from positive
saturation the angle t lies between the critical angle t_c = -arctan(tan^(1/3)
psi), where that branch ends at h = -h_sw, and psi (reached as h -> +inf), and
the field is an increasing function of t there, h(t) = sin(2t) / (2 sin(psi -
t)).  The stationarity condition written in u = tan(t/2) is the quartic

    g(u) = -h sin(psi) + 2 (1 + h cos(psi)) u + 2 (h cos(psi) - 1) u^3 + h sin(psi) u^4,

which has the sign of h(t) - h on that interval; it is solved by vectorised
bisection (exact to ~1e-13 rad), so no trigonometric function is evaluated
inside the loop.  A particle on the negative branch is the mirror image:
m(h) = -m_plus(-h).

Randomly oriented easy axes in three dimensions have cos(psi) uniform on
[0, 1] (an axis and its opposite are the same axis).  Such an ensemble has
Mr/Ms = 1/2 exactly, Hc ~ 0.48 Hk and Hcr/Hc ~ 1.09.

References
----------
Stoner, E. C. & Wohlfarth, E. P. (1948). A mechanism of magnetic hysteresis in
heterogeneous alloys. Phil. Trans. R. Soc. Lond. A 240, 599-642.
Tauxe, L. (2010). Essentials of Paleomagnetism, University of California
Press, chapter 5 (single-domain hysteresis: Mr/Ms = 0.5, Hcr/Hc = 1.09).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.special import ndtri

from ..errors import InvalidValue

__all__ = [
    "SimulatedCurve",
    "switching_field",
    "critical_angle",
    "positive_branch_moment",
    "random_uniaxial_loop",
    "random_uniaxial_backfield",
    "ensemble_axes",
]

# Bisection halvings of an interval shorter than pi: 2^-44 * pi ~ 2e-13 rad.
_BISECTION_STEPS = 44
_SAMPLINGS = ("random", "even")
# Fractional part of the golden ratio: pairs the two coordinates of the "even"
# (rank-1 lattice) sampling so that both marginals are evenly covered.
_GOLDEN_FRACTION = (np.sqrt(5.0) - 1.0) / 2.0


class SimulatedCurve(NamedTuple):
    """A simulated curve: applied field (mu0*H, T) and moment over Ms (1)."""

    mu0H_T: np.ndarray
    m_over_ms: np.ndarray


def switching_field(psi_rad: np.ndarray | float) -> np.ndarray:
    """Switching field of a Stoner-Wohlfarth particle, in units of Hk.

    Parameters
    ----------
    psi_rad : array_like
        Angle between the easy axis and the field, radians.

    Returns
    -------
    numpy.ndarray
        h_sw = (|cos psi|^(2/3) + |sin psi|^(2/3))^(-3/2): 1 along and across
        the easy axis, 1/2 at 45 degrees.

    References
    ----------
    Stoner & Wohlfarth (1948), Phil. Trans. R. Soc. Lond. A 240, 599.
    """
    psi = np.asarray(psi_rad, dtype=float)
    return (np.abs(np.cos(psi)) ** (2.0 / 3.0) + np.abs(np.sin(psi)) ** (2.0 / 3.0)) ** -1.5


def critical_angle(psi_rad: np.ndarray | float) -> np.ndarray:
    """Angle of the moment from the easy axis where the positive branch ends.

    Parameters
    ----------
    psi_rad : array_like
        Angle between the easy axis and the field, radians, in [0, pi/2].

    Returns
    -------
    numpy.ndarray
        t_c = -arctan(tan(psi)^(1/3)), radians, in [-pi/2, 0]; there the
        energy's first and second derivatives vanish together, at h = -h_sw.
    """
    psi = np.asarray(psi_rad, dtype=float)
    return -np.arctan(np.cbrt(np.tan(psi)))


def positive_branch_moment(h: np.ndarray | float, psi_rad: np.ndarray | float) -> np.ndarray:
    """Moment along the field on the branch that comes from positive saturation.

    Parameters
    ----------
    h : array_like
        Field over the particle's anisotropy field (dimensionless); must be
        >= -h_sw(psi) (below that the branch no longer exists).
    psi_rad : array_like
        Angle between the easy axis and the field, radians, in [0, pi/2];
        broadcast against ``h``.

    Returns
    -------
    numpy.ndarray
        cos(t - psi), the unit moment's component along the field.

    References
    ----------
    Stoner & Wohlfarth (1948), Phil. Trans. R. Soc. Lond. A 240, 599.
    """
    h = np.asarray(h, dtype=float)
    psi = np.asarray(psi_rad, dtype=float)
    shape = np.broadcast(h, psi).shape
    hx = np.empty(shape)
    hx[...] = h * np.cos(psi)
    hy = np.empty(shape)
    hy[...] = h * np.sin(psi)
    c1 = 2.0 + 2.0 * hx
    c3 = 2.0 * hx - 2.0
    lower = np.empty(shape)
    lower[...] = np.tan(0.5 * critical_angle(psi))
    width = np.empty(shape)
    width[...] = np.tan(0.5 * psi)
    width -= lower
    mid = np.empty(shape)
    g = np.empty(shape)
    u2 = np.empty(shape)
    for _ in range(_BISECTION_STEPS):
        width *= 0.5
        np.add(lower, width, out=mid)
        np.multiply(mid, mid, out=u2)
        # Horner form of g(u) = u (c1 + u^2 (c3 + hy u)) - hy
        np.multiply(hy, mid, out=g)
        g += c3
        g *= u2
        g += c1
        g *= mid
        g -= hy
        np.copyto(lower, mid, where=g <= 0.0)
    u = lower + 0.5 * width
    cos_psi = np.broadcast_to(np.cos(psi), shape)
    sin_psi = np.broadcast_to(np.sin(psi), shape)
    return ((1.0 - u * u) * cos_psi + 2.0 * u * sin_psi) / (1.0 + u * u)


def ensemble_axes(n_particles: int, *, seed: int | None = 0, hk_log_sigma: float = 0.0,
                  sampling: str = "random") -> tuple[np.ndarray, np.ndarray]:
    """Easy-axis angles and relative anisotropy fields of an ensemble.

    Parameters
    ----------
    n_particles : int
        Number of particles (equal volumes).
    seed : int or None
        Seed of :func:`numpy.random.default_rng` for ``sampling="random"``.
    hk_log_sigma : float
        Standard deviation of ln(Hk) across particles (0: all equal).
    sampling : {"random", "even"}
        ``"random"``: cos(psi) uniform random, ln(Hk) normal random.
        ``"even"``: a deterministic rank-1 lattice, cos(psi) on the midpoints
        (i + 1/2)/n and the normal quantiles of ln(Hk) paired with them by the
        golden ratio; it integrates smooth averages far more accurately.

    Returns
    -------
    psi_rad, hk_factor : numpy.ndarray
        Angles in [0, pi/2] and factors multiplying the nominal Hk.
    """
    if int(n_particles) < 1:
        raise InvalidValue(f"n_particles: {n_particles!r}; expected a positive integer",
                           field="n_particles")
    if sampling not in _SAMPLINGS:
        raise InvalidValue(f"sampling: {sampling!r}; expected one of {', '.join(_SAMPLINGS)}",
                           field="sampling")
    if not np.isfinite(hk_log_sigma) or hk_log_sigma < 0:
        raise InvalidValue(f"hk_log_sigma: {hk_log_sigma!r}; expected a finite number >= 0",
                           field="hk_log_sigma")
    n = int(n_particles)
    if sampling == "random":
        rng = np.random.default_rng(seed)
        cos_psi = rng.uniform(0.0, 1.0, n)
        z = rng.standard_normal(n)
    else:
        i = np.arange(n)
        cos_psi = (i + 0.5) / n
        z = ndtri(np.mod((i + 0.5) * _GOLDEN_FRACTION, 1.0))
    return np.arccos(cos_psi), np.exp(hk_log_sigma * z)


def _check_fields(fields_T, Hk_T) -> np.ndarray:
    fields = np.asarray(fields_T, dtype=float).ravel()
    if fields.size == 0 or not np.all(np.isfinite(fields)):
        raise InvalidValue("fields_T: expected a non-empty array of finite fields (mu0*H, T)",
                           field="fields_T")
    if not (np.isfinite(Hk_T) and Hk_T > 0):
        raise InvalidValue(f"Hk_T: {Hk_T!r}; expected a positive anisotropy field (mu0*Hk, T)",
                           field="Hk_T")
    return fields


def random_uniaxial_loop(fields_T, Hk_T: float, *, n_particles: int = 500, seed: int | None = 0,
                         hk_log_sigma: float = 0.0, sampling: str = "random") -> SimulatedCurve:
    """Hysteresis loop of an ensemble of randomly oriented uniaxial particles.

    The ensemble starts from positive saturation, follows the descending
    branch from the largest to the smallest of ``fields_T`` and then the
    ascending branch back to the largest.  Each particle keeps its own
    history, so a field range too small to saturate gives the correct minor
    loop.  Particles do not interact and thermal activation is ignored.

    Parameters
    ----------
    fields_T : array_like
        Field values of one branch, mu0*H in tesla (any order; sorted here).
    Hk_T : float
        Median anisotropy field, mu0*Hk in tesla.
    n_particles : int
        Particles in the ensemble; the cost grows as n_particles * len(fields_T).
    seed : int or None
        Seed for ``sampling="random"`` (the result is deterministic for a seed).
    hk_log_sigma : float
        Standard deviation of ln(Hk) across particles.
    sampling : {"random", "even"}
        See :func:`ensemble_axes`.

    Returns
    -------
    SimulatedCurve
        ``(mu0H_T, m_over_ms)``: the descending branch (fields high to low)
        followed by the ascending branch (low to high), 2 * len(fields_T)
        points in measurement order.

    References
    ----------
    Stoner & Wohlfarth (1948), Phil. Trans. R. Soc. Lond. A 240, 599.
    """
    fields = _check_fields(fields_T, Hk_T)
    psi, hk_factor = ensemble_axes(n_particles, seed=seed, hk_log_sigma=hk_log_sigma,
                                   sampling=sampling)
    descending = np.sort(fields)[::-1]
    ascending = descending[::-1]
    hk = (Hk_T * hk_factor)[:, None]
    h_switch = switching_field(psi)[:, None]
    psi_col = psi[:, None]

    # Descending from positive saturation: a particle has switched once h < -h_sw.
    h_desc = descending[None, :] / hk
    state_desc = np.where(h_desc >= -h_switch, 1.0, -1.0)
    # Ascending: particles switched on the way down stay negative until h > h_sw.
    switched = (fields.min() / hk) < -h_switch
    h_asc = ascending[None, :] / hk
    state_asc = np.where(switched & (h_asc < h_switch), -1.0, 1.0)

    h_all = np.concatenate([h_desc, h_asc], axis=1)
    state = np.concatenate([state_desc, state_asc], axis=1)
    m = state * positive_branch_moment(state * h_all, psi_col)
    return SimulatedCurve(np.concatenate([descending, ascending]), m.mean(axis=0))


def random_uniaxial_backfield(back_fields_T, Hk_T: float, *, n_particles: int = 500,
                              seed: int | None = 0, hk_log_sigma: float = 0.0,
                              sampling: str = "random") -> SimulatedCurve:
    """Remanence after positive saturation and back fields of growing strength.

    After saturation in a large positive field, fields of increasing
    magnitude are applied opposite to it; the remanence is read in zero field
    after each.  A particle has reversed once the back field exceeded its
    switching field; in zero field its moment then lies along the easy axis,
    so it contributes -cos(psi) instead of +cos(psi).

    Parameters
    ----------
    back_fields_T : array_like
        Back fields, mu0*H in tesla; the sign is ignored (they are applied
        opposite to the saturating field) and they are taken in order of
        increasing magnitude.
    Hk_T, n_particles, seed, hk_log_sigma, sampling :
        As for :func:`random_uniaxial_loop`.

    Returns
    -------
    SimulatedCurve
        ``(mu0H_T, m_over_ms)``: the back fields as negative values in order
        of increasing magnitude and the remanence over Ms (from +Mr/Ms
        towards -Mr/Ms).

    References
    ----------
    Stoner & Wohlfarth (1948), Phil. Trans. R. Soc. Lond. A 240, 599.
    """
    magnitudes = np.sort(np.abs(_check_fields(back_fields_T, Hk_T)))
    psi, hk_factor = ensemble_axes(n_particles, seed=seed, hk_log_sigma=hk_log_sigma,
                                   sampling=sampling)
    threshold = (Hk_T * hk_factor * switching_field(psi))[:, None]
    state = np.where(magnitudes[None, :] > threshold, -1.0, 1.0)
    remanence = (state * np.cos(psi)[:, None]).mean(axis=0)
    return SimulatedCurve(-magnitudes, remanence)

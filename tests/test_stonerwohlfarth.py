"""Stoner-Wohlfarth ensemble generator.

Outside references:
* Stoner, E. C. & Wohlfarth, E. P. (1948), Phil. Trans. R. Soc. Lond. A 240,
  599: the particle energy e = 1/2 sin^2(t) - h cos(t - psi); the switching
  field astroid (h_sw = 1 along the easy axis, 1/2 at 45 degrees); for a
  random ensemble Hc ~ 0.479 Hk (from memory) and Hcr ~ 0.524 Hk (from memory).
* Tauxe, L. (2010), Essentials of Paleomagnetism, ch. 5: a random uniaxial
  single-domain ensemble has Mr/Ms = 0.5 and Hcr/Hc = 1.09 (confirmed in
  REFERENCES.md).
* scipy.optimize: independent energy minimisation and switching-field
  solutions, written here without the module's closed forms.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from magvault.analysis.stonerwohlfarth import (
    critical_angle,
    ensemble_axes,
    positive_branch_moment,
    random_uniaxial_backfield,
    random_uniaxial_loop,
    switching_field,
)
from magvault.errors import InvalidValue


def energy(t, h, psi):
    """Reduced Stoner-Wohlfarth energy (Stoner & Wohlfarth 1948)."""
    return 0.5 * np.sin(t) ** 2 - h * np.cos(t - psi)


def first_crossing(field, m):
    """Field where m first changes sign, by linear interpolation (test-side helper)."""
    s = np.sign(m)
    i = int(np.flatnonzero(s[:-1] * s[1:] <= 0)[0])
    return field[i] - m[i] * (field[i + 1] - field[i]) / (m[i + 1] - m[i])


# --------------------------------------------------------------------------- switching field

def test_switching_field_special_angles():
    """Astroid values: 1 along and across the easy axis, 1/2 at 45 degrees
    (Stoner & Wohlfarth 1948; from memory, and derived from the astroid
    formula by hand: (2 * 2^(-1/3))^(-3/2) = 1/2)."""
    psi = np.radians([0.0, 45.0, 90.0])
    assert switching_field(psi) == pytest.approx([1.0, 0.5, 1.0], abs=1e-9)


@pytest.mark.parametrize("psi_deg", [5.0, 20.0, 45.0, 63.0, 85.0])
def test_switching_field_matches_energy_instability(psi_deg):
    """Solve dE/dt = 0 and d2E/dt2 = 0 together with scipy (no closed form used):
    the field where the positive-branch minimum disappears is -h_sw."""
    psi = np.radians(psi_deg)

    def equations(p):
        t, h = p
        return [np.sin(t) * np.cos(t) + h * np.sin(t - psi),
                np.cos(2 * t) + h * np.cos(t - psi)]

    t, h = optimize.fsolve(equations, [-0.4, -0.6], xtol=1e-13)
    assert h == pytest.approx(-switching_field(psi), rel=1e-9)
    assert t == pytest.approx(critical_angle(psi), abs=1e-7)


# --------------------------------------------------------------------------- one particle

def follow_minimum(h_values, psi):
    """Follow the energy minimum from saturation by local minimisation (scipy)."""
    t = psi
    out = []
    for h in h_values:
        res = optimize.minimize_scalar(energy, bounds=(t - 0.3, t + 0.3), args=(h, psi),
                                       method="bounded", options={"xatol": 1e-12})
        t = res.x
        out.append(np.cos(t - psi))
    return np.array(out)


@pytest.mark.parametrize("psi_deg", [10.0, 40.0, 70.0, 89.0])
def test_positive_branch_matches_path_following_minimisation(psi_deg):
    psi = np.radians(psi_deg)
    h_sw = float(switching_field(psi))
    # from well above saturation down to just above the switching field
    h_path = np.linspace(20.0, -0.995 * h_sw, 1200)
    expected = follow_minimum(h_path, psi)
    pick = slice(None, None, 100)
    got = positive_branch_moment(h_path[pick], psi)
    assert got == pytest.approx(expected[pick], abs=1e-7)


def test_positive_branch_limits():
    """Along the hard axis the curve is the reversible line m = h (|h| <= 1);
    along the easy axis the moment stays saturated (Stoner & Wohlfarth 1948)."""
    h = np.linspace(-0.99, 0.99, 11)
    assert positive_branch_moment(h, np.pi / 2) == pytest.approx(h, abs=1e-12)
    assert positive_branch_moment(h, 0.0) == pytest.approx(np.ones_like(h), abs=1e-12)


# --------------------------------------------------------------------------- ensembles

def test_random_ensemble_remanence_ratio_is_one_half():
    """Mr/Ms = 0.5 for randomly oriented uniaxial single-domain particles
    (Stoner & Wohlfarth 1948; Tauxe 2010 ch. 5)."""
    fields = np.linspace(-1.0, 1.0, 41)
    curve = random_uniaxial_loop(fields, 0.2, n_particles=400, sampling="even")
    n = fields.size
    descending, ascending = curve.m_over_ms[:n], curve.m_over_ms[n:]
    zero_d = np.flatnonzero(curve.mu0H_T[:n] == 0.0)[0]
    zero_a = np.flatnonzero(curve.mu0H_T[n:] == 0.0)[0]
    assert descending[zero_d] == pytest.approx(0.5, abs=1e-9)
    assert ascending[zero_a] == pytest.approx(-0.5, abs=1e-9)
    # random sampling: within 4 standard errors, sqrt(1/12/N)
    rand = random_uniaxial_loop(fields, 0.2, n_particles=2000, seed=3)
    assert rand.m_over_ms[:n][zero_d] == pytest.approx(0.5, abs=4 * np.sqrt(1 / 12 / 2000))


def test_random_ensemble_coercivities():
    """Hc ~ 0.48 Hk (from memory: 0.479 is the value usually quoted from
    Stoner & Wohlfarth 1948; numerical integration gives 0.482), Hcr ~ 0.524 Hk
    (from memory), Hcr/Hc = 1.09 (Tauxe 2010, ch. 5, confirmed)."""
    hk = 0.1
    # saturate at 3 Hk, then sample finely where the descending branch crosses zero
    fields = np.concatenate([[0.3], np.linspace(-0.06, 0.06, 241)])
    loop = random_uniaxial_loop(fields, hk, n_particles=500, sampling="even")
    n = fields.size
    hc = -first_crossing(loop.mu0H_T[:n], loop.m_over_ms[:n])
    back = random_uniaxial_backfield(np.linspace(0.0, 0.1, 2001), hk, n_particles=4000,
                                     sampling="even")
    hcr = -first_crossing(back.mu0H_T, back.m_over_ms)
    assert hc / hk == pytest.approx(0.48, abs=0.004)
    assert hcr / hk == pytest.approx(0.524, abs=0.003)
    assert hcr / hc == pytest.approx(1.09, abs=0.01)


def test_ascending_branch_mirrors_descending_after_saturation():
    fields = np.linspace(-0.5, 0.5, 101)
    curve = random_uniaxial_loop(fields, 0.08, n_particles=300, seed=5, hk_log_sigma=0.3)
    n = fields.size
    desc_field, desc = curve.mu0H_T[:n], curve.m_over_ms[:n]
    asc_field, asc = curve.mu0H_T[n:], curve.m_over_ms[n:]
    assert asc_field == pytest.approx(-desc_field)
    assert asc == pytest.approx(-desc, abs=1e-12)


def test_minor_field_range_gives_reversible_curve():
    """Below the smallest switching field (Hk/2) no particle switches: the two
    branches coincide (Stoner & Wohlfarth 1948, astroid minimum 1/2)."""
    hk = 0.2
    fields = np.linspace(-0.09, 0.09, 37)
    curve = random_uniaxial_loop(fields, hk, n_particles=200, sampling="even")
    n = fields.size
    assert curve.m_over_ms[n:] == pytest.approx(curve.m_over_ms[:n][::-1], abs=1e-12)
    # ... while a loop reaching beyond Hk is open
    wide = random_uniaxial_loop(np.linspace(-0.5, 0.5, 37), hk, n_particles=200, sampling="even")
    assert np.max(np.abs(wide.m_over_ms[n:] - wide.m_over_ms[:n][::-1])) > 0.5


def test_backfield_runs_from_plus_to_minus_remanence():
    back = random_uniaxial_backfield([0.0, 0.01, 0.05, 0.2, 1.0], 0.1, n_particles=500,
                                     sampling="even")
    assert back.mu0H_T == pytest.approx([0.0, -0.01, -0.05, -0.2, -1.0])
    assert back.m_over_ms[0] == pytest.approx(0.5, abs=1e-9)
    assert back.m_over_ms[-1] == pytest.approx(-0.5, abs=1e-9)
    assert np.all(np.diff(back.m_over_ms) <= 0)


def test_seeded_sampling_is_deterministic():
    fields = np.linspace(-0.3, 0.3, 31)
    a = random_uniaxial_loop(fields, 0.05, n_particles=100, seed=11, hk_log_sigma=0.2)
    b = random_uniaxial_loop(fields, 0.05, n_particles=100, seed=11, hk_log_sigma=0.2)
    c = random_uniaxial_loop(fields, 0.05, n_particles=100, seed=12, hk_log_sigma=0.2)
    assert np.array_equal(a.m_over_ms, b.m_over_ms)
    assert not np.array_equal(a.m_over_ms, c.m_over_ms)


def test_even_sampling_covers_both_marginals():
    psi, factor = ensemble_axes(1000, sampling="even", hk_log_sigma=0.5)
    # cos(psi) on the midpoints; ln(Hk) with mean 0 and standard deviation ~0.5
    assert np.sort(np.cos(psi)) == pytest.approx((np.arange(1000) + 0.5) / 1000)
    assert np.mean(np.log(factor)) == pytest.approx(0.0, abs=0.01)
    assert np.std(np.log(factor)) == pytest.approx(0.5, rel=0.03)


@pytest.mark.parametrize("kwargs, field", [
    ({"Hk_T": 0.0}, "Hk_T"),
    ({"Hk_T": 0.1, "sampling": "grid"}, "sampling"),
    ({"Hk_T": 0.1, "n_particles": 0}, "n_particles"),
    ({"Hk_T": 0.1, "hk_log_sigma": -1.0}, "hk_log_sigma"),
])
def test_bad_arguments_are_refused(kwargs, field):
    with pytest.raises(InvalidValue) as err:
        random_uniaxial_loop(np.linspace(-1, 1, 5), **kwargs)
    assert err.value.field == field


def test_empty_fields_refused():
    with pytest.raises(InvalidValue):
        random_uniaxial_backfield([], 0.1)

"""The J = 0 unitarity bound of the BBX event rate K3 n_B^2 n_X.

The bound is rebuilt here from its ingredients (docs/heteronuclear.md), each computed
independently of the module: the Jacobian and the kinetic energy of the mass-scaled Jacobi
coordinates from numpy linear algebra, the constant-harmonic part of a six-dimensional plane
wave and its incoming flux from scipy's Bessel and Hankel functions, and the thermal average
<1/E^2> by quadrature. The values of the bound as given to us from a derivation elsewhere:
7.63e-21 cm^6/s for 133Cs-133Cs-6Li at 100 nK, 1.24e-22 cm^6/s for 87Rb-87Rb-40K at 300 nK.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad
from scipy.special import h2vp, hankel2, jv

from lossfit.errors import LossfitValueError
from lossfit.mixture import heteronuclear
from lossfit.rates import unitarity_bound
from lossfit.species import Species, species


def _jacobi_matrix(m_b, m_x, m_ref):
    """Rows: R, x, y as linear combinations of (r1, r2, r3) along one Cartesian axis."""
    total = 2 * m_b + m_x
    mu_bb, mu_3 = m_b / 2, 2 * m_b * m_x / total
    return np.array([[m_b / total, m_b / total, m_x / total],
                     [math.sqrt(mu_bb / m_ref), -math.sqrt(mu_bb / m_ref), 0.0],
                     [-0.5 * math.sqrt(mu_3 / m_ref), -0.5 * math.sqrt(mu_3 / m_ref), math.sqrt(mu_3 / m_ref)]])


@pytest.mark.parametrize("boson, other", [("133Cs", "6Li"), ("87Rb", "40K")])
def test_mass_scaled_coordinates_make_one_six_dimensional_particle(boson, other):
    m_b, m_x = species(boson).mass, species(other).mass
    m_ref = m_b
    a = _jacobi_matrix(m_b, m_x, m_ref)
    inv = np.linalg.inv(a)
    # kinetic energy (1/2) r'^T diag(m) r' in the new velocities: diag(M, m_ref, m_ref)
    metric = inv.T @ np.diag([m_b, m_b, m_x]) @ inv
    assert np.allclose(metric, np.diag([2 * m_b + m_x, m_ref, m_ref]), rtol=1e-12, atol=1e-12 * m_b)
    # d^3r1 d^3r2 d^3r3 = J d^3R d^3x d^3y with J = |det a|^-3 = (m_ref^2/(mu_BB mu_3))^(3/2)
    mu_bb, mu_3 = m_b / 2, 2 * m_b * m_x / (2 * m_b + m_x)
    assert abs(np.linalg.det(a)) ** -3 == pytest.approx((m_ref ** 2 / (mu_bb * mu_3)) ** 1.5, rel=1e-12)


@pytest.mark.parametrize("z", [0.3, 2.0, 7.5, 31.0])
def test_constant_harmonic_part_of_a_six_dimensional_plane_wave(z):
    # The average of exp(i z u) over the unit sphere S^5 (u = one Cartesian component, density
    # proportional to (1 - u^2)^(3/2)) is 8 J_2(z)/z^2 (docs/conventions.md).
    weight = lambda u: (1 - u * u) ** 1.5
    average = quad(lambda u: math.cos(z * u) * weight(u), -1, 1, limit=200)[0] / quad(weight, -1, 1)[0]
    assert average == pytest.approx(8 * jv(2, z) / z ** 2, rel=1e-9, abs=1e-13)


def _incoming_flux(k, mass, rho):
    """Incoming probability flux of the constant-harmonic wave 8 J_2(k rho)/(k rho)^2 through the
    hypersphere of radius rho (area pi^3 rho^5), for one particle of mass `mass` in 6-D (SI)."""
    z = k * rho
    f = 8 * hankel2(2, z) / (2 * z ** 2)                         # incoming half of J_2
    df = 8 * k * (h2vp(2, z) / (2 * z ** 2) - hankel2(2, z) / z ** 3)
    current = sc.hbar / mass * np.imag(np.conj(f) * df)          # radial current density
    return -current * math.pi ** 3 * rho ** 5


def _bound_from_ingredients(m_b, m_x, energy_j, m_ref):
    mu_bb, mu_3 = m_b / 2, 2 * m_b * m_x / (2 * m_b + m_x)
    jacobian = (m_ref ** 2 / (mu_bb * mu_3)) ** 1.5
    k = math.sqrt(2 * m_ref * energy_j) / sc.hbar
    flux = _incoming_flux(k, m_ref, rho=40.0 / k)
    # Event rate per volume = (n_B^2/2 unordered B pairs) x n_X x 2 (the symmetrised B pair has
    # twice one ordering's intensity on the constant harmonic) x J x flux: K3 = J x flux.
    return jacobian * flux


@pytest.mark.parametrize("boson, other", [("133Cs", "6Li"), ("87Rb", "40K"), ("87Rb", "41K")])
def test_energy_resolved_bound_from_its_ingredients(boson, other):
    system = heteronuclear(boson, other)
    m_b, m_x = system.mass_boson, system.mass_other
    for e_nk in (10.0, 250.0):
        e_j = e_nk * 1e-9 * sc.k
        for m_ref in (m_b, sc.atomic_mass):       # the reference mass drops out
            expected = _bound_from_ingredients(m_b, m_x, e_j, m_ref) * 1e6 ** 2   # m^6/s -> cm^6/s
            assert system.unitarity_bound_at_energy(e_nk) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("boson, other, temperature, value", [
    ("133Cs", "6Li", 100.0, 7.63e-21),
    ("87Rb", "40K", 300.0, 1.24e-22),
])
def test_thermal_bound_values(boson, other, temperature, value):
    system = heteronuclear(boson, other)
    # the given values, to their three digits
    half_digit = 0.5 * 10.0 ** (math.floor(math.log10(value)) - 2)
    assert system.unitarity_bound(temperature) == pytest.approx(value, abs=half_digit)
    # and the Boltzmann average of the energy-resolved bound by quadrature, P3(E) = E^2 e^-E/(2 T^3)
    p3 = lambda e: e ** 2 * math.exp(-e / temperature) / (2 * temperature ** 3)
    average = quad(lambda e: p3(e) * system.unitarity_bound_at_energy(e), 0, 80 * temperature,
                   epsabs=0, epsrel=1e-12, limit=200)[0]
    assert system.unitarity_bound(temperature) == pytest.approx(average, rel=1e-9)


def test_equal_masses_reduce_to_the_identical_boson_event_bound():
    # lossfit's identical-boson bound counts atoms lost (36 sqrt3 pi^2 hbar^5/(m^3 (k_B T)^2),
    # Rem et al., PRL 110, 163202 (2013)); three atoms per event.
    cs = species("133Cs")
    b = Species("B-as-Cs", cs.mass_u, cs.c6_au)
    x = Species("X-as-Cs", cs.mass_u, cs.c6_au)
    system = heteronuclear(b, x, c6_bx=cs.c6_au)
    t = np.array([20.0, 100.0, 800.0])
    assert np.allclose(system.unitarity_bound(t), unitarity_bound("l3", t, cs) / 3, rtol=1e-12, atol=0)
    m = cs.mass
    closed = 12 * math.sqrt(3) * math.pi ** 2 * sc.hbar ** 5 / (m ** 3 * (sc.k * t * 1e-9) ** 2) * 1e12
    assert np.allclose(system.unitarity_bound(t), closed, rtol=1e-8, atol=0)


@pytest.mark.parametrize("t_b, t_x", [(100.0, 400.0), (500.0, 60.0)])
def test_two_temperature_bound_is_the_average_over_the_two_temperature_density(t_b, t_x):
    system = heteronuclear("133Cs", "6Li")
    t1, t2 = system.effective_temperatures(t_b, t_x)
    average = quad(lambda e: system.collision_energy_density(e, t_b, t_x) * system.unitarity_bound_at_energy(e),
                   0, 100 * max(t1, t2), epsabs=0, epsrel=1e-12, limit=200)[0]
    assert system.unitarity_bound(t_b, t_x) == pytest.approx(average, rel=1e-9)
    # hotter X raises the relative energy, lowering the bound below its value at T_X = T_B
    if t_x > t_b:
        assert system.unitarity_bound(t_b, t_x) < system.unitarity_bound(t_b)


@pytest.mark.parametrize("call, argument", [
    (lambda s: s.unitarity_bound(0.0), "temperature_nk"),
    (lambda s: s.unitarity_bound(100.0, -1.0), "temperature_x_nk"),
    (lambda s: s.unitarity_bound_at_energy(0.0), "energy_nk"),
])
def test_bad_input_names_the_argument(call, argument):
    with pytest.raises(LossfitValueError) as info:
        call(heteronuclear("133Cs", "6Li"))
    assert info.value.argument == argument

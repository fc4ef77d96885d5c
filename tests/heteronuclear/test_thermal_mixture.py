"""Collision-energy distribution of B, B, X triples in a Boltzmann mixture, against Monte Carlo
sampling of Maxwell-Boltzmann velocities, scipy quadrature and the Gamma distributions.

Reference facts (textbook statistics, quoted from memory): a Maxwell-Boltzmann velocity
component of an atom of mass m at temperature T is Gaussian with variance k_B T/m; the sum of
independent Gamma variables of one scale is Gamma with the summed shape, mean k theta and
variance k theta^2 for shape k and scale theta. Units here: k_B = 1, energies and
temperatures in nK, masses in u (the velocity unit then drops out of E).
"""

import math

import numpy as np
import pytest
from scipy import stats
from scipy.integrate import quad

from lossfit.errors import LossfitValueError
from lossfit.mixture import heteronuclear, mean_inverse_square_energy, three_body_energy_density

N_SAMPLES = 400_000


def _sample_relative_energy(m_b, m_x, t_b, t_x, seed):
    """E = total kinetic energy minus that of the centre of mass, of two B (mass m_b, T_B) and one
    X (m_x, T_X) with independent Maxwell-Boltzmann velocities."""
    rng = np.random.default_rng(seed)
    v1 = rng.normal(0.0, math.sqrt(t_b / m_b), (N_SAMPLES, 3))
    v2 = rng.normal(0.0, math.sqrt(t_b / m_b), (N_SAMPLES, 3))
    v3 = rng.normal(0.0, math.sqrt(t_x / m_x), (N_SAMPLES, 3))
    total_mass = 2 * m_b + m_x
    v_cm = (m_b * (v1 + v2) + m_x * v3) / total_mass
    kinetic = 0.5 * (m_b * (v1 ** 2 + v2 ** 2).sum(1) + m_x * (v3 ** 2).sum(1))
    return kinetic - 0.5 * total_mass * (v_cm ** 2).sum(1)


def _cdf(system, e, t_b, t_x):
    return quad(lambda x: system.collision_energy_density(x, t_b, t_x), 0.0, e, epsabs=0.0, epsrel=1e-11)[0]


@pytest.mark.parametrize("boson, other", [("133Cs", "6Li"), ("87Rb", "40K")])
def test_one_temperature_is_the_gamma_three_law_for_any_masses(boson, other):
    system = heteronuclear(boson, other)
    t = 180.0
    e = np.linspace(0.0, 3000.0, 61)
    closed = e ** 2 * np.exp(-e / t) / (2 * t ** 3)
    assert np.allclose(system.collision_energy_density(e, t), closed, rtol=1e-14, atol=0.0)
    # Monte Carlo: the sampled energies follow Gamma(3, k_B T) (Kolmogorov-Smirnov, 400k samples).
    sample = _sample_relative_energy(system.boson.mass_u, system.other.mass_u, t, t, seed=11)
    assert stats.kstest(sample, stats.gamma(3.0, scale=t).cdf).pvalue > 1e-3


def test_two_temperatures_effective_temperature_of_the_third_atom():
    # T_3 = mu_3 (T_X/m_X + T_B/(2 m_B)) from the variance of v_X - (v_1 + v_2)/2 (Gaussian sums),
    # written with the masses directly.
    system = heteronuclear("133Cs", "6Li")
    m_b, m_x = system.boson.mass_u, system.other.mass_u
    mu_3 = 2 * m_b * m_x / (2 * m_b + m_x)
    t_bb, t_3 = system.effective_temperatures(100.0, 400.0)
    assert t_bb == 100.0
    assert t_3 == pytest.approx(mu_3 * (400.0 / m_x + 100.0 / (2 * m_b)), rel=1e-13)


@pytest.mark.parametrize("boson, other, t_b, t_x", [
    ("133Cs", "6Li", 100.0, 400.0),   # hot X
    ("87Rb", "41K", 500.0, 60.0),     # hot bosons
])
def test_two_temperatures_against_monte_carlo(boson, other, t_b, t_x):
    system = heteronuclear(boson, other)
    t1, t2 = system.effective_temperatures(t_b, t_x)
    sample = _sample_relative_energy(system.boson.mass_u, system.other.mass_u, t_b, t_x, seed=2024)

    # normalisation and moments of the density by quadrature, against the Gamma sums
    # (two Gamma(3/2) parts: mean 3/2 (T1 + T2), variance 3/2 (T1^2 + T2^2))
    density = lambda x: system.collision_energy_density(x, t_b, t_x)
    upper = 80 * max(t1, t2)
    norm = quad(density, 0, upper, epsabs=0, epsrel=1e-12, limit=200)[0]
    mean = quad(lambda x: x * density(x), 0, upper, epsabs=0, epsrel=1e-12, limit=200)[0]
    second = quad(lambda x: x * x * density(x), 0, upper, epsabs=0, epsrel=1e-12, limit=200)[0]
    assert norm == pytest.approx(1.0, abs=1e-10)
    assert mean == pytest.approx(1.5 * (t1 + t2), rel=1e-10)
    assert second - mean ** 2 == pytest.approx(1.5 * (t1 ** 2 + t2 ** 2), rel=1e-9)

    # Monte Carlo moments within 5 standard errors
    n = sample.size
    assert abs(sample.mean() - mean) < 5 * sample.std() / math.sqrt(n)
    centred = sample - sample.mean()
    var_se = math.sqrt((np.mean(centred ** 4) - np.var(sample) ** 2) / n)
    assert abs(np.var(sample) - (second - mean ** 2)) < 5 * var_se

    # empirical CDF at a ladder of energies within 5 binomial standard errors
    for e in np.array([0.3, 0.7, 1.2, 2.0, 3.5, 6.0]) * (t1 + t2):
        f = _cdf(system, e, t_b, t_x)
        empirical = np.mean(sample <= e)
        assert abs(empirical - f) < 5 * math.sqrt(f * (1 - f) / n) + 1e-9

    # and the one-temperature law is visibly wrong here (the test can tell the two apart)
    t_mean = (t1 + t2) / 2
    assert stats.kstest(sample, stats.gamma(3.0, scale=t_mean).cdf).pvalue < 1e-6


def test_density_is_symmetric_and_continuous_in_the_temperatures():
    e = np.linspace(0.0, 2000.0, 41)
    assert np.allclose(three_body_energy_density(e, 70.0, 230.0), three_body_energy_density(e, 230.0, 70.0),
                       rtol=1e-14, atol=0.0)
    # equal temperatures, approached from unequal ones
    closed = e ** 2 * np.exp(-e / 150.0) / (2 * 150.0 ** 3)
    assert np.allclose(three_body_energy_density(e, 150.0, 150.0 * (1 + 1e-9)), closed, rtol=1e-7, atol=0.0)


@pytest.mark.parametrize("t1, t2", [(100.0, 100.0), (100.0, 400.0), (35.0, 2000.0)])
def test_mean_inverse_square_energy_against_quadrature(t1, t2):
    numeric = quad(lambda x: three_body_energy_density(x, t1, t2) / x ** 2, 0, 100 * max(t1, t2),
                   epsabs=0, epsrel=1e-12, limit=200)[0]
    assert mean_inverse_square_energy(t1, t2) == pytest.approx(numeric, rel=1e-9)
    if t1 == t2:
        assert mean_inverse_square_energy(t1, t2) == pytest.approx(1 / (2 * t1 ** 2), rel=1e-14)


@pytest.mark.parametrize("call, argument", [
    (lambda: three_body_energy_density(-1.0, 100.0, 100.0), "energy_nk"),
    (lambda: three_body_energy_density(1.0, 0.0, 100.0), "pair_temperature_nk"),
    (lambda: three_body_energy_density(1.0, 100.0, np.nan), "third_temperature_nk"),
    (lambda: heteronuclear("133Cs", "6Li").collision_energy_density(1.0, -5.0), "temperature_nk"),
    (lambda: heteronuclear("133Cs", "6Li").collision_energy_density(1.0, 5.0, "hot"), "temperature_x_nk"),
    (lambda: mean_inverse_square_energy(100.0, -1.0), "third_temperature_nk"),
])
def test_bad_input_names_the_argument(call, argument):
    with pytest.raises(LossfitValueError) as info:
        call()
    assert info.value.argument == argument

"""Tests of lossfit.experiment.trap against direct numerical quadrature of Boltzmann profiles.

Reference profiles are built here from scipy.constants and the harmonic potential
U = (m/2) sum omega_i^2 x_i^2 alone: n(r) = N exp(-U/k_B T) / Z with Z itself computed
by quadrature, so no formula of the module under test is reused.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import cubature, quad

from lossfit.errors import LossfitValueError
from lossfit.experiment.trap import HarmonicTrap, as_trap
from lossfit.species import species

FREQS = (95.0, 130.0, 17.0)          # Hz, a deliberately anisotropic crossed trap
TEMP_NK = 250.0
N_ATOMS = 8.0e4
CS = species("133Cs")
M = CS.mass
KT = sc.k * TEMP_NK * 1e-9


def _omegas(freqs):
    return 2.0 * math.pi * np.asarray(freqs, dtype=float)


def _sigmas(mass, freqs):
    return np.sqrt(KT / (mass * _omegas(freqs) ** 2))


def _potential(mass, freqs, r):
    """U(r) in J for points r of shape (npts, 3) in metres."""
    return 0.5 * mass * np.sum(_omegas(freqs) ** 2 * r ** 2, axis=-1)


def _boltzmann(mass, freqs, factor=1.0):
    """exp(-factor U / k_B T) at points of shape (npts, 3), in metres."""
    return lambda r: np.exp(-factor * _potential(mass, freqs, r) / KT)


def _volume_integral(func, sig):
    # adaptive 3-d cubature (scipy.integrate.cubature, Genz-Malik rule); sig are the widths
    # of the integrand itself, beyond 7 sigma it is below e^-24
    sig = np.asarray(sig)
    res = cubature(func, -7.0 * sig, 7.0 * sig, rtol=1e-11, atol=0.0)
    assert res.status == "converged"
    return float(res.estimate)


def _partition(mass, freqs):
    # Z = int exp(-U/kT) d^3r factorises into three 1-d integrals (quadrature, not the closed form)
    z = 1.0
    for w, s in zip(_omegas(freqs), _sigmas(mass, freqs)):
        val, _ = quad(lambda x: math.exp(-0.5 * mass * w * w * x * x / KT), -12 * s, 12 * s,
                      epsabs=0.0, epsrel=1e-13)
        z *= val
    return z


@pytest.fixture(scope="module")
def cube_integral():
    """int e^{-3U/kT} d^3r for the atoms, shared by the n^3 and overlap checks."""
    return _volume_integral(_boltzmann(M, FREQS, factor=3.0), _sigmas(M, FREQS) / math.sqrt(3.0))


def test_mean_n2_matches_quadrature_of_n_cubed(cube_integral):
    # <n^2> = int n^3 d^3r / N with n = N e^{-U/kT}/Z (Weber et al., PRL 91, 123201 (2003))
    trap = HarmonicTrap(FREQS)
    z = _partition(M, FREQS)
    expected_si = N_ATOMS ** 2 * cube_integral / z ** 3
    got = trap.mean_n2(N_ATOMS, TEMP_NK, CS)                      # cm^-6
    assert got == pytest.approx(expected_si * 1e-12, rel=1e-9)


def test_mean_n2_matches_design_closed_form():
    # N^2 (m wbar^2 / (2 pi k T))^3 / 3^{3/2}, docs/architecture.md, conventions (Weber et al. 2003)
    trap = HarmonicTrap(FREQS)
    wbar2 = np.prod(_omegas(FREQS)) ** (2.0 / 3.0)
    expected = N_ATOMS ** 2 * (M * wbar2 / (2 * math.pi * KT)) ** 3 / 3 ** 1.5 * 1e-12
    assert trap.mean_n2(N_ATOMS, TEMP_NK, "133Cs") == pytest.approx(expected, rel=1e-12)
    assert trap.mean_frequency_hz == pytest.approx(np.prod(FREQS) ** (1 / 3), rel=1e-14)


def test_peak_density_is_number_over_partition_volume():
    # n(0) = N / Z
    trap = HarmonicTrap(FREQS)
    expected = N_ATOMS / _partition(M, FREQS) * 1e-6
    assert trap.peak_density(N_ATOMS, TEMP_NK, CS) == pytest.approx(expected, rel=1e-10)


def test_atom_dimer_overlap_default_polarizability_matches_quadrature(cube_integral):
    # dimers: mass 2m and potential 2U (twice the polarizability), same T (module notes)
    trap = HarmonicTrap(FREQS)
    z_a = _partition(M, FREQS)
    z_d = _partition(2 * M, FREQS)    # 2m omega^2 = twice the atomic spring constant
    # n_A n_D ~ e^{-U/kT} e^{-2U/kT} = e^{-3U/kT}
    expected = N_ATOMS * cube_integral / (z_a * z_d) * 1e-6
    assert trap.atom_dimer_overlap(N_ATOMS, TEMP_NK, CS) == pytest.approx(expected, rel=1e-9)
    # same frequencies => n_peak (2/3)^{3/2}: Gaussian product identity
    assert trap.atom_dimer_overlap(N_ATOMS, TEMP_NK, CS) == pytest.approx(
        trap.peak_density(N_ATOMS, TEMP_NK, CS) * (2.0 / 3.0) ** 1.5, rel=1e-12)
    assert np.allclose(trap.dimer_frequencies_hz, FREQS)


def test_atom_dimer_overlap_with_user_dimer_frequencies():
    dimer_f = (70.0, 100.0, 12.0)
    trap = HarmonicTrap(FREQS, dimer_frequencies_hz=dimer_f)
    wd2 = _omegas(dimer_f) ** 2

    def product(r):
        return np.exp(-(_potential(M, FREQS, r) + _potential(2 * M, dimer_f, r)) / KT)

    sig = 1.0 / np.sqrt(1.0 / _sigmas(M, FREQS) ** 2 + 1.0 / _sigmas(2 * M, dimer_f) ** 2)
    integral = _volume_integral(product, sig)
    expected = N_ATOMS * integral / (_partition(M, FREQS) * _partition(2 * M, dimer_f)) * 1e-6
    assert trap.atom_dimer_overlap(N_ATOMS, TEMP_NK, CS) == pytest.approx(expected, rel=1e-9)
    widths = trap.cloud_widths(TEMP_NK, CS, particle="dimer")
    assert widths == pytest.approx(np.sqrt(KT / (2 * M * wd2)), rel=1e-12)


def test_phase_space_density_identity():
    # n_peak lambda^3 = N (hbar wbar / kT)^3 (textbook, e.g. Pethick & Smith, "Bose-Einstein
    # condensation in dilute gases", 2nd ed. (2008), ch. 2)
    trap = HarmonicTrap(FREQS)
    wbar = np.prod(_omegas(FREQS)) ** (1.0 / 3.0)
    expected = N_ATOMS * (sc.hbar * wbar / KT) ** 3
    assert trap.phase_space_density(N_ATOMS, TEMP_NK, CS) == pytest.approx(expected, rel=1e-12)


def test_arrays_broadcast():
    trap = HarmonicTrap(FREQS)
    n = np.array([1e4, 2e4, 4e4])
    got = trap.mean_n2(n, TEMP_NK, CS)
    assert got.shape == (3,)
    assert got[1] / got[0] == pytest.approx(4.0, rel=1e-14)     # <n^2> ~ N^2 at fixed T
    t = np.array([[100.0], [200.0]])
    both = trap.mean_n2(n, t, CS)
    assert both.shape == (2, 3)
    assert both[0, 0] / both[1, 0] == pytest.approx(8.0, rel=1e-14)   # ~ T^-3 at fixed N


@pytest.mark.parametrize("bad", [None, (100.0, 100.0), (100.0, -1.0, 20.0), (100.0, float("nan"), 2.0)])
def test_bad_frequencies_raise(bad):
    with pytest.raises(LossfitValueError, match="frequencies_hz"):
        HarmonicTrap(bad)
    with pytest.raises(LossfitValueError, match="trap_hz"):
        as_trap(bad)


def test_bad_temperature_and_number_raise():
    trap = HarmonicTrap(FREQS)
    with pytest.raises(LossfitValueError, match="temperature_nK"):
        trap.mean_n2(1e4, -5.0, CS)
    with pytest.raises(LossfitValueError, match="temperature_nK"):
        trap.peak_density(1e4, 0.0, CS)
    with pytest.raises(LossfitValueError, match="n_atoms"):
        trap.atom_dimer_overlap(-1.0, 100.0, CS)
    with pytest.raises(LossfitValueError, match="particle"):
        trap.peak_density(1e4, 100.0, CS, particle="molecule")
    with pytest.raises(LossfitValueError, match="dimer_frequencies_hz"):
        HarmonicTrap(FREQS, dimer_frequencies_hz=(1.0, 2.0))

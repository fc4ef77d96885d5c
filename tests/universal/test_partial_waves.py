"""J >= 1 atom-dimer scattering (STM in higher partial waves) and its building blocks."""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import eval_legendre, lqmn

from lossfit.universal.solver.partial_waves import (
    PartialWaveSolver,
    breakup_partial_wave,
    legendre_p,
    legendre_q,
    partial_wave_kernel,
)
from lossfit.universal.solver.stm import AtomDimerRankOne


def _complex_quad(f, lo, hi):
    re = quad(lambda x: f(x).real, lo, hi, epsabs=0, epsrel=1e-12, limit=400)[0]
    im = quad(lambda x: f(x).imag, lo, hi, epsabs=0, epsrel=1e-12, limit=400)[0]
    return re + 1j * im


@pytest.mark.parametrize("z", [0.3 + 0.2j, 0.3 - 0.05j, -0.8 + 0.1j, 1.0 + 0.01j, 2.0 + 1.0j, 1.5])
@pytest.mark.parametrize("ell", [0, 1, 4, 7])
def test_legendre_q_is_neumanns_integral(z, ell):
    # Neumann's integral Q_l(z) = (1/2) int_{-1}^{1} P_l(t)/(z - t) dt off the cut
    # (DLMF 14.12, quoted from memory), by scipy quad; it fixes the branch that the
    # STM kernel needs, also inside the unit disk where scipy's lqmn uses another one.
    ref = 0.5 * _complex_quad(lambda t: eval_legendre(ell, t) / (z - t), -1.0, 1.0)
    assert abs(complex(legendre_q(ell, z)) / ref - 1.0) < 1e-12


@pytest.mark.parametrize("z", [1.01, 3.0, 40.0, 2.0 + 1.0j, -2.0 + 0.5j, 100.0 + 3.0j, 1e6 + 1e5j])
def test_legendre_q_matches_scipy_outside_the_unit_disk(z):
    # scipy.special.lqmn (m = 0) at |z| > 1; there the upward recurrence it uses is
    # accurate to ~1e-15 |xi|^(2l) only, so compare the low degrees tightly
    ref = lqmn(0, 6, z)[0][0]
    mine = np.array([complex(legendre_q(ell, z)) for ell in range(7)])
    tol = 1e-13 if abs(z) < 10 else 1e-6
    assert np.max(np.abs(mine / ref - 1.0)) < tol


def test_legendre_p_matches_scipy():
    z = np.array([0.3, 1.7, -2.5])
    for ell in (0, 1, 5, 12):
        assert np.allclose(legendre_p(ell, z).real, eval_legendre(ell, z), rtol=1e-13)


@pytest.mark.parametrize("ell", [0, 1, 3])
def test_kernel_is_the_angular_projection(ell):
    # M_l(p, q; E) = (1/2) int dx P_l(x) / (p^2 + q^2 + p q x - E), the partial-wave
    # projection of the one-atom-exchange propagator (Braaten & Hammer, Phys. Rep. 428,
    # 259 (2006), s wave); here for real momenta below breakup and for complex ones
    for p, q, e in [(0.7, 1.9, -1.3), (3.0, 0.2, -0.5), (0.8 - 0.3j, 1.1 - 0.4j, 0.6)]:
        ref = 0.5 * _complex_quad(lambda x: eval_legendre(ell, x) / (p * p + q * q + p * q * x - e),
                                  -1.0, 1.0)
        got = complex(partial_wave_kernel(ell, [p], [q], e)[0, 0])
        assert abs(got / ref - 1.0) < 1e-11


@pytest.mark.parametrize("kad", [0.8, 2.0])
def test_s_wave_reproduces_the_j0_solver_without_three_body_force(kad):
    # the l = 0 projection with h = 0 is the J = 0 equation of stm.AtomDimerRankOne: the
    # generic Legendre route and the logarithmic kernel must give the same amplitude
    f_ref, _, _ = AtomDimerRankOne(kad, cutoff=1e4).amplitude(0.0)
    f, _ = PartialWaveSolver(kad, cutoff=1e4).amplitude(0)
    assert abs(f - complex(f_ref)) < 1e-12 * abs(f_ref)


@pytest.mark.parametrize("kad", [0.4, 1.0])
def test_elastic_below_breakup(kad):
    # below breakup a J >= 1 atom-dimer collision can only scatter elastically (no
    # three-body force, no deep dimers): |S_J| = 1 (unitarity)
    p = breakup_partial_wave(kad, range(1, 7), cutoff=1e3)
    assert np.max(np.abs(p)) < 1e-10


def test_breakup_converged_in_cutoff_and_contour():
    # universal: no dependence on Lambda (no three-body force for J >= 1) nor on the
    # deformation angle of the contour (the amplitude is analytic between the paths)
    kad = 3.0
    ref = breakup_partial_wave(kad, [1, 2, 5], cutoff=1e3)
    big_cut = breakup_partial_wave(kad, [1, 2, 5], cutoff=1e4)
    phi = 0.7 * min(0.5, 0.6 * math.atan(2.0 / kad))
    other_path = breakup_partial_wave(kad, [1, 2, 5], cutoff=1e3, phi=phi, per_decade=36, narc=24)
    assert np.max(np.abs(big_cut / ref - 1.0)) < 1e-8
    assert np.max(np.abs(other_path / ref - 1.0)) < 1e-4
    # measured (this solver): P_1 = 0.017806, P_2 = 0.16290, P_5 = 0.0015178 at k_AD a = 3
    assert np.all((ref > 0) & (ref < 1))


def test_breakup_falls_off_with_angular_momentum():
    # centrifugal barrier: at fixed energy P_J decays geometrically once J exceeds ~k_AD a
    p = breakup_partial_wave(8.0, range(6, 16), cutoff=1e3)
    ratios = p[1:] / p[:-1]
    assert np.all(ratios < 0.6) and np.all(ratios > 0.3)


@pytest.mark.slow
def test_born_form_agrees_with_solves_at_large_j():
    # The second-order form of the exchange kernel (PartialWaveSolver.born_breakup) is the
    # large-J form of the table: it must agree with the solves where both exist, better
    # and better as J grows past k_AD a (measured at E = 100 E_b, k_AD a = 11.6: 1.1e-2 at
    # J = 4, 2e-4 at J = 16, below 1e-5 from J = 32 on; docs/stm.md section 7). The
    # first-order term alone gives |S| > 1 (no breakup): the check is not trivial.
    kad = math.sqrt(4.0 * (100.0 + 1.0) / 3.0)
    phi = 0.6 * math.atan(2.0 / kad)
    sol = PartialWaveSolver(kad, cutoff=1e3 * kad, phi=phi, per_decade=48, narc=32, dmax=0.5 * kad * math.tan(phi))
    js = np.arange(1, 41)
    solved = 1.0 - np.abs(sol.amplitudes(js)) ** 2
    born = sol.born_breakup(40)
    rel = np.abs(born / solved - 1.0)
    assert np.all(rel[15:] < 1e-3) and np.all(rel[31:] < 2e-5)
    assert rel[0] > 1e-2                         # and it is not used at low J
    assert np.all(np.diff(np.log(rel[8:])) < 0)  # monotone: the table's error bound relies on it


def test_shipped_sum_over_partial_waves_is_converged():
    # the table's estimated error of the J >= 1 sum (Born part + truncation, relative to
    # the shallow total) is below 1e-4 at every energy, and the independent coarser run
    # agrees where the sum matters (docs/stm.md section 7)
    from lossfit.universal.tables import table_path
    with np.load(table_path("recombination_positive_a.npz")) as d:
        assert np.all(d["higher_j_err_rel"] < 1e-4)
        assert np.all(d["j_solved"] <= d["j_last"])
        big = d["err_energy"] > 1.0
        assert np.all(d["err_higher_j"][big] < 1e-4)


def test_bad_arguments_are_named():
    with pytest.raises(ValueError, match="kad"):
        PartialWaveSolver(-1.0)
    with pytest.raises(ValueError, match="ells"):
        breakup_partial_wave(2.0, [0, 1])
    with pytest.raises(ValueError, match="ell"):
        legendre_q(-1, 2.0)

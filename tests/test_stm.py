"""STM (momentum-space) route for a > 0: checks against published and analytic values.

Units hbar = m = 1, lengths in units of |a| (lossfit.universal.solver.stm).
"""

import math
import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np
import pytest

from lossfit.constants import S0, SCALING_FACTOR
from lossfit.universal.solver import stm

CUT = 1e6          # Lambda a: finite-cutoff shifts below 1e-5 relative (docs/stm.md)

# Analytic shallow-dimer recombination at threshold, eta = 0 (D. S. Petrov, 2004,
# unpublished/Les Houches notes; A. O. Gogolin, C. Mora & R. Egger, PRL 100, 140404
# (2008)), events convention: C sin^2 / (sinh^2(pi s0) + cos^2).
C_SHALLOW = 128 * math.pi ** 2 * (4 * math.pi - 3 * math.sqrt(3))


@pytest.fixture(scope="module")
def universal_fit():
    return stm.fit_atom_dimer_universal(cutoff=CUT, npoints=9)


@pytest.fixture(scope="module")
def kappa_a_plus():
    from scipy.optimize import minimize_scalar

    def f(x):
        return stm.recombination_shallow(math.exp(x), cutoff=CUT, convention="events")

    r = minimize_scalar(f, bracket=(math.log(0.31), math.log(0.32)), tol=1e-11)
    return math.exp(r.x)


def test_fermion_atom_dimer_length():
    # Skorniakov & Ter-Martirosian, JETP 4, 648 (1957): a_AD = 1.18 a for the quartet
    # channel; 1.1791 a (quoted from memory).  Measured 1.1790662.
    assert stm.atom_dimer_length(0.0, statistics="fermion", cutoff=1e4) == pytest.approx(
        1.1791, abs=2e-4)


def test_kernel_efimov_exponent():
    # The boson kernel must reproduce s0 (Efimov; Braaten & Hammer, Phys. Rep. 428, 259
    # (2006)): at 1/a = 0 successive unitarity trimers of one cutoff are spaced by
    # exp(pi/s0); equivalently h(kappa*) is periodic under kappa* -> 22.694 kappa*.
    k = 0.05
    h1 = stm.three_body_force(k, 1e7)
    h2 = stm.three_body_force(k * SCALING_FACTOR, 1e7)
    assert abs(h2 / h1 - 1) < 1e-4


def test_kappa_a_star():
    # kappa* a*_0 = 0.0707645 (Gogolin, Mora & Egger, PRL 100, 140404 (2008); Braaten &
    # Hammer 2006).  Measured 0.07076457 at Lambda a = 1e6.
    r = stm.fit_atom_dimer_universal(cutoff=CUT, npoints=3)
    assert r["kappa_a_star"] == pytest.approx(0.0707645, rel=1e-5)


def test_kappa_a_minus():
    # kappa* a_- = -1.50763 (Gogolin, Mora & Egger 2008; Braaten & Hammer 2006).
    assert stm.kappa_a_minus(CUT) == pytest.approx(-1.50763, rel=1e-5)


def test_atom_dimer_cot_form_and_project_solver(universal_fit):
    # Exact zero-range form a_AD/a = A + B cot[s0 ln(a/a*)] (the short-distance phase
    # enters through one Moebius map): residual < 1e-6 over a period.  B is compared
    # with the project's hyperspherical solver, C_beta = 19.50 (docs/solver.md 5b):
    # two independent routes.  Measured A = 1.50180, B = 2.06833, C_beta = 19.4936.
    assert universal_fit["max_residual"] < 1e-6
    assert universal_fit["C_beta"] == pytest.approx(19.50, abs=0.03)


@pytest.mark.xfail(strict=True, reason="measured B = 2.0683 (A = 1.5018), 3.8 % below "
                   "the Braaten & Hammer 2.15 (A = 1.46); see docs/stm.md")
def test_atom_dimer_published_coefficients(universal_fit):
    # a_AD = (1.46 + 2.15 cot[s0 ln(a/a*) + i eta]) a (Braaten & Hammer 2006, quoted
    # from memory), to 1 %.
    assert universal_fit["B"] == pytest.approx(2.15, rel=0.01)
    assert universal_fit["A"] == pytest.approx(1.46, rel=0.01)


@pytest.mark.parametrize("eta", [0.01, 0.1, 1.0])
def test_eta_continuation_universal_form(universal_fit, eta):
    # ln kappa* -> ln kappa* + i eta/s0 (Braaten & Hammer 2006) must give
    # A + B cot(theta + i eta); measured agreement ~1e-8.
    a_, b_, ks = universal_fit["A"], universal_fit["B"], universal_fit["kappa_a_star"]
    for th in (0.3, 1.0, 2.0):
        v = stm.atom_dimer_length(ks * math.exp(th / S0), eta, CUT)
        u = a_ + b_ / np.tan(th + 1j * eta)
        assert abs(v - u) < 1e-6 * abs(u)
        # beta = -6 pi Im a_AD = 3 pi B sinh(2 eta)/(sin^2 + sinh^2 eta)  (derived)
        beta = stm.relaxation_beta(ks * math.exp(th / S0), eta, cutoff=CUT)
        assert beta == pytest.approx(3 * math.pi * b_ * math.sinh(2 * eta)
                                     / (math.sin(th) ** 2 + math.sinh(eta) ** 2), rel=1e-6)


def test_discrete_scaling_atom_dimer():
    # a -> 22.694 a with kappa* fixed leaves a_AD/a unchanged (Efimov discrete scaling).
    v1 = stm.atom_dimer_length(0.2, 0.05, CUT)
    v2 = stm.atom_dimer_length(0.2 * SCALING_FACTOR, 0.05, CUT * SCALING_FACTOR)
    assert abs(v2 / v1 - 1) < 1e-5


def test_on_shell_unitarity_and_threshold_limit():
    # eta = 0: |S| = 1 below breakup; f(k -> 0) -> -a_AD.
    ka = 0.15
    for kad in (0.2, 0.7, 1.1):
        f = stm.atom_dimer_amplitude(kad, ka, 0.0, CUT)
        assert abs(abs(1 + 2j * kad * f) - 1) < 1e-10
    f = stm.atom_dimer_amplitude(1e-4, ka, 0.0, CUT)
    assert f.real == pytest.approx(-stm.atom_dimer_length(ka, 0.0, CUT).real, rel=1e-6)


def test_beta_energy_dependence_threshold_limit():
    # beta(k) = 3 pi (1 - |S|^2)/(2k) tends to the threshold -6 pi Im a_AD, linearly in
    # k (measured slope -1.662 beta0 a at kappa* a = 0.15, eta = 0.2).
    b0 = stm.relaxation_beta(0.15, 0.2, cutoff=CUT)
    b1 = stm.relaxation_beta(0.15, 0.2, kad=1e-6, cutoff=CUT)
    assert b1 == pytest.approx(b0, rel=1e-5)


def test_shallow_recombination_shape(kappa_a_plus):
    # K3 = C sin^2 / (sinh^2(pi s0) + cos^2) (Petrov 2004; Gogolin, Mora & Egger 2008),
    # maximum 67.1 (Braaten & Hammer 2006) in the events convention.  Measured
    # deviation 2e-6 at Lambda a = 1e6.
    sh = math.sinh(math.pi * S0) ** 2
    for th in (0.3, 1.0, math.pi / 2, 2.5):
        k = stm.recombination_shallow(kappa_a_plus * math.exp(th / S0), cutoff=CUT,
                                      convention="events")
        assert k == pytest.approx(C_SHALLOW * math.sin(th) ** 2 / (sh + math.cos(th) ** 2),
                                  rel=2e-5)
    kmax = stm.recombination_shallow(kappa_a_plus * math.exp(math.pi / 2 / S0), cutoff=CUT,
                                     convention="events")
    assert kmax == pytest.approx(67.1, abs=0.05)
    # library convention (atoms lost) is three times the events rate
    assert stm.recombination_shallow(kappa_a_plus * math.exp(1 / S0), cutoff=CUT) == \
        pytest.approx(3 * stm.recombination_shallow(kappa_a_plus * math.exp(1 / S0),
                                                    cutoff=CUT, convention="events"))


def test_discrete_scaling_recombination(kappa_a_plus):
    k1 = stm.recombination_shallow(0.5, cutoff=CUT)
    k2 = stm.recombination_shallow(0.5 * SCALING_FACTOR, cutoff=CUT * SCALING_FACTOR)
    assert k2 == pytest.approx(k1, rel=1e-5)


def test_kappa_a_plus_over_a_star(kappa_a_plus):
    # Self-consistency: a_+ and a* of one kappa*; measured kappa* a_+ = 0.3164724,
    # a_+/a* = 4.4722.
    assert kappa_a_plus / 0.0707645 == pytest.approx(4.4722, rel=1e-4)


@pytest.mark.xfail(strict=True, reason="measured kappa* a_+ = 0.316472, 1.5e-3 below the "
                   "value 0.316943 quoted from memory; see docs/stm.md")
def test_kappa_a_plus_quoted(kappa_a_plus):
    assert kappa_a_plus == pytest.approx(0.316943, rel=1e-3)


@pytest.mark.parametrize("eta", [0.05, 0.3, 1.0])
def test_recombination_with_eta(kappa_a_plus, eta):
    # Braaten & Hammer 2006: shallow 67.1 e^{-2 eta}(sin^2 + sinh^2 eta), deep
    # 16.8 (1 - e^{-4 eta}) (events); both are leading-order forms, 1 % is asked.
    for th in (0.5, 1.5, 2.5):
        ka = kappa_a_plus * math.exp(th / S0)
        ks = stm.recombination_shallow(ka, eta, CUT, convention="events")
        kd = stm.recombination_deep(ka, eta, CUT, convention="events")
        assert ks == pytest.approx(67.1 * math.exp(-2 * eta)
                                   * (math.sin(th) ** 2 + math.sinh(eta) ** 2), rel=0.01)
        assert kd == pytest.approx(16.8 * (1 - math.exp(-4 * eta)), rel=0.01)


def test_negative_a_coefficient_matches_project_solver():
    # a < 0 deep recombination K3 = C sinh(2 eta)/(sin^2[s0 ln(a/a_-)] + sinh^2 eta):
    # the project's hyperspherical solver gives C = 14016 atoms lost = 4672 events
    # (docs/solver.md 4); independent route here, measured 4672.18 (events).
    km = stm.kappa_a_minus(1e5)
    eta = 0.1
    for th in (0.0, 1.0):
        k = stm.recombination_deep(abs(km) * math.exp(th / S0), eta, 1e5,
                                   convention="events", negative_a=True)
        c = k * (math.sin(th) ** 2 + math.sinh(eta) ** 2) / math.sinh(2 * eta)
        assert c == pytest.approx(4672, rel=1e-3)


def test_beta_energy_dependence_matches_hyperspherical():
    # Cross-check of two independent routes below breakup (docs/solver.md 5b gives
    # beta = 3 pi P/(2 k_AD) with P from s_AD and Phi): measured agreement 7e-6 at
    # k_AD a = 0.6 (N = 64 channels), kappa* a = 0.15, eta = 0.2.
    from lossfit.universal.solver import atom_dimer
    from lossfit.universal.solver.scattering import phase_phi

    ka, eta, kad = 0.15, 0.2, 0.6
    t, ph = atom_dimer.s_ad_components(kad, nchan=64)
    s = math.sqrt(1 - t) * np.exp(1j * ph)
    p = t * (1 - math.exp(-4 * eta)) / abs(1 + s * np.exp(2j * float(phase_phi(ka))
                                                      - 2 * eta)) ** 2
    b_hyp = 3 * math.pi * p / (2 * kad)
    assert stm.relaxation_beta(ka, eta, kad=kad, cutoff=CUT) == pytest.approx(b_hyp, rel=1e-4)


# --- above breakup (deformed contour) -------------------------------------------------

def test_contour_matches_real_axis_below_breakup():
    # The deformed-contour solver must reproduce the real-axis (pole subtraction)
    # amplitude where both apply; measured 1e-6 at k_AD a = 0.6.
    ka, eta, kad = 0.15, 0.2, 0.6
    r = stm.above_breakup(-1 + 0.75 * kad ** 2, ka, eta)
    f = stm.atom_dimer_amplitude(kad, ka, eta, CUT)
    assert abs(r["f"] / f - 1) < 1e-5
    assert abs(r["p_breakup"]) < 1e-9          # no breakup below E = 0


def test_contour_angle_independence_and_unitarity():
    # E = a^-2 (above breakup): results independent of the ray angle; eta = 0 gives
    # no deep-dimer loss and 0 < 1 - |S|^2 = breakup probability < 1.
    r1 = stm.above_breakup(1.0, 0.15, 0.2, phi=0.2)
    r2 = stm.above_breakup(1.0, 0.15, 0.2, phi=0.45)
    assert abs(r1["f"] / r2["f"] - 1) < 1e-6
    r0 = stm.above_breakup(1.0, 0.15, 0.0)
    assert r0["p_deep"] == 0.0 and 0.0 < r0["p_breakup"] < 1.0


def test_detailed_balance_threshold():
    # Time reversal: K3_shallow(E) = 24 sqrt(3) pi^2 P_breakup(E) hbar/(m k^4) (the
    # flux normalisation of docs/solver.md 4, events) must tend to the E = 0 value
    # from the independent recombination calculation.  Measured -1 = 5.7e-4 at
    # E = 3e-4 hbar^2/(m a^2), 1.7e-4 at 3e-5 (eta = 0, kappa* a = 0.15).
    r = stm.above_breakup(3e-4, 0.15, 0.0, per_decade=64)
    k0 = stm.recombination_shallow(0.15, cutoff=CUT, convention="events")
    assert r["k3_shallow_events"] == pytest.approx(k0, rel=1e-3)


def test_born_terms():
    # One-atom exchange alone: a_AD = -A_Born(0,0) = -lam 16 a/3, i.e. +8a/3 for the
    # fermion quartet (the Born value, quoted from memory) and -16a/3 for bosons
    # (exchange factor -2 relative to fermions, docs/stm.md 1).
    m00 = stm.kernel_log([0.0], [0.0], -1.0)[0, 0]
    assert m00 == 1.0
    def a_born(lam):
        return -lam * 16 / 3 * m00
    assert a_born(-0.5) == pytest.approx(8 / 3)
    assert a_born(1.0) == pytest.approx(-16 / 3)

"""Zero-energy (threshold) laws, Efimov parameters and L3 conventions.

Every law is written out again here, independently of the library. Shapes: E. Braaten &
H.-W. Hammer, Phys. Rep. 428, 259 (2006); constants: the exact zero-range values
(docs/conventions.md; the shallow-dimer prefactor 128 pi^2 (4 pi - 3 sqrt 3) is
analytic, Braaten & Hammer 2006; 64 pi^2 (4 pi - 3 sqrt 3) coth(pi s0) and 19.4935 are
the project's solver values, confirmed to 1e-6 by tests/universal/test_zero_range.py's T -> 0
limits of the solver tables):

* a < 0:  K3 = C(a) hbar a^4/m,  C = C_- sinh(2 eta) / (sin^2[s0 ln(a/a_-)] + sinh^2 eta)
* a > 0:  C = [P (sin^2 t + sinh^2 eta) + C_- sinh(2 eta)] / (sinh^2(pi s0 + eta) + cos^2 t),
          t = s0 ln(a/a_+), P = 128 pi^2 (4 pi - 3 sqrt 3)
* atom-dimer: beta = C_b hbar a/m,  C_b = 19.4935 sinh(2 eta) / (sin^2[s0 ln(a/a*)] + sinh^2 eta)

lossfit's L3 counts atoms lost from a thermal gas; the Braaten-Hammer coefficient is
used as an event-rate constant, so L3 = 3 C hbar a^4/m (docs/conventions.md;
``lossfit.universal.threshold.BH_TO_L3``). Three atoms per event: common practice, no
source; the thermal/condensate factor 3! = g3(0) of a thermal gas (Kagan, Svistunov &
Shlyapnikov, JETP Lett. 42, 209 (1985)).
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.optimize import brentq, minimize_scalar

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.universal import threshold as thr

HBAR = sc.hbar
A0 = sc.physical_constants["Bohr radius"][0]
U = sc.physical_constants["atomic mass constant"][0]

# Our own s0 (root of s cosh(pi s/2) = 8/sqrt(3) sinh(pi s/6)) and scaling factor.
S0 = brentq(lambda s: s * math.cosh(math.pi * s / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s / 6),
            0.9, 1.1, xtol=1e-16, rtol=4 * np.finfo(float).eps)
LAMBDA = math.exp(math.pi / S0)

# A user species of round mass: the SI prefactor below depends on nothing in the library.
MASS_U = 100.0
SP = lf.Species("Round100", MASS_U, 5000.0)
M = MASS_U * U

EF = lf.Efimov(a_minus=-900.0, eta_minus=0.06, a_star=950.0, eta_star=0.09,
               a_plus=190.0, eta_plus=0.04)


P = 128 * math.pi ** 2 * (4 * math.pi - 3 * math.sqrt(3))
C_MINUS = P / 2 / math.tanh(math.pi * S0)          # 4672.18 events
C_BETA = 19.4935


def bh_c_negative(a, a_minus, eta):
    return C_MINUS * np.sinh(2 * eta) / (np.sin(S0 * np.log(a / a_minus)) ** 2 + np.sinh(eta) ** 2)


def bh_c_positive(a, a_plus, eta):
    t = S0 * np.log(a / a_plus)
    return ((P * (np.sin(t) ** 2 + np.sinh(eta) ** 2) + C_MINUS * np.sinh(2 * eta))
            / (np.sinh(math.pi * S0 + eta) ** 2 + np.cos(t) ** 2))


def bh_c_beta(a, a_star, eta):
    return C_BETA * np.sinh(2 * eta) / (np.sin(S0 * np.log(a / a_star)) ** 2 + np.sinh(eta) ** 2)


def l3_reference(a, ef=EF, mass=M):
    """3 C(a) hbar a^4/m in cm^6/s (1 m^6 = 1e12 cm^6)."""
    a = np.asarray(a, dtype=float)
    c = np.where(a < 0, bh_c_negative(-np.abs(a), ef.a_minus, ef.eta_minus),
                 bh_c_positive(np.abs(a), ef.a_plus, ef.eta_plus))
    return 3.0 * c * HBAR * (a * A0) ** 4 / mass * 1e12


def beta_reference(a, ef=EF, mass=M):
    """C_b(a) hbar a/m in cm^3/s (1 m^3 = 1e6 cm^3)."""
    return bh_c_beta(a, ef.a_star, ef.eta_star) * HBAR * a * A0 / mass * 1e6


# ---------------------------------------------------------------------------- coefficients

def test_exact_coefficients():
    from lossfit import constants as c
    assert c.C_NEGATIVE == pytest.approx(4672.18, abs=0.005)         # events; x3 = 14016.5 atoms lost
    assert 3 * c.C_NEGATIVE == pytest.approx(14016.5, abs=0.05)
    assert c.C_POSITIVE_SHALLOW_MAX == pytest.approx(67.1177, abs=5e-5)
    assert c.C_ATOM_DIMER == 19.4935
    assert c.KAPPA_A_PLUS == 0.316472


def test_published_coefficients_differ_from_the_exact_ones_by_the_stated_amounts():
    # Braaten & Hammer, Phys. Rep. 428, 259 (2006) fitted 4590, 67.1, 16.8 and 20.3 to early
    # numerics; kappa* a_+ = 0.316943 was quoted from memory. docs/conventions.md states:
    # 4590 is 1.76 % low, 67.1 is 0.03 % low, 16.8 is the eta -> infinity limit of the deep
    # channel, 2 C_- exp(-2 pi s0) = 16.78, within 0.12 %, 20.3 is 4.1 % high and 0.316943 is
    # 0.15 % high.
    from lossfit import constants as c
    pub = c.PUBLISHED
    assert pub["C_NEGATIVE"] / c.C_NEGATIVE - 1 == pytest.approx(-0.0176, abs=5e-4)
    assert pub["C_POSITIVE_SHALLOW"] / c.C_POSITIVE_SHALLOW_MAX - 1 == pytest.approx(-2.6e-4, abs=5e-5)
    deep_limit = 2 * C_MINUS * math.exp(-2 * math.pi * S0)
    assert pub["C_POSITIVE_DEEP"] / deep_limit - 1 == pytest.approx(1.2e-3, abs=1e-4)
    assert pub["C_ATOM_DIMER"] / c.C_ATOM_DIMER - 1 == pytest.approx(0.0414, abs=5e-4)
    assert pub["KAPPA_A_PLUS"] / c.KAPPA_A_PLUS - 1 == pytest.approx(1.49e-3, abs=5e-5)
    # and the library's deep-channel law tends to that limit
    ef = EF.replace(eta_plus=20.0)
    got = lf.l3_threshold(600.0, species=SP, efimov=ef) / (3 * HBAR * (600.0 * A0) ** 4 / M * 1e12)
    shallow = P * math.cosh(20.0) ** 2 / math.sinh(math.pi * S0 + 20.0) ** 2        # bounded by P e^{-2 pi s0}
    assert got - shallow == pytest.approx(deep_limit, rel=1e-6)


def test_convention_factor_is_three():
    assert thr.BH_TO_L3 == 3.0
    assert thr.BRAATEN_HAMMER_CONVENTION == "events-thermal"


def test_l3_negative_a_matches_braaten_hammer():
    a = -np.geomspace(50.0, 5e5, 301)
    assert np.allclose(lf.l3_threshold(a, species=SP, efimov=EF), l3_reference(a), rtol=1e-12, atol=0)


def test_l3_positive_a_matches_braaten_hammer():
    a = np.geomspace(50.0, 5e5, 301)
    assert np.allclose(lf.l3_threshold(a, species=SP, efimov=EF), l3_reference(a), rtol=1e-12, atol=0)


def test_l3_mixed_signs_and_named_species():
    a = np.array([-3000.0, 120.0, -40.0, 7.0e4])
    cs = lf.species("133Cs")
    got = lf.l3_threshold(a, species="133Cs", efimov=EF)
    assert np.allclose(got, l3_reference(a, mass=cs.mass), rtol=1e-12, atol=0)


def test_beta_matches_braaten_hammer():
    a = np.geomspace(50.0, 5e5, 301)
    assert np.allclose(lf.beta_threshold(a, species=SP, efimov=EF), beta_reference(a), rtol=1e-12,
                       atol=0)


def test_l3_order_of_magnitude_at_resonance():
    # Hand check: at a = a_- the coefficient is C_- sinh(2 eta)/sinh^2(eta) ~ 4672*2/eta.
    # For m = 100 u, a = -900 a0, eta = 0.06: 3 * 1.56e5 * hbar a^4/m ~ 3.2e-21 cm^6/s.
    value = lf.l3_threshold(-900.0, species=SP, efimov=EF)
    c = 4672.182116 * math.sinh(0.12) / math.sinh(0.06) ** 2
    expected = 3 * c * 1.054571817e-34 * (900 * 5.29177210903e-11) ** 4 / (100 * 1.66053906660e-27) * 1e12
    assert value == pytest.approx(expected, rel=1e-8)
    assert 1e-21 < value < 1e-20


def test_scalar_in_scalar_out():
    assert isinstance(lf.l3_threshold(-500.0, species=SP, efimov=EF), float)
    assert isinstance(lf.beta_threshold(500.0, species=SP, efimov=EF), float)
    assert lf.l3_threshold(np.ones((2, 3)) * -500.0, species=SP, efimov=EF).shape == (2, 3)


# ---------------------------------------------------------------------------- shapes

def _coefficient(fun, a, power):
    """Dimensionless C(a) recovered from a public rate: rate / (hbar |a|^power / m)."""
    # L3 carries the convention factor 3 (BH_TO_L3) on top of C; beta does not.
    unit = 3e12 if power == 4 else 1e6
    return fun(a) / (HBAR * (abs(a) * A0) ** power / M * unit)


@pytest.mark.parametrize("eta", [0.01, 0.06, 0.3])
def test_l3_coefficient_peaks_at_a_minus(eta):
    ef = EF.replace(eta_minus=eta)
    f = lambda a: lf.l3_threshold(a, species=SP, efimov=ef)
    # Coarse scan over one full log-period on each side of a_-.
    a = -900.0 * np.geomspace(1 / 4.7, 4.7, 4001)
    c = _coefficient(f, a, 4)
    assert abs(a[np.argmax(c)] / -900.0 - 1) < 1e-3
    # Refine: the maximum of C is exactly at a_-.
    res = minimize_scalar(lambda t: -_coefficient(f, -900.0 * math.exp(t), 4), bounds=(-0.05, 0.05),
                          method="bounded", options={"xatol": 1e-10})
    assert abs(res.x) < 1e-6
    assert -res.fun == pytest.approx(C_MINUS * math.sinh(2 * eta) / math.sinh(eta) ** 2, rel=1e-12)


def _first_root_of_slope(eta, power):
    # L3 ~ C a^4 (power 4), beta ~ C_b a (power 1). With t = ln(a/a_x), y = s0 t,
    # d ln(rate)/dt = power - s0 sin(2y)/(sin^2 y + sinh^2 eta)   (derived here).
    # g = power (sin^2 y + sinh^2 eta) - s0 sin 2y is > 0 at t = 0 (rate rising); its first
    # zero is the local maximum of the rate; g dips below 0 only for small enough eta.
    g = lambda t: power * (math.sin(S0 * t) ** 2 + math.sinh(eta) ** 2) - S0 * math.sin(2 * S0 * t)
    t_min = minimize_scalar(g, bounds=(0.0, 0.5), method="bounded", options={"xatol": 1e-12}).x
    if g(t_min) >= 0:
        return None
    # The rate falls on (t_star, second zero), which contains t_min: (-0.05, t_min) brackets
    # the maximum alone.
    return brentq(g, 0.0, t_min, xtol=1e-14), t_min


@pytest.mark.parametrize("eta", [0.01, 0.06, 0.2])
def test_l3_peak_shift_from_a4_factor(eta):
    # The peak of L3 itself sits slightly beyond |a_-| because of the a^4 factor.
    t_star, t_end = _first_root_of_slope(eta, 4)
    ef = EF.replace(eta_minus=eta)
    res = minimize_scalar(lambda t: -lf.l3_threshold(-900.0 * math.exp(t), species=SP, efimov=ef),
                          bounds=(-0.05, t_end), method="bounded", options={"xatol": 1e-11})
    assert res.x == pytest.approx(t_star, abs=1e-6)
    assert t_star > 0


def test_l3_has_no_resonance_peak_for_large_eta():
    # For large eta the a^4 growth wins: L3 rises monotonically through a_- (eta = 0.3).
    assert _first_root_of_slope(0.3, 4) is None
    ef = EF.replace(eta_minus=0.3)
    a = -900.0 * np.geomspace(0.5, 2.0, 501)
    values = lf.l3_threshold(a, species=SP, efimov=ef)
    assert np.all(np.diff(values) > 0)


@pytest.mark.parametrize("eta", [0.01, 0.04, 0.3])
def test_l3_coefficient_minimum_at_a_plus(eta):
    ef = EF.replace(eta_plus=eta)
    f = lambda a: lf.l3_threshold(a, species=SP, efimov=ef)
    a = 190.0 * np.geomspace(1 / 4.7, 4.7, 4001)
    c = _coefficient(f, a, 4)
    assert abs(a[np.argmin(c)] / 190.0 - 1) < 1e-3
    res = minimize_scalar(lambda t: _coefficient(f, 190.0 * math.exp(t), 4), bounds=(-0.05, 0.05),
                          method="bounded", options={"xatol": 1e-10})
    assert abs(res.x) < 1e-5
    c_min = (P * math.sinh(eta) ** 2 + C_MINUS * math.sinh(2 * eta)) / (math.sinh(math.pi * S0 + eta) ** 2 + 1)
    assert res.fun == pytest.approx(c_min, rel=1e-10)


def test_l3_positive_a_maximum_coefficient_half_period_away():
    # sin^2 = 1, cos^2 = 0 half a log-period from a_+:
    # C_max = (P cosh^2 eta + C_- sinh 2 eta) / sinh^2(pi s0 + eta).
    eta = EF.eta_plus
    a = 190.0 * math.exp(math.pi / (2 * S0))
    c = _coefficient(lambda x: lf.l3_threshold(x, species=SP, efimov=EF), a, 4)
    expected = (P * math.cosh(eta) ** 2 + C_MINUS * math.sinh(2 * eta)) / math.sinh(math.pi * S0 + eta) ** 2
    assert c == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("eta", [0.01, 0.09, 0.3])
def test_beta_coefficient_peaks_at_a_star(eta):
    ef = EF.replace(eta_star=eta)
    f = lambda a: lf.beta_threshold(a, species=SP, efimov=ef)
    a = 950.0 * np.geomspace(1 / 4.7, 4.7, 4001)
    c = _coefficient(f, a, 1)
    assert abs(a[np.argmax(c)] / 950.0 - 1) < 1e-3
    res = minimize_scalar(lambda t: -_coefficient(f, 950.0 * math.exp(t), 1), bounds=(-0.05, 0.05),
                          method="bounded", options={"xatol": 1e-10})
    assert abs(res.x) < 1e-6
    assert -res.fun == pytest.approx(C_BETA * math.sinh(2 * eta) / math.sinh(eta) ** 2, rel=1e-12)


@pytest.mark.parametrize("eta", [0.01, 0.09])
def test_beta_peak_shift_from_a_factor(eta):
    # beta = C_b a: 1 = s0 sin(2 s0 t)/(sin^2(s0 t) + sinh^2 eta) at the peak (derived here).
    t_star, t_end = _first_root_of_slope(eta, 1)
    ef = EF.replace(eta_star=eta)
    res = minimize_scalar(lambda t: -lf.beta_threshold(950.0 * math.exp(t), species=SP, efimov=ef),
                          bounds=(-0.05, t_end), method="bounded", options={"xatol": 1e-11})
    assert res.x == pytest.approx(t_star, abs=1e-6)


# ---------------------------------------------------------------------------- discrete scaling

@pytest.mark.parametrize("n", [1, 2, -1])
def test_discrete_scaling_l3(n):
    # sin^2(s0 ln(lambda^n a/a_x)) = sin^2(s0 ln(a/a_x) + n pi): C is log-periodic, so
    # L3(lambda^n a) = lambda^{4n} L3(a) with the Efimov parameters unchanged.
    lam = LAMBDA ** n
    for sign in (-1, 1):
        a = sign * np.geomspace(200.0, 200.0 * LAMBDA, 97)
        lhs = lf.l3_threshold(lam * a, species=SP, efimov=EF)
        rhs = lam ** 4 * lf.l3_threshold(a, species=SP, efimov=EF)
        assert np.allclose(lhs, rhs, rtol=1e-11, atol=0)


@pytest.mark.parametrize("n", [1, 2, -1])
def test_discrete_scaling_beta(n):
    lam = LAMBDA ** n
    a = np.geomspace(200.0, 200.0 * LAMBDA, 97)
    lhs = lf.beta_threshold(lam * a, species=SP, efimov=EF)
    rhs = lam * lf.beta_threshold(a, species=SP, efimov=EF)
    assert np.allclose(lhs, rhs, rtol=1e-11, atol=0)


def test_discrete_scaling_factor_is_the_period_not_nearby_values():
    # Sanity of the test above: a 1 % wrong factor breaks the relation badly near a_-.
    a = -900.0
    lam = 1.01 * LAMBDA
    lhs = lf.l3_threshold(lam * a, species=SP, efimov=EF)
    rhs = lam ** 4 * lf.l3_threshold(a, species=SP, efimov=EF)
    assert abs(lhs / rhs - 1) > 1e-2


def test_scaling_the_efimov_parameters_with_a():
    # Rescaling a and every length parameter by any factor s: C unchanged, L3 ~ s^4.
    s = 3.7
    ef2 = EF.replace(a_minus=s * EF.a_minus, a_plus=s * EF.a_plus, a_star=s * EF.a_star)
    a = np.array([-2000.0, -650.0, 80.0, 3000.0])
    assert np.allclose(lf.l3_threshold(s * a, species=SP, efimov=ef2),
                       s ** 4 * lf.l3_threshold(a, species=SP, efimov=EF), rtol=1e-12, atol=0)


# ---------------------------------------------------------------------------- eta -> 0

def test_l3_vanishes_linearly_as_eta_minus_to_zero():
    # a < 0, away from a_-: C = C_- sinh(2 eta)/(sin^2 + sinh^2 eta) -> 2 C_- eta / sin^2,
    # relative corrections O(eta^2) (expand sinh; derived here).
    a = np.array([-400.0, -1500.0, -5000.0, -30000.0])
    sin2 = np.sin(S0 * np.log(a / EF.a_minus)) ** 2
    assert sin2.min() > 0.05
    limit = 3 * 2 * C_MINUS / sin2 * HBAR * (a * A0) ** 4 / M * 1e12        # L3 / eta as eta -> 0
    for eta in [1e-2, 1e-3, 1e-4, 1e-6]:
        value = lf.l3_threshold(a, species=SP, efimov=EF.replace(eta_minus=eta))
        assert np.all(np.abs(value / eta / limit - 1) < 2 * eta ** 2 / sin2 + 1e-12)


def test_l3_positive_side_does_not_vanish_as_eta_to_zero():
    # a > 0 keeps the shallow-dimer channel: C -> P sin^2 t / (sinh^2(pi s0) + cos^2 t).
    a = 600.0
    value = lf.l3_threshold(a, species=SP, efimov=EF.replace(eta_plus=1e-8))
    t = S0 * math.log(a / 190.0)
    c = P * math.sin(t) ** 2 / (math.sinh(math.pi * S0) ** 2 + math.cos(t) ** 2)
    assert value == pytest.approx(3 * c * HBAR * (a * A0) ** 4 / M * 1e12, rel=1e-6)


# ---------------------------------------------------------------------------- Efimov

def test_universal_a_star_over_a_minus():
    ef = lf.Efimov.universal(a_minus=-900.0, eta=0.08)
    # docs/architecture.md, conventions: a*/a_- = -1.0652 (Braaten & Hammer 2006; Gogolin, Mora & Egger 2008).
    assert abs(ef.a_star / ef.a_minus - (-1.0652)) < 5e-5
    assert ef.a_star / ef.a_minus == pytest.approx(-0.0707645 * LAMBDA / 1.50763, rel=1e-12)


def test_universal_fills_every_feature():
    ef = lf.Efimov.universal(a_minus=-900.0, eta=0.08)
    assert ef.eta_minus == ef.eta_star == ef.eta_plus == 0.08
    assert ef.a_minus == -900.0
    # kappa* a_+ = 0.316472: the project's STM solver, checked against the shipped table's
    # own recombination minimum in tests/universal/test_zero_range_recombination.py
    kappa = -1.50763 / ef.a_minus
    assert ef.a_plus * kappa == pytest.approx(0.316472, abs=1e-6)
    # Both laws can be evaluated everywhere.
    lf.l3_threshold([-1000.0, 1000.0], species=SP, efimov=ef)
    lf.beta_threshold(1000.0, species=SP, efimov=ef)


def test_universal_scales_with_a_minus():
    e1 = lf.Efimov.universal(a_minus=-900.0, eta=0.08)
    e2 = lf.Efimov.universal(a_minus=-1800.0, eta=0.08)
    assert e2.a_star == pytest.approx(2 * e1.a_star, rel=1e-14)
    assert e2.a_plus == pytest.approx(2 * e1.a_plus, rel=1e-14)


@pytest.mark.parametrize("kwargs, argument", [
    (dict(a_minus=900.0), "a_minus"),
    (dict(a_minus=0.0), "a_minus"),
    (dict(a_minus=float("nan")), "a_minus"),
    (dict(a_minus=-float("inf")), "a_minus"),
    (dict(a_star=-950.0), "a_star"),
    (dict(a_plus=-190.0), "a_plus"),
    (dict(a_plus=0.0), "a_plus"),
    (dict(eta_minus=0.0), "eta_minus"),
    (dict(eta_minus=-0.1), "eta_minus"),
    (dict(eta_minus=float("nan")), "eta_minus"),
    (dict(eta_star=0.0), "eta_star"),
    (dict(eta_plus=-1.0), "eta_plus"),
    (dict(eta_plus=float("inf")), "eta_plus"),
])
def test_bad_efimov_parameters_raise(kwargs, argument):
    with pytest.raises(LossfitValueError) as info:
        lf.Efimov(**kwargs)
    assert info.value.argument == argument
    assert argument in str(info.value)


@pytest.mark.parametrize("kwargs, argument", [
    (dict(a_minus=900.0, eta=0.1), "a_minus"),
    (dict(a_minus=-900.0, eta=0.0), "eta"),
    (dict(a_minus=-900.0, eta=-0.2), "eta"),
])
def test_bad_universal_arguments_raise(kwargs, argument):
    with pytest.raises(LossfitValueError) as info:
        lf.Efimov.universal(**kwargs)
    assert info.value.argument == argument


def test_missing_efimov_parameter_for_the_side_requested():
    only_negative = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
    lf.l3_threshold(-500.0, species=SP, efimov=only_negative)          # fine
    with pytest.raises(LossfitValueError) as info:
        lf.l3_threshold(500.0, species=SP, efimov=only_negative)
    assert info.value.argument == "efimov" and "a_plus" in str(info.value)
    with pytest.raises(LossfitValueError) as info:
        lf.beta_threshold(500.0, species=SP, efimov=only_negative)
    assert "a_star" in str(info.value)
    only_positive = lf.Efimov(a_plus=190.0, eta_plus=0.1)
    with pytest.raises(LossfitValueError) as info:
        lf.l3_threshold(-500.0, species=SP, efimov=only_positive)
    assert "a_minus" in str(info.value)


def test_bad_a_in_threshold_laws():
    for bad in (0.0, float("nan"), float("inf")):
        with pytest.raises(LossfitValueError) as info:
            lf.l3_threshold(bad, species=SP, efimov=EF)
        assert info.value.argument == "a"
    for bad in (-500.0, 0.0, float("nan")):
        with pytest.raises(LossfitValueError) as info:
            lf.beta_threshold(bad, species=SP, efimov=EF)
        assert info.value.argument == "a"


# ---------------------------------------------------------------------------- conventions

def test_convert_l3_factors():
    # 3 atoms per event; 3! = g3(0) for a thermal gas versus a condensate.
    x = 2.0e-25
    assert lf.convert_l3(x, "events-thermal") == pytest.approx(3 * x, rel=1e-15)
    assert lf.convert_l3(x, "atoms-condensate") == pytest.approx(6 * x, rel=1e-15)
    assert lf.convert_l3(x, "events-condensate") == pytest.approx(18 * x, rel=1e-15)
    assert lf.convert_l3(x, "atoms-thermal") == pytest.approx(x, rel=1e-15)
    assert lf.convert_l3(x, "atoms-thermal", "events-thermal") == pytest.approx(x / 3, rel=1e-15)
    assert lf.convert_l3(x, "events-condensate", "atoms-condensate") == pytest.approx(3 * x, rel=1e-15)


def test_convert_l3_round_trips():
    x = np.array([1e-29, 3.3e-25, 7e-22])
    names = list(thr.CONVENTIONS)
    assert len(names) == 4
    for a in names:
        for b in names:
            back = lf.convert_l3(lf.convert_l3(x, a, b), b, a)
            assert np.allclose(back, x, rtol=1e-15, atol=0)


def test_braaten_hammer_coefficient_is_events_thermal():
    # The pinned convention: the library's L3 equals the BH value read as events-thermal.
    a = -700.0
    bh = bh_c_negative(a, EF.a_minus, EF.eta_minus) * HBAR * (a * A0) ** 4 / M * 1e12
    assert lf.l3_threshold(a, species=SP, efimov=EF) == pytest.approx(
        lf.convert_l3(bh, "events-thermal"), rel=1e-12)


def test_convert_l3_unknown_convention():
    with pytest.raises(LossfitValueError) as info:
        lf.convert_l3(1.0, "events")
    assert info.value.argument == "from_convention"
    with pytest.raises(LossfitValueError) as info:
        lf.convert_l3(1.0, "atoms-thermal", "bec")
    assert info.value.argument == "to_convention"


@pytest.mark.parametrize("value", [np.int64(-900), np.int32(-900), np.float32(-900.0), -900])
def test_efimov_accepts_any_real_number_type(value):
    # Scattering lengths read from files or numpy arrays arrive as numpy scalars. Fails
    # today for numpy integers: lossfit/universal/threshold.py _check_length/_check_eta
    # test isinstance(value, (int, float, np.floating)), which excludes np.integer.
    # Fix: isinstance(value, numbers.Real) and not isinstance(value, bool).
    ef = lf.Efimov(a_minus=value, eta_minus=0.1)
    assert ef.a_minus == -900.0 and isinstance(ef.a_minus, float)


def test_efimov_rejects_booleans():
    # eta=True is a typo, not 1.0 (bool is an int subclass).
    with pytest.raises(LossfitValueError) as info:
        lf.Efimov(a_minus=-900.0, eta_minus=True)
    assert info.value.argument == "eta_minus"

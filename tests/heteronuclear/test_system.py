"""The BBX system: Efimov exponent, scaling factor, B-X van der Waals data, input checks.

References
----------
* s0 and lambda = e^{pi/s0}: E. Braaten & H.-W. Hammer, Phys. Rep. 428, 259 (2006), their
  values as given to us: 133Cs-133Cs-6Li s0 = 1.98276, lambda = 4.877; 87Rb-87Rb-40K
  s0 = 0.65312, lambda = 122.7; 87Rb-87Rb-41K lambda = 131.0; equal masses with two resonant
  pairs s0 = 0.41370, lambda = 1986.1.
* The zero-range STM kernel at 1/a = 0 (docs/heteronuclear.md) is rebuilt here from the
  masses alone (free propagator and two-body T-matrix, angular and Mellin integrals by scipy
  quadrature), without the angle phi or the closed forms of the module.
* B-X van der Waals lengths: r_vdW(6Li-133Cs) = 45 a0 and r_vdW(40K-87Rb) = 72 a0, quoted from
  memory (values used in Feshbach-resonance analyses of these mixtures).
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad
from scipy.special import gamma

import lossfit as lf
from lossfit import constants
from lossfit.errors import LossfitValueError
from lossfit.mixture import HeteronuclearSystem, efimov_exponent, heteronuclear, known_pairs
from lossfit.species import Species, species

# --------------------------------------------------------------------- s0 and lambda


@pytest.mark.parametrize("boson, other, s0, s0_tol, scaling, scaling_tol", [
    # Braaten & Hammer 2006 (as given). With AME2016 masses we get s0 = 1.982766: the
    # published 1.98276 differs by 6e-6, hence the tolerance of 1e-5 (masses of another
    # evaluation or rounding); lambda agrees to the digits quoted.
    ("133Cs", "6Li", 1.98276, 1e-5, 4.877, 5e-4),
    ("87Rb", "40K", 0.65312, 5e-6, 122.7, 0.05),
    ("87Rb", "41K", None, None, 131.0, 0.05),
])
def test_published_exponents_and_scaling_factors(boson, other, s0, s0_tol, scaling, scaling_tol):
    system = heteronuclear(boson, other)
    if s0 is not None:
        assert abs(system.s0 - s0) < s0_tol
    assert abs(system.scaling - scaling) < scaling_tol
    assert system.scaling == pytest.approx(math.exp(math.pi / system.s0), rel=1e-15)


def test_equal_masses_two_resonant_pairs():
    # Braaten & Hammer 2006 (as given): s0 = 0.41370, lambda = 1986.1.
    s0 = efimov_exponent(1.0)
    assert abs(s0 - 0.41370) < 5e-6
    assert abs(math.exp(math.pi / s0) - 1986.1) < 0.05


def test_equal_masses_three_resonant_pairs_is_the_identical_boson_exponent():
    # Three resonant pairs at equal masses: the identical-boson equation
    # s cosh(pi s/2) = (8/sqrt 3) sinh(pi s/6) (Efimov 1970), whose root lossfit.constants holds.
    s0 = efimov_exponent(1.0, resonant_pairs=3)
    assert s0 == pytest.approx(constants.S0, rel=1e-13)
    assert abs(s0 * math.cosh(math.pi * s0 / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s0 / 6)) < 1e-13


def test_exponent_solves_its_equation_over_many_mass_ratios():
    # s0 cosh(pi s0/2) sin 2phi = 2 sinh(phi s0), sin phi = m_B/(m_B + m_X) (Braaten & Hammer 2006).
    for r in (1e-3, 0.05, 0.5, 1.0, 2.0, 22.0, 300.0):
        s0 = efimov_exponent(r)
        phi = math.asin(r / (1 + r))
        lhs = s0 * math.cosh(math.pi * s0 / 2) * math.sin(2 * phi)
        assert lhs == pytest.approx(2 * math.sinh(phi * s0), rel=1e-12)


# ------------------------------------------------- the STM kernel rebuilt from the masses


def _raw_mellin(m_k, m_j, m_i, s, part="re"):
    """Mellin transform at p = 1 of the zero-range STM kernel at E = 0, 1/a = 0 that maps the
    amplitude A_j(q) = q^(s-1) of spectator j onto spectator k, atom i exchanged (hbar = 1):
    int d^3q/(2 pi)^3 G0(p, q) tau_j(q) q^(s-1) with
    G0 = -1/(p^2/2m_k + q^2/2m_j + (p + q)^2/2m_i) and tau_j the unitary T-matrix of the pair
    (k, i) at the energy left by spectator j, -(2 pi/mu_ki)/sqrt(2 mu_ki q^2/(2 mu_j))."""
    total = m_k + m_j + m_i
    mu_pair = m_k * m_i / (m_k + m_i)
    mu_spectator = m_j * (m_k + m_i) / total

    def angular(q):
        g0 = quad(lambda x: -1.0 / (1 / (2 * m_k) + q * q / (2 * m_j) + (1 + q * q + 2 * q * x) / (2 * m_i)),
                  -1.0, 1.0, epsabs=0.0, epsrel=1e-12)[0]
        tau = -(2 * math.pi / mu_pair) / (q * math.sqrt(mu_pair / mu_spectator))
        return g0 * tau / (4 * math.pi ** 2)        # d^3q/(2 pi)^3 = q^2 dq dx/(4 pi^2)

    def integrand(u):                              # q = e^u, q^2 dq q^(s-1) = q^(s+2) du
        q = math.exp(u)
        if isinstance(s, complex):
            phase = s.imag * u
            return angular(q) * q * q * (math.cos(phase) if part == "re" else math.sin(phase))
        return angular(q) * q ** (s + 2)

    return quad(integrand, -60.0, 60.0, limit=400, epsabs=1e-13, epsrel=1e-11)[0]


def test_stm_kernel_of_two_resonant_pairs_has_eigenvalue_one_at_s0():
    # The power law q^(i s0 - 1) solves the homogeneous equation A_B = K A_B.
    m_b, m_x = species("133Cs").mass_u, species("6Li").mass_u
    s0 = efimov_exponent(m_b / m_x)
    assert _raw_mellin(m_b, m_b, m_x, complex(0.0, s0)) == pytest.approx(1.0, abs=1e-9)
    assert abs(_raw_mellin(m_b, m_b, m_x, complex(0.0, s0), "im")) < 1e-9


@pytest.mark.parametrize("s", [-0.6, -0.2, 0.25, 0.5])
def test_stm_kernel_mellin_transform_equals_the_closed_form(s):
    # Real s in the strip |Re s| < 1: 2 sin(phi s)/(s cos(pi s/2) sin 2phi) (docs/heteronuclear.md,
    # eq. (S3)), here for 87Rb-87Rb-40K.
    m_b, m_x = species("87Rb").mass_u, species("40K").mass_u
    phi = math.asin(m_b / (m_b + m_x))
    closed = 2 * math.sin(phi * s) / (s * math.cos(math.pi * s / 2) * math.sin(2 * phi))
    assert _raw_mellin(m_b, m_b, m_x, s) == pytest.approx(closed, rel=1e-8)


@pytest.mark.parametrize("boson, other", [("133Cs", "6Li"), ("87Rb", "40K")])
def test_three_resonant_pairs_solve_the_coupled_kernel_equations(boson, other):
    # A_B = K_BB A_B + K_BX A_X, A_X = 2 K_XB A_B (X sees both bosons): non-trivial solution
    # iff (1 - K_BB)(1) - 2 K_BX K_XB = 0 at s = i s0.
    m_b, m_x = species(boson).mass_u, species(other).mass_u
    s = complex(0.0, efimov_exponent(m_b / m_x, resonant_pairs=3))
    k_bb = _raw_mellin(m_b, m_b, m_x, s)
    k_bx = complex(_raw_mellin(m_b, m_x, m_b, s), _raw_mellin(m_b, m_x, m_b, s, "im"))
    k_xb = complex(_raw_mellin(m_x, m_b, m_b, s), _raw_mellin(m_x, m_b, m_b, s, "im"))
    assert abs((1.0 - k_bb) - 2.0 * k_bx * k_xb) < 1e-9


# ------------------------------------------------------------ masses, C6, r_vdW


def test_masses_and_reduced_mass_from_the_species_table():
    system = heteronuclear("133Cs", "6Li")
    m_b, m_x = species("133Cs").mass_u * sc.atomic_mass, species("6Li").mass_u * sc.atomic_mass
    assert system.mass_ratio == pytest.approx(m_b / m_x, rel=1e-12)
    assert system.reduced_mass == pytest.approx(m_b * m_x / (m_b + m_x), rel=1e-9)
    assert math.sin(system.kinematic_angle) == pytest.approx(m_b / (m_b + m_x), rel=1e-12)


@pytest.mark.parametrize("boson, other, r_vdw", [("133Cs", "6Li", 45.0), ("87Rb", "40K", 72.0)])
def test_van_der_waals_lengths(boson, other, r_vdw):
    # Quoted from memory (module docstring); 1 % covers their rounding.
    system = heteronuclear(boson, other)
    assert system.r_vdw == pytest.approx(r_vdw, rel=0.01)
    # The definition, from scipy's constants: r_vdW = (1/2)(2 mu C6/hbar^2)^(1/4).
    c6_si = system.c6_bx * sc.physical_constants["Hartree energy"][0] * sc.physical_constants["Bohr radius"][0] ** 6
    r_si = 0.5 * (2 * system.reduced_mass * c6_si / sc.hbar ** 2) ** 0.25
    assert system.r_vdw == pytest.approx(r_si / sc.physical_constants["Bohr radius"][0], rel=1e-8)
    assert system.abar == pytest.approx(4 * math.pi / gamma(0.25) ** 2 * system.r_vdw, rel=1e-12)


# Static dipole polarizabilities in atomic units: Li 164.1, K 290.2, Rb 318.6, Cs 401.0
# (Derevianko, Johnson, Safronova & Babb, PRL 82, 3589 (1999); quoted from memory).
_ALPHA = {"Li": 164.1, "K": 290.2, "Rb": 318.6, "Cs": 401.0}


@pytest.mark.parametrize("boson, other", [("133Cs", "6Li"), ("133Cs", "7Li"), ("87Rb", "40K"), ("87Rb", "41K")])
def test_table_c6_agrees_with_the_combining_rule(boson, other):
    # C6_AB = 2 C6_A C6_B a_A a_B/(a_A^2 C6_B + a_B^2 C6_A) (Tang, Phys. Rev. 177, 108 (1969);
    # quoted from memory; accurate to about 1 % for alkali pairs, common practice), with the
    # homonuclear C6 of lossfit.species.
    c6_a, c6_b = species(boson).c6_au, species(other).c6_au
    a_a = _ALPHA["".join(c for c in boson if c.isalpha())]
    a_b = _ALPHA["".join(c for c in other if c.isalpha())]
    combined = 2 * c6_a * c6_b * a_a * a_b / (a_a ** 2 * c6_b + a_b ** 2 * c6_a)
    assert heteronuclear(boson, other).c6_bx == pytest.approx(combined, rel=0.015)


def test_known_pairs_and_order_of_lookup():
    assert len(known_pairs()) == 4
    # the table is symmetric: 7Li as the boson of a 7Li-7Li-133Cs system
    assert heteronuclear("7Li", "133Cs").c6_bx == heteronuclear("133Cs", "7Li").c6_bx
    assert heteronuclear("7Li", "133Cs").s0 != heteronuclear("133Cs", "7Li").s0


def test_c6_override_and_user_species():
    b = Species("B100", 100.0, 1000.0)
    x = Species("X100", 100.0, 1000.0)
    system = heteronuclear(b, x, c6_bx=2000.0)
    assert system.c6_bx == 2000.0
    assert system.s0 == pytest.approx(efimov_exponent(1.0), rel=1e-15)
    assert heteronuclear("133Cs", "6Li", c6_bx=3000.0).c6_bx == 3000.0


def test_a_bb_is_kept_and_does_not_change_s0():
    # s0 is the exponent at hyperradii beyond |a_bb| (docs/heteronuclear.md)
    system = heteronuclear("133Cs", "6Li", a_bb=-1500.0)
    assert system.a_bb == -1500.0
    assert system.s0 == heteronuclear("133Cs", "6Li").s0


def test_public_exports_survive_a_direct_submodule_import():
    import lossfit.mixture  # noqa: F401  (the submodule must not shadow the function)

    assert isinstance(lf.heteronuclear("87Rb", "41K"), lf.HeteronuclearSystem)
    assert lf.HeteronuclearSystem is HeteronuclearSystem


# ------------------------------------------------------------------- bad input


@pytest.mark.parametrize("kwargs, argument", [
    (dict(boson="133Cs", other="87Rb"), "c6_bx"),          # pair without a tabulated C6
    (dict(boson="133Cs", other="Xx99"), "other"),
    (dict(boson=133, other="6Li"), "boson"),
    (dict(boson="133Cs", other="133Cs", c6_bx=6890.0), "other"),
    (dict(boson="6Li", other="133Cs"), "boson"),            # 6Li is a fermion
    (dict(boson="133Cs", other="6Li", a_bb=float("nan")), "a_bb"),
    (dict(boson="133Cs", other="6Li", a_bb="100"), "a_bb"),
    (dict(boson="133Cs", other="6Li", c6_bx=-1.0), "c6_bx"),
])
def test_bad_input_names_the_argument(kwargs, argument):
    with pytest.raises(LossfitValueError) as info:
        heteronuclear(**kwargs)
    assert info.value.argument == argument


def test_unknown_pair_message_lists_the_known_pairs():
    with pytest.raises(LossfitValueError, match="133Cs-6Li"):
        heteronuclear("133Cs", "87Rb")


@pytest.mark.parametrize("value, kwargs, argument", [
    (0.0, {}, "mass_ratio"), (-1.0, {}, "mass_ratio"), (np.inf, {}, "mass_ratio"),
    (1.0, {"resonant_pairs": 1}, "resonant_pairs"), (1.0, {"resonant_pairs": True}, "resonant_pairs"),
])
def test_exponent_rejects_bad_input(value, kwargs, argument):
    with pytest.raises(LossfitValueError) as info:
        efimov_exponent(value, **kwargs)
    assert info.value.argument == argument

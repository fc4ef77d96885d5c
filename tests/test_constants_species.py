"""Constants of zero-range theory and the species table.

References
----------
* s0 and the scaling factor: V. Efimov, Phys. Lett. B 33, 563 (1970); E. Braaten &
  H.-W. Hammer, Phys. Rep. 428, 259 (2006) (s0 = 1.00624, e^{pi/s0} = 22.7).
* r_vdW = (1/2)(m C6/hbar^2)^(1/4): Chin, Grimm, Julienne & Tiesinga, RMP 82, 1225 (2010).
* abar = 4 pi / Gamma(1/4)^2 r_vdW = 0.955978 r_vdW: Gribakin & Flambaum, PRA 48, 546 (1993).
* r_vdW check values: *quoted from memory* (not from a source at hand): 133Cs 101.1 a0,
  87Rb 82.6, 39K 64.6, 7Li 32.5, 23Na 44.9 from C6 = 6890, 4707, 3921, 1393, 1556 au.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.optimize import brentq
from scipy.special import gamma

import lossfit as lf
from lossfit import constants
from lossfit.errors import LossfitValueError


def efimov_equation(s):
    # Defining equation of s0 for three identical bosons (Efimov 1970; Braaten & Hammer
    # 2006): s cosh(pi s/2) = (8/sqrt(3)) sinh(pi s/6).
    return s * math.cosh(math.pi * s / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s / 6)


# ---------------------------------------------------------------------------- s0, lambda

def test_s0_satisfies_its_defining_equation():
    assert abs(efimov_equation(lf.S0)) < 1e-14


def test_s0_is_the_root_found_independently():
    # Our own root of the equation (the root near 1 is the one with s > 0 besides s=0).
    s0 = brentq(efimov_equation, 0.9, 1.1, xtol=1e-16, rtol=4 * np.finfo(float).eps)
    assert lf.S0 == pytest.approx(s0, rel=1e-14, abs=0)


def test_s0_published_value():
    # s0 = 1.006237825 (Braaten & Hammer, Phys. Rep. 428, 259 (2006)); nine decimals.
    assert abs(lf.S0 - 1.006237825) < 5e-10


def test_scaling_factor_published_value():
    # e^{pi/s0} = 22.69438 (Braaten & Hammer 2006), and computed from S0, not typed.
    assert abs(lf.SCALING_FACTOR - 22.69438) < 5e-6
    assert lf.SCALING_FACTOR == pytest.approx(math.exp(math.pi / lf.S0), rel=1e-15)


def test_universal_ratio_a_star_over_a_minus():
    # kappa* a_- = -1.50763, kappa* a*_0 = 0.0707645 (Braaten & Hammer 2006; Gogolin,
    # Mora & Egger, PRL 100, 140404 (2008)); next-branch a* / a_- = -1.0652.
    assert abs(constants.UNIVERSAL_A_STAR_OVER_A_MINUS - (-1.0652)) < 5e-5
    expected = 0.0707645 * math.exp(math.pi / lf.S0) / -1.50763
    assert constants.UNIVERSAL_A_STAR_OVER_A_MINUS == pytest.approx(expected, rel=1e-12)


def test_abar_over_rvdw():
    # Gribakin & Flambaum 1993: abar = 4 pi / Gamma(1/4)^2 r_vdW = 0.955978 r_vdW.
    assert constants.ABAR_OVER_RVDW == pytest.approx(4 * math.pi / gamma(0.25) ** 2, rel=1e-14)
    assert abs(constants.ABAR_OVER_RVDW - 0.955978) < 5e-7


def test_constants_are_codata():
    # lossfit types the CODATA 2022 values in (start-up time); scipy.constants is the
    # independent table (CODATA 2018 before scipy 1.15: at most 1.4e-9 apart)
    assert constants.HBAR == pytest.approx(sc.hbar, rel=1e-15)         # exact in the 2019 SI
    assert constants.K_B == sc.k
    for name, value in (("Bohr radius", constants.BOHR), ("atomic mass constant", constants.ATOMIC_MASS),
                        ("electron mass", constants.ELECTRON_MASS), ("Hartree energy", constants.HARTREE)):
        assert value == pytest.approx(sc.physical_constants[name][0], rel=2e-9), name


def test_s0_and_arg_gamma_against_scipy():
    # s0 solves s cosh(pi s/2) = (8/sqrt 3) sinh(pi s/6) (Braaten & Hammer 2006): scipy's
    # brentq on the same equation; arg Gamma(1 + i s0) against scipy.special.loggamma
    from scipy.optimize import brentq
    from scipy.special import loggamma

    def efimov(s):
        return s * math.cosh(math.pi * s / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s / 6)
    assert constants.S0 == pytest.approx(brentq(efimov, 0.5, 1.5, xtol=1e-15, rtol=1e-15), rel=1e-14)
    assert constants.S0 == pytest.approx(1.00623782, abs=1e-8)         # Braaten & Hammer 2006
    assert constants.ARG_GAMMA_S0 == pytest.approx(float(loggamma(1 + 1j * constants.S0).imag), abs=1e-13)


# ---------------------------------------------------------------------------- species

def r_vdw_si(mass_kg, c6_au):
    """r_vdW in a0 computed in SI: C6 [J m^6] = C6 [au] * E_h * a0^6 (CODATA)."""
    hartree = sc.physical_constants["Hartree energy"][0]
    a0 = sc.physical_constants["Bohr radius"][0]
    c6 = c6_au * hartree * a0 ** 6
    return 0.5 * (mass_kg * c6 / sc.hbar ** 2) ** 0.25 / a0


# r_vdW check values, computed from C6 quoted from memory (atomic units).
RVDW_CHECK = {"133Cs": 101.1, "87Rb": 82.6, "39K": 64.6, "7Li": 32.5, "23Na": 44.9}


@pytest.mark.parametrize("name, r_expected", sorted(RVDW_CHECK.items()))
def test_r_vdw_check_values(name, r_expected):
    sp = lf.species(name)
    assert sp.r_vdw == pytest.approx(r_expected, rel=2e-3)


@pytest.mark.parametrize("name", sorted(RVDW_CHECK))
def test_r_vdw_formula_in_si(name):
    # The library works in atomic units (m in electron masses); recompute in SI.
    sp = lf.species(name)
    assert sp.r_vdw == pytest.approx(r_vdw_si(sp.mass, sp.c6_au), rel=1e-12)


@pytest.mark.parametrize("name", lf.known_species())
def test_abar_is_0_955978_rvdw(name):
    sp = lf.species(name)
    assert sp.abar / sp.r_vdw == pytest.approx(0.955978, abs=1e-6)


# Isotope masses in u (AME2016 / CIAAW, quoted from memory to 9 significant digits).
MASS_CHECK = {"133Cs": 132.905452, "87Rb": 86.9091806, "85Rb": 84.9117897, "39K": 38.9637065,
              "41K": 40.9618253, "23Na": 22.9897693, "7Li": 7.01600344, "6Li": 6.01512289}


@pytest.mark.parametrize("name, mass_u", sorted(MASS_CHECK.items()))
def test_isotope_masses(name, mass_u):
    sp = lf.species(name)
    atomic_mass = sc.physical_constants["atomic mass constant"][0]
    assert sp.mass == pytest.approx(mass_u * atomic_mass, rel=1e-7)


def test_required_species_are_known():
    # Issue 2, item 2: at least these isotopes.
    for name in ["6Li", "7Li", "23Na", "39K", "40K", "41K", "85Rb", "87Rb", "133Cs"]:
        assert lf.species(name).name == name


def test_species_aliases_and_passthrough():
    assert lf.species("Cs133") is lf.species("133Cs")
    assert lf.species("cs-133") is lf.species("133Cs")
    sp = lf.Species("My", 50.0, 3000.0)
    assert lf.species(sp) is sp


def test_user_species_r_vdw():
    sp = lf.Species("X", 100.0, 5000.0)
    atomic_mass = sc.physical_constants["atomic mass constant"][0]
    assert sp.mass == pytest.approx(100.0 * atomic_mass, rel=1e-15)
    assert sp.r_vdw == pytest.approx(r_vdw_si(100.0 * atomic_mass, 5000.0), rel=1e-12)


def test_register_user_species_isotope_style_name():
    sp = lf.register_species(lf.Species("174Yb", 173.938862, 1932.0))
    assert lf.species("174Yb") is sp
    assert lf.species("Yb174") is sp
    assert "174Yb" in lf.known_species()


def test_register_user_species_free_name():
    # A registered species must be retrievable by the very name it was registered
    # under, whatever its spelling (issue 2, item 2: user-defined species).
    # Fails at lossfit/species.py `species()`: the lookup compares the registry key
    # with _aliases(name) = digits + letters, so "MyAtom2" -> "2MyAtom" never matches.
    sp = lf.register_species(lf.Species("MyAtom2", 99.0, 4000.0))
    assert "MyAtom2" in lf.known_species()
    assert lf.species("MyAtom2") is sp


def test_element_alone_names_its_only_isotope_here():
    # "Cs" means 133Cs (the only caesium isotope in the table); "Rb" is ambiguous
    assert lf.species("Cs") is lf.species("133Cs") and lf.species("cs") is lf.species("Cs133")
    with pytest.raises(LossfitValueError, match="85Rb, 87Rb"):
        lf.species("Rb")


@pytest.mark.parametrize("name", ["Unobtainium", "134Cs", "Rb", ""])
def test_unknown_species_raises(name):
    with pytest.raises(LossfitValueError) as info:
        lf.species(name)
    assert info.value.argument == "species"
    assert "species" in str(info.value)


def test_species_of_wrong_type_raises():
    with pytest.raises(LossfitValueError) as info:
        lf.species(133)
    assert info.value.argument == "species"


@pytest.mark.parametrize("field, kwargs", [
    ("mass_u", dict(mass_u=-1.0, c6_au=1000.0)),
    ("mass_u", dict(mass_u=0.0, c6_au=1000.0)),
    ("mass_u", dict(mass_u=float("nan"), c6_au=1000.0)),
    ("mass_u", dict(mass_u=float("inf"), c6_au=1000.0)),
    ("mass_u", dict(mass_u="133", c6_au=1000.0)),
    ("c6_au", dict(mass_u=10.0, c6_au=-5.0)),
    ("c6_au", dict(mass_u=10.0, c6_au=0.0)),
    ("c6_au", dict(mass_u=10.0, c6_au=float("nan"))),
])
def test_bad_user_species_raises(field, kwargs):
    with pytest.raises(LossfitValueError) as info:
        lf.Species("Bad", **kwargs)
    assert info.value.argument == field
    assert field in str(info.value)


def test_register_non_species_raises():
    with pytest.raises(LossfitValueError) as info:
        lf.register_species("133Cs")
    assert info.value.argument == "sp"

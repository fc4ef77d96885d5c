"""The observed three-body loss at a > 0: what a trapped gas loses when recombination
forms shallow dimers that may stay, break up again or relax (docs/conventions.md,
"What a trapped gas loses at a > 0")."""

import math
import warnings

import numpy as np
import pytest
import scipy.constants as sc

import lossfit as lf
from lossfit.dimer_kinetics import escape_cuts, observed_loss
from lossfit.errors import LossfitValueError
from lossfit.rates import dimer_kinetics_rates

CS = lf.species("133Cs")
A0 = sc.physical_constants["Bohr radius"][0]
EF = lf.Efimov.universal(-900.0, 0.1)


@pytest.fixture(autouse=True)
def _quiet():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lf.errors.ValidityWarning)
        yield


def _binding_nk(a, species=CS):
    # universal binding energy E_b = hbar^2/(m a^2) (Chin, Grimm, Julienne & Tiesinga,
    # RMP 82, 1225 (2010)), as E_b/k_B in nK
    return sc.hbar ** 2 / (species.mass * (np.asarray(a) * A0) ** 2) / sc.k * 1e9


def _saha_cm3(a, temperature_nk, species=CS):
    # law of mass action for ideal Boltzmann gases of atoms (m) and dimers (2m, bound by
    # E_b): n_D / n^2 = 2^{3/2} lambda^3 exp(E_b/k_BT), lambda = h / sqrt(2 pi m k_B T)
    # (Landau & Lifshitz, Statistical Physics, section 101; quoted from memory)
    kt = sc.k * temperature_nk * 1e-9
    lam = sc.h / math.sqrt(2 * math.pi * species.mass * kt) * 100.0            # cm
    return 2 ** 1.5 * lam ** 3 * np.exp(_binding_nk(a, species) / temperature_nk)


@pytest.mark.parametrize("temperature", [20.0, 100.0, 500.0])
def test_default_l3_is_continuous_through_the_resonance(temperature):
    # |a| -> infinity is one Hamiltonian from both sides, and thermal gases show a loss
    # rate continuous through it (Rem et al., PRL 110, 163202 (2013)): the default
    # (observed) L3 at a = +1e8 and -1e8 a0 agree within 1 %, while the formal total
    # channel jumps by ~85x (docs/conventions.md)
    plus = lf.l3(1e8, temperature, species=CS, efimov=EF)
    minus = lf.l3(-1e8, temperature, species=CS, efimov=EF)
    assert plus == pytest.approx(minus, rel=0.01)
    assert lf.l3(1e8, temperature, species=CS, efimov=EF, channel="total") > 50 * minus


def test_observed_equals_total_when_the_binding_energy_expels_both_products():
    # E_b >> U and k_BT: the atom (2/3 E_b) and the dimer (1/3 E_b > 2U) leave at once, so
    # every formation loses three atoms, as the formal total channel counts
    a = np.array([600.0, 800.0, 1000.0])
    t, depth = 20.0, 100.0
    assert (_binding_nk(a) > 6 * depth).all()
    obs = lf.l3(a, t, species=CS, efimov=EF, trap_depth=depth)
    tot = lf.l3(a, t, species=CS, efimov=EF, channel="total")
    np.testing.assert_allclose(obs, tot, rtol=0.01)


def test_trapped_weak_dimers_give_deep_loss_plus_relaxation_in_chemical_equilibrium():
    # E_b << k_BT and a trap deep enough to hold every product: the dimers stay, come into
    # chemical (Saha) equilibrium with the atoms, and the only extra loss is their
    # relaxation, 3 beta_rel n n_D per volume with n_D = n^2 x the Saha ratio (computed here
    # from the law of mass action, not from the library); holds where breakup >> relaxation
    t = 100.0
    a = np.array([5e4, 1e5, 1e6])
    assert (_binding_nk(a) < 0.1 * t).all()
    obs = lf.l3(a, t, species=CS, efimov=EF, trap_depth=1e6 * t)
    deep = lf.l3(a, t, species=CS, efimov=EF, channel="deep")
    relax = lf.beta(a, t, species=CS, efimov=EF, channel="relaxation")
    brk = lf.beta(a, t, species=CS, efimov=EF, channel="breakup")
    assert (relax < 0.01 * brk).all()
    equilibrium = deep + 3 * relax * _saha_cm3(a, t)
    np.testing.assert_allclose(obs, equilibrium, rtol=0.01)
    # exactly, the steady state holds fewer dimers than equilibrium by 1 + rel/brk
    np.testing.assert_allclose(obs - deep, 3 * relax * _saha_cm3(a, t) / (1 + relax / brk), rtol=1e-5)


@pytest.mark.parametrize("temperature", [30.0, 300.0])
def test_breakup_and_formation_obey_detailed_balance(temperature):
    # formation events L3_shallow n^3 / 3 = breakups beta_breakup n n_D at the Saha ratio:
    # the atom-dimer breakup table (its own kernel) against the three-body shallow channel
    # through the law of mass action, across E_b/k_BT from ~20 to 1e-6
    a = np.array([1.5e3, 4e3, 2e4, 2e5, 1e7])
    shallow = lf.l3(a, temperature, species=CS, efimov=EF, channel="shallow")
    breakup = lf.beta(a, temperature, species=CS, efimov=EF, channel="breakup")
    np.testing.assert_allclose(shallow / 3 / _saha_cm3(a, temperature), breakup, rtol=1e-5)
    rates = dimer_kinetics_rates(a, temperature, species=CS, efimov=EF)
    np.testing.assert_allclose(rates.breakup, breakup, rtol=1e-5)
    np.testing.assert_allclose(rates.saha, _saha_cm3(a, temperature), rtol=1e-9)


def test_observed_parts_and_the_fast_rule_against_the_adaptive_reference():
    # the energy cuts of the fast rules (interpolatory sub-panel rules) against adaptive
    # quadrature of the kernel with the step (scipy-grade reference path, rtol 1e-10)
    a = np.array([700.0, 2e3, 6e3, 3e4, 1e6])
    for t, depth in ((50.0, 500.0), (200.0, 800.0)):
        fast = lf.l3(a, t, species=CS, efimov=EF, trap_depth=depth)
        ref = lf.l3(a, t, species=CS, efimov=EF, trap_depth=depth, rtol=1e-10)
        np.testing.assert_allclose(fast, ref, rtol=1e-6)
        parts = dimer_kinetics_rates(a, t, species=CS, efimov=EF, trap_depth=depth)
        np.testing.assert_allclose(parts.observed, fast, rtol=1e-12)
        # the shallow parts nest: all formations >= atom escapes >= dimer escapes >= 0
        assert (parts.shallow >= parts.shallow_atom_escapes).all()
        assert (parts.shallow_atom_escapes >= parts.shallow_dimer_escapes).all()
        assert (parts.shallow_dimer_escapes >= 0).all()


def test_escape_cuts_follow_the_energy_partition():
    # momentum conservation for masses m (atom) and 2m (dimer): the atom takes 2/3 of
    # E_b + E, the dimer 1/3 (common practice, no source); dimer depth twice the atom's
    q = np.array([0.5, 2.0])                       # E_b/k_BT = 4, 1/4
    x_atom, x_dimer = escape_cuts(q, 10.0)
    np.testing.assert_allclose(x_atom, 1.5 * 10.0 - 1.0 / q ** 2)
    np.testing.assert_allclose(x_dimer, 3 * 2 * 10.0 - 1.0 / q ** 2)
    # a formation whose atom escapes and whose dimer relaxes loses four atoms
    assert observed_loss(0.0, 1.0, 1.0, 0.0, 1.0) == pytest.approx(4.0 / 3.0)


def test_observed_channel_needs_a_temperature_and_a_resolving_model():
    with pytest.raises(LossfitValueError) as info:
        lf.k3(2000.0, 100.0, species=CS, efimov=EF, channel="observed")
    assert info.value.argument == "channel"
    with pytest.raises(LossfitValueError) as info:
        lf.l3(2000.0, 100.0, species=CS, efimov=EF, model="threshold", channel="observed")
    assert info.value.argument == "channel"
    with pytest.raises(LossfitValueError) as info:
        lf.l3(2000.0, 100.0, species=CS, efimov=EF, trap_depth=-1.0)
    assert info.value.argument == "trap_depth"
    with pytest.raises(LossfitValueError) as info:
        lf.l3(2000.0, 100.0, species=CS, efimov=EF, channel="total", trap_depth=500.0)
    assert info.value.argument == "trap_depth"
    # models that resolve no channels keep their total rate as the default
    assert lf.l3(2000.0, 100.0, species=CS, efimov=EF, model="threshold") == \
        lf.l3(2000.0, 100.0, species=CS, efimov=EF, model="threshold", channel="total")


def test_a_plus_alone_ties_the_atom_dimer_feature():
    # a fit of a_+ and eta_+ only: the observed channel ties a*, eta* by the zero-range
    # relations (one kappa*: kappa* a_+ = 0.316472, kappa* a*_0 = 0.0707645), giving the
    # same L3 as the fully universal set
    only_plus = lf.Efimov(a_plus=EF.a_plus, eta_plus=EF.eta_plus)
    a = np.array([900.0, 5e3, 1e5])
    np.testing.assert_allclose(lf.l3(a, 80.0, species=CS, efimov=only_plus),
                               lf.l3(a, 80.0, species=CS, efimov=EF), rtol=1e-9)

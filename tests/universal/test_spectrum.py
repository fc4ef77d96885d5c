"""The universal Efimov trimer spectrum (table from the hyperspherical bound-state solver).

Checks against published zero-range numbers (Braaten & Hammer, Phys. Rep. 428, 259 (2006);
Gogolin, Mora & Egger, PRL 100, 140404 (2008)): kappa* a_- = -1.50763 where the trimer meets
the three-atom threshold, kappa* a*_0 = 0.0707645 where it meets the atom-dimer threshold,
E = -hbar^2 kappa*^2/m at unitarity, and the discrete scaling lambda = 22.694.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc

import lossfit as lf
from lossfit.universal.spectrum import kappa_star, load_trimer_table

KAPPA_A_MINUS_PUBLISHED = -1.50763
KAPPA_A_STAR0_PUBLISHED = 0.0707645
LAMBDA_PUBLISHED = 22.694                  # e^(pi/s0) to 5 digits (Braaten & Hammer 2006)


@pytest.fixture(scope="module")
def table():
    return load_trimer_table()


def test_three_atom_threshold_at_published_a_minus(table):
    assert table.x_minus * KAPPA_A_MINUS_PUBLISHED == pytest.approx(1.0, abs=2e-5)
    # the last solved a < 0 point lies just above the threshold with E ~ 0
    i = 1                                   # table[0] is the threshold itself
    assert table.x[i] - table.x_minus < 2e-5 and -table.energy[i] < 1e-4
    assert table.reference_energy(table.x_minus) == 0.0


def test_atom_dimer_threshold_at_published_a_star(table):
    assert table.x_star * KAPPA_A_STAR0_PUBLISHED == pytest.approx(1.0, abs=1e-4)
    # approaching it, the trimer binds only slightly more than the dimer: E/(-E_b) -> 1
    gap = table.metadata["checks"]["last_positive_point_binding_over_eb_minus_1"]
    assert 0 < gap < 1e-3
    assert table.reference_energy(table.x_star) == pytest.approx(-table.x_star ** 2, rel=1e-12)


def test_unitarity_binding_is_kappa_star_from_both_sides(table):
    # the a < 0 and a > 0 solver modes, extrapolated linearly from their points nearest to
    # unitarity, both reach E = -hbar^2 kappa*^2/m (kappa*'s definition)
    neg = table.x < 0
    pos = table.x > 0
    xn, en = table.x[neg][-2:], table.energy[neg][-2:]
    xp, ep = table.x[pos][:2], table.energy[pos][:2]
    for x, e in ((xn, en), (xp, ep)):
        at_zero = e[0] - x[0] * (e[1] - e[0]) / (x[1] - x[0])
        assert at_zero == pytest.approx(-1.0, abs=2e-3)


def test_branches_scale_by_lambda():
    assert lf.SCALING_FACTOR == pytest.approx(LAMBDA_PUBLISHED, abs=5e-4)
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
    a = np.array([-5e4, -2e4, 3e3, 2e4])
    e = lf.trimer_energies(a, species="133Cs", efimov=ef, branches=3)
    e_scaled = lf.trimer_energies(lf.SCALING_FACTOR * a, species="133Cs", efimov=ef, branches=3)
    np.testing.assert_allclose(e_scaled[:, 1], e[:, 0] / lf.SCALING_FACTOR ** 2, rtol=1e-12)
    np.testing.assert_allclose(e_scaled[:, 2], e[:, 1] / lf.SCALING_FACTOR ** 2, rtol=1e-12)


def test_energies_in_nanokelvin_and_where_trimers_exist():
    ef = lf.Efimov.universal(-900.0, 0.1)
    cs = lf.species("133Cs")
    k = lf.constants.KAPPA_A_MINUS / -900.0 / sc.physical_constants["Bohr radius"][0]     # 1/m
    unit_nk = sc.hbar ** 2 * k ** 2 / (cs.mass * sc.k) * 1e9
    e = lf.trimer_energies(1e12, species=cs, efimov=ef, branches=3)
    assert e[0] == pytest.approx(-unit_nk, rel=1e-6)
    assert e[1] == pytest.approx(-unit_nk / lf.SCALING_FACTOR ** 2, rel=1e-6)
    # branch 0 exists for |a| > |a_-| on the a < 0 side only; branch 1 from lambda a_-
    e = lf.trimer_energies([-800.0, -1000.0, -2e4, -3e4], species=cs, efimov=ef, branches=2)
    assert np.isnan(e[0, 0]) and e[1, 0] < 0 and np.isnan(e[2, 1]) and e[3, 1] < 0
    # a > 0: the atom-dimer resonance of branch 1 is the universal a* (a trimer there has E = -E_b)
    e_b = sc.hbar ** 2 / (cs.mass * (ef.a_star * sc.physical_constants["Bohr radius"][0]) ** 2 * sc.k) * 1e9
    below = lf.trimer_energies(ef.a_star * 1.001, species=cs, efimov=ef, branches=2)[1]
    assert below == pytest.approx(-e_b, rel=5e-3)
    assert np.isnan(lf.trimer_energies(ef.a_star * 0.999, species=cs, efimov=ef, branches=2)[1])
    assert kappa_star(lf.Efimov(a_star=ef.a_star, eta_star=0.1)) == pytest.approx(k * 0.529177210544e-10, rel=1e-4)


def test_bad_input_is_named():
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
    for kw, arg in ((dict(branches=0), "branches"), (dict(branches=True), "branches")):
        with pytest.raises(lf.LossfitValueError) as info:
            lf.trimer_energies(-1e4, species="133Cs", efimov=ef, **kw)
        assert info.value.argument == arg
    with pytest.raises(lf.LossfitValueError) as info:
        lf.trimer_energies(0.0, species="133Cs", efimov=ef)
    assert info.value.argument == "a"
    with pytest.raises(lf.LossfitValueError) as info:
        lf.trimer_energies(-1e4, species="133Cs", efimov=None)
    assert info.value.argument == "efimov"
    assert math.isfinite(lf.trimer_energies(-1e4, species="133Cs", efimov=ef, branches=1)[0])

"""BBX loss bookkeeping: every recombination event into a deep dimer removes two B and one X
(docs/heteronuclear.md, "Loss convention"; the stoichiometry of B + B + X -> (BX or BB) + atom
with all products lost, no source needed beyond counting)."""

import numpy as np
import pytest

from lossfit.errors import LossfitValueError
from lossfit.experiment.mixture_trap import MixtureTrap
from lossfit.mixture import convert_k3, loss_rates


@pytest.mark.parametrize("to, atoms_per_event", [("events", 1), ("x-lost", 1), ("b-lost", 2), ("atoms-lost", 3)])
def test_conversion_counts_atoms_per_event(to, atoms_per_event):
    k3 = 2.5e-25
    assert convert_k3(k3, "events", to) == pytest.approx(atoms_per_event * k3, rel=1e-15)
    assert convert_k3(atoms_per_event * k3, to) == pytest.approx(k3, rel=1e-15)


def test_conversion_between_measured_species():
    # "L3 measured as loss of B" is twice "L3 measured as loss of X"
    assert convert_k3(1.0e-24, "b-lost", "x-lost") == pytest.approx(0.5e-24, rel=1e-15)
    values = np.array([1e-26, 3e-25])
    assert np.allclose(convert_k3(values, "x-lost", "atoms-lost"), 3 * values, rtol=1e-15, atol=0)


def test_rate_equations_lose_two_bosons_per_x():
    d_nb, d_nx = loss_rates(4.0e-25, 2.0e25)
    assert d_nx == pytest.approx(-4.0e-25 * 2.0e25, rel=1e-15)
    assert d_nb == pytest.approx(2 * d_nx, rel=1e-15)
    # the coefficients as each species would be measured give back the same rates
    assert -d_nb == pytest.approx(convert_k3(4.0e-25, "events", "b-lost") * 2.0e25, rel=1e-15)
    assert -d_nx == pytest.approx(convert_k3(4.0e-25, "events", "x-lost") * 2.0e25, rel=1e-15)


def test_rate_equations_with_trap_overlaps():
    # d N_B/dt = -2 K3 N_B <n_B n_X>_B and d N_X/dt = -K3 N_X <n_B^2>_X are the same numbers
    trap = MixtureTrap("87Rb", "41K", (60.0, 60.0, 200.0), (85.0, 85.0, 280.0))
    n_b, n_x, k3 = 2.0e5, 5.0e4, 3.0e-27
    ov = trap.overlap(n_b, n_x, 300.0)
    d_nb, d_nx = loss_rates(k3, ov.integral)
    assert d_nb == pytest.approx(-2 * k3 * n_b * ov.mean_nb_nx, rel=1e-14)
    assert d_nx == pytest.approx(-k3 * n_x * ov.mean_nb2, rel=1e-14)


@pytest.mark.parametrize("call, argument", [
    (lambda: convert_k3(1.0, "atoms"), "from_convention"),
    (lambda: convert_k3(1.0, "events", "b"), "to_convention"),
    (lambda: convert_k3("1e-25", "events"), "value"),
    (lambda: loss_rates(-1.0, 1.0), "k3_events"),
    (lambda: loss_rates(1.0, np.inf), "overlap_cm6"),
])
def test_bad_input_names_the_argument(call, argument):
    with pytest.raises(LossfitValueError) as info:
        call()
    assert info.value.argument == argument

"""The trimer spectrum of two identical bosons and a third atom, for the Efimov-spectrum figure.

The branch that meets the three-atom threshold at a_- is followed across the Efimov plane
by the B-B-X momentum-space solver (:meth:`MixtureSTM.trimer_branch_path`, a few tenths of
a second, cached per system); the others follow by discrete scaling (exact in zero-range
theory). Variables as for identical bosons (:class:`lossfit.universal.spectrum.TrimerTable`),
with the B-X reduced mass: x = 1/(kappa* a), E/(hbar^2 kappa*^2/(2 mu)).
"""

__all__ = ["MixtureTrimerBranch", "mixture_trimer_branch", "mixture_kappa_star"]

import functools
import math

import numpy as np

from ..efimov import Efimov
from ..errors import LossfitValueError
from .mixture_model import mixture_table
from .solver.stm_mixture import MixtureSTM

# the solver's grid for the branch: its a_- agrees with the table's kappa* a_- to 1e-4 at these
# settings (tests/heteronuclear/test_mixture_rates.py); more than 18 continuation steps lose
# the state next to the atom-dimer threshold (measured for Cs-Cs-6Li)
_CUTOFF, _QMIN, _PER_DECADE, _STEPS = 1e5, 1e-4, 16, 16


class MixtureTrimerBranch:
    """The reference trimer branch of a B-B-X system (the layout of ``TrimerTable``).

    Attributes
    ----------
    x : ndarray
        1/(kappa* a), ascending, from 1/(kappa* a_-) (< 0) to 1/(kappa* a*) (> 0).
    energy : ndarray
        E/(hbar^2 kappa*^2/(2 mu)) on the branch (-1 at unitarity, 0 at a_-, -x^2 at a*).
    x_minus, x_star : float
        The branch's ends: the three-atom and atom-dimer thresholds.
    scaling : float
        The system's discrete scaling factor.
    """

    def __init__(self, system):
        solver = MixtureSTM(system.mass_ratio, cutoff=_CUTOFF, qmin=_QMIN, per_decade=_PER_DECADE)
        xi_neg, h_neg = solver.trimer_branch_path(math.pi, steps=_STEPS)
        xi_pos, h_pos = solver.trimer_branch_path(solver.threshold_angle(), steps=_STEPS)
        # path order: a_- (xi = pi) to unitarity (pi/2) to the atom-dimer threshold (pi/4);
        # the continuation's steps next to the threshold can overshoot it in 1/a (a root
        # of the neighbouring state, measured for Cs-Cs-6Li): the threshold point ends the branch
        x_pos, e_pos = h_pos * np.cos(xi_pos), -(h_pos * np.sin(xi_pos)) ** 2
        keep = x_pos <= x_pos[-1]
        self.x = np.concatenate([(h_neg * np.cos(xi_neg))[::-1], x_pos[keep][1:]])
        self.energy = np.concatenate([(-(h_neg * np.sin(xi_neg)) ** 2)[::-1], e_pos[keep][1:]])
        self.x_minus, self.x_star = float(self.x[0]), float(self.x[-1])
        self.scaling = system.scaling


@functools.lru_cache(maxsize=None)
def mixture_trimer_branch(system):
    """:class:`MixtureTrimerBranch` of ``system`` (computed once per process)."""
    return MixtureTrimerBranch(system)


def mixture_kappa_star(efimov, system):
    """kappa* (1/a0) of the reference branch from a_- with the system's table."""
    if not isinstance(efimov, Efimov) or efimov.a_minus is None:
        raise LossfitValueError("efimov", "needs a_minus to fix kappa* of two bosons and a third atom")
    return mixture_table(system).kappa_star_a_minus / efimov.a_minus

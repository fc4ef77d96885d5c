"""The universal Efimov trimer spectrum: trimer energies against 1/a.

``data/trimer_spectrum.npz`` (written by ``scripts/make_trimer_table.py`` with the
hyperspherical bound-state solver, docs/solver.md; grids, thresholds and git hash in its
``metadata``) holds the reference branch -- the trimer whose binding wave number at
unitarity is kappa* -- as E/(hbar^2 kappa*^2/m) against x = 1/(kappa* a), from the
three-atom threshold at kappa* a_- to the atom-dimer threshold at kappa* a*_0. Every
other branch follows from the discrete scaling of zero-range theory (Braaten & Hammer,
Phys. Rep. 428, 259 (2006)): branch n has E_n(a) = lambda^(-2n) E_0(a / lambda^n),
lambda = e^(pi/s0) = 22.694. Between the table points the energy is interpolated
monotonically (scipy's PchipInterpolator) in x; outside the branch's range it is NaN
(no trimer: above the three-atom threshold on the a < 0 side, merged with the atom-dimer
threshold on the a > 0 side).
"""

__all__ = ["TrimerTable", "load_trimer_table", "trimer_energies", "kappa_star"]

import functools
import json

import numpy as np
from scipy.interpolate import PchipInterpolator

from ..constants import HBAR, KAPPA_A_MINUS, KAPPA_A_PLUS, KAPPA_A_STAR, SCALING_FACTOR
from ..efimov import Efimov
from ..errors import LossfitValueError, check_nonzero
from ..species import Species
from ..species import species as _species
from ..units import A0, NK
from .tables import table_path


class TrimerTable:
    """The reference branch of the universal trimer spectrum.

    Attributes
    ----------
    x : ndarray
        1/(kappa* a), ascending, from 1/(kappa* a_-) (< 0) to 1/(kappa* a*_0) (> 0).
    energy : ndarray
        E/(hbar^2 kappa*^2/m) on the branch (-1 at unitarity, 0 at a_-, -x^2 at a*_0).
    x_minus, x_star : float
        The branch's ends: the three-atom and atom-dimer thresholds.
    metadata : dict
    """

    def __init__(self, path):
        with np.load(path, allow_pickle=False) as d:
            self.x = np.array(d["inv_kappa_star_a"])
            self.energy = np.array(d["energy"])
            self.x_minus = float(d["x_threshold_minus"])
            self.x_star = float(d["x_threshold_star"])
            self.metadata = json.loads(str(d["metadata"]))
        self._interp = PchipInterpolator(self.x, self.energy, extrapolate=False)

    def reference_energy(self, x):
        """E/(hbar^2 kappa*^2/m) of the reference branch at x = 1/(kappa* a); NaN off the branch."""
        return self._interp(np.asarray(x, dtype=float))

    def branch_energy(self, x, n):
        """Branch n (0: reference, 1, 2, ...: shallower by lambda^n in a) at x = 1/(kappa* a)."""
        scale = SCALING_FACTOR ** n
        return self.reference_energy(scale * np.asarray(x, dtype=float)) / scale ** 2


@functools.lru_cache(maxsize=None)
def load_trimer_table(path=None):
    """The shipped trimer-spectrum table (loaded once per process)."""
    return TrimerTable(path or table_path("trimer_spectrum.npz"))


def kappa_star(efimov):
    """kappa* (1/a0) of the reference branch from an Efimov parameter set: from a_- if given,
    else from a* (the atom-dimer resonance of the next branch, kappa* a* = lambda kappa* a*_0),
    else from a_+ (zero-range values of :mod:`lossfit.constants`)."""
    if not isinstance(efimov, Efimov):
        raise LossfitValueError("efimov", f"must be a lossfit.Efimov, got {efimov!r}")
    if efimov.a_minus is not None:
        return KAPPA_A_MINUS / efimov.a_minus
    if efimov.a_star is not None:
        return KAPPA_A_STAR * SCALING_FACTOR / efimov.a_star
    if efimov.a_plus is not None:
        return KAPPA_A_PLUS / efimov.a_plus
    raise LossfitValueError("efimov", "needs a_minus, a_star or a_plus to fix kappa*")


def trimer_energies(a, *, species, efimov, branches=3):
    """Energies of the universal Efimov trimers at scattering length ``a``.

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0 (non-zero; both signs).
    species : Species or str
    efimov : Efimov
        Fixes kappa* (:func:`kappa_star`); branch 0 is the trimer that meets the three-atom
        threshold at a_-.
    branches : int
        Number of branches, from branch 0 (the reference) to the shallower ones that appear
        at lambda a_-, lambda^2 a_-, ... (lambda = 22.694).

    Returns
    -------
    ndarray, shape a.shape + (branches,)
        E/k_B in nK (negative), one column per branch, NaN where that trimer does not exist.
    """
    if isinstance(branches, bool) or not isinstance(branches, (int, np.integer)) or not 1 <= branches <= 8:
        raise LossfitValueError("branches", f"must be an integer from 1 to 8, got {branches!r}")
    sp = species if isinstance(species, Species) else _species(species)
    a_arr = check_nonzero("a", a)
    k_star = kappa_star(efimov)                                     # 1/a0
    x = 1.0 / (k_star * a_arr)
    unit_nk = HBAR ** 2 * (k_star / A0) ** 2 / sp.mass / NK          # hbar^2 kappa*^2/m in nK
    table = load_trimer_table()
    out = np.stack([table.branch_energy(x, n) for n in range(int(branches))], axis=-1) * unit_nk
    return out[()] if out.ndim else float(out)


"""What a trapped gas loses when three-body recombination forms shallow dimers (a > 0).

Recombination into the shallow Feshbach dimer releases E_b + E (E the three-atom
collision energy): two thirds to the atom, one third to the dimer (momentum
conservation, masses m and 2m). A product whose energy exceeds its trap depth leaves;
a trapped dimer is broken up again by an atom (``channel="breakup"`` of atom-dimer loss,
the time reverse of formation) or relaxes with an atom into a deep dimer
(``channel="relaxation"``: both leave, three atoms lost). With the dimer population
following the atoms quasi-statically, the atoms lost per formation event at energy E are

    N(E) = [E > x_atom k_BT] + 2 [E > x_dimer k_BT] + 3 f (1 - [E > x_dimer k_BT]),
    f = beta_relaxation / (beta_relaxation + beta_breakup)     (thermal averages at T),

and the observed L3 is the deep-dimer channel plus the shallow channel weighted by N/3.
Derivation, assumptions (trapped dimers thermalise; the dimer sees
:data:`DIMER_DEPTH_RATIO` times the atom's depth; dimer-dimer collisions neglected) and
where the quasi-static picture fails: docs/conventions.md, "What a trapped gas loses at
a > 0". Everything here is dimensionless (energies in k_BT); the rate coefficients come
from the energy models.
"""

__all__ = ["DIMER_DEPTH_RATIO", "DEFAULT_DEPTH_OVER_T", "escape_cuts", "relaxation_fraction", "observed_loss",
           "saha_ratio", "breakup_from_formation"]

import math

import numpy as np

#: Trap depth of a shallow Feshbach dimer over that of an atom. A weakly bound dimer's
#: polarisability is that of its two atoms, so an optical trap holds it twice as deep
#: (common practice, no source; a magnetic trap differs: state it when you change it).
DIMER_DEPTH_RATIO = 2.0
#: Trap depth U/k_BT assumed when none is given: evaporation leaves U ~ 10 k_BT (common
#: practice after evaporative cooling, no source). Results record that it was assumed.
DEFAULT_DEPTH_OVER_T = 10.0


def escape_cuts(q, depth_over_t, dimer_depth_ratio=DIMER_DEPTH_RATIO):
    """Three-atom collision energies, in k_BT, above which the products of a
    shallow-dimer formation leave the trap.

    Parameters
    ----------
    q : array_like
        k_T a with k_T = sqrt(m k_BT)/hbar (a > 0), so that E_b/k_BT = 1/q^2 for the
        universal binding energy E_b = hbar^2/(m a^2).
    depth_over_t : array_like
        Atom trap depth U/(k_B T).
    dimer_depth_ratio : float
        Dimer depth over atom depth.

    Returns
    -------
    x_atom, x_dimer : ndarray
        The atom leaves for (2/3)(E_b + E) > U, i.e. E/k_BT > 1.5 U/k_BT - E_b/k_BT; the
        dimer for (1/3)(E_b + E) > ratio x U. Values <= 0 mean: always.
    """
    q = np.asarray(q, dtype=float)
    u = np.asarray(depth_over_t, dtype=float)
    binding = 1.0 / (q * q)
    return 1.5 * u - binding, 3.0 * dimer_depth_ratio * u - binding


def saha_ratio(q):
    """Equilibrium n_D / n^2 of shallow dimers and atoms of one Boltzmann gas, in units
    of 1/k_T^3 (k_T = sqrt(m k_BT)/hbar): (4 pi)^{3/2} exp(E_b/k_BT), E_b/k_BT = 1/q^2.

    The law of mass action mu_D = 2 mu_A for ideal gases of atoms (mass m) and dimers
    (2m, bound by E_b, one internal state): n_D/n^2 = 2^{3/2} lambda^3 e^{E_b/k_BT} with
    lambda = h/sqrt(2 pi m k_BT) = sqrt(2 pi)/k_T (Landau & Lifshitz, Statistical
    Physics, section 101, quoted from memory; derivation in docs/conventions.md)."""
    q = np.asarray(q, dtype=float)
    return (4.0 * math.pi) ** 1.5 * np.exp(1.0 / (q * q))


def breakup_from_formation(shallow, q):
    """Thermal dimer-breakup coefficient, in units hbar/(m k_T), from the thermal
    shallow-dimer L3 (atoms lost, units hbar/(m k_T^4)) by detailed balance: formation
    events L3_shallow n^3/3 equal breakups beta n n_D at the Saha ratio (:func:`saha_ratio`),
    so beta = (L3_shallow/3) / (n_D/n^2). The exact tables obey it to ~1e-6 (tested)."""
    q = np.asarray(q, dtype=float)
    return np.asarray(shallow, dtype=float) * np.exp(-1.0 / (q * q)) / (3.0 * (4.0 * math.pi) ** 1.5)


def relaxation_fraction(relaxation, breakup):
    """Share of trapped shallow dimers that relax into deep dimers rather than break up:
    f = beta_rel / (beta_rel + beta_breakup) (rate coefficients in any common unit)."""
    relaxation = np.asarray(relaxation, dtype=float)
    return relaxation / (relaxation + np.asarray(breakup, dtype=float))


def observed_loss(deep, shallow, shallow_atom_escapes, shallow_dimer_escapes, fraction):
    """The observed three-body loss coefficient from its parts (any common unit).

    Parameters
    ----------
    deep, shallow : array_like
        Thermal L3 into deep dimers and into the shallow dimer.
    shallow_atom_escapes, shallow_dimer_escapes : array_like
        The shallow-dimer L3 restricted to collision energies where the atom
        (resp. the dimer) formed leaves the trap (:func:`escape_cuts`).
    fraction : array_like
        :func:`relaxation_fraction` of the trapped dimers.

    Returns
    -------
    ndarray
        deep + f shallow + shallow_atom_escapes/3 + (2/3 - f) shallow_dimer_escapes.
    """
    f = np.asarray(fraction, dtype=float)
    return (np.asarray(deep) + f * np.asarray(shallow) + np.asarray(shallow_atom_escapes) / 3.0
            + (2.0 / 3.0 - f) * np.asarray(shallow_dimer_escapes))

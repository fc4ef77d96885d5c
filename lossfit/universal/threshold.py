"""Zero-energy (threshold) laws of zero-range theory and the Efimov parameter set.

The laws have the shapes of Braaten & Hammer, Phys. Rep. 428, 259 (2006), written as
``K3 = C(a) hbar a^4 / m`` and ``beta = C_beta(a) hbar a / m``, with the exact zero-range
constants of :mod:`lossfit.constants` (values, closed forms and provenance in
docs/conventions.md; the published 4590, 67.1, 16.8 and 20.3 were fits to early numerics):

* a < 0:  C = 4672.18 sinh(2 eta_-) / (sin^2[s0 ln(a/a_-)] + sinh^2 eta_-)
* a > 0:  C = [128 pi^2 (4 pi - 3 sqrt 3)(sin^2 theta + sinh^2 eta_+)     (shallow dimer)
              + 4672.18 sinh(2 eta_+)] / (sinh^2(pi s0 + eta_+) + cos^2 theta),   (deep dimers)
          theta = s0 ln(a/a_+)
* atom-dimer:  C_beta = 19.4935 sinh(2 eta*) / (sin^2[s0 ln(a/a*)] + sinh^2 eta*)

Loss-coefficient convention (pinned project-wide, docs/conventions.md)
-------------------------------------------------------------
lossfit's ``L3`` is the *atom-loss* coefficient of a *non-degenerate (thermal)* gas:
``dN/dt = -L3 ∫ n^3 d^3r``. The dimensionless Braaten-Hammer coefficients are used in
experimental analyses as an *event* rate constant of a thermal gas, so that
``L3 = 3 C(a) hbar a^4 / m`` (three atoms lost per recombination event; common practice
in experimental analyses, e.g. Kraemer et al., Nature 440, 315 (2006) — quoted from
memory). :data:`BRAATEN_HAMMER_CONVENTION` records this choice and
:func:`convert_l3` moves a number between the four conventions met in the literature:

============================  ====================================  ======================
convention                    definition                            value in lossfit units
============================  ====================================  ======================
``"atoms-thermal"`` (ours)    dn/dt = -L3 n^3, thermal gas          x 1
``"events-thermal"``          events/(volume time) = K n^3, thermal x 3
``"atoms-condensate"``        dn/dt = -K n^3 in a condensate        x 3! = 6
``"events-condensate"``       events/(volume time) = K n^3, BEC     x 18
============================  ====================================  ======================

The factor 3! between thermal gas and condensate is the value g3(0) = 3! of the
third-order correlation function of a thermal Bose gas (Kagan, Svistunov &
Shlyapnikov, JETP Lett. 42, 209 (1985)).

For the atom-dimer coefficient, ``dN_D/dt = -beta ∫ n_A n_D d^3r`` (dimers lost), one
dimer is lost per relaxation event and the Braaten-Hammer C_beta is used as is.
"""

__all__ = ["Efimov", "l3_threshold", "beta_threshold", "convert_l3",
           "CONVENTIONS", "BRAATEN_HAMMER_CONVENTION"]

import math

import numba
import numpy as np

from ..constants import (
    C_ATOM_DIMER,
    C_NEGATIVE,
    C_POSITIVE_DEEP,
    C_POSITIVE_SHALLOW_MAX,
    HBAR,
    S0,
)
from ..efimov import Efimov
from ..errors import LossfitValueError, check_finite, check_nonzero
from ..species import species as _species
from ..units import A0, CM3_PER_S, CM6_PER_S

_SHALLOW = C_POSITIVE_SHALLOW_MAX * math.sinh(math.pi * S0) ** 2     # 128 pi^2 (4 pi - 3 sqrt 3)

CONVENTIONS = {"atoms-thermal": 1.0, "events-thermal": 3.0,
               "atoms-condensate": 6.0, "events-condensate": 18.0}
BRAATEN_HAMMER_CONVENTION = "events-thermal"
#: lossfit's L3 = BH_TO_L3 * C hbar a^4/m.
BH_TO_L3 = CONVENTIONS[BRAATEN_HAMMER_CONVENTION]


def convert_l3(value, from_convention, to_convention="atoms-thermal"):
    """Convert a three-body loss coefficient between literature conventions.

    Parameters
    ----------
    value : float or array_like
        Coefficient in cm^6/s (any units: the conversion is a pure number).
    from_convention, to_convention : str
        One of ``"atoms-thermal"`` (lossfit), ``"events-thermal"``,
        ``"atoms-condensate"``, ``"events-condensate"``.

    Returns
    -------
    float or ndarray
    """
    for name, conv in (("from_convention", from_convention), ("to_convention", to_convention)):
        if conv not in CONVENTIONS:
            raise LossfitValueError(name, f"unknown convention {conv!r}; one of {list(CONVENTIONS)}")
    return np.asarray(value, dtype=float) * CONVENTIONS[from_convention] / CONVENTIONS[to_convention]


# ---------------------------------------------------------------------------------
# Dimensionless laws, shared by the public functions and the energy-resolved kernels.

@numba.njit(cache=True)
def _resonant(amplitude, ratio, eta):
    # amplitude sinh(2 eta) / (sin^2[s0 ln ratio] + sinh^2 eta): the shape shared by the
    # three-atom and atom-dimer resonance laws
    s = math.sin(S0 * math.log(ratio))
    sh = math.sinh(eta)
    return amplitude * math.sinh(2.0 * eta) / (s * s + sh * sh)


@numba.njit(cache=True)
def c_negative(a_over_a_minus, eta):
    """C(a) for a < 0 at ratio a/a_- > 0 (dimensionless, recombination events)."""
    return _resonant(C_NEGATIVE, a_over_a_minus, eta)


@numba.njit(cache=True)
def c_positive(a_over_a_plus, eta):
    """C(a) for a > 0 (shallow plus deep dimers, events), ratio a/a_+ > 0."""
    theta = S0 * math.log(a_over_a_plus)
    s = math.sin(theta)
    c = math.cos(theta)
    sh = math.sinh(eta)
    sd = math.sinh(math.pi * S0 + eta)
    return (_SHALLOW * (s * s + sh * sh) + C_POSITIVE_DEEP * math.sinh(2.0 * eta)) / (sd * sd + c * c)


@numba.njit(cache=True)
def c_atom_dimer(a_over_a_star, eta):
    """C_beta(a) for atom-dimer relaxation (dimers lost), ratio a/a* > 0."""
    return _resonant(C_ATOM_DIMER, a_over_a_star, eta)


@numba.njit(cache=True)
def _l3_coefficients(a, a_minus, eta_minus, a_plus, eta_plus, bh_to_l3):
    # lossfit's dimensionless L3 m / (hbar a^4) for either sign of a; one row per walker
    out = np.empty((a_minus.size, a.size))
    for w in range(a_minus.size):
        for i in range(a.size):
            if a[i] < 0.0:
                out[w, i] = bh_to_l3 * c_negative(a[i] / a_minus[w], eta_minus[w])
            else:
                out[w, i] = bh_to_l3 * c_positive(a[i] / a_plus[w], eta_plus[w])
    return out


@numba.njit(cache=True)
def _beta_coefficients(a, a_star, eta_star):
    out = np.empty((a_star.size, a.size))
    for w in range(a_star.size):
        for i in range(a.size):
            out[w, i] = c_atom_dimer(a[i] / a_star[w], eta_star[w])
    return out


def _walker_columns(efimov, values):
    """``values`` (floats, or walker arrays of an :meth:`Efimov.trusted` set) as
    contiguous float arrays of one length: 1 for a set of floats, W for W walkers."""
    count = max(efimov.n_walkers, 1)
    return [np.ascontiguousarray(np.broadcast_to(np.asarray(v, dtype=float), (count,))) for v in values]


def _one_row_unless_walkers(out, efimov):
    return out if efimov.n_walkers else out[0]


def l3_coefficient_unchecked(a, efimov):
    """As :func:`l3_coefficient` for a validated 1-D float array ``a`` (fast path); for a
    set of W walker arrays (``Efimov.trusted``) an array (W, a.size)."""
    nan = math.nan
    has_neg = a.size > 0 and a.min() < 0.0
    has_pos = a.size > 0 and a.max() > 0.0
    a_minus, eta_minus = efimov.require("a_minus", "eta_minus") if has_neg else (nan, nan)
    a_plus, eta_plus = efimov.require("a_plus", "eta_plus") if has_pos else (nan, nan)
    columns = _walker_columns(efimov, (a_minus, eta_minus, a_plus, eta_plus))
    return _one_row_unless_walkers(_l3_coefficients(a, *columns, BH_TO_L3), efimov)


def beta_coefficient_unchecked(a, efimov):
    """As :func:`beta_coefficient` for a validated 1-D float array of a > 0 (fast path);
    for W walker arrays an array (W, a.size)."""
    columns = _walker_columns(efimov, efimov.require("a_star", "eta_star"))
    return _one_row_unless_walkers(_beta_coefficients(a, *columns), efimov)


def l3_coefficient(a, efimov):
    """Dimensionless ``L3 m / (hbar a^4)`` of the threshold law (lossfit convention).

    Parameters
    ----------
    a : array_like
        Scattering length in a0 (non-zero; sign selects the law).
    efimov : Efimov
    """
    a = check_nonzero("a", a)
    return l3_coefficient_unchecked(np.ravel(a), efimov).reshape(a.shape)


def beta_coefficient(a, efimov):
    """Dimensionless ``beta m / (hbar a)`` of the threshold law; needs a > 0."""
    a = check_finite("a", a)
    if (a <= 0).any():
        raise LossfitValueError("a", "atom-dimer relaxation needs a shallow dimer: a must be > 0 a0, "
                                f"got {a[a <= 0][:5]!r}")
    return beta_coefficient_unchecked(np.ravel(a), efimov).reshape(a.shape)


def _as_output(x):
    return x.item() if np.ndim(x) == 0 else x


def l3_threshold(a, *, species, efimov):
    """Zero-energy three-body loss coefficient L3 (cm^6/s, lossfit convention).

    ``L3 = 3 C(a) hbar a^4 / m`` with the exact zero-range C(a) (module docstring).

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0, either sign, non-zero.
    species : Species or str
    efimov : Efimov
        Needs ``a_minus, eta_minus`` for a < 0 and ``a_plus, eta_plus`` for a > 0.

    Returns
    -------
    float or ndarray
        L3 in cm^6/s.
    """
    sp = _species(species)
    a_arr = check_nonzero("a", a)
    c = l3_coefficient(a_arr, efimov)
    value = c * HBAR * (a_arr * A0) ** 4 / sp.mass / CM6_PER_S
    return _as_output(value)


def beta_threshold(a, *, species, efimov):
    """Zero-energy atom-dimer relaxation coefficient beta (cm^3/s).

    ``beta = C_beta(a) hbar a / m`` (shape of Braaten & Hammer 2006, exact zero-range
    C_beta), dimers lost per ``∫ n_A n_D d^3r``.

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0, > 0.
    species : Species or str
    efimov : Efimov
        Needs ``a_star, eta_star``.

    Returns
    -------
    float or ndarray
        beta in cm^3/s.
    """
    sp = _species(species)
    a_arr = check_finite("a", a)
    c = beta_coefficient(a_arr, efimov)
    return _as_output(c * HBAR * a_arr * A0 / sp.mass / CM3_PER_S)

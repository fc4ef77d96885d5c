"""Atomic data: isotope masses, C6 coefficients and the van der Waals lengths.

``r_vdW = (1/2) (m C6 / hbar^2)^(1/4)`` and ``abar = 4 pi / Gamma(1/4)^2 r_vdW``
(Chin, Grimm, Julienne & Tiesinga, RMP 82, 1225 (2010), their Table I conventions;
Gribakin & Flambaum, PRA 48, 546 (1993)).

Sources of the table (masses: atomic mass evaluation AME2016, Wang et al., Chin.
Phys. C 41, 030003 (2017); C6: as listed per entry). All values are quoted from
memory and checked by the tests only against derived r_vdW check values (tests/test_constants_species.py),
which are themselves quoted from memory.
"""

__all__ = ["Species", "species", "register_species", "known_species", "species_argument"]

import functools
import math
from dataclasses import dataclass, field

from .constants import ABAR_OVER_RVDW, ATOMIC_MASS, BOHR, ELECTRON_MASS, HBAR, K_B
from .errors import LossfitValueError, is_real


@dataclass(frozen=True)
class Species:
    """An atomic species of identical bosons (or the bosonic partner in a user's model).

    Parameters
    ----------
    name : str
        Label such as ``"133Cs"``.
    mass_u : float
        Isotope mass in unified atomic mass units (u).
    c6_au : float
        Van der Waals coefficient C6 in atomic units (E_h a0^6).
    source : str
        Where ``mass_u`` and ``c6_au`` come from.
    """

    name: str
    mass_u: float
    c6_au: float
    source: str = field(default="user-defined", compare=False)

    def __post_init__(self):
        for arg in ("mass_u", "c6_au"):
            value = getattr(self, arg)
            if not (is_real(value) and math.isfinite(value) and value > 0):
                raise LossfitValueError(arg, f"must be a positive finite number, got {value!r}")

    @functools.cached_property
    def mass(self):
        """Atomic mass in kg."""
        return self.mass_u * ATOMIC_MASS

    @functools.cached_property
    def r_vdw(self):
        """Van der Waals length r_vdW = (1/2)(m C6/hbar^2)^(1/4), in a0."""
        mass_au = self.mass / ELECTRON_MASS     # atomic units: hbar = m_e = a0 = 1
        return 0.5 * (mass_au * self.c6_au) ** 0.25

    @functools.cached_property
    def vdw_energy_nK(self):
        """Van der Waals energy hbar^2/(m r_vdW^2) as E/k_B, in nK: collision energies near
        it probe the short-range potential, beyond zero-range theory."""
        return HBAR ** 2 / (self.mass * (self.r_vdw * BOHR) ** 2) / K_B * 1e9

    @functools.cached_property
    def abar(self):
        """Gribakin-Flambaum mean scattering length abar = 0.955978 r_vdW, in a0."""
        return ABAR_OVER_RVDW * self.r_vdw

    def __repr__(self):
        return (f"Species({self.name!r}, mass={self.mass_u:.6f} u, C6={self.c6_au:g} au, "
                f"r_vdW={self.r_vdw:.2f} a0)")


_C6_DEREV = "C6: Derevianko, Johnson, Safronova & Babb, PRL 82, 3589 (1999)"
_TABLE = {
    # name: (mass in u [AME2016], C6 in atomic units, C6 source)  -- values from memory
    "6Li": (6.0151228874, 1393.39, "C6: Yan, Babb, Dalgarno & Drake, PRA 54, 2824 (1996)"),
    "7Li": (7.0160034366, 1393.39, "C6: Yan, Babb, Dalgarno & Drake, PRA 54, 2824 (1996)"),
    "23Na": (22.9897692820, 1556.0, _C6_DEREV),
    "39K": (38.9637064864, 3921.0, "C6: Falke et al., PRA 78, 012503 (2008)"),
    "40K": (39.963998166, 3921.0, "C6: Falke et al., PRA 78, 012503 (2008)"),
    "41K": (40.9618252579, 3921.0, "C6: Falke et al., PRA 78, 012503 (2008)"),
    "85Rb": (84.9117897379, 4707.0, "C6: van Kempen et al., PRL 88, 093201 (2002)"),
    "87Rb": (86.9091805310, 4707.0, "C6: van Kempen et al., PRL 88, 093201 (2002)"),
    "133Cs": (132.9054519610, 6890.0, "C6: Chin et al., PRA 70, 032701 (2004)"),
}
_REGISTRY = {name: Species(name, m, c6, f"mass: AME2016; {src} (quoted from memory)")
             for name, (m, c6, src) in _TABLE.items()}


def _normalise(name):
    return name.replace("-", "").replace(" ", "")


def _aliases(name):
    # "Cs133" and "133Cs" both mean caesium-133.
    digits = "".join(ch for ch in name if ch.isdigit())
    letters = "".join(ch for ch in name if ch.isalpha())
    return digits + letters


def species(name_or_species):
    """Look up a species by name (``"133Cs"``, ``"Cs133"``, ``"87Rb"``, …).

    Parameters
    ----------
    name_or_species : str or Species
        A known name, or a :class:`Species` (returned unchanged).

    Returns
    -------
    Species
    """
    if isinstance(name_or_species, Species):
        return name_or_species
    if not isinstance(name_or_species, str):
        raise LossfitValueError("species", f"must be a name or a Species, got {name_or_species!r}")
    key = _aliases(_normalise(name_or_species)).lower()
    for known, sp in _REGISTRY.items():
        if _aliases(_normalise(known)).lower() == key:
            return sp
    # an element alone ("Cs") means its one isotope in the table; ambiguous names ("K",
    # "Li", "Rb") are refused with the isotopes to choose from
    if key.isalpha():
        matches = [known for known in _REGISTRY if _aliases(_normalise(known)).lower().lstrip("0123456789") == key]
        if len(matches) == 1:
            return _REGISTRY[matches[0]]
        if matches:
            raise LossfitValueError("species", f"{name_or_species!r} has several isotopes here: "
                                    f"{', '.join(matches)}; name one")
    raise LossfitValueError("species", f"unknown species {name_or_species!r}; known: "
                            f"{', '.join(_REGISTRY)} (or build lossfit.Species(name, mass_u, c6_au))")


def species_argument(name, value):
    """:func:`species` for a function argument called ``name``: errors name that argument."""
    if not isinstance(value, (str, Species)):
        raise LossfitValueError(name, f"must be a species name or a Species, got {value!r}")
    try:
        return species(value)
    except LossfitValueError as exc:
        raise LossfitValueError(name, str(exc).split(": ", 1)[1]) from None


def register_species(sp):
    """Make a user-defined :class:`Species` available by name to :func:`species`."""
    if not isinstance(sp, Species):
        raise LossfitValueError("sp", f"must be a Species, got {sp!r}")
    _REGISTRY[sp.name] = sp
    return sp


def known_species():
    """Names of all registered species."""
    return list(_REGISTRY)

"""Unit factors: the only module where public units are converted to SI.

Public units (docs/architecture.md, units): scattering length in Bohr radii (a0), temperature and
collision energy in nK (energy given as E/k_B), L3 in cm^6/s, beta in cm^3/s,
magnetic field in gauss, time in seconds, trap frequencies in Hz.
"""

__all__ = ["A0", "NK", "CM6_PER_S", "CM3_PER_S", "CM3", "GAUSS", "HZ_TO_RAD_S",
           "a0_to_m", "m_to_a0", "nk_to_joule", "joule_to_nk",
           "si_to_cm6_per_s", "cm6_per_s_to_si", "si_to_cm3_per_s", "cm3_per_s_to_si"]

import math

from .constants import BOHR, K_B

A0 = BOHR                     # m per a0
NK = 1e-9 * K_B               # J per nK (energy expressed as k_B x temperature)
CM6_PER_S = 1e-12             # m^6/s per cm^6/s
CM3_PER_S = 1e-6              # m^3/s per cm^3/s
CM3 = 1e-6                    # m^3 per cm^3
GAUSS = 1e-4                  # T per G
HZ_TO_RAD_S = 2.0 * math.pi   # angular frequency per ordinary frequency


def a0_to_m(a):
    """Scattering length in a0 -> m."""
    return a * A0


def m_to_a0(x):
    """Length in m -> a0."""
    return x / A0


def nk_to_joule(t):
    """Temperature or energy/k_B in nK -> J."""
    return t * NK


def joule_to_nk(e):
    """Energy in J -> E/k_B in nK."""
    return e / NK


def si_to_cm6_per_s(x):
    """Three-body rate coefficient m^6/s -> cm^6/s."""
    return x / CM6_PER_S


def cm6_per_s_to_si(x):
    """Three-body rate coefficient cm^6/s -> m^6/s."""
    return x * CM6_PER_S


def si_to_cm3_per_s(x):
    """Two-body rate coefficient m^3/s -> cm^3/s."""
    return x / CM3_PER_S


def cm3_per_s_to_si(x):
    """Two-body rate coefficient cm^3/s -> m^3/s."""
    return x * CM3_PER_S

"""Unit factors: the only module where public units are converted to SI.

Public units (docs/architecture.md, "Units and conventions"): scattering length in Bohr radii (a0), temperature and
collision energy in nK (energy given as E/k_B), L3 in cm^6/s, beta in cm^3/s,
magnetic field in gauss, time in seconds, trap frequencies in Hz.
"""

__all__ = ["A0", "NK", "CM6_PER_S", "CM3_PER_S", "CM3", "GAUSS", "HZ_TO_RAD_S"]

import math

from .constants import BOHR, K_B

A0 = BOHR                     # m per a0
NK = 1e-9 * K_B               # J per nK (energy expressed as k_B x temperature)
CM6_PER_S = 1e-12             # m^6/s per cm^6/s
CM3_PER_S = 1e-6              # m^3/s per cm^3/s
CM3 = 1e-6                    # m^3 per cm^3
GAUSS = 1e-4                  # T per G
HZ_TO_RAD_S = 2.0 * math.pi   # angular frequency per ordinary frequency


"""Unit factors: the only module where public units are converted to SI.

Public units (docs/architecture.md, "Units and conventions"): scattering length in Bohr radii (a0), temperature and
collision energy in nK (energy given as E/k_B), L3 in cm^6/s, beta in cm^3/s,
magnetic field in gauss, time in seconds, trap frequencies in Hz.
"""

__all__ = ["A0", "NK", "CM6_PER_S", "CM3_PER_S", "CM3", "GAUSS", "HZ_TO_RAD_S", "COLUMN_UNITS"]

import math

from .constants import BOHR, K_B

A0 = BOHR                     # m per a0
NK = 1e-9 * K_B               # J per nK (energy expressed as k_B x temperature)
CM6_PER_S = 1e-12             # m^6/s per cm^6/s
CM3_PER_S = 1e-6              # m^3/s per cm^3/s
CM3 = 1e-6                    # m^3 per cm^3
GAUSS = 1e-4                  # T per G
HZ_TO_RAD_S = 2.0 * math.pi   # angular frequency per ordinary frequency

#: Units a CSV column header may name ("a (nm)", "L3 (m^6/s)"), as factors to the public
#: unit of the quantity (lower case; "u" stands for micro).
COLUMN_UNITS = {
    "a": {"a0": 1.0, "nm": 1e-9 / A0},
    "temperature": {"nk": 1.0, "uk": 1e3, "µk": 1e3, "mk": 1e6, "k": 1e9},
    "l3": {"cm^6/s": 1.0, "cm6/s": 1.0, "m^6/s": 1.0 / CM6_PER_S, "m6/s": 1.0 / CM6_PER_S},
    "beta": {"cm^3/s": 1.0, "cm3/s": 1.0, "m^3/s": 1.0 / CM3_PER_S, "m3/s": 1.0 / CM3_PER_S},
}


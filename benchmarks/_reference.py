"""Independent reference constants shared by the benchmarks (not taken from lossfit)."""

import math

import scipy.constants as sc
from scipy.optimize import brentq

HBAR, KB = sc.hbar, sc.k
A0 = sc.physical_constants["Bohr radius"][0]
SQRT_PI = math.sqrt(math.pi)
# Efimov's equation for three identical bosons (Braaten & Hammer, Phys. Rep. 428, 259 (2006))
S0 = brentq(lambda s: s * math.cosh(math.pi * s / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s / 6),
            0.9, 1.1, xtol=1e-16)
LAMBDA = math.exp(math.pi / S0)
U3 = 72 * math.sqrt(3) * math.pi ** 2          # three-body J=0 unitarity bound, natural units
U2 = 3 * math.sqrt(3) * math.pi / 4            # atom-dimer s-wave bound, natural units

"""Reference values computed independently of lossfit, shared by the tests at this level:
CODATA constants from scipy and s0 from its transcendental equation by scipy's brentq
(Braaten & Hammer, Phys. Rep. 428, 259 (2006): s cosh(pi s/2) = (8/sqrt 3) sinh(pi s/6))."""

import math

import numpy as np
import scipy.constants as sc
from scipy.optimize import brentq

HBAR = sc.hbar
KB = sc.k
A0 = sc.physical_constants["Bohr radius"][0]
SQRT_PI = math.sqrt(math.pi)
S0 = brentq(lambda s: s * math.cosh(math.pi * s / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s / 6),
            0.9, 1.1, xtol=1e-16, rtol=4 * np.finfo(float).eps)

"""Independent reference constants and probe kernels for the benchmarks: those of the
tests (tests/independent.py, not taken from lossfit) plus the scaling factor and the J = 0
unitarity bounds in natural units."""

import math
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests"))

from independent import (  # noqa: E402,F401
    A0,
    HBAR,
    KB,
    S0,
    SQRT_PI,
    k_gauss,
    k_lorentz,
    line_features,
    no_features,
)

LAMBDA = math.exp(math.pi / S0)
U3 = 72 * math.sqrt(3) * math.pi ** 2          # three-body J=0 unitarity bound, natural units
U2 = 3 * math.sqrt(3) * math.pi / 4            # atom-dimer s-wave bound, natural units

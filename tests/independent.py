"""Reference values computed independently of lossfit, shared by the tests at this level
and the benchmarks (benchmarks/_reference.py): CODATA constants from scipy, s0 from its
transcendental equation by scipy's brentq (Braaten & Hammer, Phys. Rep. 428, 259 (2006):
s cosh(pi s/2) = (8/sqrt 3) sinh(pi s/6)), and probe kernels for the quadrature engine
(Breit-Wigner and Gaussian lines of unit area, with and without their feature points)."""

import math

import numba
import numpy as np
import scipy.constants as sc
from scipy.optimize import brentq

HBAR = sc.hbar
KB = sc.k
A0 = sc.physical_constants["Bohr radius"][0]
SQRT_PI = math.sqrt(math.pi)
S0 = brentq(lambda s: s * math.cosh(math.pi * s / 2) - 8 / math.sqrt(3) * math.sinh(math.pi * s / 6),
            0.9, 1.1, xtol=1e-16, rtol=4 * np.finfo(float).eps)


@numba.njit
def no_features(p, out):
    return 0


@numba.njit
def k_lorentz(x, p):
    # Breit-Wigner line in energy, unit area in x: (g/pi) / ((x - c)^2 + g^2); p = [c, g].
    d = x - p[0]
    return p[1] / math.pi / (d * d + p[1] * p[1])


@numba.njit
def k_gauss(x, p):
    # Gaussian line of unit area, centre p[0], standard deviation p[1].
    d = (x - p[0]) / p[1]
    return math.exp(-0.5 * d * d) / (p[1] * math.sqrt(2 * math.pi))


@numba.njit
def line_features(p, out):
    # the centre p[0] and the points one width p[1] either side: what thermal.py asks of a line
    out[0] = p[0] - p[1]
    out[1] = p[0]
    out[2] = p[0] + p[1]
    return 3


class Gaussian:
    """Analytic multivariate Gaussian log density (picklable): a sampler target whose
    moments are known exactly."""

    def __init__(self, mean, cov):
        self.mean = np.asarray(mean)
        self.icov = np.linalg.inv(cov)

    def __call__(self, x):
        d = x - self.mean
        return -0.5 * d @ self.icov @ d

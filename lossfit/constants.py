"""Physical constants (CODATA 2022) and zero-range constants.

The SI constants are the CODATA 2022 recommended values of NIST
(https://physics.nist.gov/constants); h and k_B are exact since the 2019 SI. They are
written out rather than taken from ``scipy.constants``, whose import costs about 0.3 s
of every start-up; the tests compare them with ``scipy.constants`` (which carries
CODATA 2018 before scipy 1.15: the values differ by at most 1.4e-9 relative).

The Efimov exponent ``S0`` is computed here from its defining transcendental
equation, s cosh(pi s / 2) = (8/sqrt(3)) sinh(pi s / 6) (V. Efimov, Phys. Lett. B 33,
563 (1970); E. Braaten & H.-W. Hammer, Phys. Rep. 428, 259 (2006), eq. for s0), not
typed in; ``ARG_GAMMA_S0`` = arg Gamma(1 + i s0) enters every Efimov phase.
"""

__all__ = ["HBAR", "K_B", "ATOMIC_MASS", "BOHR", "ELECTRON_MASS", "HARTREE",
           "S0", "SCALING_FACTOR", "ARG_GAMMA_S0", "KAPPA_A_MINUS", "KAPPA_A_STAR", "KAPPA_A_PLUS",
           "C_NEGATIVE", "C_POSITIVE_SHALLOW_MAX", "C_POSITIVE_DEEP", "C_ATOM_DIMER", "PUBLISHED",
           "UNIVERSAL_A_STAR_OVER_A_MINUS", "ABAR_OVER_RVDW", "VDW_A_MINUS_OVER_RVDW"]

import cmath
import math

HBAR = 6.62607015e-34 / (2.0 * math.pi)      # J s (h exact)
K_B = 1.380649e-23                            # J / K (exact)
ATOMIC_MASS = 1.66053906892e-27               # kg
BOHR = 5.29177210544e-11                      # m
ELECTRON_MASS = 9.1093837139e-31              # kg
HARTREE = 4.359744722206e-18                  # J


def _efimov_equation(s):
    return s * math.cosh(math.pi * s / 2.0) - 8.0 / math.sqrt(3.0) * math.sinh(math.pi * s / 6.0)


def _efimov_root():
    # Newton's method from s = 1 (the root is simple and near 1; scipy.optimize would
    # cost half a second of start-up for these few lines)
    s = 1.0
    for _ in range(50):
        h = 1e-6
        slope = (_efimov_equation(s + h) - _efimov_equation(s - h)) / (2.0 * h)
        step = _efimov_equation(s) / slope
        s -= step
        if abs(step) < 1e-16:
            break
    return s


def _log_gamma(z):
    """ln Gamma(z) for complex z with Re z > 0: the recurrence up to Re z > 30, then
    Stirling's series (Abramowitz & Stegun 6.1.40; error below 1e-17 there)."""
    shift = 0.0
    while z.real < 30.0:
        shift += cmath.log(z)
        z += 1.0
    series = (1.0 / 12.0 - (1.0 / 360.0 - (1.0 / 1260.0 - (1.0 / 1680.0 - 1.0 / (1188.0 * z * z)) / (z * z))
                            / (z * z)) / (z * z)) / z
    return (z - 0.5) * cmath.log(z) - z + 0.5 * math.log(2.0 * math.pi) + series - shift


#: Efimov exponent for three identical bosons (imaginary part of the scaling exponent).
S0 = _efimov_root()
#: Discrete scaling factor exp(pi / s0) between successive Efimov features.
SCALING_FACTOR = math.exp(math.pi / S0)
#: arg Gamma(1 + i s0) (radians), in the Efimov phase of every zero-range amplitude.
ARG_GAMMA_S0 = _log_gamma(complex(1.0, S0)).imag

#: kappa* a_- for the three-atom threshold (Braaten & Hammer 2006; Gogolin, Mora &
#: Egger, PRL 100, 140404 (2008)).
KAPPA_A_MINUS = -1.50763
#: kappa* a*_0 for the atom-dimer threshold of the same Efimov branch (same sources).
KAPPA_A_STAR = 0.0707645
#: kappa* a_+ for the recombination minimum: the project's STM solver (docs/stm.md),
#: confirmed by an independent momentum-space calculation to 1e-6. The earlier quoted
#: 0.316943 (from memory; see PUBLISHED) is 1.5e-3 high.
KAPPA_A_PLUS = 0.316472

# ---- exact zero-range threshold coefficients (docs/conventions.md, "Threshold laws") ----
# In the form K3 = C(a) hbar a^4/m for recombination *events* and beta = C_beta(a) hbar a/m
# (dimers lost); lossfit's L3 (atoms lost) is three times the event coefficient.
_UNIVERSAL = 128.0 * math.pi ** 2 * (4.0 * math.pi - 3.0 * math.sqrt(3.0))
#: a < 0: C = C_NEGATIVE sinh(2 eta)/(sin^2[s0 ln(a/a_-)] + sinh^2 eta), C_NEGATIVE =
#: 64 pi^2 (4 pi - 3 sqrt 3) coth(pi s0) = 4672.18. The closed form agrees with both of the
#: project's solvers to 1e-6 (docs/solver.md, docs/stm.md); it is not derived analytically.
C_NEGATIVE = 0.5 * _UNIVERSAL / math.tanh(math.pi * S0)
#: a > 0 into the shallow dimer: C = 128 pi^2 (4 pi - 3 sqrt 3)(sin^2 theta + sinh^2 eta)
#: / (sinh^2(pi s0 + eta) + cos^2 theta), theta = s0 ln(a/a_+) (analytic; Braaten & Hammer
#: 2006); its eta -> 0 maximum 128 pi^2 (4 pi - 3 sqrt 3)/sinh^2(pi s0) = 67.1177.
C_POSITIVE_SHALLOW_MAX = _UNIVERSAL / math.sinh(math.pi * S0) ** 2
#: a > 0 into deep dimers: C = C_POSITIVE_DEEP sinh(2 eta)/(sinh^2(pi s0 + eta) + cos^2 theta)
#: with the constant of a < 0 (derivation and the solver check in docs/conventions.md).
C_POSITIVE_DEEP = C_NEGATIVE
#: atom-dimer relaxation: C_beta = C_ATOM_DIMER sinh(2 eta)/(sin^2[s0 ln(a/a*)] + sinh^2 eta),
#: the STM solver's threshold coefficient (docs/stm.md), confirmed independently to 1e-6.
C_ATOM_DIMER = 19.4935
#: The published numbers these replace: Braaten & Hammer, Phys. Rep. 428, 259 (2006) (fits to
#: early numerics: 4590, 67.1, 16.8, 20.3) and kappa* a_+ = 0.316943 (quoted from memory, not
#: confirmed). docs/conventions.md states how far each is from the exact value.
PUBLISHED = {"C_NEGATIVE": 4590.0, "C_POSITIVE_SHALLOW": 67.1, "C_POSITIVE_DEEP": 16.8,
             "C_ATOM_DIMER": 20.3, "KAPPA_A_PLUS": 0.316943}
#: a*/|a_-| when the atom-dimer resonance of the next (deeper) branch is paired with a_-:
#: (KAPPA_A_STAR * SCALING_FACTOR) / |KAPPA_A_MINUS| = 1.0652 (docs/architecture.md, conventions).
UNIVERSAL_A_STAR_OVER_A_MINUS = KAPPA_A_STAR * SCALING_FACTOR / KAPPA_A_MINUS
#: Mean scattering length over r_vdW, 4 pi / Gamma(1/4)^2 (Gribakin & Flambaum, PRA 48, 546 (1993)).
ABAR_OVER_RVDW = 4.0 * math.pi / math.gamma(0.25) ** 2
#: Van der Waals universality of the three-body parameter: a_- = -9.73 r_vdW
#: (Wang, D'Incao, Esry & Greene, PRL 108, 263001 (2012)).
VDW_A_MINUS_OVER_RVDW = -9.73

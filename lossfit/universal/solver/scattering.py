"""The a < 0 universal function s11(k|a|) and the finite-energy loss rate K3(E).

Definitions (derivation in docs/solver.md).  In the scale-invariant region
R << |a|, 1/k the Efimov channel carries f_+ = (R/|a|)^{+i s0} ('up', moving to
larger R) and f_- = (R/|a|)^{-i s0} ('down').  The solution that is purely
outgoing (or decaying) at R -> infinity in every channel is f_+ + s11 f_-: s11 is
the amplitude with which an up-going wave in the Efimov channel comes back down.
It depends only on x = k|a| with E = hbar^2 k^2 / m (three-body energy in the
centre-of-mass frame).

The short-distance boundary condition of zero-range theory (three-body parameter
kappa*, inelasticity eta; Braaten & Hammer, Phys. Rep. 428, 259 (2006)) is
F ~ sqrt(R) sin[s0 ln(kappa* R / sqrt 2) - arg Gamma(1 + i s0) + i eta], which is
the small-R form of sqrt(R) K_{i s0}(sqrt(2) kappa R) at kappa = kappa*, so that
kappa* is the binding wave number of a unitarity trimer, E = -hbar^2 kappa*^2/m.
Summing the multiple reflections between the two regions, the J = 0 loss rate
(atoms lost, thermal gas, dN/dt = -K3 int n^3) is

    K3(E) = (72 sqrt(3) pi^2 hbar / (m k^4)) (1 - |s11|^2) (1 - e^{-4 eta})
            / |1 + s11 exp(2 i Phi - 2 eta)|^2,
    Phi = s0 ln(kappa* |a| / sqrt 2) - arg Gamma(1 + i s0),

which is the form |1 - s11 e^{2 i theta}|^2 with complex theta = Phi + pi/2 + i eta.
"""

__all__ = ["S0", "DEFAULTS", "s11_components", "s11_point", "s11_unitarity", "s11_negative_a", "k3_from_s11",
           "k3_negative_a", "K3_PREFACTOR", "phase_phi"]

import math

import numpy as np

from ...constants import ARG_GAMMA_S0
from .propagate import S0, down_amplitude, inward_logderivative

#: 72 sqrt(3) pi^2: K3 = K3_PREFACTOR * hbar/(m k^4) * (absorption probability).
K3_PREFACTOR = 72.0 * math.sqrt(3.0) * math.pi ** 2

#: default numerical parameters (see docs/solver.md for the convergence study)
DEFAULTS = dict(nchan=16, r0_factor=1e-6, c_out=160.0, h=0.04, c_osc=0.25)


def phase_phi(kappa_star_abs_a):
    """Phi = s0 ln(kappa* |a| / sqrt 2) - arg Gamma(1 + i s0) (radians)."""
    return S0 * np.log(np.asarray(kappa_star_abs_a, dtype=float) / math.sqrt(2.0)) - ARG_GAMMA_S0


def s11_unitarity(k_over_l):
    """Exact |a| = infinity value of s11, with f_+- = (R/L)^{+-i s0} and kL = k_over_l.

    s11 = -e^{-pi s0} (K L/2)^{-2 i s0} Gamma(1 + i s0)/Gamma(1 - i s0), K = sqrt(2) k,
    from the outgoing solution sqrt(R) H^(1)_{i s0}(K R) (derivation in docs/solver.md).
    """
    kk = math.sqrt(2.0) * np.asarray(k_over_l, dtype=float)
    return -np.exp(-math.pi * S0) * np.exp(-2j * S0 * np.log(kk / 2) + 2j * ARG_GAMMA_S0)


def _s11_raw(k2, inv_a, nchan, r0, rm, refine, h, c_osc, outer="outgoing"):
    y, _ = inward_logderivative(k2, inv_a, nchan, r0, rm, h=h, c_osc=c_osc,
                                refine=refine, outer=outer)
    return down_amplitude(y, k2, r0)


def s11_components(x, inv_a=-1, nchan=None, r0_factor=None, c_out=None, h=None,
                   c_osc=None, richardson=True):
    """Transmission 1 - |s11|^2 and phase arg s11 at one x = k|a| (k^2 = m E/hbar^2).

    Parameters
    ----------
    x : float
        k|a| > 0 (for ``inv_a = 0``: k L, L the reference length of f_+-).
    inv_a : {-1, 0}
        a < 0 or unitarity.
    nchan : int
        Adiabatic channels.
    r0_factor : float
        Inner radius R_0 = r0_factor * min(|a|, 1/K), K = sqrt(2) k.
    c_out : float
        Outer radius R_m = c_out / K (outgoing Hankel BC in every adiabatic channel).
    h, c_osc : float
        Step controls (ln R step; radians of K R per sector).
    richardson : bool
        Combine steps h and h/2 as (4 q(h/2) - q(h))/3 for q = 1 - |s11|^2 and arg s11
        separately (a combination of the complex values would break |s11| <= 1 at second
        order, which matters at threshold where 1 - |s11|^2 ~ x^4).

    Returns
    -------
    (transmission, phase) : (float, float)
        1 - |s11|^2 (dimensionless, computed without cancellation from the propagated
        flux balance) and arg s11 in radians (principal value).
    """
    p = dict(DEFAULTS)
    for k, v in dict(nchan=nchan, r0_factor=r0_factor, c_out=c_out, h=h, c_osc=c_osc).items():
        if v is not None:
            p[k] = v
    kk = math.sqrt(2.0) * x
    r0 = p["r0_factor"] * min(1.0, 1.0 / kk)
    rm = p["c_out"] / kk
    args = (kk * kk, inv_a, p["nchan"] if inv_a != 0 else 1, r0, rm)
    s1 = _s11_raw(*args, 1, p["h"], p["c_osc"])
    t1 = 1 - abs(s1) ** 2
    if not richardson:
        return t1, float(np.angle(s1))
    s2 = _s11_raw(*args, 2, p["h"], p["c_osc"])
    t2 = 1 - abs(s2) ** 2
    tt = (4 * t2 - t1) / 3
    phase = np.angle(s2) + np.angle(s2 / s1) / 3
    return float(tt), float(np.angle(np.exp(1j * phase)))


def s11_point(x, inv_a=-1, **kw):
    """s11 at one x = k|a| (complex); keyword arguments as :func:`s11_components`."""
    tt, phase = s11_components(x, inv_a, **kw)
    return math.sqrt(max(1 - tt, 0.0)) * np.exp(1j * phase)


def s11_negative_a(x_values, **kw):
    """Universal a < 0 function s11(x), x = k|a|, E = hbar^2 k^2/m.

    Parameters
    ----------
    x_values : array_like of float
        k|a| values (dimensionless), > 0.
    **kw
        Numerical controls passed to :func:`s11_point`.

    Returns
    -------
    ndarray of complex
    """
    xs = np.atleast_1d(np.asarray(x_values, dtype=float))
    return np.array([s11_point(float(x), -1, **kw) for x in xs])


def k3_from_s11(x, s11, kappa_star_abs_a, eta):
    """Dimensionless K3 m / (hbar a^4) from s11 (J = 0, atoms lost, thermal gas).

    Parameters
    ----------
    x : array_like
        k|a|.
    s11 : array_like of complex
        Universal function at ``x``.
    kappa_star_abs_a : float
        kappa* |a| (three-body parameter times |a|).
    eta : float
        Inelasticity parameter (>= 0).

    Returns
    -------
    ndarray
        K3 / (hbar a^4 / m).
    """
    x = np.asarray(x, dtype=float)
    s11 = np.asarray(s11, dtype=complex)
    phi = phase_phi(kappa_star_abs_a)
    absorb = (1 - np.abs(s11) ** 2) * (-np.expm1(-4 * eta)) \
        / np.abs(1 + s11 * np.exp(2j * phi - 2 * eta)) ** 2
    return K3_PREFACTOR * absorb / x ** 4


def k3_negative_a(x_values, kappa_star_abs_a, eta, **kw):
    """K3 m/(hbar a^4) at x = k|a| for a < 0, computed directly with the solver (offline)."""
    xs = np.atleast_1d(np.asarray(x_values, dtype=float))
    return k3_from_s11(xs, s11_negative_a(xs, **kw), kappa_star_abs_a, eta)

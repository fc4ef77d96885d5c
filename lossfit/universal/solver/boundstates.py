"""Bound-state mode: Efimov trimers versus 1/a, and the universal ratios kappa* a_-, kappa* a*_0.

A trimer of energy E = -hbar^2 kappa^2/m is a solution decaying at large R in every
channel (or, at the atom-dimer threshold, of zero atom-dimer momentum) that also obeys
the short-distance condition of :mod:`.scattering`.  Propagating the decaying
condition inward gives f_0 = f_+ + rho f_- at R_0 with |rho| = 1, rho = e^{i delta_B};
the trimer condition is delta_B + 2 Phi = pi (mod 2 pi) with
Phi = s0 ln(kappa* |a| / sqrt 2) - arg Gamma(1 + i s0), so each (kappa |a|) gives the
ladder of kappa* |a| values kappa* |a| = sqrt2 exp[(arg Gamma(1+i s0) + (pi - delta_B)/2 + n pi)/s0].
The branch n is fixed by continuity from unitarity, where the exact solution
sqrt(R) K_{i s0}(sqrt 2 kappa R) gives kappa = kappa* on n = 0 (definition of kappa*,
Braaten & Hammer, Phys. Rep. 428, 259 (2006)).
"""

__all__ = ["bound_phase", "threshold_phase", "kappa_star_from_phase", "kappa_star_a_minus",
           "trimer_branch_negative_a", "atom_dimer_threshold_phase", "kappa_star_a_star",
           "bound_phase_positive_a", "trimer_branch_positive_a"]

import math

import numpy as np

from ...constants import ARG_GAMMA_S0
from .propagate import S0, down_amplitude, inward_from_outer, inward_logderivative, kv_logder, sector_setup
from .scattering import s11_point


def kappa_star_from_phase(delta, n=0):
    """kappa* |a| on branch n from the reflection phase delta (radians)."""
    return math.sqrt(2.0) * np.exp((ARG_GAMMA_S0 + (math.pi - np.asarray(delta)) / 2 + n * math.pi) / S0)


def _rho(k2, inv_a, nchan, r0, rm, refine, h, c_osc, outer):
    y, _ = inward_logderivative(k2, inv_a, nchan, r0, rm, h=h, c_osc=c_osc,
                                refine=refine, outer=outer)
    return down_amplitude(y, k2, r0)


def bound_phase(kappa_abs_a, inv_a=-1, nchan=16, r0_factor=1e-6, c_out=40.0, h=0.04,
                c_osc=0.25):
    """Phase delta_B of rho for a decaying solution at E = -hbar^2 kappa^2/m (a < 0).

    Parameters
    ----------
    kappa_abs_a : float
        kappa |a| > 0.
    inv_a : {-1}
        Only a < 0 is supported here (all channels closed below the three-atom threshold).

    Returns
    -------
    (delta_B, |rho|) : (float, float)
        Richardson-extrapolated phase (radians, in (-pi, pi]) and modulus (should be 1).
    """
    q = math.sqrt(2.0) * kappa_abs_a
    r0 = r0_factor * min(1.0, 1.0 / q)
    rm = c_out / q
    args = (-q * q, inv_a, nchan, r0, rm)
    r1 = _rho(*args, 1, h, c_osc, "decaying")
    r2 = _rho(*args, 2, h, c_osc, "decaying")
    ph = np.angle(r2) + np.angle(r2 / r1) / 3
    return float(np.angle(np.exp(1j * ph))), abs(r2)


def threshold_phase(nchan=16, x=1e-3, **kw):
    """arg s11 at x = k|a| -> 0 (evaluated at small x; the x-dependence is O(x^2))."""
    return float(np.angle(s11_point(x, -1, nchan=nchan, **kw)))


def kappa_star_a_minus(nchan=16, x=1e-3, **kw):
    """kappa* a_- (negative) on the branch of the unitarity trimer with kappa = kappa*.

    The branch (n = 0 in :func:`kappa_star_from_phase`) is the one continuously connected
    to unitarity; :func:`trimer_branch_negative_a` checks this by following the trimer.
    """
    return -float(kappa_star_from_phase(threshold_phase(nchan, x, **kw), 0))


def trimer_branch_negative_a(kappa_abs_a_values, nchan=12, **kw):
    """Follow the n = 0 trimer from near unitarity to threshold, a < 0.

    Parameters
    ----------
    kappa_abs_a_values : array_like
        Decreasing sequence of kappa |a| (start >= ~30 so that the branch is anchored
        at its unitarity value).

    Returns
    -------
    (inv_kappa_star_a, kappa_over_kappa_star) : ndarrays
        1/(kappa* a) (negative) and kappa/kappa* along the branch: the trimer spectrum
        E/(hbar^2 kappa*^2/m) = -(kappa/kappa*)^2 versus 1/(kappa* a).
    """
    ka = np.asarray(kappa_abs_a_values, dtype=float)
    ph = np.array([bound_phase(float(k), -1, nchan, **kw)[0] for k in ka])
    ph = np.unwrap(ph)
    # Anchor: at unitarity delta_B = pi - 2 s0 ln(kappa|a|/sqrt2) + 2 arg Gamma(1 + i s0)
    # (n = 0 branch); pick the 2 pi multiple matching it at the first (largest) point.
    ref = math.pi - 2 * S0 * math.log(ka[0] / math.sqrt(2)) + 2 * ARG_GAMMA_S0
    ph = ph + 2 * math.pi * round((ref - ph[0]) / (2 * math.pi))
    kstar = kappa_star_from_phase(ph, 0)
    return -1.0 / kstar, ka / kstar


def _positive_a_phase(k2, nchan, rm, r0, h, c_osc, ch0_logder):
    """Richardson-extrapolated rho phase for a > 0, given the channel-0 outer log-derivative."""
    out = []
    for refine in (1, 2):
        # Every channel decays (or, at threshold, is flat), so sectors need not resolve
        # oscillations at K R: the step rule uses |K| capped at 3/a (capping changes the
        # phase by < 1e-8 at kappa a = 100 and is 20x faster).
        kgrid = min(math.sqrt(2.0) * max(1.0, math.sqrt(abs(k2) / 2)), 3.0)
        st = sector_setup(k2, 1, nchan, r0, rm, kgrid, h=h, c_osc=c_osc, refine=refine)
        yout = np.zeros(nchan, dtype=complex)
        yout[0] = ch0_logder(st["nu_m"][0])
        for n in range(1, nchan):
            yout[n] = kv_logder(st["nu_m"][n], math.sqrt(abs(k2)) * rm)
        out.append(down_amplitude(inward_from_outer(st, yout, k2, r0), k2, r0))
    r1, r2 = out
    ph = np.angle(r2) + np.angle(r2 / r1) / 3
    return float(np.angle(np.exp(1j * ph))), abs(r2)


def atom_dimer_threshold_phase(nchan=16, rm=30.0, r0=1e-6, h=0.04, c_osc=0.25):
    """Phase delta_B for a > 0 at E = -hbar^2/(m a^2) (atom-dimer threshold).

    The atom-dimer (lowest) adiabatic channel gets the zero-momentum condition
    dF/dR = 0 at R_m (relative atom-dimer wave function constant: a trimer exactly at
    threshold); all other channels decay.  Truncating the adiabatic expansion converges
    slowly in the atom-dimer channel at R >> a (couplings ~ (R/a)^-3/2 spread over
    ~R/a channels), so this is checked for convergence in both nchan and rm.
    """
    # F = sqrt(R) f constant  =>  d ln f / d ln R = -1/2
    return _positive_a_phase(-2.0, nchan, rm, r0, h, c_osc, lambda nu: -0.5)


def bound_phase_positive_a(kappa_a, nchan=48, rm=16.0, r0=1e-6, h=0.04, c_osc=0.25):
    """Phase delta_B for a > 0 below the atom-dimer threshold, E = -hbar^2 kappa^2/m, kappa a > 1.

    The atom-dimer channel decays as e^{-q R}, q = sqrt(2 (kappa^2 a^2 - 1))/a (free
    atom-dimer motion); the others as K_{s_n}.  Near the threshold (q R_m small) the
    result inherits the slow convergence of a*_0.
    """
    q = math.sqrt(2.0 * (kappa_a ** 2 - 1.0))
    k2 = -2.0 * kappa_a ** 2
    # Free atom-dimer relative motion, F ~ sqrt(R) K_{1/2}(q R) ~ e^{-qR}: the -1/(4R^2) of
    # the adiabatic potential is cancelled by the diagonal correction (complete basis),
    # consistently with the zero-momentum condition used for a*_0.
    return _positive_a_phase(k2, nchan, rm, r0, h, c_osc, lambda nu: kv_logder(0.25, q * rm))


def trimer_branch_positive_a(kappa_a_values, nchan=48, rm=16.0):
    """Follow the kappa* trimer for a > 0 from near unitarity towards the atom-dimer threshold.

    Parameters
    ----------
    kappa_a_values : array_like
        Decreasing kappa a > 1 (start >= ~30).

    Returns
    -------
    (inv_kappa_star_a, kappa_over_kappa_star) : ndarrays
        1/(kappa* a) (positive) and kappa/kappa* along the branch.
    """
    ka = np.asarray(kappa_a_values, dtype=float)
    ph = np.unwrap(np.array([bound_phase_positive_a(float(k), nchan, rm)[0] for k in ka]))
    ref = math.pi - 2 * S0 * math.log(ka[0] / math.sqrt(2)) + 2 * ARG_GAMMA_S0
    ph = ph + 2 * math.pi * round((ref - ph[0]) / (2 * math.pi))
    kstar = kappa_star_from_phase(ph, 0)
    return 1.0 / kstar, ka / kstar


def kappa_star_a_star(nchan=96, rm=16.0, **kw):
    """kappa* a*_0 (a > 0 atom-dimer threshold of the kappa* trimer).

    The ladder index is n = -1 of :func:`kappa_star_from_phase`: that is the rung reached
    by following the kappa* trimer from unitarity with :func:`trimer_branch_positive_a`
    (1/(kappa* a) grows monotonically toward 1/(kappa* a*_0) ~ 14.1 there), not a choice
    made by comparing with the published number.  Converges slowly in ``nchan`` and
    ``rm`` (docs/solver.md).

    Returns
    -------
    float
    """
    d, _ = atom_dimer_threshold_phase(nchan, rm, **kw)
    return float(kappa_star_from_phase(d, -1))

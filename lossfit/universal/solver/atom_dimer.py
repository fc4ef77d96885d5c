"""a > 0 below the breakup threshold: atom-dimer relaxation into deep dimers (J = 0).

Between the atom-dimer threshold E_D = -hbar^2/(m a^2) and the breakup threshold E = 0
only the atom-dimer channel is open at large R, so, exactly as for a < 0, one complex
function s_AD of the atom-dimer wave number summarises the long-distance physics: the
amplitude with which an up-going Efimov-channel wave is reflected back to short
distance when every other channel is outgoing (atom-dimer) or decaying.  The J = 0
(atom-dimer s-wave) relaxation probability is

    P = (1 - |s_AD|^2)(1 - e^{-4 eta}) / |1 + s_AD e^{2 i Phi - 2 eta}|^2,

and, with the atom-dimer reduced mass 2m/3 and E - E_D = 3 hbar^2 k_AD^2/(4 m),
beta = v sigma = (hbar k_AD/mu)(pi/k_AD^2) P = 3 pi hbar P / (2 m k_AD) (dimers lost per
unit time and densities; atom and dimer are distinguishable particles, the Bose
symmetry is inside the adiabatic channel functions).  In the atom-dimer channel the
hyperradial wave number is q = sqrt(3/2) k_AD, and the adiabatic potential tends to
-2/a^2 - 1/(4R^2), the -1/(4R^2) being cancelled by the diagonal non-adiabatic
correction (atom-dimer relative motion is free beyond a few a), so the outgoing
condition is the free wave e^{iqR}.

At threshold 1 - |s_AD|^2 = c1 k_AD a, giving the Braaten & Hammer form
beta = C_beta sinh(2 eta)/(sin^2[s0 ln(a/a*)] + sinh^2 eta) hbar a/m with
C_beta = 3 pi c1 / 4 (same algebra as the a < 0 threshold, docs/solver.md).
"""

__all__ = ["s_ad_components", "beta_threshold_coefficient"]

import math

import numpy as np

from .propagate import down_amplitude, hankel1_logder, inward_from_outer, kv_logder, sector_setup


def _s_ad_raw(kad, nchan, rm, r0, h, c_osc, refine):
    q = math.sqrt(1.5) * kad
    k2 = q * q - 2.0                       # K^2 a^2 (negative: below breakup)
    st = sector_setup(k2, 1, nchan, r0, rm, math.sqrt(2.0), h=h, c_osc=c_osc, refine=refine)
    yout = np.zeros(nchan, dtype=complex)
    # Free atom-dimer s-wave, F = sqrt(R) H^(1)_{1/2}(qR) ~ e^{iqR}: in the complete basis
    # the diagonal correction cancels the -1/(4R^2) of the adiabatic potential; the
    # truncated basis does so only for nchan >> R_m/a (checked by convergence).
    yout[0] = hankel1_logder(0.25, q * rm)
    for n in range(1, nchan):
        yout[n] = kv_logder(st["nu_m"][n], math.sqrt(-k2) * rm)
    return down_amplitude(inward_from_outer(st, yout, k2, r0), k2, r0)


def s_ad_components(kad, nchan=64, rm=16.0, r0=1e-6, h=0.04, c_osc=0.25):
    """(1 - |s_AD|^2, arg s_AD) at atom-dimer wave number k_AD a = ``kad`` (< 2/sqrt3).

    Richardson-extrapolated in the step like :func:`.scattering.s11_components`.
    """
    s1 = _s_ad_raw(kad, nchan, rm, r0, h, c_osc, 1)
    s2 = _s_ad_raw(kad, nchan, rm, r0, h, c_osc, 2)
    t1, t2 = 1 - abs(s1) ** 2, 1 - abs(s2) ** 2
    ph = np.angle(s2) + np.angle(s2 / s1) / 3
    return float((4 * t2 - t1) / 3), float(np.angle(np.exp(1j * ph)))


def beta_threshold_coefficient(nchan=64, rm=16.0, kad=1e-3, **kw):
    """C_beta = 3 pi c1 / 4 with c1 = (1 - |s_AD|^2)/(k_AD a) at small k_AD a."""
    t, _ = s_ad_components(kad, nchan, rm, **kw)
    return 3 * math.pi * (t / kad) / 4

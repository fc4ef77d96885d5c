"""a > 0 in momentum space: the Skorniakov--Ter-Martirosian (STM) equation (J = 0).

An independent second route to the a > 0 zero-range observables of three identical
bosons of mass m, next to the hyperspherical solver (docs/solver.md); see docs/stm.md
for the derivation of every factor used here.

Units: hbar = m = 1 and lengths in units of the scattering length a > 0 (so the
dimer energy is E_D = -1/a^2 = -1, momenta are in units of 1/a; ``negative_a`` in
:func:`recombination_deep` uses |a|).  Results are returned as dimensionless ratios:
a_AD / a, beta m / (hbar a), K3 m / (hbar a^4).

Contents: threshold atom-dimer length and relaxation (:func:`atom_dimer_length`,
:func:`relaxation_beta`), the on-shell amplitude below breakup
(:func:`atom_dimer_amplitude`), threshold recombination into the shallow and deep
dimers (:func:`recombination_shallow`, :func:`recombination_deep`, the latter also for
a < 0), kappa* a_- as a check (:func:`kappa_a_minus`), and atom-dimer scattering above
breakup on a deformed contour with the breakup / deep-dimer split and K3_shallow(E) by
detailed balance (:func:`above_breakup`); the universal function s_AD(k_AD a) of the
Efimov channel with the atom-dimer transmission T_AD and the breakup coefficients A, B,
C (:func:`s_ad_from_stm`, :func:`s_ad_fit`, :class:`AtomDimerRankOne`; tabulated by
scripts/make_atom_dimer_table.py).

Equation (G. V. Skorniakov & K. A. Ter-Martirosian, Sov. Phys. JETP 4, 648 (1957);
the form and notation of E. Braaten & H.-W. Hammer, Phys. Rep. 428, 259 (2006); the
three-body force of P. F. Bedaque, H.-W. Hammer & U. van Kolck, PRL 82, 463 (1999)):

    A(p, k; E) = lam (16/(3a)) M(p, k; E)
                 + lam (4/pi) int_0^Lambda dq q^2 M(p, q; E) A(q, k; E) / D(q; E),
    M(p, q; E) = (1/(2pq)) ln[(p^2 + pq + q^2 - E)/(p^2 - pq + q^2 - E)] + h,
    D(q; E)    = -1/a + sqrt(3q^2/4 - E - i0),

with lam = 1 for identical bosons and lam = -1/2 for the spin-1/2 fermion quartet
channel (up atom on an up-down dimer; then h = 0).  h = H(Lambda)/Lambda^2 is the
three-body force.  It is not taken from a formula: for a chosen three-body parameter
kappa* the same discretised kernel at 1/a = 0 must have a trimer at E = -kappa*^2
(the definition of kappa* in Braaten & Hammer 2006), and since h enters as a rank-one
term this fixes h in closed form (:func:`three_body_force`).  A complex kappa*,
kappa* exp(i eta / s0), is the analytic continuation that describes deep-dimer
losses (Braaten & Hammer 2006, ln Lambda* -> ln Lambda* + i eta/s0).

Normalisation (docs/stm.md): f_AD(k) = A(k, k; E) is the atom-dimer s-wave scattering
amplitude (S = 1 + 2 i k f), so a_AD = -A(0, 0; E_D); recombination of three atoms at
rest into the shallow dimer has K3 (events per unit volume and time in a thermal gas
divided by n^3) = 24 sqrt(3) pi^2 a^2 |A0(k_AD)|^2 with A0 the solution at E = 0 driven
by (16/(3a)) M(p, 0; 0); the library's atoms-lost convention is 3 times that.

Discretisation: composite Gauss--Legendre panels, geometric in q from ``qmin`` to
Lambda, one linear panel on [0, qmin]; the on-shell pole of 1/D (below breakup and at
E = 0) is taken by subtraction with an extra node at the pole, which is also a panel
edge (M. I. Haftel & F. Tabakin, Nucl. Phys. A 158, 1 (1970)).
"""

__all__ = ["kernel_log", "kernel_onshell", "momentum_grid", "three_body_force", "atom_dimer_length",
           "atom_dimer_amplitude", "relaxation_beta", "recombination_shallow",
           "recombination_deep", "kappa_a_minus", "above_breakup",
           "fit_atom_dimer_universal", "AtomDimerRankOne", "s_ad_from_stm", "s_ad_fit",
           "relaxation_probability_general",
           "breakup_probability", "threshold_recombination_form", "atom_dimer_contour"]

import math

import numpy as np
from scipy.linalg import lu_factor, lu_solve
from scipy.optimize import brentq

from ...constants import S0
from .scattering import phase_phi

_BOSON = 1.0
_FERMION = -0.5


def _exchange_factor(statistics):
    if statistics == "boson":
        return _BOSON
    if statistics == "fermion":
        return _FERMION
    raise ValueError("statistics must be 'boson' or 'fermion'")


def kernel_log(p, q, energy):
    """One-atom-exchange kernel projected on s waves, without the three-body force.

    Parameters
    ----------
    p, q : array_like
        Momenta (units 1/a); broadcast as an outer product p[:, None], q[None, :].
    energy : complex
        Three-body energy in the centre-of-mass frame (units hbar^2/(m a^2)).

    Returns
    -------
    ndarray
        (1/(2pq)) ln[(p^2 + pq + q^2 - E)/(p^2 - pq + q^2 - E)], equal to
        1/(p^2 + q^2 - E) when pq = 0.
    """
    p = np.asarray(p, dtype=float)[:, None]
    q = np.asarray(q, dtype=float)[None, :]
    pq = p * q
    den = p * p - pq + q * q - energy
    safe = np.where(pq == 0.0, 1.0, pq)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log1p(2.0 * pq / den) / (2.0 * safe)
    return np.where(pq == 0.0, 1.0 / (p * p + q * q - energy), out)


def momentum_grid(cutoff, qmin=1e-6, per_decade=24, order=8, edges=()):
    """Gauss--Legendre nodes and weights on [0, cutoff].

    Parameters
    ----------
    cutoff : float
        Sharp momentum cutoff Lambda (units 1/a).
    qmin : float
        End of the first, linear panel [0, qmin]; panels are geometric above it.
    per_decade : int
        Approximate number of nodes per decade of q.
    order : int
        Gauss--Legendre order per panel.
    edges : sequence of float
        Extra panel edges (e.g. an on-shell pole) inside (qmin, cutoff).

    Returns
    -------
    q, w : ndarray
    """
    x, w = np.polynomial.legendre.leggauss(order)
    npan = max(1, int(math.ceil(math.log10(cutoff / qmin) * per_decade / order)))
    e = np.geomspace(qmin, cutoff, npan + 1)
    extra = [float(v) for v in edges if qmin < v < cutoff]
    e = np.unique(np.concatenate([[0.0], e, extra]))
    lo, hi = e[:-1, None], e[1:, None]
    q = (0.5 * (hi - lo) * x + 0.5 * (hi + lo)).ravel()
    ww = (0.5 * (hi - lo) * w).ravel()
    return q, ww


def _propagator_parts(q, inv_a, energy):
    """sqrt(3q^2/4 - E) and D = -1/a + sqrt(...) written without cancellation."""
    sq = np.sqrt(3.0 * q * q / 4.0 - energy + 0j)
    if inv_a > 0:
        dee = (3.0 * q * q / 4.0 - (energy + inv_a ** 2)) / (sq + inv_a)
    else:
        dee = sq - inv_a
    return sq, dee


def three_body_force(kappa_star, cutoff, **grid):
    """Three-body force h = H/Lambda^2 that puts a 1/a = 0 trimer at E = -kappa*^2.

    With u = (1, ..., 1) and c_j = (4/pi) w_j q_j^2 / sqrt(3q_j^2/4 + kappa*^2), the
    discretised homogeneous equation (1 - K_L) A = h u (c . A) has a solution iff
    h = 1 / (c . (1 - K_L)^{-1} u).

    Parameters
    ----------
    kappa_star : complex
        Binding wave number of the unitarity trimer (units 1/a when used with the
        other functions of this module); complex values kappa* exp(i eta/s0)
        describe deep-dimer losses.
    cutoff : float
        Lambda, same units.
    **grid
        Passed to :func:`momentum_grid`.

    Returns
    -------
    complex
        h (units a^2).
    """
    q, w = momentum_grid(cutoff, **grid)
    energy = -kappa_star ** 2
    c = (4.0 / math.pi) * w * q * q / np.sqrt(3.0 * q * q / 4.0 + kappa_star ** 2 + 0j)
    kl = kernel_log(q, q, energy) * c[None, :]
    x = np.linalg.solve(np.eye(len(q)) - kl, np.ones(len(q)))
    return 1.0 / np.sum(c * x)


def _kappa(kappa_a, eta):
    return kappa_a * np.exp(1j * eta / S0)


def _solve(energy, h, lam, cutoff, drive_k, pole, inv_a=1.0, **grid):
    """Solve the STM equation at 1/a = inv_a = +1 or -1.

    drive_k is the incoming momentum k in the driving term lam (16/3) M(p, k; E);
    pole is the on-shell momentum k0 of 1/D (None when there is none on the path,
    i.e. at the atom-dimer threshold).  Returns (A at the nodes, A(k0) or None,
    a function p -> A(p) by the Nystrom interpolation).
    """
    kedges = () if not pole else (pole,)
    q, w = momentum_grid(cutoff, edges=kedges, **grid)
    sq, dee = _propagator_parts(q, inv_a, energy)
    if pole:
        k0 = pole
        r = (4.0 / 3.0) * (sq + 1.0)                      # 1/D = r / (q^2 - k0^2)
        c = lam * (4.0 / math.pi) * w * q * q * r / (q * q - k0 * k0)
        i0 = (math.log((cutoff + k0) / (cutoff - k0)) / (2.0 * k0)
              + 1j * math.pi / (2.0 * k0))                 # int_0^L dq/(q^2-k0^2-i0)
        r0 = (4.0 / 3.0) * (np.sqrt(3.0 * k0 * k0 / 4.0 - energy + 0j) + 1.0)
        c0 = -lam * (4.0 / math.pi) * k0 * k0 * r0 * (np.sum(w / (q * q - k0 * k0)) - i0)
        nodes = np.concatenate([q, [k0]])
        cw = np.concatenate([c, [c0]])
    else:
        nodes = q
        cw = lam * (4.0 / math.pi) * w * q * q / dee
    kmat = (kernel_log(nodes, nodes, energy) + h) * cw[None, :]
    b = lam * (16.0 * inv_a / 3.0) * (kernel_log(nodes, [drive_k], energy)[:, 0] + h)
    amp = np.linalg.solve(np.eye(len(nodes)) - kmat, b)

    def interp(p):
        p = np.atleast_1d(np.asarray(p, dtype=float))
        return (lam * (16.0 * inv_a / 3.0) * (kernel_log(p, [drive_k], energy)[:, 0] + h)
                + ((kernel_log(p, nodes, energy) + h) * cw[None, :]) @ amp)

    omega = lam * (16.0 * inv_a / 3.0) + np.sum(cw * amp)      # coefficient of h in the equation
    return amp, (amp[-1] if pole else None), interp, omega


def atom_dimer_length(kappa_a, eta=0.0, cutoff=1e6, statistics="boson", **grid):
    """Complex atom-dimer scattering length a_AD / a at threshold (J = 0).

    Parameters
    ----------
    kappa_a : float
        kappa* a (unitarity-trimer binding wave number times a); ignored for fermions.
    eta : float
        Inelasticity parameter eta* (deep dimers); kappa* -> kappa* exp(i eta/s0).
    cutoff : float
        Lambda a.
    statistics : {'boson', 'fermion'}
        'fermion' is the spin-1/2 quartet channel (no three-body force).
    **grid
        Passed to :func:`momentum_grid` (qmin, per_decade, order).

    Returns
    -------
    complex
        a_AD / a = -A(0, 0; E_D) (Im < 0 when eta > 0).
    """
    lam = _exchange_factor(statistics)
    h = 0.0 if lam < 0 else three_body_force(_kappa(kappa_a, eta), cutoff, **grid)
    _, _, interp, _ = _solve(-1.0, h, lam, cutoff, 0.0, None, **grid)
    return -complex(interp([0.0])[0])


def atom_dimer_amplitude(kad, kappa_a, eta=0.0, cutoff=1e6, statistics="boson", **grid):
    """On-shell atom-dimer s-wave amplitude f = A(k, k; E) below breakup.

    Parameters
    ----------
    kad : float
        Atom-dimer wave number k_AD a, 0 < k_AD a < 2/sqrt(3); E = (-1 + 3 k^2/4)/a^2.
    kappa_a, eta, cutoff, statistics, **grid
        As in :func:`atom_dimer_length`.

    Returns
    -------
    complex
        f / a; S = 1 + 2 i (k_AD a)(f/a); f -> -a_AD as k -> 0.
    """
    lam = _exchange_factor(statistics)
    if not 0.0 < kad < 2.0 / math.sqrt(3.0):
        raise ValueError("need 0 < k_AD a < 2/sqrt(3) (below breakup)")
    h = 0.0 if lam < 0 else three_body_force(_kappa(kappa_a, eta), cutoff, **grid)
    energy = -1.0 + 0.75 * kad * kad
    _, a0, _, _ = _solve(energy, h, lam, cutoff, kad, kad, **grid)
    return complex(a0)


def relaxation_beta(kappa_a, eta, kad=None, cutoff=1e6, **grid):
    """Atom-dimer relaxation coefficient beta m / (hbar a) (dimers lost, J = 0).

    dn_D/dt = -beta n_A n_D.  At threshold (``kad`` None) beta = -6 pi hbar Im(a_AD)/m
    (sigma_inel = -4 pi Im a_AD / k, relative velocity 3 hbar k/(2m)); at k_AD a = kad,
    beta = 3 pi hbar (1 - |S|^2) / (2 m k_AD).

    Returns
    -------
    float
    """
    if kad is None:
        return -6.0 * math.pi * atom_dimer_length(kappa_a, eta, cutoff, **grid).imag
    f = atom_dimer_amplitude(kad, kappa_a, eta, cutoff, **grid)
    s = 1.0 + 2j * kad * f
    return 3.0 * math.pi * (1.0 - abs(s) ** 2) / (2.0 * kad)


def _convention(events, convention):
    if convention == "events":
        return events
    if convention == "atoms":
        return 3.0 * events
    raise ValueError("convention must be 'atoms' or 'events'")


def _threshold_recombination(kappa_a, eta, cutoff, inv_a, **grid):
    """(A0 at the dimer pole or None, Omega of A0, h) for three atoms at rest."""
    h = three_body_force(_kappa(kappa_a, eta), cutoff, **grid)
    if inv_a > 0:
        _, a0, _, om = _solve(0.0, h, _BOSON, cutoff, 0.0, 2.0 / math.sqrt(3.0), **grid)
    else:
        _, a0, _, om = _solve(0.0, h, _BOSON, cutoff, 0.0, None, inv_a=-1.0, **grid)
    return a0, om, h


def recombination_shallow(kappa_a, eta=0.0, cutoff=1e6, convention="atoms", **grid):
    """Threshold recombination into the shallow dimer, K3 m / (hbar a^4), a > 0, J = 0.

    Three atoms at rest (E = 0) -> atom + shallow dimer with k_AD = 2/(sqrt(3) a):
    events = 24 sqrt(3) pi^2 a^2 |A0(k_AD)|^2 (docs/stm.md).

    Parameters
    ----------
    kappa_a, eta, cutoff, **grid
        As in :func:`atom_dimer_length`.
    convention : {'atoms', 'events'}
        'atoms': dN/dt = -K3 int n^3 counting three atoms lost per event (the library's
        L3 convention, thermal gas); 'events': recombination events per unit volume
        and time divided by n^3 in a thermal gas (one third of 'atoms').

    Returns
    -------
    float
    """
    a0, _, _ = _threshold_recombination(kappa_a, eta, cutoff, 1.0, **grid)
    return _convention(24.0 * math.sqrt(3.0) * math.pi ** 2 * abs(a0) ** 2, convention)


def recombination_deep(kappa_a, eta, cutoff=1e6, convention="atoms", negative_a=False,
                       **grid):
    """Threshold recombination into deep dimers, K3 m / (hbar a^4), J = 0.

    The only non-Hermitian term is the complex three-body force, so the flux it
    absorbs is the deep-dimer loss: per unit centre-of-mass volume,
    Gamma = (3/(16 pi^2)) Im(h) |Omega_X|^2, Omega_X = -6 pi^2 a^2 Omega(A0) for
    three atoms at rest (docs/stm.md; the constant follows from the unitarity
    identity Im f - k|f|^2 = (3a/16) Im(h) |Omega(A)|^2 of the atom-dimer amplitude).

    Parameters
    ----------
    kappa_a : float
        kappa* |a|.
    eta : float
        Inelasticity parameter (> 0 for a non-zero result).
    cutoff, **grid
        As in :func:`atom_dimer_length` (Lambda |a|).
    convention : {'atoms', 'events'}
        As in :func:`recombination_shallow`.
    negative_a : bool
        a < 0 (then every recombination goes to deep dimers).

    Returns
    -------
    float
        K3 m / (hbar a^4).
    """
    _, om, h = _threshold_recombination(kappa_a, eta, cutoff, -1.0 if negative_a else 1.0,
                                        **grid)
    return _convention(27.0 * math.pi ** 2 / 4.0 * h.imag * abs(om) ** 2, convention)


def kappa_a_minus(cutoff=1e6, **grid):
    """kappa* a_- from the same discretised kernel: the trimer at E = 0 for a < 0.

    At E = 0 and 1/a = -1 the homogeneous equation fixes h (rank-one formula of
    :func:`three_body_force` with D = 1 + sqrt(3) q/2); kappa* is then the unitarity
    trimer of that h, searched in kappa* |a| in (1.2, 1.9).

    Returns
    -------
    float
        kappa* a_- (negative).
    """

    q, w = momentum_grid(cutoff, **grid)
    c = (4.0 / math.pi) * w * q * q / (1.0 + math.sqrt(3.0) / 2.0 * q)
    kl = kernel_log(q, q, 0.0) * c[None, :]
    h0 = 1.0 / np.sum(c * np.linalg.solve(np.eye(len(q)) - kl, np.ones(len(q))))

    def g(lk):
        return (three_body_force(math.exp(lk), cutoff, **grid) - h0).real

    xs = np.linspace(math.log(1.2), math.log(1.9), 61)
    vals = np.array([g(x) for x in xs])
    scale = np.abs(vals).max()
    for i in range(len(xs) - 1):
        if vals[i] * vals[i + 1] < 0:
            r = brentq(g, xs[i], xs[i + 1], xtol=1e-15)
            if abs(g(r)) < 1e-8 * scale:          # a root, not a pole of h
                return -math.exp(r)
    raise RuntimeError("no a_- root in kappa*|a_-| in (1.2, 1.9)")


def fit_atom_dimer_universal(cutoff=1e6, npoints=15, **grid):
    """Locate a* and fit a_AD/a = A + B cot[s0 ln(a/a*)] over one log period (eta = 0).

    a* is the pole of a_AD (root of 1/a_AD in ln kappa* a near the published
    0.0707645, used only as a starting bracket); A, B by linear least squares on
    ``npoints`` points with s0 ln(a/a*) in (0.05, pi - 0.05).

    Returns
    -------
    dict
        kappa_a_star, A, B, C_beta = 3 pi B, max_residual.
    """

    def inv(lk):
        return 1.0 / atom_dimer_length(math.exp(lk), 0.0, cutoff, **grid).real

    lks = brentq(inv, math.log(0.069), math.log(0.0725), xtol=1e-14)
    ks = math.exp(lks)
    th = np.linspace(0.05, math.pi - 0.05, npoints)
    y = np.array([atom_dimer_length(ks * math.exp(t / S0), 0.0, cutoff, **grid).real
                  for t in th])
    x = np.c_[np.ones_like(th), 1.0 / np.tan(th)]
    (a_, b_), *_ = np.linalg.lstsq(x, y, rcond=None)
    return {"kappa_a_star": ks, "A": float(a_), "B": float(b_),
            "C_beta": 3.0 * math.pi * float(b_),
            "max_residual": float(np.abs(x @ [a_, b_] - y).max())}


# ---------------------------------------------------------------------------
# Above the breakup threshold (E > 0): deformed contour
# ---------------------------------------------------------------------------

def _contour(cutoff, phi, big_q, per_decade=48, narc=32, qmin=1e-6, order=8):
    """Nodes/weights in path order: ray q = y e^{-i phi} (0 <= y <= Q), arc |q| = Q back
    to the real axis, real tail [Q, Lambda]."""
    y, wy = momentum_grid(big_q, qmin=qmin, per_decade=per_decade, order=order)
    rot = np.exp(-1j * phi)
    x, w = np.polynomial.legendre.leggauss(narc)
    al = (0.5 * phi * (x + 1.0))[::-1]
    wa = (0.5 * phi * w)[::-1]
    qa = big_q * np.exp(-1j * al)
    wqa = 1j * qa * wa                                   # dq = i Q e^{-i alpha} d alpha
    yt, wt = momentum_grid(cutoff, qmin=big_q, per_decade=per_decade, order=order)
    keep = yt > big_q
    return (np.concatenate([y * rot, qa, yt[keep] + 0j]),
            np.concatenate([wy * rot, wqa, wt[keep] + 0j]))


def _kernel_contour(p, q, energy):
    """kernel_log for p, q on the deformed contour (principal log of the ratio)."""
    p = np.asarray(p)[:, None]
    q = np.asarray(q)[None, :]
    pq = p * q
    return np.log1p(2.0 * pq / (p * p - pq + q * q - energy)) / (2.0 * pq)


def kernel_onshell(k0, q, energy):
    """M(k0, q) for real k0 and q along the contour, with each logarithm continued
    along the path from q -> 0 (where both arguments are k0^2 - E > 0)."""
    zp = k0 * k0 + k0 * q + q * q - energy
    zm = k0 * k0 - k0 * q + q * q - energy
    lp = np.log(np.abs(zp)) + 1j * np.unwrap(np.angle(zp))
    lm = np.log(np.abs(zm)) + 1j * np.unwrap(np.angle(zm))
    return (lp - lm) / (2.0 * k0 * q)


def above_breakup(energy, kappa_a, eta=0.0, cutoff=1e6, phi=None, per_decade=48, narc=32,
                  q_factor=20.0):
    """Atom-dimer scattering at -1/a^2 < E (in particular above breakup, E > 0), J = 0.

    The integral runs along a deformed contour: the ray q = y e^{-i phi} up to
    Q = q_factor max(k_AD, 1/a), the arc |q| = Q back to the real axis, and the real
    axis from Q to Lambda, so the regulator (and h from :func:`three_body_force`) is the
    real-axis one.  The contour passes below the dimer pole and the breakup branch point
    (both at +i0) and above the singularity k_AD/2 - i/a of the on-shell kernel
    (tan phi < 2/(k_AD a)); the on-shell amplitude follows from one more quadrature at
    p = k_AD (contour methods as in E. Braaten, H.-W. Hammer, D. Kang & L. Platter,
    PRA 78, 043605 (2008), who rotate the whole ray).

    Parameters
    ----------
    energy : float
        E m a^2 / hbar^2 (> -1).
    kappa_a, eta, cutoff
        As in :func:`atom_dimer_length`.
    phi : float, optional
        Ray angle; default min(0.5, 0.6 atan(2/(k_AD a))).
    per_decade, narc, q_factor
        Discretisation (nodes per decade on ray and tail; arc nodes; Q/max(k_AD, 1)).

    Returns
    -------
    dict
        k_ad, f (units a), S, p_total = 1 - |S|^2, p_deep (from the unitarity identity
        4k (3a/16) Im h |Omega|^2, docs/stm.md), p_breakup = p_total - p_deep,
        beta_deep and beta_breakup = 3 pi p/(2 k_AD) (hbar a/m, per atom-dimer pair),
        k3_shallow_events = 24 sqrt(3) pi^2 p_breakup / E^2 (E > 0; detailed balance,
        hbar a^4/m, events convention; 3 x for atoms lost).
    """
    if energy <= -1.0:
        raise ValueError("need E > E_D = -1/a^2")
    k0 = math.sqrt(4.0 * (energy + 1.0) / 3.0)
    if phi is None:
        phi = min(0.5, 0.6 * math.atan(2.0 / k0))
    if not 0.0 < phi < math.atan(2.0 / k0):
        raise ValueError("need 0 < phi < atan(2/(k_AD a))")
    h = three_body_force(_kappa(kappa_a, eta), cutoff, per_decade=per_decade)
    q, w = _contour(cutoff, phi, q_factor * max(k0, 1.0), per_decade, narc)
    cw = (4.0 / math.pi) * w * q * q / (-1.0 + np.sqrt(3.0 * q * q / 4.0 - energy))
    kmat = (_kernel_contour(q, q, energy) + h) * cw[None, :]
    mv = kernel_onshell(k0, q, energy)
    amp = np.linalg.solve(np.eye(len(q)) - kmat, (16.0 / 3.0) * (mv + h))
    mkk = math.log((3.0 * k0 * k0 - energy) / (k0 * k0 - energy)) / (2.0 * k0 * k0)
    f = complex((16.0 / 3.0) * (mkk + h) + np.sum((mv + h) * cw * amp))
    omega = (16.0 / 3.0) + np.sum(cw * amp)
    s = 1.0 + 2j * k0 * f
    p_tot = 1.0 - abs(s) ** 2
    p_deep = float(0.75 * k0 * np.imag(h) * abs(omega) ** 2)
    p_br = p_tot - p_deep
    out = {"k_ad": k0, "f": f, "S": s, "p_total": p_tot, "p_deep": p_deep,
           "p_breakup": p_br, "beta_deep": 3.0 * math.pi * p_deep / (2.0 * k0),
           "beta_breakup": 3.0 * math.pi * p_br / (2.0 * k0)}
    if energy > 0:
        out["k3_shallow_events"] = 24.0 * math.sqrt(3.0) * math.pi ** 2 * p_br / energy ** 2
    return out


# ---------------------------------------------------------------------------
# The universal function s_AD(k_AD a) of the Efimov channel (a > 0, J = 0)
# ---------------------------------------------------------------------------

def _ray_edges(big_q, qmin, per_decade, order, dense_hi, dmax):
    """Panel edges on [0, big_q]: geometric from qmin, with every panel below
    ``dense_hi`` split so that no panel there is wider than ``dmax``."""
    npan = max(1, int(math.ceil(math.log10(big_q / qmin) * per_decade / order)))
    e = np.geomspace(qmin, big_q, npan + 1)
    out = [0.0]
    for lo, hi in zip(e[:-1], e[1:]):
        nsub = 1
        if dmax is not None and lo < dense_hi:
            nsub = max(1, int(math.ceil((hi - lo) / dmax)))
        out.extend(np.linspace(lo, hi, nsub + 1)[1:])
    return np.array(out)


def _contour_dense(cutoff, phi, big_q, per_decade, narc, qmin, order, dense_hi, dmax):
    """As :func:`_contour`, with panels of width <= dmax on the ray below dense_hi
    (needed at k_AD a >> 1, where the kernel varies on the scale 1/a near q ~ k_AD)."""
    x, w = np.polynomial.legendre.leggauss(order)
    e = _ray_edges(big_q, qmin, per_decade, order, dense_hi, dmax)
    lo, hi = e[:-1, None], e[1:, None]
    y = (0.5 * (hi - lo) * x + 0.5 * (hi + lo)).ravel()
    wy = (0.5 * (hi - lo) * w).ravel()
    rot = np.exp(-1j * phi)
    xa, wa_ = np.polynomial.legendre.leggauss(narc)
    al = (0.5 * phi * (xa + 1.0))[::-1]
    wa = (0.5 * phi * wa_)[::-1]
    qa = big_q * np.exp(-1j * al)
    wqa = 1j * qa * wa
    yt, wt = momentum_grid(cutoff, qmin=big_q, per_decade=per_decade, order=order)
    keep = yt > big_q
    return (np.concatenate([y * rot, qa, yt[keep] + 0j]),
            np.concatenate([wy * rot, wqa, wt[keep] + 0j]))


def atom_dimer_contour(kad, cutoff, phi=None, per_decade=48, narc=32, q_factor=20.0, order=8,
                       qmin=1e-6, dmax="auto"):
    """The deformed contour of :class:`AtomDimerRankOne` at one k_AD a, with the STM
    integration weights: (E, phi, dmax, nodes q, c = (4/pi) w q^2 / D(q)).

    Defaults: phi = min(0.5, 0.6 atan(2/(k_AD a))); dmax = 0.4 (k_AD a) tan(phi) when
    k_AD a > 4, else no limit (see :class:`AtomDimerRankOne`).
    """
    k0 = float(kad)
    energy = -1.0 + 0.75 * k0 * k0
    if phi is None:
        phi = min(0.5, 0.6 * math.atan(2.0 / k0))
    if not 0.0 < phi < math.atan(2.0 / k0):
        raise ValueError("need 0 < phi < atan(2/(k_AD a))")
    if dmax == "auto":
        dmax = 0.4 * k0 * math.tan(phi) if k0 > 4.0 else None
    q, w = _contour_dense(cutoff, phi, q_factor * max(k0, 1.0), per_decade, narc, qmin,
                          order, 1.5 * max(k0, 1.0), dmax)
    cw = (4.0 / math.pi) * w * q * q / (-1.0 + np.sqrt(3.0 * q * q / 4.0 - energy))
    return energy, phi, dmax, q, cw


class AtomDimerRankOne:
    """Atom-dimer scattering at one k_AD a for every three-body force h at once.

    h enters the STM kernel as a rank-one term, so after one LU solve of the h = 0
    equation on the deformed contour of :func:`above_breakup` (two right-hand sides),
    the on-shell amplitude f(h), S(h) and the deep-dimer probability
    P_deep(h) = (3 k a/4) Im h |Omega(h)|^2 (docs/stm.md, unitarity identity) follow in
    closed form (Sherman--Morrison).  Valid below and above breakup (E > -1/a^2).

    Parameters
    ----------
    kad : float
        k_AD a; E = (-1 + 3 k_AD^2 a^2/4) hbar^2/(m a^2).
    cutoff : float
        Lambda a (the same value must be used for h, :func:`three_body_force`).
    phi : float, optional
        Ray angle; default min(0.5, 0.6 atan(2/(k_AD a))).
    per_decade, narc, q_factor, order, qmin
        Discretisation as in :func:`above_breakup`.
    dmax : float, optional
        Maximum panel width (units 1/a) on the ray below 1.5 max(k_AD a, 1); default
        0.4 (k_AD a)·tan(phi) when k_AD a > 4, else no limit.
    """

    def __init__(self, kad, cutoff=1e7, phi=None, per_decade=48, narc=32, q_factor=20.0,
                 order=8, qmin=1e-6, dmax="auto"):
        k0 = float(kad)
        self.kad = k0
        self.energy, self.phi, self.dmax, q, cw = atom_dimer_contour(
            k0, cutoff, phi, per_decade, narc, q_factor, order, qmin, dmax)
        energy = self.energy
        self.nodes = q.size
        # 1 - K0 built in row blocks (memory), factorised in place as the Fortran-ordered
        # transpose (scipy getrf without a copy), solved with trans=1.

        n = q.size
        kmt = np.empty((n, n), dtype=complex)
        for i0 in range(0, n, 1024):
            i1 = min(n, i0 + 1024)
            blk = -_kernel_contour(q[i0:i1], q, energy) * cw[None, :]
            blk[np.arange(i1 - i0), np.arange(i0, i1)] += 1.0
            kmt[i0:i1] = blk
        mv = kernel_onshell(k0, q, energy)
        lu = lu_factor(kmt.T, overwrite_a=True, check_finite=False)
        xy = lu_solve(lu, np.stack([mv, np.ones_like(mv)], axis=1), trans=1,
                      check_finite=False)
        del kmt, lu
        x, y = xy[:, 0], xy[:, 1]
        self._cx = np.sum(cw * x)
        self._cy = np.sum(cw * y)
        self._mx = np.sum(mv * cw * x)
        self._my = np.sum(mv * cw * y)
        self._mkk = math.log((3.0 * k0 * k0 - energy) / (k0 * k0 - energy)) / (2.0 * k0 * k0)

    def amplitude(self, h):
        """(f, S, P_deep) for three-body force(s) h (array_like complex)."""
        h = np.asarray(h, dtype=complex)
        g = 16.0 / 3.0
        sig = g * (self._cx + h * self._cy) / (1.0 - h * self._cy)
        f = g * (self._mkk + h) + g * (self._mx + h * self._my) + h * sig * self._my + h * sig
        omega = g + sig
        s = 1.0 + 2j * self.kad * f
        p_deep = 0.75 * self.kad * h.imag * np.abs(omega) ** 2
        return f, s, p_deep


def _h_values(kappa_a, eta, cutoff, h_grid=None):
    return np.array([three_body_force(_kappa(kv, ev), cutoff, **(h_grid or {}))
                     for kv, ev in zip(np.ravel(kappa_a), np.ravel(eta))])


def s_ad_fit(solver, etas=(0.1, 0.4), nphi=6, kappa0=0.15, cutoff=1e7, h_grid=None):
    """Extract s_AD and the atom-dimer transmission T_AD from P_deep at ``nphi`` values
    of Phi over one period, for each eta in ``etas``.

    With w = e^{2 i Phi - 2 eta}, P_deep = T_AD (1 - e^{-4 eta}) / |1 + s_AD w|^2, where
    T_AD is the flux fraction an incoming atom-dimer wave sends to short distance in the
    Efimov channel.  Below breakup T_AD = 1 - |s_AD|^2 (one open channel); above breakup
    1 - |s_AD|^2 = T_AD + T_breakup (the Efimov-channel flux also goes out as three
    atoms).  Linear least squares:

        (1 - e^{-4 eta})/P = a0 + a1 e^{-4 eta} + e^{-2 eta}(a2 cos 2Phi + a3 sin 2Phi),
        a0 = 1/T_AD, a1 = |s|^2/T_AD, a2 = 2 Re s/T_AD, a3 = -2 Im s/T_AD,

    and |s|^2 = a1 T_AD is an independent check of s = T_AD (a2 - i a3)/2.

    Returns
    -------
    dict
        s_ad, t_ad (T_AD), one_minus_abs_s2 (1 - |s_AD|^2), modulus_check
        (a1 T_AD - |s|^2), max_rel_residual of the linear fit, coef (a0..a3).
    """

    kap = kappa0 * np.exp(np.arange(nphi) * math.pi / (nphi * S0))
    kk = np.tile(kap, len(etas))
    ee = np.repeat(np.asarray(etas, dtype=float), nphi)
    hs = _h_values(kk, ee, cutoff, h_grid)
    _, _, p = solver.amplitude(hs)
    ph2 = 2.0 * np.asarray(phase_phi(kk), dtype=float)
    lhs = (1.0 - np.exp(-4.0 * ee)) / p
    xm = np.c_[np.ones_like(ee), np.exp(-4.0 * ee), np.exp(-2.0 * ee) * np.cos(ph2),
               np.exp(-2.0 * ee) * np.sin(ph2)]
    coef, *_ = np.linalg.lstsq(xm, lhs, rcond=None)
    a0, a1, a2, a3 = coef
    t = 1.0 / a0
    s = t * complex(a2, -a3) / 2.0
    out = {"s_ad": s, "t_ad": t, "one_minus_abs_s2": 1.0 - abs(s) ** 2,
           "modulus_check": a1 * t - abs(s) ** 2,
           "max_rel_residual": float(np.max(np.abs(xm @ coef - lhs) / np.abs(lhs))),
           "coef": coef}
    if solver.energy > 0:
        # breakup: P_break |1 + s w|^2 = A + 2 Re(B w) + C |w|^2 (S is a Moebius map of w)
        f, smat, _ = solver.amplitude(hs)
        w = np.exp(1j * ph2 - 2.0 * ee)
        pb = 1.0 - np.abs(smat) ** 2 - p
        yb = pb * np.abs(1.0 + s * w) ** 2
        xb = np.c_[np.ones_like(ee), 2.0 * w.real, -2.0 * w.imag, np.abs(w) ** 2]
        cb, *_ = np.linalg.lstsq(xb, yb, rcond=None)
        out.update(breakup_A=float(cb[0]), breakup_B=complex(cb[1], cb[2]),
                   breakup_C=float(cb[3]),
                   breakup_max_abs_residual=float(np.max(np.abs(xb @ cb - yb))))
    return out


def breakup_probability(s_ad, a_, b_, c_, kappa_a, eta):
    """P_break = (A + 2 Re(B w) + C |w|^2)/|1 + s_AD w|^2, w = e^{2 i Phi - 2 eta}."""

    w = np.exp(2j * np.asarray(phase_phi(kappa_a), dtype=float) - 2.0 * eta)
    return (a_ + 2.0 * np.real(b_ * w) + c_ * np.abs(w) ** 2) / np.abs(1.0 + s_ad * w) ** 2


def relaxation_probability_general(s_ad, t_ad, kappa_a, eta):
    """P_deep = T_AD (1 - e^{-4 eta}) / |1 + s_AD e^{2 i Phi - 2 eta}|^2 (above and below
    breakup; T_AD = 1 - |s_AD|^2 below)."""

    w = np.exp(2j * np.asarray(phase_phi(kappa_a), dtype=float) - 2.0 * eta)
    return t_ad * (1.0 - math.exp(-4.0 * eta)) / np.abs(1.0 + s_ad * w) ** 2


def s_ad_from_stm(kad, etas=(0.1, 0.4), nphi=6, kappa0=0.15, cutoff=None, full=False, **num):
    """Complex s_AD(k_AD a) of the Efimov channel from STM solves (a > 0, J = 0).

    s_AD is the long-distance reflection amplitude of docs/solver.md 5b: with
    w = e^{2 i Phi - 2 eta}, the deep-dimer (relaxation) probability of an incoming
    atom-dimer s wave is P = T_AD (1 - e^{-4 eta})/|1 + s_AD w|^2, T_AD = 1 - |s_AD|^2
    below breakup.  Above breakup the breakup channels are more outgoing channels: the
    denominator keeps its form, but the Efimov-channel flux 1 - |s_AD|^2 is shared
    between atom + dimer and three atoms, so T_AD < 1 - |s_AD|^2 is a second function.
    Both are extracted from P_deep at ``nphi`` values of kappa* a (one period of Phi)
    and two values of eta by linear least squares in 1/P (:func:`s_ad_fit`); one LU
    solve serves all kappa* (:class:`AtomDimerRankOne`).

    Parameters
    ----------
    kad : float
        k_AD a > 0.
    etas, nphi, kappa0
        Extraction parameters (two or more eta > 0; see :func:`s_ad_fit`).
    cutoff : float, optional
        Lambda a; default 1e7 max(1, k_AD a).
    **num
        Passed to :class:`AtomDimerRankOne` (phi, per_decade, narc, q_factor, dmax).
    full : bool
        Return the whole :func:`s_ad_fit` dict (with T_AD) instead of s_AD.

    Returns
    -------
    complex
    """
    if cutoff is None:
        cutoff = 1e7 * max(1.0, kad)
    sol = AtomDimerRankOne(kad, cutoff=cutoff, **num)
    r = s_ad_fit(sol, etas, nphi, kappa0, cutoff)
    return r if full else r["s_ad"]


def threshold_recombination_form(s_threshold, etas=(0.1, 0.4), nphi=6, kappa0=0.15,
                                 cutoff=1e7, **grid):
    """E -> 0 limits of the J = 0 three-body quantities in the Efimov-channel form.

    The breakup coefficients and the three-atom -> Efimov-channel transmission
    T_break = 1 - |s_AD|^2 - T_AD all vanish like E^2 at the breakup threshold, while
    the recombination rates stay finite: with w = e^{2 i Phi - 2 eta} and s = s_AD at
    k_AD a = 2/sqrt 3,

        K3_shallow(0) |1 + s w|^2 / (24 sqrt 3 pi^2) = alpha + 2 Re(b w) + c |w|^2,
        K3_deep(0) |1 + s w|^2 / (24 sqrt 3 pi^2 (1 - e^{-4 eta})) = tau,

    (events convention, units hbar a^4/m), so alpha, b, c and tau are the limits of
    A/E^2, B/E^2, C/E^2 and T_break/E^2 (E in hbar^2/(m a^2)).  They are fitted by linear
    least squares to direct threshold solves (:func:`recombination_shallow`,
    :func:`recombination_deep`) at ``nphi`` values of Phi for each eta; that the deep
    rate needs a single constant tau is a check of the form (``deep_spread``).

    Returns
    -------
    dict
        alpha, b (complex), c, tau, shallow_max_rel_residual, deep_spread (max relative
        deviation of the per-point tau from their mean).
    """

    kap = kappa0 * np.exp(np.arange(nphi) * math.pi / (nphi * S0))
    kk = np.tile(kap, len(etas))
    ee = np.repeat(np.asarray(etas, dtype=float), nphi)
    norm = 24.0 * math.sqrt(3.0) * math.pi ** 2
    shallow = np.array([recombination_shallow(k, e, cutoff, "events", **grid)
                        for k, e in zip(kk, ee)])
    deep = np.array([recombination_deep(k, e, cutoff, "events", **grid)
                     for k, e in zip(kk, ee)])
    w = np.exp(2j * np.asarray(phase_phi(kk), dtype=float) - 2.0 * ee)
    den = np.abs(1.0 + s_threshold * w) ** 2
    y = shallow * den / norm
    xm = np.c_[np.ones_like(ee), 2.0 * w.real, -2.0 * w.imag, np.abs(w) ** 2]
    cb, *_ = np.linalg.lstsq(xm, y, rcond=None)
    taus = deep * den / (norm * -np.expm1(-4.0 * ee))
    tau = float(np.mean(taus))
    return {"alpha": float(cb[0]), "b": complex(cb[1], cb[2]), "c": float(cb[3]), "tau": tau,
            "shallow_max_rel_residual": float(np.max(np.abs(xm @ cb - y) / np.abs(y))),
            "deep_spread": float(np.max(np.abs(taus / tau - 1.0)))}

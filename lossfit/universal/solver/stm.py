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
detailed balance (:func:`above_breakup`).

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

__all__ = ["kernel_log", "momentum_grid", "three_body_force", "atom_dimer_length",
           "atom_dimer_amplitude", "relaxation_beta", "recombination_shallow",
           "recombination_deep", "kappa_a_minus", "above_breakup",
           "fit_atom_dimer_universal"]

import math

import numpy as np

from lossfit.constants import S0

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
    from scipy.optimize import brentq

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
    from scipy.optimize import brentq

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


def _kernel_onshell(k0, q, energy):
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
    mv = _kernel_onshell(k0, q, energy)
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

"""Two identical bosons B and a third atom X: the momentum-space (STM) equations, J = 0.

A generalisation of :mod:`lossfit.universal.solver.stm` (three identical bosons) to
the B-B-X system with a resonant B-X scattering length a and an optional B-B zero-range
interaction a_bb; every factor is derived in docs/stm-mixture.md.

Units: hbar = 1, **2 mu = 1** with mu = m_B m_X/(m_B + m_X) the B-X reduced mass, and
lengths in units of |a|.  The energy variable is eps = 2 mu E a^2/hbar^2, so the B-X dimer
sits at eps = -1 and a trimer at 1/a = 0 at eps = -kappa*^2, i.e. E_T = -hbar^2
kappa*^2/(2 mu) (the convention for kappa* here; for equal masses 2 mu = m and this is
the identical-boson kappa* of docs/stm.md).  Rates are returned in units of m_B:
K3 m_B/(hbar a^4) and beta m_B/(hbar a).

Mass parameter: gamma = m_B/(m_B + m_X) = sin(phi) (Braaten & Hammer, Phys. Rep. 428, 259
(2006), the angle phi of the B-B-X Efimov equation).

Channels (Faddeev components): "BX" - spectator B, interacting B-X pair (two components,
F(k_1) and F(k_2), equal by Bose symmetry); "BB" - spectator X, interacting B-B pair
(present only when a_bb != 0).  With Z_c the amplitudes (X_c = g_c Z_c, docs/stm-mixture.md
section 1),

    Z_c(p) = z0_c(p) + sum_c' int_0^Lambda dq q^2 [K_cc'(p, q) + h rho_c rho_c'] g_c' Z_c'(q)/D_c'(q),

    K_cc'(p, q) = (1/(C pq)) ln[(A p^2 + B q^2 + C pq - eps)/(A p^2 + B q^2 - C pq - eps)],
    (A, B, C) = (1, 1, 2 gamma) for BX-BX, (2(1 - gamma), 1, 2(1 - gamma)) for BX-BB,
    (1, 2(1 - gamma), 2(1 - gamma)) for BB-BX, no BB-BB term;
    g_BX = 1/pi, g_BB = 4(1 - gamma)/pi,
    D_c(q) = -1/a_c + sqrt(alpha_c q^2 - e_c eps),
    alpha_BX = 1 - gamma^2, e_BX = 1;  alpha_BB = (1 + gamma)/(4(1 - gamma)), e_BB = 1/(2(1 - gamma)),
    rho_BX = 1, rho_BB = 1/(4(1 - gamma)).

The three-body force h (rank one, Bedaque, Hammer & van Kolck, PRL 82, 463 (1999)) is fixed
as in :func:`lossfit.universal.solver.stm.three_body_force`: the 1/a = 0 equation (and
1/a_bb = 0, the ratio a_bb/a being held fixed) must have a trimer at eps = -kappa*^2; the
complex kappa* exp(i eta/s0) describes deep-dimer losses (Braaten & Hammer 2006).

The quadrature grid is :func:`lossfit.universal.solver.stm.momentum_grid`; on-shell poles
of 1/D_c are subtracted as in docs/stm.md section 2.
"""

__all__ = ["mass_parameter", "exchange_kernel", "mellin_transform", "efimov_exponent",
           "efimov_exponent_closed_form", "MixtureSTM"]

import copy
import math

import numpy as np
from scipy.integrate import quad
from scipy.optimize import brentq, minimize_scalar

from .stm import momentum_grid


def _contour(cutoff, phi, big_q, per_decade, narc, dense_hi, dmax, order=8, qmin=1e-6):
    """Nodes and weights in path order: the ray q = y e^{-i phi} (0 <= y <= Q; geometric
    panels, those below ``dense_hi`` split to width <= ``dmax``), the arc |q| = Q back to the
    real axis, the real tail [Q, Lambda]."""
    npan = max(1, int(math.ceil(math.log10(big_q / qmin) * per_decade / order)))
    geometric = np.geomspace(qmin, big_q, npan + 1)
    edges = [0.0]
    for lo, hi in zip(geometric[:-1], geometric[1:]):
        nsub = max(1, int(math.ceil((hi - lo) / dmax))) if dmax is not None and lo < dense_hi else 1
        edges.extend(np.linspace(lo, hi, nsub + 1)[1:])
    edges = np.asarray(edges)
    x, w = np.polynomial.legendre.leggauss(order)
    lo, hi = edges[:-1, None], edges[1:, None]
    y = (0.5 * (hi - lo) * x + 0.5 * (hi + lo)).ravel()
    wy = (0.5 * (hi - lo) * w).ravel()
    rot = np.exp(-1j * phi)
    xa, wa = np.polynomial.legendre.leggauss(narc)
    angle = (0.5 * phi * (xa + 1.0))[::-1]
    qa = big_q * np.exp(-1j * angle)
    wqa = 1j * qa * (0.5 * phi * wa)[::-1]                # dq = i Q e^{-i alpha} d alpha
    yt, wt = momentum_grid(cutoff, qmin=big_q, per_decade=per_decade, order=order)
    keep = yt > big_q
    return (np.concatenate([y * rot, qa, yt[keep] + 0j]), np.concatenate([wy * rot, wqa, wt[keep] + 0j]))


def _contour_kernel(p, q, energy, blocks):
    """:func:`exchange_kernel` for complex p, q on the contour (principal log of the ratio)."""
    a_c, b_c, c_c = blocks
    pq = c_c * p[:, None] * q[None, :]
    base = a_c * p[:, None] ** 2 + b_c * q[None, :] ** 2 - energy
    return np.log1p(2.0 * pq / (base - pq)) / pq


def _onshell_kernel(k, q, energy, blocks):
    """K(k, q) for real k and q along the contour, each logarithm continued along the path
    from q -> 0 (where both arguments are A k^2 - eps > 0)."""
    a_c, b_c, c_c = blocks
    plus = a_c * k * k + c_c * k * q + b_c * q * q - energy
    minus = a_c * k * k - c_c * k * q + b_c * q * q - energy
    log_plus = np.log(np.abs(plus)) + 1j * np.unwrap(np.angle(plus))
    log_minus = np.log(np.abs(minus)) + 1j * np.unwrap(np.angle(minus))
    return (log_plus - log_minus) / (c_c * k * q)


# block coefficients (A, B, C) of K_cc' as functions of gamma (docs/stm-mixture.md section 1)
_BLOCKS = {
    (0, 0): lambda g: (1.0, 1.0, 2.0 * g),
    (0, 1): lambda g: (2.0 * (1.0 - g), 1.0, 2.0 * (1.0 - g)),
    (1, 0): lambda g: (1.0, 2.0 * (1.0 - g), 2.0 * (1.0 - g)),
}


def mass_parameter(mass_ratio):
    """gamma = m_B/(m_B + m_X) = sin(phi) from the mass ratio m_B/m_X.

    Parameters
    ----------
    mass_ratio : float
        m_B/m_X > 0 (B the identical bosons).

    Returns
    -------
    float
    """
    mass_ratio = float(mass_ratio)
    if not mass_ratio > 0:
        raise ValueError("mass_ratio m_B/m_X must be positive")
    return mass_ratio / (1.0 + mass_ratio)


def exchange_kernel(p, q, energy, a_coef, b_coef, c_coef):
    """s-wave projected one-particle-exchange kernel of the B-B-X equations.

    Parameters
    ----------
    p, q : array_like
        Momenta; broadcast as an outer product p[:, None], q[None, :] (complex q allowed).
    energy : complex
        eps = 2 mu E (units 1/|a|^2 or kappa*^2).
    a_coef, b_coef, c_coef : float
        The coefficients (A, B, C) of the block (module docstring).

    Returns
    -------
    ndarray
        (1/(C pq)) ln[(A p^2 + B q^2 + C pq - eps)/(A p^2 + B q^2 - C pq - eps)], equal to
        2/(A p^2 + B q^2 - eps) when pq = 0.
    """
    p = np.asarray(p)[:, None]
    q = np.asarray(q)[None, :]
    pq = c_coef * p * q
    base = a_coef * p * p + b_coef * q * q - energy
    safe = np.where(pq == 0.0, 1.0, pq)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log1p(2.0 * pq / (base - pq)) / safe
    return np.where(pq == 0.0, 2.0 / base, out)


def _kernel_at_one(x, a_c, b_c, c_c):
    """K(1, x; 0) of one block (scalar form of :func:`exchange_kernel`)."""
    return math.log1p(2.0 * c_c * x / (a_c + b_c * x * x - c_c * x)) / (c_c * x)


def mellin_transform(s0, gamma, block=(0, 0)):
    """Mellin transform int_0^inf x^(i s0) K(1, x; 0) dx of one kernel block at E = 0.

    The 1/a = 0, E = 0 equation is scale invariant; the power law Z/D ~ p^(-2 + i s0)
    solves it when the Mellin transforms of the blocks satisfy the condition of
    :func:`efimov_exponent` (docs/stm-mixture.md section 2).

    Parameters
    ----------
    s0 : float
        Imaginary part of the exponent.
    gamma : float
        m_B/(m_B + m_X).
    block : tuple of int
        (0, 0) BX-BX, (0, 1) BX-BB, (1, 0) BB-BX.

    Returns
    -------
    complex
    """
    a_c, b_c, c_c = _BLOCKS[tuple(block)](gamma)

    def kern(t):
        x = math.exp(t)
        return _kernel_at_one(x, a_c, b_c, c_c) * x

    re = quad(lambda t: (kern(t) * complex(math.cos(s0 * t), math.sin(s0 * t))).real,
              -60.0, 60.0, limit=500, epsabs=1e-13, epsrel=1e-12)[0]
    im = quad(lambda t: (kern(t) * complex(math.cos(s0 * t), math.sin(s0 * t))).imag,
              -60.0, 60.0, limit=500, epsabs=1e-13, epsrel=1e-12)[0]
    return complex(re, im)


def _mellin_real(s0, gamma):
    """Re of :func:`mellin_transform` for the BX-BX block (real: K(1, x) = K(1, 1/x)/x^2)."""
    a_c, b_c, c_c = _BLOCKS[(0, 0)](gamma)

    def integrand(t):
        x = math.exp(t)
        return _kernel_at_one(x, a_c, b_c, c_c) * x * math.cos(s0 * t)

    return quad(integrand, -60.0, 60.0, limit=500, epsabs=1e-13, epsrel=1e-12)[0]


def _exponent_condition(s0, gamma, three_pairs):
    g = gamma
    mff = _mellin_real(s0, g) / math.pi
    lhs = math.sqrt(1.0 - g * g) - mff
    if not three_pairs:
        return lhs
    mfg = mellin_transform(s0, g, (0, 1))
    g_bb = 4.0 * (1.0 - g) / math.pi
    alpha_bb = (1.0 + g) / (4.0 * (1.0 - g))
    # M_BB-BX(i s0) = M_BX-BB(-i s0) = conj(M_BX-BB(i s0)) (docs/stm-mixture.md section 2)
    return lhs * math.sqrt(alpha_bb) - g_bb * abs(mfg) ** 2 / math.pi


def efimov_exponent(mass_ratio, three_pairs=False, s_max=6.0):
    """Efimov exponent s0 of the B-B-X system from the Mellin transform of the kernel.

    Parameters
    ----------
    mass_ratio : float
        m_B/m_X.
    three_pairs : bool
        False: two resonant pairs (B-X only, a_bb = 0); True: all three pairs resonant
        (coupled BX and BB channels).
    s_max : float
        Upper end of the search.

    Returns
    -------
    float
        s0 (J = 0); lambda = exp(pi/s0) is the discrete scaling factor.
    """
    g = mass_parameter(mass_ratio)
    grid = np.linspace(1e-3, s_max, 25)
    vals = [_exponent_condition(s, g, three_pairs) for s in grid]
    for i in range(len(grid) - 1):
        if vals[i] * vals[i + 1] < 0:
            return brentq(_exponent_condition, grid[i], grid[i + 1], args=(g, three_pairs),
                          xtol=1e-13)
    raise RuntimeError("no Efimov exponent found (no Efimov effect for this system?)")


def efimov_exponent_closed_form(mass_ratio):
    """s0 from s0 cosh(pi s0/2) sin(2 phi) = 2 sinh(phi s0), sin(phi) = m_B/(m_B + m_X)
    (two resonant pairs; Braaten & Hammer, Phys. Rep. 428, 259 (2006)).

    Returns
    -------
    float
    """
    phi = math.asin(mass_parameter(mass_ratio))

    def f(s):
        return s * math.cosh(math.pi * s / 2.0) * math.sin(2.0 * phi) - 2.0 * math.sinh(phi * s)

    grid = np.linspace(1e-3, 8.0, 801)
    vals = [f(s) for s in grid]
    for i in range(len(grid) - 1):
        if vals[i] * vals[i + 1] < 0:
            return brentq(f, grid[i], grid[i + 1], xtol=1e-14)
    raise RuntimeError("no root")


class MixtureSTM:
    """STM solver for two identical bosons B and a third atom X (J = 0).

    Parameters
    ----------
    mass_ratio : float
        m_B/m_X.
    a_bb_ratio : float
        a_bb/a, held fixed as a varies (0: no B-B interaction, a single channel).  With
        a_bb_ratio != 0 the three-body parameter is defined at 1/a = 1/a_bb = 0.
    cutoff : float
        Lambda |a| (Lambda/kappa* for :meth:`trimer_branch`).
    qmin, per_decade, order : float, int, int
        Quadrature (:func:`lossfit.universal.solver.stm.momentum_grid`).
    statistics : {'boson', 'fermion'}
        'fermion': B identical fermions (exchange term with sign -1, no B-B s-wave
        channel, no three-body force; J = 0 has no Efimov effect).
    rho_bb : float, optional
        Weight of the B-B channel in the rank-one three-body force (default
        1/(4(1 - gamma)), docs/stm-mixture.md section 1); universal results do not depend on
        it as Lambda -> infinity.
    """

    def __init__(self, mass_ratio, a_bb_ratio=0.0, cutoff=1e6, qmin=1e-6, per_decade=24,
                 order=8, statistics="boson", rho_bb=None):
        self.mass_ratio = float(mass_ratio)
        self.gamma = mass_parameter(mass_ratio)
        self.a_bb_ratio = float(a_bb_ratio)
        if statistics not in ("boson", "fermion"):
            raise ValueError("statistics must be 'boson' or 'fermion'")
        if statistics == "fermion" and self.a_bb_ratio != 0.0:
            raise ValueError("identical fermions have no s-wave B-B interaction")
        self.statistics = statistics
        self.cutoff = float(cutoff)
        self.grid = dict(qmin=qmin, per_decade=per_decade, order=order)
        g = self.gamma
        chans = [dict(g=1.0 / math.pi, alpha=1.0 - g * g, escale=1.0, ratio=1.0, rho=1.0,
                      narr=2, nu=1.0 / (2.0 * (1.0 - g * g)), mu=0.5)]
        if self.a_bb_ratio != 0.0:
            chans.append(dict(g=4.0 * (1.0 - g) / math.pi, alpha=(1.0 + g) / (4.0 * (1.0 - g)),
                              escale=1.0 / (2.0 * (1.0 - g)), ratio=self.a_bb_ratio,
                              rho=1.0 / (4.0 * (1.0 - g)) if rho_bb is None else float(rho_bb),
                              narr=1, nu=1.0 / (1.0 + g),
                              mu=1.0 / (4.0 * (1.0 - g))))
        self.channels = chans
        self.s0 = (efimov_exponent(mass_ratio, three_pairs=self.a_bb_ratio != 0.0)
                   if statistics == "boson" else float("nan"))
        #: K3 and beta: units of 2 mu -> units of m_B (m_B/(2 mu) = 1/(2(1 - gamma)))
        self.to_mb = 1.0 / (2.0 * (1.0 - g))

    # ------------------------------------------------------------------ helpers
    @property
    def scaling_factor(self):
        """lambda = exp(pi/s0)."""
        return math.exp(math.pi / self.s0)

    def _sign(self, c, cp):
        return -1.0 if (self.statistics == "fermion" and c == cp == 0) else 1.0

    def _thresholds(self, inv_a):
        """k_c^2 alpha_c = e_c eps + 1/a_c^2 vanishes at eps_c = -1/(e_c a_c^2)."""
        out = []
        for ch in self.channels:
            ia = inv_a / ch["ratio"]
            out.append(-ia * ia / ch["escale"] if ia > 0 else 0.0)
        return out

    def _parts(self, energy, inv_a, cutoff, poles=True):
        """Nodes and weights g_c w q^2/D_c per channel (pole subtraction where open)."""
        cut = self.cutoff if cutoff is None else cutoff
        chinfo = []
        edges = []
        for ch in self.channels:
            ia = inv_a / ch["ratio"]
            k2 = None
            if poles and ia > 0 and np.isreal(energy):
                k2v = (ch["escale"] * float(np.real(energy)) + ia * ia) / ch["alpha"]
                if k2v > 0:
                    k2 = k2v
                    edges.append(math.sqrt(k2v))
            chinfo.append((ch, ia, k2))
        q, w = momentum_grid(cut, edges=edges, **self.grid)
        parts = []
        for ch, ia, k2 in chinfo:
            al, es, g = ch["alpha"], ch["escale"], ch["g"]
            kap = np.sqrt(al * q * q - es * energy + 0j)
            if k2 is None:
                if ia > 0:
                    dee = (al * q * q - (es * energy + ia * ia)) / (kap + ia)
                else:
                    dee = kap - ia
                parts.append((q.astype(complex), g * w * q * q / dee, None))
            else:
                k0 = math.sqrt(k2)
                r = (kap + ia) / al                                  # 1/D = r/(q^2 - k0^2)
                c = g * w * q * q * r / (q * q - k2)
                i0 = (math.log((cut + k0) / (cut - k0)) / (2.0 * k0) + 1j * math.pi / (2.0 * k0))
                r0 = (np.sqrt(al * k2 - es * energy + 0j) + ia) / al
                c0 = -g * k2 * r0 * (np.sum(w / (q * q - k2)) - i0)
                parts.append((np.concatenate([q, [k0]]).astype(complex),
                              np.concatenate([c, [c0]]), k0))
        return parts

    def _kernel(self, energy, h, nodes_p, nodes_q=None):
        """V = K + h rho rho^T between the node lists (lists of arrays, one per channel)."""
        nodes_q = nodes_p if nodes_q is None else nodes_q
        rows = []
        for c, pc in enumerate(nodes_p):
            blocks = []
            for cp, qc in enumerate(nodes_q):
                rr = self.channels[c]["rho"] * self.channels[cp]["rho"]
                if (c, cp) in _BLOCKS:
                    kk = self._sign(c, cp) * exchange_kernel(
                        np.real(pc), np.real(qc), energy, *_BLOCKS[(c, cp)](self.gamma))
                else:
                    kk = np.zeros((len(pc), len(qc)))
                blocks.append(kk + h * rr)
            rows.append(np.concatenate(blocks, axis=1))
        return np.concatenate(rows, axis=0)

    # ------------------------------------------------------------------ three-body force
    def three_body_force(self, kappa_star, cutoff=None):
        """h that puts a 1/a = 0 trimer at eps = -kappa*^2 (rank-one closed form).

        Parameters
        ----------
        kappa_star : complex
            kappa* (units of the momenta, 1/|a|); kappa* exp(i eta/s0) for deep dimers.
        cutoff : float, optional
            Lambda in the same units (default: the solver's).

        Returns
        -------
        complex
        """
        if self.statistics == "fermion":
            return 0.0
        energy = -complex(kappa_star) ** 2
        parts = self._parts(energy, 0.0, cutoff, poles=False)
        nodes = [p[0] for p in parts]
        cw = np.concatenate([p[1] for p in parts])
        rho = np.concatenate([np.full(len(p[0]), ch["rho"]) for p, ch in zip(parts, self.channels)])
        kmat = self._kernel(energy, 0.0, nodes) * cw[None, :]
        x = np.linalg.solve(np.eye(len(cw)) - kmat, rho.astype(complex))
        h = 1.0 / np.sum(rho * cw * x)
        return complex(h) if np.iscomplexobj(kappa_star) or abs(h.imag) > 0 else float(h.real)

    def _kappa(self, kappa_a, eta):
        return kappa_a * np.exp(1j * eta / self.s0) if eta else kappa_a

    # ------------------------------------------------------------------ inhomogeneous solve
    def _solve(self, energy, h, inv_a, drive, cutoff=None):
        """Solve for Z with the drive F_c' ⊃ coef (2 pi)^3 delta^3(p - k) for (c', k, coef).

        Returns (parts, Z per channel, interp(c, p) -> Z_c(p), Omega_Z).
        """
        parts = self._parts(energy, inv_a, cutoff)
        nodes = [p[0] for p in parts]
        cw = np.concatenate([p[1] for p in parts])
        rho = np.concatenate([np.full(len(p[0]), ch["rho"]) for p, ch in zip(parts, self.channels)])

        def z0(pnodes):
            out = 0.0
            for cp, k, coef in drive:
                qs = [np.array([k]) if i == cp else np.zeros(0) for i in range(len(self.channels))]
                out = out + (-2.0 * math.pi ** 2 * coef) * self._kernel(energy, h, pnodes, qs)[:, 0]
            return out

        vmat = self._kernel(energy, h, nodes)
        # the drive grows like 1/p^2 at small p (E = 0): solve the similarity-scaled system
        # S (1 - V G) S^-1 (S Z) = S z0 with S = p^2/(1 + p^2), which keeps the small
        # amplitudes at p ~ 1/a accurate (unscaled, they lose up to 18 digits to pivoting)
        allq = np.real(np.concatenate(nodes))
        sc = allq * allq / (1.0 + allq * allq)
        mat = (np.eye(len(cw)) - vmat * cw[None, :]) * (sc[:, None] / sc[None, :])
        zz = np.linalg.solve(mat, sc * z0(nodes).astype(complex)) / sc
        splits = np.cumsum([len(n) for n in nodes])[:-1]
        zs = np.split(zz, splits)
        omega = (-2.0 * math.pi ** 2 * sum(coef * self.channels[cp]["rho"] for cp, _, coef in drive)
                 + np.sum(rho * cw * zz))

        def interp(c, p):
            p = np.atleast_1d(np.asarray(p, dtype=float))
            pn = [p if i == c else np.zeros(0) for i in range(len(self.channels))]
            return z0(pn) + (self._kernel(energy, h, pn, nodes) * cw[None, :]) @ zz

        return parts, zs, interp, omega

    # ------------------------------------------------------------------ atom-dimer
    def atom_dimer_length(self, kappa_a, eta=0.0, symmetric_drive=False):
        """a_AD/a for B + (BX) at threshold (complex when eta > 0).

        Parameters
        ----------
        kappa_a : float
            kappa* a (a > 0).
        eta : float
            Deep-dimer parameter.
        symmetric_drive : bool
            Also drive the X + (BB) channel with the same amplitude (with a_bb = a and equal
            masses: the fully symmetric incoming state of three identical bosons).

        Returns
        -------
        complex
        """
        h = self.three_body_force(self._kappa(kappa_a, eta))
        drive = [(0, 0.0, 1.0)]
        if symmetric_drive:
            drive.append((1, 0.0, 1.0))
        _, _, interp, _ = self._solve(-1.0, h, 1.0, drive)
        return complex(interp(0, [0.0])[0]) / (2.0 * math.pi ** 2 * (1.0 - self.gamma ** 2))

    def atom_dimer_amplitude(self, kad, kappa_a, eta=0.0):
        """On-shell B + (BX) s-wave amplitude below breakup and the deep-loss identity.

        Parameters
        ----------
        kad : float
            Atom-dimer wave number k a, eps = -1 + (1 - gamma^2) k^2 < 0.
        kappa_a, eta : float
            As in :meth:`atom_dimer_length`.

        Returns
        -------
        dict
            f (units a), S = 1 + 2 i k f, p_total = 1 - abs(S)^2 and p_deep =
            k Im(h) abs(Omega_Z)^2/(pi^4 (1 - gamma^2)) (docs/stm-mixture.md section 3).
        """
        g2 = 1.0 - self.gamma ** 2
        energy = -1.0 + g2 * kad * kad
        h = self.three_body_force(self._kappa(kappa_a, eta))
        parts, zs, _, omega = self._solve(energy, h, 1.0, [(0, kad, 1.0)])
        f = -complex(zs[0][-1]) / (2.0 * math.pi ** 2 * g2)
        s = 1.0 + 2j * kad * f
        p_deep = kad * np.imag(h) * abs(omega) ** 2 / (math.pi ** 4 * g2)
        return {"f": f, "S": s, "p_total": 1.0 - abs(s) ** 2, "p_deep": float(p_deep)}

    def atom_dimer_contour(self, kad, kappa_a, eta=0.0, phi=None, per_decade=None, narc=32, q_factor=20.0,
                           dmax_factor=0.4):
        """B + (BX) s-wave scattering below and above breakup on a deformed contour (a_bb = 0).

        Above breakup (eps = -1 + (1 - gamma^2) k^2 > 0) the real-axis kernel has logarithmic
        singularities where p^2 + q^2 +- 2 gamma p q = eps and the propagator a branch point,
        all at +i0. The integral therefore runs along the ray q = y e^{-i phi} up to
        Q = q_factor max(k, 1), the arc |q| = Q back to the real axis and the real axis to
        Lambda, so that the regulator and h are the real-axis ones (the method of
        :func:`lossfit.universal.solver.stm.above_breakup` for identical bosons, docs/stm.md
        section 5). Conditions for this kernel: the ray passes above the singularity
        gamma k - i of the on-shell kernel K(k, q) (tan phi < 1/(gamma k)), and below
        acos(gamma), beyond which p^2 + q^2 - 2 gamma p q - eps vanishes for p on the ray and
        q on the tail (docs/heteronuclear-rates.md).

        Parameters
        ----------
        kad : float
            Atom-dimer wave number k a (> 0).
        kappa_a, eta : float
            As in :meth:`atom_dimer_length`.
        phi : float, optional
            Ray angle; default 0.6 min(acos gamma, atan(1/(gamma k a))).
        per_decade, narc, q_factor : int, int, float
            Nodes per decade on the ray and the tail (default: the solver's), arc nodes,
            Q/max(k a, 1).
        dmax_factor : float
            Panels on the ray below 1.5 max(k a, 1) are at most dmax_factor k a tan(phi)
            wide when k a > 2 (the kernel varies on the scale 1/a next to q ~ k there).

        Returns
        -------
        dict
            S, p_total = 1 - abs(S)^2, p_deep = k Im(h) abs(Omega_Z)^2/(pi^4 (1 - gamma^2))
            (the local unitarity identity, docs/stm-mixture.md section 3), p_breakup =
            p_total - p_deep, phi, nodes.
        """
        if len(self.channels) != 1 or self.statistics != "boson":
            raise NotImplementedError("the contour is implemented for a_bb = 0 bosons only")
        g = self.gamma
        g2 = 1.0 - g * g
        energy = -1.0 + g2 * kad * kad
        limit = min(math.acos(g), math.atan(1.0 / (g * kad)))
        phi = 0.6 * limit if phi is None else float(phi)
        if not 0.0 < phi < limit:
            raise ValueError(f"need 0 < phi < {limit:.6g} (acos gamma and atan(1/(gamma k a)))")
        h = self.three_body_force(self._kappa(kappa_a, eta))
        big_q = q_factor * max(kad, 1.0)
        per_decade = self.grid["per_decade"] if per_decade is None else per_decade
        dmax = dmax_factor * kad * math.tan(phi) if kad > 2.0 else None
        q, w = _contour(self.cutoff, phi, big_q, per_decade, narc, 1.5 * max(kad, 1.0), dmax,
                        self.grid["order"])
        cw = (1.0 / math.pi) * w * q * q / (-1.0 + np.sqrt(g2 * q * q - energy + 0j))
        blocks = _BLOCKS[(0, 0)](g)
        # principal logarithm of the ratio between contour nodes (both arguments stay in
        # the lower half plane there); the on-shell row continued along the path
        kern = _contour_kernel(q, q, energy, blocks)
        onshell = _onshell_kernel(kad, q, energy, blocks)
        z = np.linalg.solve(np.eye(q.size) - (kern + h) * cw[None, :], -2.0 * math.pi ** 2 * (onshell + h))
        k_kk = exchange_kernel(np.array([kad]), np.array([kad]), energy, *blocks)[0, 0]
        z_k = -2.0 * math.pi ** 2 * (k_kk + h) + np.sum((onshell + h) * cw * z)
        s = 1.0 - 2j * kad * z_k / (2.0 * math.pi ** 2 * g2)
        omega = -2.0 * math.pi ** 2 + np.sum(cw * z)
        p_deep = float(kad * np.imag(h) * abs(omega) ** 2 / (math.pi ** 4 * g2))
        p_total = 1.0 - abs(s) ** 2
        return {"S": complex(s), "p_total": p_total, "p_deep": p_deep, "p_breakup": p_total - p_deep,
                "phi": phi, "nodes": q.size}

    def relaxation_beta(self, kappa_a, eta):
        """Threshold relaxation B + (BX) -> deep, beta m_B/(hbar a) (dimers lost).

        beta = -4 pi (1 + gamma) Im(a_AD/a) (docs/stm-mixture.md section 3).

        Parameters
        ----------
        kappa_a, eta : float
            As in :meth:`atom_dimer_length`.

        Returns
        -------
        float
        """
        return -4.0 * math.pi * (1.0 + self.gamma) * self.atom_dimer_length(kappa_a, eta).imag

    # ------------------------------------------------------------------ recombination
    def _recombination(self, kappa_a, eta, inv_a):
        h = self.three_body_force(self._kappa(kappa_a, eta))
        drive = []
        for c, ch in enumerate(self.channels):
            a_c = ch["ratio"] / inv_a
            drive.append((c, 0.0, 2.0 * math.pi * a_c / ch["mu"]))
        parts, zs, _, omega = self._solve(0.0, h, inv_a, drive)
        return h, parts, zs, omega

    def recombination(self, kappa_a, eta=0.0, negative_a=False):
        """Threshold three-body recombination B + B + X, events convention, units m_B.

        The event rate per unit volume is K3 n_B^2 n_X in a thermal (non-condensed) gas;
        each event removes two B and one X (docs/stm-mixture.md section 3).

        Parameters
        ----------
        kappa_a : float
            kappa* |a|.
        eta : float
            Deep-dimer parameter.
        negative_a : bool
            a < 0 (only deep dimers).

        Returns
        -------
        dict
            deep, shallow_bx (into the shallow B-X dimer), shallow_bb (X + shallow B-B dimer,
            a_bb > 0 only), total; each K3 m_B/(hbar a^4).
        """
        inv_a = -1.0 if negative_a else 1.0
        h, parts, zs, omega = self._recombination(kappa_a, eta, inv_a)
        deep = float(np.imag(h)) * abs(omega) ** 2 / (2.0 * math.pi ** 4)
        shallow = []
        for (nodes, _, k0), z, ch in zip(parts, zs, self.channels):
            if k0 is None:
                shallow.append(0.0)
                continue
            a_c = ch["ratio"] / inv_a
            xk = ch["g"] * z[-1]
            shallow.append(ch["narr"] * k0 * ch["nu"] * abs(xk) ** 2 / (2.0 * math.pi ** 2 * a_c))
        out = {"deep": deep * self.to_mb, "shallow_bx": shallow[0] * self.to_mb,
               "shallow_bb": (shallow[1] if len(shallow) > 1 else 0.0) * self.to_mb}
        out["total"] = out["deep"] + out["shallow_bx"] + out["shallow_bb"]
        return out

    # ------------------------------------------------------------------ bound states
    def _det(self, energy, inv_a, h, cutoff):
        parts = self._parts(energy, inv_a, cutoff, poles=False)
        nodes = [p[0] for p in parts]
        cw = np.concatenate([p[1] for p in parts])
        m = np.eye(len(cw)) - self._kernel(energy, h, nodes) * cw[None, :]
        sign, logabs = np.linalg.slogdet(m.real if np.allclose(m.imag, 0.0) else m)
        return float(np.real(sign)), float(logabs)

    def _root_h(self, xi, h, cutoff, lnh_guess, width=0.15, at_threshold=False, xtol=1e-7):
        """ln H of the bound state at polar angle xi of the Efimov plane near lnh_guess
        (at_threshold: the energy is set exactly to the lowest two-body threshold)."""
        width_max = 0.45 * math.pi / self.s0

        def point(lnh):
            hh = math.exp(lnh)
            inv_a = hh * math.cos(xi)
            energy = min(self._thresholds(inv_a)) if at_threshold else -(hh * math.sin(xi)) ** 2
            return energy, inv_a

        def f(lnh, ref):
            sg, la = self._det(*point(lnh), h, cutoff)
            return sg * math.exp(max(-700.0, min(700.0, la - ref)))

        ref = self._det(*point(lnh_guess), h, cutoff)[1]
        wdt = width
        while wdt <= width_max:
            lo, hi = lnh_guess - wdt, lnh_guess + wdt
            if f(lo, ref) * f(hi, ref) < 0:
                return brentq(f, lo, hi, args=(ref,), xtol=xtol)
            wdt *= 1.6
        raise RuntimeError(f"bound state lost at xi = {xi}")

    def trimer_branch(self, xi_end, level=0, steps=12, cutoff=None):
        """Follow the trimer whose 1/a = 0 binding is kappa* lambda^-level across the
        Efimov plane (units kappa* = 1): 1/a = H cos(xi), binding wave number
        sqrt(-eps) = H sin(xi), from xi = pi/2 to ``xi_end``.

        Parameters
        ----------
        xi_end : float
            pi for the three-atom threshold (a < 0), the atom-dimer threshold angle
            atan(...) for a > 0.
        level : int
            0: the state with binding kappa* at 1/a = 0; 1: the next shallower one.
        steps : int
            Continuation steps.
        cutoff : float, optional
            Lambda/kappa* (default: the solver's cutoff).

        Returns
        -------
        float
            H(xi_end) (units kappa*).
        """
        return float(self.trimer_branch_path(xi_end, level, steps, cutoff)[1][-1])

    def trimer_branch_path(self, xi_end, level=0, steps=12, cutoff=None):
        """The whole path of :meth:`trimer_branch`: (xi, H) at its ``steps + 1`` points,
        from xi = pi/2 to ``xi_end`` (units kappa* = 1)."""
        cut = self.cutoff if cutoff is None else cutoff
        h = self.three_body_force(1.0, cutoff=cut)
        lnh = -level * math.pi / self.s0
        lnh = self._root_h(0.5 * math.pi, h, cut, lnh, width=0.05)
        xs = np.linspace(0.5 * math.pi, xi_end, steps + 1)
        hist = [lnh]
        thr = abs(xi_end - self.threshold_angle()) < 1e-12
        for i, xi in enumerate(xs[1:]):
            guess = hist[-1] if len(hist) < 2 else 2.0 * hist[-1] - hist[-2]
            hist.append(self._root_h(xi, h, cut, guess, at_threshold=thr and i == steps - 1))
        return xs, np.exp(np.asarray(hist))

    def threshold_angle(self):
        """Polar angle of the lowest two-body threshold at a > 0 in the Efimov plane.

        Returns
        -------
        float
            pi/4 for the B-X dimer; larger when a B-B dimer (a_bb > 0) binds more strongly.
        """
        tan = 1.0
        if self.a_bb_ratio > 0:
            tan = max(tan, math.sqrt(2.0 * (1.0 - self.gamma)) / self.a_bb_ratio)
        return math.atan(tan)

    def coarse(self, cutoff=None, per_decade=10, qmin=1e-4):
        """A copy of this solver on a coarse grid (branch tracking only: its results are
        used as brackets of 5-15 %, and move by < 1e-3 against the fine grid).

        Parameters
        ----------
        cutoff : float, optional
            Default 1e3 max(lambda, 10) (units kappa*): it follows the momentum scale of the
            branch, which reaches 1/a* ~ lambda kappa* (0.44 lambda for equal masses,
            a_bb = 0).
        per_decade, qmin : int, float
            Upper and lower limits imposed on the solver's own values.

        Returns
        -------
        MixtureSTM
        """
        if cutoff is None:
            cutoff = 1e3 * max(self.scaling_factor, 10.0)
        c = copy.copy(self)
        c.cutoff = min(self.cutoff, float(cutoff))
        c.grid = dict(self.grid, per_decade=min(self.grid["per_decade"], per_decade),
                      qmin=max(self.grid["qmin"], qmin))
        return c

    def bound_state_force(self, energy, inv_a):
        """h for which the discretised equation at (eps, 1/a) has a bound state at eps.

        Parameters
        ----------
        energy : float
            eps, at or below the lowest two-body threshold.
        inv_a : float
            1/a (units of the momenta).

        Returns
        -------
        float
            h (rank-one closed form, as :meth:`three_body_force`).
        """
        parts = self._parts(energy, inv_a, None, poles=False)
        nodes = [p[0] for p in parts]
        cw = np.concatenate([p[1] for p in parts])
        rho = np.concatenate([np.full(len(p[0]), ch["rho"]) for p, ch in zip(parts, self.channels)])
        kmat = self._kernel(energy, 0.0, nodes) * cw[None, :]
        x = np.linalg.solve(np.eye(len(cw)) - kmat, rho.astype(complex))
        return float(np.real(1.0 / np.sum(rho * cw * x)))

    @staticmethod
    def _bracketed_root(g, est, rel, npts=21):
        """Root of g(ln k) nearest to ln(est) within a factor 1 +- rel: sign changes on a
        grid, refined by brentq, poles (large abs(g) at the sign change) rejected."""
        xs = np.linspace(math.log(est * (1.0 - rel)), math.log(est * (1.0 + rel)), npts)
        vals = np.array([g(x) for x in xs])
        scale = np.abs(vals).max()
        roots = []
        for i in range(npts - 1):
            if vals[i] * vals[i + 1] < 0:
                r = brentq(g, xs[i], xs[i + 1], xtol=1e-14)
                if abs(g(r)) < 1e-6 * scale:
                    roots.append(r)
        if not roots:
            raise RuntimeError("no root near the tracked estimate")
        return math.exp(min(roots, key=lambda r: abs(r - math.log(est))))

    def kappa_a_minus(self, level=0, steps=12, rel_bracket=0.15):
        """kappa* a_- (negative): the trimer of the branch reaches E = 0 at a < 0.

        The branch is followed on a coarse grid (:meth:`trimer_branch`); the value is then
        the root nearest to it, within rel_bracket, of h(kappa*) = h_0 on this solver's grid
        (cutoff Lambda |a|), h_0 the force that puts a bound state at a = -1, E = 0.

        Parameters
        ----------
        level : int
            0 for the branch of kappa*, 1 for the next shallower trimer (a_- lambda times
            larger).
        steps : int
            Continuation steps of the coarse tracking.
        rel_bracket : float
            Search window around the tracked value.

        Returns
        -------
        float
        """
        est = 1.0 / self.coarse().trimer_branch(math.pi, level, steps)
        h0 = self.bound_state_force(0.0, -1.0)

        def g(lk):
            return float(np.real(self.three_body_force(math.exp(lk)))) - h0

        return -self._bracketed_root(g, est, rel_bracket)

    def kappa_a_star(self, level=0, steps=10, rel_bracket=0.05):
        """kappa* a*: the trimer of the branch meets the atom-dimer threshold (a > 0).

        Coarse branch tracking, then the pole of a_AD (the root of 1/Re a_AD in kappa* a)
        nearest to the coarse value on this solver's grid.

        Parameters
        ----------
        level, steps, rel_bracket
            As in :meth:`kappa_a_minus`.

        Returns
        -------
        float
        """
        xi = self.threshold_angle()
        est = 1.0 / (self.coarse().trimer_branch(xi, level, steps) * math.cos(xi))

        def inv(lk):
            return 1.0 / self.atom_dimer_length(math.exp(lk)).real

        return self._bracketed_root(inv, est, rel_bracket, npts=11)

    def kappa_a_plus(self, kappa_a_star=None, npts=24):
        """kappa* a_+: the zero of shallow recombination (eta = 0) in (a*, lambda a*].

        Returns
        -------
        float
        """
        ks = self.kappa_a_star() if kappa_a_star is None else kappa_a_star
        lo = math.log(ks)
        xs = lo + np.linspace(0.0, math.pi / self.s0, npts + 1)[1:]

        def f(x):
            r = self.recombination(math.exp(x))
            return r["shallow_bx"] + r["shallow_bb"]

        vals = np.array([f(x) for x in xs])
        i = int(np.argmin(vals))
        i = min(max(i, 1), len(xs) - 2)
        r = minimize_scalar(f, bracket=(xs[i - 1], xs[i], xs[i + 1]), tol=1e-9)
        return math.exp(r.x)

    # ------------------------------------------------------------------ universal constants
    def fit_atom_dimer(self, kappa_a_star=None, npoints=11, symmetric_drive=False):
        """a_AD/a = A + B cot[s0 ln(a/a*)] over one period (eta = 0), and C_beta.

        With eta > 0 the same form continued to theta + i eta gives the relaxation rate
        beta = C_beta sinh(2 eta)/(sin^2 theta + sinh^2 eta) hbar a/m_B with
        C_beta = 2 pi (1 + gamma) B (docs/stm-mixture.md section 3).

        Returns
        -------
        dict
            kappa_a_star, A, B, C_beta, max_residual (of the linear fit, units a).
        """
        ks = self.kappa_a_star() if kappa_a_star is None else kappa_a_star
        th = np.linspace(0.05, math.pi - 0.05, npoints)
        y = np.array([self.atom_dimer_length(ks * math.exp(t / self.s0), 0.0, symmetric_drive).real
                      for t in th])
        x = np.c_[np.ones_like(th), 1.0 / np.tan(th)]
        (a_, b_), *_ = np.linalg.lstsq(x, y, rcond=None)
        return {"kappa_a_star": ks, "A": float(a_), "B": float(b_),
                "C_beta": 2.0 * math.pi * (1.0 + self.gamma) * float(b_),
                "max_residual": float(np.abs(x @ [a_, b_] - y).max())}

    def negative_a_coefficient(self, kappa_a_minus=None, eta=0.1, thetas=(0.0, 0.7, 1.9)):
        """C_- in K3 = C_- sinh(2 eta)/(sin^2[s0 ln(a/a_-)] + sinh^2 eta) hbar a^4/m_B (a < 0).

        Evaluated at s0 ln(a/a_-) = theta for each of ``thetas``; their spread is a check of
        the form.

        Returns
        -------
        dict
            kappa_a_minus, C_minus (mean), spread (max relative deviation), values.
        """
        km = self.kappa_a_minus() if kappa_a_minus is None else kappa_a_minus
        vals = []
        for t in thetas:
            k3 = self.recombination(abs(km) * math.exp(t / self.s0), eta, negative_a=True)["deep"]
            vals.append(k3 * (math.sin(t) ** 2 + math.sinh(eta) ** 2) / math.sinh(2.0 * eta))
        vals = np.array(vals)
        c = float(np.mean(vals))
        return {"kappa_a_minus": km, "C_minus": c, "spread": float(np.max(np.abs(vals / c - 1.0))),
                "values": vals}

    def positive_a_coefficients(self, kappa_a_plus=None, eta=0.1, thetas=(0.4, 1.2, 2.3)):
        """Threshold recombination at a > 0 in the forms of docs/stm.md section 4:

            shallow (eta = 0) = C_+ sin^2 theta/(sinh^2(pi s0) + cos^2 theta),
            deep = C_deep sinh(2 eta)/(sinh^2(pi s0 + eta) + cos^2 theta),   theta = s0 ln(a/a_+),

        (shallow: all shallow-dimer channels, units hbar a^4/m_B); C_+ and C_deep at each theta (their spread
        checks the forms).

        Returns
        -------
        dict
            kappa_a_plus, C_plus, C_deep, shallow_max = C_+/sinh^2(pi s0), spreads.
        """
        kp = self.kappa_a_plus() if kappa_a_plus is None else kappa_a_plus
        s0 = self.s0
        cp, cd = [], []
        for t in thetas:
            k = kp * math.exp(t / s0)
            r0 = self.recombination(k, 0.0)
            sh = r0["shallow_bx"] + r0["shallow_bb"]
            cp.append(sh * (math.sinh(math.pi * s0) ** 2 + math.cos(t) ** 2) / math.sin(t) ** 2)
            dp = self.recombination(k, eta)["deep"]
            cd.append(dp * (math.sinh(math.pi * s0 + eta) ** 2 + math.cos(t) ** 2) / math.sinh(2 * eta))
        cp, cd = np.array(cp), np.array(cd)
        return {"kappa_a_plus": kp, "C_plus": float(cp.mean()), "C_deep": float(cd.mean()),
                "shallow_max": float(cp.mean()) / math.sinh(math.pi * s0) ** 2,
                "spread_plus": float(np.max(np.abs(cp / cp.mean() - 1.0))),
                "spread_deep": float(np.max(np.abs(cd / cd.mean() - 1.0)))}

    # ------------------------------------------------------------------ E > 0 (a < 0, 1/a = 0)
    def unitarity_bound(self, energy):
        """J = 0 bound of the event rate at energy E: K3 <= (M/m_X)^(3/2) 32 pi^2 hbar/(m_B K^4),
        E = hbar^2 K^2/(2 m_B) (mass-scaled flux normalisation, docs/stm-mixture.md section 8).

        Parameters
        ----------
        energy : float
            eps = 2 mu E (units of the momenta squared).

        Returns
        -------
        float
            The bound in units hbar/m_B (times a^4 when eps is in 1/a^2).
        """
        g = self.gamma
        m_b, m_x = 1.0 / (2.0 * (1.0 - g)), 1.0 / (2.0 * g)
        big_m = 2.0 * m_b + m_x
        k4 = (2.0 * m_b * energy) ** 2
        return (big_m / m_x) ** 1.5 * 32.0 * math.pi ** 2 / (m_b * k4) * self.to_mb

    def _omega_spectator(self, inv_a, energy, delta, spacing, npts_p):
        """Omega_Z of unit s-wave drives at the spectator momenta P in [0, P_max,c] of every
        channel c, at the complex energy eps + i delta, for the force h = 0, and the number s
        that gives every h (docs/stm-mixture.md section 8).

        The force is rank one, V = K + h rho rho^T, so (Sherman-Morrison) the Omega of any h
        is Omega(h) = Omega(0)/(1 - h s) with s = (rho g)^T (1 - K G)^-1 rho: one LU per
        energy serves every kappa* and eta.  Each channel has its own dense grid up to four
        times its P_max (the region of its singular kernel and propagator), geometric panels
        beyond.

        Returns
        -------
        tuple
            (P per channel, Omega(0) per channel (arrays over P), s, number of nodes).
        """
        xg, wg = np.polynomial.legendre.leggauss(self.grid["order"])
        ec = energy + 1j * delta
        nodes, cws, rhos, ps = [], [], [], []
        for ch in self.channels:
            pmax = math.sqrt(ch["escale"] * energy / ch["alpha"])
            top = 4.0 * pmax                 # the singular region; geometric panels beyond
            npan = int(math.ceil(top / spacing / self.grid["order"]))
            edges = np.linspace(0.0, top, npan + 1)
            lo, hi = edges[:-1, None], edges[1:, None]
            q = (0.5 * (hi - lo) * xg + 0.5 * (hi + lo)).ravel()
            w = (0.5 * (hi - lo) * wg).ravel()
            qt, wt = momentum_grid(self.cutoff, qmin=top, per_decade=self.grid["per_decade"],
                                   order=self.grid["order"])
            keep = qt > top
            q, w = np.concatenate([q, qt[keep]]), np.concatenate([w, wt[keep]])
            nodes.append(q)
            cws.append(ch["g"] * w * q * q / (-inv_a / ch["ratio"] + np.sqrt(ch["alpha"] * q * q - ch["escale"] * ec)))
            rhos.append(np.full(q.size, ch["rho"]))
            ps.append(np.linspace(0.0, pmax, npts_p))
        cw, rho = np.concatenate(cws), np.concatenate(rhos)
        mat = np.eye(cw.size) - self._kernel(ec, 0.0, nodes) * cw[None, :]
        empty = np.zeros(0)
        rhs = [-2.0 * math.pi ** 2 * self._kernel(ec, 0.0, nodes, [pc if i == c else empty
                                                                    for i in range(len(ps))])
               for c, pc in enumerate(ps)]
        z = np.linalg.solve(mat, np.concatenate(rhs + [rho[:, None].astype(complex)], axis=1))
        v = rho * cw
        t0 = v @ z[:, :-1]
        omegas = np.split(t0, np.cumsum([pc.size for pc in ps])[:-1])
        omegas = [-2.0 * math.pi ** 2 * ch["rho"] + om for ch, om in zip(self.channels, omegas)]
        return ps, omegas, complex(v @ z[:, -1]), cw.size

    def _configuration_average(self, inv_a, energy, ps, omegas, nalpha, ncos):
        """<|Omega(0)|^2>/(2 pi^4) over the J = 0 hypersphere of three-atom plane waves.

        Omega = A_1 + A_2 (+ A_3), A_i = (N_i/2) Omega_BX(P_i) for the two B spectators and
        A_3 = N_3 Omega_BB(P_3) for the X spectator where a_bb != 0 (N the Bethe-Peierls
        amplitudes (2 pi/mu_c)/(1/a_c + i q_c), docs/stm-mixture.md section 8).  The measure is
        the same in every mass-scaled Jacobi set, so <|A_i|^2> is a 1-D integral over the
        hyperangle of set i (where |N_i|^2 ~ 1/q_i^2 meets the measure's q_i^2), and the
        cross terms (singular like 1/q) and |A_3|^2 are averaged in 2-D (set 3).  The rate at
        force h is Im h/|1 - h s|^2 times this (:meth:`_omega_spectator`).
        """
        g = self.gamma
        nu_x, mu_bb, nu_b = 1.0 / (1.0 + g), 1.0 / (4.0 * (1.0 - g)), 1.0 / (2.0 * (1.0 - g * g))

        def unit(c, pb):
            return np.interp(pb, ps[c], omegas[c].real) + 1j * np.interp(pb, ps[c], omegas[c].imag)

        xa, wa = np.polynomial.legendre.leggauss(nalpha)
        beta = (xa + 1.0) * math.pi / 4.0
        wb = wa * math.pi / 4.0 * np.sin(beta) ** 2 * np.cos(beta) ** 2
        pb = math.sqrt(2.0 * nu_b * energy) * np.cos(beta)        # set 1: B spectator
        qb = math.sqrt(energy) * np.sin(beta)                       # its B-X pair (2 mu = 1)
        diag = np.sum(wb * np.abs(0.5 * 4.0 * math.pi * unit(0, pb)) ** 2 / (inv_a ** 2 + qb ** 2))
        diag = 2.0 * diag / (math.pi / 16.0)
        xc, wc = np.polynomial.legendre.leggauss(ncos)
        aa, cc = np.meshgrid(beta, xc, indexing="ij")
        weight = (wa * math.pi / 4.0)[:, None] * wc[None, :] * np.sin(aa) ** 2 * np.cos(aa) ** 2
        p3 = math.sqrt(2.0 * nu_x * energy) * np.cos(aa)          # set 3: X momentum
        q3 = math.sqrt(2.0 * mu_bb * energy) * np.sin(aa)         # B-B relative momentum
        amps = []
        for sgn in (-1.0, 1.0):                                   # the two B spectators
            pk = np.sqrt(np.maximum(p3 * p3 / 4.0 + q3 * q3 + sgn * p3 * q3 * cc, 0.0))
            qpair = np.sqrt(np.maximum(energy - pk * pk / (2.0 * nu_b), 0.0))
            amps.append(0.5 * 4.0 * math.pi / (inv_a + 1j * qpair) * unit(0, pk))  # (2 pi/mu)/(1/a + i q)
        rest = 2.0 * np.real(amps[0] * np.conj(amps[1]))
        if len(self.channels) > 1:
            ch = self.channels[1]
            a3 = (2.0 * math.pi / ch["mu"]) / (inv_a / ch["ratio"] + 1j * q3) * unit(1, p3)
            rest = rest + np.abs(a3) ** 2 + 2.0 * np.real(a3 * np.conj(amps[0] + amps[1]))
        cross = np.sum(weight * rest) / np.sum(weight)
        return (diag + cross) / (2.0 * math.pi ** 4) * self.to_mb

    def recombination_energy(self, kappa_a, eta, energy, inv_a=-1.0,
                             deltas=(0.16, 0.08, 0.04, 0.02), spacing=0.4, npts_p=161,
                             nalpha=48, ncos=32):
        """Deep-dimer recombination of three atoms at energy E > 0 (J = 0).

        Three-atom plane waves drive the B-X channel with (2 pi/mu)/(1/a + i q_i) at each B
        spectator momentum P_i (and, for a_bb != 0, the B-B channel with
        (2 pi/mu_BB)/(1/a_bb + i q_3) at the X momentum P_3); the absorbed flux
        Im h |Omega|^2/(2 pi^4) is averaged over the hypersphere.  The equation is solved at
        eps + i delta eps for each of ``deltas`` on a grid of spacing ``spacing`` delta
        sqrt(eps) (the logarithmic singularities of the kernel at real energy are smoothed
        over delta), and the rates are extrapolated to delta = 0 by a polynomial in
        sqrt(delta) (the measured approach, docs/stm-mixture.md section 8).  One LU per delta
        serves all ``kappa_a`` (the force is rank one, :meth:`_omega_spectator`).

        Parameters
        ----------
        kappa_a : float or array_like
            kappa* |a| (inv_a = -1) or kappa* in the momentum units of ``energy`` (inv_a = 0).
        eta : float
            Deep-dimer parameter (> 0).
        energy : float
            eps = 2 mu E (units 1/a^2 for inv_a = -1).
        inv_a : {-1.0, 0.0}
            a < 0 (|a| = 1) or unitarity.

        Returns
        -------
        dict
            k3 (extrapolated, hbar a^4/m_B for inv_a = -1, hbar/m_B in the momentum units
            otherwise), k3_delta (the rates at each delta, last axis), error (difference of
            the extrapolations through all and through the last three deltas), bound
            (:meth:`unitarity_bound`), nodes; k3 and error have the shape of ``kappa_a``.
        """
        if self.statistics != "boson":
            raise NotImplementedError("finite energy is implemented for bosons only")
        if self.a_bb_ratio < 0.0:
            raise NotImplementedError("finite energy needs a_bb/a >= 0: for a_bb/a < 0 a shallow B-B dimer "
                                      "opens a channel whose outgoing flux is not computed")
        if not energy > 0 or inv_a > 0:
            raise ValueError("need E > 0 and a < 0 or 1/a = 0")
        kappas = np.atleast_1d(np.asarray(kappa_a, dtype=float))
        hs = np.array([self.three_body_force(self._kappa(k, eta)) for k in kappas], dtype=complex)
        vals, nodes = [], 0
        for d in deltas:
            ps, om, s, nodes = self._omega_spectator(inv_a, energy, d * energy,
                                                     spacing * d * math.sqrt(energy), npts_p)
            average = self._configuration_average(inv_a, energy, ps, om, nalpha, ncos)
            vals.append(hs.imag / np.abs(1.0 - hs * s) ** 2 * average)
        x = np.sqrt(np.asarray(deltas))
        vals = np.asarray(vals)
        full = np.polyval(np.polyfit(x, vals, len(x) - 1), 0.0)
        part = np.polyval(np.polyfit(x[1:], vals[1:], len(x) - 2), 0.0)
        shape = np.shape(kappa_a)
        return {"k3": full.reshape(shape) if shape else float(full[0]), "k3_delta": vals.T.reshape(shape + (len(x),)),
                "error": np.abs(full - part).reshape(shape) if shape else float(abs(full[0] - part[0])),
                "bound": self.unitarity_bound(energy), "nodes": nodes}

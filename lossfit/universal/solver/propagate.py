"""Adiabatic-by-sector log-derivative propagation of the zero-range hyperradial equations.

The coupled equations in the adiabatic basis (units hbar^2/(2m) = 1, E = K^2),

    -(d/dR + P)^2 F + diag[(nu_n(R) - 1/4)/R^2] F = K^2 F,

are the exact zero-range equations in the limit of infinitely many channels, with
the second-derivative coupling taken as Q = dP/dR + P^2 (completeness).  With
F = W G, dW/dR = -P W (W orthogonal), they become the diabatic problem
-G'' + (W^T V W) G = K^2 G.  In t = ln R and F = sqrt(R) f the equation reads
f_tt = (W^T nu W - K^2 R^2) f, whose potential matrix has, at every R, the
eigenvalues nu_n(R) - K^2 R^2 with eigenvectors W^T e_n: no diagonalisation is needed.

Each sector uses the exact solution for the potential frozen at its midpoint
(constant reference potential), and consecutive sector bases are related by the
orthogonal rotation exp(-int R P dt), taken as a Cayley transform.  The scheme is
symmetric, so its error is even in the step size and a Richardson extrapolation
h, h/2 removes the leading h^2 term.  The log-derivative form (B. R. Johnson,
J. Comput. Phys. 13, 445 (1973); D. E. Manolopoulos, J. Chem. Phys. 85, 6425 (1986))
is stable through classically forbidden regions.
"""

__all__ = ["S0", "make_t_grid", "bessel_series_logder", "hankel1_logder", "kv_logder",
           "inward_logderivative", "inward_from_outer", "down_amplitude", "efimov_functions",
           "sector_setup", "outward_logderivative"]

import cmath
import math

import numba
import numpy as np
import scipy.special as sp

from ...constants import S0
from .hyperspherical import adiabatic_nu, coupling_matrix


def make_t_grid(t0, t1, kabs, h, c_osc, refine=1):
    """Sector boundaries in t = ln R with smooth steps dt = 1/(1/h + |K| R / c_osc).

    The map xi(t) = t/h + |K| e^t / c_osc is sampled uniformly, so refining by an
    integer factor scales every step by the same amount (needed for Richardson).

    Parameters
    ----------
    t0, t1 : float
        ln of inner and outer radius (units of |a|, or of the chosen length at unitarity).
    kabs : float
        |K| in inverse length units.
    h : float
        Maximum step in ln R.
    c_osc : float
        Phase (radians of K R) per sector in the oscillatory region.
    refine : int
        Subdivision factor.

    Returns
    -------
    ndarray
        Increasing boundaries t_0 = t0, ..., t_M = t1.
    """
    xi = lambda t: t / h + kabs * np.exp(t) / c_osc
    x0, x1 = xi(t0), xi(t1)
    m = int(math.ceil((x1 - x0) * refine))
    targets = x0 + (x1 - x0) * np.arange(m + 1) / m
    # Newton on the monotonic, convex map, started from the log-only guess.
    t = np.clip(t0 + (targets - x0) * h, t0, t1)
    for _ in range(100):
        f = xi(t) - targets
        d = 1.0 / h + kabs * np.exp(t) / c_osc
        tn = np.clip(t - f / d, t0, t1)
        if np.max(np.abs(tn - t)) < 1e-14:
            t = tn
            break
        t = tn
    t[0], t[-1] = t0, t1
    return t


def bessel_series_logder(order, k2, r):
    """d ln u / d ln R of u = R^order sum_k (-k2 R^2/4)^k / (k! (1+order)_k).

    This is R^order times the small-argument series of Gamma(1+order) (2/K)^order
    J_order(K R) with K^2 = k2 (complex orders allowed, k2 of either sign), i.e. the
    solution regular as R^order at the origin of u'' = (order^2 - K^2 R^2) u in t.

    Returns
    -------
    (value, logder) : complex
        u(R) and d ln u / d ln R.
    """
    z = -k2 * r * r / 4.0
    term = 1.0 + 0j
    ssum = term
    dsum = 0.0 + 0j
    for k in range(1, 400):
        term = term * z / (k * (k + order))
        ssum += term
        dsum += 2 * k * term
        if abs(term) < 1e-18 * abs(ssum) and k > 3:
            break
    val = cmath.exp(order * math.log(r)) * ssum
    return val, order + dsum / ssum


def _hankel_asym_logder(order, z, decaying):
    """z d/dz ln of H^(1)_order(z) (or K_order(z) if decaying), large-z expansion.

    Valid for complex order with |order|^2 << z (Hankel's asymptotic series,
    Abramowitz & Stegun 9.2.7 and 9.7.2); terms summed until they stop decreasing.
    """
    mu = 4.0 * order * order
    ssum = 1.0 + 0j
    dsum = 0.0 + 0j
    term = 1.0 + 0j
    best = 1.0
    for k in range(1, 200):
        fac = (mu - (2 * k - 1) ** 2) / (k * 8.0 * z)
        term = term * fac * (1.0 if decaying else 1j) * (-1.0 if decaying else 1.0)
        if abs(term) > best:
            break
        best = abs(term)
        ssum += term
        dsum += -k * term
        if abs(term) < 1e-17:
            break
    if decaying:
        return -z - 0.5 + dsum / ssum
    return 1j * z - 0.5 + dsum / ssum


def hankel1_logder(nu, z):
    """d ln u/d ln R for the outgoing solution u = H^(1)_s(K R), s = sqrt(nu), z = K R.

    For real order uses scipy; closed channels whose Hankel function overflows use
    the decaying WKB form; imaginary order uses Hankel's asymptotic series (requires z >> 1).
    """
    if nu >= 0:
        s = math.sqrt(nu)
        h = sp.hankel1(s, z)
        if np.isfinite(h) and abs(h) < 1e250:
            return complex(z * sp.h1vp(s, z) / h)
        p = math.sqrt(nu - z * z)
        return complex(-p + z * z / (2 * p * p))
    if z < 20.0:
        raise ValueError("imaginary-order outgoing BC needs K R >= 20")
    return _hankel_asym_logder(1j * math.sqrt(-nu), z, decaying=False)


def kv_logder(nu, z):
    """d ln u/d ln R for the decaying solution u = K_s(q R), s = sqrt(nu), z = q R."""
    if nu >= 0:
        s = math.sqrt(nu)
        k = sp.kve(s, z)
        if np.isfinite(k) and k > 0 and k < 1e250:
            # K_s' = -(K_{s-1} + K_{s+1})/2, all exponentially scaled (no overflow at large z)
            return complex(-z * 0.5 * (sp.kve(s - 1, z) + sp.kve(s + 1, z)) / k)
        p = math.sqrt(nu + z * z)
        return complex(-p - z * z / (2 * p * p))
    if z < 20.0:
        raise ValueError("imaginary-order decaying BC needs q R >= 20")
    return _hankel_asym_logder(1j * math.sqrt(-nu), z, decaying=True)


@numba.njit(cache=True)
def _sector_elements(lam_row, hj, y1, y2):
    """Diagonal (y1) and off-diagonal (y2) log-derivative elements of one sector of
    width hj with constant reference potential lam_row (one entry per channel); shared
    by the inward and outward sweeps."""
    for i in range(lam_row.size):
        kap = cmath.sqrt(complex(lam_row[i]))
        x = kap * hj
        if abs(x) < 1e-6:
            y1[i] = 1.0 / hj + lam_row[i] * hj / 3.0
            y2[i] = 1.0 / hj - lam_row[i] * hj / 6.0
        elif x.real > 40.0:
            e2 = cmath.exp(-2.0 * x)
            y1[i] = kap * (1.0 + e2) / (1.0 - e2)
            y2[i] = kap * 2.0 * cmath.exp(-x) / (1.0 - e2)
        else:
            y1[i] = kap / cmath.tanh(x)
            y2[i] = kap / cmath.sinh(x)


@numba.njit(cache=True)
def _sector_inward(lam, widths, rot, y_out):
    m, n = lam.shape
    y = y_out.copy()
    y1 = np.empty(n, dtype=np.complex128)
    y2 = np.empty(n, dtype=np.complex128)
    for j in range(m - 1, -1, -1):
        hj = widths[j]
        _sector_elements(lam[j], hj, y1, y2)
        a = -y
        for i in range(n):
            a[i, i] += y1[i]
        ainv = np.linalg.inv(a)
        for i in range(n):
            for k in range(n):
                y[i, k] = y2[i] * ainv[i, k] * y2[k]
            y[i, i] -= y1[i]
        if j > 0:
            o = rot[j - 1].astype(np.complex128)
            y = o.T @ y @ o
    return y


def _cayley(gen):
    """Orthogonal (I - A/2)^-1 (I + A/2) for a stack of antisymmetric A."""
    n = gen.shape[-1]
    eye = np.eye(n)
    return np.linalg.solve(eye - gen / 2, eye + gen / 2)


def inward_logderivative(k2, inv_a, nchan, r0, rm, h=0.04, c_osc=0.25, refine=1,
                         outer="outgoing", frame="adiabatic"):
    """Propagate the outer boundary condition from R_m in to R_0.

    Parameters
    ----------
    k2 : float
        K^2 (E = hbar^2 K^2 / 2m) in units of 1/|a|^2 (or of the chosen length^-2 at
        unitarity); negative for bound states.
    inv_a : {-1, 0, +1}
        Sign of 1/a; 0 = unitarity (channels then decouple exactly).
    nchan : int
        Number of adiabatic channels.
    r0, rm : float
        Inner and outer hyperradius (units |a|).
    h, c_osc, refine :
        Grid controls, see :func:`make_t_grid`.
    outer : {"outgoing", "decaying"}
        Outer boundary condition in each adiabatic channel: outgoing Hankel H^(1)
        (scattering, k2 > 0) or decaying K_s (bound states, k2 < 0).
    frame : {"adiabatic", "diabatic"}
        How the outer condition treats the residual coupling at R_m (see code comment).

    Returns
    -------
    y_eff : complex
        d ln f_0 / d ln R at R_0 in the Efimov channel, after eliminating the closed
        channels with their regular boundary condition f_n ~ R^{s_n}.
    nu0 : ndarray
        Roots at R_0 (diagnostic).
    """
    kabs = math.sqrt(abs(k2))
    st = sector_setup(k2, inv_a, nchan, r0, rm, kabs, h=h, c_osc=c_osc, refine=refine)
    # Outer boundary condition in the adiabatic basis at R_m.
    z = kabs * rm
    yout = np.zeros(nchan, dtype=complex)
    for n in range(nchan):
        yout[n] = hankel1_logder(st["nu_m"][n], z) if outer == "outgoing" else kv_logder(st["nu_m"][n], z)
    # frame: "adiabatic" = each adiabatic channel outgoing on its own (right when the
    # channel momenta differ by more than the coupling, small k|a|); "diabatic" = the
    # outgoing waves are carried by the rotating basis, F' = (Y - P) F (right when the
    # coupling exceeds the momentum differences, large k|a|).
    return inward_from_outer(st, yout, k2, r0, outer_coupling=frame == "adiabatic"), st["nu_0"]


def inward_from_outer(setup, yout, k2, r0, outer_coupling=True):
    """Efimov-channel log-derivative at R_0 from a diagonal adiabatic outer condition.

    Parameters
    ----------
    setup : dict
        From :func:`sector_setup`.
    yout : ndarray, complex
        d ln f_n / d ln R at R_m in each adiabatic channel.
    k2, r0 : float
        K^2 and the inner radius (as for :func:`sector_setup`).
    outer_coupling : bool
        Add the residual coupling at R_m to the outer condition (adiabatic frame).

    Returns
    -------
    complex
        d ln f_0 / d ln R at R_0 after eliminating the closed channels with their
        regular boundary condition f_n ~ R^{s_n}.
    """
    st = setup
    nchan = yout.size
    yv = st["o_last"] @ (np.diag(yout) + (st["rp_m"] if outer_coupling else 0.0)) @ st["o_last"].T
    yv = _sector_inward(st["lam"], st["widths"], st["rot"], yv.astype(np.complex128))
    yf0 = st["o_first"] @ yv @ st["o_first"].T - st["rp_0"]
    if nchan == 1:
        return complex(yf0[0, 0])
    yreg = np.array([bessel_series_logder(math.sqrt(max(st["nu_0"][n], 0.0)), k2, r0)[1]
                     for n in range(1, nchan)])
    y_eff = yf0[0, 0] + yf0[0, 1:] @ np.linalg.solve(np.diag(yreg) - yf0[1:, 1:], yf0[1:, 0])
    return complex(y_eff)


def down_amplitude(y, k2, r0):
    """Amplitude s of f = f_+ + s f_- whose log-derivative at R_0 is ``y``
    (f_+- from :func:`efimov_functions`): the reflection back to short distance."""
    fp, dfp, fm, dfm = efimov_functions(k2, r0)
    return -(dfp - y * fp) / (dfm - y * fm)


def efimov_functions(k2, r):
    """The reference Efimov-channel solutions f_+- = R^{+-i s0} (1 + O(K^2 R^2)).

    Returns
    -------
    (fp, dfp, fm, dfm) : complex
        Values and d/d ln R of the 'up' (outgoing to larger R, f_+) and 'down'
        (toward R = 0, f_-) solutions of f_tt = (-s0^2 - K^2 R^2) f.
    """
    fp, lp = bessel_series_logder(1j * S0, k2, r)
    fm, lm = bessel_series_logder(-1j * S0, k2, r)
    return fp, lp * fp, fm, lm * fm


@numba.njit(cache=True)
def _sector_outward(lam, widths, rot, y_in):
    m, n = lam.shape
    y = y_in.copy()
    y1 = np.empty(n, dtype=np.complex128)
    y2 = np.empty(n, dtype=np.complex128)
    for j in range(m):
        hj = widths[j]
        _sector_elements(lam[j], hj, y1, y2)
        a = y.copy()
        for i in range(n):
            a[i, i] += y1[i]
        ainv = np.linalg.inv(a)
        for i in range(n):
            for k in range(n):
                y[i, k] = -y2[i] * ainv[i, k] * y2[k]
            y[i, i] += y1[i]
        if j < m - 1:
            o = rot[j].astype(np.complex128)
            y = o @ y @ o.T
    return y


def sector_setup(k2, inv_a, nchan, r0, rm, kabs, h=0.04, c_osc=0.25, refine=1):
    """Grid, frozen potentials and rotations shared by the propagators (see module doc).

    Returns
    -------
    dict with keys lam, widths, rot, o_first, o_last, rp_0, rp_m, nu_0, nu_m.
    """
    t = make_t_grid(math.log(r0), math.log(rm), kabs, h, c_osc, refine)
    c = 0.5 * (t[1:] + t[:-1])
    widths = np.diff(t)
    tgen = np.concatenate([[0.5 * (t[0] + c[0])], 0.5 * (c[1:] + c[:-1]), [0.5 * (c[-1] + t[-1])]])
    rho_all = np.exp(np.concatenate([c, tgen, [t[0], t[-1]]]))
    nu_all = adiabatic_nu(rho_all, inv_a, nchan)
    m = c.size
    nu_c, nu_g, nu_0, nu_m = nu_all[:m], nu_all[m:2 * m + 1], nu_all[-2], nu_all[-1]
    lam = nu_c - k2 * np.exp(c)[:, None] ** 2
    if inv_a == 0:
        # unitarity: the channels decouple exactly
        eye = np.eye(nchan)
        return dict(lam=lam, widths=widths, rot=np.ascontiguousarray(np.repeat(eye[None], max(m - 1, 1), axis=0)),
                    o_first=eye, o_last=eye, rp_0=np.zeros((nchan, nchan)), rp_m=np.zeros((nchan, nchan)),
                    nu_0=nu_0, nu_m=nu_m)
    rp = coupling_matrix(nu_g, inv_a) * np.exp(tgen)[:, None, None]
    dts = np.concatenate([[c[0] - t[0]], np.diff(c), [t[-1] - c[-1]]])
    gens = -rp * dts[:, None, None]
    return dict(lam=lam, widths=widths, rot=np.ascontiguousarray(_cayley(gens[1:-1])),
                o_first=_cayley(-gens[0]), o_last=_cayley(-gens[-1]),
                rp_0=coupling_matrix(nu_0[None], inv_a)[0] * r0,
                rp_m=coupling_matrix(nu_m[None], inv_a)[0] * rm, nu_0=nu_0, nu_m=nu_m)


def outward_logderivative(setup, y0_diag):
    """Propagate a diagonal adiabatic-frame log-derivative (d/d ln R) from R_0 to R_m.

    Returns the adiabatic-frame log-derivative matrix of f at R_m.
    """
    s = setup
    yv = s["o_first"].T @ (np.diag(y0_diag) + s["rp_0"]) @ s["o_first"]
    yv = _sector_outward(s["lam"], s["widths"], s["rot"], yv.astype(np.complex128))
    return s["o_last"].T @ yv @ s["o_last"] - s["rp_m"]

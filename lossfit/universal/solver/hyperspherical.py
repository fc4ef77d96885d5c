"""Zero-range adiabatic hyperspherical potentials and their exact non-adiabatic couplings.

Three identical bosons of mass m, total angular momentum J = 0, zero-range two-body
interaction of scattering length a.  Mass-scaled Jacobi coordinates
x = (r1 - r2)/sqrt(2), y = sqrt(2/3) (r3 - (r1 + r2)/2) have kinetic mass m, and the
hyperradius is R^2 = x^2 + y^2 = (r12^2 + r13^2 + r23^2)/3 (the convention of
Braaten & Hammer, Phys. Rep. 428, 259 (2006), sec. 4).

At fixed R the hyperangular eigenfunctions are Faddeev sums
Phi_s = sum_i sin[s (pi/2 - alpha_i)] / sin(2 alpha_i), tan(alpha_i) = x_i / y_i,
with Bethe-Peierls contact conditions giving the transcendental equation
(V. Efimov, Sov. J. Nucl. Phys. 12, 589 (1971); D. V. Fedorov & A. S. Jensen,
PRL 71, 4103 (1993))

    G(s; R/a) = [-s cos(pi s/2) + (8/sqrt 3) sin(pi s/6)] / sin(pi s/2) + sqrt(2) R/a = 0.

Channel n has hyperangular eigenvalue nu_n = s_n^2 and hyperradial potential
(nu_n - 1/4)/R^2 (units hbar^2/(2m) = 1 is implied: the radial equation reads
-F'' + (nu - 1/4) F / R^2 = K^2 F with E = hbar^2 K^2 / (2 m)).

Overlaps and couplings follow from Green's identity on the hypersphere, which reduces
every matrix element between two eigenfunctions to their contact coefficients
(derivation in docs/solver.md):

* normalised contact coefficient  A_n^2 = 1 / (c G_nu(s_n)),  G_nu = dG/d(s^2) > 0;
* first-derivative coupling  P_mn = <Phi_m | d/dR Phi_n>
  = (sqrt 2 / a) / [(nu_m - nu_n) sqrt(G_nu(m) G_nu(n))],  antisymmetric.

The root s = 4 is spurious (the Faddeev sum vanishes identically) and is never
returned: G is regular there.  Lengths are in units of |a|; ``inv_a`` is +1, -1
(a > 0 or a < 0) or 0 (unitarity).
"""

__all__ = ["g_function", "g_nu", "pole_list", "adiabatic_nu",
           "coupling_matrix", "adiabatic_data"]

import cmath
import math

import numba
import numpy as np

_C8 = 8.0 / math.sqrt(3.0)
_SQRT2 = math.sqrt(2.0)
# G(s = 4) from the expansion about the removable singularity (see _g_complex).
_G_AT_4 = -(2.0 / math.pi) * (1.0 + 2.0 * math.pi / (3.0 * math.sqrt(3.0)))


def _g_complex(s):
    """Angular part g(s) of G for complex s with moderate |Im s| (array)."""
    s = np.asarray(s, dtype=complex)
    out = np.empty_like(s)
    eps = s - 4.0
    near4 = np.abs(eps) < 0.5
    far = ~near4
    sf = s[far]
    # s == 0 is a removable point of -s cot(pi s/2); replaced by its limit.
    zero = sf == 0
    sf_safe = np.where(zero, 1e-300, sf)
    val = (-sf_safe * np.cos(np.pi * sf_safe / 2) + _C8 * np.sin(np.pi * sf_safe / 6)) \
        / np.sin(np.pi * sf_safe / 2)
    val = np.where(zero, -2.0 / np.pi + _C8 / 3.0, val)
    out[far] = val
    e = eps[near4]
    ezero = e == 0
    e_safe = np.where(ezero, 1e-300, e)
    # Numerator rewritten so that each term is O(eps) without cancellation: the
    # spurious root s = 4 makes numerator and denominator vanish together.
    num = 8.0 * np.sin(np.pi * e_safe / 3) * np.sin(np.pi * e_safe / 6) \
        - e_safe * np.cos(np.pi * e_safe / 2) - (4.0 / math.sqrt(3.0)) * np.sin(np.pi * e_safe / 6)
    den = np.sin(np.pi * e_safe / 2)
    out[near4] = np.where(ezero, _G_AT_4, num / den)
    return out


def _g_imag(sigma):
    """g(i sigma) for real sigma > 0, overflow-free for large sigma."""
    sigma = np.asarray(sigma, dtype=float)
    em = np.exp(-np.pi * sigma)
    coth = (1 + em) / (1 - em)
    ratio = np.exp(-np.pi * sigma / 3) * (1 - np.exp(-np.pi * sigma / 3)) / (1 - em)
    return -sigma * coth + _C8 * ratio


def _g_imag_dsigma(sigma):
    sigma = np.asarray(sigma, dtype=float)
    b = np.pi / 2
    c = np.pi / 6
    em = np.exp(-2 * b * sigma)
    coth_b = (1 + em) / (1 - em)
    inv_sinh2 = 4 * em / (1 - em) ** 2
    emc = np.exp(-2 * c * sigma)
    coth_c = (1 + emc) / (1 - emc)
    ratio = np.exp(-np.pi * sigma / 3) * (1 - np.exp(-np.pi * sigma / 3)) / (1 - np.exp(-np.pi * sigma))
    return -coth_b + b * sigma * inv_sinh2 + _C8 * ratio * (c * coth_c - b * coth_b)


_NU_SPLIT = -0.75   # below: real hyperbolic formulas (no overflow); above: complex trig
_NU_TAYLOR = 0.5    # |nu| below this: Taylor series in nu (complex step fails at s ~ 0)


def _taylor_coefficients(order=48, npts=256, radius=1.0):
    """Taylor coefficients of g about nu = 0 from a Cauchy (FFT) contour integral.

    g is even in s, hence analytic in nu; its nearest singularity is the pole at
    nu = 4, so on |nu| <= 0.5 the series converges like 8^-k.
    """
    theta = 2 * np.pi * np.arange(npts) / npts
    z = radius * np.exp(1j * theta)
    vals = _g_complex(np.sqrt(z))
    coef = np.fft.fft(vals) / npts
    return (coef[:order] / radius ** np.arange(order)).real


_TAYLOR = None


def _taylor():
    global _TAYLOR
    if _TAYLOR is None:
        _TAYLOR = _taylor_coefficients()
    return _TAYLOR


# ---------------------------------------------------------------------------
# Compiled scalar versions (same formulas) used by the root finder.

@numba.njit(cache=True)
def _gc_scalar(s):
    eps = s - 4.0
    if abs(eps) < 0.5:
        if eps == 0:
            return complex(_G_AT_4)
        num = 8.0 * cmath.sin(math.pi * eps / 3) * cmath.sin(math.pi * eps / 6) \
            - eps * cmath.cos(math.pi * eps / 2) - (4.0 / math.sqrt(3.0)) * cmath.sin(math.pi * eps / 6)
        return num / cmath.sin(math.pi * eps / 2)
    if s == 0:
        return complex(-2.0 / math.pi + _C8 / 3.0)
    return (-s * cmath.cos(math.pi * s / 2) + _C8 * cmath.sin(math.pi * s / 6)) / cmath.sin(math.pi * s / 2)


@numba.njit(cache=True)
def _g_and_gnu_scalar(nu, taylor):
    if nu < _NU_SPLIT:
        sg = math.sqrt(-nu)
        em = math.exp(-math.pi * sg)
        coth = (1 + em) / (1 - em)
        ratio = math.exp(-math.pi * sg / 3) * (1 - math.exp(-math.pi * sg / 3)) / (1 - em)
        g = -sg * coth + _C8 * ratio
        b = math.pi / 2
        c = math.pi / 6
        inv_sinh2 = 4 * em / (1 - em) ** 2
        emc = math.exp(-2 * c * sg)
        coth_c = (1 + emc) / (1 - emc)
        dg = -coth + b * sg * inv_sinh2 + _C8 * ratio * (c * coth_c - b * coth)
        return g, dg / (-2.0 * sg)
    if abs(nu) < _NU_TAYLOR:
        g = 0.0
        d = 0.0
        for k in range(taylor.size - 1, -1, -1):
            g = g * nu + taylor[k]
            if k >= 1:
                d = d * nu + k * taylor[k]
        return g, d
    g = _gc_scalar(cmath.sqrt(complex(nu))).real
    hs = 1e-20 * max(1.0, abs(nu))
    d = _gc_scalar(cmath.sqrt(complex(nu, hs))).imag / hs
    return g, d


@numba.njit(cache=True)
def _roots_kernel(shift, lo0, hi0, taylor):
    m = shift.size
    nch = lo0.shape[1]
    out = np.empty((m, nch))
    for i in range(m):
        for n in range(nch):
            lo = lo0[i, n]
            hi = hi0[i, n]
            # Safeguarded Newton (bisection whenever a step leaves the bracket); g is
            # increasing between its poles, so the sign test keeps a valid bracket.
            x = 0.5 * (lo + hi)
            for it in range(200):
                g, d = _g_and_gnu_scalar(x, taylor)
                f = g + shift[i]
                if f > 0:
                    hi = x
                else:
                    lo = x
                xn = x - f / d
                if not (xn > lo and xn < hi):
                    xn = 0.5 * (lo + hi)
                if abs(xn - x) <= 1e-15 * max(1.0, abs(x)) or hi - lo <= 1e-15 * max(1.0, abs(x)):
                    x = xn
                    break
                x = xn
            out[i, n] = x
    return out


def g_function(nu):
    """Angular part g(nu) = G - sqrt(2) R/a of the transcendental function, nu = s^2.

    Parameters
    ----------
    nu : array_like of float
        Hyperangular eigenvalue s^2 (dimensionless); may be negative (imaginary s).

    Returns
    -------
    ndarray of float
        g, real; poles at s = 2, 6, 8, 10, ... (not at the spurious s = 4).
    """
    nu = np.asarray(nu, dtype=float)
    out = np.empty_like(nu)
    neg = nu < _NU_SPLIT
    out[neg] = _g_imag(np.sqrt(-nu[neg]))
    small = np.abs(nu) < _NU_TAYLOR
    out[small] = np.polynomial.polynomial.polyval(nu[small], _taylor())
    pos = ~neg & ~small
    out[pos] = _g_complex(np.sqrt(nu[pos] + 0j)).real
    return out


def g_nu(nu):
    """Derivative dg/d(s^2) (positive everywhere between poles).

    Parameters
    ----------
    nu : array_like of float
        s^2 at which to evaluate.

    Returns
    -------
    ndarray of float
    """
    nu = np.asarray(nu, dtype=float)
    out = np.empty_like(nu)
    neg = nu < _NU_SPLIT
    sig = np.sqrt(-nu[neg])
    out[neg] = _g_imag_dsigma(sig) / (-2.0 * sig)
    small = np.abs(nu) < _NU_TAYLOR
    c = _taylor()
    out[small] = np.polynomial.polynomial.polyval(nu[small], c[1:] * np.arange(1, c.size))
    pos = ~neg & ~small
    nup = nu[pos]
    # Complex-step differentiation: exact to rounding, no subtractive cancellation
    # (g is even in s, hence analytic in nu, so the branch of sqrt is irrelevant).
    hstep = 1e-20 * np.maximum(1.0, np.abs(nup))
    out[pos] = _g_complex(np.sqrt(nup + 1j * hstep)).imag / hstep
    return out


def pole_list(nchan):
    """Poles of g in s bounding the root intervals: [2, 6, 8, 10, ...] (nchan entries)."""
    return np.array([2.0] + [2.0 * j for j in range(3, nchan + 2)])


def adiabatic_nu(rho, inv_a, nchan):
    """Lowest ``nchan`` physical roots nu_n = s_n^2 at hyperradii ``rho``.

    Parameters
    ----------
    rho : array_like of float
        Hyperradius in units of |a| (any positive value when ``inv_a`` = 0).
    inv_a : {-1, 0, +1}
        Sign of 1/a (0 means |a| = infinity).
    nchan : int
        Number of channels.

    Returns
    -------
    ndarray, shape (len(rho), nchan)
        nu_n(R), increasing with n.
    """
    rho = np.atleast_1d(np.asarray(rho, dtype=float))
    tau = rho * inv_a
    shift = _SQRT2 * tau                      # G = g(nu) + sqrt2 R/a
    poles = pole_list(nchan + 1) ** 2
    lo = np.empty((rho.size, nchan))
    hi = np.empty((rho.size, nchan))
    lo[:, 0] = -(_SQRT2 * np.maximum(tau, 0.0) + 4.0) ** 2
    hi[:, 0] = poles[0]
    for n in range(1, nchan):
        lo[:, n] = poles[n - 1]
        hi[:, n] = poles[n]
    return _roots_kernel(shift, lo, hi, _taylor())


def coupling_matrix(nu, inv_a):
    """First-derivative couplings P_mn = <Phi_m|d/dR Phi_n> (units 1/|a|).

    Parameters
    ----------
    nu : ndarray, shape (..., nchan)
        Roots from :func:`adiabatic_nu`.
    inv_a : {-1, 0, +1}

    Returns
    -------
    ndarray, shape (..., nchan, nchan)
        Antisymmetric; zero at unitarity.  The sign convention keeps every normalised
        contact coefficient positive, which is continuous in R (including where
        channel 1 crosses the spurious value s = 4).
    """
    nu = np.asarray(nu, dtype=float)
    gn = g_nu(nu.ravel()).reshape(nu.shape)
    c = 1.0 / np.sqrt(gn)
    dnu = nu[..., :, None] - nu[..., None, :]
    nchan = nu.shape[-1]
    eye = np.eye(nchan, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = _SQRT2 * inv_a * c[..., :, None] * c[..., None, :] / dnu
    p = np.where(eye, 0.0, p)
    return p


def adiabatic_data(rho, inv_a, nchan):
    """Roots and couplings together: (nu, P) at hyperradii ``rho``."""
    nu = adiabatic_nu(rho, inv_a, nchan)
    return nu, coupling_matrix(nu, inv_a)

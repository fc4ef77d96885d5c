"""a > 0, J >= 1: atom-dimer breakup in the higher partial waves (STM equation).

For three identical bosons with zero-range interactions only the J = 0 channel has the
Efimov attraction; in every J >= 1 channel the hyperradial potential is repulsive at
short distance, so the three atoms never reach the deep dimers and the three-body force
(which is a J = 0 s-wave term) drops out.  The J >= 1 atom-dimer amplitudes are then
universal functions of k_AD a alone, with no three-body parameter and no eta.  Above the
breakup threshold (k_AD a > 2/sqrt 3) a J >= 1 atom-dimer collision can only scatter
elastically or break the dimer up, so

    P_break,J(k_AD a) = 1 - |S_J|^2,

and by detailed balance each J adds (2J + 1) P_break,J to the shallow-dimer recombination
rate (docs/stm.md, section 7).

Equation: the STM equation of :mod:`.stm` with the one-atom-exchange kernel projected on
the atom-dimer orbital angular momentum l = J (the dimer is an s wave),

    M_l(p, q; E) = (1/2) int_{-1}^{1} dx P_l(x) / (p^2 + q^2 + p q x - E)
                 = (-1)^l Q_l(z) / (p q),        z = (p^2 + q^2 - E) / (p q),

with Q_l the Legendre function of the second kind (cut on [-1, 1]; M_0 is the kernel of
:func:`.stm.kernel_log`).  Units and the deformed contour are those of
:func:`.stm.above_breakup`; the partial-wave projection is the standard one (e.g.
Braaten & Hammer, Phys. Rep. 428, 259 (2006), section 6, for the s wave).

Q_l(z) is computed by Miller's backward recurrence for the ratios Q_l / Q_(l-1) (the
minimal solution of the Legendre recurrence, stable where upward recurrence and the
closed form P_l Q_0 - W_(l-1) lose |z + sqrt(z^2 - 1)|^(2l) to cancellation), started
far enough above l for double precision and normalised by Q_0(z) = atanh(1/z).
"""

__all__ = ["legendre_q", "legendre_p", "partial_wave_kernel", "PartialWaveSolver",
           "breakup_partial_wave"]
# PartialWaveSolver.born_breakup is the large-J form used where the solves are not needed

import cmath
import math

import numba
import numpy as np
from scipy.linalg import lu_factor, lu_solve

from .stm import atom_dimer_contour, kernel_onshell


@numba.njit(cache=True)
def _q_ratios(zi, l_hi, ratios):
    """Q_0(zi), with ratios[m] = Q_m / Q_(m-1) for 1 <= m <= l_hi: the backward recurrence
    r_m = m / ((2m + 1) z - (m + 1) r_(m+1)), started far enough above l_hi that its error,
    ~|xi|^(-2 (L - l)), is below double precision."""
    q0 = cmath.atanh(1.0 / zi)
    xi = zi + cmath.sqrt(zi - 1.0) * cmath.sqrt(zi + 1.0)
    mod = abs(xi)
    if mod < 1.0:
        mod = 1.0 / mod
    extra = 6
    if mod > 1.0 + 1e-12:
        extra += int(40.0 / (2.0 * math.log(mod)))
    if extra > 20000:
        extra = 20000
    r = 0.0 + 0.0j
    for m in range(l_hi + extra, 0, -1):
        r = m / ((2.0 * m + 1.0) * zi - (m + 1.0) * r)
        if m <= l_hi:
            ratios[m] = r
    return q0


@numba.njit(cache=True)
def _q_block(z, l_lo, l_hi, out):
    """Q_l(z) for l_lo <= l <= l_hi at once (out[l - l_lo, i]), complex z off [-1, 1]:
    one backward sweep of the ratios per z (:func:`_q_ratios`) serves every degree of the
    block, Q_l = Q_0 r_1 ... r_l."""
    ratios = np.empty(l_hi + 1, dtype=np.complex128)
    for i in range(z.size):
        prod = _q_ratios(z[i], l_hi, ratios)
        if l_lo == 0:
            out[0, i] = prod
        for m in range(1, l_hi + 1):
            prod *= ratios[m]
            if m >= l_lo:
                out[m - l_lo, i] = prod


@numba.njit(cache=True)
def _weighted_square_sums(z, shift, pq, weights, l_max, out):
    """out[l - 1] = sum_i weights_i (Q_l(z_i) + shift_i P_l(z_i))^2 / pq_i^2 for l = 1..l_max,
    node by node, so that memory stays O(l_max) (the sign (-1)^l of the kernel squares
    away)."""
    ratios = np.empty(l_max + 1, dtype=np.complex128)
    for m in range(l_max):
        out[m] = 0.0
    for i in range(z.size):
        zi = z[i]
        prod = _q_ratios(zi, l_max, ratios)
        scale = weights[i] / (pq[i] * pq[i])
        moved = shift[i] != 0.0
        p0 = 1.0 + 0.0j
        p1 = zi
        for m in range(1, l_max + 1):
            prod *= ratios[m]
            val = prod
            if moved:
                val = prod + shift[i] * p1
                p0, p1 = p1, ((2.0 * m + 1.0) * zi * p1 - m * p0) / (m + 1.0)
            out[m - 1] += scale * val * val


@numba.njit(cache=True)
def _legendre_p_scalar(z, ell):
    if ell == 0:
        return 1.0 + 0.0j
    p0 = 1.0 + 0.0j
    p1 = z
    for m in range(1, ell):
        p0, p1 = p1, ((2.0 * m + 1.0) * z * p1 - m * p0) / (m + 1.0)
    return p1


@numba.njit(cache=True)
def _p_array(z, ell, out):
    for i in range(z.size):
        out[i] = _legendre_p_scalar(z[i], ell)


def legendre_q(ell, z):
    """Legendre function of the second kind Q_ell(z) for complex z off the cut [-1, 1].

    Parameters
    ----------
    ell : int
        Degree (>= 0).
    z : array_like, complex

    Returns
    -------
    ndarray (complex)
        Q_0(z) = (1/2) ln[(z + 1)/(z - 1)] (principal branch of the ratio) and the
        minimal solution of (l + 1) Q_(l+1) = (2l + 1) z Q_l - l Q_(l-1).
    """
    if int(ell) != ell or ell < 0:
        raise ValueError(f"ell must be a non-negative integer, got {ell!r}")
    z = np.asarray(z, dtype=complex)
    out = np.empty((1, z.size), dtype=complex)
    _q_block(z.ravel(), int(ell), int(ell), out)
    return out.reshape(z.shape)


def legendre_p(ell, z):
    """Legendre polynomial P_ell(z) for complex z (upward recurrence, stable for P)."""
    z = np.asarray(z, dtype=complex)
    out = np.empty(z.size, dtype=complex)
    _p_array(z.ravel(), int(ell), out)
    return out.reshape(z.shape)


def partial_wave_kernel(ell, p, q, energy):
    """Projected one-atom-exchange kernel M_ell(p, q; E) on the principal branch.

    Parameters
    ----------
    ell : int
        Atom-dimer orbital angular momentum.
    p, q : array_like, complex
        Momenta (units 1/a), broadcast as p[:, None], q[None, :]; pq != 0.
    energy : float
        E m a^2 / hbar^2.

    Returns
    -------
    ndarray (complex)
        (-1)^ell Q_ell(z) / (p q), z = (p^2 + q^2 - E)/(p q).
    """
    p = np.asarray(p, dtype=complex)[:, None]
    q = np.asarray(q, dtype=complex)[None, :]
    pq = p * q
    z = (p * p + q * q - energy) / pq
    return (-1.0) ** ell * legendre_q(ell, z) / pq


def _onshell_kernel(ell, k0, q, energy):
    """M_ell(k0, q) for real k0 and q along the contour, on the branch continued along the
    path (as :func:`.stm.kernel_onshell` does for l = 0): the continued Q_0 differs from
    the principal one by i pi n, and Q_l = P_l Q_0 - W_(l-1) moves by i pi n P_l."""
    pq = k0 * q
    z = (k0 * k0 + q * q - energy) / pq
    q0_path = kernel_onshell(k0, q, energy) * pq
    q0_principal = np.arctanh(1.0 / z)
    # the branches differ by exactly i pi n; rounding keeps P_l (~ z^l at small q) from
    # amplifying the rounding noise of the difference
    shift = 1j * math.pi * np.round((q0_path - q0_principal).imag / math.pi)
    ql = legendre_q(ell, z)
    moved = shift != 0                 # P_l overflows at the small-q nodes, where shift = 0
    ql[moved] += shift[moved] * legendre_p(ell, z[moved])
    return (-1.0) ** ell * ql / pq


class PartialWaveSolver:
    """Atom-dimer scattering in the partial wave l = J >= 1 at one k_AD a (no three-body
    force; universal).

    The contour, the node placement and the dimer propagator are those of
    :class:`.stm.AtomDimerRankOne`.

    Parameters
    ----------
    kad : float
        k_AD a (> 0); E = (-1 + 3 k_AD^2 a^2/4) hbar^2/(m a^2).
    cutoff : float
        Lambda a.  The l >= 1 kernel falls like (q_small/q_large)^(l+1), so the results
        converge quickly in Lambda (checked in the tests).
    phi, per_decade, narc, q_factor, order, qmin, dmax
        Discretisation as in :class:`.stm.AtomDimerRankOne`.
    """

    def __init__(self, kad, cutoff=1e4, phi=None, per_decade=48, narc=32, q_factor=20.0,
                 order=8, qmin=1e-6, dmax="auto"):
        k0 = float(kad)
        if not k0 > 0:
            raise ValueError(f"kad must be > 0, got {kad!r}")
        self.kad = k0
        self.energy, self.phi, _, self._q, self._cw = atom_dimer_contour(
            k0, cutoff, phi, per_decade, narc, q_factor, order, qmin, dmax)
        self.nodes = self._q.size

    def amplitude(self, ell):
        """(f_l / a, S_l) of the partial wave ``ell``; S_l = 1 + 2 i k_AD f_l."""
        q = self._q
        return self._solve(ell, partial_wave_kernel(ell, q, q, self.energy))

    def amplitudes(self, ells, block=8):
        """S_l for every l in ``ells`` (consecutive degrees share one Legendre sweep per
        kernel element, ``block`` at a time)."""
        q, energy = self._q, self.energy
        pq = q[:, None] * q[None, :]
        z = ((q[:, None] ** 2 + q[None, :] ** 2 - energy) / pq).ravel()
        ells = sorted(int(v) for v in ells)
        out = {}
        for lo in range(0, len(ells), block):
            part = ells[lo:lo + block]
            qs = np.empty((part[-1] - part[0] + 1, z.size), dtype=complex)
            _q_block(z, part[0], part[-1], qs)
            for ell in part:
                kern = (-1.0) ** ell * qs[ell - part[0]].reshape(pq.shape) / pq
                out[ell] = self._solve(ell, kern)[1]
        return np.array([out[int(v)] for v in ells])

    def born_breakup(self, l_max):
        """Breakup probabilities P_l of l = 1..l_max to second order in the exchange kernel.

        With y = (1 - K)^-1 M(q, k0) replaced by its first term M(q, k0), the amplitude is
        f = g M(k0, k0) + g sum_q w_q M(k0, q)^2 (g = 16/3) and, to the same order,

            P_l = 1 - |S_l|^2 = 4 k0 Im f - 4 k0^2 |f|^2 ~ 4 k0 g Im sum_q w_q M(k0, q)^2 - 4 k0^2 g^2 M(k0, k0)^2

        (M(k0, k0) is real: z = 5/4 + 1/k0^2 > 1). Large l probe large atom-dimer distances,
        where the kernel is weak, so the form becomes exact as l grows; its accuracy against
        the solves is measured in docs/stm.md section 7 (3e-3 at l = k_AD a/2, 2e-5 at
        l = 1.5 k_AD a, for k_AD a = 36.5). One O(nodes) row per l, no linear solve.

        Returns
        -------
        ndarray
            P_l for l = 1..l_max.
        """
        l_max = int(l_max)
        k0, energy, q, cw = self.kad, self.energy, self._q, self._cw
        pq = k0 * q
        z = (k0 * k0 + q * q - energy) / pq
        # the on-shell row continued along the path, as _onshell_kernel does one l at a time
        q0_path = kernel_onshell(k0, q, energy) * pq
        shift = 1j * math.pi * np.round((q0_path - np.arctanh(1.0 / z)).imag / math.pi)
        second = np.empty(l_max, dtype=complex)
        _weighted_square_sums(z, shift, pq, cw, l_max, second)
        zkk = np.array([(2.0 * k0 * k0 - energy) / (k0 * k0) + 0j])
        qkk = np.empty((l_max, 1), dtype=complex)
        _q_block(zkk, 1, l_max, qkk)
        mkk = qkk[:, 0].real / (k0 * k0)
        g = 16.0 / 3.0
        return 4.0 * k0 * g * second.imag - 4.0 * k0 * k0 * g * g * mkk ** 2

    def _solve(self, ell, kernel):

        k0, energy, q, cw = self.kad, self.energy, self._q, self._cw
        kmat = -kernel * cw[None, :]
        kmat[np.diag_indices_from(kmat)] += 1.0
        mv = _onshell_kernel(ell, k0, q, energy)
        lu = lu_factor(kmat.T, overwrite_a=True, check_finite=False)
        # (1 - K) A = (16/3) M(q, k0); factorised as the Fortran-ordered transpose (no copy)
        y = lu_solve(lu, mv, trans=1, check_finite=False)           # A / (16/3)
        zkk = (2.0 * k0 * k0 - energy) / (k0 * k0)
        mkk = (-1.0) ** ell * complex(legendre_q(ell, np.array([zkk + 0j]))[0]) / (k0 * k0)
        g = 16.0 / 3.0
        f = g * mkk + g * np.sum(cw * mv * y)
        return f, 1.0 + 2j * k0 * f


def breakup_partial_wave(kad, ells, **num):
    """Breakup probabilities P_break,l = 1 - |S_l|^2 for the partial waves ``ells``.

    Parameters
    ----------
    kad : float
        k_AD a.
    ells : sequence of int
        Partial waves (each >= 1: l = 0 carries the three-body force, see
        :func:`.stm.s_ad_from_stm`).
    **num
        Passed to :class:`PartialWaveSolver`.

    Returns
    -------
    ndarray
        1 - |S_l|^2 for each l (0 below breakup up to the discretisation error).
    """
    ells = [int(v) for v in ells]
    if any(v < 1 for v in ells):
        raise ValueError("ells must be >= 1 (l = 0 needs the three-body force)")
    sol = PartialWaveSolver(kad, **num)
    return 1.0 - np.abs(sol.amplitudes(ells)) ** 2

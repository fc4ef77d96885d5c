"""Loading and interpolating the shipped universal-function tables (no solver at run time).

``data/s11_negative_a.npz`` (written by ``scripts/make_universal_tables.py``; method,
grids, cutoffs, estimated errors and git hash in its ``metadata``) holds, for a < 0 and
J = 0, the long-distance reflection amplitude s11(x) of the Efimov channel on a log
grid of x = k|a| (E = hbar^2 k^2/m), as ln(1 - |s11|^2) and the unwrapped phase of s11.

Interpolation: not-a-knot cubic splines (:func:`spline_coefficients`, the coefficients
scipy's ``CubicSpline`` gives; tested against it) of both in ln x,
evaluated in numba. Outside the grid the known limits take over:

* x below the grid: 1 - |s11|^2 = x^4 (c4 + d x^2) and arg s11 = delta0 + e x^2 (the
  threshold limits c4, delta0 stored with the table and their O(x^2) corrections, about
  1e-6 at the first node), d and e set so that the function is continuous at the first
  node;
* x above the grid: the exact unitarity value
  s11 = -exp(-pi s0) (x/sqrt 2)^(-2 i s0) Gamma(1 + i s0)/Gamma(1 - i s0),
  plus the table's last difference from it decaying like 1/x (docs/solver.md: the
  table approaches unitarity like 1/x).

The tables ``data/s11_mixture_<B>_<X>.npz`` of two identical bosons and a third atom
(``scripts/make_mixture_tables.py``, docs/heteronuclear-rates.md) share the layout and
carry their own ``s0``; above their grid 1 - |s11|^2 tends to 1 - exp(-2 pi s0) and arg s11
turns as -2 s0 ln x from the last node (no exact unitarity phase is known in their phase
convention), both with the last difference decaying like 1/x.

``data/s11_mixture_abb_133Cs_6Li.npz`` (``scripts/make_mixture_abb_table.py``) stacks such
tables on a grid of r = a_bb/a (a B-B interaction): :class:`S11RatioTable`, interpolated in ln r.

The tables ``data/s_ad_mixture_<B>_<X>.npz`` (``scripts/make_mixture_atom_dimer_tables.py``,
docs/heteronuclear-rates.md) hold s_AD(k a) and T_AD(k a) of a boson B colliding with the
shallow B-X dimer at a > 0, below and above breakup: :class:`MixtureAtomDimerTable`; the
tables ``data/k3_positive_mixture_<B>_<X>.npz`` (``scripts/make_mixture_recombination_tables.py``)
the J = 0 three-body recombination at a > 0 into shallow and deep dimers:
:class:`MixtureRecombinationTable`.
"""

__all__ = ["S11Table", "S11RatioTable", "load_s11_ratio_table",
           "AtomDimerTable", "RecombinationTable", "MixtureAtomDimerTable", "MixtureRecombinationTable",
           "load_s11_table", "load_atom_dimer_table", "load_recombination_table", "load_mixture_atom_dimer_table",
           "load_mixture_recombination_table", "mixture_recombination_eval", "mixture_recombination_values",
           "table_path",
           "cache_directory", "spline_coefficients"]

import bisect
import cmath
import json
import math
import os

import numba
import numpy as np

from ..constants import ARG_GAMMA_S0, S0
from ..errors import LossfitError

_DATA = os.path.join(os.path.dirname(os.path.abspath(__file__)), "data")


def _open_table(path):
    if not os.path.exists(path):
        raise LossfitError(f"universal-function table {path!r} is missing from the installation")
    return np.load(path, allow_pickle=False)


def spline_coefficients(x, y):
    """Coefficients (4, n - 1) of the not-a-knot cubic spline through (x, y), highest
    power first, in the layout of ``scipy.interpolate.CubicSpline(x, y).c``.

    Written out (a tridiagonal-plus-ends solve for the second derivatives) because the
    scipy.interpolate import costs a third of a second of every start-up.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.size
    h = np.diff(x)
    slope = np.diff(y) / h
    # unknowns: second derivatives m_0..m_{n-1}
    mat = np.zeros((n, n))
    rhs = np.zeros(n)
    for i in range(1, n - 1):
        mat[i, i - 1:i + 2] = h[i - 1], 2.0 * (h[i - 1] + h[i]), h[i]
        rhs[i] = 6.0 * (slope[i] - slope[i - 1])
    # not-a-knot: the third derivative is continuous at x_1 and x_{n-2}
    mat[0, :3] = h[1], -(h[0] + h[1]), h[0]
    mat[-1, -3:] = h[-1], -(h[-2] + h[-1]), h[-2]
    m = np.linalg.solve(mat, rhs)
    return np.array([(m[1:] - m[:-1]) / (6.0 * h), 0.5 * m[:-1],
                     slope - h * (2.0 * m[:-1] + m[1:]) / 6.0, y[:-1]])


def table_path(name="s11_negative_a.npz"):
    """Absolute path of a shipped table."""
    return os.path.join(_DATA, name)


def cache_directory():
    """Where tables built on demand (``lossfit tables``) are kept: $LOSSFIT_CACHE, else
    ~/.cache/lossfit."""
    return os.environ.get("LOSSFIT_CACHE") or os.path.join(os.path.expanduser("~"), ".cache", "lossfit")


class S11Table:
    """Spline coefficients and limits of s11(x) for a < 0, packed for numba.

    Attributes
    ----------
    packed : ndarray
        1-D float array consumed by :func:`s11_eval` (layout in :func:`_pack`).
    metadata : dict
        The table's provenance (method, grids, estimated errors, git hash).
    k3_prefactor : float or None
        72 sqrt(3) pi^2: K3 = prefactor hbar/(m k^4) x absorption probability (identical
        bosons; None for a table of two bosons and a third atom, whose prefactor depends
        on the masses).
    s0 : float
        Efimov exponent of the table's system.
    """

    def __init__(self, path):
        with _open_table(path) as d:
            # tables of two identical bosons and a third atom carry their own s0 and no
            # exact unitarity phase (docs/heteronuclear-rates.md)
            identical = "k3_prefactor" in d.files
            self._setup(np.array(d["x"]), np.array(d["log_transmission"]), np.array(d["phase"]),
                        float(d["threshold_c4"]), float(d["threshold_phase"]),
                        float(d["s0"]) if "s0" in d.files else S0,
                        float(d["mass_ratio"]) if "mass_ratio" in d.files else 1.0,
                        float(d["kappa_star_a_minus"]), json.loads(str(d["metadata"])),
                        float(d["k3_prefactor"]) if identical else None, path)

    @classmethod
    def from_arrays(cls, x, log_transmission, phase, c4, delta0, s0, mass_ratio, kappa_star_a_minus, metadata):
        """A table of two identical bosons and a third atom from its columns (one slice of
        :class:`S11RatioTable`); arguments as the file's keys of the same names."""
        table = cls.__new__(cls)
        table._setup(np.asarray(x, dtype=float), np.asarray(log_transmission, dtype=float),
                     np.asarray(phase, dtype=float), float(c4), float(delta0), float(s0), float(mass_ratio),
                     float(kappa_star_a_minus), metadata, None, "<arrays>")
        return table

    def _setup(self, x, logt, phase, c4, delta0, s0, mass_ratio, kappa_star_a_minus, metadata, k3_prefactor, path):
        self.s0 = s0
        self.mass_ratio = mass_ratio
        self.kappa_star_a_minus = kappa_star_a_minus
        self.c4 = c4
        self.delta0 = delta0
        self.k3_prefactor = k3_prefactor
        self.metadata = metadata
        lnx = np.log(x)
        step = np.diff(lnx)
        if not np.allclose(step, step[0], rtol=1e-9, atol=0):
            raise LossfitError(f"{path!r}: the x grid is not uniform in ln x")
        self.x = x
        self.packed = _pack(lnx, logt, phase, self.c4, self.delta0, self.s0,
                            _unitarity_phase(x[-1]) if k3_prefactor is not None else None)

    def s11(self, x):
        """s11 at x = k|a| (array), evaluated as the runtime kernels do."""
        return self.amplitudes(x)[1]

    def amplitudes(self, x):
        """(1 - |s11|^2, s11) at x = k|a| (arrays), evaluated as the runtime kernels do."""
        x = np.asarray(x, dtype=float)
        t, ph = s11_values(self.packed, np.ascontiguousarray(x.ravel()))
        mod = np.sqrt(np.maximum(1.0 - t, 0.0))
        return t.reshape(x.shape), (mod * np.cos(ph) + 1j * mod * np.sin(ph)).reshape(x.shape)

    def kinks(self):
        """(first, last) grid point in x: where the kernels have kinks."""
        return grid_limits(self.packed)


#: 1 - |s|^2 of the Efimov channel at |a| = infinity (both signs of a).
T_UNITARITY = 1.0 - math.exp(-2.0 * math.pi * S0)


@numba.njit(cache=True)
def _unitarity_phase(x):
    """arg s at |a| = infinity, x = k|a| (a < 0) or sqrt(E m a^2/hbar^2) (a > 0): the exact
    s = -exp(-pi s0) (x/sqrt 2)^(-2 i s0) Gamma(1 + i s0)/Gamma(1 - i s0) (docs/solver.md)."""
    return math.pi - 2.0 * S0 * math.log(x / math.sqrt(2.0)) + 2.0 * ARG_GAMMA_S0


_HEADER = 11


def _pack(lnx, logt, phase, c4, delta0, s0=S0, unitarity_phase_last=None):
    # [n, lnx0, h, c4, delta0, tail_dT, tail_dphase, x_last, s0, T_unitarity,
    #  phase at unitarity at x_last, c_logt (4*(n-1)), c_phase (4*(n-1))]
    # Above the grid arg s11 = (its unitarity value at x_last) - 2 s0 ln(x/x_last) plus the
    # table's last difference from it decaying like 1/x.  unitarity_phase_last=None takes
    # the table's own last phase (no exact unitarity phase known in the table's convention:
    # the difference is then zero).
    n = lnx.size
    c_logt = spline_coefficients(lnx, logt)
    c_phase = spline_coefficients(lnx, phase)
    x_last = math.exp(lnx[-1])
    t_unitarity = 1.0 - math.exp(-2.0 * math.pi * s0)
    tail_dt = math.exp(logt[-1]) - t_unitarity
    if unitarity_phase_last is None:
        p_unit = phase[-1]
    else:
        # unwrap the unitarity phase onto the table's branch at the last node
        p_unit = unitarity_phase_last + 2.0 * math.pi * round((phase[-1] - unitarity_phase_last) / (2.0 * math.pi))
    head = np.array([n, lnx[0], lnx[1] - lnx[0], c4, delta0, tail_dt, phase[-1] - p_unit, x_last, s0,
                     t_unitarity, p_unit])
    assert head.size == _HEADER
    return np.concatenate([head, c_logt.T.ravel(), c_phase.T.ravel()])


@numba.njit(cache=True, inline="always")
def _spline(packed, offset, i, dx):
    base = offset + 4 * i
    return ((packed[base] * dx + packed[base + 1]) * dx + packed[base + 2]) * dx + packed[base + 3]


@numba.njit(cache=True)
def grid_limits(packed):
    """(x_first, x_last) of the table grid, where the kernels have kinks."""
    return math.exp(packed[1]), packed[7]


@numba.njit(cache=True)
def s11_eval(packed, x):
    """(1 - |s11|^2, arg s11) at x = k|a| from a packed table."""
    n = int(packed[0])
    lnx0 = packed[1]
    h = packed[2]
    lnx = math.log(x)
    if lnx <= lnx0:
        # threshold laws 1 - |s11|^2 -> c4 x^4 and arg s11 -> delta0 with their O(x^2)
        # corrections, matched to the first node so that the kernel is continuous (a jump
        # would stall adaptive quadrature) and tends to the solver's threshold values
        r = x / math.exp(lnx0)
        r2 = r * r
        x0 = math.exp(lnx0)
        c4_first = math.exp(_spline(packed, _HEADER, 0, 0.0)) / (x0 * x0 * x0 * x0)
        ph0 = _spline(packed, _HEADER + 4 * (n - 1), 0, 0.0)
        t = x * x * x * x * (packed[3] + (c4_first - packed[3]) * r2)
        return t, packed[4] + (ph0 - packed[4]) * r2
    x_last = packed[7]
    if x >= x_last:
        r = x_last / x
        return packed[9] + packed[5] * r, packed[10] + 2.0 * packed[8] * math.log(r) + packed[6] * r
    i = int((lnx - lnx0) / h)
    if i > n - 2:
        i = n - 2
    dx = lnx - (lnx0 + i * h)
    logt = _spline(packed, _HEADER, i, dx)
    ph = _spline(packed, _HEADER + 4 * (n - 1), i, dx)
    return math.exp(logt), ph


@numba.njit(cache=True)
def s11_values(packed, x):
    """:func:`s11_eval` at every x of an array: (1 - |s11|^2, arg s11) arrays."""
    t = np.empty(x.size)
    ph = np.empty(x.size)
    for i in range(x.size):
        t[i], ph[i] = s11_eval(packed, x[i])
    return t, ph


_CACHE = {}


def load_s11_table(path=None):
    """The shipped a < 0 table (loaded once per process)."""
    path = path or table_path()
    if path not in _CACHE:
        _CACHE[path] = S11Table(path)
    return _CACHE[path]


class S11RatioTable:
    """s11(x; r) of two identical bosons and a third atom at a < 0 on a grid of r = a_bb/a
    (written by :func:`lossfit.universal.solver.mixture_tables.build_ratio_table`).

    Each r is a slice in the layout of :class:`S11Table` (splines in ln x and their limits),
    with its phase measured from its own a_-: arg s11(x; r) = phase_rel(x; r) -
    2 s0 ln|kappa* a_-(r)|, kappa* defined at 1/a = 1/a_bb = 0 and s0 that of three
    resonant pairs. Between slices ln T, phase_rel and ln|kappa* a_-| are not-a-knot cubic
    splines in ln r (written as weights of the slices, :meth:`weights`); outside
    [r_min, r_max] nothing is defined (docs/heteronuclear-rates.md, "The B-B interaction at
    a < 0").

    Attributes
    ----------
    ratios : ndarray
        The r grid.
    slices : list of S11Table
        One per r, phases relative (phase_rel).
    packed : ndarray
        (n_r, length) the slices' packed arrays, for :func:`s11_eval` row by row.
    s0, mass_ratio : float
    kappa_star_a_minus : ndarray
        kappa* a_- per slice.
    metadata : dict
    """

    def __init__(self, path):
        with _open_table(path) as d:
            self.ratios = np.array(d["a_bb_ratio"])
            self.s0 = float(d["s0"])
            self.mass_ratio = float(d["mass_ratio"])
            self.kappa_star_a_minus = np.array(d["kappa_star_a_minus"])
            self.metadata = json.loads(str(d["metadata"]))
            self.slices = [S11Table.from_arrays(d["x"], d["log_transmission"][k], d["phase_rel"][k],
                                                d["threshold_c4"][k], d["threshold_phase_rel"][k], self.s0,
                                                self.mass_ratio, self.kappa_star_a_minus[k], self.metadata)
                           for k in range(self.ratios.size)]
        self.packed = np.ascontiguousarray(np.stack([t.packed for t in self.slices]))
        self._ln_r = np.log(self.ratios)
        # the spline through (ln r_k, e_j) for each unit vector e_j: f(r) = sum_j w_j(r) f_j
        self._basis = np.stack([spline_coefficients(self._ln_r, np.eye(self.ratios.size)[j])
                                for j in range(self.ratios.size)])
        self._ln_kappa = np.log(np.abs(self.kappa_star_a_minus))
        # the same spline of ln|kappa* a_-| written out, for the per-walker rotation
        self._kappa_c = spline_coefficients(self._ln_r, self._ln_kappa)
        self._ln_r_list = self._ln_r.tolist()
        self._kappa_list = self._kappa_c.T.tolist()

    def kinks(self):
        """(first, last) grid point in x (one x grid for all slices)."""
        return self.slices[0].kinks()

    @property
    def r_range(self):
        """(r_min, r_max) of the grid."""
        return float(self.ratios[0]), float(self.ratios[-1])

    def weights(self, r):
        """Interpolation weights of the slices at each r (array, inside the grid): shape
        r.shape + (n_r,)."""
        r = np.asarray(r, dtype=float)
        lo, hi = self.r_range
        if not ((r >= lo * (1 - 1e-12)) & (r <= hi * (1 + 1e-12))).all():
            raise ValueError(f"a_bb/a outside the table's range [{lo:g}, {hi:g}]")
        ln_r = np.clip(np.log(r), self._ln_r[0], self._ln_r[-1])
        i = np.clip(np.searchsorted(self._ln_r, ln_r) - 1, 0, self.ratios.size - 2)
        dx = ln_r - self._ln_r[i]
        c = self._basis[:, :, i]                                # (n_r, 4, ...)
        return np.moveaxis(((c[:, 0] * dx + c[:, 1]) * dx + c[:, 2]) * dx + c[:, 3], 0, -1)

    def kappa_a_minus(self, r):
        """kappa* a_-(r) (negative) interpolated in ln r."""
        return -np.exp(self.weights(r) @ self._ln_kappa)

    def ln_abs_kappa_a_minus(self, r):
        """ln|kappa* a_-(r)| (float or array, r inside the grid): the spline of
        :meth:`kappa_a_minus`, evaluated without the weights (a walker's rotation)."""
        if np.ndim(r) == 0:
            # one walker: plain floats (numpy's per-call overhead would dominate a plan's evaluation)
            ln_r = math.log(float(r))
            i = min(max(bisect.bisect_left(self._ln_r_list, ln_r) - 1, 0), self.ratios.size - 2)
            dx = ln_r - self._ln_r_list[i]
            c = self._kappa_list[i]
        else:
            ln_r = np.log(r)
            i = np.clip(np.searchsorted(self._ln_r, ln_r) - 1, 0, self.ratios.size - 2)
            dx = ln_r - self._ln_r[i]
            c = self._kappa_c[:, i]
        return ((c[0] * dx + c[1]) * dx + c[2]) * dx + c[3]

    def amplitudes(self, x, r=None):
        """(1 - |s11|^2, s11, kappa* a_-) at x = k|a| and r = a_bb/a (arrays of one shape,
        or r of the leading shape of x), s11 in the phase convention theta = s0 ln(kappa*|a|);
        r = None gives every slice (a leading axis of length n_r)."""
        x = np.asarray(x, dtype=float)
        if r is None:
            out = [t.amplitudes(x) for t in self.slices]
            turn = np.exp(-2j * self.s0 * self._ln_kappa).reshape((-1,) + (1,) * x.ndim)
            return np.stack([o[0] for o in out]), np.stack([o[1] for o in out]) * turn, self.kappa_star_a_minus
        w = self.weights(r)
        w = w.reshape(w.shape[:-1] + (1,) * (x.ndim - w.ndim + 1) + w.shape[-1:])
        logt = np.empty(x.shape + (self.ratios.size,))
        phase = np.empty_like(logt)
        flat = np.ascontiguousarray(x.ravel())
        for k in range(self.ratios.size):
            t, ph = s11_values(self.packed[k], flat)
            logt[..., k] = np.log(t).reshape(x.shape)
            phase[..., k] = ph.reshape(x.shape)
        ln_kappa = np.sum(w * self._ln_kappa, axis=-1)
        t = np.exp(np.sum(w * logt, axis=-1))
        ph = np.sum(w * phase, axis=-1) - 2.0 * self.s0 * ln_kappa
        mod = np.sqrt(np.maximum(1.0 - t, 0.0))
        return t, mod * np.exp(1j * ph), -np.exp(ln_kappa)


def load_s11_ratio_table(path):
    """An :class:`S11RatioTable` (loaded once per process)."""
    if path not in _CACHE:
        _CACHE[path] = S11RatioTable(path)
    return _CACHE[path]


# --- a > 0: atom-dimer relaxation, J = 0 --------------------------------------------------
# ``data/s_ad_positive_a.npz`` (written by ``scripts/make_atom_dimer_table.py`` from the STM
# solver, docs/stm.md) holds, on two log grids of k_AD a that meet at the breakup
# threshold 2/sqrt 3 (a square-root kink; each side has its own splines):
#   s_AD   -- the long-distance reflection amplitude of the Efimov channel (atom + dimer
#             incoming), splined as Re and Im (near breakup 1 - |s_AD|^2 is ~1e-6 and
#             would give |s_AD| ill-conditioned);
#   T_AD   -- the atom-dimer -> Efimov-channel transmission (= 1 - |s_AD|^2 below breakup;
#             smaller above, where the flux can also leave as three free atoms).
# Below the grid the functions run linearly in k_AD a from their threshold limits (the
# extrapolated T_AD/(k_AD a) -> c1 and arg s_AD -> delta0 stored with the table) to the
# first node: atom-dimer scattering is an s-wave two-cluster problem, so the leading
# corrections are linear in k_AD a (the phase moves by ~1e-3 rad between 0 and the first
# node, which matters at a narrow relaxation peak). Above the grid (k_AD a > 1e3) the
# exact |a| = infinity solution takes over with the table's last difference from it
# decaying like 1/x, x = sqrt(E m a^2/hbar^2) = sqrt(3 (k_AD a)^2/4 - 1) (docs/stm.md
# sections 7b, 7d): s_AD = s_inf(x) (1 + c_s/x), T_break = 1 - e^{-2 pi s0} + c_t/x, and
# T_AD = 1 - |s_AD|^2 - T_break by unitarity (it falls like 4.9/(k_AD a)).

_AD_HEADER = 13
_AD_SPLINES = 3          # ln T_AD, Re s_AD, Im s_AD
_AD_BREAKUP = 4          # A, Re B, Im B, C above breakup (after both segments' splines)


class AtomDimerTable:
    """Spline coefficients of s_AD(k_AD a) and T_AD(k_AD a) for a > 0, packed for numba.

    Attributes
    ----------
    packed : ndarray
        1-D float array consumed by :func:`s_ad_eval`.
    kad_max : float
        Last grid point in k_AD a; beyond it the unitarity tail (:attr:`unitarity_tail`).
    unitarity_tail : dict
        ``"t_break"`` and ``"s"``: the table's last differences from the |a| = infinity
        values times x there (they decay like 1/x, docs/stm.md section 7b).
    kappa_star_a_star : float
        kappa* a* implied by the table's threshold phase (relaxation peak at threshold).
    c_beta : float
        Threshold coefficient: beta -> C_beta sinh(2 eta)/(sin^2 + sinh^2 eta) hbar a/m.
    metadata : dict
    """

    def __init__(self, path):
        with _open_table(path) as d:
            kad = np.array(d["kad"])
            s_ad = np.array(d["s_ad"])
            columns = [np.array(d["log_transmission"]), s_ad.real.copy(), s_ad.imag.copy()]
            b = np.array(d["breakup_B"])
            breakup = [np.array(d["breakup_A"]), b.real.copy(), b.imag.copy(), np.array(d["breakup_C"])]
            phase0 = float(np.array(d["phase"])[0])
            j = int(d["junction_index"])
            c1, delta0 = float(d["threshold_c1"]), float(d["threshold_phase"])
            self.kappa_star_a_star = float(d["kappa_star_a_star"])
            self.c_beta = float(d["c_beta"])
            self.metadata = json.loads(str(d["metadata"]))
        if not math.isclose(kad[j], 2.0 / math.sqrt(3.0), rel_tol=1e-12):
            raise LossfitError(f"{path!r}: the grids do not meet at the breakup threshold")
        parts = []
        for sl in (slice(0, j + 1), slice(j, None)):
            lnx = np.log(kad[sl])
            if not np.allclose(np.diff(lnx), lnx[1] - lnx[0], rtol=1e-9, atol=0):
                raise LossfitError(f"{path!r}: a k_AD a grid segment is not uniform in ln")
            parts.append((lnx, [spline_coefficients(lnx, col[sl]) for col in columns]))
        (lnx1, sp1), (lnx2, sp2) = parts
        # unwrap delta0 onto the branch of the tabulated phase at the first node
        delta0 += 2.0 * math.pi * round((phase0 - delta0) / (2.0 * math.pi))
        head = np.array([lnx1.size, lnx1[0], lnx1[1] - lnx1[0], lnx2.size, lnx2[0], lnx2[1] - lnx2[0],
                         kad[j], kad[-1], c1, delta0, 0.0, 0.0, 0.0])
        assert head.size == _AD_HEADER
        self.kad = kad
        self.kad_max = float(kad[-1])
        # the J = 0 breakup coefficients, above breakup only (the three-body table's J = 0
        # columns beyond its grid)
        sp_breakup = [spline_coefficients(lnx2, col[j:]) for col in breakup]
        self.packed = np.concatenate([head] + [c.T.ravel() for c in sp1 + sp2 + sp_breakup])
        # the unitarity tails' 1/x coefficients from the last grid point (evaluated before
        # they are stored, so the grid's own value is used)
        x_last = math.sqrt(0.75 * self.kad_max ** 2 - 1.0)
        t_ad, re, im = s_ad_eval(self.packed, self.kad_max)
        s_last = complex(re, im)
        s_unit = math.exp(-math.pi * S0) * cmath.exp(1j * _unitarity_phase(x_last))
        tail_s = (s_last / s_unit - 1.0) * x_last
        tail_t = (1.0 - abs(s_last) ** 2 - t_ad - T_UNITARITY) * x_last
        self.packed[10:13] = tail_t, tail_s.real, tail_s.imag
        self.unitarity_tail = {"t_break": tail_t, "s": tail_s}

    def evaluate(self, kad):
        """(T_AD, s_AD) at k_AD a (arrays), evaluated as the runtime kernel does."""
        kad = np.asarray(kad, dtype=float)
        t_ad = np.empty(kad.size)
        s = np.empty(kad.size, dtype=complex)
        for i, v in enumerate(kad.ravel()):
            t_ad[i], re, im = s_ad_eval(self.packed, v)
            s[i] = complex(re, im)
        return t_ad.reshape(kad.shape), s.reshape(kad.shape)


@numba.njit(cache=True)
def atom_dimer_grid_points(packed):
    """(first grid point, breakup threshold, last grid point) in k_AD a: the kernel's kinks."""
    return math.exp(packed[1]), packed[6], packed[7]


@numba.njit(cache=True)
def _ad_segment(packed, offset, n, i, dx):
    stride = 4 * (n - 1)
    return (math.exp(_spline(packed, offset, i, dx)), _spline(packed, offset + stride, i, dx),
            _spline(packed, offset + 2 * stride, i, dx))


@numba.njit(cache=True)
def s_ad_eval(packed, kad):
    """(T_AD, Re s_AD, Im s_AD) at k_AD a > 0 from a packed table (the unitarity tail
    beyond the last grid point)."""
    if kad > packed[7]:
        x = math.sqrt(0.75 * kad * kad - 1.0)
        ph = _unitarity_phase(x)
        mod = math.exp(-math.pi * S0)
        cs, sn = mod * math.cos(ph), mod * math.sin(ph)
        fr, fi = 1.0 + packed[11] / x, packed[12] / x
        re, im = cs * fr - sn * fi, sn * fr + cs * fi
        return 1.0 - re * re - im * im - (T_UNITARITY + packed[10] / x), re, im
    n1 = int(packed[0])
    lnx0 = packed[1]
    lnx = math.log(kad)
    if lnx <= lnx0:
        # T_AD and arg s_AD linear from their threshold limits (c1, delta0) to the first
        # node; below breakup |s_AD|^2 = 1 - T_AD
        t_ad, re, im = _ad_segment(packed, _AD_HEADER, n1, 0, 0.0)
        x0 = math.exp(lnx0)
        r = kad / x0
        c1 = packed[8]
        t_lin = kad * (c1 + (t_ad / x0 - c1) * r)
        ph0 = math.atan2(im, re)
        ph0 += 2.0 * math.pi * round((packed[9] - ph0) / (2.0 * math.pi))
        ph = packed[9] + (ph0 - packed[9]) * r
        mod = math.sqrt(1.0 - t_lin)
        return t_lin, mod * math.cos(ph), mod * math.sin(ph)
    if kad < packed[6]:
        n, base, h, offset = n1, lnx0, packed[2], _AD_HEADER
    else:
        n, base, h = int(packed[3]), packed[4], packed[5]
        offset = _AD_HEADER + _AD_SPLINES * 4 * (n1 - 1)
    i = int((lnx - base) / h)
    if i > n - 2:
        i = n - 2
    if i < 0:
        i = 0
    return _ad_segment(packed, offset, n, i, lnx - (base + i * h))


@numba.njit(cache=True)
def breakup_coefficients_eval(packed, kad):
    """(A, Re B, Im B, C) of J = 0 dimer breakup at k_AD a between the breakup threshold
    and the last grid point: P_break = (A + 2 Re(B w) + C |w|^2)/|1 + s_AD w|^2."""
    n1, n2 = int(packed[0]), int(packed[3])
    base, h = packed[4], packed[5]
    offset = _AD_HEADER + _AD_SPLINES * 4 * (n1 - 1 + n2 - 1)
    i = min(max(int((math.log(kad) - base) / h), 0), n2 - 2)
    dx = math.log(kad) - (base + i * h)
    stride = 4 * (n2 - 1)
    return (_spline(packed, offset, i, dx), _spline(packed, offset + stride, i, dx),
            _spline(packed, offset + 2 * stride, i, dx), _spline(packed, offset + 3 * stride, i, dx))


def load_atom_dimer_table(path=None):
    """The shipped a > 0 atom-dimer table (loaded once per process)."""
    path = path or table_path("s_ad_positive_a.npz")
    if path not in _CACHE:
        _CACHE[path] = AtomDimerTable(path)
    return _CACHE[path]


# --- a > 0: three-body recombination (shallow and deep dimers) ---------------------------
# ``data/recombination_positive_a.npz`` (written by ``scripts/make_recombination_table.py``
# from the STM solver, docs/stm.md section 7) holds, on a grid uniform in ln E of the
# three-atom energy E (units hbar^2/(m a^2)), s_AD, the J = 0 breakup coefficients and the
# three-atom -> Efimov-channel transmission, each divided by E^2 (they vanish like E^2 at
# the threshold while the rates stay finite), and the J >= 1 sum of (2J + 1) P_J over E^2.
# Below the grid the J = 0 columns run linearly in k = sqrt(E) to their E -> 0 limits,
# which the table stores from direct threshold solves (measured: A/E^2 departs from its
# limit like 0.04 sqrt(E) for E < 1e-2, the breakup branch point sqrt(3q^2/4 - E) of the
# dimer propagator); the J >= 1 sum runs like E^2 (its measured threshold behaviour,
# dominated by J = 2).
#
# Above the grid (E > 1e4) every J = 0 quantity depends on k_AD a = sqrt(4 (E + 1)/3) only
# and comes from the atom-dimer table (the same solver; the two agree to 1.5e-6 at this
# grid's points) up to its end, k_AD a = 1e3 (E = 7.5e5), and beyond it from the exact
# |a| = infinity solution (s_AD, T_break) or zero (A, B, C) plus the atom-dimer table's
# last difference from it, decaying like 1/x with x = sqrt(E) (docs/stm.md sections 7b, 7c).
# The J >= 1 sum comes from ``data/recombination_high_energy.npz``
# (``scripts/make_recombination_tail.py``, docs/stm.md section 7c) up to its grid end
# (E = 1e8) and from the asymptotic form c0 + c1/x + c2/x^2 fitted there beyond.

_RC_HEADER = 24       # grid, E -> 0 limits, the switch to unitarity and its tails, the J >= 1 tail
_RC_COLUMNS = 8       # Re s, Im s, A/E^2, Re B/E^2, Im B/E^2, C/E^2, T_break/E^2, J>=1 sum/E^2


class RecombinationTable:
    """Spline coefficients of the a > 0 three-body universal functions, packed for numba.

    Attributes
    ----------
    packed : ndarray
        1-D float array consumed by :func:`recombination_eval`: this table's splines and,
        above its grid, the J >= 1 sum's extension, the atom-dimer table and the
        unitarity tails.
    energy_min, energy_max : float
        Ends of the three-body grid in E m a^2 / hbar^2 (where the interpolants change).
    high_energy_max : float
        End of the J >= 1 sum's extension grid; the asymptotic form beyond.
    deep_energy_switch : float
        E m a^2/hbar^2 where the J = 0 quantities pass from the atom-dimer table to the
        |a| = infinity solution (k_AD a = the atom-dimer table's last point).
    kappa_star_a_plus : float
        kappa* a_+ where the eta -> 0 threshold shallow-dimer rate vanishes.
    metadata, high_energy_metadata : dict
    """

    def __init__(self, path, atom_dimer, high_energy_path):
        with _open_table(path) as d:
            energy = np.array(d["energy"])
            s_ad = np.array(d["s_ad"])
            b = np.array(d["breakup_b_over_e2"])
            columns = [s_ad.real, s_ad.imag, np.array(d["breakup_a_over_e2"]), b.real, b.imag,
                       np.array(d["breakup_c_over_e2"]), np.array(d["t_break_over_e2"]),
                       np.array(d["higher_j_over_e2"])]
            thr_b = complex(d["threshold_b"])
            thr_s = complex(d["threshold_s_ad"])
            limits = [thr_s.real, thr_s.imag, float(d["threshold_alpha"]), thr_b.real, thr_b.imag,
                      float(d["threshold_c"]), float(d["threshold_tau"]), 0.0]
            self.kappa_star_a_plus = float(d["kappa_star_a_plus"])
            self.metadata = json.loads(str(d["metadata"]))
        with _open_table(high_energy_path) as d:
            he_energy = np.array(d["energy"])
            he_sum = np.array(d["higher_j"])
            asymptote = [float(v) for v in d["asymptote"]]
            self.high_energy_metadata = json.loads(str(d["metadata"]))
        lnx = np.log(energy)
        he_lnx = np.log(he_energy)
        for grid in (lnx, he_lnx):
            if not np.allclose(np.diff(grid), grid[1] - grid[0], rtol=1e-9, atol=0):
                raise LossfitError(f"{path!r}: an energy grid is not uniform in ln E")
        if not math.isclose(he_energy[0], energy[-1], rel_tol=1e-12):
            raise LossfitError(f"{high_energy_path!r} does not start where {path!r} ends")
        self.energy = energy
        self.energy_min, self.energy_max = float(energy[0]), float(energy[-1])
        self.high_energy_max = float(he_energy[-1])
        self.deep_energy_switch = 0.75 * atom_dimer.kad_max ** 2 - 1.0
        if self.deep_energy_switch <= self.energy_max:
            raise LossfitError(f"{path!r}: the atom-dimer table ends below the recombination grid")
        # s_AD and T_break beyond the atom-dimer table come from its unitarity tail; the
        # J = 0 breakup coefficients' 1/x tails from its last point
        x_last = math.sqrt(self.deep_energy_switch)
        s_unit = math.exp(-math.pi * S0) * cmath.exp(1j * _unitarity_phase(x_last))
        a_last, b_re, b_im, c_last = breakup_coefficients_eval(atom_dimer.packed, atom_dimer.kad_max)
        # B turns with the phase of s at unitarity (measured: B/s_unitarity x -> -140)
        tail_b = complex(b_re, b_im) / s_unit * x_last
        self.unitarity_tail = dict(atom_dimer.unitarity_tail, breakup_a=a_last * x_last, breakup_b=tail_b,
                                   breakup_c=c_last * x_last, higher_j=tuple(asymptote))
        head = np.array([energy.size, lnx[0], lnx[1] - lnx[0], energy[0], energy[-1]] + limits[:7]
                        + [self.deep_energy_switch, he_energy.size, he_lnx[0], he_lnx[1] - he_lnx[0],
                           he_energy[-1]] + asymptote + [a_last * x_last, c_last * x_last, tail_b.real, tail_b.imag])
        assert head.size == _RC_HEADER
        splines = [spline_coefficients(lnx, c).T.ravel() for c in columns]
        splines.append(spline_coefficients(he_lnx, he_sum).T.ravel())
        self.packed = np.concatenate([head] + splines + [atom_dimer.packed])

    def evaluate(self, energy):
        """The eight columns at three-atom energies E m a^2/hbar^2 (array, E > 0), evaluated
        as the runtime kernel does: shape energy.shape + (8,)."""
        energy = np.asarray(energy, dtype=float)
        out = np.empty((energy.size, _RC_COLUMNS))
        for i, v in enumerate(energy.ravel()):
            out[i] = recombination_eval(self.packed, v)
        return out.reshape(energy.shape + (_RC_COLUMNS,))


@numba.njit(cache=True)
def recombination_grid_points(packed):
    """(first, last) grid energy E m a^2/hbar^2 and where the J = 0 unitarity tails
    begin: the kernel's kinks."""
    return packed[3], packed[4], packed[12]


@numba.njit(cache=True)
def _rc_column(packed, c, n, below, i, dx, r):
    base = _RC_HEADER + c * 4 * (n - 1)
    if not below:
        return _spline(packed, base, i, dx)
    # r = sqrt(E / E_first)
    first = _spline(packed, base, 0, 0.0)
    if c == _RC_COLUMNS - 1:
        return first * (r * r) ** 2
    return packed[5 + c] + (first - packed[5 + c]) * r


@numba.njit(cache=True)
def _higher_j_above_grid(packed, n, energy):
    """The J >= 1 sum above the three-body grid: extension grid, then asymptotic form."""
    if energy > packed[16]:
        x = math.sqrt(energy)
        return packed[17] + (packed[18] + packed[19] / x) / x
    n_he = int(packed[13])
    i = min(int((math.log(energy) - packed[14]) / packed[15]), n_he - 2)
    dx = math.log(energy) - (packed[14] + i * packed[15])
    return _spline(packed, _RC_HEADER + _RC_COLUMNS * 4 * (n - 1), i, dx)


@numba.njit(cache=True)
def _above_grid(packed, n, energy):
    """The eight columns above the three-body grid: J = 0 from the atom-dimer table (with
    its unitarity tail); J >= 1 from the extension."""
    e2 = energy * energy
    higher_j = _higher_j_above_grid(packed, n, energy) / e2
    ad = packed[_RC_HEADER + _RC_COLUMNS * 4 * (n - 1) + 4 * (int(packed[13]) - 1):]
    kad = math.sqrt(4.0 * (energy + 1.0) / 3.0)
    t_ad, re, im = s_ad_eval(ad, kad)
    t_break = (1.0 - re * re - im * im - t_ad) / e2
    if energy <= packed[12]:
        a, b_re, b_im, c = breakup_coefficients_eval(ad, kad)
        return re, im, a / e2, b_re / e2, b_im / e2, c / e2, t_break, higher_j
    # the stored tail coefficients are the last differences times x there: they decay as 1/x
    x = math.sqrt(energy)
    ph = _unitarity_phase(x)
    mod = math.exp(-math.pi * S0)
    cs, sn = mod * math.cos(ph), mod * math.sin(ph)
    bx = e2 * x
    return (re, im, packed[20] / bx, (cs * packed[22] - sn * packed[23]) / bx,
            (sn * packed[22] + cs * packed[23]) / bx, packed[21] / bx, t_break, higher_j)


@numba.njit(cache=True)
def recombination_eval(packed, energy):
    """(Re s_AD, Im s_AD, A/E^2, Re B/E^2, Im B/E^2, C/E^2, T_break/E^2, J>=1 sum/E^2)
    at three-atom energy E m a^2/hbar^2 > 0."""
    n = int(packed[0])
    lnx0, h, e_first = packed[1], packed[2], packed[3]
    if energy > packed[4]:
        return _above_grid(packed, n, energy)
    below = energy <= e_first
    i, dx, r = 0, 0.0, math.sqrt(energy / e_first)
    if not below:
        lnx = math.log(energy)
        i = min(int((lnx - lnx0) / h), n - 2)
        dx = lnx - (lnx0 + i * h)
    # the column index is a loop variable: numba would compile _rc_column once per literal
    # constant 0..7 (eight compiles on a fresh cache) if the calls named them
    col = np.empty(_RC_COLUMNS)
    for c in range(_RC_COLUMNS):
        col[c] = _rc_column(packed, c, n, below, i, dx, r)
    return col[0], col[1], col[2], col[3], col[4], col[5], col[6], col[7]


def load_recombination_table(path=None, high_energy_path=None):
    """The shipped a > 0 three-body tables (loaded once per process)."""
    path = path or table_path("recombination_positive_a.npz")
    high_energy_path = high_energy_path or table_path("recombination_high_energy.npz")
    key = (path, high_energy_path)
    if key not in _CACHE:
        _CACHE[key] = RecombinationTable(path, load_atom_dimer_table(), high_energy_path)
    return _CACHE[key]


# --- two identical bosons and a third atom, a > 0: B + (BX) relaxation ------------------------
# ``data/s_ad_mixture_<B>_<X>.npz`` (``scripts/make_mixture_atom_dimer_tables.py``,
# :mod:`lossfit.universal.solver.mixture_atom_dimer`) holds s_AD(x) and T_AD(x), x = k a with
# E = hbar^2 k^2/(2 mu_AD), on two grids uniform in ln x that meet at the breakup threshold x_b
# (a kink: each side has its own splines): 1e-3 to x_b and x_b to 4 x_b. Splined
# (not-a-knot, in ln x): ln T_AD, Re s_AD and Im s_AD (Re/Im rather than the phase and
# 1 - T_AD: for heavy bosons |s_AD| falls to ~6e-6 at breakup, where the modulus from 1 - T_AD
# would lose every digit; above breakup T_AD < 1 - |s_AD|^2 anyway). Below the grid T_AD and
# arg s_AD run linearly in x from the threshold limits c1 x and delta0 to the first node (an
# s-wave two-cluster collision: corrections linear in k, measured T_AD/x - c1 proportional to x
# there), with |s_AD| = sqrt(1 - T_AD). Beyond the last node nothing is tabulated: the values
# are held there (an approximation that the runtime limits to a stated Boltzmann weight,
# docs/heteronuclear-rates.md).

_MAD_HEADER = 10         # n1, ln x_0, step1, c1, delta0, x_b, n2, ln x_b, step2, x_last
_MAD_SPLINES = 3         # ln T_AD, Re s_AD, Im s_AD


class MixtureAtomDimerTable:
    """Spline coefficients of s_AD(k a) and T_AD(k a) of two bosons and a third atom (a > 0),
    packed for numba.

    Attributes
    ----------
    packed : ndarray
        1-D float array consumed by :func:`mixture_s_ad_eval`.
    x : ndarray
        The grid of x = k a (E = hbar^2 k^2/(2 mu_AD)): two segments meeting at breakup.
    breakup_x : float
        x_b = (m_B + m_X)/sqrt(m_X (2 m_B + m_X)), the breakup threshold.
    x_max : float
        The last grid point; beyond it the values are held (the runtime limits the weight
        there).
    s0, mass_ratio : float
        Efimov exponent and m_B/m_X of the table's system.
    kappa_star_a_star : float
        kappa* a* (kappa* with E_T = -hbar^2 kappa*^2/(2 mu), mu the B-X reduced mass;
        docs/stm-mixture.md section 1): theta = s0 ln(kappa* a), kappa* = kappa_star_a_star/a*.
    c1, delta0 : float
        Threshold limits T_AD/x -> c1 and arg s_AD -> delta0 (on the grid's branch).
    c_beta : float
        beta -> C_beta sinh(2 eta)/(sin^2[s0 ln(a/a*)] + sinh^2 eta) hbar a/m_B at threshold.
    metadata : dict
    """

    def __init__(self, path):
        with _open_table(path) as d:
            x = np.array(d["x"])
            j = int(d["junction_index"])
            s_ad = np.array(d["s_ad"])
            columns = [np.array(d["log_transmission"]), s_ad.real.copy(), s_ad.imag.copy()]
            phase0 = float(np.array(d["phase"])[0])
            self.c1 = float(d["threshold_c1"])
            delta0 = float(d["threshold_phase"])
            self.kappa_star_a_star = float(d["kappa_star_a_star"])
            self.c_beta = float(d["c_beta"])
            self.s0 = float(d["s0"])
            self.mass_ratio = float(d["mass_ratio"])
            self.breakup_x = float(d["breakup_x"])
            self.metadata = json.loads(str(d["metadata"]))
        if not math.isclose(x[j], self.breakup_x, rel_tol=1e-12):
            raise LossfitError(f"{path!r}: the grids do not meet at the breakup threshold")
        splines, head = [], []
        for part in (slice(0, j + 1), slice(j, None)):
            lnx = np.log(x[part])
            if lnx.size < 4 or not np.allclose(np.diff(lnx), lnx[1] - lnx[0], rtol=1e-9, atol=0):
                raise LossfitError(f"{path!r}: a grid segment is not uniform in ln x (or has < 4 points)")
            head.append((lnx.size, lnx[0], lnx[1] - lnx[0]))
            splines += [spline_coefficients(lnx, c[part]).T.ravel() for c in columns]
        self.delta0 = delta0 + 2.0 * math.pi * round((phase0 - delta0) / (2.0 * math.pi))
        self.x = x
        self.x_max = float(x[-1])
        (n1, lnx0, h1), (n2, lnxb, h2) = head
        header = np.array([n1, lnx0, h1, self.c1, self.delta0, x[j], n2, lnxb, h2, x[-1]])
        assert header.size == _MAD_HEADER
        self.packed = np.concatenate([header] + splines)

    def evaluate(self, x):
        """(T_AD, s_AD) at x = k a (arrays), evaluated as the runtime kernels do."""
        x = np.asarray(x, dtype=float)
        t, re, im = mixture_s_ad_values(self.packed, np.ascontiguousarray(x.ravel()))
        return t.reshape(x.shape), (re + 1j * im).reshape(x.shape)

    amplitudes = evaluate

    def kinks(self):
        """(first grid point, breakup threshold, last grid point) in x: where the kernels
        have kinks."""
        return float(self.x[0]), self.breakup_x, self.x_max


@numba.njit(cache=True)
def _mad_segment(packed, offset, n, i, dx):
    stride = 4 * (n - 1)
    return (math.exp(_spline(packed, offset, i, dx)), _spline(packed, offset + stride, i, dx),
            _spline(packed, offset + 2 * stride, i, dx))


@numba.njit(cache=True)
def mixture_s_ad_eval(packed, x):
    """(T_AD, Re s_AD, Im s_AD) at x = k a > 0 from a packed :class:`MixtureAtomDimerTable`
    (held at the last node beyond the grid)."""
    n1, lnx0, h1 = int(packed[0]), packed[1], packed[2]
    n2, lnxb, h2 = int(packed[6]), packed[7], packed[8]
    second = _MAD_HEADER + _MAD_SPLINES * 4 * (n1 - 1)
    if x >= packed[9]:
        # the right end of the last interval: the last node
        return _mad_segment(packed, second, n2, n2 - 2, h2)
    lnx = math.log(x)
    if lnx <= lnx0:
        # T_AD and arg s_AD linear in x from their threshold limits to the first node
        x0 = math.exp(lnx0)
        r = x / x0
        t0, re0, im0 = _mad_segment(packed, _MAD_HEADER, n1, 0, 0.0)
        ph0 = math.atan2(im0, re0)
        ph0 += 2.0 * math.pi * round((packed[4] - ph0) / (2.0 * math.pi))
        t = x * (packed[3] + (t0 / x0 - packed[3]) * r)
        ph = packed[4] + (ph0 - packed[4]) * r
        mod = math.sqrt(max(1.0 - t, 0.0))
        return t, mod * math.cos(ph), mod * math.sin(ph)
    if x <= packed[5]:
        i = min(int((lnx - lnx0) / h1), n1 - 2)
        return _mad_segment(packed, _MAD_HEADER, n1, i, lnx - (lnx0 + i * h1))
    i = min(max(int((lnx - lnxb) / h2), 0), n2 - 2)
    return _mad_segment(packed, second, n2, i, lnx - (lnxb + i * h2))


@numba.njit(cache=True)
def mixture_s_ad_values(packed, x):
    """:func:`mixture_s_ad_eval` at every x of an array: (T_AD, Re s_AD, Im s_AD) arrays."""
    t, re, im = np.empty(x.size), np.empty(x.size), np.empty(x.size)
    for j in range(x.size):
        t[j], re[j], im[j] = mixture_s_ad_eval(packed, x[j])
    return t, re, im


def load_mixture_atom_dimer_table(path):
    """A mixture's a > 0 atom-dimer table (loaded once per process)."""
    if path not in _CACHE:
        _CACHE[path] = MixtureAtomDimerTable(path)
    return _CACHE[path]


_MRC_HEADER = 11        # n, ln x_0, step, x_last, tau, Re s_b, Im s_b, alpha, Re b, Im b, c
_MRC_COLUMNS = 7        # T_break/x^4, Re s_AD, Im s_AD, A/x^4, Re B/x^4, Im B/x^4, C/x^4


class MixtureRecombinationTable:
    """Spline coefficients of the a > 0, J = 0 recombination quantities of two bosons and a
    third atom, packed for numba (``data/k3_positive_mixture_<B>_<X>.npz``, written by
    :func:`lossfit.universal.solver.mixture_recombination.build_table`).

    Against x = k a (three-atom energy E = hbar^2 k^2/(2 mu) = x^2 E_D): T_break/x^4, s_AD and
    the breakup coefficients A/x^4, B/x^4, C/x^4 (docs/heteronuclear-rates.md, "Three-body
    recombination at a > 0"). Not-a-knot cubic splines in ln x on the grid; below it every
    column runs linearly in x to its threshold limit (tau, s_b, alpha, b, c, from zero-energy
    solves); beyond it the last node's values are held (the runtime limits the weight there).

    Attributes
    ----------
    packed : ndarray
        1-D float array consumed by :func:`mixture_recombination_eval`.
    x : ndarray
        The grid of x = k a.
    x_max : float
        The last grid point.
    s0, mass_ratio : float
        Efimov exponent and m_B/m_X.
    kappa_star_a_star, kappa_star_a_plus : float
        kappa* a* (the phase convention theta = s0 ln(kappa* a) shared with the atom-dimer
        table) and kappa* a_+ (the zero of the eta -> 0 threshold shallow rate, from the
        solver), kappa* with E_T = -hbar^2 kappa*^2/(2 mu).
    limits : dict
        tau, s_b, alpha, b, c.
    metadata : dict
    """

    def __init__(self, path):
        with _open_table(path) as d:
            x = np.array(d["x"])
            cols = np.array(d["columns"])
            self.limits = {"tau": float(d["threshold_tau"]), "s_b": complex(d["threshold_s"]),
                           "alpha": float(d["threshold_alpha"]), "b": complex(d["threshold_b"]),
                           "c": float(d["threshold_c"])}
            self.kappa_star_a_star = float(d["kappa_star_a_star"])
            self.kappa_star_a_plus = float(d["kappa_star_a_plus"])
            self.s0 = float(d["s0"])
            self.mass_ratio = float(d["mass_ratio"])
            self.metadata = json.loads(str(d["metadata"]))
        lnx = np.log(x)
        if lnx.size < 4 or not np.allclose(np.diff(lnx), lnx[1] - lnx[0], rtol=1e-9, atol=0):
            raise LossfitError(f"{path!r}: the grid is not uniform in ln x (or has < 4 points)")
        lim = self.limits
        header = np.array([x.size, lnx[0], lnx[1] - lnx[0], x[-1], lim["tau"], lim["s_b"].real, lim["s_b"].imag,
                           lim["alpha"], lim["b"].real, lim["b"].imag, lim["c"]])
        assert header.size == _MRC_HEADER and cols.shape[1] == _MRC_COLUMNS
        self.x = x
        self.x_max = float(x[-1])
        self.packed = np.concatenate([header] + [spline_coefficients(lnx, c).T.ravel() for c in cols.T])

    def columns(self, x):
        """The seven columns (T_break/x^4, Re s, Im s, A/x^4, Re B/x^4, Im B/x^4, C/x^4) at x
        (array), shape (7,) + x.shape, as the runtime kernels evaluate them."""
        x = np.asarray(x, dtype=float)
        out = mixture_recombination_values(self.packed, np.ascontiguousarray(x.ravel()))
        return out.reshape((_MRC_COLUMNS,) + x.shape)

    def amplitudes(self, x):
        """(T_break, s_AD) at x = k a (arrays): the deep channel's (T, s) for the fixed rule."""
        c = self.columns(x)
        return c[0] * np.asarray(x, dtype=float) ** 4, c[1] + 1j * c[2]

    def kinks(self):
        """(first grid point, last grid point) in x: where the kernels have kinks."""
        return float(self.x[0]), self.x_max


@numba.njit(cache=True)
def mixture_recombination_eval(packed, x, out):
    """The seven columns of a packed :class:`MixtureRecombinationTable` at x = k a > 0 into
    ``out`` (held at the last node beyond the grid; linear in x to the threshold limits
    below it)."""
    n, lnx0, h = int(packed[0]), packed[1], packed[2]
    stride = 4 * (n - 1)
    if x >= packed[3]:
        for c in range(_MRC_COLUMNS):
            out[c] = _spline(packed, _MRC_HEADER + c * stride, n - 2, h)
        return
    lnx = math.log(x)
    if lnx <= lnx0:
        r = x / math.exp(lnx0)
        # limits in the order of the columns
        for c in range(_MRC_COLUMNS):
            first = _spline(packed, _MRC_HEADER + c * stride, 0, 0.0)
            out[c] = packed[4 + c] + (first - packed[4 + c]) * r
        return
    i = min(int((lnx - lnx0) / h), n - 2)
    dx = lnx - (lnx0 + i * h)
    for c in range(_MRC_COLUMNS):
        out[c] = _spline(packed, _MRC_HEADER + c * stride, i, dx)


@numba.njit(cache=True)
def mixture_recombination_values(packed, x):
    """:func:`mixture_recombination_eval` at every x of an array: shape (7, x.size)."""
    out = np.empty((_MRC_COLUMNS, x.size))
    one = np.empty(_MRC_COLUMNS)
    for j in range(x.size):
        mixture_recombination_eval(packed, x[j], one)
        for c in range(_MRC_COLUMNS):        # not out[:, j] = one: see _plan_weights
            out[c, j] = one[c]
    return out


def load_mixture_recombination_table(path):
    """A mixture's a > 0 recombination table (loaded once per process)."""
    if path not in _CACHE:
        _CACHE[path] = MixtureRecombinationTable(path)
    return _CACHE[path]

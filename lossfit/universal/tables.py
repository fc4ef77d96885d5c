"""Loading and interpolating the shipped universal-function tables (no solver at run time).

``data/s11_negative_a.npz`` (written by ``scripts/make_universal_tables.py``; method,
grids, cutoffs, estimated errors and git hash in its ``metadata``) holds, for a < 0 and
J = 0, the long-distance reflection amplitude s11(x) of the Efimov channel on a log
grid of x = k|a| (E = hbar^2 k^2/m), as ln(1 - |s11|^2) and the unwrapped phase of s11.

Interpolation: cubic splines (scipy ``CubicSpline``, not-a-knot) of both in ln x,
evaluated in numba. Outside the grid the known limits take over:

* x below the grid: 1 - |s11|^2 proportional to x^4 and arg s11 constant (threshold
  limit c4 x^4, delta0; the corrections are O(x^2), about 1e-6 at the first node),
  matched to the first node so that the function is continuous;
* x above the grid: the exact unitarity value
  s11 = -exp(-pi s0) (x/sqrt 2)^(-2 i s0) Gamma(1 + i s0)/Gamma(1 - i s0),
  plus the table's last difference from it decaying like 1/x (docs/solver.md: the
  table approaches unitarity like 1/x).
"""

__all__ = ["S11Table", "load_s11_table", "table_path"]

import json
import math
import os

import numba
import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import loggamma

from ..constants import S0
from ..errors import LossfitError

_DATA = os.path.join(os.path.dirname(os.path.abspath(__file__)), "data")
_ARG_GAMMA = float(np.imag(loggamma(1 + 1j * S0)))


def table_path(name="s11_negative_a.npz"):
    """Absolute path of a shipped table."""
    return os.path.join(_DATA, name)


class S11Table:
    """Spline coefficients and limits of s11(x) for a < 0, packed for numba.

    Attributes
    ----------
    packed : ndarray
        1-D float array consumed by :func:`s11_eval` (layout in :func:`_pack`).
    metadata : dict
        The table's provenance (method, grids, estimated errors, git hash).
    k3_prefactor : float
        72 sqrt(3) pi^2: K3 = prefactor hbar/(m k^4) x absorption probability.
    """

    def __init__(self, path):
        if not os.path.exists(path):
            raise LossfitError(f"universal-function table {path!r} is missing from the installation")
        with np.load(path, allow_pickle=False) as d:
            self.kappa_star_a_minus = float(d["kappa_star_a_minus"])
            x = np.array(d["x"])
            logt = np.array(d["log_transmission"])
            phase = np.array(d["phase"])
            self.c4 = float(d["threshold_c4"])
            self.delta0 = float(d["threshold_phase"])
            self.k3_prefactor = float(d["k3_prefactor"])
            self.metadata = json.loads(str(d["metadata"]))
        lnx = np.log(x)
        step = np.diff(lnx)
        if not np.allclose(step, step[0], rtol=1e-9, atol=0):
            raise LossfitError(f"{path!r}: the x grid is not uniform in ln x")
        self.x = x
        self.packed = _pack(lnx, logt, phase, self.c4, self.delta0)

    def s11(self, x):
        """s11 at x = k|a| (array), evaluated as the runtime kernels do."""
        x = np.asarray(x, dtype=float)
        out = np.empty(x.size, dtype=complex)
        for i, v in enumerate(x.ravel()):
            t, ph = s11_eval(self.packed, v)
            out[i] = math.sqrt(max(1.0 - t, 0.0)) * complex(math.cos(ph), math.sin(ph))
        return out.reshape(x.shape)


def _unitarity_phase(x):
    return math.pi - 2.0 * S0 * math.log(x / math.sqrt(2.0)) + 2.0 * _ARG_GAMMA


_HEADER = 8


def _pack(lnx, logt, phase, c4, delta0):
    # [n, lnx0, h, c4, delta0, tail_dT, tail_dphase, x_last, c_logt (4*(n-1)), c_phase (4*(n-1))]
    n = lnx.size
    st = CubicSpline(lnx, logt)
    sp = CubicSpline(lnx, phase)
    x_last = math.exp(lnx[-1])
    t_unit = 1.0 - math.exp(-2.0 * math.pi * S0)
    tail_dt = math.exp(logt[-1]) - t_unit
    # unwrap the unitarity phase onto the table's branch at the last node
    p_unit = _unitarity_phase(x_last)
    p_unit += 2.0 * math.pi * round((phase[-1] - p_unit) / (2.0 * math.pi))
    tail_dp = phase[-1] - p_unit
    head = np.array([n, lnx[0], lnx[1] - lnx[0], c4, delta0, tail_dt, tail_dp, x_last])
    assert head.size == _HEADER
    return np.concatenate([head, st.c.T.ravel(), sp.c.T.ravel(),
                           [p_unit - _unitarity_phase(x_last)]])


@numba.njit(cache=True)
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
        # threshold law c4 x^4, scaled to meet the first node so that the kernel is
        # continuous (a jump would stall adaptive quadrature)
        r = x / math.exp(lnx0)
        r2 = r * r
        return math.exp(_spline(packed, _HEADER, 0, 0.0)) * r2 * r2, _spline(packed, _HEADER + 4 * (n - 1), 0, 0.0)
    x_last = packed[7]
    if x >= x_last:
        branch = packed[_HEADER + 8 * (n - 1)]
        t = 1.0 - math.exp(-2.0 * math.pi * S0) + packed[5] * x_last / x
        ph = (math.pi - 2.0 * S0 * math.log(x / math.sqrt(2.0))
              + 2.0 * _ARG_GAMMA + branch + packed[6] * x_last / x)
        return t, ph
    i = int((lnx - lnx0) / h)
    if i > n - 2:
        i = n - 2
    dx = lnx - (lnx0 + i * h)
    logt = _spline(packed, _HEADER, i, dx)
    ph = _spline(packed, _HEADER + 4 * (n - 1), i, dx)
    return math.exp(logt), ph


_CACHE = {}


def load_s11_table(path=None):
    """The shipped a < 0 table (loaded once per process)."""
    path = path or table_path()
    if path not in _CACHE:
        _CACHE[path] = S11Table(path)
    return _CACHE[path]

"""Boltzmann averages of energy-resolved rate kernels over the collision energy.

Two engines live here: the adaptive Gauss-Kronrod quadrature below (the *reference
path*: any kernel, any tolerance) and the pieces of the *fast path*'s fixed rules
(composite Gauss-Legendre panels in a log variable of the energy, the tail probability
below the first node); docs/thermal-averages.md gives the method and its measured accuracy.

For a non-degenerate gas at temperature T the collision-energy distributions are
(docs/architecture.md, conventions)

* three-body relative energy:  P3(E) = E^2 exp(-E/k_BT) / (2 (k_BT)^3)
* atom-dimer relative energy:  P2(E) = (2/sqrt(pi)) E^(1/2) (k_BT)^(-3/2) exp(-E/k_BT)

(Maxwell-Boltzmann statistics of the relative motion: 6 and 3 relative degrees of
freedom; common practice, no source.)

Quadrature (chosen from the accuracy map in ``benchmarks/thermal_accuracy.py``)
------------------------------------------------------------------------------
With x = E/k_BT the average is ∫ f(x) w(x) dx. We substitute x = u^2, which makes
both weights smooth at the origin (u^5 e^{-u^2} and (4/sqrt(pi)) u^2 e^{-u^2}; the
atom-dimer weight has a sqrt(x) cusp in x), split u in [0, 6.5] at fixed edges that
follow the weight and at the *feature points* that each kernel reports (kinks,
resonance centres and half-widths), and run a globally adaptive 15-point
Gauss-Kronrod rule (QUADPACK, Piessens et al. 1983) until the summed
|K15 - G7| error estimate is below ``rtol`` times the result. Above u = 6.5
(x = 42.25) the weight carries less than 1e-15 of the probability; kernels bounded
by a power of E contribute negligibly there. Fixed Gauss-Laguerre nodes alone fail for
resonances narrower than k_BT, which the adaptive split resolves.

The kernels are numba functions ``kernel(x, p) -> float`` over one parameter row
``p`` and ``features(p, out) -> int`` writing feature positions in x into ``out``,
compiled with the signatures :data:`KERNEL_SIGNATURE` and :data:`FEATURES_SIGNATURE`
(decorators :func:`rate_kernel` and :func:`feature_points`).
"""

__all__ = ["THREE_BODY", "ATOM_DIMER", "U_MAX", "thermal_average", "rate_kernel", "LazyCompiled", "compiled",
           "feature_points", "KERNEL_SIGNATURE", "FEATURES_SIGNATURE", "boltzmann_weight",
           "probability_below", "panel_edges", "composite_gauss_legendre", "GL_ORDER",
           "upper_part_factors"]

import math

import numba
import numpy as np

THREE_BODY = 0
ATOM_DIMER = 1

_SQRT_PI = math.sqrt(math.pi)

# Gauss-Kronrod 7/15 nodes and weights on [-1, 1] (QUADPACK qk15).
_XGK = np.array([0.991455371120812639206854697526329, 0.949107912342758524526189684047851,
                 0.864864423359769072789712788640926, 0.741531185599394439863864773280788,
                 0.586087235467691130294144845693013, 0.405845151377397166906606412076961,
                 0.207784955007898467600689403773245, 0.0])
_WGK = np.array([0.022935322010529224963732008058970, 0.063092092629978553290700663189204,
                 0.104790010322250183839876322541518, 0.140653259715525918745189590510238,
                 0.169004726639267902826583426598550, 0.190350578064785409913256402421014,
                 0.204432940075298892414161999234649, 0.209482141084727828012999174891714])
_WG = np.array([0.129484966168869693270611432679082, 0.279705391489276667901467771423780,
                0.381830050505118944950369775488975, 0.417959183673469387755102040816327])

# the 15 nodes in increasing order with their Kronrod and Gauss weights
_NODES15 = np.concatenate([-_XGK[:7], [0.0], _XGK[6::-1]])
_WK15 = np.concatenate([_WGK[:7], [_WGK[7]], _WGK[6::-1]])
_WG15 = np.zeros(15)
_WG15[1:14:2] = np.concatenate([_WG[:3], [_WG[3]], _WG[2::-1]])

_BASE_EDGES = np.array([0.0, 1.0, 1.75, 2.5, 3.5, 4.75, 6.5])   # in u = sqrt(E/k_BT)
_U_MAX = 6.5
#: Upper end of every thermal integral in u = sqrt(E/k_BT) (the Boltzmann weights beyond are below 1e-15).
U_MAX = _U_MAX
_MAX_INTERVALS = 600
_MAX_FEATURES = 32


def _boltzmann_weight(u, weight):
    # numpy arrays (the panel tables below, at import) or floats (compiled, in the engine)
    u2 = u * u
    if weight == THREE_BODY:
        return u2 * u2 * u * np.exp(-u2)
    return 4.0 / _SQRT_PI * u2 * np.exp(-u2)


#: Weight in u = sqrt(E/k_BT) so that the average is ∫_0^∞ f(u^2) w(u) du.
boltzmann_weight = numba.njit(cache=True)(_boltzmann_weight)


# Kernels are passed as numba first-class functions of fixed signatures. A cached
# function whose argument is a plain dispatcher type is never found in the cache of a
# new process (the type is tied to the dispatcher object), whereas FunctionType is
# structural: the engine below is compiled once, cached, and serves every kernel.
KERNEL_SIGNATURE = numba.types.float64(numba.types.float64, numba.types.float64[::1])
FEATURES_SIGNATURE = numba.types.int64(numba.types.float64[::1], numba.types.float64[::1])
_KERNEL_TYPE = numba.types.FunctionType(KERNEL_SIGNATURE)
_FEATURES_TYPE = numba.types.FunctionType(FEATURES_SIGNATURE)


class LazyCompiled:
    """A numba function of a fixed signature, compiled (or loaded from the disk cache)
    on first use rather than at import: start-up pays only for what a session uses.

    Calling it calls the compiled function; :attr:`compiled` is the numba dispatcher
    (what the engine takes as a first-class function).
    """

    def __init__(self, func, signature):
        self.py_func = func
        self.signature = signature
        self._compiled = None
        self.__doc__ = func.__doc__

    @property
    def compiled(self):
        if self._compiled is None:
            self._compiled = numba.njit(self.signature, cache=True)(self.py_func)
        return self._compiled

    def __call__(self, *args):
        return self.compiled(*args)


def compiled(func):
    """The numba dispatcher behind ``func`` (a :class:`LazyCompiled` or a dispatcher)."""
    return func.compiled if isinstance(func, LazyCompiled) else func


def rate_kernel(func):
    """Decorator: ``func(x, p) -> float`` as a kernel for the thermal engine (compiled on first use)."""
    return LazyCompiled(func, KERNEL_SIGNATURE)


def feature_points(func):
    """Decorator: ``func(p, out) -> int`` (feature energies in units of the energy scale,
    written to ``out``) for the thermal engine (compiled on first use)."""
    return LazyCompiled(func, FEATURES_SIGNATURE)


@numba.njit(cache=True)
def _gk15_rule(f, half):
    """K15 value and QUADPACK error estimate from the 15 integrand values ``f`` of an
    interval of half-length ``half`` (Piessens et al., QUADPACK (1983), qk15)."""
    resk = 0.0
    resg = 0.0
    resabs = 0.0
    for j in range(15):
        resk += _WK15[j] * f[j]
        resg += _WG15[j] * f[j]
        resabs += _WK15[j] * abs(f[j])
    mean = 0.5 * resk
    resasc = 0.0
    for j in range(15):
        resasc += _WK15[j] * abs(f[j] - mean)
    return resk * half, _quadpack_error(resk, resg, resasc, resabs, half)


@numba.njit(cache=True)
def _quadpack_error(resk, resg, resasc, resabs, half):
    # |K15 - G7| is the error of the 7-point rule; scaling it as
    # (200 |K-G| / resasc)^1.5 estimates the far smaller error of K15 itself for smooth
    # integrands, with a round-off floor.
    err = abs((resk - resg) * half)
    resasc *= abs(half)
    if resasc != 0.0 and err != 0.0:
        r = 200.0 * err / resasc
        err = resasc * min(1.0, r * math.sqrt(r))
    floor = 50.0 * 2.22e-16 * resabs * abs(half)
    return max(err, floor)


@numba.njit
def _gk15(kernel, p, weight, a, b, f):
    centre = 0.5 * (a + b)
    half = 0.5 * (b - a)
    f[7] = kernel(centre * centre, p) * boltzmann_weight(centre, weight)
    for j in range(7):
        du = half * _XGK[j]
        u1 = centre - du
        u2 = centre + du
        f[j] = kernel(u1 * u1, p) * boltzmann_weight(u1, weight)
        f[14 - j] = kernel(u2 * u2, p) * boltzmann_weight(u2, weight)
    return _gk15_rule(f, half)


def _base_panel_tables():
    # Kronrod nodes (x = u^2) and Boltzmann factors of the fixed panels, so that a
    # panel without features costs one kernel call per node and no exp().
    n_panels = _BASE_EDGES.size - 1
    x = np.empty((n_panels, 15))
    bw = np.empty((2, n_panels, 15))
    for i in range(n_panels):
        a, b = _BASE_EDGES[i], _BASE_EDGES[i + 1]
        u = 0.5 * (a + b) + 0.5 * (b - a) * _NODES15
        x[i] = u * u
        # the plain-Python weight: the compiled one would be loaded at import time
        for w in (THREE_BODY, ATOM_DIMER):
            bw[w, i] = _boltzmann_weight(u, w)
    return x, bw


_PANEL_X, _PANEL_BW = _base_panel_tables()
_GRADING = 4.0          # ratio of successive edges when grading towards a feature cluster
_MAX_EDGES = 256


@numba.njit
def _base_panel(kernel, p, weight, i, f):
    for j in range(15):
        f[j] = kernel(_PANEL_X[i, j], p) * _PANEL_BW[weight, i, j]
    return _gk15_rule(f, 0.5 * (_BASE_EDGES[i + 1] - _BASE_EDGES[i]))


@numba.njit(cache=True)
def _insert_sorted(edges, n, value):
    # Keep the first n entries of `edges` sorted and unique while adding `value`.
    if n >= edges.size:
        return n
    for i in range(n):
        if edges[i] == value:
            return n
    i = n
    while i > 0 and edges[i - 1] > value:
        edges[i] = edges[i - 1]
        i -= 1
    edges[i] = value
    return n + 1


@numba.njit(cache=True)
def _feature_edges(feat, n_feat, edges, n_edges):
    """Add feature points (given in x) as edges in u, graded geometrically around
    clusters: a feature whose nearest other feature lies at distance d gets edges at
    f -+ d 4^k out to the neighbouring fixed edges, so that the tails of a line narrower
    than k_BT are sampled on every scale (a light-tailed line is otherwise invisible to
    the error estimate of the panels beside it)."""
    us = np.empty(n_feat)
    m = 0
    for j in range(n_feat):
        x = feat[j]
        if x > 0.0 and x < _U_MAX * _U_MAX:
            us[m] = math.sqrt(x)
            m += 1
    for j in range(m):
        n_edges = _insert_sorted(edges, n_edges, us[j])
    for j in range(m):
        d = math.inf
        for k in range(m):
            if k != j and us[k] != us[j]:
                d = min(d, abs(us[k] - us[j]))
        if d == math.inf:
            continue
        lo_edge = 0.0
        hi_edge = _U_MAX
        for i in range(_BASE_EDGES.size):
            e = _BASE_EDGES[i]
            if e < us[j]:
                lo_edge = e
            elif e > us[j]:
                hi_edge = e
                break
        step = d * _GRADING
        while us[j] - step > lo_edge or us[j] + step < hi_edge:
            if us[j] - step > lo_edge:
                n_edges = _insert_sorted(edges, n_edges, us[j] - step)
            if us[j] + step < hi_edge:
                n_edges = _insert_sorted(edges, n_edges, us[j] + step)
            step *= _GRADING
    return n_edges


@numba.njit
def _average_one(kernel, features, p, weight, rtol, edges, feat, lo, hi, val, err, f):
    n_edges = _BASE_EDGES.size
    for i in range(n_edges):
        edges[i] = _BASE_EDGES[i]
    n_feat = min(features(p, feat), _MAX_FEATURES)
    if n_feat > 0:
        n_edges = _feature_edges(feat, n_feat, edges, n_edges)
    n = 0
    total = 0.0
    total_err = 0.0
    base = 0
    for i in range(n_edges - 1):
        lo[n] = edges[i]
        hi[n] = edges[i + 1]
        while base < _BASE_EDGES.size - 1 and _BASE_EDGES[base + 1] <= lo[n]:
            base += 1
        if lo[n] == _BASE_EDGES[base] and hi[n] == _BASE_EDGES[base + 1]:
            val[n], err[n] = _base_panel(kernel, p, weight, base, f)
        else:
            val[n], err[n] = _gk15(kernel, p, weight, lo[n], hi[n], f)
        total += val[n]
        total_err += err[n]
        n += 1
    while total_err > rtol * abs(total) and n < _MAX_INTERVALS:
        worst = 0
        for i in range(1, n):
            if err[i] > err[worst]:
                worst = i
        mid = 0.5 * (lo[worst] + hi[worst])
        if mid <= lo[worst] or mid >= hi[worst]:
            break                       # interval at machine resolution
        total -= val[worst]
        total_err -= err[worst]
        lo[n] = mid
        hi[n] = hi[worst]
        hi[worst] = mid
        val[worst], err[worst] = _gk15(kernel, p, weight, lo[worst], hi[worst], f)
        val[n], err[n] = _gk15(kernel, p, weight, lo[n], hi[n], f)
        total += val[worst] + val[n]
        total_err += err[worst] + err[n]
        n += 1
    if total_err < 0.0:
        total_err = 0.0
    return total, total_err


def _average_rows_py(kernel, features, params, weight, rtol, out, out_err):
    edges = np.empty(_MAX_EDGES)
    feat = np.empty(_MAX_FEATURES)
    lo = np.empty(_MAX_INTERVALS)
    hi = np.empty(_MAX_INTERVALS)
    val = np.empty(_MAX_INTERVALS)
    err = np.empty(_MAX_INTERVALS)
    scratch = np.empty(15)
    for i in range(params.shape[0]):
        out[i], out_err[i] = _average_one(kernel, features, params[i], weight, rtol,
                                          edges, feat, lo, hi, val, err, scratch)


_average_rows = LazyCompiled(_average_rows_py, numba.types.void(
    _KERNEL_TYPE, _FEATURES_TYPE, numba.types.float64[:, ::1], numba.types.int64, numba.types.float64,
    numba.types.float64[::1], numba.types.float64[::1]))


def thermal_average(kernel, features, params, weight, *, rtol=1e-9):
    """Boltzmann-average a numba kernel for every parameter row.

    Parameters
    ----------
    kernel : numba dispatcher or LazyCompiled
        ``kernel(x, p)``: the rate at collision energy E = x k_BT in the kernel's
        natural units, for parameter row ``p``.
    features : numba dispatcher or LazyCompiled
        ``features(p, out) -> n``: writes n feature energies (in units of k_BT) to ``out``.
    params : ndarray, shape (n, n_par)
        One row per point.
    weight : int
        :data:`THREE_BODY` or :data:`ATOM_DIMER`.
    rtol : float
        Target relative accuracy of the adaptive quadrature.

    Returns
    -------
    value, error_estimate : ndarray, ndarray
        Averages in the kernel's natural units and the quadrature's error estimate.
    """
    params = np.ascontiguousarray(params, dtype=float)
    out = np.empty(params.shape[0])
    out_err = np.empty(params.shape[0])
    # the reference path: converting the kernel to a function pointer costs ~40 us per
    # call, but nothing is compiled beyond the cached engine
    _average_rows(compiled(kernel), compiled(features), params, int(weight), float(rtol), out, out_err)
    return out, out_err



# --- fixed rules: the fast path ---------------------------------------------------------
# A thermal average at one point becomes a sum over the nodes of a composite
# Gauss-Legendre rule in a log variable of the energy (the fast path's kernels choose
# the panels, see lossfit.universal.averages); these helpers are independent of any kernel.
GL_ORDER = 8
_GL_X, _GL_W = np.polynomial.legendre.leggauss(GL_ORDER)


@numba.njit(cache=True)
def probability_below(weight, x):
    """P(E < x k_BT): the regularised lower incomplete gamma P(3, x) (three-body) or
    P(3/2, x) (atom-dimer), by its power series below x = 2 (no cancellation there)."""
    if x <= 0.0:
        return 0.0
    a = 3.0 if weight == THREE_BODY else 1.5
    if x > 2.0:
        if weight == THREE_BODY:
            return 1.0 - math.exp(-x) * (1.0 + x + 0.5 * x * x)
        return math.erf(math.sqrt(x)) - 2.0 * math.sqrt(x / math.pi) * math.exp(-x)
    # P(a, x) = x^a e^-x / Gamma(a + 1) sum_k x^k / ((a + 1) ... (a + k))
    term = 1.0
    total = 1.0
    k = 1.0
    while term > 1e-17 * total:
        term *= x / (a + k)
        total += term
        k += 1.0
    return math.exp(a * math.log(x) - x - math.lgamma(a + 1.0)) * total


def panel_edges(y0, y1, width, forced):
    """Edges of panels covering [y0, y1], each no wider than ``width(y)`` anywhere on it.

    Parameters
    ----------
    y0, y1 : float
        Range to cover.
    width : callable
        ``width(a, b)``: the largest panel width acceptable on [a, b] (vectorised over
        neither; called a few times per panel).
    forced : sequence of float
        Points that must be panel edges (kinks of the integrand).

    Returns
    -------
    ndarray
        Increasing edges, first y0, last y1.
    """
    stops = sorted({float(y0), float(y1)} | {float(f) for f in forced if y0 < f < y1})
    edges = [stops[0]]
    for a, b in zip(stops[:-1], stops[1:]):
        s = a
        while b - s > 1e-12:
            h = min(width(s, s), b - s)            # the width allowed where the panel starts
            while h > 1e-6 and width(s, s + h) < h:
                h *= 0.9                           # ... and everywhere on it
            nxt = b if s + h >= b else s + h
            if b - nxt < 0.25 * h and nxt < b:
                nxt = s + 0.5 * (b - s)        # split a short remainder evenly
            edges.append(nxt)
            s = nxt
    return np.array(edges)


_SUB_X, _SUB_W = np.polynomial.legendre.leggauss(2 * GL_ORDER)


@numba.njit(cache=True)
def upper_part_factors(tau, power, log_x0, dlog_x, out):
    """Factors f_j that turn a Gauss-Legendre panel rule into one for the panel's upper
    part t > tau (t in [-1, 1]) for integrands B(t) g(t) with a known Boltzmann density
    B = x^power e^{-x}, x = exp(log_x0 + dlog_x t), and a smooth g:

        sum_j f_j w_j B(t_j) g(t_j) = int_tau^1 B(t) p(t) dt,

    p the degree GL_ORDER - 1 polynomial through g at the nodes t_j. B is integrated
    exactly (a 2 GL_ORDER-point rule on [tau, 1]), the kernel g by interpolation. Used
    to cut a thermal average at an energy inside a panel."""
    half = 0.5 * (1.0 - tau)
    for j in range(GL_ORDER):
        x_j = math.exp(log_x0 + dlog_x * _GL_X[j])
        b_j = x_j ** power * math.exp(-x_j)
        acc = 0.0
        for k in range(2 * GL_ORDER):
            u = tau + half * (_SUB_X[k] + 1.0)
            basis = 1.0
            for m in range(GL_ORDER):
                if m != j:
                    basis *= (u - _GL_X[m]) / (_GL_X[j] - _GL_X[m])
            x = math.exp(log_x0 + dlog_x * u)
            acc += half * _SUB_W[k] * basis * x ** power * math.exp(-x)
        out[j] = acc / (_GL_W[j] * b_j) if b_j > 0.0 else 0.0


def composite_gauss_legendre(edges):
    """Nodes and weights of the GL_ORDER-point Gauss-Legendre rule on every panel."""
    a, b = edges[:-1, None], edges[1:, None]
    nodes = 0.5 * (a + b) + 0.5 * (b - a) * _GL_X[None, :]
    weights = 0.5 * (b - a) * _GL_W[None, :]
    return nodes.ravel(), weights.ravel()

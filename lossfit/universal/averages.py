"""Thermal averages of the exact zero-range kernels at table speed.

Every exact kernel is a ratio in w = exp(2 i Phi - 2 eta), where only Phi (through
kappa* and ln|a|) and eta depend on the Efimov parameters:

    K(E) = (N0 + 2 Re[(N1 + i N2) w] + N3 |w|^2 + (1 - e^{-4 eta}) N4) / |1 + s w|^2
           (+ an eta-independent part),

with N0..N4 and the reflection amplitude s universal functions of one table variable
y (ln k|a| for a < 0, ln(E m a^2/hbar^2) for three-body loss at a > 0, ln k_AD a for
beta) read from the shipped tables (:mod:`lossfit.universal.tables`).

The thermal average over E is a composite Gauss-Legendre rule in y whose panels are
*the same for every point*: a point at temperature T only shifts the Boltzmann weight
along y (E/k_BT = exp((y - y_T)/sigma)). The table functions at the nodes are computed
once per process; a point adds its Boltzmann weights. Hence two paths:

* **fixed data** (:class:`ThermalPlan`): in a fit the (a, T) of every point are fixed,
  so the weighted numerators of every node are computed once per data set; one
  evaluation combines them with cos 2Phi, sin 2Phi and eta (a few operations per node);
* **general** (:func:`general_average`): any points, the same nodes and sums, one
  exponential per node for the Boltzmann factor.

The panels follow each table's *resolution profile*: near a pole of 1/|1 + s w|^2
(|s| close to 1, small eta) the integrand varies on the scale
(1 - |s| e^{-2 eta_min}) / |d ln s / dy|; panels stay within ``_PROFILE_C`` times that
width for the smallest eta asked for (``eta_min``), have edges at every kink of the
tables (grid ends, the breakup threshold), and are at most ``_HMAX_Y`` wide so that
the Boltzmann factor and the table splines are resolved anywhere. Below the point's first
panel the kernel has reached its threshold limit, and that panel's first node also
carries the probability of the energies below it. Settings and measured accuracy
against the adaptive reference quadrature: docs/thermal-averages.md.
"""

__all__ = ["ThermalPlan", "three_body_plan", "atom_dimer_plan", "general_average", "phase_offset",
           "ShallowPartsPlan", "shallow_parts_plan", "ETA_MIN", "NEGATIVE_A", "POSITIVE_A", "ATOM_DIMER_A"]

import functools
import math

import numba
import numpy as np

from .._bisect import interval_of
from ..constants import ARG_GAMMA_S0, S0
from ..errors import LossfitValueError
from ..thermal import (
    ATOM_DIMER,
    GL_ORDER,
    THREE_BODY,
    composite_gauss_legendre,
    panel_edges,
    probability_below,
    upper_part_factors,
)
from .tables import (
    atom_dimer_grid_points,
    load_atom_dimer_table,
    load_recombination_table,
    load_s11_table,
    recombination_grid_points,
    s11_eval,
)

#: Smallest eta for which the default rules are built (the default prior's lower edge);
#: plans for smaller eta get finer rules of their own.
ETA_MIN = 0.005
_PROFILE_C = 2.0          # panel width / pole distance
_PROFILE_DY = 0.01
UNITARITY_THREE_BODY = 72.0 * math.sqrt(3.0) * math.pi ** 2
UNITARITY_ATOM_DIMER = 3.0 * math.sqrt(3.0) * math.pi / 4.0

# Kernel families.
NEGATIVE_A = 0            # K3, a < 0:   y = ln(k|a|) = ln q + s/2        (s11 table)
POSITIVE_A = 1            # K3, a > 0:   y = ln(E m a^2/hbar^2) = 2 ln q + s (recombination table)
ATOM_DIMER_A = 2          # beta, a > 0: y = ln(k_AD a) = ln p + s/2       (atom-dimer table)
_SIGMA = (0.5, 1.0, 0.5)
# Widest panel in y: resolves the Boltzmann factor exp(-E/k_BT) (at most 1.5 in
# s = ln(E/k_BT)); for a < 0 the near-threshold resonance of s11 at small eta, for a > 0
# the coarser spline knots of the three-body table (docs/thermal-averages.md).
_HMAX_Y = (0.5, 0.6, 0.75)
# Range of the global layouts in y. Every table reaches |a| = infinity through its
# unitarity tail: ln E = 64 is a = 1e16 a0 at 2 uK for 133Cs, ln k_AD a = 32 likewise.
_Y_RANGE = ((-32.0, 32.0), (-64.0, 64.0), (-32.0, 32.0))


def _threshold_y(family, eta_min):
    """Table variable below which the kernel has settled to its threshold limit for every
    eta >= eta_min; a point's rule starts there or at E = 1e-3 k_BT (1e-4 for beta),
    whichever is lower. 1 - |s11|^2 ~ x^4 and arg s11 ~ x^2 settle fast for a < 0, but
    T_AD = 8.27 k_AD a competes with 4 eta down to k_AD a ~ 1e-5 (eta = 0.005); at a > 0
    |s| <= 0.04 above the three-atom threshold."""
    ratio = eta_min / ETA_MIN
    if family == NEGATIVE_A:
        # not above 0.03 for large eta: the x^2 corrections of t/x^2 set the limit there
        return math.log(0.03 * math.sqrt(min(ratio, 1.0)))
    if family == POSITIVE_A:
        return math.log(1e-3)
    # T_AD/2 = 4.1 k_AD a against 2 eta: linear in eta; corrections linear in k_AD a
    return math.log(1e-5 * ratio)


# s above which the Boltzmann weights hold less than 1e-10 (three-body) and 1e-12 (beta)
# of the probability; the kernels do not grow with E there
_Y_UPPER_S = math.log(32.0)
_Y_BREAKUP = math.log(2.0 / math.sqrt(3.0))      # ln k_AD a at the breakup threshold

# Term columns of each family (table functions at the nodes, Efimov-independent; the
# powers of x = E/k_BT that turn them into the kernel are in the node weights, _weights):
# a < 0:        t = 1 - |s11|^2, Re s11, Im s11, |s11|^2
# a > 0:        A, Re B, Im B, C, T_break, H, Re s, Im s, |s|^2  (all over E^2)
# relaxation:   T_AD, Re s_AD, Im s_AD, |s_AD|^2
# breakup:      E^2 x (A, Re B, Im B, C, H), Re s, Im s, |s|^2   (three-atom energy E)


def _layout_terms(family, part, y):
    """Table functions at the nodes ``y``, shape (n_columns, n_nodes)."""
    if family == NEGATIVE_A:
        packed = load_s11_table().packed
        t, phase = np.array([s11_eval(packed, v) for v in np.exp(y)]).T
        r2 = np.maximum(1.0 - t, 0.0)
        return np.array([t, np.sqrt(r2) * np.cos(phase), np.sqrt(r2) * np.sin(phase), r2])
    if family == POSITIVE_A:
        v = load_recombination_table().evaluate(np.exp(y))
        re, im = v[:, 0], v[:, 1]
        return np.array([v[:, 2], v[:, 3], v[:, 4], v[:, 5], v[:, 6], v[:, 7], re, im, re * re + im * im])
    if part == 0:
        t_ad, s = load_atom_dimer_table().evaluate(np.exp(y))
        return np.array([t_ad, s.real, s.imag, np.abs(s) ** 2])
    energy = 0.75 * np.exp(2.0 * y) - 1.0
    above = energy > 0.0
    out = np.zeros((8, y.size))
    v = load_recombination_table().evaluate(energy[above])
    e2 = energy[above] ** 2
    for i, col in enumerate((2, 3, 4, 5, 7)):
        out[i, above] = e2 * v[:, col]
    out[5, above] = v[:, 0]
    out[6, above] = v[:, 1]
    out[7, above] = v[:, 0] ** 2 + v[:, 1] ** 2
    return out


class _Layout:
    """The global rule of one kernel family: panels, nodes, weights and terms."""

    def __init__(self, family, part, eta_min):
        sigma = _SIGMA[family]
        y0, y1 = _Y_RANGE[family]
        y_grid, width, kinks, y_end = _profile(family, part, eta_min)
        if y1 is None:
            y1 = y_end
        hmax = _HMAX_Y[family]
        ylo, dy = y_grid[0], y_grid[1] - y_grid[0]

        def allowed(a, b):
            # the largest acceptable width on [a, b]: the profile's minimum there, hmax off it
            i = int(max((a - ylo) / dy, 0.0))
            j = int(min((b - ylo) / dy + 1.0, width.size))
            if j <= 0 or i >= width.size:
                return hmax
            return min(hmax, float(width[i:max(j, i + 1)].min()))
        self.edges = panel_edges(y0, y1, allowed, kinks)
        self.y, self.omega = composite_gauss_legendre(self.edges)
        self.sigma = sigma
        self.terms = np.ascontiguousarray(_layout_terms(family, part, self.y))
        # exp(y/sigma) at the nodes: x = E/k_BT = ex * exp(-y_T/sigma), one product per node
        self.ex = np.exp(self.y / sigma)
        self.y_threshold = _threshold_y(family, eta_min)


@functools.lru_cache(maxsize=16)
def _layout(family, part, eta_min):
    return _Layout(family, part, eta_min)


def _width_from_amplitude(y, log_modulus, phase, eta_min):
    """Panel widths in y from the distance of the pole of 1/|1 + s w|^2 to the real axis."""
    dy = y[1] - y[0]
    dlog = np.hypot(np.gradient(log_modulus, dy), np.gradient(np.unwrap(phase), dy))
    eps = 1.0 - np.exp(log_modulus) * math.exp(-2.0 * eta_min)
    return _PROFILE_C * eps / np.maximum(dlog, 1e-12)


def _profile(family, part, eta_min):
    """(grid in y, widths on it, kinks, end of the table) of one kernel family."""
    if family == NEGATIVE_A:
        tab = load_s11_table()
        lo, hi = math.log(tab.x[0]), math.log(tab.x[-1])
        y = np.arange(lo - 1.0, hi + 1.0, _PROFILE_DY)
        s = tab.s11(np.exp(y))
        return y, _width_from_amplitude(y, np.log(np.abs(s)), np.angle(s), eta_min), [lo, hi], None
    if family == POSITIVE_A:
        e_lo, e_hi, e_unitarity = recombination_grid_points(load_recombination_table().packed)
        kinks = [math.log(e_lo), math.log(e_hi), math.log(e_unitarity)]
        y = np.arange(kinks[0] - 1.0, _Y_RANGE[POSITIVE_A][1], _PROFILE_DY)
        v = load_recombination_table().evaluate(np.exp(y))
        s = v[:, 0] + 1j * v[:, 1]
        width = _width_from_amplitude(y, np.log(np.maximum(np.abs(s), 1e-300)), np.angle(s), eta_min)
        return y, width, kinks, None
    tab = load_atom_dimer_table()
    first, breakup, last = atom_dimer_grid_points(tab.packed)
    y = np.arange(_threshold_y(ATOM_DIMER_A, eta_min) - 2.0, _Y_RANGE[ATOM_DIMER_A][1], _PROFILE_DY)
    _, s = tab.evaluate(np.exp(y))
    width = _width_from_amplitude(y, np.log(np.abs(s)), np.angle(s), eta_min)
    # the table's end, where its unitarity tail begins, is a kink too
    kinks = [math.log(first), math.log(breakup), math.log(last)]
    if part == 1:
        rc = load_recombination_table()
        e_lo, e_hi, _ = recombination_grid_points(rc.packed)
        kinks += [0.5 * math.log(4.0 * (e + 1.0) / 3.0) for e in (e_lo, e_hi, rc.high_energy_max)]
        # far below the breakup threshold (E_b = x_b k_BT, x_b >> 1) the breakup integrand
        # lives within ~1/x_b of it in ln E: panels graded geometrically away from the kink
        above = y > math.log(breakup)
        width[above] = np.minimum(width[above], np.maximum(0.005, 0.5 * (y[above] - math.log(breakup))))
        # and no panel wider than the 0.6 of the a > 0 family in ln E (the three-body
        # table's knots), mapped to ln k_AD a: d ln E / dy = 1.5 (k_AD a)^2 / E
        kad2 = np.exp(2.0 * y[above])
        width[above] = np.minimum(width[above], _HMAX_Y[POSITIVE_A] * (0.75 * kad2 - 1.0) / (1.5 * kad2))
    return y, width, kinks, None


# ---- per-point weights ------------------------------------------------------------------------
@numba.njit(cache=True)
def _point_range(edges, y, y_lo, y_hi):
    """Indices [first, stop) of the nodes of the panels that overlap [y_lo, y_hi], and the
    lower edge of the first such panel. Nodes of the last panel beyond y_hi are dropped:
    their Boltzmann weights are below 1e-12 of the total (whole panels are kept at the
    lower end, where the tail probability joins the first node)."""
    i = interval_of(edges, y_lo)
    j = interval_of(edges, y_hi) + 1
    if y_hi <= edges[j - 1] and j - 1 > i:
        j -= 1                  # y_hi on an edge: the panel above adds nothing
    stop = j * GL_ORDER
    while stop > (j - 1) * GL_ORDER + 1 and y[stop - 1] > y_hi:
        stop -= 1
    return i * GL_ORDER, stop, edges[i]


@numba.njit(cache=True)
def _weights(family, ex, omega, sigma, first, stop, edge, y_off, scale, out):
    """Boltzmann weight x P(x) ds/dy of every node in [first, stop), times the power of x
    that turns the table terms into the kernel (1/x^2 for K3 at a < 0, 1 at a > 0,
    1/sqrt(x) for beta) and ``scale``; the probability below ``edge`` is added to the
    first node (the kernel has reached its threshold limit there)."""
    shift = math.exp(-y_off / sigma)
    f = scale / sigma
    e = ex[first:stop]
    om = omega[first:stop]
    # three loops rather than one branch per node: this is the general path's hot loop
    if family == NEGATIVE_A:
        for j in range(stop - first):
            x = e[j] * shift
            out[j] = f * om[j] * 0.5 * x * math.exp(-x)                  # x (x^2 e^-x/2) / x^2
    elif family == POSITIVE_A:
        for j in range(stop - first):
            x = e[j] * shift
            out[j] = f * om[j] * 0.5 * x * x * x * math.exp(-x)
    else:
        for j in range(stop - first):
            x = e[j] * shift
            out[j] = f * om[j] * 1.1283791670955126 * x * math.exp(-x)  # x (2/sqrt pi) sqrt(x) e^-x / sqrt(x)
    x0 = ex[first] * shift
    weight = ATOM_DIMER if family == ATOM_DIMER_A else THREE_BODY
    tail = probability_below(weight, math.exp((edge - y_off) / sigma))
    if family == NEGATIVE_A:
        tail /= x0 * x0
    elif family == ATOM_DIMER_A:
        tail /= math.sqrt(x0)
    out[0] += scale * tail


# ---- sums: combine the terms with the Efimov phase and eta ------------------------------------
# The loops run over slices from 0 so that numba can drop its negative-index checks, and
# with IEEE division (error_model="numpy"; the denominators are >= (1 - e^{-2 eta})^2 > 0)
# LLVM vectorises them (measured: 0.85 instead of 2.3 ns per node).
_FAST_SUM = {"cache": True, "fastmath": {"reassoc", "contract"}, "error_model": "numpy"}


@numba.njit(**_FAST_SUM)
def _sum_single(wt, t, d1, d2, d3, first, stop, a1, a2, a3):
    # sum_k wt t / (1 + a1 d1 + a2 d2 + a3 d3); wt is indexed from 0 at ``first``
    n = stop - first
    w = wt[:n]
    tt, e1, e2, e3 = t[first:stop], d1[first:stop], d2[first:stop], d3[first:stop]
    acc = 0.0
    for j in range(n):
        acc += w[j] * tt[j] / (1.0 + a1 * e1[j] + a2 * e2[j] + a3 * e3[j])
    return acc


@numba.njit(**_FAST_SUM)
def _sum_ratio(wt, c0, c1, c2, c3, c4, d1, d2, d3, first, stop, a1, a2, a3, b4):
    # sum_k wt (c0 + a1 c1 + a2 c2 + a3 c3 + b4 c4) / (1 + a1 d1 + a2 d2 + a3 d3)
    n = stop - first
    w = wt[:n]
    f0, f1, f2, f3, f4 = c0[first:stop], c1[first:stop], c2[first:stop], c3[first:stop], c4[first:stop]
    e1, e2, e3 = d1[first:stop], d2[first:stop], d3[first:stop]
    acc = 0.0
    for j in range(n):
        top = f0[j] + a1 * f1[j] + a2 * f2[j] + a3 * f3[j] + b4 * f4[j]
        acc += w[j] * top / (1.0 + a1 * e1[j] + a2 * e2[j] + a3 * e3[j])
    return acc


@numba.njit(**_FAST_SUM)
def _dot(wt, col, first, stop):
    n = stop - first
    w = wt[:n]
    c = col[first:stop]
    acc = 0.0
    for j in range(n):
        acc += w[j] * c[j]
    return acc


@numba.njit(cache=True)
def _h_sum(family, part, terms, wt, first, stop):
    """The eta-independent part (shallow-dimer recombination in J >= 1): sum of wt H."""
    if family == POSITIVE_A:
        return _dot(wt, terms[5], first, stop)
    if family == ATOM_DIMER_A and part == 1:
        return _dot(wt, terms[4], first, stop)
    return 0.0


@numba.njit(cache=True)
def _point_value(family, part, terms, wt, first, stop, cos2phi, sin2phi, e2, g, w_a, w_b, h_sum):
    """One point's average from its node weights ``wt``; (w_a, w_b) are the channel
    weights (shallow, deep) at a > 0 and (relaxation, breakup) for beta; ``h_sum`` is
    the eta-independent sum of :func:`_h_sum` if known (plans), else NaN."""
    a1 = 2.0 * e2 * cos2phi
    a2 = -2.0 * e2 * sin2phi
    a3 = e2 * e2
    if family == NEGATIVE_A:
        # all into deep dimers: the deep-channel weight w_b
        return UNITARITY_THREE_BODY * w_b * g * _sum_single(wt, terms[0], terms[1], terms[2], terms[3], first, stop,
                                                      a1, a2, a3)
    if family == POSITIVE_A:
        # shallow (A + 2 Re(B w) + C |w|^2)/den + H, deep T_break (1 - e^{-4 eta})/den
        if w_a == 0.0:
            return UNITARITY_THREE_BODY * w_b * g * _sum_single(wt, terms[4], terms[6], terms[7], terms[8], first,
                                                                stop, a1, a2, a3)
        ratio = _sum_ratio(wt, terms[0], terms[1], terms[2], terms[3], terms[4], terms[6], terms[7], terms[8],
                           first, stop, a1, a2, a3, w_b * g / w_a)
        h = _h_sum(family, part, terms, wt, first, stop) if h_sum != h_sum else h_sum
        return UNITARITY_THREE_BODY * w_a * (ratio + h)
    if part == 0:
        return UNITARITY_ATOM_DIMER * w_a * g * _sum_single(wt, terms[0], terms[1], terms[2], terms[3], first,
                                                            stop, a1, a2, a3)
    ratio = _sum_ratio(wt, terms[0], terms[1], terms[2], terms[3], terms[0], terms[5], terms[6], terms[7],
                       first, stop, a1, a2, a3, 0.0)
    h = _h_sum(family, part, terms, wt, first, stop) if h_sum != h_sum else h_sum
    return UNITARITY_ATOM_DIMER * w_b * (ratio + h)


@numba.njit(cache=True)
def _cut_below(family, edges, ex, sigma, first, stop, edge, y_off, x_cut, scale, out):
    """Restrict a point's rule to E > x_cut k_BT: nodes of panels below the cut drop out,
    the panel that holds it keeps the interpolatory rule of its upper part
    (:func:`lossfit.thermal.upper_part_factors`), and the threshold-tail probability that
    :func:`_weights` put on the first node keeps only its part above the cut."""
    weight = ATOM_DIMER if family == ATOM_DIMER_A else THREE_BODY
    x_edge = math.exp((edge - y_off) / sigma)
    x0 = ex[first] * math.exp(-y_off / sigma)
    power = 1.0
    if family == NEGATIVE_A:
        power = x0 * x0
    elif family == ATOM_DIMER_A:
        power = math.sqrt(x0)
    out[0] -= scale * probability_below(weight, min(x_cut, x_edge)) / power
    if x_cut <= x_edge:
        return
    y_cut = y_off + sigma * math.log(x_cut)
    # the Boltzmann density of the node weights (_weights): x^power e^-x
    density_power = 3.0 if family == POSITIVE_A else 1.0
    factors = np.empty(GL_ORDER)
    cut_panel = -1
    for j in range(first, stop):
        panel = j // GL_ORDER
        lo, hi = edges[panel], edges[panel + 1]
        if hi <= y_cut:
            out[j - first] = 0.0
        elif lo < y_cut:
            if panel != cut_panel:
                # x = exp((y - y_off)/sigma) with y = mid + half t on the panel
                mid, half = 0.5 * (lo + hi), 0.5 * (hi - lo)
                upper_part_factors((y_cut - mid) / half, density_power, (mid - y_off) / sigma, half / sigma, factors)
                cut_panel = panel
            out[j - first] *= factors[j % GL_ORDER]


@numba.njit(cache=True)
def _point_weights(family, part, edges, y, ex, omega, sigma, y_threshold, scale_q, scale, x_cut, out):
    """One point's rule: writes its node weights to ``out`` and returns (first, stop,
    status) -- the node range in the layout and 0, or 1 / 2 if the rule would leave the
    layout below / above (then nothing is written). ``x_cut`` > 0 restricts the average
    to collision energies above x_cut k_BT (the rest of the integrand counts zero)."""
    y_off, y_lo, y_hi = _span(family, part, scale_q, y_threshold)
    if y_lo < edges[0]:
        return 0, 0, 1
    if y_hi > edges[edges.size - 1] + 1e-9:
        return 0, 0, 2
    first, stop, edge = _point_range(edges, y, y_lo, y_hi)
    # the a > 0 table holds K3 x^2 / q^4 (its columns are over (E m a^2/hbar^2)^2)
    f = scale * scale_q ** 4 if family == POSITIVE_A else scale
    _weights(family, ex, omega, sigma, first, stop, edge, y_off, f, out)
    if part == 1:
        # breakup: the rule starts on the threshold kink and nothing lies below it
        x_cut = max(x_cut, math.exp((edge - y_off) / sigma))
    if x_cut > 0.0:
        _cut_below(family, edges, ex, sigma, first, stop, edge, y_off, x_cut, f, out)
    return first, stop, 0


@numba.njit(cache=True)
def _general(family, part, edges, y, ex, omega, sigma, terms, y_threshold, a, scale_q, scale, cuts, offset, e2,
             g, w_a, w_b, out):
    """The general path: every point through the global rule, nothing kept. Returns the
    first non-zero status of :func:`_point_weights`, or 0."""
    wt = np.empty(ex.size)
    for p in range(a.size):
        first, stop, status = _point_weights(family, part, edges, y, ex, omega, sigma, y_threshold, scale_q[p],
                                             scale[p], cuts[p], wt)
        if status:
            return status
        two_phi = 2.0 * S0 * math.log(abs(a[p])) + offset
        out[p] += _point_value(family, part, terms, wt, first, stop, math.cos(two_phi), math.sin(two_phi), e2, g,
                               w_a, w_b, math.nan)
    return 0


@numba.njit(cache=True)
def _plan_weights(family, part, edges, y, ex, omega, sigma, y_threshold, scale_q, scale, cuts):
    """Node ranges and weights of every point of a plan (see :func:`_point_weights`); the
    last value is the status."""
    m = scale_q.size
    first = np.empty(m, dtype=np.int64)
    stop = np.empty(m, dtype=np.int64)
    offset = np.zeros(m + 1, dtype=np.int64)
    wt = np.empty(m * ex.size // 4 + ex.size)
    for p in range(m):
        if offset[p] + ex.size > wt.size:
            grown = np.empty(2 * wt.size + ex.size)
            # element by element: numba's array-to-slice assignment brings its shape check
            # and error-message code, ~4 s of compile on a fresh cache
            for k in range(offset[p]):
                grown[k] = wt[k]
            wt = grown
        first[p], stop[p], status = _point_weights(family, part, edges, y, ex, omega, sigma, y_threshold,
                                                   scale_q[p], scale[p], cuts[p], wt[offset[p]:])
        if status:
            return wt[:0], first, stop, offset, status
        offset[p + 1] = offset[p] + stop[p] - first[p]
    return wt[:offset[m]].copy(), first, stop, offset, 0


@numba.njit(cache=True)
def _cut_copy(family, part, edges, ex, sigma, y_threshold, wt, first, stop, offset, scale_q, scale, cuts):
    """A plan's weights restricted per point to E > cuts[p] k_BT (:func:`_cut_below`),
    from its uncut weights: the Boltzmann factors are not computed again."""
    out = wt.copy()
    for p in range(first.size):
        if cuts[p] > 0.0:
            y_off = _span(family, part, scale_q[p], y_threshold)[0]
            f = scale[p] * scale_q[p] ** 4 if family == POSITIVE_A else scale[p]
            _cut_below(family, edges, ex, sigma, first[p], stop[p], edges[first[p] // GL_ORDER], y_off, cuts[p], f,
                       out[offset[p]:offset[p + 1]])
    return out


@numba.njit(cache=True)
def _plan_evaluate(family, part, terms, wt, first, stop, offset, h_sum, cos_t, sin_t, cos_off, sin_off, e2, g,
                   w_a, w_b, out):
    # 2 Phi_p = theta_p + offset: rotate the stored (cos, sin) of theta_p = 2 s0 ln|a_p|
    for p in range(first.size):
        c = cos_t[p] * cos_off - sin_t[p] * sin_off
        s = sin_t[p] * cos_off + cos_t[p] * sin_off
        out[p] += _point_value(family, part, terms, wt[offset[p]:offset[p + 1]], first[p], stop[p], c, s, e2, g,
                               w_a, w_b, h_sum[p])


@numba.njit(cache=True)
def _plan_evaluate_many(family, part, terms, wt, first, stop, offset, h_sum, cos_t, sin_t, cos_off, sin_off, e2, g,
                        w_a, w_b, out):
    # one call for every walker: out[w] += the averages at walker w's Efimov scalars
    for w in range(cos_off.size):
        _plan_evaluate(family, part, terms, wt, first, stop, offset, h_sum, cos_t, sin_t, cos_off[w], sin_off[w],
                       e2[w], g[w], w_a, w_b, out[w])


@numba.njit(cache=True)
def _plan_evaluate_scaled(family, part, terms, wt, first, stop, offset, h_sum, cos_t, sin_t, cos_off, sin_off, e2,
                          g, w_a, w_b, turn_cos, turn_sin, factor, out):
    # as _plan_evaluate_many, with every point's phase turned further by (turn_cos,
    # turn_sin)[w, p] and its value multiplied by factor[w, p] (ThermalPlan.evaluate_scaled)
    for w in range(cos_off.size):
        for p in range(first.size):
            c0 = cos_t[p] * cos_off[w] - sin_t[p] * sin_off[w]
            s0 = sin_t[p] * cos_off[w] + cos_t[p] * sin_off[w]
            c = c0 * turn_cos[w, p] - s0 * turn_sin[w, p]
            s = s0 * turn_cos[w, p] + c0 * turn_sin[w, p]
            out[w, p] += factor[w, p] * _point_value(family, part, terms, wt[offset[p]:offset[p + 1]], first[p],
                                                     stop[p], c, s, e2[w], g[w], w_a, w_b, h_sum[p])


@numba.njit(cache=True)
def _plan_h_sums(family, part, terms, wt, first, stop, offset):
    out = np.empty(first.size)
    for p in range(first.size):
        out[p] = _h_sum(family, part, terms, wt[offset[p]:offset[p + 1]], first[p], stop[p])
    return out


# ---- the Efimov-dependent scalars --------------------------------------------------------------
def phase_offset(kappa_times_feature, feature):
    """2 Phi - 2 s0 ln|a| = 2 s0 ln(kappa*/sqrt 2) - 2 arg Gamma(1 + i s0), kappa* = the
    table's kappa* x feature over the feature position (a0)."""
    return 2.0 * (S0 * math.log(kappa_times_feature / feature / math.sqrt(2.0)) - ARG_GAMMA_S0)


@functools.lru_cache(maxsize=None)
def _feature(family):
    """(feature name, eta name, kappa* x feature): kappa* comes from a_- for a < 0, a_+ for
    three-body loss at a > 0 and a* for atom-dimer loss."""
    if family == NEGATIVE_A:
        return "a_minus", "eta_minus", load_s11_table().kappa_star_a_minus
    if family == POSITIVE_A:
        return "a_plus", "eta_plus", load_recombination_table().kappa_star_a_plus
    return "a_star", "eta_star", load_atom_dimer_table().kappa_star_a_star


@numba.njit(cache=True)
def _span(family, part, scale_q, y_threshold):
    """(y_T, y_lo, y_hi) of one point: the table variable at E = k_BT and the span of its
    rule, from the threshold regime up to where the Boltzmann weight is negligible."""
    sigma = 1.0 if family == POSITIVE_A else 0.5
    y_off = (2.0 if family == POSITIVE_A else 1.0) * math.log(scale_q)
    x_lo = 1e-4 if family == ATOM_DIMER_A else 1e-3
    y_lo = y_off + sigma * min(math.log(x_lo), (y_threshold - y_off) / sigma)
    y_hi = y_off + sigma * _Y_UPPER_S
    if part == 1:
        # breakup starts at E_b = x_b k_BT: nothing below it (the rule starts on the kink,
        # or at E = 1e-8 k_BT, where at most ~1e-8 of the weight lies below, the breakup
        # kernel being at most unitarity-limited ~ 1/sqrt(E)), and reach as far above it as
        # above E = 0
        x_b = math.exp((_Y_BREAKUP - y_off) / sigma)
        y_lo = max(y_off + sigma * math.log(1e-8), _Y_BREAKUP)
        y_hi = y_off + sigma * math.log(x_b + math.exp(_Y_UPPER_S))
    return y_off, y_lo, y_hi


def _span_error(status):
    if status == 1:
        raise LossfitValueError("temperature", "k_B T a^2 is too small for the fast thermal rule "
                                "(below its range); use rtol= for the adaptive quadrature")
    raise LossfitValueError("a", "the thermal average reaches beyond the end of the zero-range table; "
                            "lower a or T")


def _efimov_scalars(family, efimov, eta_min):
    """(2 Phi - 2 s0 ln|a|, e^{-2 eta}, 1 - e^{-4 eta}) of one kernel family."""
    feature, eta_name, kappa = _feature(family)
    a_f = getattr(efimov, feature)
    eta = getattr(efimov, eta_name)
    if a_f is None or eta is None:
        efimov.require(feature, eta_name)
    if eta < eta_min:
        raise LossfitValueError(eta_name, f"{eta:g} is below eta_min={eta_min:g}, the smallest eta this "
                                "fast rule resolves; build a plan with a smaller eta_min or use rtol=")
    return phase_offset(kappa, a_f), math.exp(-2.0 * eta), -math.expm1(-4.0 * eta)


def _cuts(cut, n):
    """Per-point cuts E/k_BT as a float array (zeros: none)."""
    if cut is None:
        return np.zeros(n)
    return np.ascontiguousarray(np.broadcast_to(np.asarray(cut, dtype=float), (n,)))


def _efimov_arrays(family, efimov, eta_min, walkers):
    """(cos, sin of 2 Phi - 2 s0 ln|a|, e^{-2 eta}, 1 - e^{-4 eta}) of one kernel family for
    every walker: arrays of max(walkers, 1), computed in one compiled pass (this runs at
    every sampler step)."""
    feature, eta_name, kappa = _feature(family)
    a_f = getattr(efimov, feature)
    eta = getattr(efimov, eta_name)
    if a_f is None or eta is None:
        efimov.require(feature, eta_name)
    n = max(walkers, 1)
    a_f = np.asarray(a_f, dtype=float)
    eta = np.asarray(eta, dtype=float)
    if a_f.shape != (n,) or eta.shape != (n,):
        # copies, not broadcast views: a read-only array would compile the kernel again
        a_f, eta = np.array(np.broadcast_to(a_f, (n,))), np.array(np.broadcast_to(eta, (n,)))
    out = np.empty((4, n))
    if _walker_terms(a_f, eta, kappa, eta_min, out):
        raise LossfitValueError(eta_name, f"{eta.min():g} is below eta_min={eta_min:g}, the smallest eta this "
                                "fast rule resolves; build a plan with a smaller eta_min or use rtol=")
    return out[0], out[1], out[2], out[3]


@numba.njit(cache=True)
def _walker_terms(a_f, eta, kappa, eta_min, out):
    # the expressions of phase_offset and _efimov_scalars, per walker; True if an eta is
    # below eta_min
    low = False
    for w in range(a_f.size):
        off = 2.0 * (S0 * math.log(kappa / a_f[w] / math.sqrt(2.0)) - ARG_GAMMA_S0)
        out[0, w] = math.cos(off)
        out[1, w] = math.sin(off)
        out[2, w] = math.exp(-2.0 * eta[w])
        out[3, w] = -math.expm1(-4.0 * eta[w])
        low |= eta[w] < eta_min
    return low


def general_average(family, a, scale_q, efimov, scale, weights=(1.0, 1.0), parts=(0,), cut=None):
    """Exact thermal averages at arbitrary points (the general path).

    Parameters
    ----------
    family : int
        :data:`NEGATIVE_A`, :data:`POSITIVE_A` or :data:`ATOM_DIMER_A`.
    a : ndarray
        Scattering lengths in a0, 1-D, all of the family's sign.
    scale_q : ndarray
        k_T |a| (three-body) or k_AD a at E = k_BT (atom-dimer), k_T = sqrt(m k_BT)/hbar.
    efimov : Efimov
    scale : ndarray
        Factor per point on the natural-unit result (hbar^5/(m^3 (k_BT)^2) for K3,
        hbar/(m k_T) for beta).
    weights : (float, float)
        Channel weights: (shallow, deep) at a > 0, (relaxation, breakup) for beta.
    parts : tuple of int
        For beta, the parts to add: 0 relaxation, 1 breakup.
    cut : ndarray, optional
        Per point, average only over collision energies above ``cut`` k_BT (<= 0: all).

    Returns
    -------
    ndarray
    """
    eta = getattr(efimov, _feature(family)[1])
    off, e2, g = _efimov_scalars(family, efimov, 0.0 if eta is None else eta)
    out = np.zeros(a.size)
    cuts = _cuts(cut, a.size)
    for part in parts:
        lay = _layout(family, part, _rule_eta(eta))
        status = _general(family, part, lay.edges, lay.y, lay.ex, lay.omega, lay.sigma, lay.terms, lay.y_threshold, a,
                          scale_q, scale, cuts, off, e2, g, float(weights[0]), float(weights[1]), out)
        if status:
            _span_error(status)
    return out


class _PlanGroup:
    """The prepared points of one kernel family (and part) within a plan."""

    __slots__ = ("family", "head", "w_a", "w_b", "index", "buffer", "n_nodes")

    def __init__(self, family, part, a, scale_q, scale, weights, eta_min, index, cuts):
        lay = _layout(family, part, _rule_eta(eta_min))
        wt, first, stop, offset, status = _plan_weights(family, part, lay.edges, lay.y, lay.ex, lay.omega,
                                                        lay.sigma, lay.y_threshold, scale_q,
                                                        np.asarray(scale, dtype=float), cuts)
        if status:
            _span_error(status)
        theta = 2.0 * S0 * np.log(np.abs(a))
        self.family = family
        # the arguments of _plan_evaluate that do not change between evaluations
        h_sum = _plan_h_sums(family, part, lay.terms, wt, first, stop, offset)
        self.head = (family, part, lay.terms, wt, first, stop, offset, h_sum, np.cos(theta), np.sin(theta))
        self.w_a, self.w_b = float(weights[0]), float(weights[1])
        self.index = index
        self.buffer = np.empty(a.size)
        self.n_nodes = int(offset[-1])


@numba.njit(**_FAST_SUM)
def _sum_parts(wt, wt_a, wt_d, terms, first, stop, a1, a2, a3, g):
    # one pass over a > 0 nodes: (deep, shallow, shallow above cut a, shallow above cut d)
    n = stop - first
    w, wa, wd = wt[:n], wt_a[:n], wt_d[:n]
    c0, c1, c2, c3 = terms[0][first:stop], terms[1][first:stop], terms[2][first:stop], terms[3][first:stop]
    tb, hj = terms[4][first:stop], terms[5][first:stop]
    d1, d2, d3 = terms[6][first:stop], terms[7][first:stop], terms[8][first:stop]
    deep = 0.0
    sh = 0.0
    sh_a = 0.0
    sh_d = 0.0
    for j in range(n):
        inv = 1.0 / (1.0 + a1 * d1[j] + a2 * d2[j] + a3 * d3[j])
        k = (c0[j] + a1 * c1[j] + a2 * c2[j] + a3 * c3[j]) * inv + hj[j]
        deep += w[j] * tb[j] * inv
        sh += w[j] * k
        sh_a += wa[j] * k
        sh_d += wd[j] * k
    return UNITARITY_THREE_BODY * g * deep, UNITARITY_THREE_BODY * sh, UNITARITY_THREE_BODY * sh_a, \
        UNITARITY_THREE_BODY * sh_d


@numba.njit(cache=True)
def _parts_evaluate(terms, wt, wt_a, wt_d, first, stop, offset, cos_t, sin_t, cos_off, sin_off, e2, g, out):
    # out[w, part, point] for every walker w
    for w in range(cos_off.size):
        for p in range(first.size):
            c = cos_t[p] * cos_off[w] - sin_t[p] * sin_off[w]
            s = sin_t[p] * cos_off[w] + cos_t[p] * sin_off[w]
            lo, hi = offset[p], offset[p + 1]
            out[w, 0, p], out[w, 1, p], out[w, 2, p], out[w, 3, p] = _sum_parts(
                wt[lo:hi], wt_a[lo:hi], wt_d[lo:hi], terms, first[p], stop[p], 2.0 * e2[w] * c, -2.0 * e2[w] * s,
                e2[w] * e2[w], g[w])


class ShallowPartsPlan:
    """Fixed-data plan of the a > 0 three-body parts that the observed loss combines:
    the deep channel, the shallow channel, and the shallow channel above two per-point
    energy cuts, all in one pass over the same nodes (the cuts only change weights).

    Built by :func:`shallow_parts_plan`; :meth:`evaluate` returns an array (4, n_points)
    in the units of the builder's ``scale`` ((walkers, 4, n_points) for an Efimov set of
    walker arrays).
    """

    def __init__(self, a, q, scale, cut_a, cut_d, eta_min):
        lay = _layout(POSITIVE_A, 0, _rule_eta(eta_min))
        scale = np.asarray(scale, dtype=float)
        wt, first, stop, offset, status = _plan_weights(POSITIVE_A, 0, lay.edges, lay.y, lay.ex, lay.omega, lay.sigma,
                                                        lay.y_threshold, q, scale, np.zeros(a.size))
        if status:
            _span_error(status)
        weights = [wt] + [_cut_copy(POSITIVE_A, 0, lay.edges, lay.ex, lay.sigma, lay.y_threshold, wt, first, stop,
                                    offset, q, scale, _cuts(cut, a.size)) for cut in (cut_a, cut_d)]
        theta = 2.0 * S0 * np.log(np.abs(a))
        self.head = (lay.terms, *weights, first, stop, offset, np.cos(theta), np.sin(theta))
        self.n_points = a.size
        self.n_nodes = int(offset[-1])
        self.eta_min = eta_min

    def evaluate(self, efimov):
        walkers = efimov.n_walkers
        if walkers:
            cos_off, sin_off, e2, g = _efimov_arrays(POSITIVE_A, efimov, self.eta_min, walkers)
        else:
            # one Efimov set of floats: scalars by math (a one-walker batch)
            off, e2, g = _efimov_scalars(POSITIVE_A, efimov, self.eta_min)
            cos_off, sin_off, e2, g = (np.array([v]) for v in (math.cos(off), math.sin(off), e2, g))
        out = np.empty((cos_off.size, 4, self.n_points))
        _parts_evaluate(*self.head, cos_off, sin_off, e2, g, out)
        return out if walkers else out[0]


def shallow_parts_plan(a, q, scale, cut_a, cut_d, *, eta_min=ETA_MIN):
    """:class:`ShallowPartsPlan` at points a > 0 (a0), q = k_T a, ``scale`` per point on
    hbar^5/(m^3 (k_BT)^2), cuts E/k_BT per point (<= 0: none)."""
    return ShallowPartsPlan(np.ravel(a), np.abs(np.ravel(q)), np.ravel(scale), cut_a, cut_d,
                            _check_eta_min(eta_min))


class ThermalPlan:
    """The Efimov-independent part of exact thermal averages at fixed points.

    Built once per data set by :func:`three_body_plan` / :func:`atom_dimer_plan`;
    :meth:`evaluate` then costs a few operations per quadrature node.

    Attributes
    ----------
    n_points : int
    n_nodes : int
        Quadrature nodes over all points (the cost of one evaluation).
    eta_min : float
        Smallest eta for which the plan keeps its accuracy.
    """

    def __init__(self, n_points, groups, eta_min):
        self.n_points = n_points
        self.groups = groups
        self.eta_min = eta_min
        self.n_nodes = sum(g.n_nodes for g in groups)

    def evaluate(self, efimov, out=None):
        """Averages at every point, in the units set by the builder's ``scale``.

        Parameters
        ----------
        efimov : Efimov
            Needs the feature and eta of every side present (a_- and eta_- for a < 0, ...).
            Its parameters may be arrays of W walkers: then one call evaluates them all.
        out : ndarray, optional
            Filled in place and returned.

        Returns
        -------
        ndarray, shape (n_points,) or (W, n_points)
        """
        walkers = efimov.n_walkers
        if not walkers:
            return self._evaluate_one(efimov, out)
        values = np.zeros((walkers, self.n_points))
        for grp in self.groups:
            cos_off, sin_off, e2, g = _efimov_arrays(grp.family, efimov, self.eta_min, walkers)
            target = values if grp.index is None else np.zeros((cos_off.size, grp.buffer.size))
            _plan_evaluate_many(*grp.head, cos_off, sin_off, e2, g, grp.w_a, grp.w_b, target)
            if grp.index is not None:
                values[:, grp.index] += target
        if out is None:
            return values
        out[...] = values
        return out

    def evaluate_scaled(self, efimov, log_rho):
        """Averages at the scattering lengths rho a and temperatures T / rho^2 of every
        point (a, T) of the plan, for a factor rho per walker and point, without a new plan.

        Zero-range theory has no length but a and the Efimov feature: scaling both by rho
        leaves k_T|a| unchanged at T / rho^2, turns 2 s0 ln|a| by 2 s0 ln rho and
        multiplies the natural unit by rho^4 (K3, hbar^5/(m^3 (k_BT)^2)) or rho (beta,
        hbar/(m k_T)). The prepared weights at (a, T) therefore give the averages at
        (rho a, T / rho^2) exactly (docs/global-fit.md, "Resonance shifts").

        Parameters
        ----------
        efimov : Efimov
            As for :meth:`evaluate` (floats or arrays of W walkers).
        log_rho : ndarray, shape (W, n_points) or (n_points,)
            ln rho per walker and point.

        Returns
        -------
        ndarray, shape (W, n_points), or (n_points,) for an Efimov set of floats
        """
        walkers = efimov.n_walkers
        log_rho = np.broadcast_to(np.asarray(log_rho, dtype=float), (max(walkers, 1), self.n_points))
        values = np.zeros(log_rho.shape)
        for grp in self.groups:
            cos_off, sin_off, e2, g = _efimov_arrays(grp.family, efimov, self.eta_min, walkers)
            ln_rho = log_rho if grp.index is None else log_rho[:, grp.index]
            turn = 2.0 * S0 * ln_rho
            power = 1.0 if grp.family == ATOM_DIMER_A else 4.0
            target = np.zeros(ln_rho.shape)
            _plan_evaluate_scaled(*grp.head, cos_off, sin_off, e2, g, grp.w_a, grp.w_b, np.cos(turn), np.sin(turn),
                                  np.exp(power * ln_rho), target)
            if grp.index is None:
                values += target
            else:
                values[:, grp.index] += target
        return values if walkers else values[0]

    def _evaluate_one(self, efimov, out):
        # one Efimov set of floats: scalars by math, no temporary arrays
        out = np.empty(self.n_points) if out is None else out
        out.fill(0.0)
        for grp in self.groups:
            off, e2, g = _efimov_scalars(grp.family, efimov, self.eta_min)
            target = out
            if grp.index is not None:
                target = grp.buffer
                target.fill(0.0)
            _plan_evaluate(*grp.head, math.cos(off), math.sin(off), e2, g, grp.w_a, grp.w_b, target)
            if grp.index is not None:
                out[grp.index] += target
        return out


def _rule_eta(eta):
    """The rules used for eta >= ``eta``: those built for the largest ETA_MIN 2^k <= eta/2
    (k from -17 to 5; the factor 2 is the safety margin measured in
    docs/thermal-averages.md), coarser for large eta, finer for small."""
    k = min(max(math.floor(math.log2(eta / ETA_MIN)) - 1, -17), 5)
    return ETA_MIN * 2.0 ** k


def _check_eta_min(eta_min):
    if not (isinstance(eta_min, (int, float)) and not isinstance(eta_min, bool) and 0 < eta_min < math.inf):
        raise LossfitValueError("eta_min", f"must be a positive number, got {eta_min!r}")
    return float(eta_min)


def three_body_plan(a, q, scale, *, shallow=1.0, deep=1.0, eta_min=ETA_MIN, cut=None):
    """Fixed-data plan of the exact thermal K3 average at points (a, T).

    Parameters
    ----------
    a : ndarray
        Scattering lengths in a0 (non-zero, validated), 1-D, either sign.
    q : ndarray
        k_T |a| with k_T = sqrt(m k_B T)/hbar, same shape.
    scale : ndarray
        Factor per point on the natural-unit average hbar^5/(m^3 (k_BT)^2) (e.g. the
        conversion to cm^6/s).
    shallow, deep : float
        Channel weights at a > 0 (a < 0 recombines into deep dimers only).
    eta_min : float
        Smallest eta the plan must resolve (default :data:`ETA_MIN`).
    cut : ndarray, optional
        Per point, average only over collision energies above ``cut`` k_BT (<= 0: all).

    Returns
    -------
    ThermalPlan
    """
    eta_min = _check_eta_min(eta_min)
    groups = []
    neg = a < 0
    cuts = _cuts(cut, a.size)
    for family, sel in ((NEGATIVE_A, neg), (POSITIVE_A, ~neg)):
        if sel.any():
            index = None if sel.all() else np.flatnonzero(sel)
            groups.append(_PlanGroup(family, 0, a[sel], np.abs(q[sel]), scale[sel], (shallow, deep), eta_min, index,
                                     cuts[sel]))
    return ThermalPlan(a.size, groups, eta_min)


def atom_dimer_plan(a, q, scale, *, relaxation=1.0, breakup=0.0, eta_min=ETA_MIN):
    """Fixed-data plan of the exact thermal beta average (a > 0); ``q`` and ``scale`` as
    for :func:`three_body_plan` (scale on hbar/(m k_T)), with the channel weights
    ``relaxation`` and ``breakup``."""
    eta_min = _check_eta_min(eta_min)
    p0 = (2.0 / math.sqrt(3.0)) * np.abs(q)          # k_AD a at E = k_BT
    groups = [_PlanGroup(ATOM_DIMER_A, part, a, p0, scale, (relaxation, breakup), eta_min, None, np.zeros(a.size))
              for part, on in ((0, relaxation), (1, breakup)) if on]
    return ThermalPlan(a.size, groups, eta_min)

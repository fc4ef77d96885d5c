"""Rate equations for atom (and atom-dimer) loss from a thermal cloud in a harmonic trap.

Atoms only (Weber, Herbig, Mark, Naegerl & Grimm, PRL 91, 123201 (2003)):

    dN/dt = -Gamma N - L3 <n^2> N,
    dT/dt = (L3 <n^2> / 3) (T + T_h),          <n^2> = c N^2 / T^3  (lossfit.experiment.trap).

Why T/3 ("anti-evaporation"): in a 3D harmonic trap each atom carries on average
3 k_B T (3/2 kinetic + 3/2 potential). Loss at rate proportional to n^3 picks atoms
from the dense centre: their kinetic energy is still 3/2 k_B T (velocity and position
are independent in a Boltzmann gas) but their potential energy is the average of U
over the weight exp(-3U/k_B T), i.e. k_B T / 2. Each lost atom thus removes 2 k_B T
instead of 3 k_B T; the excess k_B T per lost atom is shared by the 3 N k_B heat
capacity of the remaining cloud, giving dT/dt = (T/3) L3 <n^2>. The recombination
heating term adds k_B T_h per lost atom (Weber et al. 2003).

Atom-dimer mixtures (dimers of mass 2m, same temperature as the atoms, i.e. the two
components are assumed to stay thermalised):

    dN_D/dt = -Gamma_D N_D - beta N_D <n_A>_D,     <n_A>_D = (1/N_D) int n_A n_D d^3r,
    dN_A/dt = -Gamma N_A - L3 <n^2> N_A - beta N_D <n_A>_D,

one atom and one dimer leaving per relaxation event (the products are far too
energetic to stay trapped). The same energy balance applied to the weight n_A n_D
shows that each relaxation event removes 3 k_B T kinetic plus 3/2 k_B T potential
energy for *any* atom and dimer trap frequencies, instead of the 6 k_B T the two
particles carry on average, so it heats by (3/2) k_B T per event, spread over the
heat capacity 3 (N_A + N_D) k_B. Three-body heating is spread over the same capacity.
No recombination heating is assigned to relaxation events.

Explicit trapped-dimer kinetics (a > 0, ``dimers="explicit"``)
--------------------------------------------------------------
Three-body recombination into the shallow Feshbach dimer does not always remove the
three atoms: a product whose share of E_b + E stays below its trap depth stays, and a
trapped dimer is later broken up by an atom or relaxes with it into a deep dimer
(:mod:`lossfit.dimer_kinetics`, docs/conventions.md). With I = int n^3 d^3r = N <n^2>,
J = int n_A n_D d^3r = N_D <n_A>_D and the coefficients of
:func:`lossfit.rates.dimer_kinetics_rates` (deep, sh, sh_a, sh_D in cm^6/s, atoms
lost; relaxation beta_r and breakup beta_b in cm^3/s, dimers lost), the free atoms N,
trapped dimers N_D and atoms lost from the trap L obey

    dN/dt   = -Gamma N - deep I - sh I + (sh - sh_a)/3 I + 2 beta_b J - beta_r J,
    dN_D/dt = -Gamma_D N_D + (sh - sh_D)/3 I - (beta_b + beta_r) J,
    dL/dt   = Gamma N + 2 Gamma_D N_D + deep I + sh_a/3 I + 2 sh_D/3 I + 3 beta_r J,

so that N + 2 N_D + L is conserved. Setting dN_D/dt = 0 (dimers following the atoms
quasi-statically) gives d(N + 2 N_D)/dt = -L3_observed I, the observed L3 of
:func:`lossfit.rates.l3`. An image counts N + 2 N_D when it sees the atoms bound in
weakly bound dimers (``counts_dimers=True``, the default: near resonance a shallow
dimer is imaged like its two atoms), N otherwise. Derivation, checks and where the
quasi-static picture fails: docs/global-fit.md, "The dimer population in the forward
model".

Energy assumption of the explicit kinetics. Atoms and trapped dimers share T and the
heat capacity 3 (N + N_D) k_B. The chemistry is local and exchanges no binding energy
with the cloud: a trapped product keeps the thermal (kinetic plus potential) energy of
the atoms it was made of, a breakup returns the pair's thermal energy to three atoms,
and the energy E_b released at formation (absorbed at breakup) is not counted. (The
two cancel in chemical equilibrium; in a real gas the release energy of trapped
products heats the cloud, which the phenomenological T_h may absorb.) Atoms that
leave the trap in a three-body event each take 2 k_B T (the anti-evaporation above)
and deposit k_B T_h, as for atoms only. Per event the cloud then gains, in units of
k_B spread over 3 (N + N_D):

* deep recombination, or shallow formation with both products leaving: 3 T + 3 T_h;
* formation whose atom leaves and dimer stays: 4 T + T_h (the dimer keeps its parents'
  4 k_B T, the particle number drops by two);
* formation with both products trapped: 3 T (three particles become two);
* breakup: -3 T (two particles become three); relaxation: 3/2 T (as in a mixture);
* one-body loss of atoms or dimers: nothing.

The dimer one-body rate Gamma_D defaults to the atoms' Gamma (a background-gas
collision removes a weakly bound dimer as it does an atom).

Rates, integrators
------------------
L3 and beta may be constants, :class:`TabulatedRate` tables of temperature (evaluated
inside the integrator at the instantaneous T(t) -- the fast path for theory rates), or
Python callables of temperature in nK, which are tabulated on a fine logarithmic grid
before the integration (cubic spline of ln rate versus ln T). The explicit kinetics
takes its six coefficients from a :class:`TabulatedKinetics` table in T, evaluated at
the instantaneous T as well.

Two compiled integrators with adaptive steps share the right-hand sides: an embedded
Dormand-Prince 5(4) Runge-Kutta method (Dormand & Prince, J. Comput. Appl. Math. 6, 19
(1980)) with continuous extension, and a Rosenbrock 4(3) method (Kaps & Rentrop, Numer.
Math. 33, 55 (1979), with Shampine's parameters, ACM Trans. Math. Softw. 8, 93 (1982);
stability function 1/3 at infinity) with a finite-difference Jacobian, which lands on
every output time. The trapped dimers of the explicit kinetics live for
1/((beta_b + beta_r) <n_A>_D), often 10^2-10^5 times shorter than the loss time: a stiff
system on which an explicit method needs steps of the dimer lifetime.
``method="auto"`` therefore integrates the explicit kinetics with the Rosenbrock method
when the dimers' decay rate at t = 0 times the hold exceeds 200, and everything else with
Dormand-Prince (measured costs: docs/global-fit.md). For the explicit kinetics the step
control measures the dimer number's error against the atom number (the image counts
N + 2 N_D; a dimer population far below N needs no relative accuracy of its own).
"""

__all__ = ["DecaySolution", "TabulatedRate", "TabulatedKinetics", "KINETICS_FIELDS", "kinetics_columns",
           "tabulate_rate",
           "simulate_decay", "DecayBatch", "BatchResult", "PackedTables", "simulate_decay_batch", "DIMER_MODES",
           "METHODS"]

import math
import warnings
from dataclasses import dataclass
from typing import NamedTuple

import numba
import numpy as np
from scipy.interpolate import CubicSpline

from .. import rates
from .._bisect import interval_of
from ..dimer_kinetics import DEFAULT_DEPTH_OVER_T
from ..errors import LossfitValueError, ValidityWarning, check_finite, check_positive, check_table, check_times
from ..species import species as _lookup_species
from .trap import as_trap

# --- parameter vector layout of the kernels ------------------------------------------
_GAMMA, _GAMMA_D, _C3, _CAD, _L3, _BETA, _TH, _HEAT, _KIN, _METHOD = range(10)
_NPAR = 10
# state: free atoms, (trapped) dimers, temperature and, for the explicit kinetics, atoms
# lost; the step-size control watches the first three (L is fixed by the conservation of
# N + 2 N_D + L; the effective-rate equations get it from that conservation afterwards)
_DIM, _N_CONTROLLED = 4, 3
_DOPRI, _ROSENBROCK, _AUTO = 0.0, 1.0, 2.0
# "auto" integrates the explicit kinetics with Rosenbrock steps when the dimers' decay
# rate k_D at t = 0 times the hold exceeds this: Dormand-Prince then needs about
# k_D t_end / 5 steps (its stability limit), the Rosenbrock method ~20-60 steps of about
# 1.3 times the cost whatever k_D (measured: docs/global-fit.md)
_STIFF_SWITCH = 200.0

_OK, _MAX_STEPS, _OUT_OF_TABLE, _NOT_FINITE, _OUT_OF_BETA_TABLE = 0, 1, 2, 3, 4

#: The coefficients of the explicit dimer kinetics, in the order of
#: :class:`lossfit.rates.DimerKineticsRates`: deep, shallow, shallow_atom_escapes,
#: shallow_dimer_escapes (cm^6/s, atoms lost), relaxation, breakup (cm^3/s, dimers lost).
KINETICS_FIELDS = ("deep", "shallow", "shallow_atom_escapes", "shallow_dimer_escapes", "relaxation", "breakup")
# spline columns of a TabulatedKinetics: ln deep, ln shallow, the escape fractions
# sh_a/sh and sh_D/sh (linear, in [0, 1]), ln relaxation, ln breakup
_K_DEEP, _K_SHALLOW, _K_ATOM_OUT, _K_DIMER_OUT, _K_REL, _K_BREAK = range(6)
_N_KINETICS = 6

#: Values of ``dimers=`` in :func:`simulate_decay`.
DIMER_MODES = ("quasi-static", "explicit")
#: Values of ``method=``: the integrator.
METHODS = ("auto", "dopri5", "rosenbrock")

# Dormand-Prince 5(4) tableau.
_C2, _C3S, _C4, _C5 = 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0
_A21 = 1.0 / 5.0
_A31, _A32 = 3.0 / 40.0, 9.0 / 40.0
_A41, _A42, _A43 = 44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0
_A51, _A52, _A53, _A54 = 19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0
_A61, _A62, _A63, _A64, _A65 = (9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0,
                                49.0 / 176.0, -5103.0 / 18656.0)
_B1, _B3, _B4, _B5, _B6 = 35.0 / 384.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0
# stage rows (coefficient of f, then of k2..k5), a compile-time constant for numba
_A_ROWS = np.array([[_A21, 0.0, 0.0, 0.0, 0.0],
                    [_A31, _A32, 0.0, 0.0, 0.0],
                    [_A41, _A42, _A43, 0.0, 0.0],
                    [_A51, _A52, _A53, _A54, 0.0],
                    [_A61, _A62, _A63, _A64, _A65]])
# continuous extension (dense output) of the pair, coefficients of Hairer's DOPRI5
# (Hairer, Norsett & Wanner 1993, sec. II.6; checked in tests/experiment/test_decay.py against
# analytic solutions between steps)
_D1, _D3, _D4 = -12715105075.0 / 11282082432.0, 87487479700.0 / 32700410799.0, -10690763975.0 / 1880347072.0
_D5, _D6, _D7 = 701980252875.0 / 199316789632.0, -1453857185.0 / 822651844.0, 69997945.0 / 29380423.0
# error weights: b(5th order) - b(4th order)
_E1, _E3, _E4, _E5, _E6, _E7 = (71.0 / 57600.0, -71.0 / 16695.0, 71.0 / 1920.0,
                                -17253.0 / 339200.0, 22.0 / 525.0, -1.0 / 40.0)

# Rosenbrock 4(3): Shampine's parameters of the Kaps-Rentrop form
# (W = I/(gamma h) - J; W g_i = f(y + sum a_ij g_j) + sum c_ij g_j / h; autonomous system).
# Order 4 and 3 and R(infinity) = 1/3 are checked in tests/experiment/test_decay_kinetics.py.
_RG = 0.5
_RA21, _RA31, _RA32 = 2.0, 48.0 / 25.0, 6.0 / 25.0
_RC21, _RC31, _RC32 = -8.0, 372.0 / 25.0, 12.0 / 5.0
_RC41, _RC42, _RC43 = -112.0 / 125.0, -54.0 / 125.0, -2.0 / 5.0
_RB1, _RB2, _RB3, _RB4 = 19.0 / 9.0, 0.5, 25.0 / 108.0, 125.0 / 108.0
_RE1, _RE2, _RE3, _RE4 = 17.0 / 54.0, 7.0 / 36.0, 0.0, 125.0 / 108.0
# relative finite-difference step of the Jacobian (~ sqrt of the machine epsilon)
_FD_STEP = 1.5e-8


# --- kernels ------------------------------------------------------------------------

# The small kernels the right-hand sides call are inlined: a compiled call passing arrays
# pays their reference counting, which was half of a right-hand side (integration of a
# 15-point curve 14 -> 10 us, docs/global-fit.md; compiling takes no longer).
@numba.njit(cache=True, inline="always")
def _rate(temperature, const, knots, coefs):
    """Rate at ``temperature``: ``const`` if ``knots`` is empty, else exp(spline(ln T)).

    Returns -1 outside the table so that the integrator can stop and report.
    """
    n = knots.shape[0]
    if n == 0:
        return const
    x = math.log(temperature)
    if x < knots[0] or x > knots[n - 1]:
        return -1.0
    i = interval_of(knots, x)       # a handful of knots: cheaper than np.searchsorted here
    dx = x - knots[i]
    v = ((coefs[0, i] * dx + coefs[1, i]) * dx + coefs[2, i]) * dx + coefs[3, i]
    return math.exp(v)


@numba.njit(cache=True, inline="always")
def _column(coefs, col, dx):
    return ((coefs[0, col] * dx + coefs[1, col]) * dx + coefs[2, col]) * dx + coefs[3, col]


@numba.njit(cache=True, inline="always")
def _kinetics_at(temperature, knots, coefs):
    """The six kinetics coefficients at ``temperature`` from a TabulatedKinetics layout
    (column block r of ``coefs`` is coefficient r); ok False outside the table."""
    n = knots.shape[0]
    x = math.log(temperature)
    if n == 0 or x < knots[0] or x > knots[n - 1]:
        return False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
    i = interval_of(knots, x)
    dx = x - knots[i]
    seg = n - 1
    deep = math.exp(_column(coefs, _K_DEEP * seg + i, dx))
    shallow = math.exp(_column(coefs, _K_SHALLOW * seg + i, dx))
    atom_out = min(1.0, max(0.0, _column(coefs, _K_ATOM_OUT * seg + i, dx)))
    dimer_out = min(1.0, max(0.0, _column(coefs, _K_DIMER_OUT * seg + i, dx)))
    relaxation = math.exp(_column(coefs, _K_REL * seg + i, dx))
    breakup = math.exp(_column(coefs, _K_BREAK * seg + i, dx))
    return True, deep, shallow, atom_out * shallow, dimer_out * shallow, relaxation, breakup


@numba.njit(cache=True, inline="always")
def _rhs_atoms(y, p, l3k, l3c, bk, bc, out):
    """Atoms (and an atom-dimer mixture) with an effective L3 and beta."""
    n_a, n_d, temp = y[0], y[1], y[2]
    l3 = _rate(temp, p[_L3], l3k, l3c)
    beta = _rate(temp, p[_BETA], bk, bc)
    if l3 < 0.0:
        return _OUT_OF_TABLE
    if beta < 0.0:
        return _OUT_OF_BETA_TABLE
    r3 = l3 * p[_C3] * n_a * n_a * n_a / (temp * temp * temp)      # atoms lost per s
    r_ad = 0.0
    if n_d != 0.0:
        r_ad = beta * p[_CAD] * n_a * n_d / (temp * math.sqrt(temp))  # relaxation events per s
    out[0] = -p[_GAMMA] * n_a - r3 - r_ad
    out[1] = -p[_GAMMA_D] * n_d - r_ad
    if p[_HEAT] != 0.0 and n_a + n_d > 0.0:
        out[2] = (r3 * (temp + p[_TH]) + 1.5 * r_ad * temp) / (3.0 * (n_a + n_d))
    else:
        out[2] = 0.0
    return _OK


@numba.njit(cache=True)
def _rhs_kinetics(y, p, knots, coefs, out):
    """Free atoms, trapped shallow dimers, T and lost atoms (module docstring)."""
    n, n_d, temp = y[0], y[1], y[2]
    ok, deep, shallow, atom_out, dimer_out, relaxation, breakup = _kinetics_at(temp, knots, coefs)
    if not ok:
        return _OUT_OF_TABLE
    i3 = p[_C3] * n * n * n / (temp * temp * temp)                 # int n^3 d^3r, cm^-6
    j_ad = p[_CAD] * n * n_d / (temp * math.sqrt(temp))            # int n_A n_D d^3r, cm^-3
    ev_deep = deep * i3 / 3.0                                      # events per s
    ev_form = shallow * i3 / 3.0
    ev_atom_out = atom_out * i3 / 3.0
    ev_dimer_out = dimer_out * i3 / 3.0
    ev_break = breakup * j_ad
    ev_rel = relaxation * j_ad
    out[0] = (-p[_GAMMA] * n - 3.0 * ev_deep - 3.0 * ev_form + (ev_form - ev_atom_out)
              + 2.0 * ev_break - ev_rel)
    out[1] = -p[_GAMMA_D] * n_d + (ev_form - ev_dimer_out) - ev_break - ev_rel
    out[3] = (p[_GAMMA] * n + 2.0 * p[_GAMMA_D] * n_d + 3.0 * ev_deep + ev_atom_out + 2.0 * ev_dimer_out
              + 3.0 * ev_rel)
    if p[_HEAT] != 0.0 and n + n_d > 0.0:
        heat = (3.0 * temp * (ev_deep + ev_form) + temp * (ev_atom_out - ev_dimer_out)
                + p[_TH] * (3.0 * ev_deep + ev_atom_out + 2.0 * ev_dimer_out)
                - 3.0 * temp * ev_break + 1.5 * temp * ev_rel)
        out[2] = heat / (3.0 * (n + n_d))
    else:
        out[2] = 0.0
    return _OK


@numba.njit(cache=True)
def _rhs(y, p, l3k, l3c, bk, bc, out):
    if not (y[2] > 0.0):
        return _NOT_FINITE
    if p[_KIN] != 0.0:
        return _rhs_kinetics(y, p, l3k, l3c, out)
    return _rhs_atoms(y, p, l3k, l3c, bk, bc, out)


@numba.njit(cache=True)
def _error_norm(e, y, yn, rtol, atol, joint):
    """Largest error over tolerance. With ``joint`` the two numbers share one scale, the
    larger of them: the image of the explicit kinetics counts N + 2 N_D, so a dimer
    population far below N needs no relative accuracy of its own."""
    err = 0.0
    numbers = max(abs(y[0]), abs(yn[0]), abs(y[1]), abs(yn[1]))
    for i in range(_N_CONTROLLED):
        size = max(abs(y[i]), abs(yn[i]))
        if joint and i < 2:
            size = numbers
        r = abs(e[i]) / (atol[i] + rtol * size)
        if r > err:
            err = r
    return err


@numba.njit(cache=True)
def _dp_step(y, f, h, p, l3k, l3c, bk, bc, rtol, atol, ks, ys, yn, e):
    """One Dormand-Prince 5(4) trial step of size h from (y, f = rhs(y)).

    Writes the 5th-order solution to ``yn`` and rhs(yn) to ``ks[5]``; returns
    (status, scaled error norm).
    """
    dim = y.shape[0]
    for s in range(5):
        for i in range(dim):
            acc = _A_ROWS[s, 0] * f[i]
            for j in range(s):
                acc += _A_ROWS[s, j + 1] * ks[j, i]
            ys[i] = y[i] + h * acc
        status = _rhs(ys, p, l3k, l3c, bk, bc, ks[s])
        if status != _OK:
            return status, 0.0
    # ks[0..4] hold k2..k6
    for i in range(dim):
        yn[i] = y[i] + h * (_B1 * f[i] + _B3 * ks[1, i] + _B4 * ks[2, i] + _B5 * ks[3, i]
                            + _B6 * ks[4, i])
    status = _rhs(yn, p, l3k, l3c, bk, bc, ks[5])
    if status != _OK:
        return status, 0.0
    for i in range(dim):
        e[i] = h * (_E1 * f[i] + _E3 * ks[1, i] + _E4 * ks[2, i] + _E5 * ks[3, i] + _E6 * ks[4, i]
                    + _E7 * ks[5, i])
    err = _error_norm(e, y, yn, rtol, atol, p[_KIN] != 0.0)
    if not math.isfinite(err):
        return _NOT_FINITE, 0.0
    return _OK, err


@numba.njit(cache=True)
def _initial_step(y, f, floor, t_end):
    # from the fastest relative rate, each component measured against max(|y|, floor)
    fastest = 0.0
    for i in range(_N_CONTROLLED):
        r = abs(f[i]) / max(abs(y[i]), floor[i])
        if r > fastest:
            fastest = r
    return t_end if fastest == 0.0 else min(t_end, 0.01 / fastest)


@numba.njit(cache=True)
def _integrate_dopri(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, floor, max_steps, out):
    """Dormand-Prince integration from t = 0; the state at each ``t_out`` into ``out[k, :]``
    from the continuous extension. Returns a status code (0 ok)."""
    dim = y0.shape[0]
    y = y0.copy()
    f = np.empty(dim)
    ks = np.empty((6, dim))
    ys = np.empty(dim)
    yn = np.empty(dim)
    e = np.empty(dim)
    status = _rhs(y, p, l3k, l3c, bk, bc, f)
    if status != _OK:
        return status
    t_end = t_out[t_out.shape[0] - 1]
    h = _initial_step(y, f, floor, t_end)
    t = 0.0
    k = 0
    steps = 0
    while k < t_out.shape[0] and t_out[k] <= t:
        for i in range(dim):
            out[k, i] = y[i]
        k += 1
    while k < t_out.shape[0]:
        if steps >= max_steps:
            return _MAX_STEPS
        steps += 1
        last = h >= t_end - t
        if last:
            h = t_end - t
        status, err = _dp_step(y, f, h, p, l3k, l3c, bk, bc, rtol, atol, ks, ys, yn, e)
        if status == _NOT_FINITE and h > 1e-12 * t_end:
            # an over-long trial step drove T through zero: retry shorter
            h *= 0.25
            continue
        if status != _OK:
            return status
        if err <= 1.0:
            t_new = t_end if last else t + h
            # output times inside the step from the continuous extension (dense output)
            # of the Dormand-Prince pair (Hairer, Norsett & Wanner, Solving Ordinary
            # Differential Equations I, sec. II.6): free steps instead of one landing on
            # every output time
            while k < t_out.shape[0] and t_out[k] <= t_new:
                theta = (t_out[k] - t) / h
                for i in range(dim):
                    diff = yn[i] - y[i]
                    bspl = h * f[i] - diff
                    r4 = diff - h * ks[5, i] - bspl
                    r5 = h * (_D1 * f[i] + _D3 * ks[1, i] + _D4 * ks[2, i] + _D5 * ks[3, i] + _D6 * ks[4, i]
                              + _D7 * ks[5, i])
                    out[k, i] = y[i] + theta * (diff + (1.0 - theta) * (bspl + theta * (r4 + (1.0 - theta) * r5)))
                k += 1
            t = t_new
            for i in range(dim):
                y[i] = yn[i]
                f[i] = ks[5, i]      # first-same-as-last
            h *= 5.0 if err == 0.0 else min(5.0, max(0.2, 0.9 * err ** -0.2))
        else:
            h *= max(0.2, 0.9 * err ** -0.2)
    return _OK


@numba.njit(cache=True)
def _lu_factor(a, piv):
    """In-place LU factorisation with partial pivoting of a small dense matrix."""
    n = a.shape[0]
    for c in range(n):
        best = c
        for r in range(c + 1, n):
            if abs(a[r, c]) > abs(a[best, c]):
                best = r
        piv[c] = best
        if best != c:
            for j in range(n):
                a[c, j], a[best, j] = a[best, j], a[c, j]
        d = a[c, c]
        if d == 0.0:
            return False
        for r in range(c + 1, n):
            a[r, c] /= d
            m = a[r, c]
            for j in range(c + 1, n):
                a[r, j] -= m * a[c, j]
    return True


@numba.njit(cache=True)
def _lu_solve(a, piv, b):
    """Solve in place with the factors of :func:`_lu_factor`."""
    n = a.shape[0]
    for c in range(n):
        pc = piv[c]
        if pc != c:
            b[c], b[pc] = b[pc], b[c]
    for r in range(1, n):
        acc = b[r]
        for j in range(r):
            acc -= a[r, j] * b[j]
        b[r] = acc
    for r in range(n - 1, -1, -1):
        acc = b[r]
        for j in range(r + 1, n):
            acc -= a[r, j] * b[j]
        b[r] = acc / a[r, r]


@numba.njit(cache=True)
def _jacobian(y, f, p, l3k, l3c, bk, bc, floor, jac, yp, fp):
    """Forward differences (backward at a table edge); L enters no right-hand side."""
    dim = y.shape[0]
    for j in range(dim):
        for i in range(dim):
            jac[i, j] = 0.0
    for j in range(_N_CONTROLLED):
        for i in range(dim):
            yp[i] = y[i]
        d = _FD_STEP * max(abs(y[j]), floor[j])
        yp[j] = y[j] + d
        status = _rhs(yp, p, l3k, l3c, bk, bc, fp)
        if status != _OK:
            d = -d
            yp[j] = y[j] + d
            status = _rhs(yp, p, l3k, l3c, bk, bc, fp)
            if status != _OK:
                return status
        for i in range(dim):
            jac[i, j] = (fp[i] - f[i]) / d
    return _OK


@numba.njit(cache=True)
def _ros_step(y, f, jac, h, p, l3k, l3c, bk, bc, rtol, atol, w, piv, g, ys, fs, yn, fn, e):
    """One Rosenbrock 4(3) trial step of size h from (y, f = rhs(y)) with Jacobian ``jac``.

    Writes the 4th-order solution to ``yn`` and rhs(yn) to ``fn``; returns (status, error norm).
    """
    dim = y.shape[0]
    for i in range(dim):
        for j in range(dim):
            w[i, j] = -jac[i, j]
        w[i, i] += 1.0 / (_RG * h)
    if not _lu_factor(w, piv):
        return _NOT_FINITE, 0.0
    for i in range(dim):
        g[0, i] = f[i]
    _lu_solve(w, piv, g[0])
    for i in range(dim):
        ys[i] = y[i] + _RA21 * g[0, i]
    status = _rhs(ys, p, l3k, l3c, bk, bc, fs)
    if status != _OK:
        return status, 0.0
    for i in range(dim):
        g[1, i] = fs[i] + _RC21 * g[0, i] / h
    _lu_solve(w, piv, g[1])
    for i in range(dim):
        ys[i] = y[i] + _RA31 * g[0, i] + _RA32 * g[1, i]
    status = _rhs(ys, p, l3k, l3c, bk, bc, fs)
    if status != _OK:
        return status, 0.0
    for i in range(dim):
        g[2, i] = fs[i] + (_RC31 * g[0, i] + _RC32 * g[1, i]) / h
    _lu_solve(w, piv, g[2])
    for i in range(dim):
        g[3, i] = fs[i] + (_RC41 * g[0, i] + _RC42 * g[1, i] + _RC43 * g[2, i]) / h
    _lu_solve(w, piv, g[3])
    for i in range(dim):
        yn[i] = y[i] + _RB1 * g[0, i] + _RB2 * g[1, i] + _RB3 * g[2, i] + _RB4 * g[3, i]
        e[i] = _RE1 * g[0, i] + _RE2 * g[1, i] + _RE3 * g[2, i] + _RE4 * g[3, i]
    status = _rhs(yn, p, l3k, l3c, bk, bc, fn)
    if status != _OK:
        return status, 0.0
    err = _error_norm(e, y, yn, rtol, atol, p[_KIN] != 0.0)
    if not math.isfinite(err):
        return _NOT_FINITE, 0.0
    return _OK, err


@numba.njit(cache=True)
def _integrate_rosenbrock(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, floor, max_steps, out):
    """Rosenbrock integration from t = 0, landing on every ``t_out``; status code (0 ok)."""
    dim = y0.shape[0]
    y = y0.copy()
    f = np.empty(dim)
    jac = np.empty((dim, dim))
    w = np.empty((dim, dim))
    piv = np.empty(dim, dtype=np.int64)
    g = np.empty((4, dim))
    ys = np.empty(dim)
    fs = np.empty(dim)
    yn = np.empty(dim)
    fn = np.empty(dim)
    e = np.empty(dim)
    status = _rhs(y, p, l3k, l3c, bk, bc, f)
    if status != _OK:
        return status
    t_end = t_out[t_out.shape[0] - 1]
    h = _initial_step(y, f, floor, t_end)
    t = 0.0
    k = 0
    steps = 0
    while k < t_out.shape[0] and t_out[k] <= t:
        for i in range(dim):
            out[k, i] = y[i]
        k += 1
    fresh = False
    while k < t_out.shape[0]:
        if steps >= max_steps:
            return _MAX_STEPS
        steps += 1
        if not fresh:
            status = _jacobian(y, f, p, l3k, l3c, bk, bc, floor, jac, ys, fs)
            if status != _OK:
                return status
            fresh = True
        land = t + h >= t_out[k]
        hh = t_out[k] - t if land else h
        status, err = _ros_step(y, f, jac, hh, p, l3k, l3c, bk, bc, rtol, atol, w, piv, g, ys, fs, yn, fn, e)
        if status == _NOT_FINITE and hh > 1e-12 * t_end:
            h = 0.25 * hh
            continue
        if status != _OK:
            return status
        factor = 5.0 if err == 0.0 else min(5.0, max(0.2, 0.9 * err ** -0.25))
        if err <= 1.0:
            t = t_out[k] if land else t + hh
            for i in range(dim):
                y[i] = yn[i]
                f[i] = fn[i]
            fresh = False
            if land:
                for i in range(dim):
                    out[k, i] = y[i]
                k += 1
                # a step shortened to land keeps the proposal it was cut from
                h = max(h, hh * factor)
            else:
                h = hh * factor
        else:
            h = hh * min(factor, 1.0)
    return _OK


@numba.njit(cache=True)
def _integrate(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, max_steps, out, stiff_solver):
    """Integrate from t = 0 with the method in ``p`` and write the state at each
    ``t_out`` into ``out[k, :]``. Returns a status code (0 ok). ``t_out`` is increasing
    and non-negative. ``stiff_solver`` None: Dormand-Prince only (:func:`_stiff_solver`)."""
    floor = np.empty(y0.shape[0])
    scale = max(y0[0], y0[1], 1.0)
    floor[0] = 1e-3 * scale
    floor[1] = 1e-3 * scale
    floor[2] = 1e-3 * y0[2]
    floor[3] = 1e-3 * scale
    if stiff_solver is not None:
        # numba prunes this branch when stiff_solver is None: no Rosenbrock code compiled
        if p[_METHOD] == _ROSENBROCK or (p[_METHOD] == _AUTO and _stiff(t_out, y0, p, l3k, l3c)):
            return _integrate_rosenbrock(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, floor, max_steps, out)
    return _integrate_dopri(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, floor, max_steps, out)


@numba.njit(cache=True)
def _stiff(t_out, y0, p, l3k, l3c):
    """True for the explicit kinetics when the dimers decay much faster than the hold."""
    if p[_KIN] == 0.0 or not (y0[2] > 0.0):
        return False
    ok, _, _, _, _, relaxation, breakup = _kinetics_at(y0[2], l3k, l3c)
    if not ok:
        return False          # the integrator reports the table range
    k_d = p[_GAMMA_D] + (relaxation + breakup) * p[_CAD] * y0[0] / (y0[2] * math.sqrt(y0[2]))
    return k_d * t_out[t_out.shape[0] - 1] > _STIFF_SWITCH


@numba.njit(cache=True)
def _integrate_batch(t_all, t_off, y0s, ps, l3k, l3c, l3_koff, l3_coff, bk, bc, b_koff, b_coff,
                     rtol, atol_rel, max_steps, out, status, stiff_solver):
    """Integrate many curves.

    Curve j uses times t_all[t_off[j]:t_off[j+1]], L3 (or kinetics) knots
    l3k[l3_koff[j]:l3_koff[j+1]] and coefficient columns l3c[:, l3_coff[j]:l3_coff[j+1]]
    (empty slices: the constant in ps[j]), and likewise for beta; ``stiff_solver`` as
    :func:`_stiff_solver` gives it for ``ps``.
    """
    atol = np.empty(_DIM)
    for j in range(y0s.shape[0]):
        dim = _DIM if ps[j, _KIN] != 0.0 else _DIM - 1
        y0 = y0s[j, :dim]
        atol[0] = atol_rel * max(y0[0], y0[1], 1.0)
        atol[1] = atol[0]
        atol[2] = atol_rel * y0[2]
        atol[3] = atol[0]
        status[j] = _integrate(t_all[t_off[j]:t_off[j + 1]], y0, ps[j],
                               l3k[l3_koff[j]:l3_koff[j + 1]], l3c[:, l3_coff[j]:l3_coff[j + 1]],
                               bk[b_koff[j]:b_koff[j + 1]], bc[:, b_coff[j]:b_coff[j + 1]],
                               rtol, atol, max_steps, out[t_off[j]:t_off[j + 1], :dim], stiff_solver)


def _stiff_solver(ps):
    """The last argument of :func:`_integrate_batch` for curve parameters ``ps`` (m, _NPAR):
    True if a curve may need the Rosenbrock solver (explicit kinetics, or that method
    asked for), else None. numba compiles one integrator per argument type, so batches
    without such curves never compile the stiff solver (about half of the integrator's
    compile on a fresh cache, docs/architecture.md)."""
    may_be_stiff = (ps[:, _KIN] != 0.0) | (ps[:, _METHOD] == _ROSENBROCK)
    return True if may_be_stiff.any() else None


# --- rates as functions of temperature ---------------------------------------------------

class _SplineTable:
    """Cubic splines in ln T on one set of knots (column block r of ``_coefs`` is spline r)."""

    @property
    def t_min_nK(self):
        """Lowest tabulated temperature in nK."""
        return float(self.temperature_nK[0])

    @property
    def t_max_nK(self):
        """Highest tabulated temperature in nK."""
        return float(self.temperature_nK[-1])

    def _check_range(self, temperature_nK):
        t = check_positive("temperature_nK", temperature_nK)
        if np.any(t < self.t_min_nK) or np.any(t > self.t_max_nK):
            raise LossfitValueError("temperature_nK", f"outside the table range "
                                    f"[{self.t_min_nK:g}, {self.t_max_nK:g}] nK")
        return t

    def _columns_at(self, t):
        """Every spline's value at ``t`` (one row per spline)."""
        x = np.log(t)
        seg = self._knots.size - 1
        i = np.clip(np.searchsorted(self._knots, x) - 1, 0, seg - 1)
        dx = x - self._knots[i]
        c = self._coefs
        return np.array([((c[0, i + r * seg] * dx + c[1, i + r * seg]) * dx + c[2, i + r * seg]) * dx
                         + c[3, i + r * seg] for r in range(c.shape[1] // seg)])

    def __repr__(self):
        return (f"{type(self).__name__}({self.temperature_nK.size} points, "
                f"{self.t_min_nK:g}-{self.t_max_nK:g} nK)")


class TabulatedRate(_SplineTable):
    """A positive rate coefficient tabulated against temperature.

    Interpolated by a cubic spline of ln(rate) versus ln(T) (not-a-knot end conditions);
    evaluation outside the table raises (no extrapolation).

    Parameters
    ----------
    temperature_nK : array, shape (n,), n >= 4
        Strictly increasing temperatures in nK.
    values : array, shape (n,)
        Positive rate coefficients (cm^6/s for L3, cm^3/s for beta).
    """

    def __init__(self, temperature_nK, values):
        t, v = check_table("temperature_nK", check_positive("temperature_nK", temperature_nK),
                           "values", check_positive("values", values), 4)
        self.temperature_nK = t
        self.values = v
        spline = CubicSpline(np.log(t), np.log(v))
        self._knots = np.ascontiguousarray(spline.x, dtype=float)
        self._coefs = np.ascontiguousarray(spline.c, dtype=float)

    def __call__(self, temperature_nK):
        """Interpolated rate at ``temperature_nK`` (nK), same units as ``values``."""
        return np.exp(self._columns_at(self._check_range(temperature_nK))[0])


def _field_getter(rates):
    return rates.get if isinstance(rates, dict) else (lambda name: getattr(rates, name, None))


def kinetics_columns(values):
    """What :class:`TabulatedKinetics` splines in ln T, from the six coefficients.

    Parameters
    ----------
    values : array_like, shape (6, ...)
        deep, shallow, shallow_atom_escapes, shallow_dimer_escapes (cm^6/s), relaxation,
        breakup (cm^3/s), in the order of :data:`KINETICS_FIELDS`.

    Returns
    -------
    ndarray, shape of ``values``
        ln deep, ln shallow, shallow_atom_escapes / shallow, shallow_dimer_escapes /
        shallow (in [0, 1]; 0 where shallow is 0), ln relaxation, ln breakup (coefficients
        below 1e-300 taken as 1e-300).
    """
    v = np.asarray(values, dtype=float)
    if v.shape[:1] != (_N_KINETICS,):
        raise LossfitValueError("values", f"needs the {_N_KINETICS} coefficients {KINETICS_FIELDS}, "
                                f"got shape {v.shape}")
    out = np.log(np.maximum(v, 1e-300))        # the escape rows are overwritten below
    shallow = v[_K_SHALLOW]
    safe = np.where(shallow > 0, shallow, np.inf)          # no shallow channel: fractions 0
    np.clip(v[_K_ATOM_OUT:_K_DIMER_OUT + 1] / safe, 0.0, 1.0, out=out[_K_ATOM_OUT:_K_DIMER_OUT + 1])
    return out


class TabulatedKinetics(_SplineTable):
    """The six coefficients of the explicit dimer kinetics tabulated against temperature.

    Cubic splines in ln T (not-a-knot) of ln deep, ln shallow, ln relaxation, ln breakup
    and of the escape fractions shallow_atom_escapes / shallow and
    shallow_dimer_escapes / shallow (clipped to [0, 1]); coefficients below 1e-300 count
    as 1e-300. Evaluation outside the table raises.

    Parameters
    ----------
    temperature_nK : array, shape (n,), n >= 4
        Strictly increasing temperatures in nK.
    rates : DimerKineticsRates or mapping
        Arrays of shape (n,) (or scalars) named as :data:`KINETICS_FIELDS` (further
        entries, such as ``saha`` and ``observed`` of
        :func:`lossfit.rates.dimer_kinetics_rates`, are ignored): deep, shallow,
        shallow_atom_escapes, shallow_dimer_escapes in cm^6/s (atoms lost, >= 0, the
        escape parts at most ``shallow``), relaxation and breakup in cm^3/s (dimers
        lost, >= 0).
    """

    def __init__(self, temperature_nK, rates):
        t = np.asarray(check_positive("temperature_nK", temperature_nK), dtype=float)
        get = _field_getter(rates)
        values = []
        for name in KINETICS_FIELDS:
            v = get(name)
            if v is None:
                raise LossfitValueError("rates", f"needs {name!r} (all of {', '.join(KINETICS_FIELDS)})")
            try:
                v = np.broadcast_to(np.asarray(check_finite(f"rates.{name}", v), dtype=float), t.shape)
            except ValueError:
                raise LossfitValueError(f"rates.{name}", f"needs one value per temperature ({t.size})") from None
            values.append(v)
        shallow = values[_K_SHALLOW]
        for name, v in zip(KINETICS_FIELDS, values):
            escape = name.startswith("shallow_")
            # the escape parts are quadratures of the shallow channel: allow their rounding
            slack = 1e-9 * shallow if escape else 0.0
            if np.any(v < -slack) or (escape and np.any(v > shallow + slack)):
                raise LossfitValueError(f"rates.{name}", "must be >= 0" + (" and at most shallow" if escape else ""))
        t, _ = check_table("temperature_nK", t, "rates", shallow, 4)
        self.temperature_nK = t
        self.values = {name: np.clip(v, 0.0, None) for name, v in zip(KINETICS_FIELDS, values)}
        self._knots = np.ascontiguousarray(np.log(t))
        self._coefs = np.ascontiguousarray(np.concatenate(
            [CubicSpline(self._knots, col).c for col in kinetics_columns(values)], axis=1))

    @classmethod
    def constant(cls, rates, t_min_nK=1e-3, t_max_nK=1e7):
        """Coefficients independent of temperature.

        Parameters
        ----------
        rates : DimerKineticsRates or mapping
            Scalars named as :data:`KINETICS_FIELDS` (units as for the class).
        t_min_nK, t_max_nK : float
            Temperature range of the table in nK.

        Returns
        -------
        TabulatedKinetics
        """
        lo = float(check_positive("t_min_nK", t_min_nK))
        hi = float(check_positive("t_max_nK", t_max_nK))
        if not hi > lo:
            raise LossfitValueError("t_max_nK", f"must exceed t_min_nK = {lo:g}, got {hi:g}")
        return cls(np.geomspace(lo, hi, 4), rates)

    def __call__(self, temperature_nK):
        """Interpolated coefficients at ``temperature_nK`` (nK): dict named as
        :data:`KINETICS_FIELDS`, in cm^6/s and cm^3/s."""
        cols = self._columns_at(self._check_range(temperature_nK))
        shallow = np.exp(cols[_K_SHALLOW])
        return {"deep": np.exp(cols[_K_DEEP]), "shallow": shallow,
                "shallow_atom_escapes": np.clip(cols[_K_ATOM_OUT], 0.0, 1.0) * shallow,
                "shallow_dimer_escapes": np.clip(cols[_K_DIMER_OUT], 0.0, 1.0) * shallow,
                "relaxation": np.exp(cols[_K_REL]), "breakup": np.exp(cols[_K_BREAK])}


# Knot spacing in ln T for tabulating callables: the spline error scales as h^4
# (~1e-9 relative for smooth rates), far below any experimental error.
_LN_T_STEP = 0.02


def _evaluate_callable(name, func, temps):
    try:
        values = np.asarray(func(temps), dtype=float)
        if values.shape != temps.shape:
            raise ValueError
    except (TypeError, ValueError):
        values = np.array([float(func(float(x))) for x in temps])
    bad = ~(np.isfinite(values) & (values > 0))
    if bad.any():
        raise LossfitValueError(name, f"callable returned a non-positive or non-finite rate "
                                f"{values[bad][0]!r} at T = {temps[bad][0]:g} nK")
    return values


def _log_grid(lo, hi, ln_step):
    n = max(8, int(math.ceil(math.log(hi / lo) / ln_step)) + 1)
    return np.geomspace(lo, hi, n)


def tabulate_rate(func, t_min_nK, t_max_nK, *, ln_step=_LN_T_STEP, name="func"):
    """Tabulate a rate callable of temperature for the fast integrator.

    Parameters
    ----------
    func : callable
        ``func(temperature_nK)`` returning a positive rate (arrays accepted if it can).
    t_min_nK, t_max_nK : float
        Temperature range in nK, ``t_min_nK < t_max_nK``.
    ln_step : float
        Knot spacing in ln T.

    Returns
    -------
    TabulatedRate
    """
    lo = float(check_positive("t_min_nK", t_min_nK))
    hi = float(check_positive("t_max_nK", t_max_nK))
    if not hi > lo:
        raise LossfitValueError("t_max_nK", f"must exceed t_min_nK = {lo:g}, got {hi:g}")
    temps = _log_grid(lo, hi, ln_step)
    return TabulatedRate(temps, _evaluate_callable(name, func, temps))


def _tabulate_kinetics(func, lo, hi):
    """TabulatedKinetics of a callable T (nK, array) -> coefficients over [lo, hi] nK (one
    evaluation spread over a flat table when lo == hi: constant temperature)."""
    if hi <= lo:
        rates_at = func(np.array([lo]))
        return TabulatedKinetics.constant({n: float(np.ravel(getattr(rates_at, n))[0]) for n in KINETICS_FIELDS},
                                          0.5 * lo, 2.0 * lo)
    temps = _log_grid(lo, hi, _LN_T_STEP)
    return TabulatedKinetics(temps, func(temps))


# --- public layer ----------------------------------------------------------------------

@dataclass(frozen=True)
class DecaySolution:
    """Solution of the rate equations at the requested times.

    Attributes
    ----------
    t : ndarray
        Times in s.
    atoms : ndarray
        Free atom number N(t).
    temperature : ndarray
        Temperature T(t) in nK.
    dimers : ndarray or None
        Dimer number N_D(t) for atom-dimer mixtures and the explicit dimer kinetics, else None.
    mean_n2 : ndarray
        <n^2>(t) of the free atoms in cm^-6.
    lost : ndarray or None
        Atoms lost from the trap since t = 0 (two per dimer), so that
        atoms + 2 dimers + lost is constant.
    counted : ndarray or None
        The atom number an image reports: atoms + 2 dimers for the explicit kinetics with
        ``counts_dimers=True``, else ``atoms``.
    """

    t: np.ndarray
    atoms: np.ndarray
    temperature: np.ndarray
    dimers: np.ndarray | None
    mean_n2: np.ndarray
    lost: np.ndarray | None = None
    counted: np.ndarray | None = None


def _scalar(name, value, *, allow_zero=True):
    if isinstance(value, (float, int, np.floating, np.integer)) and not isinstance(value, bool):
        x = float(value)
        if math.isfinite(x) and (x > 0.0 or (allow_zero and x == 0.0)):
            return x          # fast path; anything else gets the full message below
    arr = check_positive(name, value, allow_zero=allow_zero)
    if arr.ndim != 0:
        raise LossfitValueError(name, f"must be a scalar, got shape {arr.shape}")
    return float(arr)


def _flag(name, value):
    if not isinstance(value, (bool, np.bool_)):
        raise LossfitValueError(name, f"must be True or False, got {value!r}")
    return bool(value)


def _choice(name, value, allowed):
    if value not in allowed:
        raise LossfitValueError(name, f"must be one of {', '.join(map(repr, allowed))}, got {value!r}")
    return value


_EMPTY_KNOTS = np.empty(0)
_EMPTY_COEFS = np.empty((4, 0))


class _RateSpec:
    """A rate prepared for the kernels: a constant, a fixed table, or a callable to tabulate
    (``kinetics``: the six coefficients of the explicit kinetics, always a table)."""

    def __init__(self, name, value, kinetics=False):
        self.name = name
        self.kinetics = kinetics
        self.const = 0.0
        self.table = None
        self.func = None
        if isinstance(value, (TabulatedKinetics if kinetics else TabulatedRate)):
            self.table = value
        elif isinstance(value, _SplineTable):
            wanted = "TabulatedKinetics" if kinetics else "TabulatedRate (a TabulatedKinetics needs dimers='explicit')"
            raise LossfitValueError(name, f"must be a {wanted}, got {value!r}")
        elif callable(value):
            self.func = value
        else:
            self.const = _scalar(name, value)

    def kernel_args(self, t_lo, t_hi):
        """(const, knots, coefs) covering [t_lo, t_hi] nK (callables get tabulated)."""
        if self.table is not None:
            return 0.0, self.table._knots, self.table._coefs
        if self.func is None:
            return self.const, _EMPTY_KNOTS, _EMPTY_COEFS
        if self.kinetics:
            table = _tabulate_kinetics(self.func, t_lo, t_hi)
            return 0.0, table._knots, table._coefs
        if t_hi <= t_lo:     # constant temperature: one evaluation suffices
            value = _evaluate_callable(self.name, self.func, np.array([t_lo]))[0]
            return float(value), _EMPTY_KNOTS, _EMPTY_COEFS
        table = tabulate_rate(self.func, t_lo, t_hi, name=self.name)
        return 0.0, table._knots, table._coefs


def _theory_rate(kind, efimov, a, species, model, trap_depth=None):
    """Rate callable of T (nK) from the zero-range theory (``kind``: a function of
    :mod:`lossfit.rates`; ``trap_depth`` in nK is passed on when given)."""
    kwargs = {} if model is None else {"model": model}
    if trap_depth is not None:
        kwargs["trap_depth"] = trap_depth
    func = getattr(rates, kind)
    return lambda temperature_nK: func(a, temperature_nK, species=species, efimov=efimov, **kwargs)


def _resolve_rate(name, value, efimov, a, kind, species, model, required, trap_depth=None):
    if value is not None and efimov is not None:
        raise LossfitValueError(name, f"give either {name}= or efimov= (with a=), not both")
    if value is not None:
        return _RateSpec(name, value, kinetics=kind == "dimer_kinetics_rates")
    if efimov is not None:
        if a is None:
            raise LossfitValueError("a", f"efimov= needs the scattering length a (in a0) to compute {name}")
        return _RateSpec(name, _theory_rate(kind, efimov, a, species, model, trap_depth),
                         kinetics=kind == "dimer_kinetics_rates")
    if required:
        raise LossfitValueError(name, f"give {name}= (constant, TabulatedRate or callable of T in nK) "
                                "or efimov= and a=")
    return _RateSpec(name, 0.0)


_STATUS_TEXT = {_MAX_STEPS: "too many integration steps (is a rate absurdly large?)",
                _NOT_FINITE: "the solution became non-finite or the temperature non-positive"}

_MAX_TABLE_EXTENSIONS = 12       # 1.5 * 2^11: three decades of heating
# Bose enhancement of the density becomes noticeable well before n lambda^3 reaches the
# condensation point 1.202 (common practice, no source): warn above this value.
_PSD_WARN = 0.5


def _method_code(method):
    return {"auto": _AUTO, "dopri5": _DOPRI, "rosenbrock": _ROSENBROCK}[method]


def simulate_decay(t, *, species, trap_hz, n0, t0_nK, l3=None, efimov=None, a=None, gamma=0.0,
                   heating=True, recombination_heating_nK=0.0, model=None, n_dimers0=0.0,
                   beta=None, gamma_dimer=None, rtol=1e-8, dimers=None, trap_depth=None,
                   counts_dimers=True, method="auto"):
    """Integrate the loss and heating rate equations of a thermal cloud.

    Parameters
    ----------
    t : array, shape (n,)
        Strictly increasing hold times in s, >= 0; the initial state is at t = 0.
    species : str or Species
    trap_hz : HarmonicTrap or sequence of 3 floats
        Atomic trap frequencies in Hz (a trap also carries the dimer frequencies).
    n0 : float
        Initial (free) atom number (>= 0).
    t0_nK : float
        Initial temperature in nK (> 0).
    l3 : float, TabulatedRate, callable or TabulatedKinetics, optional
        Three-body loss coefficient in cm^6/s (atoms lost, thermal gas, docs/conventions.md): a
        constant, a table in T, or ``l3(temperature_nK)``; or, for the explicit dimer
        kinetics, a :class:`TabulatedKinetics` of its six coefficients. Exclusive with
        ``efimov``.
    efimov : Efimov, optional
        Efimov parameters; with ``a`` the rates come from ``lossfit.rates`` at the
        instantaneous temperature (``l3``, ``beta``, or ``dimer_kinetics_rates`` for the
        explicit kinetics).
    a : float, optional
        Scattering length in a0 (needed with ``efimov``; must be > 0 with dimers).
    gamma : float
        One-body loss rate of the atoms in 1/s.
    heating : bool
        Include anti-evaporation and recombination heating; if False, T stays t0_nK.
    recombination_heating_nK : float
        T_h in nK (>= 0): recombination heating per atom lost (Weber et al. 2003).
    model : str, optional
        Theory model passed to ``lossfit.rates`` (``"threshold"``, ``"capped"``, ...; the
        explicit kinetics needs ``"zero-range"``, the default).
    n_dimers0 : float
        Initial dimer number: of an atom-dimer mixture (quasi-static; > 0 makes the
        mixture) or of trapped shallow dimers (explicit kinetics; default none).
    beta : float, TabulatedRate or callable, optional
        Atom-dimer relaxation coefficient in cm^3/s (dimers lost) of a mixture; with
        ``efimov`` and ``a`` it comes from the theory. Not used by the explicit kinetics.
    gamma_dimer : float, optional
        One-body loss rate of the dimers in 1/s; None: 0 for a mixture, ``gamma`` for the
        explicit kinetics.
    rtol : float
        Relative tolerance of the adaptive integrator.
    dimers : {None, "quasi-static", "explicit"}
        ``"quasi-static"``: the atoms lose at the effective L3 (the observed L3 of
        ``lossfit.rates.l3`` with ``efimov``), shallow dimers are not followed.
        ``"explicit"``: free atoms, trapped shallow dimers and lost atoms from the explicit
        kinetics (module docstring; a > 0). None: ``"explicit"`` if ``l3`` is a
        TabulatedKinetics, else ``"quasi-static"``.
    trap_depth : float, optional
        Atom trap depth U/k_B in nK (fixed during the hold), for rates computed from
        ``efimov``. None: 10 k_B T0 for the explicit kinetics (common practice after
        evaporation, no source); ``lossfit.rates.l3``'s default (10 k_B T at each T) for
        the quasi-static L3.
    counts_dimers : bool
        Explicit kinetics: the imaging counts the atoms bound in shallow dimers (the
        default: weakly bound dimers near resonance image like their atoms), so
        ``counted`` is N + 2 N_D; False: ``counted`` is N.
    method : {"auto", "dopri5", "rosenbrock"}
        Integrator (module docstring); ``"auto"``: Rosenbrock for the explicit kinetics
        when it is stiff (dimer decay rate x hold > 200 at t = 0), Dormand-Prince otherwise.

    Returns
    -------
    DecaySolution
    """
    times = check_times("t", t)
    sp = _lookup_species(species)
    trap = as_trap(trap_hz)
    n_a = _scalar("n0", n0)
    n_d = _scalar("n_dimers0", n_dimers0)
    temp0 = _scalar("t0_nK", t0_nK, allow_zero=False)
    t_h = _scalar("recombination_heating_nK", recombination_heating_nK)
    tol = _scalar("rtol", rtol, allow_zero=False)
    if not tol < 1e-2:
        raise LossfitValueError("rtol", f"must be < 1e-2, got {tol!r}")
    if dimers is None:
        dimers = "explicit" if isinstance(l3, TabulatedKinetics) else "quasi-static"
    explicit = _choice("dimers", dimers, DIMER_MODES) == "explicit"
    counts = _flag("counts_dimers", counts_dimers)
    _choice("method", method, METHODS)
    depth = None if trap_depth is None else _scalar("trap_depth", trap_depth, allow_zero=False)
    if a is not None:
        a = float(check_finite("a", a))
    mixture = n_d > 0.0 and not explicit
    if (mixture or explicit) and a is not None and a <= 0:
        raise LossfitValueError("a", f"Feshbach dimers (and beta) exist only for a > 0, got a = {a!r} a0")
    if depth is not None and efimov is None:
        raise LossfitValueError("trap_depth", "applies to rates computed from efimov= (the observed L3 or the "
                                "explicit kinetics); a given rate or table already contains the depth")
    psd = float(trap.phase_space_density(n_a, temp0, sp))
    if psd > _PSD_WARN:
        warnings.warn(f"peak phase-space density {psd:.2g} at t = 0: the Boltzmann densities of "
                      "lossfit.experiment.trap (and the thermal L3) are unreliable close to degeneracy",
                      ValidityWarning, stacklevel=2)
    if explicit:
        if beta is not None:
            raise LossfitValueError("beta", "the explicit kinetics takes relaxation and breakup from its "
                                    "coefficients (efimov= or a TabulatedKinetics as l3=), not beta=")
        l3_spec = _resolve_rate("l3", l3, efimov, a, "dimer_kinetics_rates", sp, model, required=True,
                                trap_depth=(DEFAULT_DEPTH_OVER_T * temp0 if depth is None else depth))
        if not l3_spec.kinetics or (l3_spec.table is None and l3_spec.func is None):
            raise LossfitValueError("l3", "dimers='explicit' needs a TabulatedKinetics or efimov= and a=")
        beta_spec = _RateSpec("beta", 0.0)
    else:
        l3_spec = _resolve_rate("l3", l3, efimov, a, "l3", sp, model, required=True, trap_depth=depth)
        beta_spec = (_resolve_rate("beta", beta, efimov, a, "beta", sp, model, required=True)
                     if mixture else _RateSpec("beta", 0.0))

    p = np.zeros(_NPAR)
    p[_GAMMA] = _scalar("gamma", gamma)
    default_gd = p[_GAMMA] if explicit else 0.0
    p[_GAMMA_D] = default_gd if gamma_dimer is None else _scalar("gamma_dimer", gamma_dimer)
    p[_C3] = trap.n2_coefficient(sp)
    p[_CAD] = trap.overlap_coefficient(sp)
    p[_TH] = t_h
    p[_HEAT] = 1.0 if heating else 0.0
    p[_KIN] = 1.0 if explicit else 0.0
    p[_METHOD] = _method_code(method)
    y0 = np.array([n_a, n_d, temp0, 0.0])
    dim = _DIM if explicit else _DIM - 1

    # Heating never cools (T_h >= 0), so T(t) lies in [t0, T_max]; tables of callables
    # start narrow and grow until the temperature stays inside. The lower margin covers
    # Runge-Kutta trial stages, which may undershoot the current T slightly (and the
    # cooling by breakup of the explicit kinetics, which the growth below does not follow).
    t_lo, t_hi = (temp0 * (0.9 if explicit else 0.98), temp0 * 1.5) if heating else (temp0, temp0)
    for _ in range(_MAX_TABLE_EXTENSIONS):
        p[_L3], l3_knots, l3_coefs = l3_spec.kernel_args(t_lo, t_hi)
        p[_BETA], b_knots, b_coefs = beta_spec.kernel_args(t_lo, t_hi)
        status, out = _integrate_one(times, y0, p, l3_knots, l3_coefs, b_knots, b_coefs, tol)
        which = {_OUT_OF_TABLE: l3_spec, _OUT_OF_BETA_TABLE: beta_spec}.get(status)
        if which is None or which.func is None:
            break
        t_hi *= 2.0
        if explicit:
            t_lo *= 0.8       # breakup cools: the explicit kinetics may fall below the start
    if which is not None:
        if which.table is None:
            raise LossfitValueError(which.name, f"T(t) rose beyond {t_hi:g} nK; the rate callable "
                                    "cannot be tabulated that far (runaway heating?)")
        raise LossfitValueError(which.name, f"T(t) left the tabulated range "
                                f"[{which.table.t_min_nK:g}, {which.table.t_max_nK:g}] nK; "
                                "extend the table")
    if status != _OK:
        raise LossfitValueError("t", _STATUS_TEXT[status])
    out = out[:, :dim]
    lost = out[:, 3] if explicit else _lost_by_conservation(out[:, 0], out[:, 1], n_a, n_d)
    return _solution(times, out[:, 0], out[:, 1], out[:, 2], lost, p[_C3], mixture or explicit, explicit and counts)


def _integrate_one(times, y0, p, l3_knots, l3_coefs, b_knots, b_coefs, rtol):
    """One curve through the batch kernel, a batch of one: (status, states (times, 4)).
    One compiled integrator serves single curves and batches (each array layout would
    compile the whole integrator again, tens of seconds on a fresh cache; so does a
    read-only array, as a curve's own times are: they are copied)."""
    times = np.array(times, dtype=float)
    out = np.empty((times.size, _DIM))
    status = np.zeros(1, dtype=np.int64)
    ends = np.array([0, times.size], dtype=np.int64)
    _integrate_batch(times, ends, y0[None, :], p[None, :], l3_knots, np.ascontiguousarray(l3_coefs),
                     np.array([0, l3_knots.size], dtype=np.int64), np.array([0, l3_coefs.shape[1]], dtype=np.int64),
                     b_knots, np.ascontiguousarray(b_coefs), np.array([0, b_knots.size], dtype=np.int64),
                     np.array([0, b_coefs.shape[1]], dtype=np.int64), rtol, rtol * 1e-6, 1_000_000, out, status,
                     _stiff_solver(p[None, :]))
    return int(status[0]), out


def _lost_by_conservation(atoms, dimers, n0, n_dimers0):
    return (n0 + 2.0 * n_dimers0) - atoms - 2.0 * dimers


def _solution(times, atoms, dimers, temperature, lost, c3, with_dimers, counts):
    return DecaySolution(t=times, atoms=atoms, temperature=temperature,
                         dimers=dimers if with_dimers else None, mean_n2=c3 * atoms ** 2 / temperature ** 3,
                         lost=lost, counted=atoms + 2.0 * dimers if counts else atoms)


def _per_curve_scalars(name, value, m, *, allow_zero=True):
    arr = check_positive(name, value, allow_zero=allow_zero)
    if arr.ndim == 0:
        return np.full(m, float(arr))
    if arr.shape != (m,):
        raise LossfitValueError(name, f"needs one value per curve ({m}), got shape {arr.shape}")
    return arr


class BatchResult(NamedTuple):
    """Concatenated solutions of a :class:`DecayBatch`; curve j is ``[offsets[j]:offsets[j+1]]``.

    Attributes
    ----------
    atoms : ndarray
        Free atom numbers.
    temperature : ndarray
        Temperatures in nK.
    dimers : ndarray
        Dimer numbers (zeros for atom-only curves).
    lost : ndarray
        Atoms lost from the trap since t = 0 (two per dimer).
    counted : ndarray
        The atom numbers an image reports (atoms + 2 dimers for curves with the explicit
        kinetics that count dimers, else atoms).
    """

    atoms: np.ndarray
    temperature: np.ndarray
    dimers: np.ndarray
    lost: np.ndarray
    counted: np.ndarray


class PackedTables(NamedTuple):
    """Rate tables of every curve of a :class:`DecayBatch`, already in the integrator's
    layout: a caller that makes many tables at once (a likelihood, for every walker)
    passes them without building one :class:`TabulatedRate` per curve.

    Attributes
    ----------
    knots : ndarray
        ln T knots (T in nK) of all curves, concatenated.
    coefs : ndarray, shape (4, total intervals)
        Cubic coefficients of ln rate (rate in cm^6/s or cm^3/s) in ln T, per interval, as
        :class:`TabulatedRate` holds them, concatenated over curves.
    knot_offsets, coef_offsets : ndarray of int64, shape (n_curves + 1,)
        Curve j owns knots[knot_offsets[j]:knot_offsets[j+1]] and
        coefs[:, coef_offsets[j]:coef_offsets[j+1]].
    """

    knots: np.ndarray
    coefs: np.ndarray
    knot_offsets: np.ndarray
    coef_offsets: np.ndarray


_NO_OFFSETS = {}


def _pack_rates(name, value, m, column, kinetics=None):
    """Per-curve rates -> (knots, coefs, knot offsets, column offsets); constants go into
    ``column``. A list may mix constants and tables; TabulatedKinetics entries are
    accepted when ``kinetics`` (a bool array, set True for them) is given."""
    if isinstance(value, PackedTables):
        if value.knot_offsets.shape != (m + 1,) or value.coef_offsets.shape != (m + 1,):
            raise LossfitValueError(name, f"packed tables for {value.knot_offsets.size - 1} curves, "
                                    f"the batch has {m}")
        column[:] = 0.0
        return value
    if isinstance(value, _SplineTable):
        value = [value] * m
    if isinstance(value, (list, tuple)) and any(isinstance(x, _SplineTable) for x in value):
        if len(value) != m:
            raise LossfitValueError(name, f"a list of rates needs one entry per curve ({m}), got {len(value)}")
        knots, coefs = [], []
        k_off = np.zeros(m + 1, dtype=np.int64)
        c_off = np.zeros(m + 1, dtype=np.int64)
        for j, x in enumerate(value):
            if isinstance(x, TabulatedKinetics):
                if kinetics is None:
                    raise LossfitValueError(name, f"curve {j}: a TabulatedKinetics is not a {name} table")
                kinetics[j] = True
            if isinstance(x, _SplineTable):
                column[j] = 0.0
                knots.append(x._knots)
                coefs.append(x._coefs)
                k_off[j + 1] = k_off[j] + x._knots.size
                c_off[j + 1] = c_off[j] + x._coefs.shape[1]
            elif callable(x):
                raise LossfitValueError(name, "callables are not accepted here; tabulate them once "
                                        "with lossfit.experiment.decay.tabulate_rate")
            else:
                column[j] = _scalar(name, x)
                k_off[j + 1], c_off[j + 1] = k_off[j], c_off[j]
        return np.concatenate(knots), np.ascontiguousarray(np.concatenate(coefs, axis=1)), k_off, c_off
    if callable(value):
        raise LossfitValueError(name, "callables are not accepted here; tabulate them once "
                                "with lossfit.experiment.decay.tabulate_rate")
    column[:] = _per_curve_scalars(name, value, m)
    if m not in _NO_OFFSETS:
        _NO_OFFSETS[m] = np.zeros(m + 1, dtype=np.int64)
    return _EMPTY_KNOTS, _EMPTY_COEFS, _NO_OFFSETS[m], _NO_OFFSETS[m]


class DecayBatch:
    """Many decay curves prepared once, integrated in one compiled call.

    This is the fast path for global fits: everything that does not change between
    likelihood evaluations (times, traps, species, heating model) is validated and
    converted here; :meth:`__call__` only checks the per-curve parameters and runs the
    numba kernel. Atom-only curves, atom-dimer mixtures and curves with the explicit
    dimer kinetics may be mixed freely.

    Parameters
    ----------
    times : sequence of arrays
        Hold times in s for each curve (strictly increasing, >= 0; initial state at t = 0).
    species : str or Species
        Common to all curves.
    traps_hz : HarmonicTrap, 3 frequencies in Hz, or a sequence of those (one per curve)
    heating : bool
        Include anti-evaporation and recombination heating.
    recombination_heating_nK : float or array
        T_h in nK, per curve or common.
    rtol : float
        Relative tolerance of the integrator.
    counts_dimers : bool or sequence of bool
        Per curve or common: whether the image of a curve with the explicit kinetics
        counts the atoms bound in dimers (``counted`` = N + 2 N_D).
    method : {"auto", "dopri5", "rosenbrock"}
        Integrator, as in :func:`simulate_decay`.
    """

    def __init__(self, times, *, species, traps_hz, heating=True, recombination_heating_nK=0.0,
                 rtol=1e-6, counts_dimers=True, method="auto"):
        ts = [check_times("t", x) for x in times]
        m = len(ts)
        if m == 0:
            raise LossfitValueError("times", "need at least one curve")
        sp = _lookup_species(species)
        if isinstance(traps_hz, (list, tuple)) and len(traps_hz) == m and not np.isscalar(traps_hz[0]):
            traps = [as_trap(x, "traps_hz") for x in traps_hz]
        else:
            traps = [as_trap(traps_hz, "traps_hz")] * m
        self.n_curves = m
        self.times = ts
        self.offsets = np.cumsum([0] + [x.size for x in ts]).astype(np.int64)
        self._t_all = np.concatenate(ts)
        self._p = np.zeros((m, _NPAR))
        self._p[:, _C3] = [tr.n2_coefficient(sp) for tr in traps]
        self._p[:, _CAD] = [tr.overlap_coefficient(sp) for tr in traps]
        self._p[:, _TH] = _per_curve_scalars("recombination_heating_nK", recombination_heating_nK, m)
        self._p[:, _HEAT] = 1.0 if heating else 0.0
        self._rtol = _scalar("rtol", rtol, allow_zero=False)
        self._method = _choice("method", method, METHODS)
        flags = counts_dimers if isinstance(counts_dimers, (list, tuple, np.ndarray)) else [counts_dimers] * m
        if len(flags) != m:
            raise LossfitValueError("counts_dimers", f"needs one flag per curve ({m}) or one for all")
        self._counts = np.array([_flag("counts_dimers", x) for x in flags])
        self._point_counts = np.repeat(self._counts, [x.size for x in ts])
        self._y0 = np.zeros((m, _DIM))

    def repeated(self, copies):
        """This batch with its curves repeated ``copies`` times (curve j of copy c is
        curve c n_curves + j): one compiled call integrates a curve set for many parameter
        sets, e.g. every walker of an ensemble."""
        if not (isinstance(copies, (int, np.integer)) and copies >= 1):
            raise LossfitValueError("copies", f"must be a positive integer, got {copies!r}")
        return self.select(np.tile(np.arange(self.n_curves), copies))

    def select(self, indices):
        """The batch of the curves ``indices`` (in that order, repeats allowed), with
        everything prepared here taken over as it is."""
        idx = np.asarray(indices)
        if idx.ndim != 1 or idx.size == 0 or idx.dtype.kind not in "iu" or idx.min() < 0 \
                or idx.max() >= self.n_curves:
            raise LossfitValueError("indices", f"must be a non-empty 1-D array of curve indices in "
                                    f"0..{self.n_curves - 1}, got {indices!r}")
        out = object.__new__(DecayBatch)
        out.__dict__.update(self.__dict__)
        out.n_curves = idx.size
        out.times = [self.times[j] for j in idx]
        out.offsets = np.cumsum([0] + [x.size for x in out.times]).astype(np.int64)
        out._t_all = np.concatenate(out.times)
        out._p = self._p[idx]
        out._counts = self._counts[idx]
        out._point_counts = np.repeat(out._counts, [x.size for x in out.times])
        out._y0 = np.zeros((out.n_curves, _DIM))
        return out

    @property
    def n2_coefficients(self):
        """Per-curve c with <n^2> = c N^2 / T^3, in cm^-6 nK^3."""
        return self._p[:, _C3].copy()

    @property
    def overlap_coefficients(self):
        """Per-curve d with (1/N_D) int n_A n_D = d N_A / T^(3/2), in cm^-3 nK^(3/2)."""
        return self._p[:, _CAD].copy()

    def __call__(self, n0, t0_nK, l3, gamma=0.0, *, n_dimers0=0.0, beta=0.0, gamma_dimer=None):
        """Integrate every curve.

        Parameters
        ----------
        n0 : float or array (n_curves,)
            Initial (free) atom numbers.
        t0_nK : float or array (n_curves,)
            Initial temperatures in nK.
        l3 : float, array (n_curves,), TabulatedRate, TabulatedKinetics or sequence of those
            Three-body coefficients in cm^6/s (constants or tables in T); a
            TabulatedKinetics entry runs that curve with the explicit dimer kinetics.
        gamma : float or array (n_curves,)
            One-body loss rates of the atoms in 1/s.
        n_dimers0 : float or array (n_curves,)
            Initial dimer numbers (0 for atom-only curves).
        beta : float, array (n_curves,), TabulatedRate or sequence of those
            Atom-dimer relaxation coefficients of mixtures in cm^3/s.
        gamma_dimer : float or array (n_curves,), optional
            One-body loss rates of the dimers in 1/s; None: 0 for mixtures, ``gamma`` for
            the explicit kinetics.

        Returns
        -------
        BatchResult
            ``atoms``, ``temperature`` (nK), ``dimers``, ``lost``, ``counted``, concatenated
            over curves.
        """
        m = self.n_curves
        self._y0[:, 0] = _per_curve_scalars("n0", n0, m)
        self._y0[:, 1] = _per_curve_scalars("n_dimers0", n_dimers0, m)
        self._y0[:, 2] = _per_curve_scalars("t0_nK", t0_nK, m, allow_zero=False)
        kinetics = np.zeros(m, dtype=bool)
        l3_args = _pack_rates("l3", l3, m, self._p[:, _L3], kinetics)
        b_args = _pack_rates("beta", beta, m, self._p[:, _BETA])
        self._p[:, _GAMMA] = _per_curve_scalars("gamma", gamma, m)
        self._p[:, _GAMMA_D] = (np.where(kinetics, self._p[:, _GAMMA], 0.0) if gamma_dimer is None
                                else _per_curve_scalars("gamma_dimer", gamma_dimer, m))
        self._p[:, _KIN] = kinetics
        self._p[:, _METHOD] = _method_code(self._method)
        out = np.empty((self._t_all.size, _DIM))
        status = np.zeros(m, dtype=np.int64)
        _integrate_batch(self._t_all, self.offsets, self._y0, self._p, *l3_args, *b_args,
                         self._rtol, self._rtol * 1e-6, 1_000_000, out, status, _stiff_solver(self._p))
        bad = np.flatnonzero(status)
        if bad.size:
            j = int(bad[0])
            if status[j] == _OUT_OF_TABLE:
                raise LossfitValueError("l3", f"curve {j}: T(t) left the tabulated L3 range")
            if status[j] == _OUT_OF_BETA_TABLE:
                raise LossfitValueError("beta", f"curve {j}: T(t) left the tabulated beta range")
            raise LossfitValueError("n0", f"curve {j}: {_STATUS_TEXT[int(status[j])]}")
        atoms, dimers = out[:, 0], out[:, 1]
        point_kinetics = np.repeat(kinetics, np.diff(self.offsets))
        start = np.repeat(self._y0[:, 0] + 2.0 * self._y0[:, 1], np.diff(self.offsets))
        lost = np.where(point_kinetics, out[:, 3], start - atoms - 2.0 * dimers)
        counted = np.where(self._point_counts & point_kinetics, atoms + 2.0 * dimers, atoms)
        return BatchResult(atoms, out[:, 2], dimers, lost, counted)

    def curve_has_dimers(self, j):
        """True if curve ``j`` of the last call carried dimers (mixture or explicit kinetics)."""
        return bool(self._y0[j, 1] > 0 or self._p[j, _KIN] != 0.0)

    def solutions(self, result):
        """Split a :class:`BatchResult` of the last call into one DecaySolution per curve."""
        sols = []
        for j in range(self.n_curves):
            sl = slice(self.offsets[j], self.offsets[j + 1])
            counts = bool(self._counts[j] and self._p[j, _KIN] != 0.0)
            sols.append(_solution(self.times[j], result.atoms[sl].copy(), result.dimers[sl].copy(),
                                  result.temperature[sl].copy(), result.lost[sl].copy(), self._p[j, _C3],
                                  self.curve_has_dimers(j), counts))
        return sols


def simulate_decay_batch(times, *, species, traps_hz, n0, t0_nK, l3, gamma=0.0, heating=True,
                         recombination_heating_nK=0.0, n_dimers0=0.0, beta=0.0, gamma_dimer=None,
                         rtol=1e-6, counts_dimers=True, method="auto"):
    """Integrate many curves at once; see :class:`DecayBatch` for repeated calls.

    Parameters are those of :class:`DecayBatch` and :meth:`DecayBatch.__call__`.

    Returns
    -------
    list of DecaySolution
        ``dimers`` is None for curves without dimers.
    """
    batch = DecayBatch(times, species=species, traps_hz=traps_hz, heating=heating,
                       recombination_heating_nK=recombination_heating_nK, rtol=rtol,
                       counts_dimers=counts_dimers, method=method)
    return batch.solutions(batch(n0, t0_nK, l3, gamma, n_dimers0=n_dimers0, beta=beta, gamma_dimer=gamma_dimer))

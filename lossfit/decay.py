"""Rate equations for atom (and atom-dimer) loss from a thermal cloud in a harmonic trap.

Atoms only (Weber, Herbig, Mark, Naegerl & Grimm, PRL 91, 123201 (2003)):

    dN/dt = -Gamma N - L3 <n^2> N,
    dT/dt = (L3 <n^2> / 3) (T + T_h),          <n^2> = c N^2 / T^3  (lossfit.trap).

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

L3 and beta may be constants, :class:`TabulatedRate` tables of temperature (evaluated
inside the integrator at the instantaneous T(t) -- the fast path for theory rates), or
Python callables of temperature in nK, which are tabulated on a fine logarithmic grid
before the integration (cubic spline of ln rate versus ln T). The integrator is an
embedded Dormand-Prince 5(4) Runge-Kutta method with adaptive step (Dormand & Prince,
J. Comput. Appl. Math. 6, 19 (1980)) compiled with numba.
"""

__all__ = ["DecaySolution", "TabulatedRate", "tabulate_rate", "simulate_decay",
           "simulate_decay_batch"]

import math
from dataclasses import dataclass

import numba
import numpy as np
from scipy.interpolate import CubicSpline

from .errors import LossfitValueError, check_finite, check_positive
from .species import species as _lookup_species
from .trap import as_trap

# --- parameter vector layout of the kernels ------------------------------------------
_GAMMA, _GAMMA_D, _C3, _CAD, _L3, _BETA, _TH, _HEAT = range(8)
_NPAR = 8

_OK, _MAX_STEPS, _OUT_OF_TABLE, _NOT_FINITE = 0, 1, 2, 3

# Dormand-Prince 5(4) tableau.
_C2, _C3S, _C4, _C5 = 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0
_A21 = 1.0 / 5.0
_A31, _A32 = 3.0 / 40.0, 9.0 / 40.0
_A41, _A42, _A43 = 44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0
_A51, _A52, _A53, _A54 = 19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0
_A61, _A62, _A63, _A64, _A65 = (9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0,
                                49.0 / 176.0, -5103.0 / 18656.0)
_B1, _B3, _B4, _B5, _B6 = 35.0 / 384.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0
# error weights: b(5th order) - b(4th order)
_E1, _E3, _E4, _E5, _E6, _E7 = (71.0 / 57600.0, -71.0 / 16695.0, 71.0 / 1920.0,
                                -17253.0 / 339200.0, 22.0 / 525.0, -1.0 / 40.0)


# --- kernels ------------------------------------------------------------------------

@numba.njit(cache=True)
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
    i = np.searchsorted(knots, x) - 1
    if i < 0:
        i = 0
    if i > n - 2:
        i = n - 2
    dx = x - knots[i]
    v = ((coefs[0, i] * dx + coefs[1, i]) * dx + coefs[2, i]) * dx + coefs[3, i]
    return math.exp(v)


@numba.njit(cache=True)
def _rhs(y, p, l3k, l3c, bk, bc, out):
    n_a, n_d, temp = y[0], y[1], y[2]
    if not (temp > 0.0):
        return _NOT_FINITE
    l3 = _rate(temp, p[_L3], l3k, l3c)
    beta = _rate(temp, p[_BETA], bk, bc)
    if l3 < 0.0 or beta < 0.0:
        return _OUT_OF_TABLE
    r3 = l3 * p[_C3] * n_a * n_a * n_a / (temp * temp * temp)      # atoms lost per s
    r_ad = beta * p[_CAD] * n_a * n_d / temp ** 1.5                  # relaxation events per s
    out[0] = -p[_GAMMA] * n_a - r3 - r_ad
    out[1] = -p[_GAMMA_D] * n_d - r_ad
    if p[_HEAT] != 0.0 and n_a + n_d > 0.0:
        out[2] = (r3 * (temp + p[_TH]) + 1.5 * r_ad * temp) / (3.0 * (n_a + n_d))
    else:
        out[2] = 0.0
    return _OK


@numba.njit(cache=True)
def _integrate(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, max_steps, out):
    """Integrate from t = 0 and write the state at each ``t_out`` into ``out[k, :]``.

    Returns a status code (0 ok). ``t_out`` is increasing and non-negative.
    """
    dim = 3
    y = y0.copy()
    f = np.empty(dim)
    k2 = np.empty(dim)
    k3 = np.empty(dim)
    k4 = np.empty(dim)
    k5 = np.empty(dim)
    k6 = np.empty(dim)
    k7 = np.empty(dim)
    ys = np.empty(dim)
    yn = np.empty(dim)
    status = _rhs(y, p, l3k, l3c, bk, bc, f)
    if status != _OK:
        return status
    t_end = t_out[t_out.shape[0] - 1]
    # initial step from the fastest relative rate
    fastest = 0.0
    for i in range(dim):
        r = abs(f[i]) / (abs(y[i]) + atol[i])
        if r > fastest:
            fastest = r
    h = t_end if fastest == 0.0 else min(t_end, 0.01 / fastest)
    t = 0.0
    k = 0
    steps = 0
    while k < t_out.shape[0]:
        if t_out[k] <= t:
            for i in range(dim):
                out[k, i] = y[i]
            k += 1
            continue
        if steps >= max_steps:
            return _MAX_STEPS
        steps += 1
        h_free = h
        landing = h >= t_out[k] - t
        if landing:
            h = t_out[k] - t
        for i in range(dim):
            ys[i] = y[i] + h * _A21 * f[i]
        status = _rhs(ys, p, l3k, l3c, bk, bc, k2)
        if status != _OK:
            return status
        for i in range(dim):
            ys[i] = y[i] + h * (_A31 * f[i] + _A32 * k2[i])
        status = _rhs(ys, p, l3k, l3c, bk, bc, k3)
        if status != _OK:
            return status
        for i in range(dim):
            ys[i] = y[i] + h * (_A41 * f[i] + _A42 * k2[i] + _A43 * k3[i])
        status = _rhs(ys, p, l3k, l3c, bk, bc, k4)
        if status != _OK:
            return status
        for i in range(dim):
            ys[i] = y[i] + h * (_A51 * f[i] + _A52 * k2[i] + _A53 * k3[i] + _A54 * k4[i])
        status = _rhs(ys, p, l3k, l3c, bk, bc, k5)
        if status != _OK:
            return status
        for i in range(dim):
            ys[i] = y[i] + h * (_A61 * f[i] + _A62 * k2[i] + _A63 * k3[i] + _A64 * k4[i]
                                + _A65 * k5[i])
        status = _rhs(ys, p, l3k, l3c, bk, bc, k6)
        if status != _OK:
            return status
        for i in range(dim):
            yn[i] = y[i] + h * (_B1 * f[i] + _B3 * k3[i] + _B4 * k4[i] + _B5 * k5[i]
                                + _B6 * k6[i])
        status = _rhs(yn, p, l3k, l3c, bk, bc, k7)
        if status != _OK:
            # a trial point outside the table or at T <= 0: shrink before giving up
            if h > 1e-12 * t_end and status == _NOT_FINITE:
                h *= 0.25
                continue
            return status
        err = 0.0
        for i in range(dim):
            e = h * (_E1 * f[i] + _E3 * k3[i] + _E4 * k4[i] + _E5 * k5[i] + _E6 * k6[i]
                     + _E7 * k7[i])
            scale = atol[i] + rtol * max(abs(y[i]), abs(yn[i]))
            r = abs(e) / scale
            if r > err:
                err = r
        if not math.isfinite(err):
            return _NOT_FINITE
        if err <= 1.0:
            factor = 5.0 if err == 0.0 else min(5.0, max(0.2, 0.9 * err ** -0.2))
            t = t_out[k] if landing else t + h
            for i in range(dim):
                y[i] = yn[i]
                f[i] = k7[i]         # first-same-as-last
            h_next = factor * h
            if landing and factor >= 1.0 and h_free > h_next:
                h_next = h_free      # the clip to the output time was not an accuracy limit
            h = h_next
        else:
            h *= max(0.2, 0.9 * err ** -0.2)
    return _OK


@numba.njit(cache=True)
def _integrate_batch(t_all, t_off, y0s, ps, l3k, l3c, k_off, c_off, rtol, atol_rel, max_steps,
                     out, status):
    """Integrate many atom-only curves.

    Curve j uses times t_all[t_off[j]:t_off[j+1]], L3 knots l3k[k_off[j]:k_off[j+1]] and
    coefficient columns l3c[:, c_off[j]:c_off[j+1]] (empty slices mean a constant L3).
    """
    atol = np.empty(3)
    no_knots = np.empty(0)
    no_coefs = np.empty((4, 0))
    for j in range(y0s.shape[0]):
        y0 = y0s[j]
        atol[0] = atol_rel * max(y0[0], 1.0)
        atol[1] = atol[0]
        atol[2] = atol_rel * y0[2]
        status[j] = _integrate(t_all[t_off[j]:t_off[j + 1]], y0, ps[j],
                               l3k[k_off[j]:k_off[j + 1]], l3c[:, c_off[j]:c_off[j + 1]],
                               no_knots, no_coefs, rtol, atol, max_steps,
                               out[t_off[j]:t_off[j + 1]])


# --- rates as functions of temperature ---------------------------------------------------

class TabulatedRate:
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
        t = check_positive("temperature_nK", temperature_nK)
        v = check_positive("values", values)
        if t.ndim != 1 or t.shape != v.shape or t.size < 4:
            raise LossfitValueError("values", "need 1-d temperature_nK and values of equal length >= 4, "
                                    f"got shapes {t.shape} and {v.shape}")
        if np.any(np.diff(t) <= 0):
            raise LossfitValueError("temperature_nK", "must be strictly increasing")
        self.temperature_nK = t
        self.values = v
        spline = CubicSpline(np.log(t), np.log(v))
        self._knots = np.ascontiguousarray(spline.x, dtype=float)
        self._coefs = np.ascontiguousarray(spline.c, dtype=float)

    @property
    def t_min_nK(self):
        """Lowest tabulated temperature in nK."""
        return float(self.temperature_nK[0])

    @property
    def t_max_nK(self):
        """Highest tabulated temperature in nK."""
        return float(self.temperature_nK[-1])

    def __call__(self, temperature_nK):
        """Interpolated rate at ``temperature_nK`` (nK), same units as ``values``."""
        t = check_positive("temperature_nK", temperature_nK)
        if np.any(t < self.t_min_nK) or np.any(t > self.t_max_nK):
            raise LossfitValueError("temperature_nK", f"outside the table range "
                                    f"[{self.t_min_nK:g}, {self.t_max_nK:g}] nK")
        x = np.log(t)
        i = np.clip(np.searchsorted(self._knots, x) - 1, 0, self._knots.size - 2)
        dx = x - self._knots[i]
        c = self._coefs
        return np.exp(((c[0, i] * dx + c[1, i]) * dx + c[2, i]) * dx + c[3, i])

    def __repr__(self):
        return (f"TabulatedRate({self.temperature_nK.size} points, "
                f"{self.t_min_nK:g}-{self.t_max_nK:g} nK)")


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
    n = max(8, int(math.ceil(math.log(hi / lo) / ln_step)) + 1)
    temps = np.geomspace(lo, hi, n)
    return TabulatedRate(temps, _evaluate_callable(name, func, temps))


# --- public layer ----------------------------------------------------------------------

@dataclass(frozen=True)
class DecaySolution:
    """Solution of the rate equations at the requested times.

    Attributes
    ----------
    t : ndarray
        Times in s.
    atoms : ndarray
        Atom number N(t).
    temperature : ndarray
        Temperature T(t) in nK.
    dimers : ndarray or None
        Dimer number N_D(t) for atom-dimer mixtures, else None.
    mean_n2 : ndarray
        <n^2>(t) in cm^-6.
    """

    t: np.ndarray
    atoms: np.ndarray
    temperature: np.ndarray
    dimers: np.ndarray | None
    mean_n2: np.ndarray


def _times(t):
    arr = check_finite("t", t)
    if arr.ndim != 1 or arr.size == 0:
        raise LossfitValueError("t", f"must be a non-empty 1-d array of times in s, got shape {arr.shape}")
    if arr[0] < 0:
        raise LossfitValueError("t", f"times are counted from the initial state at t = 0 and must be "
                                f">= 0, got {arr[0]!r}")
    if np.any(np.diff(arr) <= 0):
        i = int(np.argmax(np.diff(arr) <= 0))
        raise LossfitValueError("t", f"must be strictly increasing, got t[{i}] = {arr[i]!r} "
                                f"followed by {arr[i + 1]!r}")
    return np.ascontiguousarray(arr)


def _scalar(name, value, *, allow_zero=True):
    arr = check_positive(name, value, allow_zero=allow_zero)
    if arr.ndim != 0:
        raise LossfitValueError(name, f"must be a scalar, got shape {arr.shape}")
    return float(arr)


_EMPTY_KNOTS = np.empty(0)
_EMPTY_COEFS = np.empty((4, 0))


class _RateSpec:
    """A rate prepared for the kernels: a constant, a fixed table, or a callable to tabulate."""

    def __init__(self, name, value):
        self.name = name
        self.const = 0.0
        self.table = None
        self.func = None
        if isinstance(value, TabulatedRate):
            self.table = value
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
        if t_hi <= t_lo:     # constant temperature: one evaluation suffices
            value = _evaluate_callable(self.name, self.func, np.array([t_lo]))[0]
            return float(value), _EMPTY_KNOTS, _EMPTY_COEFS
        table = tabulate_rate(self.func, t_lo, t_hi, name=self.name)
        return 0.0, table._knots, table._coefs


def _theory_rate(kind, efimov, a, species, model):
    """Rate callable of T (nK) from the zero-range theory, imported lazily."""
    try:
        from . import rates
    except ImportError:
        raise LossfitValueError("efimov", "the theory module lossfit.rates is not available; "
                                "pass l3=/beta= as a constant, table or callable") from None
    kwargs = {} if model is None else {"model": model}
    func = getattr(rates, kind)
    return lambda temperature_nK: func(a, temperature_nK, species=species, efimov=efimov, **kwargs)


def _resolve_rate(name, value, efimov, a, kind, species, model, required):
    if value is not None and efimov is not None:
        raise LossfitValueError(name, f"give either {name}= or efimov= (with a=), not both")
    if value is not None:
        return _RateSpec(name, value)
    if efimov is not None:
        if a is None:
            raise LossfitValueError("a", f"efimov= needs the scattering length a (in a0) to compute {name}")
        return _RateSpec(name, _theory_rate(kind, efimov, a, species, model))
    if required:
        raise LossfitValueError(name, f"give {name}= (constant, TabulatedRate or callable of T in nK) "
                                "or efimov= and a=")
    return _RateSpec(name, 0.0)


_STATUS_TEXT = {_MAX_STEPS: "too many integration steps (is a rate absurdly large?)",
                _NOT_FINITE: "the solution became non-finite or the temperature non-positive"}

_MAX_TABLE_EXTENSIONS = 40


def simulate_decay(t, *, species, trap_hz, n0, t0_nK, l3=None, efimov=None, a=None, gamma=0.0,
                   heating=True, recombination_heating_nK=0.0, model=None, n_dimers0=0.0,
                   beta=None, gamma_dimer=0.0, rtol=1e-8):
    """Integrate the loss and heating rate equations of a thermal cloud.

    Parameters
    ----------
    t : array, shape (n,)
        Strictly increasing hold times in s, >= 0; the initial state is at t = 0.
    species : str or Species
    trap_hz : HarmonicTrap or sequence of 3 floats
        Atomic trap frequencies in Hz (a trap also carries the dimer frequencies).
    n0 : float
        Initial atom number (>= 0).
    t0_nK : float
        Initial temperature in nK (> 0).
    l3 : float, TabulatedRate or callable, optional
        Three-body loss coefficient in cm^6/s (atoms lost, thermal gas, DESIGN §4): a
        constant, a table in T, or ``l3(temperature_nK)``. Exclusive with ``efimov``.
    efimov : Efimov, optional
        Efimov parameters; with ``a`` the rates come from ``lossfit.rates`` at the
        instantaneous temperature.
    a : float, optional
        Scattering length in a0 (needed with ``efimov``; must be > 0 with dimers).
    gamma : float
        One-body loss rate of the atoms in 1/s.
    heating : bool
        Include anti-evaporation and recombination heating; if False, T stays t0_nK.
    recombination_heating_nK : float
        T_h in nK (>= 0): recombination heating per atom lost (Weber et al. 2003).
    model : str, optional
        Theory model passed to ``lossfit.rates`` (``"threshold"``, ``"capped"``, ...).
    n_dimers0 : float
        Initial dimer number (> 0 for an atom-dimer mixture).
    beta : float, TabulatedRate or callable, optional
        Atom-dimer relaxation coefficient in cm^3/s (dimers lost); with ``efimov`` and
        ``a`` it comes from the theory.
    gamma_dimer : float
        One-body loss rate of the dimers in 1/s.
    rtol : float
        Relative tolerance of the adaptive integrator.

    Returns
    -------
    DecaySolution
    """
    times = _times(t)
    sp = _lookup_species(species)
    trap = as_trap(trap_hz)
    n_a = _scalar("n0", n0)
    n_d = _scalar("n_dimers0", n_dimers0)
    temp0 = _scalar("t0_nK", t0_nK, allow_zero=False)
    t_h = _scalar("recombination_heating_nK", recombination_heating_nK)
    tol = _scalar("rtol", rtol, allow_zero=False)
    if not tol < 1e-2:
        raise LossfitValueError("rtol", f"must be < 1e-2, got {tol!r}")
    if a is not None:
        a = float(check_finite("a", a))
    mixture = n_d > 0.0
    if mixture and efimov is not None and beta is None and a is not None and a <= 0:
        raise LossfitValueError("a", f"Feshbach dimers (and beta) exist only for a > 0, got a = {a!r} a0")
    l3_spec = _resolve_rate("l3", l3, efimov, a, "l3", sp, model, required=True)
    beta_spec = (_resolve_rate("beta", beta, efimov, a, "beta", sp, model, required=True)
                 if mixture else _RateSpec("beta", 0.0))

    p = np.zeros(_NPAR)
    p[_GAMMA] = _scalar("gamma", gamma)
    p[_GAMMA_D] = _scalar("gamma_dimer", gamma_dimer)
    p[_C3] = trap.n2_coefficient(sp)
    p[_CAD] = trap.overlap_coefficient(sp)
    p[_TH] = t_h
    p[_HEAT] = 1.0 if heating else 0.0
    y0 = np.array([n_a, n_d, temp0])
    scale = max(n_a, n_d, 1.0)
    atol = np.array([tol * 1e-6 * scale, tol * 1e-6 * scale, tol * 1e-6 * temp0])
    out = np.empty((times.size, 3))

    # Heating never cools (T_h >= 0), so T(t) lies in [t0, T_max]; tables of callables
    # start narrow and grow until the temperature stays inside.
    t_lo = temp0 * (1.0 - 1e-9)
    t_hi = temp0 * 1.5 if heating else temp0
    for _ in range(_MAX_TABLE_EXTENSIONS):
        p[_L3], l3_knots, l3_coefs = l3_spec.kernel_args(t_lo, t_hi)
        p[_BETA], b_knots, b_coefs = beta_spec.kernel_args(t_lo, t_hi)
        status = _integrate(times, y0, p, l3_knots, l3_coefs, b_knots, b_coefs, tol, atol,
                            1_000_000, out)
        if status != _OUT_OF_TABLE or (l3_spec.func is None and beta_spec.func is None):
            break
        t_hi *= 2.0
    if status == _OUT_OF_TABLE:
        which = l3_spec if l3_spec.table is not None else beta_spec
        raise LossfitValueError(which.name, f"T(t) left the tabulated range "
                                f"[{which.table.t_min_nK:g}, {which.table.t_max_nK:g}] nK; "
                                "extend the table")
    if status != _OK:
        raise LossfitValueError("t", _STATUS_TEXT[status])
    atoms, temperature = out[:, 0], out[:, 2]
    return DecaySolution(t=times, atoms=atoms, temperature=temperature,
                         dimers=out[:, 1] if mixture else None,
                         mean_n2=p[_C3] * atoms ** 2 / temperature ** 3)


def simulate_decay_batch(times, *, species, traps_hz, n0, t0_nK, l3, gamma=0.0, heating=True,
                         recombination_heating_nK=0.0, rtol=1e-6):
    """Integrate many atom-only decay curves in one compiled call (the global-fit fast path).

    Every per-curve argument is a sequence with one entry per curve (scalars are
    broadcast). Rates are constants or :class:`TabulatedRate` tables (no callables:
    tabulate them once with :func:`tabulate_rate` outside the fit loop).

    Parameters
    ----------
    times : sequence of arrays
        Hold times in s for each curve (strictly increasing, >= 0).
    species : str or Species
        Common to all curves.
    traps_hz : HarmonicTrap, sequence of 3 floats, or a sequence of those (one per curve)
    n0, t0_nK, gamma, recombination_heating_nK : float or sequence
        As in :func:`simulate_decay` (atoms, nK, 1/s, nK).
    l3 : float, TabulatedRate, or a sequence of those
        Three-body coefficient in cm^6/s per curve.
    heating : bool
    rtol : float
        Relative tolerance.

    Returns
    -------
    list of DecaySolution
    """
    ts = [_times(x) for x in times]
    m = len(ts)
    if m == 0:
        raise LossfitValueError("times", "need at least one curve")
    sp = _lookup_species(species)

    def per_curve(name, value):
        if isinstance(value, (list, tuple)) and not (name == "traps_hz" and len(value) == 3
                                                     and np.isscalar(value[0])):
            if len(value) != m:
                raise LossfitValueError(name, f"needs one entry per curve ({m}), got {len(value)}")
            return list(value)
        if isinstance(value, np.ndarray) and value.ndim == 1 and name != "traps_hz":
            if value.size != m:
                raise LossfitValueError(name, f"needs one entry per curve ({m}), got {value.size}")
            return list(value)
        return [value] * m

    traps = [as_trap(x, "traps_hz") for x in per_curve("traps_hz", traps_hz)]
    n_a = [_scalar("n0", x) for x in per_curve("n0", n0)]
    temp0 = [_scalar("t0_nK", x, allow_zero=False) for x in per_curve("t0_nK", t0_nK)]
    gam = [_scalar("gamma", x) for x in per_curve("gamma", gamma)]
    t_h = [_scalar("recombination_heating_nK", x)
           for x in per_curve("recombination_heating_nK", recombination_heating_nK)]
    specs = [_RateSpec("l3", x) for x in per_curve("l3", l3)]
    if any(s.func is not None for s in specs):
        raise LossfitValueError("l3", "callables are not accepted here; tabulate them with "
                                "lossfit.decay.tabulate_rate first")
    tol = _scalar("rtol", rtol, allow_zero=False)

    ps = np.zeros((m, _NPAR))
    y0s = np.zeros((m, 3))
    knots, coefs, offsets = [], [], [0]
    for j in range(m):
        ps[j, _GAMMA] = gam[j]
        ps[j, _C3] = traps[j].n2_coefficient(sp)
        ps[j, _L3] = specs[j].const
        ps[j, _TH] = t_h[j]
        ps[j, _HEAT] = 1.0 if heating else 0.0
        y0s[j] = (n_a[j], 0.0, temp0[j])
        if specs[j].table is not None:
            knots.append(specs[j].table._knots)
            coefs.append(specs[j].table._coefs)
        else:
            knots.append(_EMPTY_KNOTS)
            coefs.append(_EMPTY_COEFS)
        offsets.append(offsets[-1] + knots[-1].size)
    l3k = np.ascontiguousarray(np.concatenate(knots))
    l3c = np.ascontiguousarray(np.concatenate(coefs, axis=1))
    k_off = np.asarray(offsets, dtype=np.int64)
    c_off = np.cumsum([0] + [c.shape[1] for c in coefs]).astype(np.int64)
    t_all = np.concatenate(ts)
    t_off = np.cumsum([0] + [x.size for x in ts]).astype(np.int64)
    out = np.empty((t_all.size, 3))
    status = np.zeros(m, dtype=np.int64)
    _integrate_batch(t_all, t_off, y0s, ps, l3k, l3c, k_off, c_off, tol, tol * 1e-6,
                     1_000_000, out, status)
    bad = np.flatnonzero(status)
    if bad.size:
        j = int(bad[0])
        text = ("T(t) left the tabulated L3 range" if status[j] == _OUT_OF_TABLE
                else _STATUS_TEXT[int(status[j])])
        raise LossfitValueError("l3" if status[j] == _OUT_OF_TABLE else "times", f"curve {j}: {text}")
    sols = []
    for j in range(m):
        block = out[t_off[j]:t_off[j + 1]]
        atoms, temperature = block[:, 0].copy(), block[:, 2].copy()
        sols.append(DecaySolution(t=ts[j], atoms=atoms, temperature=temperature, dimers=None,
                                  mean_n2=ps[j, _C3] * atoms ** 2 / temperature ** 3))
    return sols


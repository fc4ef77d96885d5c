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

L3 and beta may be constants, :class:`TabulatedRate` tables of temperature (evaluated
inside the integrator at the instantaneous T(t) -- the fast path for theory rates), or
Python callables of temperature in nK, which are tabulated on a fine logarithmic grid
before the integration (cubic spline of ln rate versus ln T). The integrator is an
embedded Dormand-Prince 5(4) Runge-Kutta method with adaptive step (Dormand & Prince,
J. Comput. Appl. Math. 6, 19 (1980)) compiled with numba.
"""

__all__ = ["DecaySolution", "TabulatedRate", "tabulate_rate", "simulate_decay",
           "DecayBatch", "BatchResult", "simulate_decay_batch"]

import math
import warnings
from dataclasses import dataclass
from typing import NamedTuple

import numba
import numpy as np
from scipy.interpolate import CubicSpline

from .. import rates
from .._bisect import interval_of
from ..errors import LossfitValueError, ValidityWarning, check_finite, check_positive, check_table, check_times
from ..species import species as _lookup_species
from .trap import as_trap

# --- parameter vector layout of the kernels ------------------------------------------
_GAMMA, _GAMMA_D, _C3, _CAD, _L3, _BETA, _TH, _HEAT = range(8)
_NPAR = 8

_OK, _MAX_STEPS, _OUT_OF_TABLE, _NOT_FINITE, _OUT_OF_BETA_TABLE = 0, 1, 2, 3, 4

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
    i = interval_of(knots, x)       # a handful of knots: cheaper than np.searchsorted here
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
def _dp_step(y, f, h, p, l3k, l3c, bk, bc, rtol, atol, ks, ys, yn):
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
    err = 0.0
    for i in range(dim):
        e = h * (_E1 * f[i] + _E3 * ks[1, i] + _E4 * ks[2, i] + _E5 * ks[3, i] + _E6 * ks[4, i]
                 + _E7 * ks[5, i])
        r = abs(e) / (atol[i] + rtol * max(abs(y[i]), abs(yn[i])))
        if r > err:
            err = r
    if not math.isfinite(err):
        return _NOT_FINITE, 0.0
    return _OK, err


@numba.njit(cache=True)
def _integrate(t_out, y0, p, l3k, l3c, bk, bc, rtol, atol, max_steps, out):
    """Integrate from t = 0 and write the state at each ``t_out`` into ``out[k, :]``.

    Returns a status code (0 ok). ``t_out`` is increasing and non-negative.
    """
    dim = 3
    y = y0.copy()
    f = np.empty(dim)
    ks = np.empty((6, dim))
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
        status, err = _dp_step(y, f, h, p, l3k, l3c, bk, bc, rtol, atol, ks, ys, yn)
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
def _integrate_batch(t_all, t_off, y0s, ps, l3k, l3c, l3_koff, l3_coff, bk, bc, b_koff, b_coff,
                     rtol, atol_rel, max_steps, out, status):
    """Integrate many curves.

    Curve j uses times t_all[t_off[j]:t_off[j+1]], L3 knots l3k[l3_koff[j]:l3_koff[j+1]] and
    coefficient columns l3c[:, l3_coff[j]:l3_coff[j+1]] (empty slices: the constant in
    ps[j]), and likewise for beta.
    """
    atol = np.empty(3)
    for j in range(y0s.shape[0]):
        y0 = y0s[j]
        atol[0] = atol_rel * max(y0[0], y0[1], 1.0)
        atol[1] = atol[0]
        atol[2] = atol_rel * y0[2]
        status[j] = _integrate(t_all[t_off[j]:t_off[j + 1]], y0, ps[j],
                               l3k[l3_koff[j]:l3_koff[j + 1]], l3c[:, l3_coff[j]:l3_coff[j + 1]],
                               bk[b_koff[j]:b_koff[j + 1]], bc[:, b_coff[j]:b_coff[j + 1]],
                               rtol, atol, max_steps, out[t_off[j]:t_off[j + 1]])


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
        t, v = check_table("temperature_nK", check_positive("temperature_nK", temperature_nK),
                           "values", check_positive("values", values), 4)
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


def _scalar(name, value, *, allow_zero=True):
    if isinstance(value, (float, int, np.floating, np.integer)) and not isinstance(value, bool):
        x = float(value)
        if math.isfinite(x) and (x > 0.0 or (allow_zero and x == 0.0)):
            return x          # fast path; anything else gets the full message below
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
    """Rate callable of T (nK) from the zero-range theory."""
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

_MAX_TABLE_EXTENSIONS = 12       # 1.5 * 2^11: three decades of heating
# Bose enhancement of the density becomes noticeable well before n lambda^3 reaches the
# condensation point 1.202 (common practice, no source): warn above this value.
_PSD_WARN = 0.5


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
        Three-body loss coefficient in cm^6/s (atoms lost, thermal gas, docs/conventions.md): a
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
    if a is not None:
        a = float(check_finite("a", a))
    mixture = n_d > 0.0
    if mixture and a is not None and a <= 0:
        raise LossfitValueError("a", f"Feshbach dimers (and beta) exist only for a > 0, got a = {a!r} a0")
    psd = float(trap.phase_space_density(n_a, temp0, sp))
    if psd > _PSD_WARN:
        warnings.warn(f"peak phase-space density {psd:.2g} at t = 0: the Boltzmann densities of "
                      "lossfit.experiment.trap (and the thermal L3) are unreliable close to degeneracy",
                      ValidityWarning, stacklevel=2)
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
    # start narrow and grow until the temperature stays inside. The lower margin covers
    # Runge-Kutta trial stages, which may undershoot the current T slightly.
    t_lo, t_hi = (temp0 * 0.98, temp0 * 1.5) if heating else (temp0, temp0)
    for _ in range(_MAX_TABLE_EXTENSIONS):
        p[_L3], l3_knots, l3_coefs = l3_spec.kernel_args(t_lo, t_hi)
        p[_BETA], b_knots, b_coefs = beta_spec.kernel_args(t_lo, t_hi)
        status = _integrate(times, y0, p, l3_knots, l3_coefs, b_knots, b_coefs, tol, atol,
                            1_000_000, out)
        which = {_OUT_OF_TABLE: l3_spec, _OUT_OF_BETA_TABLE: beta_spec}.get(status)
        if which is None or which.func is None:
            break
        t_hi *= 2.0
    if which is not None:
        if which.table is None:
            raise LossfitValueError(which.name, f"T(t) rose beyond {t_hi:g} nK; the rate callable "
                                    "cannot be tabulated that far (runaway heating?)")
        raise LossfitValueError(which.name, f"T(t) left the tabulated range "
                                f"[{which.table.t_min_nK:g}, {which.table.t_max_nK:g}] nK; "
                                "extend the table")
    if status != _OK:
        raise LossfitValueError("t", _STATUS_TEXT[status])
    atoms, temperature = out[:, 0], out[:, 2]
    return DecaySolution(t=times, atoms=atoms, temperature=temperature,
                         dimers=out[:, 1] if mixture else None,
                         mean_n2=p[_C3] * atoms ** 2 / temperature ** 3)


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
        Atom numbers.
    temperature : ndarray
        Temperatures in nK.
    dimers : ndarray
        Dimer numbers (zeros for atom-only curves).
    """

    atoms: np.ndarray
    temperature: np.ndarray
    dimers: np.ndarray


_NO_OFFSETS = {}


def _pack_rates(name, value, m, column):
    """Per-curve rates -> (constants into ``column``, knots, coefs, knot and column offsets)."""
    if isinstance(value, TabulatedRate):
        value = [value] * m
    if isinstance(value, (list, tuple)) and any(isinstance(x, TabulatedRate) for x in value):
        if len(value) != m or not all(isinstance(x, TabulatedRate) for x in value):
            raise LossfitValueError(name, f"a list of tables needs one TabulatedRate per curve ({m})")
        column[:] = 0.0
        knots = np.concatenate([x._knots for x in value])
        coefs = np.ascontiguousarray(np.concatenate([x._coefs for x in value], axis=1))
        k_off = np.cumsum([0] + [x._knots.size for x in value]).astype(np.int64)
        c_off = np.cumsum([0] + [x._coefs.shape[1] for x in value]).astype(np.int64)
        return knots, coefs, k_off, c_off
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
    numba kernel. Atom-only curves and atom-dimer mixtures may be mixed freely.

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
    """

    def __init__(self, times, *, species, traps_hz, heating=True, recombination_heating_nK=0.0,
                 rtol=1e-6):
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
        self._y0 = np.zeros((m, 3))

    @property
    def n2_coefficients(self):
        """Per-curve c with <n^2> = c N^2 / T^3, in cm^-6 nK^3."""
        return self._p[:, _C3].copy()

    @property
    def overlap_coefficients(self):
        """Per-curve d with (1/N_D) int n_A n_D = d N_A / T^(3/2), in cm^-3 nK^(3/2)."""
        return self._p[:, _CAD].copy()

    def __call__(self, n0, t0_nK, l3, gamma=0.0, *, n_dimers0=0.0, beta=0.0, gamma_dimer=0.0):
        """Integrate every curve.

        Parameters
        ----------
        n0 : float or array (n_curves,)
            Initial atom numbers.
        t0_nK : float or array (n_curves,)
            Initial temperatures in nK.
        l3 : float, array (n_curves,), TabulatedRate or sequence of TabulatedRate
            Three-body coefficients in cm^6/s (constants or tables in T).
        gamma : float or array (n_curves,)
            One-body loss rates of the atoms in 1/s.
        n_dimers0 : float or array (n_curves,)
            Initial dimer numbers (0 for atom-only curves).
        beta : float, array (n_curves,), TabulatedRate or sequence of TabulatedRate
            Atom-dimer relaxation coefficients in cm^3/s.
        gamma_dimer : float or array (n_curves,)
            One-body loss rates of the dimers in 1/s.

        Returns
        -------
        BatchResult
            ``atoms``, ``temperature`` (nK), ``dimers``, concatenated over curves.
        """
        m = self.n_curves
        self._y0[:, 0] = _per_curve_scalars("n0", n0, m)
        self._y0[:, 1] = _per_curve_scalars("n_dimers0", n_dimers0, m)
        self._y0[:, 2] = _per_curve_scalars("t0_nK", t0_nK, m, allow_zero=False)
        self._p[:, _GAMMA] = _per_curve_scalars("gamma", gamma, m)
        self._p[:, _GAMMA_D] = _per_curve_scalars("gamma_dimer", gamma_dimer, m)
        l3_args = _pack_rates("l3", l3, m, self._p[:, _L3])
        b_args = _pack_rates("beta", beta, m, self._p[:, _BETA])
        out = np.empty((self._t_all.size, 3))
        status = np.zeros(m, dtype=np.int64)
        _integrate_batch(self._t_all, self.offsets, self._y0, self._p, *l3_args, *b_args,
                         self._rtol, self._rtol * 1e-6, 1_000_000, out, status)
        bad = np.flatnonzero(status)
        if bad.size:
            j = int(bad[0])
            if status[j] == _OUT_OF_TABLE:
                raise LossfitValueError("l3", f"curve {j}: T(t) left the tabulated L3 range")
            if status[j] == _OUT_OF_BETA_TABLE:
                raise LossfitValueError("beta", f"curve {j}: T(t) left the tabulated beta range")
            raise LossfitValueError("n0", f"curve {j}: {_STATUS_TEXT[int(status[j])]}")
        return BatchResult(out[:, 0], out[:, 2], out[:, 1])


def simulate_decay_batch(times, *, species, traps_hz, n0, t0_nK, l3, gamma=0.0, heating=True,
                         recombination_heating_nK=0.0, n_dimers0=0.0, beta=0.0, gamma_dimer=0.0,
                         rtol=1e-6):
    """Integrate many curves at once; see :class:`DecayBatch` for repeated calls.

    Parameters are those of :class:`DecayBatch` and :meth:`DecayBatch.__call__`.

    Returns
    -------
    list of DecaySolution
        ``dimers`` is None for curves without dimers.
    """
    batch = DecayBatch(times, species=species, traps_hz=traps_hz, heating=heating,
                       recombination_heating_nK=recombination_heating_nK, rtol=rtol)
    res = batch(n0, t0_nK, l3, gamma, n_dimers0=n_dimers0, beta=beta, gamma_dimer=gamma_dimer)
    sols = []
    for j in range(batch.n_curves):
        sl = slice(batch.offsets[j], batch.offsets[j + 1])
        n, temp = res.atoms[sl].copy(), res.temperature[sl].copy()
        dimers = res.dimers[sl].copy() if batch._y0[j, 1] > 0 else None
        sols.append(DecaySolution(t=batch.times[j], atoms=n, temperature=temp, dimers=dimers,
                                  mean_n2=batch._p[j, _C3] * n ** 2 / temp ** 3))
    return sols

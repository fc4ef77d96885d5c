"""Feshbach-dimer binding energies against the scattering length: three models.

* ``"universal"``: E_b = hbar^2 / (m (a - abar)^2), the near-threshold law with the
  mean-scattering-length correction (Gribakin & Flambaum, PRA 48, 546 (1993); Chin,
  Grimm, Julienne & Tiesinga, RMP 82, 1225 (2010)).
* ``"effective-range"``: the two-channel zero-range model of a narrow resonance with
  its effective range R* (Petrov, PRL 93, 143201 (2004)): the scattering amplitude
  f = -1/(1/a + R* k^2 + i k) has its bound-state pole at k = i kappa with
  R* kappa^2 + kappa = 1/a, so kappa = (sqrt(1 + 4 R*/a) - 1)/(2 R*) and
  E_b = hbar^2 kappa^2 / m. It tends to hbar^2/(m a^2) as R* -> 0.
* ``"van-der-waals"``: the single-channel -C6/r^6 potential with a short-range boundary
  condition set by a and independent of energy (the quantum-defect picture of Gao, PRA 58,
  1728 (1998)). In units of beta6 = (m C6/hbar^2)^(1/4) = 2 r_vdW the radial equation is
  u'' + (x^-6 - kappa^2) u = 0; its zero-energy solutions are sqrt(x) J_(+-1/4)(1/(2 x^2)),
  which fix the log-derivative at a small x_s for a given a; the bound state is the kappa
  at which the solution integrated outward from x_s decays (scipy solve_ivp, DOP853, and
  brentq). In these units the binding depends on a/beta6 alone: the run time reads a table of
  kappa (a - abar) made once by scripts/make_vdw_binding_table.py. Measured accuracy and grid
  convergence: docs/feshbach.md.

Masses: m is the atomic mass (the dimer's reduced mass is m/2).
"""

__all__ = ["binding_energy_khz", "universal_scattering_length", "check_binding_model", "BINDING_MODELS",
           "vdw_scattering_length", "vdw_kappa"]

import functools
import math

import numpy as np
from scipy.integrate import solve_ivp
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq
from scipy.special import gamma, jv

from ..constants import HBAR
from ..errors import LossfitValueError, check_finite
from ..species import species as _lookup_species
from ..units import A0
from ..universal.tables import table_path

BINDING_MODELS = ("universal", "effective-range", "van-der-waals")
# zero-energy solution coefficients: u = A sqrt(x) J_1/4 + B sqrt(x) J_-1/4 -> x - a/beta6
_B_COEF = gamma(0.75) / math.sqrt(2.0)
_A_COEF = -math.sqrt(2.0) * gamma(1.25)
#: abar / beta6 = Gamma(3/4) / (2 sqrt 2 Gamma(5/4)) (Gribakin & Flambaum 1993)
ABAR_BETA6 = gamma(0.75) / (2.0 * math.sqrt(2.0) * gamma(1.25))
# short-range matching point and integrator tolerance (docs/feshbach.md: converged to 5e-6)
X_SHORT = 0.08
RTOL = 1e-10


def _prefactor_khz(sp):
    """hbar^2/(m a0^2)/h in kHz: E_b/h = this / (a/a0)^2 in the zero-range limit."""
    return HBAR / (2.0 * math.pi * sp.mass * A0 ** 2) / 1e3     # hbar^2/(m a0^2)/(2 pi hbar), Hz -> kHz


def _zero_energy(x, a_beta6):
    """(u, u') of the zero-energy solution with scattering length a (units beta6) at x."""
    z = 1.0 / (2.0 * x * x)
    sx = math.sqrt(x)
    jp, jm = jv(0.25, z), jv(-0.25, z)
    # d/dx [sqrt(x) J_nu(z)], z' = -1/x^3, J_nu' = (J_(nu-1) - J_(nu+1))/2
    djp = 0.5 * (jv(-0.75, z) - jv(1.25, z))
    djm = 0.5 * (jv(-1.25, z) - jv(0.75, z))
    up = 0.5 / sx * jp - sx * djp / x ** 3
    um = 0.5 / sx * jm - sx * djm / x ** 3
    a_coef = _A_COEF * a_beta6
    return a_coef * sx * jp + _B_COEF * sx * jm, a_coef * up + _B_COEF * um


def _outward(kappa, y0, x0, x1, rtol):
    def rhs(x, y):
        return (y[1], (kappa * kappa - x ** -6) * y[0])
    sol = solve_ivp(rhs, (x0, x1), y0, method="DOP853", rtol=rtol, atol=1e-14 * max(1.0, abs(y0[0])))
    return sol.y[:, -1]


def vdw_scattering_length(a_beta6, x_short=X_SHORT, rtol=RTOL, x_far=400.0):
    """The zero-energy scattering length (units beta6) obtained by integrating outward from
    the boundary condition set for ``a_beta6`` at ``x_short``: a check of the numerics."""
    u, du = _outward(0.0, list(_zero_energy(x_short, a_beta6)), x_short, x_far, rtol)
    return x_far - u / du


def vdw_kappa(a_beta6, x_short=X_SHORT, rtol=RTOL):
    """Binding wave number (units 1/beta6) of the most weakly bound s-wave state of
    -C6/r^6 with scattering length ``a_beta6`` (> abar/beta6 = 0.478)."""
    y0 = list(_zero_energy(x_short, a_beta6))

    def growing(kappa, x_far):
        # u -> A e^(kappa x) + B e^(-kappa x) at large x, and a bound state is A = 0:
        # A = (u' + kappa u) e^(-kappa x) / (2 kappa), smooth in kappa at a fixed x_far, so
        # brentq converges superlinearly (a normalised sign would reduce it to bisection)
        u, du = _outward(kappa, y0, x_short, x_far, rtol)
        return (du + kappa * u) * math.exp(-kappa * x_far) / (2.0 * kappa)

    # the weakest bound state lies near the universal 1/(a - abar), below the next one
    guess = 1.0 / (a_beta6 - ABAR_BETA6)
    grid = np.geomspace(0.2 * guess, 2.0 * guess, 12)
    values = [growing(k, max(8.0, 12.0 / k)) for k in grid]
    for k0, k1, v0, v1 in zip(grid[:-1], grid[1:], values[:-1], values[1:]):
        if v0 * v1 < 0:
            # x_far >= 12/kappa over the whole bracket: the decaying part is e^-24 down
            return brentq(growing, k0, k1, args=(max(8.0, 12.0 / k0),), xtol=1e-14, rtol=1e-12)
    raise LossfitValueError("a", f"no weakly bound van der Waals state found for a = {a_beta6:g} beta6")


def check_binding_model(model, r_star):
    """Validate a binding-energy model and its R* (a0, effective-range model only); returns
    R* as a float, or None."""
    if model not in BINDING_MODELS:
        raise LossfitValueError("model", f"must be one of {list(BINDING_MODELS)}, got {model!r}")
    if (r_star is not None) != (model == "effective-range"):
        raise LossfitValueError("r_star", "is the effective range of model='effective-range' (a0) and only of it")
    if r_star is None:
        return None
    r = float(check_finite("r_star", r_star))
    if r < 0:
        raise LossfitValueError("r_star", f"must be >= 0 a0, got {r!r}")
    return r


def universal_scattering_length(E_b_kHz, species):
    """The inverse of the universal law: a = abar + hbar / sqrt(m E_b), in a0 (E_b/h in kHz)."""
    sp = _lookup_species(species)
    return sp.abar + np.sqrt(_prefactor_khz(sp) / np.asarray(E_b_kHz, dtype=float))


def binding_energy_khz(a, species, *, model="universal", r_star=None):
    """Feshbach-dimer binding energy E_b / h in kHz at scattering length ``a``.

    Parameters
    ----------
    a : float or array
        Scattering length in a0 (> abar for "universal" and "van-der-waals", > 0 for
        "effective-range").
    species : str or Species
    model : {"universal", "effective-range", "van-der-waals"}
        Module docstring.
    r_star : float, optional
        The resonance's effective range R* in a0 (``model="effective-range"`` only, >= 0).

    Returns
    -------
    float or ndarray
        E_b / h in kHz.
    """
    sp = _lookup_species(species)
    arr = check_finite("a", a)
    r = check_binding_model(model, r_star)
    pref = _prefactor_khz(sp)
    if model == "effective-range":
        if np.any(arr <= 0):
            raise LossfitValueError("a", "a dimer needs a > 0")
        kappa = 1.0 / arr if r == 0 else (np.sqrt(1.0 + 4.0 * r / arr) - 1.0) / (2.0 * r)   # 1/a0
        out = pref * kappa ** 2
    else:
        if np.any(arr <= sp.abar):
            raise LossfitValueError("a", f"model {model!r} needs a > abar = {sp.abar:.2f} a0")
        if model == "universal":
            out = pref / (arr - sp.abar) ** 2
        else:
            beta6 = 2.0 * sp.r_vdw                                       # a0
            out = pref * (_vdw_g(beta6 / (arr - sp.abar)) / (arr - sp.abar)) ** 2
    return out[()] if np.ndim(out) == 0 else out


@functools.lru_cache(maxsize=1)
def _vdw_table():
    """The shipped g(s) = kappa (a - abar) against s = beta6/(a - abar), splined in ln s."""
    with np.load(table_path("vdw_binding.npz")) as d:
        s, g = np.array(d["s"]), np.array(d["g"])
    return s, g, CubicSpline(np.log(s), g)


def _vdw_g(s):
    s = np.asarray(s, dtype=float)
    grid, g, spline = _vdw_table()
    if np.any(s > grid[-1]):
        raise LossfitValueError("a", f"model 'van-der-waals' is tabulated for a >= abar + beta6/{grid[-1]:g} "
                                f"(a >= {ABAR_BETA6 + 1 / grid[-1]:.3f} beta6 = 2 r_vdW x that)")
    # below the grid g runs linearly to its universal limit 1 (measured: g - 1 = 0.218 s there)
    low = s < grid[0]
    out = np.where(low, 1.0 + (g[0] - 1.0) * s / grid[0], spline(np.log(np.maximum(s, grid[0]))))
    return out
    return out[()] if np.ndim(out) == 0 else out

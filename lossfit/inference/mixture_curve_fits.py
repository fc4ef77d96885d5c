"""Least-squares fits of one decay curve of a B-X mixture: the event coefficient K3.

The model is :mod:`lossfit.experiment.mixture_decay` (two harmonic traps, B-B-X loss with
two B and one X per event, one-body loss, optional anti-evaporation). A curve counts B,
X or both at the hold times t; the fit adjusts K3 (events, cm^6/s), the initial numbers
N_B0 and N_X0 and, when asked, the one-body rates Gamma_B and Gamma_X, by weighted least
squares (:func:`scipy.optimize.least_squares`, trust-region reflective so that K3 >= 0
and Gamma >= 0). The temperatures start at the given measured values and are not
fitted. The covariance is (J^T J)^-1 at the optimum, J the Jacobian of the normalised
residuals (the Gauss-Newton estimate, as :mod:`lossfit.inference.curve_fits`). Fit
coordinates are K3/(its first guess), ln N_B0, ln N_X0 and Gamma t_max, all of order one.

The initial number of a species that is not counted must be given (``n_b0=`` or
``n_x0=``): a curve of X alone sees only K3 N_B^2, so without it K3 and N_B0 cannot be
told apart. Given with its error (``n_b0_err=``) it is fitted under that Gaussian
constraint; without an error it is held fixed. For a counted species the same two
arguments add an independent measurement of the initial number.

Optional sampling (``mcmc=True`` or a dict): the same residuals as a Gaussian likelihood
with flat priors in the fit coordinates, sampled by
:func:`lossfit.inference.curve_fits.sample_residual_posterior`; K3 and its error are then
the posterior median and half the central 68 % interval.

:func:`mixture_spectrum_from_fits` turns several fits (one per scattering length) into a
mixture :class:`~lossfit.data.spectra.LossSpectrum` (``kind="l3"``, K3 as events, the
system's name as species, ``temperature_x`` where the clouds have their own temperatures),
ready for ``lf.fit(spectrum, species=system, ...)``.
"""

__all__ = ["MixtureCurveFit", "fit_mixture_curve", "mixture_spectrum_from_fits"]

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..data.spectra import LossSpectrum
from ..errors import (
    ConvergenceWarning,
    LossfitValueError,
    check_finite,
    check_nonzero,
    check_positive,
    check_times,
    user_stacklevel,
)
from ..experiment.mixture_decay import MixtureDecay, MixtureDecayModel
from .curve_fits import half_width_68, mcmc_settings, sample_residual_posterior

# Finite-difference step of the Jacobian, relative to max(1, |x|): far above the
# integrator's relative error (rtol 1e-10 by default), far below the parameters' widths.
_DIFF_STEP = 1e-6
_SPECIES = ("b", "x")


@dataclass
class MixtureCurveFit:
    """Result of :func:`fit_mixture_curve`.

    Attributes
    ----------
    system : HeteronuclearSystem
    a : float or None
        Scattering length of the curve in a0, if given.
    k3, k3_error : float
        Fitted event coefficient K3 and its one-sigma error in cm^6/s (events:
        dN_X/dt = -K3 int n_B^2 n_X d^3r; with ``mcmc``: posterior median and half the
        central 68 % interval).
    temperature, temperature_x : float
        Time averages of the model's T_B and T_X over the hold times, in nK (equal with
        one common temperature).
    common_temperature : bool
    counted : str
        ``"b"``, ``"x"`` or ``"both"``: which species the curve counts.
    params, errors : dict
        Best-fit values and one-sigma errors of ``k3`` (cm^6/s), ``n_b0``, ``n_x0``,
        ``gamma_b`` and ``gamma_x`` (1/s); a held value has error 0.
    coords : list of str
        The fitted coordinates, in the order of ``covariance``.
    covariance : ndarray
        Covariance of ``coords``.
    chi2 : float
    dof : int
    model : MixtureDecay
        The fitted N_B, N_X, T_B, T_X at the curve's times.
    residuals, jacobian : ndarray
        Normalised residuals (model - data)/error of every datum and constraint, and their
        derivatives with respect to ``coords``.
    heating : bool
    method : {"least_squares", "mcmc"}
    samples : dict or None
        With ``mcmc``: posterior samples of ``params`` (same units).
    tau : ndarray or None
        With ``mcmc``: autocorrelation times of ``coords`` in steps.
    label : str
    """

    system: object
    a: float | None
    k3: float
    k3_error: float
    temperature: float
    temperature_x: float
    common_temperature: bool
    counted: str
    params: dict
    errors: dict
    coords: list
    covariance: np.ndarray
    chi2: float
    dof: int
    model: MixtureDecay
    residuals: np.ndarray
    jacobian: np.ndarray
    heating: bool
    method: str = "least_squares"
    samples: dict | None = None
    tau: np.ndarray | None = None
    label: str = "mixture curve"


def _series(name, value, err_name, err, n):
    """A counted series and its errors (both or neither), each of length ``n``."""
    if value is None and err is None:
        return None, None
    if value is None or err is None:
        missing = name if value is None else err_name
        raise LossfitValueError(missing, f"give {name} and {err_name} together")
    v = check_finite(name, value)
    e = check_positive(err_name, err)
    for arg, arr in ((name, v), (err_name, e)):
        if arr.shape != (n,):
            raise LossfitValueError(arg, f"needs one entry per time ({n}), got shape {arr.shape}")
    return v, e


def _initial(name, value, err_name, err, counted):
    """(value, error) of an initial number; error None means held fixed."""
    if value is None:
        if err is not None:
            raise LossfitValueError(name, f"{err_name} is given without {name}")
        if not counted:
            raise LossfitValueError(name, f"this species is not counted: give its initial number {name}= "
                                    f"(with {err_name}= to fit it under that constraint)")
        return None, None
    v = check_positive(name, value)
    if v.ndim != 0:
        raise LossfitValueError(name, f"must be a single number, got shape {v.shape}")
    if err is None:
        if counted:
            raise LossfitValueError(err_name, f"a counted species' {name} is a measurement: give its error")
        return float(v), None
    e = check_positive(err_name, err)
    if e.ndim != 0:
        raise LossfitValueError(err_name, f"must be a single number, got shape {e.shape}")
    return float(v), float(e)


def _gamma(name, value):
    if value is None:
        return None
    g = check_positive(name, value, allow_zero=True)
    if g.ndim != 0:
        raise LossfitValueError(name, f"must be a single rate in 1/s or None (fit it), got shape {g.shape}")
    return float(g)


class _MixtureResiduals:
    """Normalised residuals of one mixture curve as a function of the fit coordinates."""

    def __init__(self, model, data, initial, gammas):
        self.model = model
        self.data = data                   # species -> (values, errors) or (None, None)
        self.initial = initial             # species -> (value, error or None)
        self.gammas = gammas               # species -> fixed rate or None (fitted)
        self.t_max = float(model.t[-1]) if model.t[-1] > 0 else 1.0
        self.k3_scale = 1.0
        self.free_n0 = [s for s in _SPECIES if data[s][0] is not None or initial[s][1] is not None]
        self.free_gamma = [s for s in _SPECIES if gammas[s] is None]
        self.coords = (["k3/scale"] + [f"ln_n_{s}0" for s in self.free_n0]
                       + [f"gamma_{s}_t" for s in self.free_gamma])
        self.n_res = (sum(d[0].size for d in data.values() if d[0] is not None)
                      + sum(1 for s in _SPECIES if initial[s][1] is not None))

    def unpack(self, x):
        p = {"k3": x[0] * self.k3_scale}
        i = 1
        for s in _SPECIES:
            if s in self.free_n0:
                p[f"n_{s}0"] = math.exp(x[i])
                i += 1
            else:
                p[f"n_{s}0"] = self.initial[s][0]
        for s in _SPECIES:
            if s in self.free_gamma:
                p[f"gamma_{s}"] = x[i] / self.t_max
                i += 1
            else:
                p[f"gamma_{s}"] = self.gammas[s]
        return p

    def solve(self, p):
        return self.model(p["n_b0"], p["n_x0"], p["k3"], p["gamma_b"], p["gamma_x"])

    def residuals_of(self, p, solution):
        parts = []
        for s, numbers in (("b", solution.n_b), ("x", solution.n_x)):
            values, errors = self.data[s]
            if values is not None:
                parts.append((numbers - values) / errors)
        for s in _SPECIES:
            value, error = self.initial[s]
            if error is not None:
                parts.append(np.array([(p[f"n_{s}0"] - value) / error]))
        return np.concatenate(parts)

    def __call__(self, x):
        p = self.unpack(x)
        try:
            solution = self.solve(p)
        except LossfitValueError:
            # an absurd trial step (integration failure): a large, finite penalty sends the
            # optimiser back
            return np.full(self.n_res, 1e6)
        return self.residuals_of(p, solution)


def _first_guess(residuals, model):
    """K3 from the fractional loss of the counted species over the hold, at the initial
    densities (exponential decay at fixed partner number), and the start coordinates."""
    n0 = {}
    for s in _SPECIES:
        values = residuals.data[s][0]
        given = residuals.initial[s][0]
        n0[s] = given if given is not None else float(values[0] if values[0] > 0 else np.max(values))
        if not n0[s] > 0:
            raise LossfitValueError(f"n_{s}", "has no positive count to start the fit from")
    geometry = model.trap.overlap(1.0, 1.0, model.t0_nK, model.t0_x_nK).integral
    span = max(float(model.t[-1] - model.t[0]), 1e-12)
    counted = "x" if residuals.data["x"][0] is not None else "b"
    values = residuals.data[counted][0]
    frac = max(float(values[-1]), 1e-3 * n0[counted]) / n0[counted]
    rate = -math.log(min(frac, 0.99)) / span                        # 1/s
    # dN_X/dt = -K3 G N_B^2 N_X, dN_B/dt = -2 K3 G N_B N_X N_B (docs/heteronuclear.md)
    per_k3 = geometry * n0["b"] ** 2 if counted == "x" else 2.0 * geometry * n0["b"] * n0["x"]
    k3 = rate / per_k3
    x = [1.0] + [math.log(n0[s]) for s in residuals.free_n0] + [0.01 for _ in residuals.free_gamma]
    return k3, np.array(x)


def fit_mixture_curve(t, *, species, trap, t0_nK, t0_x_nK=None, n_b=None, n_b_err=None, n_x=None,
                      n_x_err=None, n_b0=None, n_b0_err=None, n_x0=None, n_x0_err=None, gamma_b=0.0,
                      gamma_x=0.0, heating=True, a=None, label=None, rtol=1e-10, mcmc=None):
    """Fit the event coefficient K3 to one decay curve of a B-X mixture.

    Parameters
    ----------
    t : array_like, shape (n,)
        Hold times in s (>= 0, strictly increasing; the model starts at t = 0).
    species : str or HeteronuclearSystem
        The B-B-X system, e.g. ``"133Cs-133Cs-6Li"``.
    trap : MixtureTrap
        Trap frequencies of both species and gravity.
    t0_nK : float
        Measured initial temperature in nK (of both clouds, or of B with ``t0_x_nK``).
    t0_x_nK : float, optional
        Initial X temperature in nK: the clouds then keep separate temperatures.
    n_b, n_b_err : array_like, shape (n,), optional
        Counted B atoms and their one-sigma errors at ``t``.
    n_x, n_x_err : array_like, shape (n,), optional
        Counted X atoms and their errors. At least one species must be counted.
    n_b0, n_b0_err, n_x0, n_x0_err : float, optional
        A measured initial number and its error (a Gaussian constraint). For a species
        that is not counted ``n_s0`` is required; without its error it is held fixed.
    gamma_b, gamma_x : float or None
        One-body loss rates in 1/s held fixed (default 0: measured apart from the
        resonance); None fits them (>= 0).
    heating : bool
        Anti-evaporation in the model (:mod:`lossfit.experiment.mixture_decay`).
    a : float, optional
        Scattering length in a0, carried to :func:`mixture_spectrum_from_fits`.
    label : str, optional
        Name of the curve in messages.
    rtol : float
        Integrator tolerance (tight: the Jacobian is taken by finite differences).
    mcmc : bool or dict, optional
        Also sample the posterior (module docstring): ``True`` or a dict with ``walkers``,
        ``steps`` and ``seed`` (:func:`lossfit.inference.curve_fits.mcmc_settings`).

    Returns
    -------
    MixtureCurveFit
    """
    settings = mcmc_settings(mcmc)
    times = check_times("t", t)
    model = MixtureDecayModel(times, species=species, trap=trap, t0_nK=t0_nK, t0_x_nK=t0_x_nK,
                              heating=heating, rtol=rtol)
    data = {"b": _series("n_b", n_b, "n_b_err", n_b_err, times.size),
            "x": _series("n_x", n_x, "n_x_err", n_x_err, times.size)}
    if data["b"][0] is None and data["x"][0] is None:
        raise LossfitValueError("n_x", "give the counted atoms of at least one species (n_b= and n_b_err=, "
                                "n_x= and n_x_err=, or both)")
    initial = {"b": _initial("n_b0", n_b0, "n_b0_err", n_b0_err, data["b"][0] is not None),
               "x": _initial("n_x0", n_x0, "n_x0_err", n_x0_err, data["x"][0] is not None)}
    gammas = {"b": _gamma("gamma_b", gamma_b), "x": _gamma("gamma_x", gamma_x)}
    if a is not None:
        a = check_nonzero("a", a)
        if a.ndim != 0:
            raise LossfitValueError("a", f"must be one scattering length in a0, got shape {a.shape}")
        a = float(a)
    label = label or f"{model.system.name} curve" + ("" if a is None else f" at a = {a:g} a0")
    residuals = _MixtureResiduals(model, data, initial, gammas)
    counted = "both" if all(data[s][0] is not None for s in _SPECIES) else \
        next(s for s in _SPECIES if data[s][0] is not None)

    k3_scale, x0 = _first_guess(residuals, model)
    residuals.k3_scale = k3_scale
    lower = np.full(x0.size, -np.inf)
    lower[0] = 0.0
    lower[x0.size - len(residuals.free_gamma):] = 0.0
    dof = residuals.n_res - x0.size
    if dof < 1:
        raise LossfitValueError("t", f"{label}: {residuals.n_res} data for {x0.size} parameters; "
                                "the curve needs more points")
    fit = least_squares(residuals, x0, bounds=(lower, np.full(x0.size, np.inf)), method="trf", x_scale=1.0,
                        diff_step=_DIFF_STEP, xtol=1e-10, ftol=1e-12, gtol=1e-10, max_nfev=200 * x0.size)
    if not fit.success:
        warnings.warn(f"{label}: least squares did not converge ({fit.message})", ConvergenceWarning,
                      stacklevel=user_stacklevel())
    try:
        cov = np.linalg.inv(fit.jac.T @ fit.jac)
    except np.linalg.LinAlgError:
        raise LossfitValueError("t", f"{label}: the data do not constrain {', '.join(residuals.coords)} "
                                "(singular Jacobian); count another species or give the initial numbers") from None
    p = residuals.unpack(fit.x)
    errors = _linearised_errors(residuals, p, cov)
    solution = residuals.solve(p)
    k3, k3_error = p["k3"], errors["k3"]
    extra = {}
    if settings is not None:
        flat, tau = sample_residual_posterior(residuals, fit.x, cov, lower, settings, label=label)
        draws = [residuals.unpack(x) for x in flat]
        samples = {k: np.array([d[k] for d in draws]) for k in p}
        errors = {k: half_width_68(v) if k in _free_params(residuals) else 0.0 for k, v in samples.items()}
        k3, k3_error = float(np.median(samples["k3"])), errors["k3"]
        cov = np.cov(flat.T)
        extra = {"method": "mcmc", "samples": samples, "tau": tau}
    return MixtureCurveFit(system=model.system, a=a, k3=float(k3), k3_error=float(k3_error),
                           temperature=float(np.mean(solution.temperature)),
                           temperature_x=float(np.mean(solution.temperature_x)),
                           common_temperature=model.common_temperature, counted=counted, params=p,
                           errors=errors, coords=list(residuals.coords), covariance=cov,
                           chi2=float(fit.fun @ fit.fun), dof=int(dof), model=solution,
                           residuals=fit.fun.copy(), jacobian=fit.jac.copy(), heating=model.heating,
                           label=label, **extra)


def _free_params(residuals):
    return {"k3"} | {f"n_{s}0" for s in residuals.free_n0} | {f"gamma_{s}" for s in residuals.free_gamma}


def _linearised_errors(residuals, p, cov):
    """One-sigma errors of the parameters from the covariance of the coordinates."""
    sd = np.sqrt(np.diag(cov))
    errors = {"k3": residuals.k3_scale * sd[0], "n_b0": 0.0, "n_x0": 0.0, "gamma_b": 0.0, "gamma_x": 0.0}
    i = 1
    for s in residuals.free_n0:
        errors[f"n_{s}0"] = p[f"n_{s}0"] * sd[i]          # d N = N d ln N
        i += 1
    for s in residuals.free_gamma:
        errors[f"gamma_{s}"] = sd[i] / residuals.t_max
        i += 1
    return {k: float(v) for k, v in errors.items()}


def mixture_spectrum_from_fits(fits, *, a=None, label=None):
    """A mixture loss spectrum from per-curve fits, one point per fit.

    Parameters
    ----------
    fits : sequence of MixtureCurveFit
        Fits of the same B-B-X system.
    a : array_like, optional
        Scattering lengths in a0, one per fit; default: each fit's ``a``.
    label : str, optional

    Returns
    -------
    LossSpectrum
        ``kind="l3"``, values K3 (events, cm^6/s) with their errors, ``species`` the system's
        name, ``temperature`` the fits' time-averaged T_B and, if any fit has two
        temperatures, ``temperature_x`` its time-averaged T_X (T_B for one-temperature fits).
    """
    fits = list(fits) if not isinstance(fits, MixtureCurveFit) else [fits]
    if not fits or not all(isinstance(f, MixtureCurveFit) for f in fits):
        raise LossfitValueError("fits", "must be a non-empty sequence of MixtureCurveFit (fit_mixture_curve)")
    names = {f.system.label for f in fits}
    if len(names) != 1:
        raise LossfitValueError("fits", f"mix systems {sorted(names)}; a spectrum holds one")
    if a is None:
        missing = [f.label for f in fits if f.a is None]
        if missing:
            raise LossfitValueError("a", f"give the scattering lengths: fits without one: {missing[:3]}")
        a = [f.a for f in fits]
    a = np.atleast_1d(check_nonzero("a", a))
    if a.shape != (len(fits),):
        raise LossfitValueError("a", f"needs one scattering length per fit ({len(fits)}), got shape {a.shape}")
    separate = any(not f.common_temperature for f in fits)
    system = fits[0].system
    return LossSpectrum(a, [f.temperature for f in fits], [f.k3 for f in fits], [f.k3_error for f in fits],
                        kind="l3", label=label or f"K3 from {len(fits)} mixture decay curves", species=system.name,
                        temperature_x=[f.temperature_x for f in fits] if separate else None)

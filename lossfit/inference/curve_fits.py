"""Per-curve least-squares fits of decay curves: the "two-stage" route to a loss spectrum.

Each curve is fitted on its own with a *constant* loss coefficient (L3 for atom
curves, beta for dimer curves) and its nuisances -- initial number N0, initial
temperature T0 and one-body loss rate Gamma -- through the rate equations of
:mod:`lossfit.experiment.decay` with anti-evaporation and recombination heating (Weber et al.,
PRL 91, 123201 (2003)). The fit is weighted least squares
(:func:`scipy.optimize.least_squares`, trust-region reflective so that Gamma >= 0);
the covariance is (J^T J)^-1 at the optimum, J the Jacobian of the normalised
residuals (the usual Gauss-Newton estimate, e.g. Press et al., Numerical Recipes,
ch. 15). Parameters are fitted in L3 / (its first guess), ln N0, ln T0 and
Gamma t_max, so that all are of order one; L3 and Gamma are bounded below by 0 (a curve
without detectable three-body loss yields L3 = 0 with a finite error bar, usable in a
spectrum fit).

Conventions of the derived spectrum (:func:`spectrum_from_curves`): the point's
temperature is the time average of the fitted T(t) over the measured hold times --
the constant-L3 model cannot say more when L3 depends on T, which is one reason the
global fit (:mod:`lossfit.inference.global_fit`) starts from the curves instead. At
a > 0 the constant L3 of an atom curve is an effective one: it fits the number the image
counts (N + 2 N_D with ``counts_dimers``) as if the dimers followed the atoms
quasi-statically, i.e. the observed L3 at the curve's trap depth, which the derived
spectrum carries (docs/global-fit.md says where that picture fails).

Dimer curves: the atom-dimer mixture loses dimers by relaxation (beta) and one-body
decay (Gamma_D); the partner atoms are lost by relaxation only (their own three-body
loss and one-body loss are neglected -- state this when it matters: atoms in a
mixture are usually far less dense than needed for L3 to compete).

Optional sampling (``fit_curve(..., mcmc=True)``): the same residuals define a
Gaussian likelihood, with flat priors in the fit coordinates (loss coefficient >= 0,
ln N0, ln T0, Gamma >= 0); emcee's ensemble (Foreman-Mackey et al., PASP 125, 306
(2013)) starts in a small ball around the least-squares optimum. The reported value
and error are then the posterior median and half the central 68 % interval -- the
honest error bar for a curve whose loss is barely detected (the posterior piles up
against L3 = 0, where the linearised covariance is meaningless).
"""

__all__ = ["CurveFit", "fit_curve", "fit_curves_individually", "spectrum_from_curves", "mcmc_settings",
           "sample_residual_posterior", "half_width_68"]

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..data.curves import DecayCurve, check_curves
from ..data.spectra import LossSpectrum
from ..dimer_kinetics import DEFAULT_DEPTH_OVER_T
from ..errors import ConvergenceWarning, LossfitValueError, check_positive, user_stacklevel
from ..experiment.decay import DecayBatch
from ..experiment.trap import as_trap
from ..species import species as _lookup_species
from .diagnostics import autocorrelation_times
from .posterior import auto_burn
from .sampling import sample


@dataclass
class CurveFit:
    """Result of :func:`fit_curve`.

    Attributes
    ----------
    curve : DecayCurve
    a : float
        Scattering length in a0 (from the curve, or its field and the resonance).
    kind : {"l3", "beta"}
    value, error : float
        Fitted L3 (cm^6/s) or beta (cm^3/s) and its one-sigma uncertainty (with ``mcmc``:
        posterior median and half the central 68 % interval).
    temperature : float
        Time-averaged fitted temperature in nK (the temperature of the derived point).
    params : dict
        Best-fit values: ``value``, ``n0`` (atoms or dimers), ``t0_nK``, ``gamma`` (1/s),
        and ``n_atoms0`` for dimer curves.
    errors : dict
        One-sigma uncertainties of ``params`` (linearised; with ``mcmc``: half the central
        68 % posterior interval).
    covariance : ndarray
        Covariance of the fitted coordinates ``coords`` (value / its first guess, ln n0,
        [ln n_atoms0], ln t0, gamma * t_max).
    coords : list of str
    chi2 : float
    dof : int
    model_atoms, model_temperature : ndarray
        Fitted N(t) (dimers for dimer curves) and T(t) in nK at the curve's times.
    model_partner : ndarray or None
        Fitted partner-atom number for dimer curves.
    residuals : ndarray
        Normalised residuals (model - data) / error of every fitted datum.
    jacobian : ndarray
        d residuals / d coords at the optimum.
    recombination_heating_nK : float
        T_h used in the model, nK.
    method : {"least_squares", "mcmc"}
        How ``value``, ``error`` and ``errors`` were obtained.
    samples : dict or None
        With ``mcmc``: posterior samples of ``params`` after burn-in (same units).
    tau : ndarray or None
        With ``mcmc``: integrated autocorrelation times of the fit coordinates (steps).
    """

    curve: DecayCurve
    a: float
    kind: str
    value: float
    error: float
    temperature: float
    params: dict
    errors: dict
    covariance: np.ndarray
    coords: list
    chi2: float
    dof: int
    model_atoms: np.ndarray
    model_temperature: np.ndarray
    model_partner: np.ndarray | None
    residuals: np.ndarray
    jacobian: np.ndarray
    recombination_heating_nK: float = 0.0
    method: str = "least_squares"
    samples: dict | None = None
    tau: np.ndarray | None = None


class _CurveModel:
    """Residuals of one curve as a function of its fit coordinates."""

    def __init__(self, curve, sp, heating, recombination_heating_nK, gamma, rtol):
        self.curve = curve
        self.dimers = curve.kind == "dimers"
        self.batch = DecayBatch([curve.t], species=sp, traps_hz=as_trap(curve), heating=heating,
                                recombination_heating_nK=recombination_heating_nK, rtol=rtol)
        self._copies = {1: self.batch}
        self.t_max = float(curve.t[-1])
        self.gamma_fixed = gamma
        self.value_scale = 1.0
        self.coords = (["value/scale", "ln_n0"] + (["ln_n_atoms0"] if self.dimers else []) + ["ln_t0"]
                       + (["gamma_t"] if gamma is None else []))

    def unpack(self, x):
        i = 0
        out = {"value": x[0] * self.value_scale, "n0": math.exp(x[1])}
        i = 2
        if self.dimers:
            out["n_atoms0"] = math.exp(x[i])
            i += 1
        out["t0_nK"] = math.exp(x[i])
        out["gamma"] = self.gamma_fixed if self.gamma_fixed is not None else x[i + 1] / self.t_max
        return out

    def solve(self, p, batch=None):
        """(counted, temperature, partner atoms or None) at parameters ``p``: floats for the
        curve, or arrays for the copies of it in ``batch`` (:meth:`DecayBatch.repeated`)."""
        batch = self.batch if batch is None else batch
        if self.dimers:
            res = batch(p["n_atoms0"], p["t0_nK"], 0.0, 0.0, n_dimers0=p["n0"], beta=p["value"],
                        gamma_dimer=p["gamma"])
            return res.dimers, res.temperature, res.atoms
        res = batch(p["n0"], p["t0_nK"], p["value"], p["gamma"])
        return res.atoms, res.temperature, None

    def residuals_of(self, main, temp, partner):
        c = self.curve
        parts = [(main - c.atoms) / c.atoms_err]
        if c.temperature_series:
            parts.append((temp - c.temperature) / c.temperature_err)
        if self.dimers and c.partner_atoms.ndim == 1:
            parts.append((partner - c.partner_atoms) / c.partner_atoms_err)
        return np.concatenate(parts)

    def priors_of(self, p):
        # single measurements of an initial value act as Gaussian constraints
        c = self.curve
        parts = []
        if not c.temperature_series:
            parts.append((p["t0_nK"] - float(c.temperature)) / float(c.temperature_err))
        if self.dimers and c.partner_atoms.ndim == 0 and c.partner_atoms_err is not None:
            parts.append((p["n_atoms0"] - float(c.partner_atoms)) / float(c.partner_atoms_err))
        return np.array(parts)

    def __call__(self, x):
        p = self.unpack(x)
        try:
            main, temp, partner = self.solve(p)
        except LossfitValueError:
            # the optimiser tried an absurd step (integration failure): a large, finite
            # penalty sends it back
            return np.full(self.n_res, 1e6)
        return np.concatenate([self.residuals_of(main, temp, partner), self.priors_of(p)])

    def residuals_many(self, xs):
        """Residuals of every row of ``xs`` (W, ndim) from one batched integration of W
        copies of the curve, row by row as :meth:`__call__` gives them (the batch
        integrates each copy alone, with the same arithmetic)."""
        params = [self.unpack(x) for x in xs]
        count = len(params)
        if count not in self._copies:
            self._copies[count] = self.batch.repeated(count)
        try:
            main, temp, partner = self.solve({name: np.array([p[name] for p in params]) for name in params[0]},
                                             self._copies[count])
        except LossfitValueError:
            return np.array([self(x) for x in xs])          # the failing rows get their penalty
        main, temp = main.reshape(count, -1), temp.reshape(count, -1)
        partner = [None] * count if partner is None else partner.reshape(count, -1)
        return np.array([np.concatenate([self.residuals_of(main[w], temp[w], partner[w]), self.priors_of(p)])
                         for w, p in enumerate(params)])


def _n_residuals(curve):
    n = len(curve) * (1 + int(curve.temperature_series))
    n += 0 if curve.temperature_series else 1
    if curve.kind == "dimers":
        n += len(curve) if curve.partner_atoms.ndim == 1 else int(curve.partner_atoms_err is not None)
    return n


def _initial_guess(curve, model, trap, sp):
    """Start values from the closed form without heating, N = N0 / sqrt(1 + 2 K N0^2 t)."""
    n = curve.atoms
    n0 = float(n[0]) if n[0] > 0 else float(np.max(n))
    t0 = curve.initial_temperature
    frac = max(float(n[-1]), 1e-3 * n0) / n0
    span = max(float(curve.t[-1] - curve.t[0]), 1e-12)
    if model.dimers:
        n_a = float(curve.partner_atoms if curve.partner_atoms.ndim == 0 else curve.partner_atoms[0])
        # dN_D/dt = -beta d N_A / T^1.5 N_D at fixed N_A: exponential decay
        rate = -math.log(min(frac, 0.99)) / span
        value = rate * t0 ** 1.5 / (trap.overlap_coefficient(sp) * max(n_a, 1.0))
        x = [value, math.log(n0), math.log(max(n_a, 1.0)), math.log(t0)]
    else:
        k = (1.0 / min(frac, 0.99) ** 2 - 1.0) / (2.0 * n0 ** 2 * span)
        value = k * t0 ** 3 / trap.n2_coefficient(sp)
        x = [value, math.log(n0), math.log(t0)]
    if model.gamma_fixed is None:
        x.append(0.01)
    return np.array(x)


_MCMC_DEFAULTS = {"walkers": 16, "steps": 1500, "seed": None}


def mcmc_settings(mcmc):
    """The sampler settings of a per-curve fit's ``mcmc=`` argument.

    Parameters
    ----------
    mcmc : None, bool or dict
        None or False: no sampling; True: the defaults (16 walkers, 1500 steps, no seed);
        a dict may override ``walkers`` (>= 4), ``steps`` (>= 50) and ``seed``.

    Returns
    -------
    dict or None
        ``walkers``, ``steps`` and ``seed``, or None without sampling.
    """
    if mcmc is None or mcmc is False:
        return None
    if mcmc is True:
        return dict(_MCMC_DEFAULTS)
    if not isinstance(mcmc, dict):
        raise LossfitValueError("mcmc", f"must be True, False or a dict of walkers/steps/seed, got {mcmc!r}")
    unknown = sorted(set(mcmc) - set(_MCMC_DEFAULTS))
    if unknown:
        raise LossfitValueError("mcmc", f"unknown settings {unknown}; allowed: walkers, steps, seed")
    out = dict(_MCMC_DEFAULTS, **mcmc)
    for name, lo in (("walkers", 4), ("steps", 50)):
        v = out[name]
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < lo:
            raise LossfitValueError("mcmc", f"{name} must be an integer >= {lo}, got {v!r}")
    return out


class _CurveLogProb:
    """Gaussian log-likelihood of one curve with flat priors in the fit coordinates; a
    walker set (W, ndim) at once where the residuals have ``residuals_many``."""

    def __init__(self, model, lower):
        self.model = model
        self.lower = lower
        self.vectorized = hasattr(model, "residuals_many")

    def __call__(self, x):
        if x.ndim == 2:
            out = np.full(x.shape[0], -math.inf)
            inside = np.flatnonzero(np.all(x >= self.lower, axis=1))
            if inside.size:
                # row by row as for one walker: the same bits, the same chain
                out[inside] = [-0.5 * float(r @ r) for r in self.model.residuals_many(x[inside])]
            return out
        if np.any(x < self.lower):
            return -math.inf
        r = self.model(x)
        return -0.5 * float(r @ r)


def sample_residual_posterior(residuals, x_best, cov, lower, settings, *, label="curve"):
    """Sample the Gaussian likelihood of normalised residuals around a least-squares optimum.

    The log-likelihood is -r(x).r(x)/2 with flat priors in the fit coordinates x (bounded
    below by ``lower``); emcee's ensemble (Foreman-Mackey et al., PASP 125, 306 (2013))
    starts in a ball of 1e-2 of the linearised widths around ``x_best``. The first part of
    the chain is dropped as burn-in (:func:`lossfit.inference.posterior.auto_burn`); a
    :class:`~lossfit.errors.ConvergenceWarning` names ``label`` when the kept steps are
    fewer than 50 autocorrelation times.

    Parameters
    ----------
    residuals : callable
        x (1-D array) -> normalised residuals (model - data)/error (1-D array).
    x_best : ndarray, shape (ndim,)
        The least-squares optimum.
    cov : ndarray, shape (ndim, ndim)
        Its linearised covariance (sets the size of the starting ball).
    lower : ndarray, shape (ndim,)
        Lower bounds of the coordinates (-inf where unbounded).
    settings : dict
        From :func:`mcmc_settings`.
    label : str
        Name of the curve in warnings.

    Returns
    -------
    (ndarray, ndarray)
        The kept samples, shape (draws, ndim), and the autocorrelation time of each
        coordinate in steps.
    """
    flat, tau, kept = _sample_curve(residuals, x_best, cov, lower, settings)
    if kept < 50 * float(np.max(tau)):
        warnings.warn(f"{label}: {kept} kept steps are fewer than 50 autocorrelation "
                      f"times (tau = {np.max(tau):.0f}); increase mcmc steps", ConvergenceWarning,
                      stacklevel=user_stacklevel())
    return flat, tau


def half_width_68(samples):
    """Half the central 68 % interval (15.865th to 84.135th percentile) of ``samples``: the
    one-sigma error a sampled per-curve fit reports, in the samples' units."""
    lo, hi = np.percentile(samples, [15.865, 84.135])
    return float(0.5 * (hi - lo))


def _sample_curve(model, x_best, cov, lower, settings):
    """Posterior chain of one curve's coordinates (after burn-in) and its tau."""
    rng = np.random.default_rng(settings["seed"])
    ndim = x_best.size
    # start inside the posterior: a ball of 1e-2 of the linearised widths, kept in bounds
    sd = np.sqrt(np.clip(np.diag(cov), 1e-30, None))
    p0 = x_best + 1e-2 * sd * rng.standard_normal((settings["walkers"], ndim))
    p0 = np.maximum(p0, lower + 1e-12 * np.maximum(sd, 1.0))
    walkers = settings["walkers"]
    if walkers < 2 * ndim:
        raise LossfitValueError("mcmc", f"walkers must be at least {2 * ndim} for {ndim} parameters")
    log_prob = _CurveLogProb(model, lower)
    run = sample(log_prob, p0, settings["steps"], seed=int(rng.integers(2 ** 31)), vectorize=log_prob.vectorized)
    chain = run.chain
    burn = auto_burn(chain)
    tau = autocorrelation_times(chain[burn:])
    return chain[burn:].reshape(-1, ndim), tau, chain.shape[0] - burn


def fit_curve(curve, *, species, resonance=None, heating=True, recombination_heating_nK=0.0,
              gamma=None, rtol=1e-8, mcmc=None):
    """Least-squares fit of one decay curve with a constant loss coefficient.

    Parameters
    ----------
    curve : DecayCurve
    species : str or Species
    resonance : object with ``.a(B)``, optional
        Needed when the curve is given by its field.
    heating : bool
        Include anti-evaporation and recombination heating in the model.
    recombination_heating_nK : float
        T_h in nK (>= 0).
    gamma : float, optional
        One-body loss rate in 1/s to hold fixed (dimer curves: of the dimers); default
        None fits it (bounded below by 0).
    rtol : float
        Integrator tolerance (tight: the Jacobian is taken by finite differences).
    mcmc : bool or dict, optional
        Also sample the curve's posterior (module docstring): ``True`` or a dict with
        ``walkers`` (default 16), ``steps`` (1500) and ``seed``. About 1-3 s per curve.

    Returns
    -------
    CurveFit
    """
    settings = mcmc_settings(mcmc)
    if not isinstance(curve, DecayCurve):
        raise LossfitValueError("curve", f"must be a DecayCurve, got {type(curve).__name__}")
    sp = _lookup_species(species)
    a = curve.scattering_length(resonance)
    if gamma is not None:
        gamma = float(check_positive("gamma", gamma, allow_zero=True))
    model = _CurveModel(curve, sp, heating, recombination_heating_nK, gamma, rtol)
    x0 = _initial_guess(curve, model, as_trap(curve), sp)
    # the loss coefficient is fitted linearly (in units of its first guess), bounded by 0,
    # so that a curve without detectable loss gives 0 +- error instead of a log running away
    model.value_scale, x0[0] = x0[0], 1.0
    model.n_res = _n_residuals(curve)
    lb = np.full(x0.size, -np.inf)
    lb[0] = 0.0
    if gamma is None:
        lb[-1] = 0.0
    fit = least_squares(model, x0, bounds=(lb, np.full(x0.size, np.inf)), method="trf",
                        x_scale=1.0, xtol=1e-10, ftol=1e-12, gtol=1e-10, max_nfev=400 * x0.size)
    n_data = fit.fun.size
    dof = int(n_data - x0.size)
    if dof < 1:
        raise LossfitValueError("curve", f"curve {curve.label!r} has {n_data} data for {x0.size} "
                                "parameters; it needs more points")
    try:
        cov = np.linalg.inv(fit.jac.T @ fit.jac)
    except np.linalg.LinAlgError:
        raise LossfitValueError("curve", f"curve {curve.label!r} does not constrain its parameters "
                                "(singular Jacobian)") from None
    if not fit.success:
        warnings.warn(f"curve {curve.label!r}: least squares did not converge ({fit.message})",
                      ConvergenceWarning, stacklevel=2)
    p = model.unpack(fit.x)
    sd = np.sqrt(np.diag(cov))
    errors = {"value": model.value_scale * sd[0], "n0": p["n0"] * sd[1]}
    i = 2
    if model.dimers:
        errors["n_atoms0"] = p["n_atoms0"] * sd[i]
        i += 1
    errors["t0_nK"] = p["t0_nK"] * sd[i]
    errors["gamma"] = sd[i + 1] / model.t_max if gamma is None else 0.0
    main, temp, partner = model.solve(p)
    extra = {}
    value, error = p["value"], errors["value"]
    if settings is not None:
        flat, tau = sample_residual_posterior(model, fit.x, cov, lb, settings, label=f"curve {curve.label!r}")
        draws = [model.unpack(x) for x in flat]
        samples = {k: np.array([d[k] for d in draws]) for k in p}
        errors = {k: half_width_68(v) for k, v in samples.items()}
        value, error = float(np.median(samples["value"])), errors["value"]
        extra = {"method": "mcmc", "samples": samples, "tau": tau}
        cov = np.cov(flat.T)
    return CurveFit(curve=curve, a=a, kind="beta" if model.dimers else "l3", value=value,
                    error=error, temperature=float(np.mean(temp)), params=p, errors=errors,
                    covariance=cov, coords=model.coords, chi2=float(fit.fun @ fit.fun), dof=dof,
                    model_atoms=main, model_temperature=temp, model_partner=partner,
                    residuals=fit.fun.copy(), jacobian=fit.jac.copy(),
                    recombination_heating_nK=float(recombination_heating_nK), **extra)


def fit_curves_individually(curves, *, species, resonance=None, **kwargs):
    """:func:`fit_curve` for every curve; keyword arguments as there.

    Returns
    -------
    list of CurveFit
    """
    return [fit_curve(c, species=species, resonance=resonance, **kwargs) for c in check_curves(curves)]


def spectrum_from_curves(curves, *, species, resonance=None, fits=None, **kwargs):
    """Quick-look loss spectra from per-curve fits (the two-stage route).

    Parameters
    ----------
    curves : sequence of DecayCurve
    species : str or Species
    resonance : object with ``.a(B)``, optional
    fits : list of CurveFit, optional
        Reuse fits already made (same order as ``curves``).
    **kwargs
        Passed to :func:`fit_curve`.

    Returns
    -------
    list of LossSpectrum
        One spectrum per kind present (``"l3"`` first), each point at its curve's
        scattering length and time-averaged fitted temperature.
    """
    curves = check_curves(curves)
    if fits is None:
        fits = fit_curves_individually(curves, species=species, resonance=resonance, **kwargs)
    elif len(fits) != len(curves):
        raise LossfitValueError("fits", f"has {len(fits)} entries for {len(curves)} curves")
    sp = _lookup_species(species)
    out = []
    for kind in ("l3", "beta"):
        sel = [f for f in fits if f.kind == kind]
        if sel:
            mine = [c for c, f in zip(curves, fits) if f.kind == kind]
            out.append(LossSpectrum([f.a for f in sel], [f.temperature for f in sel],
                                    [f.value for f in sel], [f.error for f in sel], kind=kind,
                                    label=f"{kind} from {len(sel)} decay curves", species=sp.name,
                                    trap_depth=_trap_depths(mine) if kind == "l3" else None))
    return out


def _trap_depths(curves):
    """The curves' trap depths (nK) for an L3 spectrum: None if no curve gives one, else
    per point, 10 k_B T0 (T0 the curve's first measured temperature) where missing -- what
    the global fit assumes (lossfit.inference.curves_likelihood)."""
    if all(c.trap_depth is None for c in curves):
        return None
    return [DEFAULT_DEPTH_OVER_T * c.initial_temperature if c.trap_depth is None else c.trap_depth for c in curves]

"""Checks of a finished fit against its data and its inputs.

* **Goodness of fit**: chi^2 of the data at the posterior medians per degree of freedom,
  its chi^2 tail probability, and (spectrum fits) the standardized residuals
  (data - model)/error of every point. Spectrum fits: points minus free parameters;
  decay-curve fits (:meth:`CurvesLikelihood.fit_check`): residuals minus per-curve
  nuisances minus sampled parameters, with the nuisances re-solved at the medians.
* **Posterior-predictive p-value** (spectrum fits; Gelman, Meng & Stern, Statistica Sinica 6, 733
  (1996)): for posterior draws theta_j, replicated data y_rep = mu(theta_j) + error x N(0, 1)
  and the discrepancy T = sum((y - mu(theta_j))/error)^2; p = P(T(y_rep) >= T(y)). A p
  near 0 says the model (or the error bars) cannot produce data like these.
* **Posterior piled on a prior bound**: more than 10 % of the samples in the outer 2 % of
  a bounded prior's range (a flat posterior puts 2 % there): the data do not pin the
  parameter, or the inputs are off by a unit factor.
* **Plausibility of the inputs**: temperatures outside 1 nK .. 100 uK (a temperature in
  uK given as nK reads 1000x too cold), L3 at a < 0 or beta above 3x the unitarity bound
  at the point's temperature (:func:`lossfit.rates.unitarity_bound`; e.g. L3 in m^6/s read
  as cm^6/s is far below it, one in cm^6/s at a temperature 1000x too low far above), and a
  data file recorded for another species than the fit's.

Each likelihood's ``fit_check`` runs the checks that apply to it and returns plain numbers
and messages; :class:`lossfit.inference.result.FitResult` shows them in its table, HTML
view and ``to_dict``.
"""

__all__ = ["goodness_of_fit", "chi2_summary", "poor_fit_message", "prior_bound_pileup", "input_plausibility",
           "temperature_plausibility", "same_species", "PILEUP_FRACTION", "PILEUP_EDGE", "TEMPERATURE_RANGE_NK",
           "UNITARITY_MARGIN"]

import math

import numpy as np
from scipy.special import chdtrc

from ..rates import unitarity_bound
from .priors import LogUniform, Uniform

#: A prior's outer fraction of its range on each side, and the share of samples there
#: above which a posterior counts as piled on the bound (5x what a flat posterior puts there).
PILEUP_EDGE = 0.02
PILEUP_FRACTION = 0.10
#: Plausible temperatures of a non-degenerate trapped gas in these fits (nK).
TEMPERATURE_RANGE_NK = (1.0, 1e5)
#: Data above this multiple of the unitarity bound are implausible.
UNITARITY_MARGIN = 3.0


def goodness_of_fit(likelihood, space, kept_theta, median_values, *, draws=200, seed=0):
    """chi^2 at the medians, its tail probability, residuals and the posterior-predictive p.

    Parameters
    ----------
    likelihood : SpectrumLikelihood
    space : ParameterSpace
    kept_theta : ndarray (n, ndim)
        Posterior samples in sampling coordinates.
    median_values : dict
        Parameter values at the posterior medians (with the fixed ones).
    draws : int
        Posterior draws for the predictive p-value.
    seed : int

    Returns
    -------
    dict
        ``chi2``, ``dof``, ``chi2_per_dof``, ``p_chi2``, ``ppp`` (posterior-predictive p),
        ``residuals`` (list of arrays, one per spectrum: (data - model)/error).
    """
    spectra = likelihood.spectra
    value = [s.value for s in spectra]
    error = [s.error for s in spectra]
    model = likelihood.predict_values(space, median_values)
    residuals = [(v - m) / e for v, m, e in zip(value, model, error)]
    chi2 = float(sum(np.sum(r * r) for r in residuals))
    n = int(sum(r.size for r in residuals))
    dof = n - space.ndim
    rng = np.random.default_rng(seed)
    idx = rng.choice(kept_theta.shape[0], size=min(draws, kept_theta.shape[0]), replace=False)
    exceed = 0
    # every draw's prediction in one call where the likelihood takes walker sets
    drawn = likelihood.predict_values(space, space.values(kept_theta[idx])) \
        if getattr(likelihood, "vectorized", False) else None
    for j, i in enumerate(idx):
        mu = [m[j] for m in drawn] if drawn is not None else likelihood.predict_values(space,
                                                                                       space.values(kept_theta[i]))
        t_obs = sum(float(np.sum(((v - m) / e) ** 2)) for v, m, e in zip(value, mu, error))
        t_rep = float(np.sum(rng.standard_normal(n) ** 2))
        exceed += t_rep >= t_obs
    return dict(chi2_summary(chi2, dof), ppp=exceed / idx.size, residuals=residuals)


def chi2_summary(chi2, dof):
    """chi^2, degrees of freedom, chi^2 per degree of freedom and its tail probability."""
    return {"chi2": float(chi2), "dof": int(dof), "chi2_per_dof": chi2 / dof if dof > 0 else math.nan,
            "p_chi2": float(chdtrc(dof, chi2)) if dof > 0 else math.nan}


def poor_fit_message(checks):
    """The warning for a goodness of fit that the model cannot produce, or None."""
    ppp = checks.get("ppp", math.nan)
    if checks["dof"] > 0 and (checks["p_chi2"] < 1e-3 or ppp < 0.01):
        predictive = f", posterior-predictive p = {ppp:.2g}" if math.isfinite(ppp) else ""
        return (f"poor fit: chi2/dof = {checks['chi2_per_dof']:.3g} ({checks['dof']} dof, p = "
                f"{checks['p_chi2']:.2g}){predictive}: the model does not describe these data (check units, "
                "temperatures, species and error bars)")
    return None


def temperature_plausibility(label, temperature_nk):
    """A message if temperatures lie outside :data:`TEMPERATURE_RANGE_NK`, else None."""
    lo, hi = TEMPERATURE_RANGE_NK
    t = np.asarray(temperature_nk, dtype=float)
    if np.any(t < lo) or np.any(t > hi):
        return (f"{label}: temperatures {t.min():.3g}..{t.max():.3g} nK lie outside {lo:g}..{hi:g} nK; "
                "lossfit takes nK (a value in uK reads 1000x too cold)")
    return None


def prior_bound_pileup(space, kept_theta):
    """Messages for posteriors piled on a bound of a Uniform or LogUniform prior."""
    out = []
    for i, (name, prior) in enumerate(zip(space.names, space.priors)):
        if not isinstance(prior, (Uniform, LogUniform)):
            continue
        x = np.abs(space.physical(kept_theta)[:, i])
        if isinstance(prior, LogUniform):
            u = np.log(x / prior.lo) / math.log(prior.hi / prior.lo)
        else:
            u = (x - prior.lo) / (prior.hi - prior.lo)
        for side, frac, bound in (("lower", np.mean(u < PILEUP_EDGE), prior.lo),
                                  ("upper", np.mean(u > 1.0 - PILEUP_EDGE), prior.hi)):
            if frac > PILEUP_FRACTION:
                value = prior.sign * bound
                out.append(f"the posterior of {name} piles up at its prior's {side} bound {value:g} "
                           f"({100 * frac:.0f} % of samples in the outer {100 * PILEUP_EDGE:.0f} % of the "
                           "range): the data do not pin it, or an input is off by a unit factor")
    return out


def input_plausibility(spectra, species):
    """Messages for inputs whose magnitude suggests a unit slip, and for a species mismatch."""
    out = []
    for i, s in enumerate(spectra):
        label = f"spectrum {i} ({s.label})"
        t = np.broadcast_to(s.temperature, s.a.shape)
        message = temperature_plausibility(label, t)
        if message:
            out.append(message)
        check = s.a < 0 if s.kind == "l3" else np.ones(s.a.shape, dtype=bool)
        if np.any(check):
            ratio = s.value[check] / unitarity_bound(s.kind, t[check], species)
            if np.max(ratio) > UNITARITY_MARGIN:
                units = "cm^6/s" if s.kind == "l3" else "cm^3/s"
                out.append(f"{label}: values up to {np.max(ratio):.3g}x the unitarity bound at their "
                           f"temperatures; check the units ({units}) and the temperatures (nK)")
        if s.species and getattr(species, "name", None) and not same_species(s.species, species.name):
            out.append(f"{label}: the data were recorded for {s.species}, the fit uses {species.name}")
    return out


def same_species(a, b):
    """133Cs, Cs133, cs-133 and Cs-133 name the same species."""
    def key(name):
        letters = "".join(c for c in name if c.isalpha()).lower()
        digits = "".join(c for c in name if c.isdigit())
        return letters, digits
    return key(a) == key(b)
